//! One open sled 0.34 database and the operations on its trees (see [`super::keys`] for the
//! layout). [`super::sled_store::SledStore`] wraps it with the disk-space gate and reopening.
//!
//! Each write that callers acknowledge (trips, inspections, replacements, vehicles, fleets) runs
//! in one multi-tree transaction and is followed by `Db::flush`, which returns only after the
//! data reached disk. Materialised forecasts are derived data: they are rebuilt from the stale
//! marks after a crash, so they ride on sled's periodic flush.
//!
//! # Compressed files
//! sled compresses what it writes with zstd (level [`COMPRESSION_LEVEL`]) in every directory
//! it creates: the log holds each page version it writes, so this shrinks both the directory
//! and the bytes written (see BENCHMARKS.md, "Fleet scale"). sled records the choice in its
//! `conf` file when it creates a database and refuses to open it with the other one, so
//! [`sled_config`] reads it back: a directory created before compression (brakeledger's
//! schema 4 and older) is opened uncompressed as it was made, and stays so; a backup restored
//! into a new directory (`brakeledger backup` then `brakeledger restore`) compresses it.

use std::collections::{BTreeMap, BTreeSet, HashMap, HashSet};
use std::path::Path;
use std::sync::atomic::{AtomicU64, Ordering};

use serde::{de::DeserializeOwned, Serialize};
use sled::transaction::{ConflictableTransactionError, TransactionError, TransactionalTree};
use sled::Transactional;

use super::ledger::{RecordKind, Tallies};
use super::records::RecordKind as ServiceKind;
use super::keys::{self, child_key, day_key, fleet_prefix, prefix_end, trip_key, vehicle_key, vehicle_prefix};
use super::trip_blocks::{self, IdEntry, SEGMENT_ENTRIES};
use super::*;

/// Schema version this build writes. Opening a database with a higher version is refused.
/// Version 2: the stored forecasts and priors carry the leave-one-out pooling and pad coupling
/// of the wear models; version-1 directories are migrated by `Engine::rebuild_derived`.
/// Version 3: every postcard value ends with the CRC-32 of its bytes (see [`encode`]); older
/// directories are migrated by [`Engine::add_value_checksums`], and get their acknowledged-write
/// ledger (see [`super::ledger`]) from what they hold.
/// Version 4: trips are kept in day blocks with a per-vehicle trip-id index (see
/// [`super::trip_blocks`]) instead of one record per trip; older directories are migrated by
/// [`Engine::move_trips_into_blocks`] (the ledger's trip keys are the same in both layouts).
/// Version 5: stored forecasts in the compact layout of [`super::forecast_layout`]; older
/// directories are migrated by [`Engine::compact_stored_forecasts`] (same values, re-encoded).
pub const SCHEMA_VERSION: u32 = 5;

/// Trees of schema 3 whose values are postcard records carrying a checksum (the migration to
/// version 3 runs before the one to version 4, so it works on the schema-3 trees).
const CHECKSUMMED_TREES: [&str; 12] = ["fleets", "vehicles", "totals", "trips", "daily", "inspections", "replacements", "corrections", "forecasts", "priors", "tokens", "audit"];

/// Trees a backup carries: the records; forecasts, the due index, priors and stale marks are
/// derived from them and recomputed after a restore.
pub const RECORD_TREES: [&str; 11] = ["fleets", "vehicles", "totals", "trip_blocks", "trip_id_index", "daily", "inspections", "replacements", "corrections", "tokens", "audit"];
/// The trip trees of schema 3 (one record per trip, and the trip-id index): read by the
/// migration and by the restore of a schema-3 backup.
pub const SCHEMA_3_TRIP_TREES: [&str; 2] = ["trips", "trip_ids"];
const SCHEMA_KEY: &[u8] = b"schema_version";
/// Set once the schema-3 trips are copied into blocks and flushed: a migration cut short after
/// that point only has to drop the old trees.
const BLOCKS_BUILT_KEY: &[u8] = b"trip_blocks_built";
/// The last stored forecast re-encoded by the migration to version 5, so that a migration cut
/// short resumes after it (the layouts cannot be told apart reliably value by value).
const FORECASTS_COMPACTED_THROUGH_KEY: &[u8] = b"forecasts_compacted_through";
/// Set once every stored forecast is in the layout of version 5.
const FORECASTS_COMPACTED_KEY: &[u8] = b"forecasts_compacted";
/// Forecasts re-encoded per transaction by that migration.
const COMPACTION_CHUNK: usize = 1_000;

/// zstd level of sled's page compression: 1, zstd's fastest regular level. sled compresses
/// each log message with a fresh zstd context; in the fleet-scale benchmark the trip store alone
/// ingested at 0.43× (level 3) and 0.32-0.61× (level 1; the lower on a busier machine) of the
/// benchmark's engine-alone rate, against 1.34× uncompressed, while it took a third of the disk
/// and wrote 0.4 times the bytes (BENCHMARKS.md, "Fleet scale").
pub const COMPRESSION_LEVEL: i32 = 1;

/// How sled's pages are kept: `[storage] cache_capacity_bytes` and
/// `compress_new_directories` (see [`crate::config::StorageConfig`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct PageSettings {
    /// sled's page cache, bytes.
    pub cache_capacity_bytes: u64,
    /// Whether a directory sled creates from now on compresses its pages.
    pub compress_new_directories: bool,
}

impl From<&crate::config::StorageConfig> for PageSettings {
    fn from(config: &crate::config::StorageConfig) -> Self {
        Self { cache_capacity_bytes: config.cache_capacity_bytes, compress_new_directories: config.compress_new_directories }
    }
}

impl Default for PageSettings {
    fn default() -> Self {
        Self::from(&crate::config::StorageConfig::default())
    }
}

impl PageSettings {
    /// The default settings with a page cache of `cache_capacity_bytes`.
    pub fn with_cache(cache_capacity_bytes: u64) -> Self {
        Self { cache_capacity_bytes, ..Self::default() }
    }
}

/// Whether sled's files in `dir` are compressed, as the `conf` file sled writes beside a
/// database it creates says; `None` when there is none yet. (`use_compression: false` in every
/// directory made before brakeledger compressed, or made with `compress_new_directories`
/// off; sled refuses to open a directory with the other setting.)
pub fn files_compressed(dir: &Path) -> Option<bool> {
    // `key: value` lines followed by the CRC-32 of those bytes (not text).
    let conf = std::fs::read(dir.join("conf")).ok()?;
    Some(
        !String::from_utf8_lossy(&conf)
            .lines()
            .any(|line| line.split_once(':').is_some_and(|(key, value)| key.trim() == "use_compression" && value.trim() == "false")),
    )
}

/// How brakeledger opens the sled database in `dir`: compressed as the directory was made
/// (see [`files_compressed`]), or as `pages` say for a new one. Every open of a data
/// directory goes through here.
pub fn sled_config(dir: &Path, pages: PageSettings) -> sled::Config {
    sled::Config::new()
        .path(dir)
        .cache_capacity(pages.cache_capacity_bytes)
        .use_compression(files_compressed(dir).unwrap_or(pages.compress_new_directories))
        .compression_factor(COMPRESSION_LEVEL)
}

/// A throw-away compressed database (tests and scratch copies), removed when dropped.
pub fn temporary_db() -> sled::Result<sled::Db> {
    sled::Config::new().temporary(true).use_compression(true).compression_factor(COMPRESSION_LEVEL).open()
}

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
    let bytes = postcard::to_stdvec(value).map_err(|e| StoreError::Corrupt(format!("encode: {e}")))?;
    Ok(trip_blocks::seal(bytes))
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
    trip_blocks: sled::Tree,
    trip_id_index: sled::Tree,
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
    /// Entries in `stale`, kept as writes add and clear marks so that the metrics sampler need
    /// not scan them.
    stale_marks: AtomicU64,
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
                    if found < 3 {
                        engine.add_value_checksums()?;
                    }
                    engine.move_trips_into_blocks()?;
                    if found < 5 {
                        engine.compact_stored_forecasts()?;
                    }
                    // The schema version is written by `finish_migration`, once the caller has
                    // checked (or written) the ledger: a crash before that runs the
                    // (idempotent) migration again.
                    engine.db.flush()?;
                    tracing::info!(from = found, to = SCHEMA_VERSION, "migrated the data directory: trips kept in day blocks, forecasts in the compact layout");
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
        self.stale_marks.store(self.stale.len() as u64, Ordering::Relaxed);
        Ok(())
    }

    /// Migration to version 4: copies the schema-3 trips (one record per trip, `trips` and
    /// `trip_ids`) into day blocks and the per-vehicle trip-id index, then drops the old trees.
    /// Idempotent: the copy is rebuilt from scratch until it is flushed and marked built; after
    /// that, only the old trees are dropped. Totals and roll-ups are unchanged (the same trips).
    pub fn move_trips_into_blocks(&self) -> StoreResult<()> {
        let meta = self.db.open_tree("meta")?;
        let old_trips = self.db.open_tree(SCHEMA_3_TRIP_TREES[0])?;
        if meta.get(BLOCKS_BUILT_KEY)?.is_none() && !old_trips.is_empty() {
            self.trip_blocks.clear()?;
            self.trip_id_index.clear()?;
            let mut vehicle: Option<(Vec<u8>, Vec<TripRecord>)> = None;
            for entry in old_trips.iter() {
                let (key, value) = entry?;
                let (_, _, rest) = trip_blocks::split_vehicle_key(&key)?;
                let prefix = key[..key.len() - rest.len()].to_vec();
                let trip: TripRecord = decode(&value)?;
                match &mut vehicle {
                    Some((current, trips)) if *current == prefix => trips.push(trip),
                    _ => {
                        if let Some((prefix, trips)) = vehicle.take() {
                            self.write_vehicle_blocks(&prefix, trips)?;
                        }
                        vehicle = Some((prefix, vec![trip]));
                    }
                }
            }
            if let Some((prefix, trips)) = vehicle {
                self.write_vehicle_blocks(&prefix, trips)?;
            }
            self.db.flush()?;
            meta.insert(BLOCKS_BUILT_KEY, &[1])?;
            self.db.flush()?;
        }
        for name in SCHEMA_3_TRIP_TREES {
            self.db.open_tree(name)?.clear()?;
        }
        self.db.flush()?;
        Ok(())
    }

    /// Writes the blocks and the trip-id index of one vehicle's trips (migration and restore of
    /// schema-3 data), in the trips' order.
    fn write_vehicle_blocks(&self, prefix: &[u8], trips: Vec<TripRecord>) -> StoreResult<()> {
        let (blocks, segments) = trip_blocks::vehicle_entries(prefix, trips)?;
        let mut batch = sled::Batch::default();
        for (key, value) in blocks {
            batch.insert(key, value);
        }
        self.trip_blocks.apply_batch(batch)?;
        let mut batch = sled::Batch::default();
        for (key, value) in segments {
            batch.insert(key, value);
        }
        self.trip_id_index.apply_batch(batch)?;
        Ok(())
    }

    /// Migration to version 5: re-encodes every stored forecast from the schema-4 layout into
    /// the compact one ([`super::forecast_layout`]); no value changes, so the due index stays as
    /// it is. Resumable: each chunk is written in one transaction with the key it reached.
    pub fn compact_stored_forecasts(&self) -> StoreResult<()> {
        let meta = self.db.open_tree("meta")?;
        if meta.get(FORECASTS_COMPACTED_KEY)?.is_some() {
            return Ok(());
        }
        let mut after = meta.get(FORECASTS_COMPACTED_THROUGH_KEY)?.map(|k| k.to_vec());
        loop {
            let range = match &after {
                Some(key) => self.forecasts.range::<&[u8], _>((std::ops::Bound::Excluded(key.as_slice()), std::ops::Bound::Unbounded)),
                None => self.forecasts.iter(),
            };
            let mut chunk = Vec::with_capacity(COMPACTION_CHUNK);
            for entry in range.take(COMPACTION_CHUNK) {
                let (key, value) = entry?;
                let old: super::forecast_layout::LegacyVehicleForecasts = decode(&value)?;
                chunk.push((key, encode(&VehicleForecasts::from(old))?));
            }
            let Some((last, _)) = chunk.last() else { break };
            let last = last.to_vec();
            (&self.forecasts, &meta)
                .transaction(|(forecasts, meta)| {
                    for (key, value) in &chunk {
                        forecasts.insert(key.as_ref(), value.as_slice())?;
                    }
                    meta.insert(FORECASTS_COMPACTED_THROUGH_KEY, last.as_slice())?;
                    Ok(())
                })
                .map_err(|e: TransactionError<StoreError>| StoreError::from(e))?;
            after = Some(last);
        }
        self.db.flush()?;
        meta.insert(FORECASTS_COMPACTED_KEY, &[1])?;
        meta.remove(FORECASTS_COMPACTED_THROUGH_KEY)?;
        self.db.flush()?;
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
            trip_blocks: db.open_tree("trip_blocks")?,
            trip_id_index: db.open_tree("trip_id_index")?,
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
            stale_marks: AtomicU64::new(db.open_tree("stale")?.len() as u64),
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
                return Ok((if &stored == value { InsertOutcome::Duplicate } else { InsertOutcome::Differs(stored) }, false));
            }
            records.insert(key.as_slice(), bytes.as_slice())?;
            let new_mark = stale.insert(stale_key.as_slice(), &stale.generate_id()?.to_be_bytes())?.is_none();
            Ok((InsertOutcome::Stored, new_mark))
        });
        let (outcome, new_mark) = outcome.map_err(|e: TransactionError<StoreError>| StoreError::from(e))?;
        self.count_new_marks(u64::from(new_mark));
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
                    return Ok((CorrectionOutcome::NoSuchRecord, false));
                }
                if let Some(stored) = tx_get::<CorrectionRecord>(corrections, &correction_key)? {
                    return Ok((if stored.same_as(correction) { CorrectionOutcome::Duplicate } else { CorrectionOutcome::AlreadyCorrected(stored) }, false));
                }
                if let (Some(key), Some(bytes)) = (&superseding_key, &superseding_bytes) {
                    if records.get(key)?.is_some() {
                        return Ok((CorrectionOutcome::IdTaken, false));
                    }
                    records.insert(key.as_slice(), bytes.as_slice())?;
                }
                corrections.insert(correction_key.as_slice(), correction_bytes.as_slice())?;
                let new_mark = stale.insert(stale_key.as_slice(), &stale.generate_id()?.to_be_bytes())?.is_none();
                Ok((CorrectionOutcome::Stored, new_mark))
            },
        );
        let (outcome, new_mark) = outcome.map_err(|e: TransactionError<StoreError>| StoreError::from(e))?;
        self.count_new_marks(u64::from(new_mark));
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

/// A batch of trips sorted and encoded by [`Engine::sort_trips`], for
/// [`Engine::write_sorted_trips`].
pub struct SortedTrips {
    /// What becomes of each trip of the batch, in order.
    outcomes: Vec<IngestOutcome>,
    /// Each vehicle of the batch (its totals key) and its trip count when the batch was sorted.
    stored_before: Vec<(Vec<u8>, u64)>,
    /// Day blocks to put, encoded.
    blocks: Vec<(Vec<u8>, Vec<u8>)>,
    /// Trip-id index segments to put, encoded.
    index: Vec<(Vec<u8>, Vec<u8>)>,
    /// Roll-up additions by day key.
    daily: BTreeMap<Vec<u8>, DailyEnergy>,
    /// Totals additions by vehicle key.
    totals: BTreeMap<Vec<u8>, TotalsDelta>,
}

impl SortedTrips {
    /// The new keys of the batch, for the ledger: trips whose id is not stored yet, once each.
    pub fn planned_keys(&self, trips: &[TripRecord]) -> PlannedKeys {
        let mut planned = PlannedKeys::default();
        for (trip, outcome) in trips.iter().zip(&self.outcomes) {
            if *outcome == IngestOutcome::Stored {
                planned.add(&trip.fleet_id, RecordKind::Trip, trip_key(&trip.fleet_id, &trip.vehicle_id, trip.end_ms, &trip.trip_id));
            }
        }
        planned
    }

    /// Whether none of the batch's vehicles gained trips since it was sorted, as `totals`
    /// reads now (every write that stores trips raises its vehicles' counts).
    fn still_holds(&self, totals: &impl ReadKey) -> TxResult<bool> {
        for (key, stored) in &self.stored_before {
            if stored_trip_count(totals, key)? != *stored {
                return Ok(false);
            }
        }
        Ok(true)
    }
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
                let new_mark = stale.insert(key.as_slice(), &stale.generate_id()?.to_be_bytes())?.is_none();
                Ok((created, new_mark))
            })
            .map_err(|e: TransactionError<StoreError>| StoreError::from(e))?;
        let (created, new_mark) = created;
        self.count_new_marks(u64::from(new_mark));
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

    /// See [`Store`]: [`Engine::sort_trips`], then [`Engine::write_sorted_trips`], sorted again
    /// if another write added trips to one of the vehicles in between.
    pub fn ingest_trips(&self, trips: &[TripRecord]) -> StoreResult<Vec<IngestOutcome>> {
        loop {
            let sorted = self.sort_trips(trips)?;
            match self.write_sorted_trips(trips, sorted) {
                Err(StoreError::Conflict) => continue,
                written => return written,
            }
        }
    }

    /// Sorts a batch of trips into stored and duplicate (against the store and earlier in the
    /// batch) and encodes every value the write will put, outside sled's transaction: the
    /// transaction then only checks that no vehicle gained trips since and puts the values.
    pub fn sort_trips(&self, trips: &[TripRecord]) -> StoreResult<SortedTrips> {
        let (outcomes, vehicles) = sort_out_trips(trips, &self.trip_blocks, &self.trip_id_index, &self.totals).map_err(outside_transaction)?;
        let mut daily: BTreeMap<Vec<u8>, DailyEnergy> = BTreeMap::new();
        let mut totals: BTreeMap<Vec<u8>, TotalsDelta> = BTreeMap::new();
        for (trip, outcome) in trips.iter().zip(&outcomes) {
            if *outcome != IngestOutcome::Stored {
                continue;
            }
            let day = utc_day(trip.end_ms);
            let entry = daily.entry(day_key(&trip.fleet_id, &trip.vehicle_id, day)).or_insert_with(|| DailyEnergy { day, ..DailyEnergy::default() });
            add_trip_to_day(entry, trip);
            let total = totals.entry(vehicle_key(&trip.fleet_id, &trip.vehicle_id)).or_default();
            total.trips += 1;
            total.energy_j += trip.friction_energy_j;
            total.distance_m += trip.distance_m;
            total.last_end_ms = Some(total.last_end_ms.map_or(trip.end_ms, |t| t.max(trip.end_ms)));
        }
        let mut stored_before = Vec::with_capacity(vehicles.len());
        let (mut blocks, mut index) = (Vec::new(), Vec::new());
        for vehicle in vehicles.into_values() {
            stored_before.push((vehicle.prefix[..vehicle.prefix.len() - 1].to_vec(), vehicle.stored));
            vehicle.encode_into(&mut blocks, &mut index)?;
        }
        Ok(SortedTrips { outcomes, stored_before, blocks, index, daily, totals })
    }

    /// Whether a sorted batch still holds: none of its vehicles gained trips since it was
    /// sorted (every write that stores trips raises its vehicles' counts).
    pub fn sorted_is_current(&self, sorted: &SortedTrips) -> StoreResult<bool> {
        sorted.still_holds(&self.totals).map_err(outside_transaction)
    }

    /// Writes a batch [`Engine::sort_trips`] sorted: one transaction over the day blocks, the
    /// trip-id index, the roll-up, the totals and the stale marks, then one flush.
    /// [`StoreError::Conflict`] (nothing written) if a vehicle's trip count moved since the sort.
    pub fn write_sorted_trips(&self, trips: &[TripRecord], sorted: SortedTrips) -> StoreResult<Vec<IngestOutcome>> {
        if trips.is_empty() {
            return Ok(Vec::new());
        }
        let new_marks = (&self.trip_blocks, &self.trip_id_index, &self.daily, &self.totals, &self.stale)
            .transaction(|(block_tree, index_tree, daily_tree, totals_tree, stale_tree)| {
                if !sorted.still_holds(totals_tree)? {
                    return Err(abort(StoreError::Conflict));
                }
                for (key, value) in &sorted.blocks {
                    block_tree.insert(key.as_slice(), value.as_slice())?;
                }
                for (key, value) in &sorted.index {
                    index_tree.insert(key.as_slice(), value.as_slice())?;
                }
                for (key, delta) in &sorted.daily {
                    let mut day: DailyEnergy = tx_get(daily_tree, key)?.unwrap_or_else(|| DailyEnergy { day: delta.day, ..DailyEnergy::default() });
                    merge_days(&mut day, delta);
                    tx_put(daily_tree, key, &day)?;
                }
                let mut new_marks = 0u64;
                for (key, delta) in &sorted.totals {
                    let mut total: VehicleTotals = tx_get(totals_tree, key)?.unwrap_or_default();
                    total.trips_recorded += delta.trips;
                    total.friction_energy_j += delta.energy_j;
                    total.distance_m += delta.distance_m;
                    total.last_trip_end_ms = match (total.last_trip_end_ms, delta.last_end_ms) {
                        (Some(a), Some(b)) => Some(a.max(b)),
                        (a, b) => a.or(b),
                    };
                    tx_put(totals_tree, key, &total)?;
                    if stale_tree.insert(key.as_slice(), &stale_tree.generate_id()?.to_be_bytes())?.is_none() {
                        new_marks += 1;
                    }
                }
                Ok(new_marks)
            })
            .map_err(|e: TransactionError<StoreError>| StoreError::from(e))?;
        self.count_new_marks(new_marks);
        if sorted.outcomes.contains(&IngestOutcome::Stored) {
            self.db.flush()?;
        }
        Ok(sorted.outcomes)
    }

    /// Every stored trip of one vehicle, oldest first (by end, then trip id).
    pub fn vehicle_trips(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Vec<TripRecord>> {
        let mut out = Vec::new();
        for entry in self.trip_blocks.scan_prefix(vehicle_prefix(fleet_id, vehicle_id)) {
            let (key, value) = entry?;
            let day = keys::day_of_key(&key)?;
            out.extend(trip_blocks::decode_block(fleet_id, vehicle_id, day, checked_body(&value)?)?);
        }
        Ok(out)
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

    /// See [`Store`]: one transaction for all of them. sled logs every insert and removal, and
    /// a transaction costs about as much to log as a forecast (measured: BENCHMARKS.md, "Fleet
    /// scale"), so a pass's vehicles share one.
    pub fn replace_forecasts(&self, records: &[VehicleForecasts]) -> StoreResult<Vec<Option<VehicleForecasts>>> {
        let writes = records
            .iter()
            .map(|record| {
                let new_keys: BTreeSet<Vec<u8>> = due_index_keys(record).into_iter().collect();
                Ok((vehicle_key(&record.fleet_id, &record.vehicle_id), encode(record)?, new_keys))
            })
            .collect::<StoreResult<Vec<_>>>()?;
        (&self.forecasts, &self.due_index)
            .transaction(|(forecasts, due_index)| {
                let mut before = Vec::with_capacity(writes.len());
                for (key, bytes, new_keys) in &writes {
                    let old = forecasts.get(key)?;
                    let old_record = old.as_deref().map(decode::<VehicleForecasts>).transpose().map_err(abort)?;
                    // Only what changed is written: a part whose due date stays where it was
                    // keeps its due-index entry.
                    if old.as_deref() != Some(bytes.as_slice()) {
                        let old_keys: BTreeSet<Vec<u8>> = old_record.as_ref().map(|r| due_index_keys(r).into_iter().collect()).unwrap_or_default();
                        for gone in old_keys.difference(new_keys) {
                            due_index.remove(gone.as_slice())?;
                        }
                        for added in new_keys.difference(&old_keys) {
                            due_index.insert(added.as_slice(), &[])?;
                        }
                        forecasts.insert(key.as_slice(), bytes.as_slice())?;
                    }
                    before.push(old_record);
                }
                Ok(before)
            })
            .map_err(|e: TransactionError<StoreError>| StoreError::from(e))
    }

    /// The stored bytes of a vehicle's forecasts under its key ([`vehicle_key`]), for
    /// [`super::value_cache::ValueCache`]; [`decode`] reads them.
    pub fn get_forecast_bytes(&self, key: &[u8]) -> StoreResult<Option<sled::IVec>> {
        Ok(self.forecasts.get(key)?)
    }

    /// See [`Store`].
    pub fn fleet_forecasts(&self, fleet_id: &str) -> StoreResult<Vec<VehicleForecasts>> {
        Self::scan_values(&self.forecasts, &fleet_prefix(fleet_id))
    }

    /// See [`Store`]: decoded one at a time from a prefix scan.
    pub fn visit_fleet_forecasts(&self, fleet_id: &str, visit: &mut dyn FnMut(VehicleForecasts) -> StoreResult<()>) -> StoreResult<()> {
        for bytes in self.forecasts.scan_prefix(fleet_prefix(fleet_id)).values() {
            visit(decode(&bytes?)?)?;
        }
        Ok(())
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
            if self.stale.insert(vehicle_key(fleet_id, vehicle_id), &generation.to_be_bytes())?.is_none() {
                self.count_new_marks(1);
            }
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
        if self.stale.compare_and_swap(key, Some(&mark.generation.to_be_bytes()), None as Option<&[u8]>)?.is_ok() {
            // Never below zero, even if a count went astray.
            let _ = self.stale_marks.fetch_update(Ordering::Relaxed, Ordering::Relaxed, |n| Some(n.saturating_sub(1)));
        }
        Ok(())
    }

    /// See [`Store`].
    pub fn is_stale(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<bool> {
        Ok(self.stale.contains_key(vehicle_key(fleet_id, vehicle_id))?)
    }

    /// Every stale mark in the store, from the count kept as marks come and go (no scan).
    pub fn count_all_stale(&self) -> u64 {
        self.stale_marks.load(Ordering::Relaxed)
    }

    fn count_new_marks(&self, new_marks: u64) {
        self.stale_marks.fetch_add(new_marks, Ordering::Relaxed);
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
    /// The tree holding one record per ledger key of `kind`: every kind but trips, which
    /// live in day blocks.
    fn keyed_tree(&self, kind: RecordKind) -> Option<&sled::Tree> {
        match kind {
            RecordKind::Fleet => Some(&self.fleets),
            RecordKind::Vehicle => Some(&self.vehicles),
            RecordKind::Trip => None,
            RecordKind::Inspection => Some(&self.inspections),
            RecordKind::Replacement => Some(&self.replacements),
        }
    }

    /// Whether the store holds the record of `kind` with ledger key `key` (for a trip: its
    /// day block holds its id).
    fn holds(&self, kind: RecordKind, key: &[u8]) -> StoreResult<bool> {
        if let Some(tree) = self.keyed_tree(kind) {
            return Ok(tree.contains_key(key)?);
        }
        let (fleet_id, vehicle_id, end_ms, trip_id) = trip_blocks::parse_trip_key(key)?;
        let day = utc_day(end_ms);
        match self.trip_blocks.get(day_key(fleet_id, vehicle_id, day))? {
            Some(bytes) => Ok(trip_blocks::decode_block(fleet_id, vehicle_id, day, checked_body(&bytes)?)?.iter().any(|t| t.trip_id == trip_id && t.end_ms == end_ms)),
            None => Ok(false),
        }
    }

    /// The new keys of a fleet, vehicle, inspection or replacement write (none when the record
    /// exists already).
    pub fn plan_one(&self, kind: RecordKind, fleet_id: &str, key: Vec<u8>) -> StoreResult<PlannedKeys> {
        let mut planned = PlannedKeys::default();
        if !self.holds(kind, &key)? {
            planned.add(fleet_id, kind, key);
        }
        Ok(planned)
    }

    /// How many of `keys` the store holds.
    pub fn count_present(&self, keys: &[(RecordKind, Vec<u8>)]) -> StoreResult<usize> {
        let mut present = 0;
        for (kind, key) in keys {
            if self.holds(*kind, key)? {
                present += 1;
            }
        }
        Ok(present)
    }

    /// Tallies every record and checks every stored value's checksum, the trips against the
    /// vehicles' totals and the trip-id index.
    pub fn audit(&self) -> StoreResult<Audit> {
        let mut audit = Audit::default();
        for kind in RecordKind::ALL {
            let Some(tree) = self.keyed_tree(kind) else { continue };
            for entry in tree.iter() {
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
        // Trips, per vehicle (key `fleet 0 vehicle`), from their blocks and from the index.
        let mut per_vehicle: BTreeMap<Vec<u8>, u64> = BTreeMap::new();
        for entry in self.trip_blocks.iter() {
            let (key, value) = entry?;
            let mut block = Tallies::default();
            match tally_block(&key, &value, &mut block) {
                Ok(count) => {
                    audit.tallies.add(&block);
                    *per_vehicle.entry(key[..vehicle_part_len(&key)].to_vec()).or_default() += count;
                }
                Err(error) => audit.problem(format!("trips {}: {error}", printable_key(&key))),
            }
        }
        let mut indexed: BTreeMap<Vec<u8>, u64> = BTreeMap::new();
        for entry in self.trip_id_index.iter() {
            let (key, value) = entry?;
            match checked_body(&value).and_then(trip_blocks::decode_segment) {
                Ok(entries) => *indexed.entry(key[..vehicle_part_len(&key)].to_vec()).or_default() += entries.len() as u64,
                Err(error) => audit.problem(format!("trip-id index {}: {error}", printable_key(&key))),
            }
        }
        // Writes find a vehicle's index segments from its recorded count: the two must agree.
        let mut recorded: BTreeMap<Vec<u8>, u64> = BTreeMap::new();
        for entry in self.totals.iter() {
            let (key, value) = entry?;
            let Ok(totals) = decode::<VehicleTotals>(&value) else { continue };
            recorded.insert(key.to_vec(), totals.trips_recorded);
        }
        let with_trips: std::collections::BTreeSet<&Vec<u8>> = recorded.keys().chain(per_vehicle.keys()).collect();
        for vehicle in with_trips {
            let (counted, stored) = (recorded.get(vehicle).copied().unwrap_or(0), per_vehicle.get(vehicle).copied().unwrap_or(0));
            if counted != stored {
                audit.problem(format!("vehicle {}: {counted} trips were recorded, {stored} are stored", printable_key(vehicle)));
            }
        }
        let vehicles: std::collections::BTreeSet<&Vec<u8>> = per_vehicle.keys().chain(indexed.keys()).collect();
        for vehicle in vehicles {
            let (stored, ids) = (per_vehicle.get(vehicle).copied().unwrap_or(0), indexed.get(vehicle).copied().unwrap_or(0));
            if stored != ids {
                audit.problem(format!("vehicle {}: the trip-id index lists {ids} trips, {stored} trips are stored", printable_key(vehicle)));
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

type TxResult<T> = Result<T, ConflictableTransactionError<StoreError>>;

/// Reads one key, inside a transaction or outside one, so that a trip batch's sort (outside)
/// and the write's check that the sort still holds (inside) read totals by the same code.
trait ReadKey {
    fn read_key(&self, key: &[u8]) -> TxResult<Option<sled::IVec>>;
}

impl ReadKey for sled::Tree {
    fn read_key(&self, key: &[u8]) -> TxResult<Option<sled::IVec>> {
        self.get(key).map_err(|e| abort(e.into()))
    }
}

impl ReadKey for TransactionalTree {
    fn read_key(&self, key: &[u8]) -> TxResult<Option<sled::IVec>> {
        Ok(self.get(key)?)
    }
}

/// Trips stored for a vehicle (its totals key), 0 when it has none.
fn stored_trip_count(totals: &impl ReadKey, key: &[u8]) -> TxResult<u64> {
    match totals.read_key(key)? {
        Some(bytes) => Ok(decode::<VehicleTotals>(&bytes).map_err(abort)?.trips_recorded),
        None => Ok(0),
    }
}

/// A transaction-style error from code run outside any transaction, as a store error.
fn outside_transaction(error: ConflictableTransactionError<StoreError>) -> StoreError {
    match error {
        ConflictableTransactionError::Abort(error) => error,
        ConflictableTransactionError::Storage(error) => error.into(),
        ConflictableTransactionError::Conflict => StoreError::Conflict,
    }
}

/// One vehicle's trips as a write sees them: its trip-id index, the day blocks read so far
/// (with the trips this write adds) and the index entries to append.
struct VehicleTrips {
    prefix: Vec<u8>,
    /// Trips stored before this write (= entries in the index, see `totals`).
    stored: u64,
    /// Days of the stored trips whose id hash is one of this write's (the only ones a duplicate
    /// check can need), by id hash. Keeping only those bounds the memory of a write by the
    /// write's size, not by the vehicle's history.
    days_by_hash: HashMap<u32, Vec<i64>>,
    /// Entries of the last, partly filled segment (rewritten with the new entries).
    open_segment: Vec<IdEntry>,
    new_entries: Vec<IdEntry>,
    /// Blocks read or created, by day, and whether this write changed them.
    blocks: BTreeMap<i64, (Vec<TripRecord>, bool)>,
    /// Ids added by this write.
    added: HashSet<String>,
}

impl VehicleTrips {
    /// The vehicle's index as a write of trips with these id hashes (`wanted`) needs it.
    fn load(prefix: Vec<u8>, wanted: &HashSet<u32>, index: &impl ReadKey, totals: &impl ReadKey) -> TxResult<Self> {
        let stored = stored_trip_count(totals, &prefix[..prefix.len() - 1])?;
        let segments = stored.div_ceil(SEGMENT_ENTRIES as u64);
        let mut days_by_hash: HashMap<u32, Vec<i64>> = HashMap::with_capacity(wanted.len());
        let mut open_segment = Vec::new();
        for segment in 0..segments {
            let expected = if segment + 1 == segments { stored - segment * SEGMENT_ENTRIES as u64 } else { SEGMENT_ENTRIES as u64 };
            let key = trip_blocks::segment_key(&prefix, segment as u32);
            let missing = || abort(StoreError::Corrupt(format!("trip-id index of {}: segment {segment} is missing or short", printable_key(&prefix))));
            let bytes = index.read_key(&key)?.ok_or_else(missing)?;
            let entries = trip_blocks::decode_segment(checked_body(&bytes).map_err(abort)?).map_err(abort)?;
            if entries.len() as u64 != expected {
                return Err(missing());
            }
            for entry in entries.iter().filter(|entry| wanted.contains(&entry.hash)) {
                days_by_hash.entry(entry.hash).or_default().push(entry.day);
            }
            if expected < SEGMENT_ENTRIES as u64 {
                open_segment = entries;
            }
        }
        Ok(Self { prefix, stored, days_by_hash, open_segment, new_entries: Vec::new(), blocks: BTreeMap::new(), added: HashSet::new() })
    }

    fn block_key(&self, day: i64) -> Vec<u8> {
        let mut key = self.prefix.clone();
        key.extend_from_slice(&keys::ordered_i64(day));
        key
    }

    fn block(&mut self, blocks: &impl ReadKey, day: i64) -> TxResult<&mut (Vec<TripRecord>, bool)> {
        if !self.blocks.contains_key(&day) {
            // The ids are the key's; blocks read here are only searched and re-encoded.
            let trips = match blocks.read_key(&self.block_key(day))? {
                Some(bytes) => trip_blocks::decode_block("", "", day, checked_body(&bytes).map_err(abort)?).map_err(abort)?,
                None => Vec::new(),
            };
            self.blocks.insert(day, (trips, false));
        }
        self.blocks.get_mut(&day).ok_or_else(|| abort(StoreError::Engine("block cache".into())))
    }

    /// Whether a trip with this id was stored before this write (whatever its time).
    fn stored_before(&mut self, blocks: &impl ReadKey, trip_id: &str) -> TxResult<bool> {
        let Some(days) = self.days_by_hash.get(&trip_blocks::id_hash(trip_id)).cloned() else { return Ok(false) };
        for day in days {
            if self.block(blocks, day)?.0.iter().any(|t| t.trip_id == trip_id) {
                return Ok(true);
            }
        }
        Ok(false)
    }

    /// Adds a trip unless its id is stored or was added by this write.
    fn add(&mut self, blocks: &impl ReadKey, trip: &TripRecord) -> TxResult<IngestOutcome> {
        if self.added.contains(&trip.trip_id) || self.stored_before(blocks, &trip.trip_id)? {
            return Ok(IngestOutcome::Duplicate);
        }
        let day = utc_day(trip.end_ms);
        let block = self.block(blocks, day)?;
        block.0.push(trip.clone());
        block.1 = true;
        self.new_entries.push(IdEntry { hash: trip_blocks::id_hash(&trip.trip_id), day });
        self.added.insert(trip.trip_id.clone());
        Ok(IngestOutcome::Stored)
    }

    /// Encodes the changed blocks and the index segments the new entries go to, as (key,
    /// value) pairs to put.
    fn encode_into(mut self, blocks: &mut Vec<(Vec<u8>, Vec<u8>)>, index: &mut Vec<(Vec<u8>, Vec<u8>)>) -> StoreResult<()> {
        for (day, (mut trips, changed)) in std::mem::take(&mut self.blocks) {
            if changed {
                blocks.push((self.block_key(day), trip_blocks::encode_block(day, &mut trips)?));
            }
        }
        if self.new_entries.is_empty() {
            return Ok(());
        }
        let first = self.stored / SEGMENT_ENTRIES as u64;
        let entries: Vec<IdEntry> = self.open_segment.iter().chain(&self.new_entries).copied().collect();
        for (n, chunk) in entries.chunks(SEGMENT_ENTRIES).enumerate() {
            index.push((trip_blocks::segment_key(&self.prefix, (first + n as u64) as u32), trip_blocks::encode_segment(chunk)));
        }
        Ok(())
    }
}

/// Sorts a batch of trips into stored and duplicate (against the store and earlier in the
/// batch), adding the stored ones to their vehicles' blocks in memory.
fn sort_out_trips(
    trips: &[TripRecord],
    blocks: &impl ReadKey,
    index: &impl ReadKey,
    totals: &impl ReadKey,
) -> TxResult<(Vec<IngestOutcome>, BTreeMap<Vec<u8>, VehicleTrips>)> {
    let mut wanted: HashMap<Vec<u8>, HashSet<u32>> = HashMap::new();
    for trip in trips {
        wanted.entry(vehicle_prefix(&trip.fleet_id, &trip.vehicle_id)).or_default().insert(trip_blocks::id_hash(&trip.trip_id));
    }
    let mut vehicles: BTreeMap<Vec<u8>, VehicleTrips> = BTreeMap::new();
    let mut outcomes = Vec::with_capacity(trips.len());
    for trip in trips {
        let prefix = vehicle_prefix(&trip.fleet_id, &trip.vehicle_id);
        let vehicle = match vehicles.entry(prefix) {
            std::collections::btree_map::Entry::Occupied(entry) => entry.into_mut(),
            std::collections::btree_map::Entry::Vacant(entry) => {
                let hashes = wanted.get(entry.key()).ok_or_else(|| abort(StoreError::Engine("trip hashes of a vehicle".into())))?;
                let loaded = VehicleTrips::load(entry.key().clone(), hashes, index, totals)?;
                entry.insert(loaded)
            }
        };
        outcomes.push(vehicle.add(blocks, trip)?);
    }
    Ok((outcomes, vehicles))
}

/// Length of the `fleet 0 vehicle` part of a per-vehicle key (the whole key if it has no
/// second separator).
fn vehicle_part_len(key: &[u8]) -> usize {
    let fleet_end = key.iter().position(|b| *b == keys::SEP).unwrap_or(key.len());
    key[(fleet_end + 1).min(key.len())..].iter().position(|b| *b == keys::SEP).map_or(key.len(), |p| fleet_end + 1 + p)
}

/// Adds the ledger key of every trip of a stored day block to `tallies`; returns the number of
/// trips.
fn tally_block(key: &[u8], value: &[u8], tallies: &mut Tallies) -> StoreResult<u64> {
    let (fleet_id, vehicle_id, _) = trip_blocks::split_vehicle_key(key)?;
    let day = keys::day_of_key(key)?;
    let trips = trip_blocks::decode_block(fleet_id, vehicle_id, day, checked_body(value)?)?;
    for trip in &trips {
        tallies.add_key(fleet_id, RecordKind::Trip, &trip_key(fleet_id, vehicle_id, trip.end_ms, &trip.trip_id));
    }
    Ok(trips.len() as u64)
}

/// Adds the records of one stored entry of a backed-up tree to `tallies`: one per key in the
/// trees of fleets, vehicles, inspections, replacements and schema-3 trips, one per trip in a
/// day block. Entries of other trees count nothing.
pub fn tally_entry(tree: &str, key: &[u8], value: &[u8], tallies: &mut Tallies) -> StoreResult<()> {
    let kind = match tree {
        "fleets" => RecordKind::Fleet,
        "vehicles" => RecordKind::Vehicle,
        "trips" => RecordKind::Trip,
        "inspections" => RecordKind::Inspection,
        "replacements" => RecordKind::Replacement,
        "trip_blocks" => return tally_block(key, value, tallies).map(|_| ()),
        _ => return Ok(()),
    };
    tallies.add_key(&fleet_of_key(kind, key), kind, key);
    Ok(())
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::ledger::{Ledger, LedgerState};
    use crate::store::sled_store::SledStore;

    const DAY_MS: i64 = MS_PER_DAY;

    /// Trips of two vehicles: out of time order, ids not in time order, some with a reported
    /// split, regeneration or hot energy; the second vehicle has more trips than one trip-id
    /// index segment holds.
    fn fixture_trips() -> Vec<TripRecord> {
        let mut trips = Vec::new();
        for (vehicle, count) in [("van-1", 60usize), ("van-2", SEGMENT_ENTRIES + 300)] {
            for n in 0..count {
                let end_ms = 20_000 * DAY_MS + ((n * 7919) % (count * 3)) as i64 * 3_600_000 + 17;
                let friction = 1.0e6 + n as f64 * 1234.5;
                let reported = n % 5 == 0;
                trips.push(TripRecord {
                    fleet_id: "north".into(),
                    vehicle_id: vehicle.into(),
                    trip_id: format!("t{:05}", (n * 37) % count),
                    start_ms: end_ms - 1_800_000,
                    end_ms,
                    distance_m: 12_000.0 + n as f64,
                    friction_energy_j: friction,
                    axle_energy_j: if reported { vec![friction * 0.5 + 1.0, friction * 0.5 - 1.0] } else { vec![0.6 * friction, 0.4 * friction] },
                    axle_split_reported: reported,
                    brake_applications: 30 + n as u32,
                    regen_energy_j: (n % 3 == 0).then_some(2.0e5),
                    hot_energy_j: if n % 4 == 0 { 1.0e5 } else { 0.0 },
                });
            }
        }
        trips
    }

    /// Opens the sled database in `dir` as the store does, waiting while a database dropped a
    /// moment ago still holds the directory's lock.
    fn open_when_released(dir: &std::path::Path) -> sled::Db {
        super::super::integrity::open_when_unlocked(dir, PageSettings::with_cache(8 << 20)).expect("open the database")
    }

    /// Writes a schema-3 data directory: one record per trip in `trips`, the `trip_ids` index,
    /// roll-ups and totals, and the acknowledged-write ledger, as schema 3 wrote them (sled's
    /// files uncompressed).
    fn write_schema_3(dir: &std::path::Path, trips: &[TripRecord], daily: &[(Vec<u8>, DailyEnergy)], totals: &[(Vec<u8>, VehicleTotals)]) {
        if !dir.join("conf").exists() {
            drop(sled::Config::new().path(dir).open().unwrap());
        }
        let db = open_when_released(dir);
        db.open_tree("meta").unwrap().insert(SCHEMA_KEY, &3u32.to_be_bytes()).unwrap();
        let fleet = FleetRecord::default_for("north");
        db.open_tree("fleets").unwrap().insert(b"north", encode(&fleet).unwrap()).unwrap();
        let (trip_tree, id_tree) = (db.open_tree("trips").unwrap(), db.open_tree("trip_ids").unwrap());
        let mut ledger = Tallies::default();
        ledger.add_key("north", RecordKind::Fleet, b"north");
        for trip in trips {
            let key = trip_key(&trip.fleet_id, &trip.vehicle_id, trip.end_ms, &trip.trip_id);
            trip_tree.insert(&key, encode(trip).unwrap()).unwrap();
            id_tree.insert(child_key(&trip.fleet_id, &trip.vehicle_id, &trip.trip_id), &keys::ordered_i64(trip.end_ms)).unwrap();
            ledger.add_key("north", RecordKind::Trip, &key);
        }
        for (key, day) in daily {
            db.open_tree("daily").unwrap().insert(key, encode(day).unwrap()).unwrap();
        }
        for (key, total) in totals {
            db.open_tree("totals").unwrap().insert(key, encode(total).unwrap()).unwrap();
        }
        db.flush().unwrap();
        Ledger::create(dir, LedgerState { committed: ledger, pending: None }).unwrap();
    }

    #[test]
    fn a_schema_3_directory_is_migrated_to_day_blocks_with_every_trip_roll_up_and_total() {
        let trips = fixture_trips();
        // The roll-ups and totals those trips give, computed by the store itself.
        let reference = SledStore::temporary().unwrap();
        assert!(reference.ingest_trips(&trips).unwrap().iter().all(|o| *o == IngestOutcome::Stored));
        let vehicles = ["van-1", "van-2"];
        let mut daily = Vec::new();
        let mut totals = Vec::new();
        for vehicle in vehicles {
            for day in reference.daily_energy("north", vehicle).unwrap() {
                daily.push((day_key("north", vehicle, day.day), day));
            }
            totals.push((vehicle_key("north", vehicle), reference.vehicle_totals("north", vehicle).unwrap()));
        }

        let dir = tempfile::tempdir().unwrap();
        write_schema_3(dir.path(), &trips, &daily, &totals);
        let store = SledStore::open(dir.path()).expect("migrated at start-up");
        for vehicle in vehicles {
            let mut expected: Vec<TripRecord> = trips.iter().filter(|t| t.vehicle_id == vehicle).cloned().collect();
            expected.sort_by(|a, b| (a.end_ms, &a.trip_id).cmp(&(b.end_ms, &b.trip_id)));
            assert_eq!(store.vehicle_trips("north", vehicle).unwrap(), expected, "{vehicle}");
            assert_eq!(store.daily_energy("north", vehicle).unwrap(), reference.daily_energy("north", vehicle).unwrap());
            assert_eq!(store.vehicle_totals("north", vehicle).unwrap(), reference.vehicle_totals("north", vehicle).unwrap());
        }
        assert_eq!(store.get_fleet("north").unwrap(), Some(FleetRecord::default_for("north")));
        // A resent trip is a duplicate whatever its time; a new one is stored after the old ones.
        let mut resent = trips[1300].clone();
        resent.end_ms += 5 * DAY_MS;
        resent.start_ms += 5 * DAY_MS;
        let mut new = trips[0].clone();
        new.trip_id = "fresh".into();
        assert_eq!(store.ingest_trips(&[resent, new]).unwrap(), vec![IngestOutcome::Duplicate, IngestOutcome::Stored]);
        drop(store);

        let db = open_when_released(dir.path());
        assert_eq!(Engine::stored_schema_version(&db).unwrap(), Some(SCHEMA_VERSION));
        assert!(db.open_tree("trips").unwrap().is_empty() && db.open_tree("trip_ids").unwrap().is_empty(), "old trees dropped");
        drop(db);
        let store = SledStore::open(dir.path()).expect("verified against the ledger after the migration");
        assert_eq!(store.vehicle_totals("north", "van-1").unwrap().trips_recorded, 61);
    }

    #[test]
    fn a_migration_cut_short_after_the_blocks_were_built_finishes() {
        let trips = fixture_trips();
        let dir = tempfile::tempdir().unwrap();
        let mut totals = BTreeMap::new();
        for trip in &trips {
            let total: &mut VehicleTotals = totals.entry(vehicle_key("north", &trip.vehicle_id)).or_default();
            total.trips_recorded += 1;
        }
        write_schema_3(dir.path(), &trips, &[], &totals.into_iter().collect::<Vec<_>>());
        {
            // Blocks built and marked, then the process stopped while dropping the old trees.
            let engine = Engine::with_trees(open_when_released(dir.path())).unwrap();
            engine.move_trips_into_blocks().unwrap();
            let db = &engine.db;
            let (trip_tree, id_tree) = (db.open_tree("trips").unwrap(), db.open_tree("trip_ids").unwrap());
            for trip in &trips[..10] {
                trip_tree.insert(trip_key("north", &trip.vehicle_id, trip.end_ms, &trip.trip_id), encode(trip).unwrap()).unwrap();
                id_tree.insert(child_key("north", &trip.vehicle_id, &trip.trip_id), &[0u8; 8]).unwrap();
            }
            db.flush().unwrap();
        }
        let store = SledStore::open(dir.path()).expect("the migration finishes");
        assert_eq!(store.vehicle_trips("north", "van-2").unwrap().len(), SEGMENT_ENTRIES + 300);
    }

    /// A schema-4 directory holding `forecasts` in the schema-4 layout (fits whole) and their
    /// due index; returns the due index's keys. With `cut_short_after`, that many vehicles'
    /// forecasts are already in the new layout with the migration's progress key at the last of
    /// them, as a migration stopped between two chunks leaves them.
    fn write_schema_4_forecasts(dir: &std::path::Path, forecasts: &[(VehicleForecasts, Vec<Option<brakeledger_models::WearFit>>)], cut_short_after: Option<usize>) -> Vec<Vec<u8>> {
        let store = SledStore::open(dir).unwrap();
        for (record, _) in forecasts {
            store.put_forecasts(record).unwrap();
        }
        drop(store);
        let db = open_when_released(dir);
        let tree = db.open_tree("forecasts").unwrap();
        for (i, (record, fits)) in forecasts.iter().enumerate() {
            let key = vehicle_key(&record.fleet_id, &record.vehicle_id);
            if cut_short_after.is_some_and(|n| i < n) {
                db.open_tree("meta").unwrap().insert(FORECASTS_COMPACTED_THROUGH_KEY, key.as_slice()).unwrap();
            } else {
                tree.insert(key, encode(&super::super::forecast_layout::LegacyVehicleForecasts::of(record, fits)).unwrap()).unwrap();
            }
        }
        db.open_tree("meta").unwrap().insert(SCHEMA_KEY, &4u32.to_be_bytes()).unwrap();
        db.flush().unwrap();
        db.open_tree("due_index").unwrap().iter().keys().map(|k| k.unwrap().to_vec()).collect()
    }

    #[test]
    fn a_schema_4_directory_gets_its_forecasts_in_the_compact_layout_with_every_value_kept() {
        let mut forecasts = super::super::forecast_layout::computed_forecasts(6);
        // One part with quantiles off the hour (as schema 4 stored every computed one).
        if let Some(due) = forecasts[0].0.parts[0].outlook.due.as_mut() {
            due.quantile_days.iter_mut().for_each(|d| *d += 0.01);
        }
        for cut_short_after in [None, Some(2)] {
            let dir = tempfile::tempdir().unwrap();
            let due_index = write_schema_4_forecasts(dir.path(), &forecasts, cut_short_after);
            let legacy_bytes: u64 = open_when_released(dir.path()).open_tree("forecasts").unwrap().iter().values().map(|v| v.unwrap().len() as u64).sum();
            let store = SledStore::open(dir.path()).expect("migrated at start-up");
            for (record, _) in &forecasts {
                assert_eq!(store.get_forecasts("north", &record.vehicle_id).unwrap().as_ref(), Some(record), "{cut_short_after:?}");
            }
            drop(store);
            let db = open_when_released(dir.path());
            assert_eq!(Engine::stored_schema_version(&db).unwrap(), Some(SCHEMA_VERSION));
            let keys: Vec<Vec<u8>> = db.open_tree("due_index").unwrap().iter().keys().map(|k| k.unwrap().to_vec()).collect();
            assert_eq!(keys, due_index, "the due index is unchanged");
            let bytes: u64 = db.open_tree("forecasts").unwrap().iter().values().map(|v| v.unwrap().len() as u64).sum();
            if cut_short_after.is_none() {
                assert!(bytes * 2 < legacy_bytes, "{bytes} bytes after the migration, {legacy_bytes} before");
            }
            let meta = db.open_tree("meta").unwrap();
            assert!(meta.get(FORECASTS_COMPACTED_KEY).unwrap().is_some() && meta.get(FORECASTS_COMPACTED_THROUGH_KEY).unwrap().is_none());
        }
    }

    #[test]
    fn trip_ids_stay_unique_per_vehicle_across_batches_days_and_segments() {
        let store = SledStore::temporary().unwrap();
        let trips = fixture_trips();
        for chunk in trips.chunks(97) {
            store.ingest_trips(chunk).unwrap();
        }
        // Every trip again, each moved to another day, in other batches: all duplicates.
        let moved: Vec<TripRecord> = trips.iter().rev().map(|t| TripRecord { end_ms: t.end_ms + 3 * DAY_MS, start_ms: t.start_ms + 3 * DAY_MS, ..t.clone() }).collect();
        for chunk in moved.chunks(250) {
            assert!(store.ingest_trips(chunk).unwrap().iter().all(|o| *o == IngestOutcome::Duplicate));
        }
        // The same id on another vehicle is another trip.
        let other = TripRecord { vehicle_id: "van-3".into(), ..trips[0].clone() };
        assert_eq!(store.ingest_trips(&[other.clone(), other]).unwrap(), vec![IngestOutcome::Stored, IngestOutcome::Duplicate]);
        assert_eq!(store.vehicle_totals("north", "van-2").unwrap().trips_recorded, (SEGMENT_ENTRIES + 300) as u64);
    }

    #[test]
    fn a_sorted_batch_is_refused_once_its_vehicles_gained_trips_and_written_as_sorted_otherwise() {
        let engine = Engine::from_db(temporary_db().unwrap()).unwrap();
        let trips = fixture_trips();
        let (first, second) = trips.split_at(40);
        // Sorted before `first` reached the store; `first` shares trip ids with `second`'s
        // vehicle van-1 (ids repeat within a vehicle's fixture) and adds trips to it.
        let stale = engine.sort_trips(second).unwrap();
        engine.ingest_trips(first).unwrap();
        let totals_before = engine.vehicle_totals("north", "van-1").unwrap();
        assert!(matches!(engine.write_sorted_trips(second, stale), Err(StoreError::Conflict)));
        assert_eq!(engine.vehicle_totals("north", "van-1").unwrap(), totals_before, "a refused write writes nothing");
        // Sorted again, it goes in; the whole fixture then reads back as one ingest of it does.
        let outcomes = engine.write_sorted_trips(second, engine.sort_trips(second).unwrap()).unwrap();
        let reference = Engine::from_db(temporary_db().unwrap()).unwrap();
        let expected = reference.ingest_trips(&trips).unwrap();
        assert_eq!(outcomes, expected[40..].to_vec());
        for vehicle in ["van-1", "van-2"] {
            assert_eq!(engine.vehicle_totals("north", vehicle).unwrap(), reference.vehicle_totals("north", vehicle).unwrap());
            assert_eq!(engine.vehicle_trips("north", vehicle).unwrap(), reference.vehicle_trips("north", vehicle).unwrap());
            assert_eq!(engine.daily_energy("north", vehicle).unwrap(), reference.daily_energy("north", vehicle).unwrap());
        }
    }

    #[test]
    fn a_write_loads_only_the_index_entries_its_own_trips_can_match() {
        let engine = Engine::from_db(temporary_db().unwrap()).unwrap();
        let trips = fixture_trips();
        engine.ingest_trips(&trips).unwrap();
        let stored = trips.iter().find(|t| t.vehicle_id == "van-2").unwrap().clone();
        let batch = [stored.clone(), TripRecord { trip_id: "new-one".into(), ..stored.clone() }];
        let wanted: HashSet<u32> = batch.iter().map(|t| trip_blocks::id_hash(&t.trip_id)).collect();
        let loaded = VehicleTrips::load(vehicle_prefix("north", "van-2"), &wanted, &engine.trip_id_index, &engine.totals).map_err(|_| "load").unwrap();
        // The vehicle has 1,324 trips stored; only the stored trip's hash is kept (the new id's
        // hash is not in the index), so a write's memory follows the write, not the history.
        assert_eq!(loaded.stored, (SEGMENT_ENTRIES + 300) as u64);
        assert_eq!(loaded.days_by_hash.len(), 1);
        assert_eq!(engine.ingest_trips(&batch).unwrap(), vec![IngestOutcome::Duplicate, IngestOutcome::Stored]);
    }

    #[test]
    fn a_new_directory_compresses_as_configured_and_keeps_its_setting() {
        let dir = tempfile::tempdir().unwrap();
        assert_eq!(files_compressed(dir.path()), None, "nothing created yet");
        let plain = PageSettings { compress_new_directories: false, ..PageSettings::with_cache(8 << 20) };
        drop(sled_config(dir.path(), plain).open().unwrap());
        assert_eq!(files_compressed(dir.path()), Some(false), "created uncompressed as configured");
        // Opened later with the default (compress new directories), it stays as it was made.
        let db = sled_config(dir.path(), PageSettings::with_cache(8 << 20)).open().expect("reopens as it was made");
        db.insert(b"k", b"v").unwrap();
        drop(db);
        assert_eq!(files_compressed(dir.path()), Some(false));
        let other = tempfile::tempdir().unwrap();
        drop(sled_config(other.path(), PageSettings::with_cache(8 << 20)).open().unwrap());
        assert_eq!(files_compressed(other.path()), Some(true), "the default compresses");
    }

    #[test]
    fn a_directory_made_before_compression_opens_as_it_was_made_and_a_restore_compresses_it() {
        let trips = fixture_trips();
        let old = tempfile::tempdir().unwrap();
        {
            // A directory as brakeledger made it before compression: sled's defaults.
            drop(sled::Config::new().path(old.path()).open().unwrap());
            let store = SledStore::open(old.path()).expect("an uncompressed directory opens");
            store.upsert_fleet(&FleetRecord::default_for("north")).unwrap();
            store.ingest_trips(&trips).unwrap();
        }
        assert_eq!(files_compressed(old.path()), Some(false));
        // sled itself refuses to read it with compression on: the reason `sled_config` asks.
        assert!(sled::Config::new().path(old.path()).use_compression(true).open().is_err());
        let store = SledStore::open(old.path()).expect("reopened as it was made");
        assert_eq!(store.vehicle_totals("north", "van-2").unwrap().trips_recorded, (SEGMENT_ENTRIES + 300) as u64);
        let (mut file, _) = store.export_backup(0).unwrap();
        let backup = old.path().join("copy.backup");
        std::io::copy(&mut file, &mut std::fs::File::create(&backup).unwrap()).unwrap();
        drop(store);

        let new = tempfile::tempdir().unwrap();
        let target = new.path().join("data");
        super::super::backup_file::restore(&backup, &target, PageSettings::with_cache(8 << 20)).expect("restore into a new directory");
        assert_eq!(files_compressed(&target), Some(true), "a directory sled creates now is compressed");
        assert!(sled::Config::new().path(&target).use_compression(false).open().is_err(), "sled refuses to read it uncompressed");
        let restored = SledStore::open(&target).expect("the restored directory opens");
        for vehicle in ["van-1", "van-2"] {
            let mut expected: Vec<TripRecord> = trips.iter().filter(|t| t.vehicle_id == vehicle).cloned().collect();
            expected.sort_by(|a, b| (a.end_ms, &a.trip_id).cmp(&(b.end_ms, &b.trip_id)));
            assert_eq!(restored.vehicle_trips("north", vehicle).unwrap(), expected, "{vehicle}");
        }
        // A resent trip is still a duplicate in the compressed directory.
        assert_eq!(restored.ingest_trips(&trips[..1]).unwrap(), vec![IngestOutcome::Duplicate]);
    }

    #[test]
    fn stale_marks_are_counted_without_a_scan() {
        let store = SledStore::temporary().unwrap();
        store.ingest_trips(&fixture_trips()).unwrap();
        store.mark_stale("north", &["van-9".to_owned(), "van-1".to_owned()]).unwrap();
        assert_eq!(store.count_all_stale().unwrap(), 3);
        for mark in store.stale_vehicles(10).unwrap() {
            store.clear_stale(&mark).unwrap();
        }
        assert_eq!(store.count_all_stale().unwrap(), 0);
    }
}
