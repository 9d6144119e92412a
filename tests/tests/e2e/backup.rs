//! The backup RPC goes through the same bearer-token check as every brakeledger.v1 service, and
//! what it streams is a sound backup file holding every record acknowledged before it began,
//! taken while other clients keep writing.

use brakeledger::store::backup_file;
use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, trip, two_axle_vehicle, TestServer};
use tonic::metadata::MetadataValue;

/// A request carrying the test server's token.
fn authorised<T>(message: T) -> tonic::Request<T> {
    let mut request = tonic::Request::new(message);
    request.metadata_mut().insert("authorization", MetadataValue::from_static("Bearer backup-secret-operator-0001"));
    request
}

async fn export(server: &TestServer, token: Option<&str>) -> Result<Vec<u8>, tonic::Status> {
    let mut request = tonic::Request::new(pb::ExportBackupRequest {});
    if let Some(token) = token {
        request.metadata_mut().insert("authorization", MetadataValue::try_from(format!("Bearer {token}")).expect("header"));
    }
    let mut stream = pb::backup_service_client::BackupServiceClient::new(server.channel.clone()).export_backup(request).await?.into_inner();
    let mut bytes = Vec::new();
    let mut summary = None;
    while let Some(chunk) = stream.message().await? {
        assert_eq!(chunk.offset_bytes as usize, bytes.len(), "chunks arrive in order");
        bytes.extend_from_slice(&chunk.data);
        summary = chunk.summary.or(summary);
    }
    let summary = summary.expect("the last chunk carries the summary");
    assert_eq!(summary.file_bytes as usize, bytes.len());
    Ok(bytes)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn backup_needs_a_token_and_holds_everything_acknowledged_before_it_while_writes_go_on() {
    let server = TestServer::start_with_operator("backup-secret-operator-0001").await;
    let refused = export(&server, None).await.expect_err("no token");
    assert_eq!(refused.code(), tonic::Code::Unauthenticated);
    assert_eq!(export(&server, Some("wrong")).await.expect_err("bad token").code(), tonic::Code::Unauthenticated);

    let mut fleet = pb::fleet_service_client::FleetServiceClient::new(server.channel.clone());
    let mut telemetry = pb::telemetry_service_client::TelemetryServiceClient::new(server.channel.clone());
    fleet.upsert_vehicle(authorised(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", "bus-1")) })).await.expect("vehicle");
    let end = now_s() - 60;
    let first: Vec<pb::TripSummary> = (0..5000).map(|n| trip("north", "bus-1", n, end)).collect();
    assert_eq!(telemetry.push_trips(authorised(pb::PushTripsRequest { trips: first })).await.expect("push").into_inner().accepted, 5000);

    // A writer keeps pushing while the backup is taken.
    let mut writer = telemetry.clone();
    let writes = tokio::spawn(async move {
        let mut accepted = 0;
        for batch in 0..20usize {
            let trips = (0..500).map(|n| trip("north", "bus-1", 100_000 + batch * 500 + n, end)).collect();
            accepted += writer.push_trips(authorised(pb::PushTripsRequest { trips })).await.expect("concurrent push").into_inner().accepted;
        }
        accepted
    });
    let bytes = export(&server, Some("backup-secret-operator-0001")).await.expect("backup");
    assert_eq!(writes.await.expect("writer"), 10_000);

    let dir = tempfile::tempdir().expect("dir");
    let file = dir.path().join("taken.backup");
    std::fs::write(&file, &bytes).expect("write");
    let summary = backup_file::verify(&file).expect("a sound backup file");
    let trips = summary.tallies.totals().trips.count;
    assert!((5000..=15_000).contains(&trips), "the copy holds the acknowledged trips and whole batches only: {trips}");
    assert_eq!(trips % 500, 0, "no batch is split by the copy: {trips}");

    // Restored, the copy holds exactly what its summary says, with consistent totals.
    let restored = dir.path().join("restored");
    backup_file::restore(&file, &restored, brakeledger::store::sled_engine::PageSettings::with_cache(8 * 1024 * 1024)).expect("restore");
    let store = brakeledger::store::sled_store::SledStore::open(&restored).expect("the restored directory verifies");
    use brakeledger::store::Store;
    assert_eq!(store.vehicle_totals("north", "bus-1").expect("totals").trips_recorded, trips);
    drop(store);
    server.stop().await;
}
