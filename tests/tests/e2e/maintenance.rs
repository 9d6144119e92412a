//! MaintenanceService: inspections and replacements, idempotent by id.

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, register, ts, two_axle_vehicle, TestServer};
use tonic_types::StatusExt;

fn inspection(id: &str, axle_index: u32, thickness_mm: f64) -> pb::RecordInspectionRequest {
    pb::RecordInspectionRequest {
        fleet_id: "north".into(),
        vehicle_id: "van-1".into(),
        inspection_id: id.into(),
        axle_index,
        component: pb::Component::Friction as i32,
        thickness_mm,
        measured_at: Some(ts(now_s() - 86_400)),
    }
}

#[tokio::test]
async fn inspections_and_replacements_are_idempotent_and_validated() {
    let server = TestServer::start().await;
    register(&server, two_axle_vehicle("north", "van-1")).await;
    let mut maintenance = server.maintenance();
    let first = maintenance.record_inspection(inspection("i-1", 1, 12.5)).await.expect("record").into_inner();
    assert!(!first.duplicate);
    let again = maintenance.record_inspection(inspection("i-1", 1, 12.5)).await.expect("record").into_inner();
    assert!(again.duplicate);

    let status = maintenance.record_inspection(inspection("i-2", 3, 12.5)).await.expect_err("no axle 3");
    assert_eq!(status.code(), tonic::Code::InvalidArgument);
    let mut bad = inspection("", 0, f64::INFINITY);
    bad.component = 0;
    bad.measured_at = None;
    let status = maintenance.record_inspection(bad).await.expect_err("many problems");
    let fields: Vec<String> = status.get_error_details().bad_request().expect("details").field_violations.iter().map(|v| v.field.clone()).collect();
    assert_eq!(fields, vec!["inspection_id", "axle_index", "component", "thickness_mm", "measured_at"]);

    let replacement = pb::RecordReplacementRequest {
        fleet_id: "north".into(),
        vehicle_id: "van-1".into(),
        replacement_id: "r-1".into(),
        axle_index: 2,
        component: pb::Component::Disc as i32,
        new_thickness_mm: 0.0,
        replaced_at: Some(ts(now_s() - 3600)),
    };
    assert!(!maintenance.record_replacement(replacement.clone()).await.expect("replace").into_inner().duplicate);
    assert!(maintenance.record_replacement(replacement.clone()).await.expect("replace").into_inner().duplicate);
    let mut unknown = replacement;
    unknown.vehicle_id = "ghost".into();
    unknown.replacement_id = "r-2".into();
    assert_eq!(maintenance.record_replacement(unknown).await.expect_err("unknown").code(), tonic::Code::NotFound);
    server.stop().await;
}
