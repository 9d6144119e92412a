//! Damage to a cleanly stopped server's data directory never goes unnoticed: the cases of the
//! reliability issue (random bytes at the start of sled's main file, 4 KiB at 64 KiB, its last
//! 64 KiB overwritten, the file cut to half, the file deleted, the ledger deleted) are each
//! refused at start with the loss named (or served read-only when configured), `check` reports
//! them offline, and a backup taken before the damage restores everything, compared record by
//! record.

use std::path::{Path, PathBuf};
use std::time::Duration;

use brakeledger::store::sled_store::SledStore;
use brakeledger::store::Store;
use brakeledger_proto::v1 as pb;
use brakeledger_tests::{connect, now_s, trip, ts, two_axle_vehicle, ServerProcess};
use tonic::transport::Channel;
use tonic_health::pb::{health_check_response::ServingStatus, health_client::HealthClient, HealthCheckRequest};

const VEHICLES: usize = 6;
const TRIPS_PER_VEHICLE: usize = 700;

fn server_binary() -> PathBuf {
    PathBuf::from(env!("CARGO_BIN_EXE_brakeledger-test-server"))
}

/// Runs the command line; returns (success, stdout + stderr).
fn cli(args: &[&std::ffi::OsStr]) -> (bool, String) {
    let output = std::process::Command::new(server_binary()).args(args).env("BRAKELEDGER_LOG", "warn").output().expect("run the command line");
    (output.status.success(), format!("{}{}", String::from_utf8_lossy(&output.stdout), String::from_utf8_lossy(&output.stderr)))
}

async fn populate(channel: Channel) {
    let mut fleet = pb::fleet_service_client::FleetServiceClient::new(channel.clone());
    fleet
        .upsert_fleet(pb::UpsertFleetRequest { fleet: Some(pb::Fleet { fleet_id: "north".into(), time_zone: "Europe/Lisbon".into(), display_name: "North".into() }) })
        .await
        .expect("fleet");
    let end = now_s() - 60;
    let mut telemetry = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone());
    let mut maintenance = pb::maintenance_service_client::MaintenanceServiceClient::new(channel.clone());
    for v in 0..VEHICLES {
        let vehicle_id = format!("van-{v}");
        fleet.upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", &vehicle_id)) }).await.expect("vehicle");
        let trips: Vec<pb::TripSummary> = (0..TRIPS_PER_VEHICLE).map(|n| trip("north", &vehicle_id, n, end - v as i64 * 60)).collect();
        assert_eq!(telemetry.push_trips(pb::PushTripsRequest { trips }).await.expect("trips").into_inner().accepted as usize, TRIPS_PER_VEHICLE);
        for k in 0..2u32 {
            maintenance
                .record_inspection(pb::RecordInspectionRequest {
                    fleet_id: "north".into(),
                    vehicle_id: vehicle_id.clone(),
                    inspection_id: format!("insp-{k}"),
                    axle_index: 1,
                    component: pb::Component::Friction as i32,
                    thickness_mm: 20.0 - k as f64,
                    measured_at: Some(ts(end - 86_400 * (10 - k as i64))),
                })
                .await
                .expect("inspection");
        }
        maintenance
            .record_replacement(pb::RecordReplacementRequest {
                fleet_id: "north".into(),
                vehicle_id,
                replacement_id: "fit-1".into(),
                axle_index: 2,
                component: pb::Component::Disc as i32,
                new_thickness_mm: 0.0,
                replaced_at: Some(ts(end - 86_400 * 40)),
            })
            .await
            .expect("replacement");
    }
}

/// Every record of every vehicle, read offline through the store (which verifies the directory
/// on open): one line per vehicle.
fn records(dir: &Path) -> Vec<String> {
    let store = SledStore::open(dir).expect("a sound directory opens");
    let mut lines = vec![format!("{:?}", store.get_fleet("north").expect("fleet"))];
    for vehicle in store.list_vehicles("north", None, 1000).expect("vehicles") {
        let id = &vehicle.vehicle_id;
        lines.push(format!(
            "{vehicle:?} {:?} {:?} {:?}",
            store.vehicle_totals("north", id).expect("totals"),
            store.daily_energy("north", id).expect("daily"),
            store.service_history("north", id).expect("history")
        ));
    }
    lines
}

fn copy_dir(from: &Path, to: &Path) {
    let status = std::process::Command::new("cp").arg("-a").arg(from).arg(to).status().expect("cp");
    assert!(status.success());
}

/// Deterministic filler bytes (xorshift), different from anything sled wrote.
fn noise(len: usize, seed: u64) -> Vec<u8> {
    let mut state = seed | 1;
    (0..len)
        .map(|_| {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            state as u8
        })
        .collect()
}

fn overwrite(file: &Path, at: u64, bytes: &[u8]) {
    use std::io::{Seek, SeekFrom, Write};
    let mut f = std::fs::OpenOptions::new().write(true).open(file).expect("open db file");
    f.seek(SeekFrom::Start(at)).expect("seek");
    f.write_all(bytes).expect("write");
    f.sync_all().expect("sync");
}

/// The damage cases of the issue, applied to a copy of the data directory.
fn damage(case: &str, dir: &Path) {
    let db = dir.join("db");
    let len = std::fs::metadata(&db).expect("db file").len();
    match case {
        "random bytes at the start" => overwrite(&db, 0, &noise(4096, 7)),
        "4 KiB at 64 KiB" => overwrite(&db, 64 * 1024, &noise(4096, 11)),
        "last 64 KiB overwritten" => overwrite(&db, len.saturating_sub(64 * 1024), &noise(64 * 1024, 13)),
        "cut to half its size" => std::fs::OpenOptions::new().write(true).open(&db).expect("open").set_len(len / 2).expect("truncate"),
        "main file deleted" => std::fs::remove_file(&db).expect("delete"),
        "ledger deleted" => std::fs::remove_file(dir.join("acknowledged.ledger")).expect("delete ledger"),
        other => panic!("unknown case {other}"),
    }
}

const CASES: [&str; 6] = ["random bytes at the start", "4 KiB at 64 KiB", "last 64 KiB overwritten", "cut to half its size", "main file deleted", "ledger deleted"];

async fn health(channel: Channel, service: &str) -> i32 {
    HealthClient::new(channel).check(HealthCheckRequest { service: service.into() }).await.expect("health").into_inner().status
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn each_kind_of_damage_is_refused_with_the_loss_named_and_a_backup_restores_everything() {
    let work = tempfile::tempdir().expect("temp dir");
    let clean = work.path().join("clean");
    let backup = work.path().join("before-damage.backup");

    // A server with data; a backup taken while it serves; a clean stop.
    let server = ServerProcess::spawn(&server_binary(), &clean);
    let channel = connect(server.addr).await;
    populate(channel.clone()).await;
    let url = format!("http://{}", server.addr);
    let (ok, output) = cli(&["--server".as_ref(), url.as_ref(), "backup".as_ref(), "--out".as_ref(), backup.as_os_str()]);
    assert!(ok, "backup: {output}");
    assert!(output.contains(&format!("{} trips", VEHICLES * TRIPS_PER_VEHICLE)), "{output}");
    assert!(server.terminate().success());
    let expected = records(&clean);
    assert_eq!(expected.len(), VEHICLES + 1);
    let (ok, output) = cli(&["check".as_ref(), "--data".as_ref(), clean.as_os_str()]);
    assert!(ok && output.contains("is sound"), "{output}");
    let db_len = std::fs::metadata(clean.join("db")).expect("db").len();
    assert!(db_len > 256 * 1024, "the main file ({db_len} bytes) is large enough for every case");

    for (n, case) in CASES.iter().enumerate() {
        let dir = work.path().join(format!("case-{n}"));
        copy_dir(&clean, &dir);
        damage(case, &dir);
        match ServerProcess::spawn_with(&server_binary(), &dir, &[]) {
            Ok(server) => {
                server.kill();
                // Only acceptable when nothing at all was lost.
                assert_eq!(records(&dir), expected, "{case}: the server started although records are missing");
                eprintln!("{case}: started, and every record is there (the damage hit no live data)");
            }
            Err(output) => {
                eprintln!("{case}: refused:\n{output}");
                assert!(output.contains("does not hold what was acknowledged"), "{case}: {output}");
                assert!(output.contains("brakeledger restore"), "{case}: points at restore: {output}");
                assert!(
                    output.contains("missing") || output.contains("checksum") || output.contains("cannot be opened") || output.contains("cannot be read"),
                    "{case}: names the loss: {output}"
                );
                let (ok, report) = cli(&["check".as_ref(), "--data".as_ref(), dir.as_os_str()]);
                assert!(!ok, "{case}: check fails too: {report}");
            }
        }
    }

    // Read-only when configured: reads serve, writes are refused with a clear status.
    let dir = work.path().join("read-only");
    copy_dir(&clean, &dir);
    damage("ledger deleted", &dir);
    let config = work.path().join("read-only.toml");
    std::fs::write(&config, "[integrity]\non_mismatch = \"read_only\"\n").expect("config");
    let server = ServerProcess::spawn_with(&server_binary(), &dir, &["--config".as_ref(), config.as_os_str()]).expect("starts read-only");
    let channel = connect(server.addr).await;
    let vehicle = pb::fleet_service_client::FleetServiceClient::new(channel.clone())
        .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "van-0".into() })
        .await
        .expect("reads serve")
        .into_inner();
    assert_eq!(vehicle.trips_recorded as usize, TRIPS_PER_VEHICLE);
    let refused = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone())
        .push_trips(pb::PushTripsRequest { trips: vec![trip("north", "van-0", 99_999, now_s() - 60)] })
        .await
        .expect_err("writes are refused");
    assert_eq!(refused.code(), tonic::Code::FailedPrecondition, "{refused:?}");
    assert!(refused.message().contains("read-only") && refused.message().contains("ledger"), "{}", refused.message());
    for _ in 0..100 {
        if health(channel.clone(), "brakeledger.v1.TelemetryService").await == ServingStatus::NotServing as i32 {
            break;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    assert_eq!(health(channel.clone(), "brakeledger.v1.TelemetryService").await, ServingStatus::NotServing as i32);
    assert_eq!(health(channel, "brakeledger.v1.FleetService").await, ServingStatus::Serving as i32);
    server.kill();

    // The backup taken before the damage: verified, refused over a non-empty directory,
    // restored into an empty one with every record.
    let (ok, output) = cli(&["verify-backup".as_ref(), backup.as_os_str()]);
    assert!(ok && output.contains("sound backup"), "{output}");
    let (ok, output) = cli(&["restore".as_ref(), "--from".as_ref(), backup.as_os_str(), "--data".as_ref(), clean.as_os_str()]);
    assert!(!ok && output.contains("not empty"), "{output}");
    let restored = work.path().join("restored");
    let (ok, output) = cli(&["restore".as_ref(), "--from".as_ref(), backup.as_os_str(), "--data".as_ref(), restored.as_os_str()]);
    assert!(ok, "restore: {output}");
    let server = ServerProcess::spawn(&server_binary(), &restored);
    let channel = connect(server.addr).await;
    for v in 0..VEHICLES {
        let vehicle = pb::fleet_service_client::FleetServiceClient::new(channel.clone())
            .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: format!("van-{v}") })
            .await
            .expect("restored vehicle")
            .into_inner();
        assert_eq!(vehicle.trips_recorded as usize, TRIPS_PER_VEHICLE);
    }
    assert!(server.terminate().success());
    assert_eq!(records(&restored), expected, "the restored directory holds every record as it was");
}

#[test]
fn a_damaged_backup_file_is_refused_before_anything_is_restored() {
    let work = tempfile::tempdir().expect("temp dir");
    let data = work.path().join("data");
    {
        let store = SledStore::open(&data).expect("create");
        store.upsert_vehicle(&brakeledger::store::VehicleRecord::try_from(two_axle_vehicle("north", "bus-1")).expect("valid")).expect("vehicle");
        let (mut file, _) = store.export_backup(0).expect("export");
        let mut bytes = Vec::new();
        std::io::Read::read_to_end(&mut file, &mut bytes).expect("read");
        let middle = bytes.len() / 2;
        bytes[middle] ^= 1;
        std::fs::write(work.path().join("damaged.backup"), bytes).expect("write");
    }
    let target = work.path().join("target");
    let (ok, output) = cli(&["restore".as_ref(), "--from".as_ref(), work.path().join("damaged.backup").as_os_str(), "--data".as_ref(), target.as_os_str()]);
    assert!(!ok && output.contains("damaged"), "{output}");
    assert!(!target.exists(), "nothing written");
}
