//! Storage: the records brakeledger keeps and the [`Store`] trait every engine implements.
//!
//! The trait is small and synchronous; handlers call it from `spawn_blocking`. Every write
//! method returns only after what it wrote is durable on disk ("acknowledged means durable").
//! [`sled_store::SledStore`] is the embedded default; [`postgres::PostgresStore`] keeps the
//! same records in a PostgreSQL database that several replicas share.
//!
//! Beside the engine: [`ledger`] (the record of what was acknowledged, kept apart from sled's
//! files), [`integrity`] (start-up and offline verification against it), [`backup_file`] (the
//! backup file format, verification and restore), [`keys`] (the key layout),
//! [`forecast_layout`] (the compact layout of stored forecasts),
//! [`trip_blocks`] (the compact encoding of trips in day blocks) and [`disk_space`] (the
//! free-space gate).

pub mod backup_file;
pub mod disk_space;
pub mod forecast_layout;
pub mod integrity;
pub mod keys;
pub mod ledger;
pub mod postgres;
pub mod records;
pub mod sled_engine;
pub mod sled_store;
pub mod trip_blocks;
pub mod value_cache;
#[cfg(test)]
mod zstd_reuse_check;

pub use records::*;

/// Failures of a storage engine.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// The engine itself failed (I/O, corruption detected by the engine).
    #[error("storage engine: {0}")]
    Engine(String),
    /// A stored value could not be decoded.
    #[error("stored record could not be decoded: {0}")]
    Corrupt(String),
    /// The database was written by a newer brakeledger.
    #[error("the database has schema version {found}; this build reads up to {supported}")]
    NewerSchema {
        /// Version found in the database.
        found: u32,
        /// Highest version this build understands.
        supported: u32,
    },
    /// A concurrent writer changed the same record; the caller may retry.
    #[error("concurrent update conflict")]
    Conflict,
    /// The disk is (nearly) full: writes are refused until space is freed; reads still work.
    #[error("{0}")]
    StorageFull(String),
    /// The data directory does not hold what was acknowledged (or cannot be opened): the
    /// store refuses to start. The message names what is missing and how to restore.
    #[error("{0}")]
    Damaged(String),
    /// Start-up verification found damage and the server was configured to serve read-only:
    /// every write is refused.
    #[error("{0}")]
    ReadOnly(String),
    /// The acknowledged-write ledger could not be written.
    #[error("{0}")]
    Ledger(String),
}

/// Result of storage calls.
pub type StoreResult<T> = Result<T, StoreError>;

/// A batch of validated trips and the work an engine did on it ahead of writing it
/// ([`Store::prepare_trips`]).
pub struct PreparedTrips {
    /// The trips, in the order received.
    pub trips: Vec<TripRecord>,
    /// The engine's own work, if any (only the engine that made it reads it).
    work: Option<Box<dyn std::any::Any + Send>>,
}

impl PreparedTrips {
    /// A batch with no work done ahead.
    pub fn new(trips: Vec<TripRecord>) -> Self {
        Self { trips, work: None }
    }

    /// A batch with an engine's work done ahead.
    pub fn with_work<W: std::any::Any + Send>(trips: Vec<TripRecord>, work: W) -> Self {
        Self { trips, work: Some(Box::new(work)) }
    }

    /// The trips, and the work done ahead if it is a `W`.
    pub fn into_parts<W: std::any::Any>(self) -> (Vec<TripRecord>, Option<W>) {
        (self.trips, self.work.and_then(|work| work.downcast::<W>().ok()).map(|work| *work))
    }
}

/// What happened to one trip handed to [`Store::ingest_trips`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum IngestOutcome {
    /// Stored now.
    Stored,
    /// Its trip_id was already stored for the vehicle (or repeated earlier in the same call).
    Duplicate,
}

/// Held while this process re-estimates a fleet's priors (see [`Store::lock_fleet_priors`]);
/// dropping it lets another replica do so.
#[derive(Default)]
pub struct FleetPriorsLock {
    /// What the engine holds for the lock (a database session), released when dropped.
    _held: Option<Box<dyn Send>>,
}

impl FleetPriorsLock {
    /// A lock that lasts as long as `held` does.
    pub fn holding(held: Box<dyn Send>) -> Self {
        Self { _held: Some(held) }
    }
}

/// A storage engine for brakeledger.
pub trait Store: Send + Sync + 'static {
    /// Whether writes can be accepted now: `Err(StorageFull)` while the disk is (nearly) full.
    /// Recovers the engine once space is free again (see `sled_store`); health checks call it.
    fn writable(&self) -> StoreResult<()>;
    /// Creates or replaces a fleet; returns true when it is new.
    fn upsert_fleet(&self, fleet: &FleetRecord) -> StoreResult<bool>;
    /// Reads a fleet's settings.
    fn get_fleet(&self, fleet_id: &str) -> StoreResult<Option<FleetRecord>>;
    /// Every fleet id, in order: fleets set up and fleets holding vehicles.
    fn list_fleet_ids(&self) -> StoreResult<Vec<String>>;
    /// Creates or replaces a vehicle; returns true when it is new. Marks its forecasts stale.
    fn upsert_vehicle(&self, vehicle: &VehicleRecord) -> StoreResult<bool>;
    /// Reads one vehicle.
    fn get_vehicle(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleRecord>>;
    /// Vehicles of a fleet in vehicle_id order, starting after `after`, at most `limit`.
    fn list_vehicles(&self, fleet_id: &str, after: Option<&str>, limit: usize) -> StoreResult<Vec<VehicleRecord>>;
    /// Number of vehicles in a fleet.
    fn count_vehicles(&self, fleet_id: &str) -> StoreResult<u64>;
    /// Stored trip totals of one vehicle (zeros when none).
    fn vehicle_totals(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<VehicleTotals>;
    /// Stores trips atomically and durably; one outcome per trip, in order. Trips must already
    /// be validated. Updates per-vehicle totals and the daily per-axle roll-up, and marks the
    /// vehicles' forecasts stale.
    fn ingest_trips(&self, trips: &[TripRecord]) -> StoreResult<Vec<IngestOutcome>>;
    /// The part of [`Store::ingest_trips`] that only reads, done ahead: it may run while an
    /// earlier batch is still being written, and stores nothing. The default does nothing
    /// ahead.
    fn prepare_trips(&self, trips: Vec<TripRecord>) -> StoreResult<PreparedTrips> {
        Ok(PreparedTrips::new(trips))
    }
    /// [`Store::ingest_trips`] of a batch [`Store::prepare_trips`] prepared, with the same
    /// outcomes and guarantees whatever was written in between.
    fn ingest_prepared(&self, prepared: PreparedTrips) -> StoreResult<Vec<IngestOutcome>> {
        self.ingest_trips(&prepared.trips)
    }
    /// Stores an inspection durably and marks the vehicle stale, unless its id is already
    /// stored (with the same values: `Duplicate`; with others: `Differs`, nothing changed).
    fn record_inspection(&self, inspection: &InspectionRecord) -> StoreResult<InsertOutcome<InspectionRecord>>;
    /// Stores a replacement durably, as [`Store::record_inspection`].
    fn record_replacement(&self, replacement: &ReplacementRecord) -> StoreResult<InsertOutcome<ReplacementRecord>>;
    /// Voids (`superseding` = `None`) or supersedes a stored inspection or replacement, in one
    /// durable transaction that also stores the superseding record and marks the vehicle stale.
    fn correct_record(&self, correction: &CorrectionRecord, superseding: Option<&ServiceEntry>) -> StoreResult<CorrectionOutcome>;
    /// Every inspection and replacement of one vehicle, voided and superseded ones included,
    /// with the corrections.
    fn service_records(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceRecords>;
    /// The daily roll-up of one vehicle, oldest day first.
    fn daily_energy(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Vec<DailyEnergy>>;
    /// Inspections and replacements of one vehicle in force (neither voided nor superseded),
    /// each sorted by time.
    fn service_history(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceHistory>;
    /// Replaces the materialised forecasts of one vehicle and their due-index entries.
    fn put_forecasts(&self, record: &VehicleForecasts) -> StoreResult<()>;
    /// [`Self::put_forecasts`] for several vehicles (a forecast pass), in one write where the
    /// engine allows; returns each one's forecasts as they were before, in order.
    fn replace_forecasts(&self, records: &[VehicleForecasts]) -> StoreResult<Vec<Option<VehicleForecasts>>> {
        records
            .iter()
            .map(|record| {
                let before = self.get_forecasts(&record.fleet_id, &record.vehicle_id)?;
                self.put_forecasts(record)?;
                Ok(before)
            })
            .collect()
    }
    /// The materialised forecasts of one vehicle.
    fn get_forecasts(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleForecasts>>;
    /// The materialised forecasts of several vehicles of one fleet (a page of the due list),
    /// those that have any, in no particular order. An engine with a round trip per read
    /// answers in one; the default reads one vehicle at a time.
    fn get_many_forecasts(&self, fleet_id: &str, vehicle_ids: &[&str]) -> StoreResult<Vec<VehicleForecasts>> {
        let mut out = Vec::with_capacity(vehicle_ids.len());
        for vehicle_id in vehicle_ids {
            out.extend(self.get_forecasts(fleet_id, vehicle_id)?);
        }
        Ok(out)
    }
    /// Every materialised forecast of a fleet (for fleet-wide pooling).
    fn fleet_forecasts(&self, fleet_id: &str) -> StoreResult<Vec<VehicleForecasts>>;
    /// Hands every materialised forecast of a fleet to `visit`, one at a time, in vehicle
    /// order; an error from `visit` stops the scan and is returned. An engine that can
    /// stream does not hold the fleet's forecasts in memory at once (100,000 vehicles' take
    /// about a gigabyte decoded); the default reads them with [`Store::fleet_forecasts`].
    fn visit_fleet_forecasts(&self, fleet_id: &str, visit: &mut dyn FnMut(VehicleForecasts) -> StoreResult<()>) -> StoreResult<()> {
        self.fleet_forecasts(fleet_id)?.into_iter().try_for_each(visit)
    }
    /// Due-index range scan: parts whose `due_earliest` at band level `level` is before
    /// `due_before_ms`, in index order, strictly after `after`, at most `limit`.
    fn scan_due(
        &self,
        fleet_id: &str,
        level: BandLevel,
        due_before_ms: i64,
        after: Option<&DueCursor>,
        limit: usize,
    ) -> StoreResult<Vec<DueCursor>>;
    /// Marks vehicles whose forecasts must be recomputed.
    fn mark_stale(&self, fleet_id: &str, vehicle_ids: &[String]) -> StoreResult<()>;
    /// Up to `limit` stale vehicles, with the mark's generation (for [`Store::clear_stale`]).
    fn stale_vehicles(&self, limit: usize) -> StoreResult<Vec<StaleMark>>;
    /// Up to `limit` stale vehicles for this process to recompute now. An engine shared by
    /// several replicas claims them for a while, so that each vehicle is recomputed by one
    /// replica; the embedded engine has one process and returns [`Store::stale_vehicles`].
    fn claim_stale(&self, limit: usize) -> StoreResult<Vec<StaleMark>> {
        self.stale_vehicles(limit)
    }
    /// Leave for this process to re-estimate a fleet's priors now: `None` while another
    /// replica does; the leave lasts until the returned lock is dropped. The embedded engine
    /// has one process and always grants it.
    fn lock_fleet_priors(&self, fleet_id: &str) -> StoreResult<Option<FleetPriorsLock>> {
        let _ = fleet_id;
        Ok(Some(FleetPriorsLock::default()))
    }
    /// Whether a few keyed reads are cheap enough to run on an async worker thread: an
    /// embedded engine answering from its page cache or a local file (microseconds). The
    /// default, `false`, sends every read to the blocking pool, as an engine that waits on the
    /// network (PostgreSQL) must.
    fn reads_inline(&self) -> bool {
        false
    }
    /// Number of stale vehicles of one fleet.
    fn count_stale(&self, fleet_id: &str) -> StoreResult<u64>;
    /// Whether one vehicle's forecasts wait to be recomputed (a write since they were
    /// computed). The default looks through the marks; an engine with keyed marks (sled's)
    /// reads one key.
    fn is_stale(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<bool> {
        Ok(self.stale_vehicles(usize::MAX)?.iter().any(|m| m.fleet_id == fleet_id && m.vehicle_id == vehicle_id))
    }
    /// Number of stale vehicles in the whole store, for the metrics sampler every few seconds.
    /// The default lists them; an engine that keeps a count (as sled's does) answers from it.
    fn count_all_stale(&self) -> StoreResult<u64> {
        Ok(self.stale_vehicles(usize::MAX)?.len() as u64)
    }
    /// Clears a stale mark unless the vehicle was marked again since `mark` was read.
    fn clear_stale(&self, mark: &StaleMark) -> StoreResult<()>;
    /// Saves a fleet's pooled wear-rate priors.
    fn put_priors(&self, fleet_id: &str, priors: &FleetPriors) -> StoreResult<()>;
    /// Reads a fleet's pooled wear-rate priors.
    fn get_priors(&self, fleet_id: &str) -> StoreResult<Option<FleetPriors>>;
    /// Stores (creates or replaces) an access token durably.
    fn put_token(&self, token: &TokenRecord) -> StoreResult<()>;
    /// The token whose secret hashes to `secret_sha256`.
    fn token_by_hash(&self, secret_sha256: &[u8; 32]) -> StoreResult<Option<TokenRecord>>;
    /// Every stored token (revoked ones too), in no particular order.
    fn list_tokens(&self) -> StoreResult<Vec<TokenRecord>>;
    /// Appends an entry to a fleet's audit trail durably.
    fn append_audit(&self, entry: &AuditRecord) -> StoreResult<()>;
    /// A fleet's audit trail, oldest first, strictly after `after`, at most `limit`.
    fn list_audit(&self, fleet_id: &str, after: Option<AuditCursor>, limit: usize) -> StoreResult<Vec<(AuditCursor, AuditRecord)>>;
    /// Size of the store on disk, bytes.
    fn size_on_disk(&self) -> StoreResult<u64>;
    /// Flushes everything to disk.
    fn flush(&self) -> StoreResult<()>;
    /// Writes a consistent backup file of every record (see [`backup_file`]) to an unnamed
    /// temporary file beside the database, holding acknowledged writes while it copies, and
    /// returns the file rewound to its start.
    fn export_backup(&self, taken_at_ms: i64) -> StoreResult<(std::fs::File, backup_file::BackupSummary)>;
}
