//! Rows to records: one function per table, reading the columns the queries in this engine
//! select, in the order they select them (named in each function's doc).

use brakeledger_models::domain::{Component, VehicleSpec};
use ::postgres::Row;

use crate::auth::roles::Role;
use crate::store::records::RecordKind;
use crate::store::{
    AuditCursor, AuditRecord, CorrectionRecord, DailyEnergy, FleetRecord, InspectionRecord, ReplacementRecord, StoreError, StoreResult, TokenRecord,
    TripRecord, VehicleRecord, VehicleTotals,
};

/// The code stored for a component (the same order as the sled due-index keys).
pub fn component_code(component: Component) -> i16 {
    match component {
        Component::Friction => 1,
        Component::Disc => 2,
    }
}

/// The component of a stored code.
pub fn component_of_code(code: i16) -> StoreResult<Component> {
    match code {
        1 => Ok(Component::Friction),
        2 => Ok(Component::Disc),
        other => Err(StoreError::Corrupt(format!("component code {other}"))),
    }
}

/// The code stored for a kind of workshop record (the sled engine's correction-key letter).
pub fn kind_code(kind: RecordKind) -> i8 {
    match kind {
        RecordKind::Inspection => b'i' as i8,
        RecordKind::Replacement => b'r' as i8,
    }
}

fn kind_of_code(code: i8) -> StoreResult<RecordKind> {
    match code as u8 {
        b'i' => Ok(RecordKind::Inspection),
        b'r' => Ok(RecordKind::Replacement),
        other => Err(StoreError::Corrupt(format!("record kind code {other}"))),
    }
}

fn axle(value: i64) -> StoreResult<u32> {
    u32::try_from(value).map_err(|_| StoreError::Corrupt(format!("axle index {value}")))
}

fn role(name: &str) -> StoreResult<Role> {
    Role::from_name(name).ok_or_else(|| StoreError::Corrupt(format!("role '{name}'")))
}

/// `fleet_id, time_zone, display_name`
pub fn fleet(row: &Row) -> FleetRecord {
    FleetRecord { fleet_id: row.get(0), time_zone: row.get(1), display_name: row.get(2) }
}

/// The vehicle spec as stored (JSON text).
pub fn spec_json(spec: &VehicleSpec) -> StoreResult<String> {
    serde_json::to_string(spec).map_err(|e| StoreError::Corrupt(format!("encode vehicle spec: {e}")))
}

/// `fleet_id, vehicle_id, vin, spec::text`
pub fn vehicle(row: &Row) -> StoreResult<VehicleRecord> {
    let spec: String = row.get(3);
    Ok(VehicleRecord {
        fleet_id: row.get(0),
        vehicle_id: row.get(1),
        vin: row.get(2),
        spec: serde_json::from_str(&spec).map_err(|e| StoreError::Corrupt(format!("vehicle spec: {e}")))?,
    })
}

/// `trips_recorded, friction_energy_j, distance_m, last_trip_end_ms`
pub fn totals(row: &Row) -> VehicleTotals {
    VehicleTotals {
        trips_recorded: row.get::<_, i64>(0).max(0) as u64,
        friction_energy_j: row.get(1),
        distance_m: row.get(2),
        last_trip_end_ms: row.get(3),
    }
}

/// `fleet_id, vehicle_id, trip_id, start_ms, end_ms, distance_m, friction_energy_j,
/// axle_energy_j, axle_split_reported, brake_applications, regen_energy_j, hot_energy_j`
pub fn trip(row: &Row) -> StoreResult<TripRecord> {
    let applications: i64 = row.get(9);
    Ok(TripRecord {
        fleet_id: row.get(0),
        vehicle_id: row.get(1),
        trip_id: row.get(2),
        start_ms: row.get(3),
        end_ms: row.get(4),
        distance_m: row.get(5),
        friction_energy_j: row.get(6),
        axle_energy_j: row.get(7),
        axle_split_reported: row.get(8),
        brake_applications: u32::try_from(applications).map_err(|_| StoreError::Corrupt(format!("brake applications {applications}")))?,
        regen_energy_j: row.get(10),
        hot_energy_j: row.get(11),
    })
}

/// `day, axle_energy_j, axle_hot_energy_j, trips, distance_m`
pub fn daily(row: &Row) -> StoreResult<DailyEnergy> {
    let trips: i64 = row.get(3);
    Ok(DailyEnergy {
        day: row.get(0),
        axle_energy_j: row.get(1),
        axle_hot_energy_j: row.get(2),
        trips: u32::try_from(trips).map_err(|_| StoreError::Corrupt(format!("trips of a day {trips}")))?,
        distance_m: row.get(4),
    })
}

/// `fleet_id, vehicle_id, inspection_id, axle_index, component, thickness_mm, measured_at_ms`
pub fn inspection(row: &Row) -> StoreResult<InspectionRecord> {
    Ok(InspectionRecord {
        fleet_id: row.get(0),
        vehicle_id: row.get(1),
        inspection_id: row.get(2),
        axle_index: axle(row.get(3))?,
        component: component_of_code(row.get(4))?,
        thickness_mm: row.get(5),
        measured_at_ms: row.get(6),
    })
}

/// `fleet_id, vehicle_id, replacement_id, axle_index, component, new_thickness_mm, replaced_at_ms`
pub fn replacement(row: &Row) -> StoreResult<ReplacementRecord> {
    Ok(ReplacementRecord {
        fleet_id: row.get(0),
        vehicle_id: row.get(1),
        replacement_id: row.get(2),
        axle_index: axle(row.get(3))?,
        component: component_of_code(row.get(4))?,
        new_thickness_mm: row.get(5),
        replaced_at_ms: row.get(6),
    })
}

/// `fleet_id, vehicle_id, kind, record_id, reason, corrected_at_ms, superseded_by`
pub fn correction(row: &Row) -> StoreResult<CorrectionRecord> {
    Ok(CorrectionRecord {
        fleet_id: row.get(0),
        vehicle_id: row.get(1),
        kind: kind_of_code(row.get(2))?,
        record_id: row.get(3),
        reason: row.get(4),
        corrected_at_ms: row.get(5),
        superseded_by: row.get(6),
    })
}

/// `secret_sha256, token_id, fleet_id, role, label, created_at_ms, created_by, revoked_at_ms`
pub fn token(row: &Row) -> StoreResult<TokenRecord> {
    let hash: Vec<u8> = row.get(0);
    Ok(TokenRecord {
        secret_sha256: hash.as_slice().try_into().map_err(|_| StoreError::Corrupt("token hash".into()))?,
        token_id: row.get(1),
        fleet_id: row.get(2),
        role: role(row.get(3))?,
        label: row.get(4),
        created_at_ms: row.get(5),
        created_by: row.get(6),
        revoked_at_ms: row.get(7),
    })
}

/// `fleet_id, at_ms, sequence, token_id, role, action, subject`
pub fn audit(row: &Row) -> StoreResult<(AuditCursor, AuditRecord)> {
    let sequence: i64 = row.get(2);
    let entry = AuditRecord { fleet_id: row.get(0), at_ms: row.get(1), token_id: row.get(3), role: role(row.get(4))?, action: row.get(5), subject: row.get(6) };
    Ok((AuditCursor { at_ms: entry.at_ms, sequence: sequence.max(0) as u64 }, entry))
}

/// The columns [`trip`] reads, for SELECTs.
pub const TRIP_COLUMNS: &str =
    "fleet_id, vehicle_id, trip_id, start_ms, end_ms, distance_m, friction_energy_j, axle_energy_j, axle_split_reported, brake_applications, regen_energy_j, hot_energy_j";
/// The columns [`inspection`] reads.
pub const INSPECTION_COLUMNS: &str = "fleet_id, vehicle_id, inspection_id, axle_index, component, thickness_mm, measured_at_ms";
/// The columns [`replacement`] reads.
pub const REPLACEMENT_COLUMNS: &str = "fleet_id, vehicle_id, replacement_id, axle_index, component, new_thickness_mm, replaced_at_ms";
/// The columns [`correction`] reads.
pub const CORRECTION_COLUMNS: &str = "fleet_id, vehicle_id, kind, record_id, reason, corrected_at_ms, superseded_by";
/// The columns [`token`] reads.
pub const TOKEN_COLUMNS: &str = "secret_sha256, token_id, fleet_id, role, label, created_at_ms, created_by, revoked_at_ms";
/// The columns [`audit`] reads.
pub const AUDIT_COLUMNS: &str = "fleet_id, at_ms, sequence, token_id, role, action, subject";
/// The columns [`vehicle`] reads.
pub const VEHICLE_COLUMNS: &str = "fleet_id, vehicle_id, vin, spec::text";
/// The columns [`daily`] reads.
pub const DAILY_COLUMNS: &str = "day, axle_energy_j, axle_hot_energy_j, trips, distance_m";
/// The columns [`totals`] reads.
pub const TOTALS_COLUMNS: &str = "trips_recorded, friction_energy_j, distance_m, last_trip_end_ms";
