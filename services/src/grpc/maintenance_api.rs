//! `MaintenanceService`: inspections and replacements from workshops, their corrections (void,
//! supersede) and a vehicle's records with their status.

use brakeledger_models::domain::{Component, FieldViolation};
use brakeledger_proto::v1 as pb;
use pb::maintenance_service_server::MaintenanceService;
use tonic::{Request, Response, Status};

use crate::auth::{Caller, Permission};
use crate::convert::{check_id, component_from_wire, now_ms, require_ids, required_time_ms};
use crate::error::{ServiceError, ServiceResult};
use crate::grpc::service_records::{check_reason, correction_outcome, correction_record, nested, record_kind_from_wire, records_with_status, stored_once};
use crate::state::AppState;
use crate::store::{CorrectionRecord, InspectionRecord, RecordKind, ReplacementRecord, ServiceEntry, VehicleRecord};

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

impl MaintenanceApi {
    /// A validated inspection of a registered vehicle.
    async fn inspection_record(&self, r: pb::RecordInspectionRequest) -> ServiceResult<InspectionRecord> {
        let fields = check_part_fields(
            [("fleet_id", &r.fleet_id), ("vehicle_id", &r.vehicle_id), ("inspection_id", &r.inspection_id)],
            r.axle_index,
            r.component,
            ("thickness_mm", r.thickness_mm, true),
            ("measured_at", r.measured_at.as_ref()),
        )?;
        check_not_before("measured_at", fields.at_ms, &self.state)?;
        let vehicle = self.state.vehicle(&r.fleet_id, &r.vehicle_id).await?;
        check_against_vehicle(&vehicle, &fields, "thickness_mm", r.thickness_mm)?;
        Ok(InspectionRecord {
            fleet_id: r.fleet_id,
            vehicle_id: r.vehicle_id,
            inspection_id: r.inspection_id,
            axle_index: fields.axle_index,
            component: fields.component,
            thickness_mm: r.thickness_mm,
            measured_at_ms: fields.at_ms,
        })
    }

    /// Stores a validated inspection or replacement once; then wakes the forecaster, counts it
    /// and, when it was new, writes the audit entry `subject`. Returns whether it was a
    /// duplicate; the same id with other values is an error naming both.
    async fn store_workshop_record(&self, caller: &Caller, sent: ServiceEntry, subject: String) -> ServiceResult<bool> {
        let entry = sent.clone();
        let duplicate = match entry {
            ServiceEntry::Inspection(record) => {
                let outcome = self.state.blocking(move |store| Ok(store.record_inspection(&record)?)).await?;
                stored_once(outcome, &sent, ServiceEntry::Inspection)?
            }
            ServiceEntry::Replacement(record) => {
                let outcome = self.state.blocking(move |store| Ok(store.record_replacement(&record)?)).await?;
                stored_once(outcome, &sent, ServiceEntry::Replacement)?
            }
        };
        let rpc = match &sent {
            ServiceEntry::Inspection(_) => "brakeledger.v1.MaintenanceService/RecordInspection",
            ServiceEntry::Replacement(_) => "brakeledger.v1.MaintenanceService/RecordReplacement",
        };
        self.state.wake_forecaster.notify_one();
        crate::metrics::workshop_record(sent.kind().word(), !duplicate);
        if !duplicate {
            self.state.audit(caller, &fleet_of(&sent), rpc, subject).await;
        }
        Ok(duplicate)
    }

    /// A validated replacement of a registered vehicle (0 mm fitted means the vehicle's new
    /// thickness).
    async fn replacement_record(&self, r: pb::RecordReplacementRequest) -> ServiceResult<ReplacementRecord> {
        let fields = check_part_fields(
            [("fleet_id", &r.fleet_id), ("vehicle_id", &r.vehicle_id), ("replacement_id", &r.replacement_id)],
            r.axle_index,
            r.component,
            ("new_thickness_mm", r.new_thickness_mm, true),
            ("replaced_at", r.replaced_at.as_ref()),
        )?;
        check_not_before("replaced_at", fields.at_ms, &self.state)?;
        let vehicle = self.state.vehicle(&r.fleet_id, &r.vehicle_id).await?;
        check_against_vehicle(&vehicle, &fields, "new_thickness_mm", r.new_thickness_mm)?;
        let new_thickness_mm = match r.new_thickness_mm {
            0.0 => vehicle.spec.axles[fields.axle_index as usize - 1].new_mm(fields.component),
            given => given,
        };
        let min_mm = vehicle.spec.axles[fields.axle_index as usize - 1].min_mm(fields.component);
        if new_thickness_mm <= min_mm {
            return Err(ServiceError::invalid("new_thickness_mm", format!("a fitted part must be thicker than the minimum ({min_mm} mm)")));
        }
        Ok(ReplacementRecord {
            fleet_id: r.fleet_id,
            vehicle_id: r.vehicle_id,
            replacement_id: r.replacement_id,
            axle_index: fields.axle_index,
            component: fields.component,
            new_thickness_mm,
            replaced_at_ms: fields.at_ms,
        })
    }
}

#[tonic::async_trait]
impl MaintenanceService for MaintenanceApi {
    async fn record_inspection(&self, request: Request<pb::RecordInspectionRequest>) -> Result<Response<pb::RecordInspectionResponse>, Status> {
        let caller = Caller::of(&request)?;
        caller.require(&request.get_ref().fleet_id, Permission::WriteWorkshopRecords)?;
        let record = self.inspection_record(request.into_inner()).await?;
        let subject = format!("vehicle {} axle {} {:?} inspection {}: {} mm", record.vehicle_id, record.axle_index, record.component, record.inspection_id, record.thickness_mm);
        let duplicate = self.store_workshop_record(&caller, ServiceEntry::Inspection(record), subject).await?;
        Ok(Response::new(pb::RecordInspectionResponse { duplicate }))
    }

    async fn record_replacement(&self, request: Request<pb::RecordReplacementRequest>) -> Result<Response<pb::RecordReplacementResponse>, Status> {
        let caller = Caller::of(&request)?;
        caller.require(&request.get_ref().fleet_id, Permission::WriteWorkshopRecords)?;
        let record = self.replacement_record(request.into_inner()).await?;
        let subject = format!("vehicle {} axle {} {:?} replacement {}: new {} mm", record.vehicle_id, record.axle_index, record.component, record.replacement_id, record.new_thickness_mm);
        let duplicate = self.store_workshop_record(&caller, ServiceEntry::Replacement(record), subject).await?;
        Ok(Response::new(pb::RecordReplacementResponse { duplicate }))
    }

    async fn void_record(&self, request: Request<pb::VoidRecordRequest>) -> Result<Response<pb::VoidRecordResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        caller.require(&r.fleet_id, Permission::WriteWorkshopRecords)?;
        let mut violations: Vec<FieldViolation> = [("fleet_id", &r.fleet_id), ("vehicle_id", &r.vehicle_id), ("record_id", &r.record_id)]
            .iter()
            .filter_map(|(f, v)| check_id(f, v).err())
            .collect();
        let kind = record_kind_from_wire("kind", r.kind).map_err(|v| violations.push(v)).ok();
        check_reason(&r.reason).unwrap_or_else(|v| violations.push(v));
        let (Some(kind), true) = (kind, violations.is_empty()) else {
            return Err(ServiceError::InvalidArgument(violations).into());
        };
        let subject = format!("vehicle {} {} {} voided: {}", r.vehicle_id, kind.word(), r.record_id, r.reason);
        let fleet_id = r.fleet_id.clone();
        let correction = correction_record(r.fleet_id, r.vehicle_id, kind, r.record_id, r.reason, None);
        let duplicate = self.correct(correction, None).await?;
        if !duplicate {
            self.state.audit(&caller, &fleet_id, "brakeledger.v1.MaintenanceService/VoidRecord", subject).await;
        }
        Ok(Response::new(pb::VoidRecordResponse { duplicate }))
    }

    async fn supersede_record(&self, request: Request<pb::SupersedeRecordRequest>) -> Result<Response<pb::SupersedeRecordResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        // The fleet is the corrected record's; without one the request is refused below.
        let named_fleet = match &r.correction {
            Some(pb::supersede_record_request::Correction::Inspection(i)) => Some(i.fleet_id.clone()),
            Some(pb::supersede_record_request::Correction::Replacement(x)) => Some(x.fleet_id.clone()),
            None => None,
        };
        if let Some(fleet_id) = &named_fleet {
            caller.require(fleet_id, Permission::WriteWorkshopRecords)?;
        }
        let mut violations: Vec<FieldViolation> = check_id("superseded_id", &r.superseded_id).err().into_iter().collect();
        let kind = record_kind_from_wire("kind", r.kind).map_err(|v| violations.push(v)).ok();
        check_reason(&r.reason).unwrap_or_else(|v| violations.push(v));
        let correction_kind = match &r.correction {
            Some(pb::supersede_record_request::Correction::Inspection(_)) => Some(RecordKind::Inspection),
            Some(pb::supersede_record_request::Correction::Replacement(_)) => Some(RecordKind::Replacement),
            None => None,
        };
        match (kind, correction_kind) {
            (_, None) => violations.push(FieldViolation::new("correction", "is required: the corrected inspection or replacement")),
            (Some(kind), Some(given)) if kind != given => {
                violations.push(FieldViolation::new("correction", format!("must be an {} like the record it corrects", kind.word())))
            }
            _ => {}
        }
        let (Some(kind), Some(correction), true) = (kind, r.correction, violations.is_empty()) else {
            return Err(ServiceError::InvalidArgument(violations).into());
        };
        let entry = match correction {
            pb::supersede_record_request::Correction::Inspection(i) => {
                ServiceEntry::Inspection(self.inspection_record(i).await.map_err(|e| nested("inspection", e))?)
            }
            pb::supersede_record_request::Correction::Replacement(x) => {
                ServiceEntry::Replacement(self.replacement_record(x).await.map_err(|e| nested("replacement", e))?)
            }
        };
        if entry.record_id() == r.superseded_id {
            return Err(ServiceError::invalid("superseded_id", "the correction needs an id of its own, not the id of the record it corrects").into());
        }
        let (fleet_id, vehicle_id) = match &entry {
            ServiceEntry::Inspection(i) => (i.fleet_id.clone(), i.vehicle_id.clone()),
            ServiceEntry::Replacement(x) => (x.fleet_id.clone(), x.vehicle_id.clone()),
        };
        let subject = format!("vehicle {vehicle_id} {} {} superseded by {}: {}", kind.word(), r.superseded_id, entry.record_id(), r.reason);
        let audited_fleet = fleet_id.clone();
        let correction = correction_record(fleet_id, vehicle_id, kind, r.superseded_id, r.reason, Some(entry.record_id().to_owned()));
        let duplicate = self.correct(correction, Some(entry)).await?;
        if !duplicate {
            self.state.audit(&caller, &audited_fleet, "brakeledger.v1.MaintenanceService/SupersedeRecord", subject).await;
        }
        Ok(Response::new(pb::SupersedeRecordResponse { duplicate }))
    }

    async fn list_service_records(&self, request: Request<pb::ListServiceRecordsRequest>) -> Result<Response<pb::ListServiceRecordsResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        caller.require(&r.fleet_id, Permission::ReadFleet)?;
        require_ids(&[("fleet_id", &r.fleet_id), ("vehicle_id", &r.vehicle_id)])?;
        self.state.vehicle(&r.fleet_id, &r.vehicle_id).await?;
        let records = self.state.blocking(move |store| Ok(store.service_records(&r.fleet_id, &r.vehicle_id)?)).await?;
        Ok(Response::new(pb::ListServiceRecordsResponse { records: records_with_status(&records) }))
    }
}

/// The fleet a workshop record belongs to.
fn fleet_of(entry: &ServiceEntry) -> String {
    match entry {
        ServiceEntry::Inspection(i) => i.fleet_id.clone(),
        ServiceEntry::Replacement(x) => x.fleet_id.clone(),
    }
}

impl MaintenanceApi {
    /// Stores a correction (and the superseding record); true when it was a duplicate.
    async fn correct(&self, correction: CorrectionRecord, superseding: Option<ServiceEntry>) -> ServiceResult<bool> {
        self.state.vehicle(&correction.fleet_id, &correction.vehicle_id).await?;
        let sent = correction.clone();
        let outcome = self.state.blocking(move |store| Ok(store.correct_record(&correction, superseding.as_ref())?)).await?;
        let duplicate = correction_outcome(outcome, &sent)?;
        self.state.wake_forecaster.notify_one();
        Ok(duplicate)
    }
}
