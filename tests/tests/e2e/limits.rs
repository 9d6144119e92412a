//! Limits a caller meets: call deadlines (the client's `grpc-timeout`, and `[limits]
//! max_call_seconds` when the client sets none) and the earliest date a record may carry
//! (`[limits] earliest_record_date`), for trips, inspections and replacements alike.

use std::time::{Duration, Instant};

use brakeledger::config::{LimitsConfig, ServingConfig};
use brakeledger_proto::v1 as pb;
use brakeledger_tests::{fast_forecasts, now_s, register, trip, ts, two_axle_vehicle, TestServer};
use tonic::{Code, Request};
use tonic_types::StatusExt;

/// A trip stream that sends one trip and then neither sends more nor ends, as a stalled
/// integration would; the sender is returned so the stream stays open.
fn stalled_stream() -> (tokio::sync::mpsc::Sender<pb::TripSummary>, tokio_stream::wrappers::ReceiverStream<pb::TripSummary>) {
    let (sender, receiver) = tokio::sync::mpsc::channel(4);
    sender.try_send(trip("north", "van-1", 0, now_s() - 60)).expect("room for one trip");
    (sender, tokio_stream::wrappers::ReceiverStream::new(receiver))
}

/// The call ended because its time ran out: gRPC names this DEADLINE_EXCEEDED, and tonic's
/// server-side timeout answers CANCELLED ("Timeout expired"). On a loaded machine the stream
/// may instead be reset as the deadline passes, which the client also reads as CANCELLED with
/// the transport's wording; the callers check the elapsed time to tell this from an early end.
fn ended_by_deadline(status: &tonic::Status) -> bool {
    matches!(status.code(), Code::DeadlineExceeded | Code::Cancelled)
}

async fn server_with(limits: LimitsConfig) -> (TestServer, tempfile::TempDir) {
    let dir = tempfile::tempdir().expect("temp dir");
    let serving = ServingConfig { limits, ..ServingConfig::default() };
    let server = TestServer::start_with(dir.path(), fast_forecasts(), None, serving).await;
    register(&server, two_axle_vehicle("north", "van-1")).await;
    (server, dir)
}

#[tokio::test]
async fn a_client_deadline_ends_a_stalled_stream_and_the_server_keeps_serving() {
    let (server, _dir) = server_with(LimitsConfig::default()).await;
    let (_keep_open, stream) = stalled_stream();
    let mut request = Request::new(stream);
    request.set_timeout(Duration::from_millis(700));
    let started = Instant::now();
    let status = server.telemetry().stream_trips(request).await.expect_err("the deadline passes first");
    assert!(ended_by_deadline(&status), "{status:?}");
    assert!(started.elapsed() >= Duration::from_millis(650), "not before the deadline: {:?} ({status:?})", started.elapsed());
    assert!(started.elapsed() < Duration::from_secs(30), "ended near the deadline, not by some other limit: {:?}", started.elapsed());

    // Nothing was acknowledged, so the client resends; the server still answers. Which side
    // ended the call decides whether the read trip was written: tonic's own timeout drops the
    // handler before it writes, while a client reset that reaches the handler first ends the
    // stream with an error, and what was read is written then (as at shutdown). Either way
    // the resent trip is counted once: accepted now, or found already stored.
    let report = server.telemetry().push_trips(pb::PushTripsRequest { trips: vec![trip("north", "van-1", 0, now_s() - 60)] }).await.expect("push").into_inner();
    assert_eq!((report.accepted + report.duplicates, report.rejected_count), (1, 0), "the resent trip is taken or known, once: {report:?}");
    let vehicle = server.fleet().get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "van-1".into() }).await.expect("get").into_inner();
    assert_eq!(vehicle.trips_recorded, 1, "stored once, whichever side ended the stalled call");
    server.stop().await;
}

#[tokio::test]
async fn max_call_seconds_bounds_a_call_that_sets_no_deadline() {
    let (server, _dir) = server_with(LimitsConfig { max_call_seconds: 1, ..LimitsConfig::default() }).await;
    let (_keep_open, stream) = stalled_stream();
    let started = Instant::now();
    let status = server.telemetry().stream_trips(stream).await.expect_err("the server's limit passes");
    assert!(ended_by_deadline(&status), "{status:?}");
    assert!(started.elapsed() >= Duration::from_millis(900), "not before the limit: {:?}", started.elapsed());
    assert!(started.elapsed() < Duration::from_secs(30), "{:?}", started.elapsed());
    // Calls that finish in time are untouched by the limit.
    server.fleet().get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "van-1".into() }).await.expect("quick call");
    server.stop().await;
}

#[tokio::test]
async fn records_dated_before_the_earliest_date_are_refused_with_the_field_named() {
    let (server, _dir) = server_with(LimitsConfig { earliest_record_date: "2001-01-01".into(), ..LimitsConfig::default() }).await;
    // 2000-12-31T12:00:00Z, half a day before the configured earliest date.
    let before = 978_264_000;
    // 2001-01-03T00:00:00Z.
    let after = 978_480_000;

    let old_trip = trip("north", "van-1", 1, before);
    let fine_trip = trip("north", "van-1", 2, after);
    let report = server.telemetry().push_trips(pb::PushTripsRequest { trips: vec![old_trip, fine_trip] }).await.expect("push").into_inner();
    assert_eq!(report.accepted, 1, "the trip after the earliest date is kept");
    assert_eq!(report.rejected.len(), 1, "{:?}", report.rejected);
    assert_eq!(report.rejected[0].index, 0);
    assert!(report.rejected[0].field.ends_with("_time"), "{:?}", report.rejected[0]);
    assert!(report.rejected[0].reason.contains("2001-01-01"), "names the earliest date: {:?}", report.rejected[0]);

    let mut maintenance = server.maintenance();
    let inspection = |at: i64| pb::RecordInspectionRequest {
        fleet_id: "north".into(),
        vehicle_id: "van-1".into(),
        inspection_id: format!("i-{at}"),
        axle_index: 1,
        component: pb::Component::Friction as i32,
        thickness_mm: 15.0,
        measured_at: Some(ts(at)),
    };
    let status = maintenance.record_inspection(inspection(before)).await.expect_err("too early");
    assert_eq!(status.code(), Code::InvalidArgument);
    let violation = &status.get_details_bad_request().expect("field details").field_violations[0];
    assert_eq!(violation.field, "measured_at");
    assert!(violation.description.contains("2001-01-01"), "{violation:?}");
    maintenance.record_inspection(inspection(after)).await.expect("a later inspection is kept");

    let replacement = |at: i64| pb::RecordReplacementRequest {
        fleet_id: "north".into(),
        vehicle_id: "van-1".into(),
        replacement_id: format!("r-{at}"),
        axle_index: 1,
        component: pb::Component::Friction as i32,
        new_thickness_mm: 0.0,
        replaced_at: Some(ts(at)),
    };
    let status = maintenance.record_replacement(replacement(before)).await.expect_err("too early");
    assert_eq!(status.code(), Code::InvalidArgument);
    assert_eq!(status.get_details_bad_request().expect("field details").field_violations[0].field, "replaced_at");
    maintenance.record_replacement(replacement(after)).await.expect("a later replacement is kept");

    let vehicle = server.fleet().get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "van-1".into() }).await.expect("get").into_inner();
    assert_eq!(vehicle.trips_recorded, 1, "only the accepted trip counts");
    server.stop().await;
}
