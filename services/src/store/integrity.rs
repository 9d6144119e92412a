//! Start-up verification of a data directory: the database is opened (sled's panics on a
//! damaged file caught and turned into a refusal), scanned (every key tallied, every value's
//! checksum checked) and compared with the acknowledged-write ledger ([`super::ledger`]).
//! `brakeledger serve` refuses a directory with findings, or serves it read-only when
//! `[integrity] on_mismatch = "read_only"`; `brakeledger check` prints the findings.
//!
//! A directory is never started "empty" over data: a ledger without a database, a database
//! emptied by damage, or a database without its ledger are findings, not a fresh start. The one
//! exception is the migration from schema 2, which predates the ledger and gets one built from
//! what it holds.

use std::fmt;
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::{Path, PathBuf};

use super::ledger::{Ledger, LedgerError, LedgerState};
use super::sled_engine::{Engine, PageSettings, SCHEMA_VERSION};
use super::{StoreError, StoreResult};
use crate::config::OnMismatch;

/// sled's main file in the data directory.
pub const SLED_MAIN_FILE: &str = "db";

/// Why a directory cannot be trusted, one finding per line.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Findings {
    /// The directory checked.
    pub dir: PathBuf,
    /// Each problem, as a sentence naming what is missing or damaged.
    pub lines: Vec<String>,
    /// What the database holds, when it could be scanned.
    pub counted: Option<super::ledger::Tallies>,
}

impl Findings {
    /// True when nothing is wrong.
    pub fn is_sound(&self) -> bool {
        self.lines.is_empty()
    }

    /// The refusal shown when the server will not start.
    pub fn refusal(&self) -> String {
        format!(
            "{self}\nThe server will not start on it. Restore the latest backup into an empty directory \
             (brakeledger restore --from FILE --data NEW_DIR, see the README's \"Backup and restore\") and \
             start on that; or set [integrity] on_mismatch = \"read_only\" to serve what is left without \
             accepting writes. `brakeledger check --data {}` repeats this check offline.",
            self.dir.display()
        )
    }
}

impl fmt::Display for Findings {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "the data directory {} does not hold what was acknowledged:", self.dir.display())?;
        for line in &self.lines {
            write!(f, "\n  - {line}")?;
        }
        Ok(())
    }
}

/// What opening a directory for serving gave.
pub struct Opened {
    /// The engine.
    pub engine: Engine,
    /// The ledger, when the directory has a sound one.
    pub ledger: Option<Ledger>,
    /// Findings when the directory is served read-only despite them.
    pub read_only: Option<Findings>,
}

/// Whether the check may change the directory.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mode {
    /// Opening for serving: creates a new directory, migrates an older schema, settles a
    /// pending ledger delta.
    Serve(OnMismatch),
    /// `brakeledger check`: reports only (sled itself may still replay its log on open).
    Check,
}

fn panic_message(payload: Box<dyn std::any::Any + Send>) -> String {
    payload
        .downcast_ref::<&str>()
        .map(|s| (*s).to_owned())
        .or_else(|| payload.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "a panic without a message".to_owned())
}

thread_local! {
    /// Set while this thread runs [`guarded`] work: its panics are logged, not reported.
    static PANICS_QUIET: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Installs, once per process, a panic hook that logs a panic at debug level on a thread running
/// [`guarded`] work and hands every other panic to the hook that was there before.
fn install_quiet_panic_hook() {
    static INSTALLED: std::sync::Once = std::sync::Once::new();
    INSTALLED.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            if PANICS_QUIET.try_with(std::cell::Cell::get).unwrap_or(false) {
                tracing::debug!(%info, "storage engine panicked on a damaged database");
            } else {
                previous(info);
            }
        }));
    });
}

/// Runs `work`, turning a panic inside the storage engine into an error. The default panic
/// report (a backtrace on stderr) is replaced by a debug log line meanwhile, for panics on this
/// thread only: the refusal says what happened. A panic on any other thread meanwhile (another
/// store opening in the same process, a test beside it), or on this one afterwards, still goes
/// to the hook that was there. Only used while opening and checking, before the server serves.
fn guarded<T>(doing: &str, work: impl FnOnce() -> StoreResult<T>) -> StoreResult<T> {
    install_quiet_panic_hook();
    let was_quiet = PANICS_QUIET.with(|quiet| quiet.replace(true));
    let outcome = catch_unwind(AssertUnwindSafe(work));
    PANICS_QUIET.with(|quiet| quiet.set(was_quiet));
    match outcome {
        Ok(result) => result,
        Err(payload) => Err(StoreError::Corrupt(format!("the storage engine failed while {doing} ({})", panic_message(payload)))),
    }
}

fn ledger_error(error: LedgerError) -> StoreError {
    match error {
        LedgerError::Io { source, .. } if super::disk_space::is_out_of_space(&source) => {
            StoreError::StorageFull(format!("the disk holding the data directory is full ({source}); writes are refused until space is freed"))
        }
        other => StoreError::Ledger(other.to_string()),
    }
}

impl From<LedgerError> for StoreError {
    fn from(error: LedgerError) -> Self {
        ledger_error(error)
    }
}

fn sled_main_file_len(dir: &Path) -> u64 {
    std::fs::metadata(dir.join(SLED_MAIN_FILE)).map(|m| m.len()).unwrap_or(0)
}

/// Per fleet: "fleet 'north': acknowledged 1 fleet settings, 6 vehicles, 4200 trips, …",
/// pending delta included: the file keeps the last write's delta as pending after the store
/// flushed it (see [`super::ledger`]), so it was acknowledged unless a crash cut that write.
fn acknowledged_counts(ledger: &LedgerState) -> Vec<String> {
    let mut lines = Vec::new();
    for (fleet, tally) in &ledger.committed_with_pending().0 {
        let counts: Vec<String> = super::ledger::RecordKind::ALL
            .iter()
            .filter(|k| tally.get(**k).count > 0)
            .map(|k| format!("{} {}", tally.get(*k).count, k.plural()))
            .collect();
        if !counts.is_empty() {
            lines.push(format!("fleet '{fleet}': acknowledged {}", counts.join(", ")));
        }
    }
    lines
}

fn everything_missing(ledger: &LedgerState) -> Vec<String> {
    acknowledged_counts(ledger).into_iter().map(|line| format!("{line}, all of them missing")).collect()
}

/// Opens the sled database in `dir`. A process that closed it a moment ago (a restart, or a
/// test reopening a directory) may still hold its lock for a few milliseconds while sled's
/// background thread finishes, so a lock refusal is retried for up to 2 s before it counts as
/// "in use by another process".
pub(crate) fn open_when_unlocked(dir: &Path, pages: PageSettings) -> sled::Result<sled::Db> {
    let open = || super::sled_engine::sled_config(dir, pages).open();
    for _ in 0..40 {
        match open() {
            Err(sled::Error::Io(io)) if io.to_string().contains("could not acquire lock") => std::thread::sleep(std::time::Duration::from_millis(50)),
            opened => return opened,
        }
    }
    open()
}

/// Opens the database in `dir` and checks it against its ledger. In [`Mode::Serve`] a
/// directory with findings is refused with [`StoreError::Damaged`] (or opened read-only when
/// so configured); in [`Mode::Check`] the findings are returned with the engine.
pub fn open(dir: &Path, pages: PageSettings, mode: Mode) -> StoreResult<(Option<Opened>, Findings)> {
    let mut findings = Findings { dir: dir.to_owned(), lines: Vec::new(), counted: None };
    let has_ledger = Ledger::exists_in(dir);
    let ledger = if has_ledger {
        match Ledger::load(dir) {
            Ok(ledger) => Some(ledger),
            Err(error) => {
                findings.lines.push(format!("{error}; what was acknowledged cannot be checked"));
                None
            }
        }
    } else {
        None
    };
    let main_file_len = sled_main_file_len(dir);
    let sled_files_present = dir.join("conf").exists() || dir.join(SLED_MAIN_FILE).exists();

    // sled writes `conf` beside `db` when it creates a database: `conf` without a main file
    // means the main file was lost, not that the directory is new.
    if main_file_len == 0 && (has_ledger || dir.join("conf").exists()) {
        findings.lines.push(format!("sled's main database file ({}) is missing or empty", dir.join(SLED_MAIN_FILE).display()));
        if let Some(ledger) = &ledger {
            findings.lines.extend(everything_missing(ledger.state()));
        }
        // Nothing to serve, even read-only: opening would create an empty database over the data.
        return finish(None, findings, mode);
    }
    if mode == Mode::Check && !sled_files_present && !has_ledger {
        findings.lines.push("the directory holds no brakeledger database".to_owned());
        return Ok((None, findings));
    }

    // An I/O failure that says nothing about the contents (the database locked by another
    // process, no permission) is an error of its own, not damage.
    let db = guarded("opening the database", || match open_when_unlocked(dir, pages) {
        Ok(db) => Ok(Ok(db)),
        Err(sled::Error::Io(io)) if !matches!(io.kind(), std::io::ErrorKind::UnexpectedEof | std::io::ErrorKind::InvalidData) => Ok(Err(io)),
        Err(other) => Err(StoreError::from(other)),
    });
    let db = match db {
        Ok(Ok(db)) => db,
        Ok(Err(io)) => {
            return Err(StoreError::Engine(format!("cannot open the database in {}: {io} (is another brakeledger process using it?)", dir.display())));
        }
        Err(error) => {
            findings.lines.push(format!("the database cannot be opened: {error}"));
            if let Some(ledger) = &ledger {
                findings.lines.extend(everything_missing(ledger.state()));
            }
            return finish(None, findings, mode);
        }
    };
    let version = match guarded("reading the schema version", || Engine::stored_schema_version(&db)) {
        Ok(version) => version,
        Err(error) => {
            findings.lines.push(format!("the database cannot be read: {error}"));
            return finish(None, findings, mode);
        }
    };
    match version {
        Some(found) if found > SCHEMA_VERSION => return Err(StoreError::NewerSchema { found, supported: SCHEMA_VERSION }),
        None if has_ledger => {
            findings.lines.push("the database holds nothing (not even its schema version): it was emptied, replaced or lost".to_owned());
            if let Some(ledger) = &ledger {
                findings.lines.extend(everything_missing(ledger.state()));
            }
        }
        None if guarded("listing the trees", || holds_records(&db))? => {
            findings.lines.push("the database holds records but neither a schema version nor a ledger".to_owned());
        }
        None if mode == Mode::Check => return Ok((None, findings)),
        _ => {}
    }
    if mode == Mode::Check && version.is_some_and(|v| v < SCHEMA_VERSION) {
        findings.lines.push(format!(
            "the database has schema version {}; `brakeledger serve` migrates it to {SCHEMA_VERSION} (and writes its ledger) at the next start",
            version.unwrap_or_default()
        ));
        return Ok((None, findings));
    }
    if !findings.is_sound() {
        let engine = match mode {
            Mode::Serve(OnMismatch::ReadOnly) => Some(guarded("opening the trees", || Engine::from_db_read_only(db))?),
            _ => None,
        };
        return finish(engine.map(|engine| Opened { engine, ledger: None, read_only: None }), findings, mode);
    }

    let fresh = version.is_none();
    let migrating = version.is_some_and(|v| v < SCHEMA_VERSION);
    let engine = guarded("opening the trees", || Engine::from_db(db))?;
    let audit = match guarded("scanning every record", || engine.audit()) {
        Ok(audit) => audit,
        Err(error) => {
            findings.lines.push(format!("the database cannot be read through: {error}"));
            if let Some(ledger) = &ledger {
                findings.lines.extend(acknowledged_counts(ledger.state()).into_iter().map(|line| format!("{line}, none of which can be verified")));
            }
            return finish_with(engine, None, findings, mode);
        }
    };
    findings.counted = Some(audit.tallies.clone());
    findings.lines.extend(audit.problems.iter().cloned());
    if audit.problem_count > audit.problems.len() as u64 {
        findings.lines.push(format!("… and {} more damaged or inconsistent records", audit.problem_count - audit.problems.len() as u64));
    }

    if fresh || (migrating && !has_ledger) {
        if !findings.is_sound() {
            return finish_with(engine, None, findings, mode);
        }
        // A new directory, or the one-time migration from a schema without a ledger (before
        // version 3): the ledger starts from what the store holds.
        let ledger = Ledger::create(dir, LedgerState { committed: audit.tallies, pending: None })?;
        if migrating {
            engine.finish_migration()?;
            tracing::info!(dir = %dir.display(), "wrote the acknowledged-write ledger of a migrated directory");
        }
        return Ok((Some(Opened { engine, ledger: Some(ledger), read_only: None }), findings));
    }

    let Some(mut ledger) = ledger else {
        if !has_ledger {
            findings.lines.push(format!(
                "the acknowledged-write ledger ({}) is missing, so the database cannot be checked against what was acknowledged",
                Ledger::path_in(dir).display()
            ));
            let totals = audit.tallies.totals();
            findings.lines.push(format!(
                "the database holds {} vehicles, {} trips, {} inspections, {} replacements",
                totals.vehicles.count, totals.trips.count, totals.inspections.count, totals.replacements.count
            ));
        }
        return finish_with(engine, None, findings, mode);
    };
    let state = ledger.state().clone();
    let with_pending = state.pending.as_ref().map(|_| state.committed_with_pending());
    if state.committed.same_as(&audit.tallies) {
        if state.pending.is_some() && mode != Mode::Check {
            ledger.abandon()?;
        }
    } else if with_pending.as_ref().is_some_and(|all| all.same_as(&audit.tallies)) {
        if mode != Mode::Check {
            ledger.commit()?;
        }
    } else {
        findings.lines.extend(state.committed.differences(&audit.tallies).iter().map(ToString::to_string));
    }
    if migrating && findings.is_sound() {
        // A directory with a ledger (schema 3 on): the migrated store was checked against
        // it like any other (the ledger's trip keys are the same in every layout).
        engine.finish_migration()?;
        tracing::info!(dir = %dir.display(), "migrated directory verified against its acknowledged-write ledger");
    }
    finish_with(engine, if findings.is_sound() { Some(ledger) } else { None }, findings, mode)
}

/// Whether any tree of the database holds an entry.
fn holds_records(db: &sled::Db) -> StoreResult<bool> {
    for name in db.tree_names() {
        if !db.open_tree(name)?.is_empty() {
            return Ok(true);
        }
    }
    Ok(false)
}

fn finish_with(engine: Engine, ledger: Option<Ledger>, findings: Findings, mode: Mode) -> StoreResult<(Option<Opened>, Findings)> {
    finish(Some(Opened { engine, ledger, read_only: None }), findings, mode)
}

fn finish(opened: Option<Opened>, findings: Findings, mode: Mode) -> StoreResult<(Option<Opened>, Findings)> {
    if findings.is_sound() {
        return Ok((opened, findings));
    }
    match (mode, opened) {
        (Mode::Check, opened) => Ok((opened, findings)),
        (Mode::Serve(OnMismatch::ReadOnly), Some(mut opened)) => {
            tracing::error!(findings = %findings, "serving read-only: writes are refused until the directory is restored");
            opened.ledger = None;
            opened.read_only = Some(findings.clone());
            Ok((Some(opened), findings))
        }
        (Mode::Serve(_), _) => Err(StoreError::Damaged(findings.refusal())),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::sled_store::SledStore;
    use crate::store::{FleetRecord, Store};

    fn refusal(dir: &Path) -> String {
        match SledStore::open(dir) {
            Err(StoreError::Damaged(message)) => message,
            Err(other) => panic!("unexpected error {other}"),
            Ok(_) => panic!("a damaged directory must be refused"),
        }
    }

    #[test]
    fn a_schema_2_directory_gets_checksums_and_its_ledger_once() {
        let dir = tempfile::tempdir().unwrap();
        let fleet = FleetRecord::default_for("north");
        {
            // A version-2 database: postcard values without checksums, no ledger.
            let db = sled::open(dir.path()).unwrap();
            db.open_tree("meta").unwrap().insert(b"schema_version", &2u32.to_be_bytes()).unwrap();
            db.open_tree("fleets").unwrap().insert(b"north", postcard::to_stdvec(&fleet).unwrap()).unwrap();
            db.flush().unwrap();
        }
        let store = SledStore::open(dir.path()).expect("the one-time migration");
        assert_eq!(store.get_fleet("north").unwrap(), Some(fleet.clone()));
        assert_eq!(Ledger::load(dir.path()).unwrap().state().committed.totals().fleet.count, 1);
        drop(store);
        let store = SledStore::open(dir.path()).expect("verified against the new ledger");
        assert_eq!(store.get_fleet("north").unwrap(), Some(fleet));
    }

    #[test]
    fn records_without_their_ledger_or_a_ledger_without_records_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        SledStore::open(dir.path()).unwrap().upsert_fleet(&FleetRecord::default_for("north")).unwrap();
        let ledger = std::fs::read(Ledger::path_in(dir.path())).unwrap();
        std::fs::remove_file(Ledger::path_in(dir.path())).unwrap();
        assert!(refusal(dir.path()).contains("ledger"), "records without a ledger");
        std::fs::write(Ledger::path_in(dir.path()), &ledger).unwrap();
        assert!(SledStore::open(dir.path()).is_ok(), "sound again with its ledger");

        let other = tempfile::tempdir().unwrap();
        std::fs::write(Ledger::path_in(other.path()), &ledger).unwrap();
        let message = refusal(other.path());
        assert!(message.contains("missing or empty") && message.contains("fleet 'north': acknowledged 1 fleet settings, all of them missing"), "{message}");
        assert!(!other.path().join(SLED_MAIN_FILE).exists(), "no empty database created over the ledger");
    }

    /// The file keeps the last write's delta pending after the store flushed it (one rewrite
    /// per write): each write folds the one before, and start-up folds the last.
    #[test]
    fn the_last_write_left_pending_in_the_file_is_folded_at_start_up() {
        let dir = tempfile::tempdir().unwrap();
        {
            let store = SledStore::open(dir.path()).unwrap();
            store.upsert_fleet(&FleetRecord::default_for("north")).unwrap();
            store.upsert_fleet(&FleetRecord::default_for("south")).unwrap();
        }
        let state = Ledger::load(dir.path()).unwrap().state().clone();
        assert_eq!(state.committed.totals().fleet.count, 1, "north folded by the write of south");
        assert_eq!(state.pending.as_ref().map(|p| p.totals().fleet.count), Some(1), "south still pending");
        drop(SledStore::open(dir.path()).expect("committed + pending is what the store holds"));
        let state = Ledger::load(dir.path()).unwrap().state().clone();
        assert_eq!((state.committed.totals().fleet.count, state.pending), (2, None));
    }

    #[test]
    fn a_write_cut_between_the_store_and_the_ledger_is_accepted_and_folded() {
        let dir = tempfile::tempdir().unwrap();
        SledStore::open(dir.path()).unwrap().upsert_fleet(&FleetRecord::default_for("north")).unwrap();
        // The ledger of the moment before that write reached it: the fleet only pending.
        let mut pending = super::super::ledger::Tallies::default();
        pending.add_key("north", super::super::ledger::RecordKind::Fleet, b"north");
        Ledger::create(dir.path(), LedgerState { committed: Default::default(), pending: Some(pending.clone()) }).unwrap();
        drop(SledStore::open(dir.path()).expect("committed + pending is what the store holds"));
        assert_eq!(Ledger::load(dir.path()).unwrap().state(), &LedgerState { committed: pending, pending: None });
    }
}
