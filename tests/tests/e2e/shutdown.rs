//! Shutdown with open streams, on the real binary: SIGTERM ends WatchDue with UNAVAILABLE at
//! once, lets ingest streams run until the drain deadline, then ends them with UNAVAILABLE
//! after writing what they read, and exits 0 within the deadline; a second signal exits at
//! once, still without losing or double-counting anything.

use std::time::{Duration, Instant};

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{connect, now_s, trip, ts, two_axle_vehicle, ServerProcess};
use tokio_stream::StreamExt;
use tonic::transport::Channel;

fn server_binary() -> std::path::PathBuf {
    std::path::PathBuf::from(env!("CARGO_BIN_EXE_brakeledger-test-server"))
}

/// Starts the binary with `[shutdown] drain_deadline_ms = deadline_ms`.
fn spawn(data: &std::path::Path, config_dir: &std::path::Path, deadline_ms: u64) -> ServerProcess {
    let config = config_dir.join("brakeledger.toml");
    std::fs::write(&config, format!("[shutdown]\ndrain_deadline_ms = {deadline_ms}\n")).expect("write config");
    ServerProcess::spawn_with(&server_binary(), data, &["--config".as_ref(), config.as_os_str()]).expect("server starts")
}

async fn recorded(channel: Channel, vehicle_id: &str) -> u64 {
    pb::fleet_service_client::FleetServiceClient::new(channel)
        .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: vehicle_id.into() })
        .await
        .expect("get vehicle")
        .into_inner()
        .trips_recorded
}

async fn register(channel: Channel, vehicle_id: &str) {
    pb::fleet_service_client::FleetServiceClient::new(channel)
        .upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", vehicle_id)) })
        .await
        .expect("upsert");
}

async fn wait_recorded(channel: Channel, vehicle_id: &str, at_least: u64) {
    for _ in 0..400 {
        if recorded(channel.clone(), vehicle_id).await >= at_least {
            return;
        }
        tokio::time::sleep(Duration::from_millis(25)).await;
    }
    panic!("{vehicle_id}: fewer than {at_least} trips stored after 10 s");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sigterm_ends_open_streams_with_unavailable_and_exits_zero_within_the_deadline() {
    let (data, config) = (tempfile::tempdir().expect("dir"), tempfile::tempdir().expect("dir"));
    let deadline = Duration::from_millis(1500);
    let mut server = spawn(data.path(), config.path(), deadline.as_millis() as u64);
    let channel = connect(server.addr).await;
    register(channel.clone(), "stream-1").await;
    register(channel.clone(), "acked-1").await;
    let end = now_s() - 60;
    let telemetry = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone());

    // A WatchDue stream, past its snapshot.
    let mut watch = pb::forecast_service_client::ForecastServiceClient::new(channel.clone())
        .watch_due(pb::WatchDueRequest { fleet_id: "north".into(), due_before: Some(ts(now_s() + 86_400 * 365)), band_level: 0.0 })
        .await
        .expect("watch")
        .into_inner();
    loop {
        let event = watch.next().await.expect("event").expect("ok");
        if event.change == pb::DueChange::SnapshotDone as i32 {
            break;
        }
    }
    // A StreamTrips call and an IngestTrips call that send trips and then stay open.
    let (stream_tx, stream_rx) = tokio::sync::mpsc::channel::<pb::TripSummary>(64);
    let mut client = telemetry.clone();
    let stream_call = tokio::spawn(async move { client.stream_trips(tokio_stream::wrappers::ReceiverStream::new(stream_rx)).await });
    for n in 0..3000 {
        stream_tx.send(trip("north", "stream-1", n, end)).await.expect("send");
    }
    let (ingest_tx, ingest_rx) = tokio::sync::mpsc::channel::<pb::IngestTripsRequest>(8);
    let mut acks = telemetry.clone().ingest_trips(tokio_stream::wrappers::ReceiverStream::new(ingest_rx)).await.expect("ingest").into_inner();
    let trips: Vec<pb::TripSummary> = (0..2500).map(|n| trip("north", "acked-1", n, end)).collect();
    for chunk in trips.chunks(500) {
        ingest_tx.send(pb::IngestTripsRequest { trips: chunk.to_vec() }).await.expect("send");
    }
    wait_recorded(channel.clone(), "stream-1", 2000).await;
    wait_recorded(channel.clone(), "acked-1", 2500).await;

    let signalled = Instant::now();
    server.signal("TERM");

    let watch_end = tokio::time::timeout(Duration::from_secs(2), watch.next()).await.expect("WatchDue ends promptly");
    let status = watch_end.expect("a status, not a silent end").expect_err("not OK");
    assert_eq!(status.code(), tonic::Code::Unavailable, "{status:?}");
    assert!(signalled.elapsed() < deadline, "WatchDue does not wait for the drain deadline");

    let stream_status = stream_call.await.expect("join").expect_err("cut off at the deadline");
    assert_eq!(stream_status.code(), tonic::Code::Unavailable, "{stream_status:?}");
    assert!(stream_status.message().contains("3000 stored"), "{}", stream_status.message());
    assert!(signalled.elapsed() >= deadline, "open streams get the whole drain deadline");

    let mut last_ack = None;
    let ingest_status = loop {
        match acks.next().await.expect("a status at the end") {
            Ok(ack) => last_ack = Some(ack),
            Err(status) => break status,
        }
    };
    assert_eq!(ingest_status.code(), tonic::Code::Unavailable);
    let last_ack = last_ack.expect("acks before the end");
    assert_eq!((last_ack.settled_trips, last_ack.accepted_total), (2500, 2500));

    let exit = server.wait_exit(Duration::from_secs(6)).expect("exits within the deadline and grace");
    assert!(exit.success(), "exit status {exit:?}");
    assert!(signalled.elapsed() < deadline + Duration::from_secs(4), "exited after {:?}", signalled.elapsed());
    drop((stream_tx, ingest_tx));

    // What the streams stored is kept.
    let server = ServerProcess::spawn(&server_binary(), data.path());
    let channel = connect(server.addr).await;
    assert_eq!(recorded(channel.clone(), "stream-1").await, 3000);
    assert_eq!(recorded(channel, "acked-1").await, 2500);
    server.kill();
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_second_signal_exits_at_once_and_nothing_is_lost_or_counted_twice() {
    let (data, config) = (tempfile::tempdir().expect("dir"), tempfile::tempdir().expect("dir"));
    let mut server = spawn(data.path(), config.path(), 60_000);
    let channel = connect(server.addr).await;
    register(channel.clone(), "truck-1").await;
    let end = now_s() - 60;
    let (sender, receiver) = tokio::sync::mpsc::channel::<pb::TripSummary>(64);
    let mut telemetry = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone());
    let call = tokio::spawn(async move { telemetry.stream_trips(tokio_stream::wrappers::ReceiverStream::new(receiver)).await });
    for n in 0..2500 {
        sender.send(trip("north", "truck-1", n, end)).await.expect("send");
    }
    wait_recorded(channel.clone(), "truck-1", 2000).await;
    server.signal("TERM");
    tokio::time::sleep(Duration::from_millis(500)).await;
    assert!(server.wait_exit(Duration::from_millis(10)).is_none(), "the first signal waits for the open stream");
    let forced = Instant::now();
    server.signal("TERM");
    let exit = server.wait_exit(Duration::from_secs(5)).expect("a second signal exits at once");
    assert!(exit.success(), "exit status {exit:?}");
    assert!(forced.elapsed() < Duration::from_secs(3), "forced exit took {:?}", forced.elapsed());
    assert!(call.await.expect("join").is_err(), "the cut-off stream acknowledges nothing");
    drop(sender);

    // Restart: the store opens cleanly; a resend of the whole stream stores each trip once.
    let server = ServerProcess::spawn(&server_binary(), data.path());
    let channel = connect(server.addr).await;
    let before = recorded(channel.clone(), "truck-1").await;
    assert!((2000..=2500).contains(&before), "{before}");
    let report = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone())
        .stream_trips(tokio_stream::iter((0..2500).map(move |n| trip("north", "truck-1", n, end))))
        .await
        .expect("resend")
        .into_inner();
    assert_eq!((report.accepted + report.duplicates, report.duplicates), (2500, before));
    assert_eq!(recorded(channel, "truck-1").await, 2500);
    server.kill();
}
