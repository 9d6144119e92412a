//! The embedded default engine, sled 0.34, as a [`Store`]: an [`Engine`] (the open database
//! and its trees) behind a slot that can be reopened, with a disk-space gate in front of writes.
//!
//! - **Memory**: sled's page cache is `[storage] cache_capacity_bytes` (32 MiB by default;
//!   sled's own default of 1 GB let memory grow with every write until it got there),
//!   counted in decoded page bytes by the patched sled under `vendor/sled` (upstream counts
//!   compressed bytes, several times less than the heap the cache takes; BENCHMARKS.md,
//!   "Fleet scale").
//! - **Full disk**: every write first checks free space and is refused with
//!   [`StoreError::StorageFull`] below `[storage] min_free_bytes`. If the engine hits a full
//!   disk anyway, sled keeps failing every write with that error until the database is
//!   reopened; the store then marks itself *poisoned* and, at the next write or
//!   [`Store::writable`] check once space is free again, reopens the database in place (waiting
//!   for calls in flight to finish). Reads keep working throughout.
//! - **Integrity**: opening verifies the directory against its acknowledged-write ledger
//!   ([`super::integrity`]); each acknowledged write that adds records goes through
//!   [`SledStore::acknowledged`], which keeps the ledger in step (see [`super::ledger`]). A
//!   directory opened read-only after failed verification refuses every write with
//!   [`StoreError::ReadOnly`].

use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, RwLock};
use std::time::{Duration, Instant};

pub use super::sled_engine::SCHEMA_VERSION;
use super::disk_space;
use super::integrity::{self, Findings, Mode};
use super::ledger::{Ledger, RecordKind};
use super::sled_engine::{decode, Engine, PageSettings, PlannedKeys, SortedTrips};
use super::value_cache::ValueCache;
use super::*;
use crate::config::OnMismatch;
use crate::metrics::CacheLookup;

/// A trip batch sorted ahead of its write, and the engine it was sorted on (held, so that a
/// reopened database is told apart from it).
struct SortedOn {
    engine: Arc<Engine>,
    sorted: SortedTrips,
}

/// How the database is opened.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StoreOptions {
    /// sled's page cache and whether a new directory compresses.
    pub pages: PageSettings,
    /// Free space below which writes are refused, bytes.
    pub min_free_bytes: u64,
    /// What to do when start-up verification finds damage.
    pub on_mismatch: OnMismatch,
    /// Stored forecasts kept in memory by vehicle, bytes (`[storage] forecast_cache_bytes`).
    pub forecast_cache_bytes: u64,
}

impl Default for StoreOptions {
    fn default() -> Self {
        Self::from(&crate::config::StorageConfig::default())
    }
}

impl From<&crate::config::StorageConfig> for StoreOptions {
    fn from(config: &crate::config::StorageConfig) -> Self {
        Self {
            pages: PageSettings::from(config),
            min_free_bytes: config.min_free_bytes,
            on_mismatch: OnMismatch::Refuse,
            forecast_cache_bytes: config.forecast_cache_bytes,
        }
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
    /// The ledger and the keys of a write whose outcome is not known yet; held for the whole of
    /// every acknowledged write that adds records (and by backups, to hold writes). `None` for a
    /// temporary database and for a read-only one.
    ledger: Option<Mutex<LedgerSlot>>,
    /// Findings of the start-up verification when serving read-only.
    read_only: Option<Findings>,
    /// Stored forecasts read recently, by vehicle key ([`ValueCache`]): invalidated by every
    /// forecast write through this store, the only writer of them while it is open.
    forecast_cache: ValueCache,
}

/// The ledger and what is not settled in it.
struct LedgerSlot {
    ledger: Ledger,
    /// Keys of a write that failed after its delta was recorded as pending: whether it reached
    /// the store is settled before the next write.
    unsettled: Option<Vec<(RecordKind, Vec<u8>)>>,
}

fn open_engine(dir: &Path, options: &StoreOptions) -> StoreResult<Engine> {
    Engine::from_db(super::sled_engine::sled_config(dir, options.pages).open()?)
}

fn lock_error<T>(_: T) -> StoreError {
    StoreError::Engine("a store lock was poisoned by a panic".into())
}

impl SledStore {
    /// Opens (or creates) the database in `dir` with default options.
    pub fn open(dir: &Path) -> StoreResult<Self> {
        Self::open_with(dir, &StoreOptions::default())
    }

    /// Opens (or creates) the database in `dir`, verified against its ledger: refused with
    /// [`StoreError::Damaged`] naming what is missing, or opened read-only, as `options` say.
    pub fn open_with(dir: &Path, options: &StoreOptions) -> StoreResult<Self> {
        std::fs::create_dir_all(dir).map_err(|e| StoreError::Engine(format!("creating {}: {e}", dir.display())))?;
        let (opened, _) = integrity::open(dir, options.pages, Mode::Serve(options.on_mismatch))?;
        let opened = opened.ok_or_else(|| StoreError::Damaged(format!("the database in {} could not be opened", dir.display())))?;
        let mut store = Self::around(Some(dir.to_owned()), options.clone(), opened.engine);
        store.ledger = opened.ledger.map(|ledger| Mutex::new(LedgerSlot { ledger, unsettled: None }));
        store.read_only = opened.read_only;
        Ok(store)
    }

    /// A throw-away database in a temporary location (tests).
    pub fn temporary() -> StoreResult<Self> {
        let engine = Engine::from_db(super::sled_engine::temporary_db()?)?;
        Ok(Self::around(None, StoreOptions { min_free_bytes: 0, ..StoreOptions::default() }, engine))
    }

    fn around(dir: Option<PathBuf>, options: StoreOptions, engine: Engine) -> Self {
        Self {
            dir,
            forecast_cache: ValueCache::new(options.forecast_cache_bytes),
            options,
            engine: RwLock::new(Some(Arc::new(engine))),
            poisoned: AtomicBool::new(false),
            reopening: Mutex::new(()),
            ledger: None,
            read_only: None,
        }
    }

    /// The findings when the store serves read-only after failed verification.
    pub fn read_only_findings(&self) -> Option<&Findings> {
        self.read_only.as_ref()
    }

    /// An acknowledged write that may add records: `plan` lists the keys it will add, `op`
    /// writes and flushes. The ledger records the delta as pending before `op`, and counts it
    /// as committed once `op` has flushed it, all under the ledger lock (see [`super::ledger`]).
    fn acknowledged<T>(&self, plan: impl FnOnce(&Engine) -> StoreResult<PlannedKeys>, op: impl FnOnce(&Engine) -> StoreResult<T>) -> StoreResult<T> {
        let Some(slot) = &self.ledger else { return self.write(op) };
        self.under_ledger(slot, |e| Ok((plan(e)?, ())), |e, ()| op(e))
    }

    /// [`SledStore::acknowledged`] under the ledger `slot`, with a plan that also hands `op`
    /// what it worked out (`P`).
    fn under_ledger<P, T>(
        &self,
        slot: &Mutex<LedgerSlot>,
        plan: impl FnOnce(&Engine) -> StoreResult<(PlannedKeys, P)>,
        op: impl FnOnce(&Engine, P) -> StoreResult<T>,
    ) -> StoreResult<T> {
        self.writable()?;
        let mut slot = slot.lock().map_err(lock_error)?;
        let engine = self.engine()?;
        Self::settle_unsettled(&mut slot, &engine)?;
        let (planned, worked_out) = plan(&engine)?;
        if planned.keys.is_empty() {
            let result = op(&engine, worked_out);
            self.note_full_disk(&result);
            return result;
        }
        let begun = slot.ledger.begin(planned.tallies).map_err(StoreError::from);
        // A ledger that cannot be written for lack of space counts as a full disk of the store:
        // write health reports NOT_SERVING until space is back.
        self.note_full_disk(&begun);
        begun?;
        let result = op(&engine, worked_out);
        self.note_full_disk(&result);
        match &result {
            // Flushed: the delta counts as committed, and the next write's ledger says so.
            Ok(_) => slot.ledger.reached_store(),
            Err(_) => slot.unsettled = Some(planned.keys),
        }
        result
    }

    /// Stores a batch of trips, sorted ahead (`presorted`) or not. A batch sorted on another
    /// engine (the database was reopened since) or before one of its vehicles gained trips is
    /// sorted again: every trip write takes the ledger lock, so under it the sort stays true
    /// until the write, and the sort's new keys are exactly the ledger's pending delta.
    fn write_trips(&self, trips: &[TripRecord], presorted: Option<SortedOn>) -> StoreResult<Vec<IngestOutcome>> {
        let sorted_here = |engine: &Engine, presorted: Option<SortedOn>| presorted.filter(|on| std::ptr::eq(engine, &*on.engine)).map(|on| on.sorted);
        let Some(slot) = &self.ledger else {
            // No ledger lock: a write in between is caught by the transaction's own check.
            return self.write(|e| match sorted_here(e, presorted) {
                Some(sorted) => match e.write_sorted_trips(trips, sorted) {
                    Err(StoreError::Conflict) => e.ingest_trips(trips),
                    written => written,
                },
                None => e.ingest_trips(trips),
            });
        };
        self.under_ledger(
            slot,
            |e| {
                let sorted = match sorted_here(e, presorted) {
                    Some(sorted) if e.sorted_is_current(&sorted)? => sorted,
                    _ => e.sort_trips(trips)?,
                };
                Ok((sorted.planned_keys(trips), sorted))
            },
            |e, sorted| e.write_sorted_trips(trips, sorted),
        )
    }

    /// Settles a write whose outcome is not known yet, if any.
    fn settle_unsettled(slot: &mut LedgerSlot, engine: &Engine) -> StoreResult<()> {
        if let Some(keys) = slot.unsettled.take() {
            if let Err(error) = Self::settle(&mut slot.ledger, engine, &keys) {
                slot.unsettled = Some(keys);
                return Err(error);
            }
        }
        Ok(())
    }

    /// Settles the pending delta of a write that failed: flushed and present → committed;
    /// absent → dropped.
    fn settle(ledger: &mut Ledger, engine: &Engine, keys: &[(RecordKind, Vec<u8>)]) -> StoreResult<()> {
        engine.flush()?;
        let present = engine.count_present(keys)?;
        if present == keys.len() {
            ledger.commit()?;
        } else if present == 0 {
            ledger.abandon()?;
        } else {
            return Err(StoreError::Corrupt(format!("a failed write is only partly in the store ({present} of {} records)", keys.len())));
        }
        Ok(())
    }

    /// Every stored trip of one vehicle, oldest first (not part of [`Store`]: no handler reads
    /// single trips; tests, tools and the migration check do).
    pub fn vehicle_trips(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Vec<TripRecord>> {
        self.read(|e| e.vehicle_trips(fleet_id, vehicle_id))
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
        self.note_full_disk(&result);
        result
    }

    /// Marks the engine poisoned when a write failed for lack of space.
    fn note_full_disk<T>(&self, result: &StoreResult<T>) {
        if let Err(StoreError::StorageFull(message)) = result {
            if !self.poisoned.swap(true, Ordering::SeqCst) {
                tracing::error!(error = %message, "write failed for lack of space; the database will be reopened once space is free");
            }
        }
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
    /// sled answers a keyed read from its page cache, or with one read of a local file.
    fn reads_inline(&self) -> bool {
        true
    }

    fn writable(&self) -> StoreResult<()> {
        if let Some(findings) = &self.read_only {
            return Err(StoreError::ReadOnly(format!(
                "this server is read-only: start-up verification found damage ({} finding(s); first: {}); restore the data directory from a backup",
                findings.lines.len(),
                findings.lines.first().map(String::as_str).unwrap_or("")
            )));
        }
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
        self.acknowledged(|e| e.plan_one(RecordKind::Fleet, &fleet.fleet_id, fleet.fleet_id.as_bytes().to_vec()), |e| e.upsert_fleet(fleet))
    }

    fn get_fleet(&self, fleet_id: &str) -> StoreResult<Option<FleetRecord>> {
        self.read(|e| e.get_fleet(fleet_id))
    }

    fn upsert_vehicle(&self, vehicle: &VehicleRecord) -> StoreResult<bool> {
        let key = keys::vehicle_key(&vehicle.fleet_id, &vehicle.vehicle_id);
        self.acknowledged(|e| e.plan_one(RecordKind::Vehicle, &vehicle.fleet_id, key), |e| e.upsert_vehicle(vehicle))
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
        self.write_trips(trips, None)
    }

    /// Sorts the batch against the store. A sort that fails (the database being reopened, a
    /// read error) leaves the batch unprepared: its write sorts it again under the ledger lock
    /// and reports what goes wrong there.
    fn prepare_trips(&self, trips: Vec<TripRecord>) -> StoreResult<PreparedTrips> {
        let sorted = self.engine().and_then(|engine| engine.sort_trips(&trips).map(|sorted| SortedOn { engine, sorted }));
        Ok(match sorted {
            Ok(sorted) => PreparedTrips::with_work(trips, sorted),
            Err(_) => PreparedTrips::new(trips),
        })
    }

    fn ingest_prepared(&self, prepared: PreparedTrips) -> StoreResult<Vec<IngestOutcome>> {
        let (trips, sorted) = prepared.into_parts::<SortedOn>();
        self.write_trips(&trips, sorted)
    }

    fn record_inspection(&self, inspection: &InspectionRecord) -> StoreResult<InsertOutcome<InspectionRecord>> {
        let key = keys::child_key(&inspection.fleet_id, &inspection.vehicle_id, &inspection.inspection_id);
        self.acknowledged(|e| e.plan_one(RecordKind::Inspection, &inspection.fleet_id, key), |e| e.record_inspection(inspection))
    }

    fn correct_record(&self, correction: &CorrectionRecord, superseding: Option<&ServiceEntry>) -> StoreResult<CorrectionOutcome> {
        // A superseding record is a new inspection or replacement: the ledger counts it.
        let planned = superseding.map(|entry| match entry {
            ServiceEntry::Inspection(r) => (RecordKind::Inspection, r.fleet_id.clone(), keys::child_key(&r.fleet_id, &r.vehicle_id, &r.inspection_id)),
            ServiceEntry::Replacement(r) => (RecordKind::Replacement, r.fleet_id.clone(), keys::child_key(&r.fleet_id, &r.vehicle_id, &r.replacement_id)),
        });
        match planned {
            Some((kind, fleet_id, key)) => self.acknowledged(|e| e.plan_one(kind, &fleet_id, key), |e| e.correct_record(correction, superseding)),
            None => self.write(|e| e.correct_record(correction, superseding)),
        }
    }

    fn service_records(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceRecords> {
        self.read(|e| e.service_records(fleet_id, vehicle_id))
    }

    fn record_replacement(&self, replacement: &ReplacementRecord) -> StoreResult<InsertOutcome<ReplacementRecord>> {
        let key = keys::child_key(&replacement.fleet_id, &replacement.vehicle_id, &replacement.replacement_id);
        self.acknowledged(|e| e.plan_one(RecordKind::Replacement, &replacement.fleet_id, key), |e| e.record_replacement(replacement))
    }

    fn daily_energy(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Vec<DailyEnergy>> {
        self.read(|e| e.daily_energy(fleet_id, vehicle_id))
    }

    fn service_history(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceHistory> {
        self.read(|e| e.service_history(fleet_id, vehicle_id))
    }

    fn put_forecasts(&self, record: &VehicleForecasts) -> StoreResult<()> {
        self.replace_forecasts(std::slice::from_ref(record)).map(drop)
    }

    fn replace_forecasts(&self, records: &[VehicleForecasts]) -> StoreResult<Vec<Option<VehicleForecasts>>> {
        let result = self.write(|e| e.replace_forecasts(records));
        let keys: Vec<Vec<u8>> = records.iter().map(|r| keys::vehicle_key(&r.fleet_id, &r.vehicle_id)).collect();
        self.forecast_cache.invalidate(keys.iter().map(Vec::as_slice));
        result
    }

    fn get_forecasts(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleForecasts>> {
        let key = keys::vehicle_key(fleet_id, vehicle_id);
        if let Some(bytes) = self.forecast_cache.get(&key) {
            crate::metrics::forecast_cache_lookup(CacheLookup::Hit);
            return decode(&bytes).map(Some);
        }
        let generation = self.forecast_cache.generation(&key);
        let bytes = self.read(|e| e.get_forecast_bytes(&key))?;
        let Some(bytes) = bytes else { return Ok(None) };
        let record = decode(&bytes)?;
        let kept = self.forecast_cache.insert_if_unchanged(generation, key, bytes);
        crate::metrics::forecast_cache_lookup(if kept { CacheLookup::MissKept } else { CacheLookup::MissNotKept });
        Ok(Some(record))
    }

    fn fleet_forecasts(&self, fleet_id: &str) -> StoreResult<Vec<VehicleForecasts>> {
        self.read(|e| e.fleet_forecasts(fleet_id))
    }

    fn visit_fleet_forecasts(&self, fleet_id: &str, visit: &mut dyn FnMut(VehicleForecasts) -> StoreResult<()>) -> StoreResult<()> {
        self.read(|e| e.visit_fleet_forecasts(fleet_id, &mut *visit))
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

    fn is_stale(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<bool> {
        self.read(|e| e.is_stale(fleet_id, vehicle_id))
    }

    fn count_all_stale(&self) -> StoreResult<u64> {
        self.read(|e| Ok(e.count_all_stale()))
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

    fn put_token(&self, token: &TokenRecord) -> StoreResult<()> {
        self.write(|e| e.put_token(token))
    }

    fn token_by_hash(&self, secret_sha256: &[u8; 32]) -> StoreResult<Option<TokenRecord>> {
        self.read(|e| e.token_by_hash(secret_sha256))
    }

    fn list_tokens(&self) -> StoreResult<Vec<TokenRecord>> {
        self.read(|e| e.list_tokens())
    }

    fn append_audit(&self, entry: &AuditRecord) -> StoreResult<()> {
        self.write(|e| e.append_audit(entry))
    }

    fn list_audit(&self, fleet_id: &str, after: Option<AuditCursor>, limit: usize) -> StoreResult<Vec<(AuditCursor, AuditRecord)>> {
        self.read(|e| e.list_audit(fleet_id, after, limit))
    }

    fn size_on_disk(&self) -> StoreResult<u64> {
        self.read(|e| e.size_on_disk())
    }

    fn flush(&self) -> StoreResult<()> {
        self.read(|e| e.flush())
    }

    fn export_backup(&self, taken_at_ms: i64) -> StoreResult<(std::fs::File, super::backup_file::BackupSummary)> {
        use std::io::{Seek, SeekFrom};
        let io = |e: std::io::Error| StoreError::from(super::backup_file::BackupError::Io(e));
        let mut file = match &self.dir {
            Some(dir) => tempfile::tempfile_in(dir).map_err(io)?,
            None => tempfile::tempfile().map_err(io)?,
        };
        let summary = match &self.ledger {
            Some(slot) => {
                let mut slot = slot.lock().map_err(lock_error)?;
                let engine = self.engine()?;
                Self::settle_unsettled(&mut slot, &engine)?;
                super::backup_file::write(&engine, Some(&slot.ledger.acknowledged()), taken_at_ms, &mut file)?
            }
            // A temporary database has no ledger; a read-only one was found damaged, and its
            // backup holds what is left (writes are refused anyway).
            None => super::backup_file::write(&*self.engine()?, None, taken_at_ms, &mut file)?,
        };
        file.seek(SeekFrom::Start(0)).map_err(io)?;
        Ok((file, summary))
    }
}
