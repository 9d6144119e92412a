//! Two server processes on one PostgreSQL database: trips pushed to both, the same batch sent
//! to both at once (stored once), forecasts served by either, a WatchDue stream on one replica
//! seeing a change written through the other, and a replica killed with SIGKILL in the middle
//! of a stream losing nothing it acknowledged. Needs `BRAKELEDGER_TEST_POSTGRES_URL` (see
//! `brakeledger_tests::postgres_test_database`). All data is invented.

use std::time::Duration;

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{connect, daily_trips, new_parts, now_s, postgres_test_database, test_inspections, trip, ts, two_axle_vehicle, ServerProcess, DAY_S};
use tokio_stream::StreamExt;
use tonic::transport::Channel;

fn server_binary() -> std::path::PathBuf {
    std::path::PathBuf::from(env!("CARGO_BIN_EXE_brakeledger-test-server"))
}

fn telemetry(channel: &Channel) -> pb::telemetry_service_client::TelemetryServiceClient<Channel> {
    pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone())
}

fn fleet(channel: &Channel) -> pb::fleet_service_client::FleetServiceClient<Channel> {
    pb::fleet_service_client::FleetServiceClient::new(channel.clone())
}

fn forecast(channel: &Channel) -> pb::forecast_service_client::ForecastServiceClient<Channel> {
    pb::forecast_service_client::ForecastServiceClient::new(channel.clone())
}

fn maintenance(channel: &Channel) -> pb::maintenance_service_client::MaintenanceServiceClient<Channel> {
    pb::maintenance_service_client::MaintenanceServiceClient::new(channel.clone())
}

async fn trips_recorded(channel: &Channel, vehicle_id: &str) -> u64 {
    let request = pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: vehicle_id.into() };
    fleet(channel).get_vehicle(request).await.expect("get vehicle").into_inner().trips_recorded
}

/// Replacements of every part at `at_s`, through `channel`.
async fn fit_new_parts(channel: &Channel, vehicle_id: &str, at_s: i64) {
    for request in new_parts(vehicle_id, at_s) {
        maintenance(channel).record_replacement(request).await.expect("replacement");
    }
}

/// Inspections of every part `ago` days before today (see `test_inspections`), through `channel`.
async fn inspect(channel: &Channel, vehicle_id: &str, days: i64, ago: i64, front_pad_mm: Option<f64>) {
    for request in test_inspections(vehicle_id, days, 1.0, ago, front_pad_mm) {
        maintenance(channel).record_inspection(request).await.expect("inspection");
    }
}

async fn wait_until_forecasts_settle(channel: &Channel) {
    for _ in 0..1200 {
        let fleet = fleet(channel).get_fleet(pb::GetFleetRequest { fleet_id: "north".into() }).await.expect("get fleet").into_inner();
        if fleet.forecasts_pending == 0 {
            return;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    panic!("forecasts still pending after 60 s");
}

/// The median due dates of a vehicle's parts as one replica serves them.
async fn medians(channel: &Channel, vehicle_id: &str) -> Vec<(u32, i32, String)> {
    let request = pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: vehicle_id.into(), band_level: 0.8 };
    let response = forecast(channel).get_vehicle_forecast(request).await.expect("forecast").into_inner();
    response.parts.iter().map(|p| (p.axle_index, p.component, p.due_median_date.clone())).collect()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn two_replicas_share_one_postgres_database() {
    let Some(database) = postgres_test_database() else { return };
    let one = ServerProcess::spawn_on_store(&server_binary(), &database.url);
    let two = ServerProcess::spawn_on_store(&server_binary(), &database.url);
    let (a, b) = (connect(one.addr).await, connect(two.addr).await);
    let today = now_s().div_euclid(DAY_S) * DAY_S;
    const DAYS: i64 = 120;

    // 1. Registered through one replica, trips pushed to both, workshop records through the other.
    for vehicle_id in ["van-1", "van-2"] {
        fleet(&a).upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", vehicle_id)) }).await.expect("upsert");
        let older = telemetry(&a).push_trips(pb::PushTripsRequest { trips: daily_trips(vehicle_id, 61..=DAYS, today) }).await.expect("push").into_inner();
        let newer = telemetry(&b).push_trips(pb::PushTripsRequest { trips: daily_trips(vehicle_id, 1..=60, today) }).await.expect("push").into_inner();
        assert_eq!((older.accepted, newer.accepted), (60, 60));
        fit_new_parts(&b, vehicle_id, today - DAYS * DAY_S + 3600).await;
        for ago in [90, 50, 10] {
            inspect(&b, vehicle_id, DAYS, ago, None).await;
        }
    }
    assert_eq!(trips_recorded(&b, "van-1").await, DAYS as u64, "a replica sees the trips pushed to the other");

    // 2. The same batch sent to both replicas at once: every trip stored once.
    let batch: Vec<pb::TripSummary> = (0..200).map(|n| trip("north", "van-2", n, today - 200 * DAY_S + 2 * 3600 * 200)).map(|mut t| {
        t.trip_id = format!("twice-{}", t.trip_id);
        t
    }).collect();
    let (mut to_a, mut to_b) = (telemetry(&a), telemetry(&b));
    let (ra, rb) = tokio::join!(
        to_a.push_trips(pb::PushTripsRequest { trips: batch.clone() }),
        to_b.push_trips(pb::PushTripsRequest { trips: batch.clone() })
    );
    let (ra, rb) = (ra.expect("push to one").into_inner(), rb.expect("push to two").into_inner());
    assert_eq!(ra.accepted + rb.accepted, 200, "each trip is stored by exactly one replica: {ra:?} {rb:?}");
    assert_eq!(ra.duplicates + rb.duplicates, 200);
    assert_eq!(trips_recorded(&a, "van-2").await, DAYS as u64 + 200);
    assert_eq!(trips_recorded(&b, "van-2").await, DAYS as u64 + 200);

    // 3. Forecasts, computed by whichever replica claimed each vehicle, served alike by both.
    wait_until_forecasts_settle(&a).await;
    let (from_a, from_b) = (medians(&a, "van-1").await, medians(&b, "van-1").await);
    assert_eq!(from_a.len(), 4);
    assert!(from_a.iter().all(|(_, _, date)| !date.is_empty()), "every part has a date: {from_a:?}");
    assert_eq!(from_a, from_b, "both replicas serve the same forecasts");

    // 4. A WatchDue stream on one replica sees a change written through the other: a worn front
    //    pad measured through `a` brings van-1 into a 30-day window watched on `b`.
    let due_before = Some(ts(now_s() + 30 * DAY_S));
    let watch = pb::WatchDueRequest { fleet_id: "north".into(), due_before, band_level: 0.8 };
    let mut events = forecast(&b).watch_due(watch).await.expect("watch").into_inner();
    loop {
        let event = tokio::time::timeout(Duration::from_secs(30), events.next()).await.expect("snapshot in time").expect("stream open").expect("event");
        if event.change == pb::DueChange::SnapshotDone as i32 {
            break;
        }
    }
    inspect(&a, "van-1", DAYS, 1, Some(3.1)).await;
    let entered = tokio::time::timeout(Duration::from_secs(60), async {
        while let Some(event) = events.next().await {
            let event = event.expect("event");
            let vehicle = event.part.as_ref().map(|p| p.vehicle_id.clone()).unwrap_or_default();
            if event.change == pb::DueChange::Entered as i32 && vehicle == "van-1" {
                return true;
            }
        }
        false
    })
    .await;
    assert_eq!(entered, Ok(true), "the watch on one replica saw the part enter through the other");

    // 5. A replica killed with SIGKILL in the middle of a stream loses nothing it acknowledged:
    //    an acknowledged batch, then a long stream cut off by the kill; the other replica has
    //    the batch, and a resend through it stores each trip exactly once.
    let base = trips_recorded(&b, "van-1").await;
    let acknowledged: Vec<pb::TripSummary> = (0..500).map(|n| trip("north", "van-1", n, today - 400 * DAY_S)).collect();
    let report = telemetry(&a).push_trips(pb::PushTripsRequest { trips: acknowledged }).await.expect("acknowledged push").into_inner();
    assert_eq!(report.accepted, 500);
    let (sender, receiver) = tokio::sync::mpsc::channel::<pb::TripSummary>(64);
    let mut streaming = telemetry(&a);
    let call = tokio::spawn(async move { streaming.stream_trips(tokio_stream::wrappers::ReceiverStream::new(receiver)).await });
    for n in 500..6500 {
        sender.send(trip("north", "van-1", n, today - 400 * DAY_S)).await.expect("send");
    }
    // The stream stays open (no end, so no report): the replica dies with it unacknowledged.
    tokio::time::sleep(Duration::from_millis(300)).await;
    one.kill();
    drop(sender);
    assert!(call.await.expect("join").is_err(), "a killed replica acknowledges nothing");
    let after_kill = trips_recorded(&b, "van-1").await;
    assert!(after_kill >= base + 500 && after_kill <= base + 6500, "the acknowledged batch is there: {after_kill}");
    let resend: Vec<pb::TripSummary> = (0..6500).map(|n| trip("north", "van-1", n, today - 400 * DAY_S)).collect();
    let mut accepted = 0;
    let mut duplicates = 0;
    for chunk in resend.chunks(2000) {
        let report = telemetry(&b).push_trips(pb::PushTripsRequest { trips: chunk.to_vec() }).await.expect("resend").into_inner();
        accepted += report.accepted;
        duplicates += report.duplicates;
    }
    assert_eq!(accepted + duplicates, 6500);
    assert_eq!(duplicates, after_kill - base, "everything stored before the kill is a duplicate");
    assert_eq!(trips_recorded(&b, "van-1").await, base + 6500, "each trip stored exactly once");
    two.kill();
}
