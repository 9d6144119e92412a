//! The backup file ([`crate::store::backup_file`]) from and into PostgreSQL.
//!
//! Export reads every record table in one read-only REPEATABLE READ transaction (one
//! snapshot, so the copy is consistent while writes go on) and writes each row as the sled
//! engine keys and encodes it, so a backup taken from either engine restores into either.
//! Restore verifies the file completely, then loads it into an empty database in one
//! transaction (trips and roll-ups by multi-row statements) and marks every vehicle stale so
//! the forecasts are rebuilt.

use std::cell::RefCell;
use std::collections::BTreeMap;
use std::io::{Seek, SeekFrom};
use std::path::Path;

use ::postgres::fallible_iterator::FallibleIterator;
use ::postgres::types::ToSql;
use ::postgres::{IsolationLevel, Transaction};

use super::rows::{self, kind_code};
use super::writes::{self, TotalsDelta};
use super::PostgresStore;
use crate::store::backup_file::{self, BackupError, BackupSource, BackupSummary};
use crate::store::keys::{self, child_key, day_key, vehicle_key};
use crate::store::trip_blocks;
use crate::store::sled_engine::{checked_body, correction_key, decode, encode};
use crate::store::*;

/// Rows loaded per statement on restore.
const RESTORE_BATCH: usize = 5_000;

/// The record tables as the backup's trees, read in one transaction.
struct Snapshot<'a, 'b> {
    tx: RefCell<&'a mut Transaction<'b>>,
}

impl Snapshot<'_, '_> {
    /// Streams the rows of `sql` (no parameters) to `each`.
    fn rows(&self, sql: &str, mut each: impl FnMut(&::postgres::Row) -> Result<(), BackupError>) -> Result<(), BackupError> {
        let mut tx = self.tx.borrow_mut();
        let mut found = tx.query_raw(sql, std::iter::empty::<&dyn ToSql>()).map_err(StoreError::from)?;
        while let Some(row) = found.next().map_err(StoreError::from)? {
            each(&row)?;
        }
        Ok(())
    }
}

impl BackupSource for Snapshot<'_, '_> {
    fn each_entry(&self, tree: &str, entry: &mut dyn FnMut(&[u8], &[u8]) -> Result<(), BackupError>) -> Result<(), BackupError> {
        let mut emit = |key: Vec<u8>, value: Vec<u8>| entry(&key, &value);
        match tree {
            "fleets" => self.rows("SELECT fleet_id, time_zone, display_name FROM fleets ORDER BY fleet_id", |r| {
                let fleet = rows::fleet(r);
                emit(fleet.fleet_id.as_bytes().to_vec(), encode(&fleet)?)
            }),
            "vehicles" => self.rows(&format!("SELECT {} FROM vehicles ORDER BY fleet_id, vehicle_id", rows::VEHICLE_COLUMNS), |r| {
                let vehicle = rows::vehicle(r)?;
                emit(vehicle_key(&vehicle.fleet_id, &vehicle.vehicle_id), encode(&vehicle)?)
            }),
            "totals" => self.rows(&format!("SELECT fleet_id, vehicle_id, {} FROM vehicle_totals ORDER BY fleet_id, vehicle_id", rows::TOTALS_COLUMNS), |r| {
                let (fleet_id, vehicle_id): (String, String) = (r.get(0), r.get(1));
                let totals = VehicleTotals {
                    trips_recorded: r.get::<_, i64>(2).max(0) as u64,
                    friction_energy_j: r.get(3),
                    distance_m: r.get(4),
                    last_trip_end_ms: r.get(5),
                };
                emit(vehicle_key(&fleet_id, &vehicle_id), encode(&totals)?)
            }),
            // Trips in the sled layout: one block per vehicle and UTC day, and the vehicle's
            // trip-id index (which PostgreSQL keeps as the trips table's primary key).
            "trip_blocks" | "trip_id_index" => {
                let blocks = tree == "trip_blocks";
                let mut vehicle: Option<(Vec<u8>, Vec<TripRecord>)> = None;
                let mut flush = |prefix: Vec<u8>, trips: Vec<TripRecord>| -> Result<(), BackupError> {
                    let (block_entries, index_entries) = trip_blocks::vehicle_entries(&prefix, trips)?;
                    for (key, value) in if blocks { block_entries } else { index_entries } {
                        emit(key, value)?;
                    }
                    Ok(())
                };
                self.rows(&format!("SELECT {} FROM trips ORDER BY fleet_id, vehicle_id, end_ms, trip_id", rows::TRIP_COLUMNS), |r| {
                    let trip = rows::trip(r)?;
                    let prefix = keys::vehicle_prefix(&trip.fleet_id, &trip.vehicle_id);
                    match &mut vehicle {
                        Some((current, trips)) if *current == prefix => trips.push(trip),
                        _ => {
                            if let Some((done, trips)) = vehicle.replace((prefix, vec![trip])) {
                                flush(done, trips)?;
                            }
                        }
                    }
                    Ok(())
                })?;
                match vehicle {
                    Some((prefix, trips)) => flush(prefix, trips),
                    None => Ok(()),
                }
            }
            "daily" => self.rows(&format!("SELECT fleet_id, vehicle_id, {} FROM daily_energy ORDER BY fleet_id, vehicle_id, day", rows::DAILY_COLUMNS), |r| {
                let (fleet_id, vehicle_id): (String, String) = (r.get(0), r.get(1));
                let trips: i64 = r.get(5);
                let day = DailyEnergy {
                    day: r.get(2),
                    axle_energy_j: r.get(3),
                    axle_hot_energy_j: r.get(4),
                    trips: u32::try_from(trips).map_err(|_| StoreError::Corrupt(format!("trips of a day {trips}")))?,
                    distance_m: r.get(6),
                };
                emit(day_key(&fleet_id, &vehicle_id, day.day), encode(&day)?)
            }),
            "inspections" => self.rows(&format!("SELECT {} FROM inspections ORDER BY fleet_id, vehicle_id, inspection_id", rows::INSPECTION_COLUMNS), |r| {
                let record = rows::inspection(r)?;
                emit(child_key(&record.fleet_id, &record.vehicle_id, &record.inspection_id), encode(&record)?)
            }),
            "replacements" => self.rows(&format!("SELECT {} FROM replacements ORDER BY fleet_id, vehicle_id, replacement_id", rows::REPLACEMENT_COLUMNS), |r| {
                let record = rows::replacement(r)?;
                emit(child_key(&record.fleet_id, &record.vehicle_id, &record.replacement_id), encode(&record)?)
            }),
            "corrections" => self.rows(&format!("SELECT {} FROM corrections ORDER BY fleet_id, vehicle_id, kind, record_id", rows::CORRECTION_COLUMNS), |r| {
                let record = rows::correction(r)?;
                emit(correction_key(&record.fleet_id, &record.vehicle_id, record.kind, &record.record_id), encode(&record)?)
            }),
            "tokens" => self.rows(&format!("SELECT {} FROM access_tokens ORDER BY secret_sha256", rows::TOKEN_COLUMNS), |r| {
                let token = rows::token(r)?;
                emit(token.secret_sha256.to_vec(), encode(&token)?)
            }),
            "audit" => self.rows(&format!("SELECT {} FROM audit ORDER BY fleet_id, at_ms, sequence", rows::AUDIT_COLUMNS), |r| {
                let (cursor, entry) = rows::audit(r)?;
                emit(keys::audit_key(&entry.fleet_id, cursor), encode(&entry)?)
            }),
            other => Err(BackupError::Damaged(format!("no table holds the backup tree '{other}'"))),
        }
    }
}

/// See [`Store::export_backup`]: the file, rewound, in the system's temporary directory.
pub fn export(client: &mut ::postgres::Client, taken_at_ms: i64) -> StoreResult<(std::fs::File, BackupSummary)> {
    let io = |e: std::io::Error| StoreError::from(BackupError::Io(e));
    let mut file = tempfile::tempfile().map_err(io)?;
    let mut tx = client.build_transaction().isolation_level(IsolationLevel::RepeatableRead).read_only(true).start()?;
    let summary = backup_file::write_from(&Snapshot { tx: RefCell::new(&mut tx) }, None, taken_at_ms, &mut file)?;
    tx.commit()?;
    file.seek(SeekFrom::Start(0)).map_err(io)?;
    Ok((file, summary))
}

/// The fleet and vehicle of a `fleet 0 vehicle [0 …]` key.
fn fleet_and_vehicle(key: &[u8]) -> Result<(String, String), BackupError> {
    let bad = || BackupError::Damaged("a key does not name a fleet and a vehicle".into());
    let mut parts = key.splitn(3, |b| *b == keys::SEP);
    let fleet = parts.next().ok_or_else(bad)?;
    let vehicle = parts.next().ok_or_else(bad)?;
    let text = |bytes: &[u8]| String::from_utf8(bytes.to_vec()).map_err(|_| bad());
    Ok((text(fleet)?, text(vehicle)?))
}

/// Entries of one tree waiting for a multi-row statement.
#[derive(Default)]
struct Pending {
    trips: Vec<TripRecord>,
    daily: BTreeMap<(String, String, i64), DailyEnergy>,
    totals: BTreeMap<(String, String), TotalsDelta>,
}

impl Pending {
    fn load(&mut self, tx: &mut Transaction<'_>) -> StoreResult<()> {
        if !self.trips.is_empty() {
            let trips: Vec<&TripRecord> = self.trips.iter().collect();
            writes::insert_trips(tx, &trips)?;
            self.trips.clear();
        }
        if !self.daily.is_empty() {
            writes::add_daily(tx, &std::mem::take(&mut self.daily))?;
        }
        if !self.totals.is_empty() {
            writes::add_totals(tx, &std::mem::take(&mut self.totals))?;
        }
        Ok(())
    }

    fn len(&self) -> usize {
        self.trips.len() + self.daily.len() + self.totals.len()
    }
}

/// Stores one backup entry (single-row tables) or queues it (trips, roll-ups, totals).
fn restore_entry(tx: &mut Transaction<'_>, pending: &mut Pending, tree: &str, key: &[u8], value: &[u8]) -> StoreResult<()> {
    match tree {
        "fleets" => {
            writes::upsert_fleet(tx, &decode::<FleetRecord>(value)?)?;
        }
        "vehicles" => {
            let vehicle: VehicleRecord = decode(value)?;
            tx.execute(
                "INSERT INTO vehicles (fleet_id, vehicle_id, vin, spec) VALUES ($1, $2, $3, $4::text::jsonb)",
                &[&vehicle.fleet_id, &vehicle.vehicle_id, &vehicle.vin, &rows::spec_json(&vehicle.spec)?],
            )?;
        }
        "totals" => {
            let totals: VehicleTotals = decode(value)?;
            let (fleet, vehicle) = fleet_and_vehicle(key).map_err(StoreError::from)?;
            let delta = TotalsDelta {
                trips: i64::try_from(totals.trips_recorded).map_err(|_| StoreError::Corrupt("trip count".into()))?,
                energy_j: totals.friction_energy_j,
                distance_m: totals.distance_m,
                last_end_ms: totals.last_trip_end_ms,
            };
            pending.totals.insert((fleet, vehicle), delta);
        }
        // Schema 3 (one record per trip) and schema 4 (day blocks).
        "trips" => pending.trips.push(decode(value)?),
        "trip_blocks" => {
            let (fleet, vehicle, day) = trip_blocks::split_vehicle_key(key)?;
            let day = keys::read_ordered_i64(day)?;
            pending.trips.extend(trip_blocks::decode_block(fleet, vehicle, day, checked_body(value)?)?);
        }
        // The trip-id index is the trips table's primary key here.
        "trip_ids" | "trip_id_index" => {}
        "daily" => {
            let day: DailyEnergy = decode(value)?;
            let (fleet, vehicle) = fleet_and_vehicle(key).map_err(StoreError::from)?;
            pending.daily.insert((fleet, vehicle, day.day), day);
        }
        "inspections" => {
            writes::insert_inspection(tx, &decode(value)?)?;
        }
        "replacements" => {
            writes::insert_replacement(tx, &decode(value)?)?;
        }
        "corrections" => {
            let c: CorrectionRecord = decode(value)?;
            tx.execute(
                "INSERT INTO corrections (fleet_id, vehicle_id, kind, record_id, reason, corrected_at_ms, superseded_by) VALUES ($1, $2, $3, $4, $5, $6, $7)",
                &[&c.fleet_id, &c.vehicle_id, &kind_code(c.kind), &c.record_id, &c.reason, &c.corrected_at_ms, &c.superseded_by],
            )?;
        }
        "tokens" => super::access::put_token(tx, &decode(value)?)?,
        "audit" => {
            let entry: AuditRecord = decode(value)?;
            let prefix = keys::fleet_prefix(&entry.fleet_id).len();
            let cursor = keys::audit_cursor_of_key(key, prefix)?;
            let sequence = cursor.sequence as i64;
            tx.execute(
                "INSERT INTO audit (fleet_id, at_ms, sequence, token_id, role, action, subject) VALUES ($1, $2, $3, $4, $5, $6, $7)",
                &[&entry.fleet_id, &entry.at_ms, &sequence, &entry.token_id, &entry.role.name(), &entry.action, &entry.subject],
            )?;
        }
        other => return Err(StoreError::Corrupt(format!("the backup holds an unknown tree '{other}'"))),
    }
    if pending.len() >= RESTORE_BATCH {
        pending.load(tx)?;
    }
    Ok(())
}

/// Restores a verified backup into the (empty) PostgreSQL database at `url`: every record, then
/// every vehicle marked stale so the forecasts are recomputed when a server starts.
pub fn restore(path: &Path, url: &str) -> Result<BackupSummary, BackupError> {
    backup_file::verify(path)?;
    let store = PostgresStore::open(url)?;
    let mut connection = store.connection()?;
    let mut tx = connection.transaction().map_err(StoreError::from)?;
    let held: i64 = tx
        .query_one(
            "SELECT (SELECT count(*) FROM fleets) + (SELECT count(*) FROM vehicles) + (SELECT count(*) FROM trips) + (SELECT count(*) FROM access_tokens)",
            &[],
        )
        .map_err(StoreError::from)?
        .get(0);
    if held > 0 {
        return Err(BackupError::TargetNotEmpty(format!(
            "the database at {} already holds records: restore writes only into an empty database",
            super::redacted(url)
        )));
    }
    let mut pending = Pending::default();
    let summary = backup_file::for_each_entry(path, |tree, key, value| Ok(restore_entry(&mut tx, &mut pending, tree, &key, &value)?))?;
    pending.load(&mut tx)?;
    tx.batch_execute(
        "SELECT setval('audit_sequence', greatest((SELECT max(sequence) FROM audit), 1));
         INSERT INTO stale (fleet_id, vehicle_id, generation)
           SELECT fleet_id, vehicle_id, nextval('stale_generation') FROM vehicles ORDER BY fleet_id, vehicle_id
         ON CONFLICT (fleet_id, vehicle_id) DO NOTHING;",
    )
    .map_err(StoreError::from)?;
    tx.commit().map_err(StoreError::from)?;
    Ok(summary)
}
