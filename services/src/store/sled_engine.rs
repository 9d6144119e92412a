//! One open sled 0.34 database and the operations on its trees (see [`super::keys`] for the
//! layout). [`super::sled_store::SledStore`] wraps it with the disk-space gate and reopening.
//!
//! Each write that callers acknowledge (trips, inspections, replacements, vehicles, fleets) runs
//! in one multi-tree transaction and is followed by `Db::flush`, which returns only after the
//! data reached disk. Materialised forecasts are derived data: they are rebuilt from the stale
//! marks after a crash, so they ride on sled's periodic flush.

use std::collections::{BTreeMap, HashSet};

use serde::{de::DeserializeOwned, Serialize};
use sled::transaction::{ConflictableTransactionError, TransactionError, TransactionalTree};
use sled::Transactional;

use super::ledger::{RecordKind, Tallies};
use super::records::RecordKind as ServiceKind;
use super::keys::{self, child_key, day_key, fleet_prefix, prefix_end, trip_key, vehicle_key, vehicle_prefix};
use super::*;

/// Schema version this build writes. Opening a database with a higher version is refused.
/// Version 2: the stored forecasts and priors carry the leave-one-out pooling and pad coupling
/// of the wear models; version-1 directories are migrated by `Engine::rebuild_derived`.
/// Version 3: every postcard value ends with the CRC-32 of its bytes (see [`encode`]); older
/// directories are migrated by [`Engine::add_value_checksums`], and get their acknowledged-write
/// ledger (see [`super::ledger`]) from what they hold.
pub const SCHEMA_VERSION: u32 = 3;

/// Trees whose values are postcard records carrying a checksum.
const CHECKSUMMED_TREES: [&str; 12] = ["fleets", "vehicles", "totals", "trips", "daily", "inspections", "replacements", "corrections", "forecasts", "priors", "tokens", "audit"];

/// Trees a backup carries: the records; forecasts, the due index, priors and stale marks are
/// derived from them and recomputed after a restore.
pub const RECORD_TREES: [&str; 11] = ["fleets", "vehicles", "totals", "trips", "trip_ids", "daily", "inspections", "replacements", "corrections", "tokens", "audit"];
const SCHEMA_KEY: &[u8] = b"schema_version";

impl From<sled::Error> for StoreError {
    fn from(error: sled::Error) -> Self {
        match &error {
            sled::Error::Io(io) if super::disk_space::is_out_of_space(io) => StoreError::StorageFull(format!(
                "the disk holding the data directory is full ({io}); writes are refused until space is freed, reads still work"
            )),
            _ => StoreError::Engine(error.to_string()),
        }
    }
}

impl From<TransactionError<StoreError>> for StoreError {
    fn from(error: TransactionError<StoreError>) -> Self {
        match error {
            TransactionError::Abort(inner) => inner,
            TransactionError::Storage(engine) => engine.into(),
        }
    }
}

/// A stored value: the postcard encoding of `value` followed by the CRC-32 (IEEE, little-endian)
/// of those bytes, so a value damaged on disk is detected when read instead of decoding as
/// something else.
pub fn encode<T: Serialize>(value: &T) -> StoreResult<Vec<u8>> {
    let mut bytes = postcard::to_stdvec(value).map_err(|e| StoreError::Corrupt(format!("encode: {e}")))?;
    let crc = crc32fast::hash(&bytes);
    bytes.extend_from_slice(&crc.to_le_bytes());
    Ok(bytes)
}

/// The postcard bytes of a stored value whose checksum matches.
pub fn checked_body(bytes: &[u8]) -> StoreResult<&[u8]> {
    let split = bytes.len().checked_sub(4).ok_or_else(|| StoreError::Corrupt(format!("a stored value of {} bytes is too short to carry its checksum", bytes.len())))?;
    let (body, crc) = bytes.split_at(split);
    let crc = u32::from_le_bytes([crc[0], crc[1], crc[2], crc[3]]);
    if crc32fast::hash(body) != crc {
        return Err(StoreError::Corrupt("a stored value does not match its checksum (damaged on disk)".into()));
    }
    Ok(body)
}

/// The value [`encode`] stored, its checksum checked.
pub fn decode<T: DeserializeOwned>(bytes: &[u8]) -> StoreResult<T> {
    postcard::from_bytes(checked_body(bytes)?).map_err(|e| StoreError::Corrupt(e.to_string()))
}

fn abort(error: StoreError) -> ConflictableTransactionError<StoreError> {
    ConflictableTransactionError::Abort(error)
}

/// Read-modify-write of a postcard value inside a transaction.
fn tx_get<T: DeserializeOwned>(
    tree: &TransactionalTree,
    key: &[u8],
) -> Result<Option<T>, ConflictableTransactionError<StoreError>> {
    match tree.get(key)? {
        Some(bytes) => decode(&bytes).map(Some).map_err(abort),
        None => Ok(None),
    }
}

fn tx_put<T: Serialize>(
    tree: &TransactionalTree,
    key: &[u8],
    value: &T,
) -> Result<(), ConflictableTransactionError<StoreError>> {
    tree.insert(key, encode(value).map_err(abort)?)?;
    Ok(())
}

/// An open sled database and its trees.
pub struct Engine {
    db: sled::Db,
    fleets: sled::Tree,
    vehicles: sled::Tree,
    totals: sled::Tree,
    trips: sled::Tree,
    trip_ids: sled::Tree,
    daily: sled::Tree,
    inspections: sled::Tree,
    replacements: sled::Tree,
    corrections: sled::Tree,
    forecasts: sled::Tree,
    due_index: sled::Tree,
    stale: sled::Tree,
    priors: sled::Tree,
    tokens: sled::Tree,
    audit: sled::Tree,
}

impl Engine {
    /// The engine over an open database; creates the schema version on a new one and refuses
    /// a newer one.
    pub fn from_db(db: sled::Db) -> StoreResult<Self> {
        let meta = db.open_tree("meta")?;
        match meta.get(SCHEMA_KEY)? {
            Some(bytes) => {
                let array: [u8; 4] =
                    bytes.as_ref().try_into().map_err(|_| StoreError::Corrupt("schema version".into()))?;
                let found = u32::from_be_bytes(array);
                if found > SCHEMA_VERSION {
                    return Err(StoreError::NewerSchema { found, supported: SCHEMA_VERSION });
                }
                if found < SCHEMA_VERSION {
                    let engine = Self::with_trees(db)?;
                    if found < 2 {
                        engine.rebuild_derived()?;
                    }
                    engine.add_value_checksums()?;
                    // The schema version is written by `finish_migration`, once the caller has
                    // written the ledger: a crash before that runs the (idempotent) migration again.
                    engine.db.flush()?;
                    tracing::info!(from = found, to = SCHEMA_VERSION, "migrated the data directory: values now carry checksums");
                    return Ok(engine);
                }
            }
            None => {
                meta.insert(SCHEMA_KEY, &SCHEMA_VERSION.to_be_bytes())?;
                db.flush()?;
            }
        }
        Self::with_trees(db)
    }

    /// Migration of derived data: stored forecasts, the due index and the priors are what the
    /// forecast worker computes from the records, so an older layout of them is dropped and
    /// every vehicle marked stale; the worker rebuilds them. Records (fleets, vehicles, trips,
    /// roll-ups, inspections, replacements) are untouched.
    fn rebuild_derived(&self) -> StoreResult<()> {
        self.forecasts.clear()?;
        self.due_index.clear()?;
        self.priors.clear()?;
        for key in self.vehicles.iter().keys() {
            let key = key?;
            let generation = self.db.generate_id()?;
            self.stale.insert(key, &generation.to_be_bytes())?;
        }
        Ok(())
    }

    /// Migration to version 3: appends a checksum to every postcard value that has none yet.
    /// Idempotent: a value that already ends with the checksum of its other bytes is left alone
    /// (an old value does so by chance with probability 2^-32).
    fn add_value_checksums(&self) -> StoreResult<()> {
        for name in CHECKSUMMED_TREES {
            let tree = self.db.open_tree(name)?;
            let mut batch = sled::Batch::default();
            let mut pending = 0usize;
            for entry in tree.iter() {
                let (key, value) = entry?;
                if checked_body(&value).is_ok() {
                    continue;
                }
                let mut bytes = value.to_vec();
                bytes.extend_from_slice(&crc32fast::hash(&value).to_le_bytes());
                batch.insert(key, bytes);
                pending += 1;
                if pending == 10_000 {
                    tree.apply_batch(std::mem::take(&mut batch))?;
                    pending = 0;
                }
            }
            tree.apply_batch(batch)?;
        }
        Ok(())
    }

    /// The schema version stored in the database, `None` for a database that holds none (new,
    /// or emptied by damage).
    pub fn stored_schema_version(db: &sled::Db) -> StoreResult<Option<u32>> {
        let meta = db.open_tree("meta")?;
        match meta.get(SCHEMA_KEY)? {
            Some(bytes) => {
                let array: [u8; 4] = bytes.as_ref().try_into().map_err(|_| StoreError::Corrupt("schema version".into()))?;
                Ok(Some(u32::from_be_bytes(array)))
            }
            None => Ok(None),
        }
    }

    /// Ends a migration: writes the current schema version, durably.
    pub fn finish_migration(&self) -> StoreResult<()> {
        self.db.open_tree("meta")?.insert(SCHEMA_KEY, &SCHEMA_VERSION.to_be_bytes())?;
        self.db.flush()?;
        Ok(())
    }

    /// The engine over a database served read-only after failed verification: nothing is
    /// written to it (no schema version, no migration).
    pub fn from_db_read_only(db: sled::Db) -> StoreResult<Self> {
        Self::with_trees(db)
    }

    fn with_trees(db: sled::Db) -> StoreResult<Self> {
        Ok(Self {
            fleets: db.open_tree("fleets")?,
            vehicles: db.open_tree("vehicles")?,
            totals: db.open_tree("totals")?,
            trips: db.open_tree("trips")?,
            trip_ids: db.open_tree("trip_ids")?,
            daily: db.open_tree("daily")?,
            inspections: db.open_tree("inspections")?,
            replacements: db.open_tree("replacements")?,
            corrections: db.open_tree("corrections")?,
            forecasts: db.open_tree("forecasts")?,
            due_index: db.open_tree("due_index")?,
            stale: db.open_tree("stale")?,
            priors: db.open_tree("priors")?,
            tokens: db.open_tree("tokens")?,
            audit: db.open_tree("audit")?,
            db,
        })
    }

    /// Writes a schema version (tests of the refusal to open newer databases).
    pub fn force_schema_version(&self, version: u32) -> StoreResult<()> {
        self.db.open_tree("meta")?.insert(SCHEMA_KEY, &version.to_be_bytes())?;
        self.db.flush()?;
        Ok(())
    }

    fn get_value<T: DeserializeOwned>(tree: &sled::Tree, key: &[u8]) -> StoreResult<Option<T>> {
        tree.get(key)?.map(|bytes| decode(&bytes)).transpose()
    }

    fn scan_values<T: DeserializeOwned>(tree: &sled::Tree, prefix: &[u8]) -> StoreResult<Vec<T>> {
        tree.scan_prefix(prefix).values().map(|bytes| decode(&bytes?)).collect()
    }

    /// Stores a record under an idempotency key, unless the key exists (with the same value:
    /// `Duplicate`; with another: `Differs` carrying the stored one).
    fn insert_once<T: Serialize + DeserializeOwned + PartialEq>(
        &self,
        tree: &sled::Tree,
        key: Vec<u8>,
        value: &T,
        fleet_id: &str,
        vehicle_id: &str,
    ) -> StoreResult<InsertOutcome<T>> {
        let bytes = encode(value)?;
        let stale_key = vehicle_key(fleet_id, vehicle_id);
        let outcome = (tree, &self.stale).transaction(|(records, stale)| {
            if let Some(stored) = tx_get::<T>(records, &key)? {
                return Ok(if &stored == value { InsertOutcome::Duplicate } else { InsertOutcome::Differs(stored) });
            }
            records.insert(key.as_slice(), bytes.as_slice())?;
            stale.insert(stale_key.as_slice(), &stale.generate_id()?.to_be_bytes())?;
            Ok(InsertOutcome::Stored)
        });
        let outcome = outcome.map_err(|e: TransactionError<StoreError>| StoreError::from(e))?;
        if outcome == InsertOutcome::Stored {
            self.db.flush()?;
        }
        Ok(outcome)
    }

    /// See [`Store`].
    pub fn correct_record(&self, correction: &CorrectionRecord, superseding: Option<&ServiceEntry>) -> StoreResult<CorrectionOutcome> {
        let (fleet_id, vehicle_id) = (&correction.fleet_id, &correction.vehicle_id);
        let record_key = child_key(fleet_id, vehicle_id, &correction.record_id);
        let correction_key = correction_key(fleet_id, vehicle_id, correction.kind, &correction.record_id);
        let correction_bytes = encode(correction)?;
        let superseding_bytes = match superseding {
            Some(ServiceEntry::Inspection(i)) => Some(encode(i)?),
            Some(ServiceEntry::Replacement(r)) => Some(encode(r)?),
            None => None,
        };
        let superseding_key = superseding.map(|s| child_key(fleet_id, vehicle_id, s.record_id()));
        let stale_key = vehicle_key(fleet_id, vehicle_id);
        let outcome = (&self.inspections, &self.replacements, &self.corrections, &self.stale).transaction(
            |(inspections, replacements, corrections, stale)| {
                let records = match correction.kind {
                    ServiceKind::Inspection => inspections,
                    ServiceKind::Replacement => replacements,
                };
                if records.get(&record_key)?.is_none() {
                    return Ok(CorrectionOutcome::NoSuchRecord);
                }
                if let Some(stored) = tx_get::<CorrectionRecord>(corrections, &correction_key)? {
                    return Ok(if stored.same_as(correction) { CorrectionOutcome::Duplicate } else { CorrectionOutcome::AlreadyCorrected(stored) });
                }
                if let (Some(key), Some(bytes)) = (&superseding_key, &superseding_bytes) {
                    if records.get(key)?.is_some() {
                        return Ok(CorrectionOutcome::IdTaken);
                    }
                    records.insert(key.as_slice(), bytes.as_slice())?;
                }
                corrections.insert(correction_key.as_slice(), correction_bytes.as_slice())?;
                stale.insert(stale_key.as_slice(), &stale.generate_id()?.to_be_bytes())?;
                Ok(CorrectionOutcome::Stored)
            },
        );
        let outcome = outcome.map_err(|e: TransactionError<StoreError>| StoreError::from(e))?;
        if outcome == CorrectionOutcome::Stored {
            self.db.flush()?;
        }
        Ok(outcome)
    }

    /// See [`Store`].
    pub fn service_records(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceRecords> {
        let prefix = vehicle_prefix(fleet_id, vehicle_id);
        let mut inspections: Vec<InspectionRecord> = Self::scan_values(&self.inspections, &prefix)?;
        let mut replacements: Vec<ReplacementRecord> = Self::scan_values(&self.replacements, &prefix)?;
        inspections.sort_by(|a, b| (a.measured_at_ms, &a.inspection_id).cmp(&(b.measured_at_ms, &b.inspection_id)));
        replacements.sort_by(|a, b| (a.replaced_at_ms, &a.replacement_id).cmp(&(b.replaced_at_ms, &b.replacement_id)));
        let corrections = Self::scan_values(&self.corrections, &prefix)?;
        Ok(ServiceRecords { all: ServiceHistory { inspections, replacements }, corrections })
    }
}

/// `fleet 0 vehicle 0 kind id` in the corrections tree (kind: `i` or `r`).
pub fn correction_key(fleet_id: &str, vehicle_id: &str, kind: ServiceKind, record_id: &str) -> Vec<u8> {
    let mut key = vehicle_prefix(fleet_id, vehicle_id);
    key.push(match kind {
        ServiceKind::Inspection => b'i',
        ServiceKind::Replacement => b'r',
    });
    key.extend_from_slice(record_id.as_bytes());
    key
}

/// Per-vehicle total changes gathered while ingesting a batch.
#[derive(Default)]
struct TotalsDelta {
    trips: u64,
    energy_j: f64,
    distance_m: f64,
    last_end_ms: Option<i64>,
}

impl Engine {
    /// See [`Store`].
    pub fn upsert_fleet(&self, fleet: &FleetRecord) -> StoreResult<bool> {
        let created = self.fleets.insert(fleet.fleet_id.as_bytes(), encode(fleet)?)?.is_none();
        self.db.flush()?;
        Ok(created)
    }

    /// See [`Store`].
    pub fn get_fleet(&self, fleet_id: &str) -> StoreResult<Option<FleetRecord>> {
        Self::get_value(&self.fleets, fleet_id.as_bytes())
    }

    /// See [`Store`].
    pub fn upsert_vehicle(&self, vehicle: &VehicleRecord) -> StoreResult<bool> {
        let key = vehicle_key(&vehicle.fleet_id, &vehicle.vehicle_id);
        let bytes = encode(vehicle)?;
        let created = (&self.vehicles, &self.stale)
            .transaction(|(vehicles, stale)| {
                let created = vehicles.insert(key.as_slice(), bytes.as_slice())?.is_none();
                stale.insert(key.as_slice(), &stale.generate_id()?.to_be_bytes())?;
                Ok(created)
            })
            .map_err(|e: TransactionError<StoreError>| StoreError::from(e))?;
        self.db.flush()?;
        Ok(created)
    }

    /// See [`Store`].
    pub fn get_vehicle(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleRecord>> {
        Self::get_value(&self.vehicles, &vehicle_key(fleet_id, vehicle_id))
    }

    /// See [`Store`].
    pub fn list_vehicles(&self, fleet_id: &str, after: Option<&str>, limit: usize) -> StoreResult<Vec<VehicleRecord>> {
        let prefix = fleet_prefix(fleet_id);
        let start = match after {
            // The smallest key after `fleet 0 after` is `fleet 0 after 0`.
            Some(after) => {
                let mut key = vehicle_key(fleet_id, after);
                key.push(0);
                key
            }
            None => prefix.clone(),
        };
        self.vehicles
            .range(start..prefix_end(&prefix))
            .values()
            .take(limit)
            .map(|bytes| decode(&bytes?))
            .collect()
    }

    /// See [`Store`]: the fleets tree, plus the fleet part of the vehicles' keys (one seek per
    /// fleet, past all its vehicles).
    pub fn list_fleet_ids(&self) -> StoreResult<Vec<String>> {
        let decode_id = |bytes: &[u8]| String::from_utf8(bytes.to_vec()).map_err(|_| StoreError::Corrupt("fleet id".into()));
        let mut ids = std::collections::BTreeSet::new();
        for key in self.fleets.iter().keys() {
            ids.insert(decode_id(&key?)?);
        }
        let mut next = self.vehicles.iter().next();
        while let Some(entry) = next {
            let (key, _) = entry?;
            let fleet = key.split(|b| *b == keys::SEP).next().unwrap_or_default();
            ids.insert(decode_id(fleet)?);
            next = self.vehicles.range(prefix_end(&fleet_prefix(&decode_id(fleet)?))..).next();
        }
        Ok(ids.into_iter().collect())
    }

    /// See [`Store`].
    pub fn count_vehicles(&self, fleet_id: &str) -> StoreResult<u64> {
        Ok(self.vehicles.scan_prefix(fleet_prefix(fleet_id)).keys().count() as u64)
    }

    /// See [`Store`].
    pub fn vehicle_totals(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<VehicleTotals> {
        Ok(Self::get_value(&self.totals, &vehicle_key(fleet_id, vehicle_id))?.unwrap_or_default())
    }

    /// See [`Store`].
    pub fn ingest_trips(&self, trips: &[TripRecord]) -> StoreResult<Vec<IngestOutcome>> {
        if trips.is_empty() {
            return Ok(Vec::new());
        }
        let encoded: Vec<Vec<u8>> = trips.iter().map(encode).collect::<StoreResult<_>>()?;
        let outcomes = (&self.trips, &self.trip_ids, &self.daily, &self.totals, &self.stale)
            .transaction(|(trip_tree, id_tree, daily_tree, totals_tree, stale_tree)| {
                let mut outcomes = Vec::with_capacity(trips.len());
                let mut seen: HashSet<Vec<u8>> = HashSet::new();
                let mut daily: BTreeMap<Vec<u8>, DailyEnergy> = BTreeMap::new();
                let mut totals: BTreeMap<Vec<u8>, TotalsDelta> = BTreeMap::new();
                for (trip, bytes) in trips.iter().zip(&encoded) {
                    let id_key = child_key(&trip.fleet_id, &trip.vehicle_id, &trip.trip_id);
                    if seen.contains(&id_key) || id_tree.get(&id_key)?.is_some() {
                        outcomes.push(IngestOutcome::Duplicate);
                        continue;
                    }
                    trip_tree.insert(trip_key(&trip.fleet_id, &trip.vehicle_id, trip.end_ms, &trip.trip_id), bytes.as_slice())?;
                    id_tree.insert(id_key.as_slice(), &keys::ordered_i64(trip.end_ms))?;
                    seen.insert(id_key);
                    outcomes.push(IngestOutcome::Stored);

                    let day = utc_day(trip.end_ms);
                    let entry = daily.entry(day_key(&trip.fleet_id, &trip.vehicle_id, day)).or_insert_with(|| DailyEnergy {
                        day,
                        ..DailyEnergy::default()
                    });
                    add_trip_to_day(entry, trip);
                    let total = totals.entry(vehicle_key(&trip.fleet_id, &trip.vehicle_id)).or_default();
                    total.trips += 1;
                    total.energy_j += trip.friction_energy_j;
                    total.distance_m += trip.distance_m;
                    total.last_end_ms = Some(total.last_end_ms.map_or(trip.end_ms, |t| t.max(trip.end_ms)));
                }
                for (key, delta) in &daily {
                    let mut day: DailyEnergy = tx_get(daily_tree, key)?.unwrap_or_else(|| DailyEnergy { day: delta.day, ..DailyEnergy::default() });
                    merge_days(&mut day, delta);
                    tx_put(daily_tree, key, &day)?;
                }
                for (key, delta) in &totals {
                    let mut total: VehicleTotals = tx_get(totals_tree, key)?.unwrap_or_default();
                    total.trips_recorded += delta.trips;
                    total.friction_energy_j += delta.energy_j;
                    total.distance_m += delta.distance_m;
                    total.last_trip_end_ms = match (total.last_trip_end_ms, delta.last_end_ms) {
                        (Some(a), Some(b)) => Some(a.max(b)),
                        (a, b) => a.or(b),
                    };
                    tx_put(totals_tree, key, &total)?;
                    stale_tree.insert(key.as_slice(), &stale_tree.generate_id()?.to_be_bytes())?;
                }
                Ok(outcomes)
            })
            .map_err(|e: TransactionError<StoreError>| StoreError::from(e))?;
        if outcomes.contains(&IngestOutcome::Stored) {
            self.db.flush()?;
        }
        Ok(outcomes)
    }

    /// See [`Store`].
    pub fn record_inspection(&self, inspection: &InspectionRecord) -> StoreResult<InsertOutcome<InspectionRecord>> {
        let key = child_key(&inspection.fleet_id, &inspection.vehicle_id, &inspection.inspection_id);
        self.insert_once(&self.inspections, key, inspection, &inspection.fleet_id, &inspection.vehicle_id)
    }

    /// See [`Store`].
    pub fn record_replacement(&self, replacement: &ReplacementRecord) -> StoreResult<InsertOutcome<ReplacementRecord>> {
        let key = child_key(&replacement.fleet_id, &replacement.vehicle_id, &replacement.replacement_id);
        self.insert_once(&self.replacements, key, replacement, &replacement.fleet_id, &replacement.vehicle_id)
    }

    /// See [`Store`].
    pub fn daily_energy(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Vec<DailyEnergy>> {
        Self::scan_values(&self.daily, &vehicle_prefix(fleet_id, vehicle_id))
    }

    /// See [`Store`]: the records in force, neither voided nor superseded.
    pub fn service_history(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceHistory> {
        let ServiceRecords { all, corrections } = self.service_records(fleet_id, vehicle_id)?;
        let corrected: HashSet<(ServiceKind, &str)> = corrections.iter().map(|c| (c.kind, c.record_id.as_str())).collect();
        Ok(ServiceHistory {
            inspections: all.inspections.into_iter().filter(|i| !corrected.contains(&(ServiceKind::Inspection, i.inspection_id.as_str()))).collect(),
            replacements: all.replacements.into_iter().filter(|r| !corrected.contains(&(ServiceKind::Replacement, r.replacement_id.as_str()))).collect(),
        })
    }

    /// See [`Store`].
    pub fn put_forecasts(&self, record: &VehicleForecasts) -> StoreResult<()> {
        let key = vehicle_key(&record.fleet_id, &record.vehicle_id);
        let bytes = encode(record)?;
        let new_keys = due_index_keys(record);
        (&self.forecasts, &self.due_index)
            .transaction(|(forecasts, due_index)| {
                if let Some(old) = tx_get::<VehicleForecasts>(forecasts, &key)? {
                    for old_key in due_index_keys(&old) {
                        due_index.remove(old_key)?;
                    }
                }
                for new_key in &new_keys {
                    due_index.insert(new_key.as_slice(), &[])?;
                }
                forecasts.insert(key.as_slice(), bytes.as_slice())?;
                Ok(())
            })
            .map_err(|e: TransactionError<StoreError>| StoreError::from(e))
    }

    /// See [`Store`].
    pub fn get_forecasts(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleForecasts>> {
        Self::get_value(&self.forecasts, &vehicle_key(fleet_id, vehicle_id))
    }

    /// See [`Store`].
    pub fn fleet_forecasts(&self, fleet_id: &str) -> StoreResult<Vec<VehicleForecasts>> {
        Self::scan_values(&self.forecasts, &fleet_prefix(fleet_id))
    }

    /// See [`Store`].
    pub fn scan_due(
        &self,
        fleet_id: &str,
        level: BandLevel,
        due_before_ms: i64,
        after: Option<&DueCursor>,
        limit: usize,
    ) -> StoreResult<Vec<DueCursor>> {
        let prefix = keys::due_level_prefix(fleet_id, level.code());
        let start = match after {
            Some(cursor) => {
                let mut key = keys::due_key(fleet_id, level.code(), cursor);
                key.push(0);
                key
            }
            None => prefix.clone(),
        };
        let mut end = prefix.clone();
        end.extend_from_slice(&keys::ordered_i64(due_before_ms));
        if start >= end {
            return Ok(Vec::new());
        }
        self.due_index
            .range(start..end)
            .keys()
            .take(limit)
            .map(|key| keys::due_cursor_of_key(&key?, prefix.len()))
            .collect()
    }

    /// See [`Store`].
    pub fn mark_stale(&self, fleet_id: &str, vehicle_ids: &[String]) -> StoreResult<()> {
        for vehicle_id in vehicle_ids {
            let generation = self.db.generate_id()?;
            self.stale.insert(vehicle_key(fleet_id, vehicle_id), &generation.to_be_bytes())?;
        }
        Ok(())
    }

    /// See [`Store`].
    pub fn stale_vehicles(&self, limit: usize) -> StoreResult<Vec<StaleMark>> {
        let mut marks = Vec::new();
        for entry in self.stale.iter().take(limit) {
            let (key, value) = entry?;
            let split = key.iter().position(|b| *b == keys::SEP).ok_or_else(|| StoreError::Corrupt("stale key".into()))?;
            let generation: [u8; 8] = value.as_ref().try_into().map_err(|_| StoreError::Corrupt("stale value".into()))?;
            marks.push(StaleMark {
                fleet_id: String::from_utf8_lossy(&key[..split]).into_owned(),
                vehicle_id: String::from_utf8_lossy(&key[split + 1..]).into_owned(),
                generation: u64::from_be_bytes(generation),
            });
        }
        Ok(marks)
    }

    /// See [`Store`].
    pub fn count_stale(&self, fleet_id: &str) -> StoreResult<u64> {
        Ok(self.stale.scan_prefix(fleet_prefix(fleet_id)).keys().count() as u64)
    }

    /// See [`Store`].
    pub fn clear_stale(&self, mark: &StaleMark) -> StoreResult<()> {
        let key = vehicle_key(&mark.fleet_id, &mark.vehicle_id);
        // Leaves the mark in place when a newer write re-marked the vehicle meanwhile.
        let _ = self.stale.compare_and_swap(key, Some(&mark.generation.to_be_bytes()), None as Option<&[u8]>)?;
        Ok(())
    }

    /// See [`Store`].
    pub fn put_priors(&self, fleet_id: &str, priors: &FleetPriors) -> StoreResult<()> {
        self.priors.insert(fleet_id.as_bytes(), encode(priors)?)?;
        Ok(())
    }

    /// See [`Store`].
    pub fn get_priors(&self, fleet_id: &str) -> StoreResult<Option<FleetPriors>> {
        Self::get_value(&self.priors, fleet_id.as_bytes())
    }

    /// See [`Store`].
    pub fn put_token(&self, token: &TokenRecord) -> StoreResult<()> {
        self.tokens.insert(token.secret_sha256, encode(token)?)?;
        self.db.flush()?;
        Ok(())
    }

    /// See [`Store`].
    pub fn token_by_hash(&self, secret_sha256: &[u8; 32]) -> StoreResult<Option<TokenRecord>> {
        Self::get_value(&self.tokens, secret_sha256)
    }

    /// See [`Store`].
    pub fn list_tokens(&self) -> StoreResult<Vec<TokenRecord>> {
        self.tokens.iter().values().map(|bytes| decode(&bytes?)).collect()
    }

    /// See [`Store`].
    pub fn append_audit(&self, entry: &AuditRecord) -> StoreResult<()> {
        let cursor = AuditCursor { at_ms: entry.at_ms, sequence: self.db.generate_id()? };
        self.audit.insert(keys::audit_key(&entry.fleet_id, cursor), encode(entry)?)?;
        self.db.flush()?;
        Ok(())
    }

    /// See [`Store`].
    pub fn list_audit(&self, fleet_id: &str, after: Option<AuditCursor>, limit: usize) -> StoreResult<Vec<(AuditCursor, AuditRecord)>> {
        let prefix = fleet_prefix(fleet_id);
        let start = match after {
            Some(cursor) => {
                let mut key = keys::audit_key(fleet_id, cursor);
                key.push(0);
                key
            }
            None => prefix.clone(),
        };
        self.audit
            .range(start..prefix_end(&prefix))
            .take(limit)
            .map(|entry| {
                let (key, value) = entry?;
                Ok((keys::audit_cursor_of_key(&key, prefix.len())?, decode(&value)?))
            })
            .collect()
    }

    /// See [`Store`].
    pub fn size_on_disk(&self) -> StoreResult<u64> {
        Ok(self.db.size_on_disk()?)
    }

    /// See [`Store`].
    pub fn flush(&self) -> StoreResult<()> {
        self.db.flush()?;
        Ok(())
    }
}

/// Keys an acknowledged write is about to add, with their tallies for the ledger.
#[derive(Debug, Default)]
pub struct PlannedKeys {
    /// Per fleet and kind.
    pub tallies: Tallies,
    /// Each new key and its kind (to check later whether the write reached the store).
    pub keys: Vec<(RecordKind, Vec<u8>)>,
}

impl PlannedKeys {
    fn add(&mut self, fleet_id: &str, kind: RecordKind, key: Vec<u8>) {
        self.tallies.add_key(fleet_id, kind, &key);
        self.keys.push((kind, key));
    }
}

/// What a scan of the whole store found: the tallies of its records and every problem seen.
#[derive(Debug, Default)]
pub struct Audit {
    /// Records per fleet and kind.
    pub tallies: Tallies,
    /// Damaged values and inconsistent indexes, one line each (at most [`Audit::MAX_LISTED`]).
    pub problems: Vec<String>,
    /// Problems found, listed or not.
    pub problem_count: u64,
}

impl Audit {
    /// Problems listed one by one; the rest are only counted.
    pub const MAX_LISTED: usize = 20;

    fn problem(&mut self, line: String) {
        self.problem_count += 1;
        if self.problems.len() < Self::MAX_LISTED {
            self.problems.push(line);
        }
    }
}

/// The fleet a record key belongs to (its first part).
pub fn fleet_of_key(kind: RecordKind, key: &[u8]) -> String {
    let end = match kind {
        RecordKind::Fleet => key.len(),
        _ => key.iter().position(|b| *b == keys::SEP).unwrap_or(key.len()),
    };
    String::from_utf8_lossy(&key[..end]).into_owned()
}

/// A key for people: its parts separated by '/', bytes that are not text as hex.
pub fn printable_key(key: &[u8]) -> String {
    let mut out = String::new();
    for part in key.split(|b| *b == keys::SEP) {
        if !out.is_empty() {
            out.push('/');
        }
        match std::str::from_utf8(part) {
            Ok(text) if text.chars().all(|c| !c.is_control()) => out.push_str(text),
            _ => out.extend(part.iter().map(|b| format!("{b:02x}"))),
        }
    }
    out
}

impl Engine {
    fn tree_of(&self, kind: RecordKind) -> &sled::Tree {
        match kind {
            RecordKind::Fleet => &self.fleets,
            RecordKind::Vehicle => &self.vehicles,
            RecordKind::Trip => &self.trips,
            RecordKind::Inspection => &self.inspections,
            RecordKind::Replacement => &self.replacements,
        }
    }

    /// The new keys of a fleet, vehicle, inspection or replacement write (none when the record
    /// exists already).
    pub fn plan_one(&self, kind: RecordKind, fleet_id: &str, key: Vec<u8>) -> StoreResult<PlannedKeys> {
        let mut planned = PlannedKeys::default();
        if !self.tree_of(kind).contains_key(&key)? {
            planned.add(fleet_id, kind, key);
        }
        Ok(planned)
    }

    /// The new keys of a trip batch: trips whose id is not stored yet, once each.
    pub fn plan_trips(&self, trips: &[TripRecord]) -> StoreResult<PlannedKeys> {
        let mut planned = PlannedKeys::default();
        let mut seen = HashSet::new();
        for trip in trips {
            let id_key = child_key(&trip.fleet_id, &trip.vehicle_id, &trip.trip_id);
            if self.trip_ids.contains_key(&id_key)? || !seen.insert(id_key) {
                continue;
            }
            planned.add(&trip.fleet_id, RecordKind::Trip, trip_key(&trip.fleet_id, &trip.vehicle_id, trip.end_ms, &trip.trip_id));
        }
        Ok(planned)
    }

    /// How many of `keys` the store holds.
    pub fn count_present(&self, keys: &[(RecordKind, Vec<u8>)]) -> StoreResult<usize> {
        let mut present = 0;
        for (kind, key) in keys {
            if self.tree_of(*kind).contains_key(key)? {
                present += 1;
            }
        }
        Ok(present)
    }

    /// Tallies every record and checks every stored value's checksum and the trip index.
    pub fn audit(&self) -> StoreResult<Audit> {
        let mut audit = Audit::default();
        for kind in RecordKind::ALL {
            for entry in self.tree_of(kind).iter() {
                let (key, value) = entry?;
                audit.tallies.add_key(&fleet_of_key(kind, &key), kind, &key);
                if let Err(error) = checked_body(&value) {
                    audit.problem(format!("{} {}: {error}", kind.plural(), printable_key(&key)));
                }
            }
        }
        let checked = [
            ("totals", &self.totals),
            ("daily", &self.daily),
            ("forecasts", &self.forecasts),
            ("priors", &self.priors),
            ("tokens", &self.tokens),
            ("audit", &self.audit),
        ];
        for (name, tree) in checked {
            for entry in tree.iter() {
                let (key, value) = entry?;
                if let Err(error) = checked_body(&value) {
                    audit.problem(format!("{name} {}: {error}", printable_key(&key)));
                }
            }
        }
        let mut per_vehicle: BTreeMap<Vec<u8>, u64> = BTreeMap::new();
        for key in self.trips.iter().keys() {
            let key = key?;
            let fleet_end = key.iter().position(|b| *b == keys::SEP).unwrap_or(key.len());
            let vehicle_end = key[(fleet_end + 1).min(key.len())..].iter().position(|b| *b == keys::SEP).map_or(key.len(), |p| fleet_end + 1 + p);
            *per_vehicle.entry(key[..vehicle_end].to_vec()).or_default() += 1;
        }
        for entry in self.totals.iter() {
            let (key, value) = entry?;
            let Ok(totals) = decode::<VehicleTotals>(&value) else { continue };
            let stored = per_vehicle.get(key.as_ref()).copied().unwrap_or(0);
            if totals.trips_recorded != stored {
                audit.problem(format!("vehicle {}: {} trips were recorded, {stored} are stored", printable_key(&key), totals.trips_recorded));
            }
        }
        let mut indexed: BTreeMap<String, u64> = BTreeMap::new();
        for key in self.trip_ids.iter().keys() {
            *indexed.entry(fleet_of_key(RecordKind::Trip, &key?)).or_default() += 1;
        }
        let empty = Default::default();
        let fleets: std::collections::BTreeSet<String> = indexed.keys().chain(audit.tallies.0.keys()).cloned().collect();
        for fleet in fleets {
            let stored = audit.tallies.0.get(&fleet).unwrap_or(&empty).trips.count;
            let ids = indexed.get(&fleet).copied().unwrap_or(0);
            if stored != ids {
                audit.problem(format!("fleet '{fleet}': the trip-id index lists {ids} trips, {stored} trip records are stored"));
            }
        }
        Ok(audit)
    }

    /// Every (key, stored value) of one of the [`RECORD_TREES`], in key order.
    pub fn record_entries(&self, tree: &str) -> StoreResult<impl Iterator<Item = StoreResult<(sled::IVec, sled::IVec)>>> {
        Ok(self.db.open_tree(tree)?.iter().map(|entry| entry.map_err(StoreError::from)))
    }

    /// Stores raw entries in one of the [`RECORD_TREES`] (restore into an empty database).
    pub fn load_entries(&self, tree: &str, entries: Vec<(Vec<u8>, Vec<u8>)>) -> StoreResult<()> {
        let tree = self.db.open_tree(tree)?;
        let mut batch = sled::Batch::default();
        for (key, value) in entries {
            batch.insert(key, value);
        }
        tree.apply_batch(batch)?;
        Ok(())
    }

    /// After a restore: marks every vehicle stale so the forecasts are rebuilt, and flushes.
    pub fn mark_all_stale(&self) -> StoreResult<()> {
        self.rebuild_derived()?;
        self.db.flush()?;
        Ok(())
    }
}

/// Index keys of every part with a due date, at every indexed level.
fn due_index_keys(record: &VehicleForecasts) -> Vec<Vec<u8>> {
    let mut out = Vec::new();
    for part in &record.parts {
        for level in BandLevel::ALL {
            if let Some(due_earliest_ms) = part.due_earliest_ms(level.probability()) {
                let cursor = DueCursor {
                    due_earliest_ms,
                    vehicle_id: record.vehicle_id.clone(),
                    axle_index: part.axle_index,
                    component: part.component,
                };
                out.push(keys::due_key(&record.fleet_id, level.code(), &cursor));
            }
        }
    }
    out
}

/// Adds one trip to its day's roll-up (per-axle energy, hot energy by the trip's hot share).
pub fn add_trip_to_day(day: &mut DailyEnergy, trip: &TripRecord) {
    let axles = trip.axle_energy_j.len();
    day.axle_energy_j.resize(day.axle_energy_j.len().max(axles), 0.0);
    day.axle_hot_energy_j.resize(day.axle_hot_energy_j.len().max(axles), 0.0);
    let hot_fraction = if trip.friction_energy_j > 0.0 { trip.hot_energy_j / trip.friction_energy_j } else { 0.0 };
    for (i, energy) in trip.axle_energy_j.iter().enumerate() {
        day.axle_energy_j[i] += energy;
        day.axle_hot_energy_j[i] += energy * hot_fraction;
    }
    day.trips += 1;
    day.distance_m += trip.distance_m;
}

fn merge_days(into: &mut DailyEnergy, delta: &DailyEnergy) {
    let axles = into.axle_energy_j.len().max(delta.axle_energy_j.len());
    into.axle_energy_j.resize(axles, 0.0);
    into.axle_hot_energy_j.resize(axles, 0.0);
    for (i, energy) in delta.axle_energy_j.iter().enumerate() {
        into.axle_energy_j[i] += energy;
    }
    for (i, energy) in delta.axle_hot_energy_j.iter().enumerate() {
        into.axle_hot_energy_j[i] += energy;
    }
    into.trips += delta.trips;
    into.distance_m += delta.distance_m;
}
