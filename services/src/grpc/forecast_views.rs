//! Conversions from forecasts (computed or materialised) to `PartForecast` messages at a
//! requested band level, with calendar dates in the fleet's time zone.

use brakeledger_models::domain::FieldViolation;
use brakeledger_proto::v1 as pb;
use chrono::TimeZone;
use chrono_tz::Tz;
use statrs::distribution::{ContinuousCDF, Normal};

use crate::convert::{component_to_wire, ms_timestamp};
use crate::error::{ServiceError, ServiceResult};
use crate::store::{days_to_ms, BandLevel, FleetRecord, StoredPart, MS_PER_DAY};
use brakeledger_models::ForecastBasis;

/// Band level of materialised thickness bands.
pub const STORED_THICKNESS_LEVEL: f64 = 0.8;
/// Widest band level served (the stored due quantiles run from 1 % to 99 %).
pub const MAX_BAND_LEVEL: f64 = 0.98;

/// The band level of a request: 0 means 0.8; otherwise strictly between 0 and 0.98.
pub fn band_level(field: &str, requested: f64) -> ServiceResult<f64> {
    if requested == 0.0 {
        return Ok(0.8);
    }
    if requested.is_finite() && requested > 0.0 && requested <= MAX_BAND_LEVEL {
        Ok(requested)
    } else {
        Err(ServiceError::invalid(field, format!("must be between 0 and {MAX_BAND_LEVEL} (0 means 0.8)")))
    }
}

/// A band level kept in the due index (ListDue, WatchDue, PlanVisits).
pub fn indexed_band_level(field: &str, requested: f64) -> ServiceResult<BandLevel> {
    let level = if requested == 0.0 { 0.8 } else { requested };
    BandLevel::from_probability(level)
        .ok_or_else(|| ServiceError::invalid(field, "must be one of 0.5, 0.8, 0.9, 0.95 (the levels kept indexed); 0 means 0.8"))
}

/// The time zone of a fleet record.
pub fn fleet_zone(fleet: &FleetRecord) -> Tz {
    fleet.time_zone.parse().unwrap_or(chrono_tz::UTC)
}

/// ISO 8601 calendar date of an instant in a time zone.
pub fn local_date(ms: i64, zone: Tz) -> String {
    match zone.timestamp_millis_opt(ms).single() {
        Some(t) => t.date_naive().to_string(),
        None => String::new(),
    }
}

/// Calendar day number (days since 1970-01-01) of an instant in a time zone.
pub fn local_day_number(ms: i64, zone: Tz) -> i64 {
    let Some(t) = zone.timestamp_millis_opt(ms).single() else {
        return ms.div_euclid(MS_PER_DAY);
    };
    let epoch = chrono::NaiveDate::from_ymd_opt(1970, 1, 1).unwrap_or_default();
    t.date_naive().signed_duration_since(epoch).num_days()
}

/// Wire basis.
pub fn basis_to_wire(basis: ForecastBasis) -> pb::ForecastBasis {
    match basis {
        ForecastBasis::VehicleData => pb::ForecastBasis::VehicleData,
        ForecastBasis::FleetPrior => pb::ForecastBasis::FleetPrior,
        ForecastBasis::Combined => pb::ForecastBasis::Combined,
    }
}

/// Standard normal quantile.
fn z(probability: f64) -> f64 {
    Normal::new(0.0, 1.0).map(|n| n.inverse_cdf(probability)).unwrap_or(f64::NAN)
}

/// `PartForecast` of a materialised part at `level`. `thickness_level` is the level its
/// thickness band was computed at; the band is rescaled to `level` as a normal band. `now_ms`
/// is when the answer is made: a part whose median due date falls on an earlier calendar day
/// (in `zone`) is marked overdue.
pub fn part_forecast(part: &StoredPart, level: f64, thickness_level: f64, zone: Tz, now_ms: i64) -> pb::PartForecast {
    let o = &part.outlook;
    let (low, high) = if (level - thickness_level).abs() < 1e-12 {
        (o.current_thickness_low_mm, o.current_thickness_high_mm)
    } else {
        let scale = z(0.5 + level / 2.0) / z(0.5 + thickness_level / 2.0);
        let mid = o.current_thickness_mm;
        ((mid - (mid - o.current_thickness_low_mm) * scale).max(0.0), mid + (o.current_thickness_high_mm - mid) * scale)
    };
    let band = part.due_band_days(level);
    let at = |pick: fn((f64, f64, f64)) -> f64| band.map(|b| days_to_ms(pick(b)));
    let (earliest, median, latest) = (at(|b| b.0), at(|b| b.1), at(|b| b.2));
    let date = |ms: Option<i64>| ms.map(|ms| local_date(ms, zone)).unwrap_or_default();
    pb::PartForecast {
        axle_index: part.axle_index,
        component: component_to_wire(part.component) as i32,
        current_thickness_mm: o.current_thickness_mm,
        current_thickness_low_mm: low,
        current_thickness_high_mm: high,
        min_thickness_mm: o.min_thickness_mm,
        wear_rate_mm_per_mj: o.wear_rate_mm_per_mj,
        wear_rate_stderr: o.wear_rate_stderr_mm_per_mj,
        daily_energy_mj: o.daily_energy_mj,
        due_earliest: earliest.map(ms_timestamp),
        due_median: median.map(ms_timestamp),
        due_latest: latest.map(ms_timestamp),
        due_earliest_date: date(earliest),
        due_median_date: date(median),
        due_latest_date: date(latest),
        basis: basis_to_wire(o.basis) as i32,
        inspections_used: o.inspections_used,
        notes: o.notes.clone(),
        band_level: level,
        due_now: o.due_now,
        overdue: median.is_some_and(|ms| local_day_number(ms, zone) < local_day_number(now_ms, zone)),
    }
}

/// Field violations of a required timestamp, as a service error.
pub fn required_time(field: &str, ts: Option<&prost_types::Timestamp>) -> ServiceResult<i64> {
    crate::convert::required_time_ms(field, ts).map_err(|v: FieldViolation| ServiceError::InvalidArgument(vec![v]))
}
