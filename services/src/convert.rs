//! Conversions between the wire contract (`brakeledger.v1`) and the domain and storage records,
//! with field-level validation. Past this module, values are valid by construction.

use brakeledger_models::domain::{AxleBrake, BrakeType, Component, FieldViolation, VehicleSpec};
use brakeledger_models::plausibility::{check_trip, TripFacts};
use brakeledger_proto::v1 as pb;
use prost_types::Timestamp;

use crate::error::{quote_prefix, ServiceError, ServiceResult};
use crate::store::{FleetRecord, TripRecord, VehicleRecord};

/// Longest identifier, bytes.
pub const MAX_ID_BYTES: usize = 128;

/// Checks an identifier: non-empty, at most [`MAX_ID_BYTES`], no NUL or control characters.
pub fn check_id(field: &str, value: &str) -> Result<(), FieldViolation> {
    if value.is_empty() {
        Err(FieldViolation::new(field, "must not be empty"))
    } else if value.len() > MAX_ID_BYTES {
        Err(FieldViolation::new(field, format!("must be at most {MAX_ID_BYTES} bytes")))
    } else if value.chars().any(char::is_control) {
        Err(FieldViolation::new(field, "must not contain control characters"))
    } else {
        Ok(())
    }
}

/// Checks several identifiers and returns INVALID_ARGUMENT listing every bad one.
pub fn require_ids(ids: &[(&str, &str)]) -> ServiceResult<()> {
    let violations: Vec<_> = ids.iter().filter_map(|(field, value)| check_id(field, value).err()).collect();
    if violations.is_empty() {
        Ok(())
    } else {
        Err(ServiceError::InvalidArgument(violations))
    }
}

/// Milliseconds since the Unix epoch of a timestamp, if it is a valid one.
pub fn timestamp_ms(ts: &Timestamp) -> Option<i64> {
    if !(0..1_000_000_000).contains(&ts.nanos) {
        return None;
    }
    ts.seconds.checked_mul(1000)?.checked_add(i64::from(ts.nanos / 1_000_000))
}

/// A required timestamp field, in ms.
pub fn required_time_ms(field: &str, ts: Option<&Timestamp>) -> Result<i64, FieldViolation> {
    match ts {
        None => Err(FieldViolation::new(field, "is required")),
        Some(ts) => timestamp_ms(ts).ok_or_else(|| FieldViolation::new(field, "is not a valid timestamp")),
    }
}

/// A timestamp from ms since the Unix epoch.
pub fn ms_timestamp(ms: i64) -> Timestamp {
    Timestamp { seconds: ms.div_euclid(1000), nanos: (ms.rem_euclid(1000) * 1_000_000) as i32 }
}

/// Server clock, ms since the Unix epoch.
pub fn now_ms() -> i64 {
    chrono::Utc::now().timestamp_millis()
}

/// Domain component of a wire component (UNSPECIFIED is refused).
pub fn component_from_wire(field: &str, value: i32) -> Result<Component, FieldViolation> {
    match pb::Component::try_from(value) {
        Ok(pb::Component::Friction) => Ok(Component::Friction),
        Ok(pb::Component::Disc) => Ok(Component::Disc),
        Ok(pb::Component::Unspecified) | Err(_) => {
            Err(FieldViolation::new(field, "must be COMPONENT_FRICTION or COMPONENT_DISC"))
        }
    }
}

/// Wire component of a domain component.
pub fn component_to_wire(component: Component) -> pb::Component {
    match component {
        Component::Friction => pb::Component::Friction,
        Component::Disc => pb::Component::Disc,
    }
}

/// Longest part of an offending value quoted back in an error, characters.
pub const MAX_QUOTED_CHARS: usize = 64;

/// Longest vehicle class, characters.
pub const MAX_CLASS_CHARS: usize = 64;
/// Longest display name, characters.
pub const MAX_NAME_CHARS: usize = 200;

/// A vehicle class groups vehicles for fleet pooling: 1 to 64 characters, letters, digits,
/// space, '.', '_' and '-' (so classes print and sort plainly and a typo is visible).
pub fn check_vehicle_class(class: &str) -> Result<(), FieldViolation> {
    let count = class.chars().count();
    if count == 0 || count > MAX_CLASS_CHARS {
        return Err(FieldViolation::new("vehicle_class", format!("must be 1 to {MAX_CLASS_CHARS} characters")));
    }
    if !class.chars().all(|c| c.is_alphanumeric() || matches!(c, ' ' | '.' | '_' | '-')) {
        return Err(FieldViolation::new("vehicle_class", "may hold letters, digits, spaces, '.', '_' and '-' only"));
    }
    Ok(())
}

/// A name for people: at most 200 characters, no control characters.
pub fn check_display_name(field: &str, name: &str) -> Result<(), FieldViolation> {
    if name.chars().count() > MAX_NAME_CHARS || name.chars().any(char::is_control) {
        return Err(FieldViolation::new(field, format!("must be at most {MAX_NAME_CHARS} characters, without control characters")));
    }
    Ok(())
}

/// Checks an IANA time zone name; empty means UTC.
pub fn parse_time_zone(field: &str, name: &str) -> Result<chrono_tz::Tz, FieldViolation> {
    if name.is_empty() {
        return Ok(chrono_tz::UTC);
    }
    name.parse::<chrono_tz::Tz>()
        .map_err(|_| FieldViolation::new(field, format!("'{}' is not an IANA time zone name", quote_prefix(name, MAX_QUOTED_CHARS))))
}

impl TryFrom<pb::Fleet> for FleetRecord {
    type Error = ServiceError;

    fn try_from(fleet: pb::Fleet) -> ServiceResult<Self> {
        let mut violations = Vec::new();
        if let Err(v) = check_id("fleet.fleet_id", &fleet.fleet_id) {
            violations.push(v);
        }
        let tz = match parse_time_zone("fleet.time_zone", &fleet.time_zone) {
            Ok(tz) => tz,
            Err(v) => {
                violations.push(v);
                chrono_tz::UTC
            }
        };
        if let Err(v) = check_display_name("fleet.display_name", &fleet.display_name) {
            violations.push(v);
        }
        if !violations.is_empty() {
            return Err(ServiceError::InvalidArgument(violations));
        }
        Ok(FleetRecord { fleet_id: fleet.fleet_id, time_zone: tz.name().to_owned(), display_name: fleet.display_name })
    }
}

impl From<FleetRecord> for pb::Fleet {
    fn from(fleet: FleetRecord) -> Self {
        pb::Fleet { fleet_id: fleet.fleet_id, time_zone: fleet.time_zone, display_name: fleet.display_name }
    }
}

impl TryFrom<pb::Vehicle> for VehicleRecord {
    type Error = ServiceError;

    fn try_from(vehicle: pb::Vehicle) -> ServiceResult<Self> {
        let mut violations = Vec::new();
        for (field, value) in [("fleet_id", &vehicle.fleet_id), ("vehicle_id", &vehicle.vehicle_id)] {
            if let Err(v) = check_id(field, value) {
                violations.push(v);
            }
        }
        if let Some(vin) = &vehicle.vin {
            // ISO 3779: 17 characters, digits and capital letters except I, O and Q.
            let valid = vin.len() == 17
                && vin.chars().all(|c| c.is_ascii_digit() || (c.is_ascii_uppercase() && !matches!(c, 'I' | 'O' | 'Q')));
            if !valid {
                violations.push(FieldViolation::new("vin", "must be 17 characters: digits and capital letters except I, O, Q (ISO 3779)"));
            }
        }
        if let Err(v) = check_vehicle_class(&vehicle.vehicle_class) {
            violations.push(v);
        }
        let mut axles = Vec::with_capacity(vehicle.axles.len());
        for (i, axle) in vehicle.axles.iter().enumerate() {
            let brake_type = match pb::BrakeType::try_from(axle.brake_type) {
                Ok(pb::BrakeType::Disc) => BrakeType::Disc,
                Ok(pb::BrakeType::Drum) => BrakeType::Drum,
                Ok(pb::BrakeType::Unspecified) | Err(_) => {
                    violations.push(FieldViolation::new(format!("axles[{i}].brake_type"), "must be BRAKE_TYPE_DISC or BRAKE_TYPE_DRUM"));
                    BrakeType::Disc
                }
            };
            axles.push(AxleBrake {
                axle_index: axle.axle_index,
                brake_type,
                energy_share: axle.energy_share,
                friction_new_mm: axle.friction_new_mm,
                friction_min_mm: axle.friction_min_mm,
                disc_new_mm: axle.disc_new_mm,
                disc_min_mm: axle.disc_min_mm,
            });
        }
        let spec = VehicleSpec { vehicle_class: vehicle.vehicle_class, mass_kg: vehicle.mass_kg, axles };
        if let Err(mut more) = spec.validate() {
            violations.append(&mut more);
        }
        if !violations.is_empty() {
            return Err(ServiceError::invalid_in("vehicle", violations));
        }
        Ok(VehicleRecord { fleet_id: vehicle.fleet_id, vehicle_id: vehicle.vehicle_id, vin: vehicle.vin, spec })
    }
}

impl From<VehicleRecord> for pb::Vehicle {
    fn from(v: VehicleRecord) -> Self {
        pb::Vehicle {
            fleet_id: v.fleet_id,
            vehicle_id: v.vehicle_id,
            vin: v.vin,
            vehicle_class: v.spec.vehicle_class,
            mass_kg: v.spec.mass_kg,
            axles: v
                .spec
                .axles
                .into_iter()
                .map(|a| pb::AxleBrake {
                    axle_index: a.axle_index,
                    brake_type: match a.brake_type {
                        BrakeType::Disc => pb::BrakeType::Disc,
                        BrakeType::Drum => pb::BrakeType::Drum,
                    } as i32,
                    energy_share: a.energy_share,
                    friction_new_mm: a.friction_new_mm,
                    friction_min_mm: a.friction_min_mm,
                    disc_new_mm: a.disc_new_mm,
                    disc_min_mm: a.disc_min_mm,
                })
                .collect(),
        }
    }
}

/// Validates one trip against its vehicle and the physical limits, and resolves its per-axle
/// energy. Returns every violation found.
pub fn trip_record(trip: pb::TripSummary, vehicle: &VehicleRecord, now_ms: i64) -> Result<TripRecord, Vec<FieldViolation>> {
    let mut violations = Vec::new();
    if let Err(v) = check_id("trip_id", &trip.trip_id) {
        violations.push(v);
    }
    let start_ms = required_time_ms("start_time", trip.start_time.as_ref());
    let end_ms = required_time_ms("end_time", trip.end_time.as_ref());
    let (start_ms, end_ms) = match (start_ms, end_ms) {
        (Ok(s), Ok(e)) => (s, e),
        (s, e) => {
            violations.extend(s.err());
            violations.extend(e.err());
            return Err(violations);
        }
    };
    let facts = TripFacts {
        start_unix_s: start_ms as f64 / 1000.0,
        end_unix_s: end_ms as f64 / 1000.0,
        distance_m: trip.distance_m,
        friction_energy_j: trip.friction_energy_j,
        axle_energy_j: trip.axle_energy_j.clone(),
        brake_applications: trip.brake_applications,
        regen_energy_j: trip.regen_energy_j,
        hot_energy_j: trip.hot_energy_j,
    };
    if let Err(mut more) = check_trip(&vehicle.spec, &facts, now_ms as f64 / 1000.0) {
        violations.append(&mut more);
    }
    // Retarder energy is not part of friction_energy_j: only its form is checked here.
    if let Some(retarder) = trip.retarder_energy_j {
        if !(retarder.is_finite() && retarder >= 0.0) {
            violations.push(FieldViolation::new("retarder_energy_j", "must be a finite number of J, 0 or more"));
        }
    }
    if !violations.is_empty() {
        return Err(violations);
    }
    let axle_split_reported = !trip.axle_energy_j.is_empty();
    let axle_energy_j = if axle_split_reported {
        trip.axle_energy_j
    } else {
        vehicle.spec.axles.iter().map(|a| a.energy_share * trip.friction_energy_j).collect()
    };
    Ok(TripRecord {
        fleet_id: trip.fleet_id,
        vehicle_id: trip.vehicle_id,
        trip_id: trip.trip_id,
        start_ms,
        end_ms,
        distance_m: trip.distance_m,
        friction_energy_j: trip.friction_energy_j,
        axle_energy_j,
        axle_split_reported,
        brake_applications: trip.brake_applications,
        regen_energy_j: trip.regen_energy_j,
        hot_energy_j: trip.hot_energy_j.unwrap_or(0.0),
    })
}
