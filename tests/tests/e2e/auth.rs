//! Access control over real gRPC: the matrix {no token, unknown, revoked, other fleet, each
//! role} × {every brakeledger.v1 RPC}, revocation at once, refusals that never reveal another
//! fleet's data, the audit trail, rate limits, and the CLI presenting its token.

use brakeledger::cli::{run_with_output, Cli};
use brakeledger::config::{LimitsConfig, ServingConfig};
use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, trip, two_axle_vehicle, ts, TestServer};
use clap::Parser;
use tonic::metadata::MetadataValue;
use tonic::transport::Channel;
use tonic::{Code, Request};
use tonic_health::pb::{health_client::HealthClient, HealthCheckRequest};
use tonic_types::StatusExt;

pub(crate) const OPERATOR: &str = "operator-secret-for-the-e2e-tests-0001";

pub(crate) fn with_token<T>(message: T, secret: Option<&str>) -> Request<T> {
    let mut request = Request::new(message);
    if let Some(secret) = secret {
        let value: MetadataValue<_> = format!("Bearer {secret}").parse().expect("header");
        request.metadata_mut().insert("authorization", value);
    }
    request
}

pub(crate) async fn create_token(channel: &Channel, by: &str, fleet: &str, role: pb::Role) -> Result<pb::CreateTokenResponse, tonic::Status> {
    pb::access_service_client::AccessServiceClient::new(channel.clone())
        .create_token(with_token(pb::CreateTokenRequest { fleet_id: fleet.into(), role: role as i32, label: format!("{fleet} {role:?}") }, Some(by)))
        .await
        .map(tonic::Response::into_inner)
}

/// Sets up fleets north and south (a vehicle each) with the operator token.
pub(crate) async fn two_fleets(server: &TestServer) {
    for fleet in ["north", "south"] {
        let mut client = server.fleet();
        client
            .upsert_fleet(with_token(pb::UpsertFleetRequest { fleet: Some(pb::Fleet { fleet_id: fleet.into(), time_zone: "UTC".into(), display_name: String::new() }) }, Some(OPERATOR)))
            .await
            .expect("fleet");
        client.upsert_vehicle(with_token(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle(fleet, "van-1")) }, Some(OPERATOR))).await.expect("vehicle");
    }
}

/// The RPCs of the contract, each called on fleet north with a well-formed request; the
/// roles (besides operator) that may make it, written out here independently of the server.
const RPCS: &[(&str, &[&str])] = &[
    ("UpsertFleet", &["fleet-admin"]),
    ("GetFleet", &["workshop", "planner", "fleet-admin"]),
    ("UpsertVehicle", &["fleet-admin"]),
    ("GetVehicle", &["workshop", "planner", "fleet-admin"]),
    ("ListVehicles", &["workshop", "planner", "fleet-admin"]),
    ("PushTrips", &["ingest"]),
    ("StreamTrips", &["ingest"]),
    ("IngestTrips", &["ingest"]),
    ("RecordInspection", &["workshop"]),
    ("RecordReplacement", &["workshop"]),
    ("VoidRecord", &["workshop"]),
    ("SupersedeRecord", &["workshop"]),
    ("ListServiceRecords", &["workshop", "planner", "fleet-admin"]),
    ("GetVehicleForecast", &["workshop", "planner", "fleet-admin"]),
    ("ListDue", &["workshop", "planner", "fleet-admin"]),
    ("WatchDue", &["workshop", "planner", "fleet-admin"]),
    ("GetWearTrajectory", &["workshop", "planner", "fleet-admin"]),
    ("PlanVisits", &["workshop", "planner", "fleet-admin"]),
    ("CreateToken", &["fleet-admin"]),
    ("ListTokens", &["fleet-admin"]),
    ("RevokeToken", &["fleet-admin"]),
    ("ListAuditEntries", &["fleet-admin"]),
    ("ExportBackup", &[]),
];

/// Reads a server stream to its end; its final status.
async fn read_to_end<T>(mut stream: tonic::Streaming<T>) -> Result<(), tonic::Status> {
    while stream.message().await?.is_some() {}
    Ok(())
}

/// Makes one RPC on fleet north as `secret`; the status code it ends with.
async fn call(server: &TestServer, rpc: &str, secret: Option<&str>, serial: usize) -> Code {
    let channel = server.channel.clone();
    let now = now_s();
    let outcome: Result<(), tonic::Status> = match rpc {
        "UpsertFleet" => server
            .fleet()
            .upsert_fleet(with_token(pb::UpsertFleetRequest { fleet: Some(pb::Fleet { fleet_id: "north".into(), time_zone: "UTC".into(), display_name: "North".into() }) }, secret))
            .await
            .map(drop),
        "GetFleet" => server.fleet().get_fleet(with_token(pb::GetFleetRequest { fleet_id: "north".into() }, secret)).await.map(drop),
        "UpsertVehicle" => server.fleet().upsert_vehicle(with_token(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", "van-2")) }, secret)).await.map(drop),
        "GetVehicle" => server.fleet().get_vehicle(with_token(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "van-1".into() }, secret)).await.map(drop),
        "ListVehicles" => server
            .fleet()
            .list_vehicles(with_token(pb::ListVehiclesRequest { fleet_id: "north".into(), page_size: 10, page_token: String::new() }, secret))
            .await
            .map(drop),
        "PushTrips" => server
            .telemetry()
            .push_trips(with_token(pb::PushTripsRequest { trips: vec![trip("north", "van-1", serial, now - 3600)] }, secret))
            .await
            .map(drop),
        "StreamTrips" => {
            let trips = tokio_stream::iter(vec![trip("north", "van-1", 10_000 + serial, now - 3600)]);
            server.telemetry().stream_trips(with_token(trips, secret)).await.map(drop)
        }
        "IngestTrips" => {
            let messages = tokio_stream::iter(vec![pb::IngestTripsRequest { trips: vec![trip("north", "van-1", 20_000 + serial, now - 3600)] }]);
            match server.telemetry().ingest_trips(with_token(messages, secret)).await {
                Err(status) => Err(status),
                Ok(response) => read_to_end(response.into_inner()).await,
            }
        }
        "RecordInspection" => server
            .maintenance()
            .record_inspection(with_token(
                pb::RecordInspectionRequest {
                    fleet_id: "north".into(),
                    vehicle_id: "van-1".into(),
                    inspection_id: format!("insp-{serial}"),
                    axle_index: 1,
                    component: pb::Component::Friction as i32,
                    thickness_mm: 9.0,
                    measured_at: Some(ts(now - 60)),
                },
                secret,
            ))
            .await
            .map(drop),
        "RecordReplacement" => server
            .maintenance()
            .record_replacement(with_token(
                pb::RecordReplacementRequest {
                    fleet_id: "north".into(),
                    vehicle_id: "van-1".into(),
                    replacement_id: format!("repl-{serial}"),
                    axle_index: 2,
                    component: pb::Component::Friction as i32,
                    new_thickness_mm: 0.0,
                    replaced_at: Some(ts(now - 30)),
                },
                secret,
            ))
            .await
            .map(drop),
        "VoidRecord" => server
            .maintenance()
            .void_record(with_token(
                pb::VoidRecordRequest {
                    fleet_id: "north".into(),
                    vehicle_id: "van-1".into(),
                    kind: pb::RecordKind::Inspection as i32,
                    record_id: format!("insp-{}", serial - 1),
                    reason: "entered twice".into(),
                },
                secret,
            ))
            .await
            .map(drop),
        "SupersedeRecord" => {
            let corrected = pb::RecordInspectionRequest {
                fleet_id: "north".into(),
                vehicle_id: "van-1".into(),
                inspection_id: format!("fix-{serial}"),
                axle_index: 1,
                component: pb::Component::Friction as i32,
                thickness_mm: 8.5,
                measured_at: Some(ts(now - 60)),
            };
            server
                .maintenance()
                .supersede_record(with_token(
                    pb::SupersedeRecordRequest {
                        kind: pb::RecordKind::Inspection as i32,
                        superseded_id: "insp-unknown".into(),
                        reason: "typo".into(),
                        correction: Some(pb::supersede_record_request::Correction::Inspection(corrected)),
                    },
                    secret,
                ))
                .await
                .map(drop)
        }
        "ListServiceRecords" => server
            .maintenance()
            .list_service_records(with_token(pb::ListServiceRecordsRequest { fleet_id: "north".into(), vehicle_id: "van-1".into() }, secret))
            .await
            .map(drop),
        "GetVehicleForecast" => server
            .forecast()
            .get_vehicle_forecast(with_token(pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: "van-1".into(), band_level: 0.8 }, secret))
            .await
            .map(drop),
        "ListDue" => server
            .forecast()
            .list_due(with_token(
                pb::ListDueRequest { fleet_id: "north".into(), due_before: Some(ts(now + 86_400 * 60)), band_level: 0.8, page_size: 10, ..Default::default() },
                secret,
            ))
            .await
            .map(drop),
        "WatchDue" => match server
            .forecast()
            .watch_due(with_token(pb::WatchDueRequest { fleet_id: "north".into(), due_before: Some(ts(now + 86_400 * 60)), band_level: 0.8, ..Default::default() }, secret))
            .await
        {
            Err(status) => Err(status),
            Ok(response) => response.into_inner().message().await.map(drop),
        },
        "GetWearTrajectory" => server
            .forecast()
            .get_wear_trajectory(with_token(
                pb::GetWearTrajectoryRequest { fleet_id: "north".into(), vehicle_id: "van-1".into(), axle_index: 1, component: pb::Component::Friction as i32, ..Default::default() },
                secret,
            ))
            .await
            .map(drop),
        "PlanVisits" => server
            .forecast()
            .plan_visits(with_token(
                pb::PlanVisitsRequest {
                    fleet_id: "north".into(),
                    from: Some(ts(now)),
                    to: Some(ts(now + 86_400 * 14)),
                    capacity_hours_per_day: 8.0,
                    friction_job_hours: 1.5,
                    disc_job_hours: 3.0,
                    bundle_within_days: 14,
                    ..Default::default()
                },
                secret,
            ))
            .await
            .map(drop),
        "CreateToken" => pb::access_service_client::AccessServiceClient::new(channel)
            .create_token(with_token(pb::CreateTokenRequest { fleet_id: "north".into(), role: pb::Role::Planner as i32, label: "made in the matrix".into() }, secret))
            .await
            .map(drop),
        "ListTokens" => pb::access_service_client::AccessServiceClient::new(channel).list_tokens(with_token(pb::ListTokensRequest { fleet_id: "north".into() }, secret)).await.map(drop),
        "RevokeToken" => {
            let victim = create_token(&channel, OPERATOR, "north", pb::Role::Ingest).await.expect("token to revoke");
            let token_id = victim.token.expect("token").token_id;
            pb::access_service_client::AccessServiceClient::new(channel).revoke_token(with_token(pb::RevokeTokenRequest { token_id }, secret)).await.map(drop)
        }
        "ListAuditEntries" => pb::access_service_client::AccessServiceClient::new(channel)
            .list_audit_entries(with_token(pb::ListAuditEntriesRequest { fleet_id: "north".into(), page_size: 10, page_token: String::new() }, secret))
            .await
            .map(drop),
        "ExportBackup" => match pb::backup_service_client::BackupServiceClient::new(channel).export_backup(with_token(pb::ExportBackupRequest::default(), secret)).await {
            Err(status) => Err(status),
            Ok(response) => read_to_end(response.into_inner()).await,
        },
        other => panic!("no call for {other}"),
    };
    match outcome {
        Ok(()) => Code::Ok,
        Err(status) => {
            if status.code() == Code::PermissionDenied {
                assert!(status.message().contains("needs"), "a refusal says which role is needed: {}", status.message());
            }
            status.code()
        }
    }
}

#[tokio::test]
async fn every_rpc_answers_each_kind_of_caller_as_its_role_allows() {
    let server = TestServer::start_with_operator(OPERATOR).await;
    two_fleets(&server).await;
    let mut callers: Vec<(String, Option<String>)> = vec![("no token".into(), None), ("unknown token".into(), Some("blt1_not-a-token-this-server-made".into()))];
    let revoked = create_token(&server.channel, OPERATOR, "north", pb::Role::Planner).await.expect("token");
    pb::access_service_client::AccessServiceClient::new(server.channel.clone())
        .revoke_token(with_token(pb::RevokeTokenRequest { token_id: revoked.token.expect("token").token_id }, Some(OPERATOR)))
        .await
        .expect("revoke");
    callers.push(("revoked token".into(), Some(revoked.secret)));
    let other_fleet = create_token(&server.channel, OPERATOR, "south", pb::Role::FleetAdmin).await.expect("south token");
    callers.push(("other fleet's fleet-admin".into(), Some(other_fleet.secret)));
    for (name, role) in [("ingest", pb::Role::Ingest), ("workshop", pb::Role::Workshop), ("planner", pb::Role::Planner), ("fleet-admin", pb::Role::FleetAdmin)] {
        callers.push((name.into(), Some(create_token(&server.channel, OPERATOR, "north", role).await.expect("role token").secret)));
    }
    callers.push(("operator".into(), Some(OPERATOR.into())));

    let mut failures = Vec::new();
    let mut serial = 0;
    for (rpc, allowed) in RPCS {
        for (caller, secret) in &callers {
            serial += 1;
            let code = call(&server, rpc, secret.as_deref(), serial).await;
            let expected_refusal = match caller.as_str() {
                "no token" | "unknown token" | "revoked token" => Some(Code::Unauthenticated),
                "other fleet's fleet-admin" => Some(Code::PermissionDenied),
                "operator" => None,
                role if allowed.contains(&role) => None,
                _ => Some(Code::PermissionDenied),
            };
            let right = match expected_refusal {
                Some(refusal) => code == refusal,
                // Allowed: anything but an access refusal (a forecast may not exist yet, ...).
                None => !matches!(code, Code::Unauthenticated | Code::PermissionDenied | Code::Internal),
            };
            if !right {
                failures.push(format!("{rpc} as {caller}: got {code:?}, expected {}", expected_refusal.map_or("access granted".into(), |c| format!("{c:?}"))));
            }
        }
    }
    assert!(failures.is_empty(), "{} cell(s) wrong:\n{}", failures.len(), failures.join("\n"));

    // Writes by workshop, fleet-admin and operator tokens are in north's audit trail; the
    // ingest token's trips are not.
    let trail = pb::access_service_client::AccessServiceClient::new(server.channel.clone())
        .list_audit_entries(with_token(pb::ListAuditEntriesRequest { fleet_id: "north".into(), page_size: 1000, page_token: String::new() }, Some(OPERATOR)))
        .await
        .expect("audit")
        .into_inner();
    let actions: Vec<&str> = trail.entries.iter().map(|e| e.action.as_str()).collect();
    for expected in ["MaintenanceService/RecordInspection", "MaintenanceService/RecordReplacement", "FleetService/UpsertVehicle", "FleetService/UpsertFleet", "AccessService/CreateToken", "AccessService/RevokeToken"] {
        assert!(actions.iter().any(|a| a.ends_with(expected)), "{expected} missing from {actions:?}");
    }
    assert!(trail.entries.iter().all(|e| e.role != pb::Role::Ingest as i32 && e.fleet_id == "north"));
    assert!(trail.entries.iter().any(|e| e.role == pb::Role::Workshop as i32 && e.subject.contains("inspection")), "{:?}", trail.entries);
    server.stop().await;
}

#[tokio::test]
async fn refusals_never_tell_whether_another_fleets_vehicle_exists_and_revocation_is_immediate() {
    let server = TestServer::start_with_operator(OPERATOR).await;
    two_fleets(&server).await;
    let south = create_token(&server.channel, OPERATOR, "south", pb::Role::Planner).await.expect("token");
    let ask = |vehicle: &'static str| {
        let secret = south.secret.clone();
        let mut client = server.fleet();
        async move { client.get_vehicle(with_token(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: vehicle.into() }, Some(&secret))).await.expect_err("other fleet") }
    };
    let (existing, missing) = (ask("van-1").await, ask("no-such-van").await);
    assert_eq!(existing.code(), Code::PermissionDenied);
    assert_eq!((existing.code(), existing.message()), (missing.code(), missing.message()), "the same answer whether or not the vehicle exists");

    // A fleet-admin manages its own fleet's tokens, never above its role or another fleet's.
    let admin = create_token(&server.channel, OPERATOR, "north", pb::Role::FleetAdmin).await.expect("admin").secret;
    let made = create_token(&server.channel, &admin, "north", pb::Role::Workshop).await.expect("fleet-admin makes a workshop token");
    assert_eq!(create_token(&server.channel, &admin, "", pb::Role::Operator).await.expect_err("no operator tokens").code(), Code::PermissionDenied);
    assert_eq!(create_token(&server.channel, &admin, "south", pb::Role::Planner).await.expect_err("not south").code(), Code::PermissionDenied);
    let listed = pb::access_service_client::AccessServiceClient::new(server.channel.clone())
        .list_tokens(with_token(pb::ListTokensRequest { fleet_id: "north".into() }, Some(&admin)))
        .await
        .expect("list")
        .into_inner();
    assert!(listed.tokens.iter().all(|t| t.fleet_id == "north"));
    let debug = format!("{listed:?}");
    assert!(!debug.contains(&made.secret) && !debug.contains("blt1_"), "secrets are never listed");

    // Revocation takes effect at once.
    let workshop = made.secret;
    let read = |secret: String| {
        let mut client = server.fleet();
        async move { client.get_fleet(with_token(pb::GetFleetRequest { fleet_id: "north".into() }, Some(&secret))).await }
    };
    read(workshop.clone()).await.expect("valid token reads");
    pb::access_service_client::AccessServiceClient::new(server.channel.clone())
        .revoke_token(with_token(pb::RevokeTokenRequest { token_id: made.token.expect("token").token_id }, Some(&admin)))
        .await
        .expect("revoke");
    assert_eq!(read(workshop).await.expect_err("revoked").code(), Code::Unauthenticated);

    // Health and reflection stay open for probes.
    let health = HealthClient::new(server.channel.clone()).check(HealthCheckRequest { service: "brakeledger.v1.AccessService".into() }).await.expect("health needs no token");
    assert_eq!(health.into_inner().status, 1, "SERVING");
    server.stop().await;
}

#[tokio::test]
async fn the_command_line_presents_its_token() {
    let server = TestServer::start_with_operator(OPERATOR).await;
    two_fleets(&server).await;
    let planner = create_token(&server.channel, OPERATOR, "north", pb::Role::Planner).await.expect("token").secret;
    let url = format!("http://{}", server.addr);
    let run = |token: Option<String>| {
        let mut argv = vec!["brakeledger".to_owned(), "--server".to_owned(), url.clone()];
        if let Some(token) = token {
            argv.extend(["--token".to_owned(), token]);
        }
        argv.extend(["due", "--fleet", "north"].map(str::to_owned));
        async move {
            let mut out = Vec::new();
            run_with_output(Cli::try_parse_from(argv).expect("flags"), &mut out).await.map(|_| String::from_utf8(out).expect("utf-8"))
        }
    };
    let listed = run(Some(planner)).await.expect("due with a token");
    assert!(listed.contains("van-1"), "{listed}");
    let refused = run(None).await.expect_err("due without a token");
    assert!(format!("{refused:#}").contains("Unauthenticated"), "{refused:#}");
    assert!(format!("{refused:#}").contains("--token TOKEN or the BRAKELEDGER_TOKEN environment variable"), "the message names both ways: {refused:#}");
    server.stop().await;
}

#[tokio::test]
async fn an_ingest_token_over_its_rate_gets_resource_exhausted_with_a_retry_hint() {
    let dir = tempfile::tempdir().expect("dir");
    let serving = ServingConfig { limits: LimitsConfig { ingest_trips_per_second: 2.0, ingest_burst_trips: 5.0, ..LimitsConfig::default() }, ..ServingConfig::default() };
    let server = TestServer::start_with(dir.path(), brakeledger_tests::fast_forecasts(), Some(OPERATOR), serving).await;
    two_fleets(&server).await;
    let ingest = create_token(&server.channel, OPERATOR, "north", pb::Role::Ingest).await.expect("token").secret;
    let now = now_s();
    let batch = |from: usize, n: usize| pb::PushTripsRequest { trips: (from..from + n).map(|i| trip("north", "van-1", i, now - 86_400 + i as i64 * 600)).collect() };
    let stored = server.telemetry().push_trips(with_token(batch(0, 4), Some(&ingest))).await.expect("within the burst").into_inner();
    assert_eq!(stored.accepted, 4);
    let refused = server.telemetry().push_trips(with_token(batch(4, 4), Some(&ingest))).await.expect_err("over the rate");
    assert_eq!(refused.code(), Code::ResourceExhausted, "{refused:?}");
    let retry = refused.get_details_retry_info().and_then(|r| r.retry_delay).expect("RetryInfo");
    // Four trips wanted, at most one left: three at two per second.
    assert!((1400..=1600).contains(&retry.as_millis()), "{retry:?}");
    let too_big = server.telemetry().push_trips(with_token(batch(4, 10), Some(&ingest))).await.expect_err("larger than the burst");
    assert!(too_big.message().contains("send at most 5"), "{}", too_big.message());
    tokio::time::sleep(retry).await;
    let later = server.telemetry().push_trips(with_token(batch(4, 4), Some(&ingest))).await.expect("after the hinted wait").into_inner();
    assert_eq!(later.accepted, 4, "the refused calls stored nothing, so all four are new");
    server.stop().await;
}
