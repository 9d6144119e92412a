//! MaintenanceService: inspections and replacements, idempotent by id (an id re-sent with other
//! values refused, naming the stored ones); corrections (void, supersede) kept on file with
//! their status, taken out of the forecasts at once.

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, register, ts, two_axle_vehicle, wait_for_forecasts, TestServer, DAY_S};

use crate::cli::brakeledger;
use crate::forecast::seeded_fleet;
use tonic_types::StatusExt;

fn inspection(id: &str, axle_index: u32, thickness_mm: f64) -> pb::RecordInspectionRequest {
    pb::RecordInspectionRequest {
        fleet_id: "north".into(),
        vehicle_id: "van-1".into(),
        inspection_id: id.into(),
        axle_index,
        component: pb::Component::Friction as i32,
        thickness_mm,
        // The start of yesterday (UTC): the same instant however often it is called.
        measured_at: Some(ts(now_s().div_euclid(DAY_S) * DAY_S - DAY_S)),
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
    // The same id with another value is refused, naming the stored value; nothing changes.
    let status = maintenance.record_inspection(inspection("i-1", 1, 21.5)).await.expect_err("other values");
    assert_eq!(status.code(), tonic::Code::AlreadyExists);
    assert!(status.message().contains("12.5 mm") && status.message().contains("21.5 mm"), "{}", status.message());

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

/// The front pad's forecast of `vehicle`: (median due, s; inspections used).
async fn front_pad(server: &TestServer, vehicle: &str) -> (i64, u32) {
    wait_for_forecasts(server).await;
    let forecast = server
        .forecast()
        .get_vehicle_forecast(pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: vehicle.into(), band_level: 0.0 })
        .await
        .expect("forecast")
        .into_inner();
    let pad = &forecast.parts[0];
    assert_eq!((pad.axle_index, pad.component), (1, pb::Component::Friction as i32));
    (pad.due_median.as_ref().expect("dated").seconds, pad.inspections_used)
}

#[tokio::test]
async fn a_mistaken_inspection_is_superseded_or_voided_kept_on_file_and_dropped_from_the_forecast() {
    let server = seeded_fleet().await;
    let mut maintenance = server.maintenance();
    let (median_before, used_before) = front_pad(&server, "van-2").await;
    let typo = pb::RecordInspectionRequest { vehicle_id: "van-2".into(), ..inspection("typo", 1, 4.2) };
    maintenance.record_inspection(typo.clone()).await.expect("typo stored");
    let (median_typo, used_typo) = front_pad(&server, "van-2").await;
    assert_eq!(used_typo, used_before + 1);
    assert!(median_typo < median_before - 30 * DAY_S, "the typo pulls the due date in");

    // Superseded by the value read off the gauge (today's estimate before the typo).
    let thickness_mm = server
        .forecast()
        .get_wear_trajectory(pb::GetWearTrajectoryRequest { fleet_id: "north".into(), vehicle_id: "van-2".into(), axle_index: 1, component: pb::Component::Friction as i32, band_level: 0.0 })
        .await
        .expect("trajectory")
        .into_inner()
        .measured
        .iter()
        .find(|m| m.inspection_id != "typo")
        .map(|m| m.thickness_mm)
        .expect("an earlier reading");
    let corrected = pb::RecordInspectionRequest { inspection_id: "typo-fixed".into(), thickness_mm: thickness_mm.min(typo.thickness_mm + 10.0), ..typo.clone() };
    let supersede = pb::SupersedeRecordRequest {
        kind: pb::RecordKind::Inspection as i32,
        superseded_id: "typo".into(),
        reason: "gauge read back wrong".into(),
        correction: Some(pb::supersede_record_request::Correction::Inspection(corrected.clone())),
    };
    assert!(!maintenance.supersede_record(supersede.clone()).await.expect("supersede").into_inner().duplicate);
    assert!(maintenance.supersede_record(supersede.clone()).await.expect("same again").into_inner().duplicate);
    let (median_fixed, used_fixed) = front_pad(&server, "van-2").await;
    assert_eq!(used_fixed, used_before + 1, "the correction is used, the typo is not");
    assert!(median_fixed > median_typo + 30 * DAY_S, "the due date moves back out");

    // A record is corrected once; an unknown id is NOT_FOUND; a reason is required.
    let void = |id: &str, reason: &str| pb::VoidRecordRequest {
        fleet_id: "north".into(),
        vehicle_id: "van-2".into(),
        kind: pb::RecordKind::Inspection as i32,
        record_id: id.into(),
        reason: reason.into(),
    };
    let status = maintenance.void_record(void("typo", "changed my mind")).await.expect_err("corrected once");
    assert_eq!(status.code(), tonic::Code::FailedPrecondition);
    assert!(status.message().contains("superseded by 'typo-fixed'"), "{}", status.message());
    assert_eq!(maintenance.void_record(void("ghost", "no such")).await.expect_err("unknown").code(), tonic::Code::NotFound);
    let status = maintenance.void_record(void("typo-fixed", " ")).await.expect_err("no reason");
    assert_eq!(status.get_details_bad_request().expect("details").field_violations[0].field, "reason");
    let same_id = pb::SupersedeRecordRequest { superseded_id: "typo-fixed".into(), ..supersede.clone() };
    assert_eq!(maintenance.supersede_record(same_id).await.expect_err("own id").code(), tonic::Code::InvalidArgument);

    // Voiding the correction through the command line leaves the vehicle's own readings.
    let said = brakeledger(&server, &["void-record", "--fleet", "north", "--vehicle", "van-2", "--inspection", "typo-fixed", "--reason", "wrong vehicle"])
        .await
        .expect("void");
    assert!(said.contains("voided"), "{said}");
    let (median_void, used_void) = front_pad(&server, "van-2").await;
    assert_eq!(used_void, used_before);
    assert!((median_void - median_before).abs() <= 2 * DAY_S, "back to the forecast before the typo");

    // Every record is kept and listed with its status.
    let records = maintenance
        .list_service_records(pb::ListServiceRecordsRequest { fleet_id: "north".into(), vehicle_id: "van-2".into() })
        .await
        .expect("records")
        .into_inner()
        .records;
    let find = |id: &str| records.iter().find(|r| r.record_id == id).unwrap_or_else(|| panic!("{id} listed"));
    let (typo_row, fixed_row) = (find("typo"), find("typo-fixed"));
    assert_eq!((typo_row.status, typo_row.superseded_by.as_str(), typo_row.reason.as_str()), (pb::RecordStatus::Superseded as i32, "typo-fixed", "gauge read back wrong"));
    assert_eq!((fixed_row.status, fixed_row.supersedes.as_str()), (pb::RecordStatus::Voided as i32, "typo"));
    assert_eq!(typo_row.thickness_mm, 4.2, "the original is kept as sent");
    assert_eq!(records.iter().filter(|r| r.status == pb::RecordStatus::InForce as i32).count(), records.len() - 2);
    let table = brakeledger(&server, &["records", "--fleet", "north", "--vehicle", "van-2"]).await.expect("records");
    let typo_line = table.lines().find(|l| l.contains(" typo ")).unwrap_or_else(|| panic!("{table}"));
    assert!(typo_line.contains("superseded") && typo_line.contains("by typo-fixed: gauge read back wrong") && typo_line.contains("pad"), "{typo_line}");
    server.stop().await;
}
