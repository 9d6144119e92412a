//! Acknowledged means durable: a server process killed with SIGKILL loses nothing it
//! acknowledged, and nothing is counted twice after a restart on the same data directory.

use std::time::Duration;

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{connect, now_s, trip, two_axle_vehicle, ServerProcess};

/// The server binary built for these tests (the real command line, see src/bin).
fn server_binary() -> std::path::PathBuf {
    std::path::PathBuf::from(env!("CARGO_BIN_EXE_brakeledger-test-server"))
}

async fn trips_recorded(channel: tonic::transport::Channel, vehicle_id: &str) -> pb::GetVehicleResponse {
    pb::fleet_service_client::FleetServiceClient::new(channel)
        .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: vehicle_id.into() })
        .await
        .expect("get vehicle")
        .into_inner()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sigkill_after_ack_and_during_a_stream_loses_nothing_acknowledged() {
    let dir = tempfile::tempdir().expect("temp dir");
    let end = now_s() - 60;

    // 1. Register, push 3,000 acknowledged trips, then kill the process right after the ack.
    let server = ServerProcess::spawn(&server_binary(), dir.path());
    let channel = connect(server.addr).await;
    pb::fleet_service_client::FleetServiceClient::new(channel.clone())
        .upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", "truck-1")) })
        .await
        .expect("upsert");
    let acknowledged: Vec<pb::TripSummary> = (0..3000).map(|n| trip("north", "truck-1", n, end)).collect();
    let report = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone())
        .stream_trips(tokio_stream::iter(acknowledged.clone()))
        .await
        .expect("stream")
        .into_inner();
    assert_eq!(report.accepted, 3000);
    server.kill();

    // 2. Restart, start a long stream of new trips, kill the process in the middle of it.
    let server = ServerProcess::spawn(&server_binary(), dir.path());
    let channel = connect(server.addr).await;
    assert_eq!(trips_recorded(channel.clone(), "truck-1").await.trips_recorded, 3000, "acknowledged trips survive SIGKILL");
    let (sender, receiver) = tokio::sync::mpsc::channel::<pb::TripSummary>(64);
    let mut telemetry = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone());
    let call = tokio::spawn(async move { telemetry.stream_trips(tokio_stream::wrappers::ReceiverStream::new(receiver)).await });
    for n in 3000..9000 {
        sender.send(trip("north", "truck-1", n, end)).await.expect("send");
    }
    tokio::time::sleep(Duration::from_millis(300)).await;
    server.kill();
    drop(sender);
    let outcome = call.await.expect("join");
    assert!(outcome.is_err(), "a killed server acknowledges nothing");

    // 3. Restart again: the acknowledged trips are there once; the interrupted stream may have
    //    stored some of its trips, which a resend counts as duplicates, never twice.
    let server = ServerProcess::spawn(&server_binary(), dir.path());
    let channel = connect(server.addr).await;
    let after_crash = trips_recorded(channel.clone(), "truck-1").await;
    assert!(after_crash.trips_recorded >= 3000 && after_crash.trips_recorded <= 9000);
    let resend: Vec<pb::TripSummary> = (0..9000).map(|n| trip("north", "truck-1", n, end)).collect();
    let report = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone())
        .stream_trips(tokio_stream::iter(resend))
        .await
        .expect("resend")
        .into_inner();
    assert_eq!(report.accepted + report.duplicates, 9000);
    assert_eq!(report.duplicates, after_crash.trips_recorded, "everything stored before is a duplicate");
    let finally = trips_recorded(channel, "truck-1").await;
    assert_eq!(finally.trips_recorded, 9000, "each trip stored exactly once");
    assert!((finally.friction_energy_j - 9000.0 * 30.0e6).abs() < 10.0, "totals count each trip once");
    server.kill();
}

/// Opens the store in `dir` once the previous handle's background threads have let go of the
/// directory's lock (sled releases it from its flusher thread, later on a loaded machine).
fn reopen(dir: &std::path::Path) -> Result<brakeledger::store::sled_store::SledStore, brakeledger::store::StoreError> {
    let started = std::time::Instant::now();
    loop {
        match brakeledger::store::sled_store::SledStore::open(dir) {
            Err(error) if error.to_string().contains("lock") && started.elapsed() < std::time::Duration::from_secs(30) => {
                std::thread::sleep(std::time::Duration::from_millis(50));
            }
            other => return other,
        }
    }
}

#[test]
fn a_database_from_a_newer_schema_is_refused() {
    use brakeledger::store::{sled_store::{SledStore, SCHEMA_VERSION}, StoreError};
    let dir = tempfile::tempdir().expect("temp dir");
    SledStore::open(dir.path()).expect("create").force_schema_version(SCHEMA_VERSION + 1).expect("write version");
    match reopen(dir.path()) {
        Err(StoreError::NewerSchema { found, supported }) => assert_eq!((found, supported), (SCHEMA_VERSION + 1, SCHEMA_VERSION)),
        Err(other) => panic!("unexpected error {other}"),
        Ok(_) => panic!("a newer schema must be refused"),
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_graceful_stop_lets_an_open_stream_finish_and_report() {
    let mut server = brakeledger_tests::TestServer::start().await;
    brakeledger_tests::register(&server, two_axle_vehicle("north", "bus-1")).await;
    let end = now_s() - 60;
    let (sender, receiver) = tokio::sync::mpsc::channel::<pb::TripSummary>(16);
    let mut telemetry = server.telemetry();
    let call = tokio::spawn(async move { telemetry.stream_trips(tokio_stream::wrappers::ReceiverStream::new(receiver)).await });
    // A first full chunk (2,000 trips) is stored while the stream stays open: proof that the
    // server is handling the stream before the stop begins.
    for n in 0..2500 {
        sender.send(trip("north", "bus-1", n, end)).await.expect("send");
    }
    let mut stored = 0;
    for _ in 0..600 {
        stored = server
            .fleet()
            .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "bus-1".into() })
            .await
            .expect("get vehicle")
            .into_inner()
            .trips_recorded;
        if stored >= 2000 {
            break;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    assert!(stored >= 2000, "the first chunk is stored while the stream is open");
    // The stop begins while the stream is open; the rest of the stream still arrives.
    server.begin_stop();
    tokio::time::sleep(Duration::from_millis(100)).await;
    for n in 2500..3000 {
        sender.send(trip("north", "bus-1", n, end)).await.expect("send");
    }
    drop(sender);
    let report = call.await.expect("join").expect("the open stream completes").into_inner();
    assert_eq!(report.accepted, 3000);
    let dir = server.data_dir.take().expect("data dir");
    server.stop().await;
    // Everything reported is in the database when the server has stopped.
    let store = reopen(dir.path()).expect("reopen");
    use brakeledger::store::Store;
    assert_eq!(store.vehicle_totals("north", "bus-1").expect("totals").trips_recorded, 3000);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sigterm_stops_the_process_cleanly_with_everything_on_disk() {
    let dir = tempfile::tempdir().expect("temp dir");
    let server = ServerProcess::spawn(&server_binary(), dir.path());
    let channel = connect(server.addr).await;
    pb::fleet_service_client::FleetServiceClient::new(channel.clone())
        .upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", "truck-9")) })
        .await
        .expect("upsert");
    let trips: Vec<pb::TripSummary> = (0..500).map(|n| trip("north", "truck-9", n, now_s() - 60)).collect();
    let report = pb::telemetry_service_client::TelemetryServiceClient::new(channel)
        .push_trips(pb::PushTripsRequest { trips })
        .await
        .expect("push")
        .into_inner();
    assert_eq!(report.accepted, 500);
    let status = server.terminate();
    assert!(status.success(), "exit status after SIGTERM: {status:?}");
    let store = reopen(dir.path()).expect("reopen");
    use brakeledger::store::Store;
    assert_eq!(store.vehicle_totals("north", "truck-9").expect("totals").trips_recorded, 500);
}

#[test]
fn a_version_1_directory_keeps_its_records_and_recomputes_its_forecasts() {
    use brakeledger::store::{sled_store::SledStore, FleetPriors, Store, VehicleRecord};
    let dir = tempfile::tempdir().expect("temp dir");
    {
        let store = SledStore::open(dir.path()).expect("create");
        let vehicle = VehicleRecord::try_from(two_axle_vehicle("north", "bus-1")).expect("valid vehicle");
        store.upsert_vehicle(&vehicle).expect("vehicle");
        store.put_priors("north", &FleetPriors::default()).expect("priors");
        for mark in store.stale_vehicles(10).expect("marks") {
            store.clear_stale(&mark).expect("clear");
        }
        store.force_schema_version(1).expect("write version 1");
    }
    let store = reopen(dir.path()).expect("a version-1 directory opens");
    assert!(store.get_vehicle("north", "bus-1").expect("read").is_some(), "records are kept");
    assert!(store.get_priors("north").expect("read").is_none(), "derived priors are dropped");
    let marks = store.stale_vehicles(10).expect("marks");
    assert_eq!(marks.len(), 1, "every vehicle is marked for recomputation");
    assert_eq!(marks[0].vehicle_id, "bus-1");
    store.clear_stale(&marks[0]).expect("clear");
    store.put_priors("north", &FleetPriors::default()).expect("priors");
    drop(store);
    // Reopening does not migrate again: the directory now carries the current version.
    let store = reopen(dir.path()).expect("reopen");
    assert!(store.stale_vehicles(10).expect("marks").is_empty(), "no second migration");
    assert!(store.get_priors("north").expect("read").is_some(), "priors written after the migration stay");
}
