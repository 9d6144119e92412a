//! Workshop records between the wire and the store for MaintenanceService: what a repeated id
//! with other values is told (the stored values), what a correction's outcome means, and a
//! vehicle's records with their status (in force, voided, superseded) for ListServiceRecords.

use std::collections::HashMap;

use brakeledger_models::domain::FieldViolation;
use brakeledger_proto::v1 as pb;

use crate::convert::{component_to_wire, ms_timestamp, now_ms};
use crate::error::{ServiceError, ServiceResult};
use crate::store::{CorrectionOutcome, CorrectionRecord, InsertOutcome, RecordKind, ServiceEntry, ServiceRecords};

/// Longest reason kept with a correction, characters.
const MAX_REASON_CHARS: usize = 500;

/// The record kind of a wire value.
pub fn record_kind_from_wire(field: &str, value: i32) -> Result<RecordKind, FieldViolation> {
    match pb::RecordKind::try_from(value) {
        Ok(pb::RecordKind::Inspection) => Ok(RecordKind::Inspection),
        Ok(pb::RecordKind::Replacement) => Ok(RecordKind::Replacement),
        Ok(pb::RecordKind::Unspecified) | Err(_) => Err(FieldViolation::new(field, "must be RECORD_KIND_INSPECTION or RECORD_KIND_REPLACEMENT")),
    }
}

fn record_kind_to_wire(kind: RecordKind) -> pb::RecordKind {
    match kind {
        RecordKind::Inspection => pb::RecordKind::Inspection,
        RecordKind::Replacement => pb::RecordKind::Replacement,
    }
}

/// A correction's reason: required, at most 500 characters.
pub fn check_reason(reason: &str) -> Result<(), FieldViolation> {
    if reason.trim().is_empty() {
        Err(FieldViolation::new("reason", "is required: say why the record is corrected"))
    } else if reason.chars().count() > MAX_REASON_CHARS {
        Err(FieldViolation::new("reason", format!("is longer than {MAX_REASON_CHARS} characters")))
    } else {
        Ok(())
    }
}

/// Field violations of a nested message, prefixed with its field name.
pub fn nested(prefix: &str, error: ServiceError) -> ServiceError {
    match error {
        ServiceError::InvalidArgument(violations) => ServiceError::invalid_in(prefix, violations),
        other => other,
    }
}

/// A correction made now.
pub fn correction_record(fleet_id: String, vehicle_id: String, kind: RecordKind, record_id: String, reason: String, superseded_by: Option<String>) -> CorrectionRecord {
    CorrectionRecord { fleet_id, vehicle_id, kind, record_id, reason: reason.trim().to_owned(), corrected_at_ms: now_ms(), superseded_by }
}

/// A record's values in plain words: "axle 1 friction part, 12.5 mm, measured at ...".
fn describe(entry: &ServiceEntry) -> String {
    let at = |ms: i64| chrono::DateTime::from_timestamp_millis(ms).map_or_else(|| ms.to_string(), |t| t.to_rfc3339_opts(chrono::SecondsFormat::Secs, true));
    let component = |c| match c {
        brakeledger_models::domain::Component::Friction => "pad or lining",
        brakeledger_models::domain::Component::Disc => "rotor or drum",
    };
    match entry {
        ServiceEntry::Inspection(i) => {
            format!("axle {} {}, {} mm measured at {}", i.axle_index, component(i.component), i.thickness_mm, at(i.measured_at_ms))
        }
        ServiceEntry::Replacement(r) => {
            format!("axle {} {}, {} mm fitted at {}", r.axle_index, component(r.component), r.new_thickness_mm, at(r.replaced_at_ms))
        }
    }
}

/// Whether a record with an idempotency key was a duplicate; ALREADY_EXISTS naming the stored
/// values when the id was taken with other values.
pub fn stored_once<T>(outcome: InsertOutcome<T>, sent: &ServiceEntry, wrap: impl Fn(T) -> ServiceEntry) -> ServiceResult<bool> {
    match outcome {
        InsertOutcome::Stored => Ok(false),
        InsertOutcome::Duplicate => Ok(true),
        InsertOutcome::Differs(stored) => Err(ServiceError::AlreadyExists(format!(
            "{} '{}' is already stored with other values ({}; this request: {}); nothing was changed. To correct it, supersede or void it (SupersedeRecord, VoidRecord)",
            sent.kind().word(),
            sent.record_id(),
            describe(&wrap(stored)),
            describe(sent)
        ))),
    }
}

/// Whether a correction was a duplicate, or the error saying why it cannot be made.
pub fn correction_outcome(outcome: CorrectionOutcome, sent: &CorrectionRecord) -> ServiceResult<bool> {
    let what = format!("{} '{}' of vehicle '{}'", sent.kind.word(), sent.record_id, sent.vehicle_id);
    match outcome {
        CorrectionOutcome::Stored => Ok(false),
        CorrectionOutcome::Duplicate => Ok(true),
        CorrectionOutcome::NoSuchRecord => Err(ServiceError::NotFound(format!("{what} is not on record"))),
        CorrectionOutcome::AlreadyCorrected(stored) => Err(ServiceError::FailedPrecondition(format!(
            "{what} was already {} ({}); a record is corrected once: correct its correction instead",
            stored.superseded_by.as_ref().map_or_else(|| "voided".to_owned(), |by| format!("superseded by '{by}'")),
            stored.reason
        ))),
        CorrectionOutcome::IdTaken => Err(ServiceError::AlreadyExists(format!(
            "the correction's id '{}' is already used by another {} of vehicle '{}'",
            sent.superseded_by.as_deref().unwrap_or_default(),
            sent.kind.word(),
            sent.vehicle_id
        ))),
    }
}

/// Every record with its status, oldest first (by time, then kind, then id).
pub fn records_with_status(records: &ServiceRecords) -> Vec<pb::ServiceRecord> {
    let corrections: HashMap<(RecordKind, &str), &CorrectionRecord> = records.corrections.iter().map(|c| ((c.kind, c.record_id.as_str()), c)).collect();
    let supersedes: HashMap<(RecordKind, &str), &str> =
        records.corrections.iter().filter_map(|c| Some(((c.kind, c.superseded_by.as_deref()?), c.record_id.as_str()))).collect();
    let row = |kind: RecordKind, id: &str, axle_index: u32, component, thickness_mm: f64, at_ms: i64| {
        let correction = corrections.get(&(kind, id));
        let status = match correction {
            None => pb::RecordStatus::InForce,
            Some(c) if c.superseded_by.is_some() => pb::RecordStatus::Superseded,
            Some(_) => pb::RecordStatus::Voided,
        };
        (
            at_ms,
            pb::ServiceRecord {
                kind: record_kind_to_wire(kind) as i32,
                record_id: id.to_owned(),
                axle_index,
                component: component_to_wire(component) as i32,
                thickness_mm,
                at: Some(ms_timestamp(at_ms)),
                status: status as i32,
                reason: correction.map(|c| c.reason.clone()).unwrap_or_default(),
                corrected_at: correction.map(|c| ms_timestamp(c.corrected_at_ms)),
                superseded_by: correction.and_then(|c| c.superseded_by.clone()).unwrap_or_default(),
                supersedes: supersedes.get(&(kind, id)).map(|s| (*s).to_owned()).unwrap_or_default(),
            },
        )
    };
    let mut rows: Vec<(i64, pb::ServiceRecord)> = records
        .all
        .inspections
        .iter()
        .map(|i| row(RecordKind::Inspection, &i.inspection_id, i.axle_index, i.component, i.thickness_mm, i.measured_at_ms))
        .chain(records.all.replacements.iter().map(|r| row(RecordKind::Replacement, &r.replacement_id, r.axle_index, r.component, r.new_thickness_mm, r.replaced_at_ms)))
        .collect();
    rows.sort_by(|a, b| (a.0, a.1.kind, &a.1.record_id).cmp(&(b.0, b.1.kind, &b.1.record_id)));
    rows.into_iter().map(|(_, r)| r).collect()
}
