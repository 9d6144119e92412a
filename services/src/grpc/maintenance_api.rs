//! `MaintenanceService`: inspections and replacements from workshops.

use brakeledger_models::domain::{Component, FieldViolation};
use brakeledger_proto::v1 as pb;
use pb::maintenance_service_server::MaintenanceService;
use tonic::{Request, Response, Status};

use crate::auth::{Caller, Permission};
use crate::convert::{check_id, component_from_wire, now_ms, required_time_ms};
use crate::error::{ServiceError, ServiceResult};
use crate::state::AppState;
use crate::store::{InspectionRecord, ReplacementRecord, VehicleRecord};

/// How far in the future a workshop record may be dated, ms (clock skew).
const MAX_FUTURE_MS: i64 = 5 * 60 * 1000;

/// Implements `brakeledger.v1.MaintenanceService`.
pub struct MaintenanceApi {
    state: AppState,
}

impl MaintenanceApi {
    /// Handlers over shared state.
    pub fn new(state: AppState) -> Self {
        Self { state }
    }
}

/// The fields every workshop record shares, validated.
struct PartRecordFields {
    axle_index: u32,
    component: Component,
    at_ms: i64,
}

fn check_part_fields(
    ids: [(&str, &str); 3],
    axle_index: u32,
    component: i32,
    thickness: (&str, f64, bool),
    time: (&str, Option<&prost_types::Timestamp>),
) -> ServiceResult<PartRecordFields> {
    let mut violations: Vec<FieldViolation> = ids.iter().filter_map(|(f, v)| check_id(f, v).err()).collect();
    if axle_index == 0 {
        violations.push(FieldViolation::new("axle_index", "must be 1 or more (1 = front-most axle)"));
    }
    let component = component_from_wire("component", component).map_err(|v| violations.push(v)).ok();
    let (field, value, zero_allowed) = thickness;
    if !value.is_finite() || value < 0.0 || (value == 0.0 && !zero_allowed) {
        violations.push(FieldViolation::new(field, "must be a finite thickness in mm, greater than 0"));
    }
    let at_ms = match required_time_ms(time.0, time.1) {
        Ok(ms) if ms > now_ms() + MAX_FUTURE_MS => {
            violations.push(FieldViolation::new(time.0, "is more than 5 minutes in the future"));
            None
        }
        Ok(ms) => Some(ms),
        Err(v) => {
            violations.push(v);
            None
        }
    };
    match (component, at_ms) {
        (Some(component), Some(at_ms)) if violations.is_empty() => Ok(PartRecordFields { axle_index, component, at_ms }),
        _ => Err(ServiceError::InvalidArgument(violations)),
    }
}

/// Refuses a record dated before `[limits] earliest_record_date`.
fn check_not_before(field: &str, at_ms: i64, state: &AppState) -> ServiceResult<()> {
    let limits = &state.serving.limits;
    match limits.earliest_record_ms() {
        Ok(earliest) if at_ms < earliest => Err(ServiceError::invalid(
            field,
            format!("is before {}, the earliest date this server accepts ([limits] earliest_record_date)", limits.earliest_record_date),
        )),
        _ => Ok(()),
    }
}

/// Checks the axle exists on the vehicle and the thickness is within its new thickness (with a
/// 2 mm allowance for gauge error and oversize parts).
fn check_against_vehicle(vehicle: &VehicleRecord, fields: &PartRecordFields, thickness_field: &str, thickness_mm: f64) -> ServiceResult<()> {
    let Some(axle) = vehicle.spec.axles.get(fields.axle_index as usize - 1) else {
        return Err(ServiceError::invalid("axle_index", format!("the vehicle has {} axles", vehicle.spec.axles.len())));
    };
    let new_mm = axle.new_mm(fields.component);
    if thickness_mm > new_mm + 2.0 {
        return Err(ServiceError::invalid(
            thickness_field,
            format!("{thickness_mm} mm is thicker than a new part on this axle ({new_mm} mm)"),
        ));
    }
    Ok(())
}

#[tonic::async_trait]
impl MaintenanceService for MaintenanceApi {
    async fn record_inspection(&self, request: Request<pb::RecordInspectionRequest>) -> Result<Response<pb::RecordInspectionResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        caller.require(&r.fleet_id, Permission::WriteWorkshopRecords)?;
        let fields = check_part_fields(
            [("fleet_id", &r.fleet_id), ("vehicle_id", &r.vehicle_id), ("inspection_id", &r.inspection_id)],
            r.axle_index,
            r.component,
            ("thickness_mm", r.thickness_mm, true),
            ("measured_at", r.measured_at.as_ref()),
        )?;
        let vehicle = self.state.vehicle(&r.fleet_id, &r.vehicle_id).await?;
        check_against_vehicle(&vehicle, &fields, "thickness_mm", r.thickness_mm)?;
        let record = InspectionRecord {
            fleet_id: r.fleet_id,
            vehicle_id: r.vehicle_id,
            inspection_id: r.inspection_id,
            axle_index: fields.axle_index,
            component: fields.component,
            thickness_mm: r.thickness_mm,
            measured_at_ms: fields.at_ms,
        };
        check_not_before("measured_at", fields.at_ms, &self.state)?;
        let subject = format!("vehicle {} axle {} {:?} inspection {}: {} mm", record.vehicle_id, record.axle_index, record.component, record.inspection_id, record.thickness_mm);
        let fleet_id = record.fleet_id.clone();
        let inserted = self.state.blocking(move |store| Ok(store.record_inspection(&record)?)).await?;
        crate::metrics::workshop_record("inspection", inserted);
        self.state.wake_forecaster.notify_one();
        if inserted {
            self.state.audit(&caller, &fleet_id, "brakeledger.v1.MaintenanceService/RecordInspection", subject).await;
        }
        Ok(Response::new(pb::RecordInspectionResponse { duplicate: !inserted }))
    }

    async fn record_replacement(&self, request: Request<pb::RecordReplacementRequest>) -> Result<Response<pb::RecordReplacementResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        caller.require(&r.fleet_id, Permission::WriteWorkshopRecords)?;
        let fields = check_part_fields(
            [("fleet_id", &r.fleet_id), ("vehicle_id", &r.vehicle_id), ("replacement_id", &r.replacement_id)],
            r.axle_index,
            r.component,
            ("new_thickness_mm", r.new_thickness_mm, true),
            ("replaced_at", r.replaced_at.as_ref()),
        )?;
        let vehicle = self.state.vehicle(&r.fleet_id, &r.vehicle_id).await?;
        check_against_vehicle(&vehicle, &fields, "new_thickness_mm", r.new_thickness_mm)?;
        let new_thickness_mm = match r.new_thickness_mm {
            0.0 => vehicle.spec.axles[fields.axle_index as usize - 1].new_mm(fields.component),
            given => given,
        };
        let min_mm = vehicle.spec.axles[fields.axle_index as usize - 1].min_mm(fields.component);
        if new_thickness_mm <= min_mm {
            return Err(ServiceError::invalid("new_thickness_mm", format!("a fitted part must be thicker than the minimum ({min_mm} mm)")).into());
        }
        let record = ReplacementRecord {
            fleet_id: r.fleet_id,
            vehicle_id: r.vehicle_id,
            replacement_id: r.replacement_id,
            axle_index: fields.axle_index,
            component: fields.component,
            new_thickness_mm,
            replaced_at_ms: fields.at_ms,
        };
        check_not_before("replaced_at", fields.at_ms, &self.state)?;
        let subject = format!("vehicle {} axle {} {:?} replacement {}: new {} mm", record.vehicle_id, record.axle_index, record.component, record.replacement_id, record.new_thickness_mm);
        let fleet_id = record.fleet_id.clone();
        let inserted = self.state.blocking(move |store| Ok(store.record_replacement(&record)?)).await?;
        crate::metrics::workshop_record("replacement", inserted);
        self.state.wake_forecaster.notify_one();
        if inserted {
            self.state.audit(&caller, &fleet_id, "brakeledger.v1.MaintenanceService/RecordReplacement", subject).await;
        }
        Ok(Response::new(pb::RecordReplacementResponse { duplicate: !inserted }))
    }
}
