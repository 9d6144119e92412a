//! A full disk, on a small tmpfs with the real binary: writes get RESOURCE_EXHAUSTED with a
//! clear message, health reports the write services NOT_SERVING while reads keep serving,
//! writes resume without a restart once space is free, and SIGTERM exits 0. Once with the
//! free-space reserve catching it, once with the reserve off so that the storage engine itself
//! hits the full disk (which poisons it until it is reopened).
//!
//! Mounting a tmpfs needs root (CI runs as root); elsewhere the tests say so and skip.

use std::time::Duration;

use brakeledger_proto::v1 as pb;
use brakeledger_tests::small_disk::SmallDisk;
use brakeledger_tests::{connect, now_s, trip, two_axle_vehicle, ServerProcess};
use tonic::transport::Channel;
use tonic_health::pb::{health_check_response::ServingStatus, health_client::HealthClient, HealthCheckRequest};

fn server_binary() -> std::path::PathBuf {
    std::path::PathBuf::from(env!("CARGO_BIN_EXE_brakeledger-test-server"))
}

async fn health(channel: Channel, service: &str) -> i32 {
    HealthClient::new(channel).check(HealthCheckRequest { service: service.into() }).await.expect("health").into_inner().status
}

async fn wait_health(channel: Channel, service: &str, want: ServingStatus) {
    for _ in 0..200 {
        if health(channel.clone(), service).await == want as i32 {
            return;
        }
        tokio::time::sleep(Duration::from_millis(25)).await;
    }
    panic!("{service} did not report {want:?} within 5 s");
}

async fn push(channel: Channel, from: usize, count: usize, end: i64) -> Result<pb::IngestReport, tonic::Status> {
    let trips = (from..from + count).map(|n| trip("north", "van-1", n, end)).collect();
    pb::telemetry_service_client::TelemetryServiceClient::new(channel).push_trips(pb::PushTripsRequest { trips }).await.map(|r| r.into_inner())
}

async fn recorded(channel: Channel) -> u64 {
    pb::fleet_service_client::FleetServiceClient::new(channel)
        .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "van-1".into() })
        .await
        .expect("reads keep working")
        .into_inner()
        .trips_recorded
}

async fn full_disk_round(reserve_bytes: u64, leave_free_bytes: u64) {
    let disk = match SmallDisk::mount(48) {
        Ok(disk) => disk,
        Err(reason) => {
            eprintln!("SKIPPED full-disk test: {reason}");
            return;
        }
    };
    let data = disk.path().join("data");
    let config = disk.path().join("brakeledger.toml");
    std::fs::write(&config, format!("[storage]\nmin_free_bytes = {reserve_bytes}\nspace_check_interval_ms = 100\ncache_capacity_bytes = 8388608\n")).expect("config");
    let mut server = ServerProcess::spawn_with(&server_binary(), &data, &["--config".as_ref(), config.as_os_str()]).expect("server starts");
    let channel = connect(server.addr).await;
    pb::fleet_service_client::FleetServiceClient::new(channel.clone())
        .upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", "van-1")) })
        .await
        .expect("register");
    let end = now_s() - 60;
    assert_eq!(push(channel.clone(), 0, 1000, end).await.expect("room to write").accepted, 1000);

    // Use up the disk.
    let filler = disk.fill(leave_free_bytes);
    let mut refused = None;
    let mut stored = 1000;
    for round in 0..50 {
        match push(channel.clone(), 1000 + round * 2000, 2000, end).await {
            Ok(report) => stored += report.accepted,
            Err(status) => {
                refused = Some(status);
                break;
            }
        }
    }
    let status = refused.expect("a full disk refuses writes");
    assert_eq!(status.code(), tonic::Code::ResourceExhausted, "{status:?}");
    assert!(status.message().contains("full"), "a clear message: {}", status.message());
    wait_health(channel.clone(), "brakeledger.v1.TelemetryService", ServingStatus::NotServing).await;
    wait_health(channel.clone(), "brakeledger.v1.MaintenanceService", ServingStatus::NotServing).await;
    assert_eq!(health(channel.clone(), "brakeledger.v1.ForecastService").await, ServingStatus::Serving as i32);
    assert_eq!(health(channel.clone(), "").await, ServingStatus::Serving as i32);
    assert_eq!(recorded(channel.clone()).await, stored, "reads serve what was acknowledged");
    let unregistered = pb::fleet_service_client::FleetServiceClient::new(channel.clone())
        .upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", "van-2")) })
        .await
        .expect_err("every write is refused");
    assert_eq!(unregistered.code(), tonic::Code::ResourceExhausted);

    // Free the space: writes resume without a restart.
    std::fs::remove_file(&filler).expect("free space");
    wait_health(channel.clone(), "brakeledger.v1.TelemetryService", ServingStatus::Serving).await;
    let resumed = push(channel.clone(), 200_000, 1000, end).await.expect("writes resume");
    assert_eq!(resumed.accepted, 1000);
    assert_eq!(recorded(channel.clone()).await, stored + 1000);

    let exit = server.wait_exit(Duration::ZERO);
    assert!(exit.is_none(), "still running");
    server.signal("TERM");
    let exit = server.wait_exit(Duration::from_secs(15)).expect("exits");
    assert!(exit.success(), "SIGTERM after a full disk exits 0: {exit:?}");

    // Everything acknowledged is there after a restart, once.
    let server = ServerProcess::spawn_with(&server_binary(), &data, &["--config".as_ref(), config.as_os_str()]).expect("restart");
    assert_eq!(recorded(connect(server.addr).await).await, stored + 1000);
    server.kill();
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn the_free_space_reserve_refuses_writes_before_the_disk_is_full_and_they_resume() {
    full_disk_round(4 * 1024 * 1024, 2 * 1024 * 1024).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_disk_full_inside_the_storage_engine_recovers_without_a_restart() {
    full_disk_round(0, 0).await;
}
