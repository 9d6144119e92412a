//! The embedded default engine, sled 0.34, as a [`Store`]: an [`Engine`] (the open database
//! and its trees) behind a slot that can be reopened, with a disk-space gate in front of writes.
//!
//! - **Memory**: sled's page cache is `[storage] cache_capacity_bytes` (64 MiB by default;
//!   sled's own default of 1 GB let memory grow with every write until it got there).
//! - **Full disk**: every write first checks free space and is refused with
//!   [`StoreError::StorageFull`] below `[storage] min_free_bytes`. If the engine hits a full
//!   disk anyway, sled keeps failing every write with that error until the database is
//!   reopened; the store then marks itself *poisoned* and, at the next write or
//!   [`Store::writable`] check once space is free again, reopens the database in place (waiting
//!   for calls in flight to finish). Reads keep working throughout.

use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, RwLock};
use std::time::{Duration, Instant};

pub use super::sled_engine::SCHEMA_VERSION;
use super::disk_space;
use super::sled_engine::Engine;
use super::*;

/// How the database is opened.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StoreOptions {
    /// sled page cache, bytes.
    pub cache_capacity_bytes: u64,
    /// Free space below which writes are refused, bytes.
    pub min_free_bytes: u64,
}

impl Default for StoreOptions {
    fn default() -> Self {
        let defaults = crate::config::StorageConfig::default();
        Self { cache_capacity_bytes: defaults.cache_capacity_bytes, min_free_bytes: defaults.min_free_bytes }
    }
}

impl From<&crate::config::StorageConfig> for StoreOptions {
    fn from(config: &crate::config::StorageConfig) -> Self {
        Self { cache_capacity_bytes: config.cache_capacity_bytes, min_free_bytes: config.min_free_bytes }
    }
}

/// Free space needed before a poisoned database is reopened, bytes (at least; the configured
/// reserve when larger): reopening replays sled's log and writes, and a reopen that fails for
/// lack of space leaves no database open until the next attempt.
const REOPEN_MIN_FREE_BYTES: u64 = 4 * 1024 * 1024;

/// Longest wait for calls in flight to let go of the engine before a reopen gives up (and is
/// retried at the next write).
const REOPEN_WAIT: Duration = Duration::from_secs(10);

/// sled-backed [`Store`].
pub struct SledStore {
    /// The data directory; `None` for a temporary database (never reopened).
    dir: Option<PathBuf>,
    options: StoreOptions,
    engine: RwLock<Option<Arc<Engine>>>,
    /// The engine failed a write for lack of space and must be reopened before the next one.
    poisoned: AtomicBool,
    reopening: Mutex<()>,
}

fn open_engine(dir: &Path, options: &StoreOptions) -> StoreResult<Engine> {
    Engine::from_db(sled::Config::new().path(dir).cache_capacity(options.cache_capacity_bytes).open()?)
}

impl SledStore {
    /// Opens (or creates) the database in `dir` with default options.
    pub fn open(dir: &Path) -> StoreResult<Self> {
        Self::open_with(dir, &StoreOptions::default())
    }

    /// Opens (or creates) the database in `dir`.
    pub fn open_with(dir: &Path, options: &StoreOptions) -> StoreResult<Self> {
        let engine = open_engine(dir, options)?;
        Ok(Self::around(Some(dir.to_owned()), options.clone(), engine))
    }

    /// A throw-away database in a temporary location (tests).
    pub fn temporary() -> StoreResult<Self> {
        let engine = Engine::from_db(sled::Config::new().temporary(true).open()?)?;
        Ok(Self::around(None, StoreOptions { min_free_bytes: 0, ..StoreOptions::default() }, engine))
    }

    fn around(dir: Option<PathBuf>, options: StoreOptions, engine: Engine) -> Self {
        Self { dir, options, engine: RwLock::new(Some(Arc::new(engine))), poisoned: AtomicBool::new(false), reopening: Mutex::new(()) }
    }

    /// Writes a schema version (tests of the refusal to open newer databases).
    pub fn force_schema_version(&self, version: u32) -> StoreResult<()> {
        self.engine()?.force_schema_version(version)
    }

    fn engine(&self) -> StoreResult<Arc<Engine>> {
        {
            let slot = self.engine.read().map_err(|_| StoreError::Engine("engine slot lock poisoned".into()))?;
            if let Some(engine) = slot.as_ref() {
                return Ok(Arc::clone(engine));
            }
        }
        // A reopen failed earlier: try again, so that reads recover as well as writes.
        if let Some(dir) = self.dir.as_deref() {
            self.reopen(dir)?;
        }
        let slot = self.engine.read().map_err(|_| StoreError::Engine("engine slot lock poisoned".into()))?;
        slot.clone().ok_or_else(|| StoreError::Engine("the database could not be reopened after a full disk; retrying at the next call".into()))
    }

    fn read<T>(&self, op: impl FnOnce(&Engine) -> StoreResult<T>) -> StoreResult<T> {
        op(&*self.engine()?)
    }

    fn write<T>(&self, op: impl FnOnce(&Engine) -> StoreResult<T>) -> StoreResult<T> {
        self.writable()?;
        let result = op(&*self.engine()?);
        if let Err(StoreError::StorageFull(message)) = &result {
            if !self.poisoned.swap(true, Ordering::SeqCst) {
                tracing::error!(error = %message, "write failed for lack of space; the database will be reopened once space is free");
            }
        }
        result
    }

    /// Replaces the engine with a freshly opened one (after a full disk poisoned it).
    fn reopen(&self, dir: &Path) -> StoreResult<()> {
        let _one_at_a_time = self.reopening.lock().map_err(|_| StoreError::Engine("reopen lock poisoned".into()))?;
        if !self.poisoned.load(Ordering::SeqCst) {
            return Ok(());
        }
        let mut slot = self.engine.write().map_err(|_| StoreError::Engine("engine slot lock poisoned".into()))?;
        if let Some(old) = slot.take() {
            // New calls wait on the slot lock; calls in flight hold clones of the engine.
            let started = Instant::now();
            let mut old = old;
            loop {
                match Arc::try_unwrap(old) {
                    Ok(engine) => {
                        drop(engine);
                        break;
                    }
                    Err(still_shared) if started.elapsed() < REOPEN_WAIT => {
                        old = still_shared;
                        std::thread::sleep(Duration::from_millis(5));
                    }
                    Err(still_shared) => {
                        *slot = Some(still_shared);
                        return Err(StoreError::Engine("calls in flight kept the database busy; reopening at the next write".into()));
                    }
                }
            }
        }
        let engine = open_engine(dir, &self.options)?;
        *slot = Some(Arc::new(engine));
        self.poisoned.store(false, Ordering::SeqCst);
        tracing::warn!(dir = %dir.display(), "database reopened after the disk was full; writes resume");
        Ok(())
    }
}

impl Store for SledStore {
    fn writable(&self) -> StoreResult<()> {
        let Some(dir) = self.dir.as_deref() else { return Ok(()) };
        if self.options.min_free_bytes > 0 {
            let free = disk_space::available_bytes(dir).map_err(|e| StoreError::Engine(format!("free space of {}: {e}", dir.display())))?;
            if free < self.options.min_free_bytes {
                return Err(StoreError::StorageFull(disk_space::below_reserve(dir, free, self.options.min_free_bytes)));
            }
        }
        if self.poisoned.load(Ordering::SeqCst) {
            let needed = self.options.min_free_bytes.max(REOPEN_MIN_FREE_BYTES);
            let free = disk_space::available_bytes(dir).map_err(|e| StoreError::Engine(format!("free space of {}: {e}", dir.display())))?;
            if free < needed {
                return Err(StoreError::StorageFull(disk_space::below_reserve(dir, free, needed)));
            }
            self.reopen(dir)?;
        }
        Ok(())
    }

    fn upsert_fleet(&self, fleet: &FleetRecord) -> StoreResult<bool> {
        self.write(|e| e.upsert_fleet(fleet))
    }

    fn get_fleet(&self, fleet_id: &str) -> StoreResult<Option<FleetRecord>> {
        self.read(|e| e.get_fleet(fleet_id))
    }

    fn upsert_vehicle(&self, vehicle: &VehicleRecord) -> StoreResult<bool> {
        self.write(|e| e.upsert_vehicle(vehicle))
    }

    fn get_vehicle(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleRecord>> {
        self.read(|e| e.get_vehicle(fleet_id, vehicle_id))
    }

    fn list_vehicles(&self, fleet_id: &str, after: Option<&str>, limit: usize) -> StoreResult<Vec<VehicleRecord>> {
        self.read(|e| e.list_vehicles(fleet_id, after, limit))
    }

    fn list_fleet_ids(&self) -> StoreResult<Vec<String>> {
        self.read(|e| e.list_fleet_ids())
    }

    fn count_vehicles(&self, fleet_id: &str) -> StoreResult<u64> {
        self.read(|e| e.count_vehicles(fleet_id))
    }

    fn vehicle_totals(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<VehicleTotals> {
        self.read(|e| e.vehicle_totals(fleet_id, vehicle_id))
    }

    fn ingest_trips(&self, trips: &[TripRecord]) -> StoreResult<Vec<IngestOutcome>> {
        self.write(|e| e.ingest_trips(trips))
    }

    fn record_inspection(&self, inspection: &InspectionRecord) -> StoreResult<InsertOutcome<InspectionRecord>> {
        self.write(|e| e.record_inspection(inspection))
    }

    fn correct_record(&self, correction: &CorrectionRecord, superseding: Option<&ServiceEntry>) -> StoreResult<CorrectionOutcome> {
        self.write(|e| e.correct_record(correction, superseding))
    }

    fn service_records(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceRecords> {
        self.read(|e| e.service_records(fleet_id, vehicle_id))
    }

    fn record_replacement(&self, replacement: &ReplacementRecord) -> StoreResult<InsertOutcome<ReplacementRecord>> {
        self.write(|e| e.record_replacement(replacement))
    }

    fn daily_energy(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Vec<DailyEnergy>> {
        self.read(|e| e.daily_energy(fleet_id, vehicle_id))
    }

    fn service_history(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceHistory> {
        self.read(|e| e.service_history(fleet_id, vehicle_id))
    }

    fn put_forecasts(&self, record: &VehicleForecasts) -> StoreResult<()> {
        self.write(|e| e.put_forecasts(record))
    }

    fn get_forecasts(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleForecasts>> {
        self.read(|e| e.get_forecasts(fleet_id, vehicle_id))
    }

    fn fleet_forecasts(&self, fleet_id: &str) -> StoreResult<Vec<VehicleForecasts>> {
        self.read(|e| e.fleet_forecasts(fleet_id))
    }

    fn scan_due(&self, fleet_id: &str, level: BandLevel, due_before_ms: i64, after: Option<&DueCursor>, limit: usize) -> StoreResult<Vec<DueCursor>> {
        self.read(|e| e.scan_due(fleet_id, level, due_before_ms, after, limit))
    }

    fn mark_stale(&self, fleet_id: &str, vehicle_ids: &[String]) -> StoreResult<()> {
        self.write(|e| e.mark_stale(fleet_id, vehicle_ids))
    }

    fn stale_vehicles(&self, limit: usize) -> StoreResult<Vec<StaleMark>> {
        self.read(|e| e.stale_vehicles(limit))
    }

    fn count_stale(&self, fleet_id: &str) -> StoreResult<u64> {
        self.read(|e| e.count_stale(fleet_id))
    }

    fn clear_stale(&self, mark: &StaleMark) -> StoreResult<()> {
        self.write(|e| e.clear_stale(mark))
    }

    fn put_priors(&self, fleet_id: &str, priors: &FleetPriors) -> StoreResult<()> {
        self.write(|e| e.put_priors(fleet_id, priors))
    }

    fn get_priors(&self, fleet_id: &str) -> StoreResult<Option<FleetPriors>> {
        self.read(|e| e.get_priors(fleet_id))
    }

    fn flush(&self) -> StoreResult<()> {
        self.read(|e| e.flush())
    }
}
