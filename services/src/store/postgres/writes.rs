//! Acknowledged writes of records (fleets, vehicles, trips, inspections, replacements,
//! corrections) and the reads of a vehicle's workshop records.
//!
//! Each runs inside the transaction the caller opened ([`super::PostgresStore`] commits it
//! before acknowledging). Rows are written in key order within a statement, so two
//! transactions that lock the same rows lock them in the same order and cannot deadlock.

use std::collections::{BTreeMap, HashMap, HashSet};

use ::postgres::{GenericClient, Transaction};

use super::derived::mark_stale;
use super::rows::{self, component_code, kind_code};
use super::Finish;
use crate::store::sled_engine::add_trip_to_day;
use crate::store::*;

/// The energy arrays of several rows as one flat array and each row's start and length in it.
/// PostgreSQL has no ragged two-dimensional arrays, so a multi-row statement takes the flat
/// array once and slices each row's part out of it (`flat[start + 1 : start + length]`).
/// Everything travels in binary, so the values arrive exactly as stored here (an earlier
/// version sent one text literal per row, which the server had to parse back into doubles).
struct FlatArrays {
    values: Vec<f64>,
    starts: Vec<i32>,
    lengths: Vec<i32>,
}

impl FlatArrays {
    fn of<'a>(rows: impl Iterator<Item = &'a [f64]>) -> StoreResult<Self> {
        let mut flat = Self { values: Vec::new(), starts: Vec::new(), lengths: Vec::new() };
        for row in rows {
            flat.starts.push(subscript(flat.values.len())?);
            flat.lengths.push(subscript(row.len())?);
            flat.values.extend_from_slice(row);
        }
        subscript(flat.values.len())?;
        Ok(flat)
    }
}

/// A position in a flat array as PostgreSQL's (int4) array subscript.
fn subscript(n: usize) -> StoreResult<i32> {
    i32::try_from(n).map_err(|_| StoreError::Engine(format!("{n} energies in one statement: too many for an array subscript")))
}

/// See [`Store::upsert_fleet`].
pub fn upsert_fleet(tx: &mut Transaction<'_>, fleet: &FleetRecord) -> StoreResult<bool> {
    let row = tx.query_one(
        "INSERT INTO fleets (fleet_id, time_zone, display_name) VALUES ($1, $2, $3)
         ON CONFLICT (fleet_id) DO UPDATE SET time_zone = EXCLUDED.time_zone, display_name = EXCLUDED.display_name
         RETURNING (xmax = 0)",
        &[&fleet.fleet_id, &fleet.time_zone, &fleet.display_name],
    )?;
    Ok(row.get(0))
}

/// See [`Store::upsert_vehicle`].
pub fn upsert_vehicle(tx: &mut Transaction<'_>, vehicle: &VehicleRecord) -> StoreResult<bool> {
    let spec = rows::spec_json(&vehicle.spec)?;
    let row = tx.query_one(
        "INSERT INTO vehicles (fleet_id, vehicle_id, vin, spec) VALUES ($1, $2, $3, $4::text::jsonb)
         ON CONFLICT (fleet_id, vehicle_id) DO UPDATE SET vin = EXCLUDED.vin, spec = EXCLUDED.spec
         RETURNING (xmax = 0)",
        &[&vehicle.fleet_id, &vehicle.vehicle_id, &vehicle.vin, &spec],
    )?;
    mark_stale(tx, &vehicle.fleet_id, std::slice::from_ref(&vehicle.vehicle_id))?;
    Ok(row.get(0))
}

/// Per-vehicle total changes gathered while ingesting a batch.
#[derive(Default)]
pub struct TotalsDelta {
    /// Trips stored.
    pub trips: i64,
    /// Their friction energy, J.
    pub energy_j: f64,
    /// Their distance, m.
    pub distance_m: f64,
    /// The latest trip end, ms.
    pub last_end_ms: Option<i64>,
}

/// See [`Store::ingest_trips`]: one multi-row insert of the trips (duplicates skipped by the
/// primary key), then one upsert of the daily roll-up and one of the totals, built from the
/// rows that insert reports as stored, then the stale marks.
pub fn ingest_trips(tx: &mut Transaction<'_>, trips: &[TripRecord]) -> StoreResult<Vec<IngestOutcome>> {
    // The first occurrence of each id in the batch is a candidate; later ones are duplicates.
    let mut first: HashMap<(&str, &str, &str), usize> = HashMap::new();
    for (index, trip) in trips.iter().enumerate() {
        first.entry((&trip.fleet_id, &trip.vehicle_id, &trip.trip_id)).or_insert(index);
    }
    let mut candidates: Vec<&TripRecord> = first.values().map(|&i| &trips[i]).collect();
    candidates.sort_by(|a, b| (&a.fleet_id, &a.vehicle_id, &a.trip_id).cmp(&(&b.fleet_id, &b.vehicle_id, &b.trip_id)));
    let stored = insert_trips(tx, &candidates)?;

    let mut outcomes = Vec::with_capacity(trips.len());
    let mut daily: BTreeMap<(&str, &str, i64), DailyEnergy> = BTreeMap::new();
    let mut totals: BTreeMap<(&str, &str), TotalsDelta> = BTreeMap::new();
    for (index, trip) in trips.iter().enumerate() {
        let key = (trip.fleet_id.as_str(), trip.vehicle_id.as_str(), trip.trip_id.as_str());
        let is_stored = first.get(&key) == Some(&index) && stored.contains(&(trip.fleet_id.clone(), trip.vehicle_id.clone(), trip.trip_id.clone()));
        if !is_stored {
            outcomes.push(IngestOutcome::Duplicate);
            continue;
        }
        outcomes.push(IngestOutcome::Stored);
        let day = utc_day(trip.end_ms);
        let entry = daily.entry((&trip.fleet_id, &trip.vehicle_id, day)).or_insert_with(|| DailyEnergy { day, ..DailyEnergy::default() });
        add_trip_to_day(entry, trip);
        let total = totals.entry((&trip.fleet_id, &trip.vehicle_id)).or_default();
        total.trips += 1;
        total.energy_j += trip.friction_energy_j;
        total.distance_m += trip.distance_m;
        total.last_end_ms = Some(total.last_end_ms.map_or(trip.end_ms, |t| t.max(trip.end_ms)));
    }
    if totals.is_empty() {
        return Ok(outcomes);
    }
    add_daily(tx, &daily)?;
    add_totals(tx, &totals)?;
    let mut by_fleet: BTreeMap<&str, Vec<String>> = BTreeMap::new();
    for (fleet, vehicle) in totals.keys() {
        by_fleet.entry(fleet).or_default().push((*vehicle).to_owned());
    }
    for (fleet, vehicles) in by_fleet {
        mark_stale(tx, fleet, &vehicles)?;
    }
    Ok(outcomes)
}

/// Inserts trips, distinct and in key order, in one statement; returns the (fleet, vehicle,
/// trip) ids of those stored now (the others were stored already, perhaps by a concurrent
/// transaction that committed first).
pub fn insert_trips(tx: &mut Transaction<'_>, candidates: &[&TripRecord]) -> StoreResult<HashSet<(String, String, String)>> {
    let fleets: Vec<&str> = candidates.iter().map(|t| t.fleet_id.as_str()).collect();
    let vehicles: Vec<&str> = candidates.iter().map(|t| t.vehicle_id.as_str()).collect();
    let ids: Vec<&str> = candidates.iter().map(|t| t.trip_id.as_str()).collect();
    let axles = FlatArrays::of(candidates.iter().map(|t| t.axle_energy_j.as_slice()))?;
    let starts: Vec<i64> = candidates.iter().map(|t| t.start_ms).collect();
    let ends: Vec<i64> = candidates.iter().map(|t| t.end_ms).collect();
    let distances: Vec<f64> = candidates.iter().map(|t| t.distance_m).collect();
    let energies: Vec<f64> = candidates.iter().map(|t| t.friction_energy_j).collect();
    let reported: Vec<bool> = candidates.iter().map(|t| t.axle_split_reported).collect();
    let applications: Vec<i64> = candidates.iter().map(|t| i64::from(t.brake_applications)).collect();
    let regen: Vec<Option<f64>> = candidates.iter().map(|t| t.regen_energy_j).collect();
    let hot: Vec<f64> = candidates.iter().map(|t| t.hot_energy_j).collect();
    let stored_rows = tx.query(
        "INSERT INTO trips (fleet_id, vehicle_id, trip_id, start_ms, end_ms, distance_m, friction_energy_j, axle_energy_j,
                            axle_split_reported, brake_applications, regen_energy_j, hot_energy_j)
         SELECT f, v, t, s, e, d, fe, ($14::float8[])[ao + 1 : ao + al], sp, ba, re, he
         FROM unnest($1::text[], $2::text[], $3::text[], $4::int8[], $5::int8[], $6::float8[], $7::float8[], $8::int4[],
                     $9::bool[], $10::int8[], $11::float8[], $12::float8[], $13::int4[]) WITH ORDINALITY AS u(f, v, t, s, e, d, fe, ao, sp, ba, re, he, al, n)
         ORDER BY n
         ON CONFLICT (fleet_id, vehicle_id, trip_id) DO NOTHING
         RETURNING fleet_id, vehicle_id, trip_id",
        &[&fleets, &vehicles, &ids, &starts, &ends, &distances, &energies, &axles.starts, &reported, &applications, &regen, &hot, &axles.lengths, &axles.values],
    )?;
    Ok(stored_rows.iter().map(|r| (r.get(0), r.get(1), r.get(2))).collect())
}

/// Adds a batch's per-day deltas to the stored roll-up (one statement).
pub fn add_daily<S: AsRef<str>>(tx: &mut Transaction<'_>, daily: &BTreeMap<(S, S, i64), DailyEnergy>) -> StoreResult<()> {
    let fleets: Vec<&str> = daily.keys().map(|k| k.0.as_ref()).collect();
    let vehicles: Vec<&str> = daily.keys().map(|k| k.1.as_ref()).collect();
    let days: Vec<i64> = daily.keys().map(|k| k.2).collect();
    let energy = FlatArrays::of(daily.values().map(|d| d.axle_energy_j.as_slice()))?;
    let hot = FlatArrays::of(daily.values().map(|d| d.axle_hot_energy_j.as_slice()))?;
    let trips: Vec<i64> = daily.values().map(|d| i64::from(d.trips)).collect();
    let distances: Vec<f64> = daily.values().map(|d| d.distance_m).collect();
    tx.execute(
        "INSERT INTO daily_energy (fleet_id, vehicle_id, day, axle_energy_j, axle_hot_energy_j, trips, distance_m)
         SELECT f, v, d, ($10::float8[])[ao + 1 : ao + al], ($11::float8[])[ho + 1 : ho + hl], t, m
         FROM unnest($1::text[], $2::text[], $3::int8[], $4::int4[], $5::int4[], $6::int8[], $7::float8[], $8::int4[], $9::int4[])
              WITH ORDINALITY AS u(f, v, d, ao, ho, t, m, al, hl, n)
         ORDER BY n
         ON CONFLICT (fleet_id, vehicle_id, day) DO UPDATE SET
           axle_energy_j = brakeledger_add_arrays(daily_energy.axle_energy_j, EXCLUDED.axle_energy_j),
           axle_hot_energy_j = brakeledger_add_arrays(daily_energy.axle_hot_energy_j, EXCLUDED.axle_hot_energy_j),
           trips = daily_energy.trips + EXCLUDED.trips,
           distance_m = daily_energy.distance_m + EXCLUDED.distance_m",
        &[&fleets, &vehicles, &days, &energy.starts, &hot.starts, &trips, &distances, &energy.lengths, &hot.lengths, &energy.values, &hot.values],
    )?;
    Ok(())
}

/// Adds a batch's per-vehicle deltas to the stored totals (one statement).
pub fn add_totals<S: AsRef<str>>(tx: &mut Transaction<'_>, totals: &BTreeMap<(S, S), TotalsDelta>) -> StoreResult<()> {
    let fleets: Vec<&str> = totals.keys().map(|k| k.0.as_ref()).collect();
    let vehicles: Vec<&str> = totals.keys().map(|k| k.1.as_ref()).collect();
    let trips: Vec<i64> = totals.values().map(|t| t.trips).collect();
    let energy: Vec<f64> = totals.values().map(|t| t.energy_j).collect();
    let distance: Vec<f64> = totals.values().map(|t| t.distance_m).collect();
    let last: Vec<Option<i64>> = totals.values().map(|t| t.last_end_ms).collect();
    tx.execute(
        "INSERT INTO vehicle_totals (fleet_id, vehicle_id, trips_recorded, friction_energy_j, distance_m, last_trip_end_ms)
         SELECT f, v, t, e, d, l
         FROM unnest($1::text[], $2::text[], $3::int8[], $4::float8[], $5::float8[], $6::int8[]) WITH ORDINALITY AS u(f, v, t, e, d, l, n)
         ORDER BY n
         ON CONFLICT (fleet_id, vehicle_id) DO UPDATE SET
           trips_recorded = vehicle_totals.trips_recorded + EXCLUDED.trips_recorded,
           friction_energy_j = vehicle_totals.friction_energy_j + EXCLUDED.friction_energy_j,
           distance_m = vehicle_totals.distance_m + EXCLUDED.distance_m,
           last_trip_end_ms = greatest(vehicle_totals.last_trip_end_ms, EXCLUDED.last_trip_end_ms)",
        &[&fleets, &vehicles, &trips, &energy, &distance, &last],
    )?;
    Ok(())
}

/// Inserts an inspection unless its id is taken; true when stored now.
pub fn insert_inspection(tx: &mut impl GenericClient, r: &InspectionRecord) -> StoreResult<bool> {
    let axle = i64::from(r.axle_index);
    let inserted = tx.query_opt(
        "INSERT INTO inspections (fleet_id, vehicle_id, inspection_id, axle_index, component, thickness_mm, measured_at_ms)
         VALUES ($1, $2, $3, $4, $5, $6, $7) ON CONFLICT DO NOTHING RETURNING 1",
        &[&r.fleet_id, &r.vehicle_id, &r.inspection_id, &axle, &component_code(r.component), &r.thickness_mm, &r.measured_at_ms],
    )?;
    Ok(inserted.is_some())
}

/// Inserts a replacement unless its id is taken; true when stored now.
pub fn insert_replacement(tx: &mut impl GenericClient, r: &ReplacementRecord) -> StoreResult<bool> {
    let axle = i64::from(r.axle_index);
    let inserted = tx.query_opt(
        "INSERT INTO replacements (fleet_id, vehicle_id, replacement_id, axle_index, component, new_thickness_mm, replaced_at_ms)
         VALUES ($1, $2, $3, $4, $5, $6, $7) ON CONFLICT DO NOTHING RETURNING 1",
        &[&r.fleet_id, &r.vehicle_id, &r.replacement_id, &axle, &component_code(r.component), &r.new_thickness_mm, &r.replaced_at_ms],
    )?;
    Ok(inserted.is_some())
}

/// Stored now, or what is stored under the same id compared with `record`.
fn outcome_of<T: PartialEq>(stored_now: bool, stored: impl FnOnce() -> StoreResult<Option<T>>, record: &T) -> StoreResult<InsertOutcome<T>> {
    if stored_now {
        return Ok(InsertOutcome::Stored);
    }
    match stored()? {
        Some(stored) if &stored == record => Ok(InsertOutcome::Duplicate),
        Some(stored) => Ok(InsertOutcome::Differs(stored)),
        // The conflicting row is committed before ON CONFLICT reports it, and never deleted.
        None => Err(StoreError::Conflict),
    }
}

/// See [`Store::record_inspection`].
pub fn record_inspection(tx: &mut Transaction<'_>, r: &InspectionRecord) -> StoreResult<InsertOutcome<InspectionRecord>> {
    let stored_now = insert_inspection(tx, r)?;
    if stored_now {
        mark_stale(tx, &r.fleet_id, std::slice::from_ref(&r.vehicle_id))?;
    }
    let sql = format!("SELECT {} FROM inspections WHERE fleet_id = $1 AND vehicle_id = $2 AND inspection_id = $3", rows::INSPECTION_COLUMNS);
    outcome_of(stored_now, || tx.query_opt(&sql, &[&r.fleet_id, &r.vehicle_id, &r.inspection_id])?.map(|row| rows::inspection(&row)).transpose(), r)
}

/// See [`Store::record_replacement`].
pub fn record_replacement(tx: &mut Transaction<'_>, r: &ReplacementRecord) -> StoreResult<InsertOutcome<ReplacementRecord>> {
    let stored_now = insert_replacement(tx, r)?;
    if stored_now {
        mark_stale(tx, &r.fleet_id, std::slice::from_ref(&r.vehicle_id))?;
    }
    let sql = format!("SELECT {} FROM replacements WHERE fleet_id = $1 AND vehicle_id = $2 AND replacement_id = $3", rows::REPLACEMENT_COLUMNS);
    outcome_of(stored_now, || tx.query_opt(&sql, &[&r.fleet_id, &r.vehicle_id, &r.replacement_id])?.map(|row| rows::replacement(&row)).transpose(), r)
}

/// See [`Store::correct_record`]: the correction is inserted first (its primary key decides
/// between two concurrent corrections), then the superseding record; a taken id rolls both back.
pub fn correct_record(tx: &mut Transaction<'_>, correction: &CorrectionRecord, superseding: Option<&ServiceEntry>) -> StoreResult<Finish<CorrectionOutcome>> {
    let (fleet_id, vehicle_id) = (&correction.fleet_id, &correction.vehicle_id);
    let table = match correction.kind {
        RecordKind::Inspection => "SELECT 1 FROM inspections WHERE fleet_id = $1 AND vehicle_id = $2 AND inspection_id = $3",
        RecordKind::Replacement => "SELECT 1 FROM replacements WHERE fleet_id = $1 AND vehicle_id = $2 AND replacement_id = $3",
    };
    if tx.query_opt(table, &[fleet_id, vehicle_id, &correction.record_id])?.is_none() {
        return Ok(Finish::Commit(CorrectionOutcome::NoSuchRecord));
    }
    let kind = kind_code(correction.kind);
    let inserted = tx.query_opt(
        "INSERT INTO corrections (fleet_id, vehicle_id, kind, record_id, reason, corrected_at_ms, superseded_by)
         VALUES ($1, $2, $3, $4, $5, $6, $7) ON CONFLICT DO NOTHING RETURNING 1",
        &[fleet_id, vehicle_id, &kind, &correction.record_id, &correction.reason, &correction.corrected_at_ms, &correction.superseded_by],
    )?;
    if inserted.is_none() {
        let sql = format!("SELECT {} FROM corrections WHERE fleet_id = $1 AND vehicle_id = $2 AND kind = $3 AND record_id = $4", rows::CORRECTION_COLUMNS);
        let stored = tx.query_opt(&sql, &[fleet_id, vehicle_id, &kind, &correction.record_id])?.ok_or(StoreError::Conflict)?;
        let stored = rows::correction(&stored)?;
        return Ok(Finish::Commit(if stored.same_as(correction) { CorrectionOutcome::Duplicate } else { CorrectionOutcome::AlreadyCorrected(stored) }));
    }
    let superseding_stored = match superseding {
        Some(ServiceEntry::Inspection(r)) => insert_inspection(tx, r)?,
        Some(ServiceEntry::Replacement(r)) => insert_replacement(tx, r)?,
        None => true,
    };
    if !superseding_stored {
        return Ok(Finish::Rollback(CorrectionOutcome::IdTaken));
    }
    mark_stale(tx, fleet_id, std::slice::from_ref(vehicle_id))?;
    Ok(Finish::Commit(CorrectionOutcome::Stored))
}

/// See [`Store::service_records`].
pub fn service_records(client: &mut impl GenericClient, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceRecords> {
    let inspections = format!(
        "SELECT {} FROM inspections WHERE fleet_id = $1 AND vehicle_id = $2 ORDER BY measured_at_ms, inspection_id",
        rows::INSPECTION_COLUMNS
    );
    let replacements = format!(
        "SELECT {} FROM replacements WHERE fleet_id = $1 AND vehicle_id = $2 ORDER BY replaced_at_ms, replacement_id",
        rows::REPLACEMENT_COLUMNS
    );
    let corrections = format!("SELECT {} FROM corrections WHERE fleet_id = $1 AND vehicle_id = $2 ORDER BY kind, record_id", rows::CORRECTION_COLUMNS);
    let inspections = client.query(&inspections, &[&fleet_id, &vehicle_id])?.iter().map(rows::inspection).collect::<StoreResult<_>>()?;
    let replacements = client.query(&replacements, &[&fleet_id, &vehicle_id])?.iter().map(rows::replacement).collect::<StoreResult<_>>()?;
    let corrections = client.query(&corrections, &[&fleet_id, &vehicle_id])?.iter().map(rows::correction).collect::<StoreResult<_>>()?;
    Ok(ServiceRecords { all: ServiceHistory { inspections, replacements }, corrections })
}

/// The records neither voided nor superseded.
pub fn in_force(all: ServiceHistory, corrections: &[CorrectionRecord]) -> ServiceHistory {
    let corrected: HashSet<(RecordKind, &str)> = corrections.iter().map(|c| (c.kind, c.record_id.as_str())).collect();
    ServiceHistory {
        inspections: all.inspections.into_iter().filter(|i| !corrected.contains(&(RecordKind::Inspection, i.inspection_id.as_str()))).collect(),
        replacements: all.replacements.into_iter().filter(|r| !corrected.contains(&(RecordKind::Replacement, r.replacement_id.as_str()))).collect(),
    }
}
