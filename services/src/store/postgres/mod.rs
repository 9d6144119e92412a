//! The PostgreSQL engine: a [`Store`] on a database that several brakeledger replicas share.
//!
//! - **Client**: the synchronous `postgres` crate with an `r2d2` pool; the trait is synchronous
//!   and handlers call it from `spawn_blocking`. A call made on an async worker thread of a
//!   multi-threaded runtime (the token check in the gRPC interceptor, start-up) is moved off it
//!   with `block_in_place`.
//! - **Acknowledged means committed**: every write is one transaction, committed (with the
//!   server's `synchronous_commit`, on by default, so flushed to the WAL) before the call returns.
//! - **De-duplication** is by the primary keys: `INSERT … ON CONFLICT DO NOTHING RETURNING`
//!   tells which rows this call stored, also when two replicas store the same record at once
//!   (the second waits for the first to commit, then finds the row).
//! - **Replicas** ([`replicas`]): stale vehicles are claimed with `FOR UPDATE SKIP LOCKED` and a
//!   lease, prior re-estimation takes a per-fleet advisory lock, and stored forecasts are
//!   announced with `NOTIFY` so WatchDue streams on every replica see them.
//!
//! Modules: [`schema`] (migrations, version refusal), [`rows`] (rows to records), [`writes`]
//! (records), [`derived`] (forecasts, due index, stale marks, priors), [`access`] (tokens,
//! audit), [`backup`] (the backup file, both ways), [`replicas`], [`scratch`] (a database of
//! its own for each test).

/// The database server's clock in ms since the Unix epoch, as a SQL expression (a literal, for
/// `concat!`): claim leases and the forecasts' storage time are read from one clock shared by
/// every replica, never from a replica's own.
macro_rules! database_now_ms {
    () => {
        "(extract(epoch FROM clock_timestamp()) * 1000)::bigint"
    };
}

pub mod access;
pub mod backup;
pub mod derived;
pub mod replicas;
pub mod rows;
pub mod schema;
pub mod scratch;
pub mod writes;

use std::time::Duration;

use r2d2_postgres::PostgresConnectionManager;

use super::*;

/// Connections a store keeps open at most.
const DEFAULT_POOL_SIZE: u32 = 8;

/// Attempts of a transaction that PostgreSQL aborted for a deadlock or serialization failure.
const TRANSACTION_ATTEMPTS: u32 = 5;

type Pool = r2d2::Pool<PostgresConnectionManager<::postgres::NoTls>>;
type Connection = r2d2::PooledConnection<PostgresConnectionManager<::postgres::NoTls>>;

/// How a transaction body ends.
pub enum Finish<T> {
    /// Commit what it wrote and return the value.
    Commit(T),
    /// Roll back what it wrote and return the value.
    Rollback(T),
}

/// PostgreSQL-backed [`Store`].
pub struct PostgresStore {
    /// Always `Some` until the store is dropped (see the `Drop` impl).
    pool: Option<Pool>,
    /// The connection string (the change listener opens a connection of its own).
    url: String,
    /// Names this process in stale-vehicle claims and change notifications.
    replica_id: String,
    /// How long a claim on a stale vehicle holds before another replica may take it, ms.
    claim_lease_ms: i64,
}

impl From<::postgres::Error> for StoreError {
    fn from(error: ::postgres::Error) -> Self {
        use ::postgres::error::SqlState;
        match error.code() {
            Some(code) if *code == SqlState::DISK_FULL || *code == SqlState::INSUFFICIENT_RESOURCES => {
                StoreError::StorageFull(format!("the PostgreSQL server is out of space ({error}); writes are refused until space is freed"))
            }
            Some(code) if *code == SqlState::T_R_SERIALIZATION_FAILURE || *code == SqlState::T_R_DEADLOCK_DETECTED => StoreError::Conflict,
            Some(code) if *code == SqlState::READ_ONLY_SQL_TRANSACTION => {
                StoreError::ReadOnly(format!("the PostgreSQL server accepts no writes (a standby or a read-only database): {error}"))
            }
            _ => StoreError::Engine(format!("PostgreSQL: {}", describe(&error))),
        }
    }
}

/// The error with its server-side detail (the `Display` of `::postgres::Error` says only "db error").
fn describe(error: &::postgres::Error) -> String {
    match error.as_db_error() {
        Some(db) => format!("{}: {}", db.code().code(), db.message()),
        None => error.to_string(),
    }
}

fn pool_error(error: r2d2::Error) -> StoreError {
    StoreError::Engine(format!("no PostgreSQL connection: {error}"))
}

/// Runs blocking database work; on an async worker thread, tells the runtime first (the
/// `postgres` client would otherwise refuse to block there).
fn off_async<T>(work: impl FnOnce() -> T) -> T {
    match tokio::runtime::Handle::try_current() {
        Ok(handle) if handle.runtime_flavor() == tokio::runtime::RuntimeFlavor::MultiThread => tokio::task::block_in_place(work),
        _ => work(),
    }
}

/// The connection string without its password, for messages.
pub fn redacted(url: &str) -> String {
    match url.parse::<::postgres::Config>() {
        Ok(config) => {
            let hosts: Vec<String> = config
                .get_hosts()
                .iter()
                .map(|h| match h {
                    ::postgres::config::Host::Tcp(name) => name.clone(),
                    #[cfg(unix)]
                    ::postgres::config::Host::Unix(path) => path.display().to_string(),
                })
                .collect();
            format!("postgres://{}@{}/{}", config.get_user().unwrap_or(""), hosts.join(","), config.get_dbname().unwrap_or(""))
        }
        Err(_) => "postgres://(unparsable)".into(),
    }
}

impl PostgresStore {
    /// Connects to the database at `url` (a `postgres://` URL or key=value string), creates or
    /// migrates the schema, and refuses a database with a newer schema.
    pub fn open(url: &str) -> StoreResult<Self> {
        Self::open_with(url, DEFAULT_POOL_SIZE)
    }

    /// As [`PostgresStore::open`], with at most `pool_size` connections.
    pub fn open_with(url: &str, pool_size: u32) -> StoreResult<Self> {
        off_async(|| {
            let config: ::postgres::Config = url.parse().map_err(|e| StoreError::Engine(format!("the PostgreSQL URL {} does not parse: {e}", redacted(url))))?;
            let mut first = config.connect(::postgres::NoTls).map_err(|e| StoreError::Engine(format!("connecting to {}: {}", redacted(url), describe(&e))))?;
            schema::migrate(&mut first)?;
            drop(first);
            let manager = PostgresConnectionManager::new(config, ::postgres::NoTls);
            let pool = r2d2::Pool::builder()
                .max_size(pool_size.max(2))
                .min_idle(Some(1))
                .connection_timeout(Duration::from_secs(10))
                .build(manager)
                .map_err(pool_error)?;
            Ok(Self { pool: Some(pool), url: url.to_owned(), replica_id: replicas::new_replica_id(), claim_lease_ms: replicas::DEFAULT_CLAIM_LEASE_MS })
        })
    }

    /// The same store with another claim lease (tests of claims that expire).
    pub fn with_claim_lease_ms(mut self, lease_ms: i64) -> Self {
        self.claim_lease_ms = lease_ms;
        self
    }

    /// This process's name in claims and notifications.
    pub fn replica_id(&self) -> &str {
        &self.replica_id
    }

    /// Follows the forecasts other replicas store (see [`replicas::listen_for_forecasts`]).
    pub fn listen_for_forecasts(&self, changed: impl Fn(VehicleForecasts) + Send + 'static) -> StoreResult<replicas::ListenerHandle> {
        replicas::listen_for_forecasts(&self.url, &self.replica_id, changed)
    }

    /// Writes a schema version (tests of the refusal to open newer databases).
    pub fn force_schema_version(&self, version: u32) -> StoreResult<()> {
        self.with_client(|client| schema::force_version(client, version))
    }

    fn connection(&self) -> StoreResult<Connection> {
        let pool = self.pool.as_ref().ok_or_else(|| StoreError::Engine("the PostgreSQL store is closed".into()))?;
        pool.get().map_err(pool_error)
    }

    /// Runs `work` on a pooled connection.
    fn with_client<T>(&self, work: impl FnOnce(&mut ::postgres::Client) -> StoreResult<T>) -> StoreResult<T> {
        off_async(|| {
            let mut connection = self.connection()?;
            work(&mut connection)
        })
    }

    /// Runs `work` in one transaction, again from the start (up to [`TRANSACTION_ATTEMPTS`]
    /// times) when PostgreSQL aborts it for a deadlock or a serialization failure.
    fn transaction<T>(&self, mut work: impl FnMut(&mut ::postgres::Transaction<'_>) -> StoreResult<Finish<T>>) -> StoreResult<T> {
        off_async(|| {
            let mut connection = self.connection()?;
            let mut attempt = 1;
            loop {
                let result = (|| {
                    let mut tx = connection.transaction()?;
                    match work(&mut tx)? {
                        Finish::Commit(value) => {
                            tx.commit()?;
                            Ok(value)
                        }
                        Finish::Rollback(value) => {
                            tx.rollback()?;
                            Ok(value)
                        }
                    }
                })();
                match result {
                    Err(StoreError::Conflict) if attempt < TRANSACTION_ATTEMPTS => {
                        attempt += 1;
                        std::thread::sleep(Duration::from_millis(5 * u64::from(attempt)));
                    }
                    other => return other,
                }
            }
        })
    }
}

impl Drop for PostgresStore {
    /// Closes the pooled connections on a thread of their own: the `postgres` client closes a
    /// connection by blocking on a runtime of its own, which panics on a thread inside a tokio
    /// runtime (the server's last handle on the store goes while its runtime shuts down, where
    /// that panic, in a destructor, aborted the process). A store is dropped once per process
    /// or test, so the thread costs nothing that matters.
    fn drop(&mut self) {
        if let Some(pool) = self.pool.take() {
            let _ = std::thread::Builder::new().name("postgres-close".into()).spawn(move || drop(pool)).map(|closing| closing.join());
        }
    }
}

impl Store for PostgresStore {
    fn writable(&self) -> StoreResult<()> {
        self.with_client(|client| {
            let standby: bool = client.query_one("SELECT pg_is_in_recovery()", &[])?.get(0);
            if standby {
                return Err(StoreError::ReadOnly("the PostgreSQL server is a standby (in recovery): writes are refused until it is promoted or the URL names the primary".into()));
            }
            Ok(())
        })
    }

    fn upsert_fleet(&self, fleet: &FleetRecord) -> StoreResult<bool> {
        self.transaction(|tx| writes::upsert_fleet(tx, fleet).map(Finish::Commit))
    }

    fn get_fleet(&self, fleet_id: &str) -> StoreResult<Option<FleetRecord>> {
        self.with_client(|c| Ok(c.query_opt("SELECT fleet_id, time_zone, display_name FROM fleets WHERE fleet_id = $1", &[&fleet_id])?.map(|r| rows::fleet(&r))))
    }

    fn list_fleet_ids(&self) -> StoreResult<Vec<String>> {
        self.with_client(|c| {
            let found = c.query("SELECT fleet_id FROM fleets UNION SELECT DISTINCT fleet_id FROM vehicles ORDER BY 1", &[])?;
            Ok(found.iter().map(|r| r.get(0)).collect())
        })
    }

    fn upsert_vehicle(&self, vehicle: &VehicleRecord) -> StoreResult<bool> {
        self.transaction(|tx| writes::upsert_vehicle(tx, vehicle).map(Finish::Commit))
    }

    fn get_vehicle(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleRecord>> {
        let sql = format!("SELECT {} FROM vehicles WHERE fleet_id = $1 AND vehicle_id = $2", rows::VEHICLE_COLUMNS);
        self.with_client(|c| c.query_opt(&sql, &[&fleet_id, &vehicle_id])?.map(|r| rows::vehicle(&r)).transpose())
    }

    fn list_vehicles(&self, fleet_id: &str, after: Option<&str>, limit: usize) -> StoreResult<Vec<VehicleRecord>> {
        let sql = format!(
            "SELECT {} FROM vehicles WHERE fleet_id = $1 AND ($2::text IS NULL OR vehicle_id > $2) ORDER BY vehicle_id LIMIT $3",
            rows::VEHICLE_COLUMNS
        );
        let limit = limit_of(limit);
        self.with_client(|c| c.query(&sql, &[&fleet_id, &after, &limit])?.iter().map(rows::vehicle).collect())
    }

    fn count_vehicles(&self, fleet_id: &str) -> StoreResult<u64> {
        self.with_client(|c| Ok(c.query_one("SELECT count(*) FROM vehicles WHERE fleet_id = $1", &[&fleet_id])?.get::<_, i64>(0) as u64))
    }

    fn vehicle_totals(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<VehicleTotals> {
        let sql = format!("SELECT {} FROM vehicle_totals WHERE fleet_id = $1 AND vehicle_id = $2", rows::TOTALS_COLUMNS);
        self.with_client(|c| Ok(c.query_opt(&sql, &[&fleet_id, &vehicle_id])?.map(|r| rows::totals(&r)).unwrap_or_default()))
    }

    fn ingest_trips(&self, trips: &[TripRecord]) -> StoreResult<Vec<IngestOutcome>> {
        if trips.is_empty() {
            return Ok(Vec::new());
        }
        self.transaction(|tx| writes::ingest_trips(tx, trips).map(Finish::Commit))
    }

    fn record_inspection(&self, inspection: &InspectionRecord) -> StoreResult<InsertOutcome<InspectionRecord>> {
        self.transaction(|tx| writes::record_inspection(tx, inspection).map(Finish::Commit))
    }

    fn record_replacement(&self, replacement: &ReplacementRecord) -> StoreResult<InsertOutcome<ReplacementRecord>> {
        self.transaction(|tx| writes::record_replacement(tx, replacement).map(Finish::Commit))
    }

    fn correct_record(&self, correction: &CorrectionRecord, superseding: Option<&ServiceEntry>) -> StoreResult<CorrectionOutcome> {
        self.transaction(|tx| writes::correct_record(tx, correction, superseding))
    }

    fn service_records(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceRecords> {
        self.with_client(|c| writes::service_records(c, fleet_id, vehicle_id))
    }

    fn daily_energy(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Vec<DailyEnergy>> {
        let sql = format!("SELECT {} FROM daily_energy WHERE fleet_id = $1 AND vehicle_id = $2 ORDER BY day", rows::DAILY_COLUMNS);
        self.with_client(|c| c.query(&sql, &[&fleet_id, &vehicle_id])?.iter().map(rows::daily).collect())
    }

    fn service_history(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<ServiceHistory> {
        let ServiceRecords { all, corrections } = self.service_records(fleet_id, vehicle_id)?;
        Ok(writes::in_force(all, &corrections))
    }

    fn put_forecasts(&self, record: &VehicleForecasts) -> StoreResult<()> {
        self.transaction(|tx| derived::put_forecasts(tx, record, &self.replica_id).map(Finish::Commit))
    }

    fn replace_forecasts(&self, records: &[VehicleForecasts]) -> StoreResult<Vec<Option<VehicleForecasts>>> {
        self.transaction(|tx| {
            let mut before = Vec::with_capacity(records.len());
            for record in records {
                before.push(derived::get_forecasts(tx, &record.fleet_id, &record.vehicle_id)?);
                derived::put_forecasts(tx, record, &self.replica_id)?;
            }
            Ok(Finish::Commit(before))
        })
    }

    fn get_forecasts(&self, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleForecasts>> {
        self.with_client(|c| derived::get_forecasts(c, fleet_id, vehicle_id))
    }

    fn get_many_forecasts(&self, fleet_id: &str, vehicle_ids: &[&str]) -> StoreResult<Vec<VehicleForecasts>> {
        self.with_client(|c| derived::get_many_forecasts(c, fleet_id, vehicle_ids))
    }

    fn fleet_forecasts(&self, fleet_id: &str) -> StoreResult<Vec<VehicleForecasts>> {
        self.with_client(|c| derived::fleet_forecasts(c, fleet_id))
    }

    fn scan_due(&self, fleet_id: &str, level: BandLevel, due_before_ms: i64, after: Option<&DueCursor>, limit: usize) -> StoreResult<Vec<DueCursor>> {
        self.with_client(|c| derived::scan_due(c, fleet_id, level, due_before_ms, after, limit))
    }

    fn mark_stale(&self, fleet_id: &str, vehicle_ids: &[String]) -> StoreResult<()> {
        self.transaction(|tx| derived::mark_stale(tx, fleet_id, vehicle_ids).map(Finish::Commit))
    }

    fn stale_vehicles(&self, limit: usize) -> StoreResult<Vec<StaleMark>> {
        self.with_client(|c| derived::stale_vehicles(c, limit))
    }

    fn claim_stale(&self, limit: usize) -> StoreResult<Vec<StaleMark>> {
        self.with_client(|c| replicas::claim_stale(c, &self.replica_id, self.claim_lease_ms, limit))
    }

    fn lock_fleet_priors(&self, fleet_id: &str) -> StoreResult<Option<FleetPriorsLock>> {
        off_async(|| replicas::lock_fleet_priors(self.connection()?, fleet_id))
    }

    fn count_stale(&self, fleet_id: &str) -> StoreResult<u64> {
        self.with_client(|c| Ok(c.query_one("SELECT count(*) FROM stale WHERE fleet_id = $1", &[&fleet_id])?.get::<_, i64>(0) as u64))
    }

    fn clear_stale(&self, mark: &StaleMark) -> StoreResult<()> {
        self.with_client(|c| derived::clear_stale(c, mark))
    }

    fn put_priors(&self, fleet_id: &str, priors: &FleetPriors) -> StoreResult<()> {
        self.with_client(|c| derived::put_priors(c, fleet_id, priors))
    }

    fn get_priors(&self, fleet_id: &str) -> StoreResult<Option<FleetPriors>> {
        self.with_client(|c| derived::get_priors(c, fleet_id))
    }

    fn put_token(&self, token: &TokenRecord) -> StoreResult<()> {
        self.with_client(|c| access::put_token(c, token))
    }

    fn token_by_hash(&self, secret_sha256: &[u8; 32]) -> StoreResult<Option<TokenRecord>> {
        self.with_client(|c| access::token_by_hash(c, secret_sha256))
    }

    fn list_tokens(&self) -> StoreResult<Vec<TokenRecord>> {
        self.with_client(access::list_tokens)
    }

    fn append_audit(&self, entry: &AuditRecord) -> StoreResult<()> {
        self.with_client(|c| access::append_audit(c, entry))
    }

    fn list_audit(&self, fleet_id: &str, after: Option<AuditCursor>, limit: usize) -> StoreResult<Vec<(AuditCursor, AuditRecord)>> {
        self.with_client(|c| access::list_audit(c, fleet_id, after, limit))
    }

    fn size_on_disk(&self) -> StoreResult<u64> {
        self.with_client(|c| Ok(c.query_one("SELECT pg_database_size(current_database())", &[])?.get::<_, i64>(0).max(0) as u64))
    }

    fn flush(&self) -> StoreResult<()> {
        // Every write was committed before it returned: nothing is buffered here.
        Ok(())
    }

    fn export_backup(&self, taken_at_ms: i64) -> StoreResult<(std::fs::File, backup_file::BackupSummary)> {
        self.with_client(|c| backup::export(c, taken_at_ms))
    }
}

/// A row limit for SQL (`usize::MAX` means no limit).
fn limit_of(limit: usize) -> i64 {
    i64::try_from(limit).unwrap_or(i64::MAX)
}
