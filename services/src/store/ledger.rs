//! The acknowledged-write ledger: a small file beside sled's files in the data directory that
//! records, per fleet, how many records of each kind were acknowledged and an order-independent
//! digest of their keys. It lets start-up (and `brakeledger check`) tell a sound database from
//! one that lost records, even when sled itself opens a damaged directory without complaint.
//!
//! # File
//! `acknowledged.ledger`, two lines of text:
//! ```text
//! brakeledger-ledger 1 crc32=1a2b3c4d
//! {"committed":{"north":{"fleet":{"count":1,"digest":...},...}},"pending":null}
//! ```
//! The first line names the format, its version and the CRC-32 (IEEE) of the second line, which
//! is JSON. The file is replaced atomically: written to `acknowledged.ledger.tmp`, fsynced,
//! renamed over the old one, and the directory fsynced.
//!
//! # Tallies
//! For each fleet and each record kind (the fleet's own settings, vehicles, trips, inspections,
//! replacements): the number of records and the wrapping sum of the 64-bit FNV-1a hashes of their
//! keys in the store. A sum does not depend on order, so the store can be tallied by a scan and
//! compared. The digest detects lost or foreign records; it is not a defence against deliberate
//! tampering (FNV is not a cryptographic hash).
//!
//! # Writing
//! An acknowledged write that adds records runs under one lock: the ledger is first rewritten
//! with the write's delta as *pending*, then the store writes and flushes, and only then is the
//! write acknowledged. The file is not rewritten again to fold the delta into *committed*: the
//! next write's rewrite does that (its committed state includes every delta that reached the
//! store before it), and start-up folds a pending delta the store holds. So a crash leaves the
//! store equal to `committed` or to `committed + pending`; start-up accepts both. Anything else
//! is damage. One atomic rewrite (two fsyncs: the file and its directory) per write instead of a
//! rewrite before and a rename after, and the step after the store's write needs no free space
//! because there is none.

use std::collections::BTreeMap;
use std::fmt;
use std::fs::{self, File};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

/// File name of the ledger inside the data directory.
pub const LEDGER_FILE: &str = "acknowledged.ledger";
const LEDGER_TMP: &str = "acknowledged.ledger.tmp";
/// Written by builds before 2026-12-05 beside the ledger (the committed state prepared ahead);
/// no longer written, and removed when found.
const LEDGER_NEXT: &str = "acknowledged.ledger.next";
const FORMAT_LINE: &str = "brakeledger-ledger 1";

/// The kinds of acknowledged records the ledger counts.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum RecordKind {
    /// A fleet's settings (UpsertFleet).
    Fleet,
    /// A registered vehicle.
    Vehicle,
    /// A stored trip.
    Trip,
    /// An inspection.
    Inspection,
    /// A replacement.
    Replacement,
}

impl RecordKind {
    /// Every kind, in report order.
    pub const ALL: [RecordKind; 5] = [RecordKind::Fleet, RecordKind::Vehicle, RecordKind::Trip, RecordKind::Inspection, RecordKind::Replacement];

    /// Plural name for reports ("trips").
    pub fn plural(self) -> &'static str {
        match self {
            RecordKind::Fleet => "fleet settings",
            RecordKind::Vehicle => "vehicles",
            RecordKind::Trip => "trips",
            RecordKind::Inspection => "inspections",
            RecordKind::Replacement => "replacements",
        }
    }
}

/// Count and key digest of one kind of record.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Tally {
    /// Records.
    pub count: u64,
    /// Wrapping sum of the FNV-1a 64 hashes of their keys.
    pub digest: u64,
}

impl Tally {
    /// Adds one record with this key.
    pub fn add_key(&mut self, key: &[u8]) {
        self.count += 1;
        self.digest = self.digest.wrapping_add(fnv1a64(key));
    }

    /// Adds another tally.
    pub fn add(&mut self, other: &Tally) {
        self.count += other.count;
        self.digest = self.digest.wrapping_add(other.digest);
    }

    fn is_empty(&self) -> bool {
        self.count == 0 && self.digest == 0
    }
}

/// Tallies of one fleet, one per [`RecordKind`].
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct FleetTally {
    /// The fleet's settings record (0 or 1).
    pub fleet: Tally,
    /// Vehicles.
    pub vehicles: Tally,
    /// Trips.
    pub trips: Tally,
    /// Inspections.
    pub inspections: Tally,
    /// Replacements.
    pub replacements: Tally,
}

impl FleetTally {
    /// The tally of one kind.
    pub fn get(&self, kind: RecordKind) -> &Tally {
        match kind {
            RecordKind::Fleet => &self.fleet,
            RecordKind::Vehicle => &self.vehicles,
            RecordKind::Trip => &self.trips,
            RecordKind::Inspection => &self.inspections,
            RecordKind::Replacement => &self.replacements,
        }
    }

    fn get_mut(&mut self, kind: RecordKind) -> &mut Tally {
        match kind {
            RecordKind::Fleet => &mut self.fleet,
            RecordKind::Vehicle => &mut self.vehicles,
            RecordKind::Trip => &mut self.trips,
            RecordKind::Inspection => &mut self.inspections,
            RecordKind::Replacement => &mut self.replacements,
        }
    }
}

/// Tallies of every fleet, by fleet id.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Tallies(pub BTreeMap<String, FleetTally>);

impl Tallies {
    /// Adds one record of `kind` with store key `key` to `fleet_id`.
    pub fn add_key(&mut self, fleet_id: &str, kind: RecordKind, key: &[u8]) {
        self.0.entry(fleet_id.to_owned()).or_default().get_mut(kind).add_key(key);
    }

    /// Adds every tally of `other`.
    pub fn add(&mut self, other: &Tallies) {
        for (fleet, tally) in &other.0 {
            let into = self.0.entry(fleet.clone()).or_default();
            for kind in RecordKind::ALL {
                into.get_mut(kind).add(tally.get(kind));
            }
        }
    }

    /// True when nothing is counted.
    pub fn is_empty(&self) -> bool {
        self.0.values().all(|t| RecordKind::ALL.iter().all(|k| t.get(*k).is_empty()))
    }

    /// Same counts and digests for every fleet (fleets with nothing counted are ignored).
    pub fn same_as(&self, other: &Tallies) -> bool {
        self.differences(other).is_empty()
    }

    /// Where `found` (the store) differs from `self` (what was acknowledged).
    pub fn differences(&self, found: &Tallies) -> Vec<TallyDifference> {
        let empty = FleetTally::default();
        let fleets: std::collections::BTreeSet<&String> = self.0.keys().chain(found.0.keys()).collect();
        let mut out = Vec::new();
        for fleet in fleets {
            let expected = self.0.get(fleet).unwrap_or(&empty);
            let actual = found.0.get(fleet).unwrap_or(&empty);
            for kind in RecordKind::ALL {
                let (e, a) = (expected.get(kind), actual.get(kind));
                if e != a {
                    out.push(TallyDifference { fleet_id: fleet.clone(), kind, expected: *e, found: *a });
                }
            }
        }
        out
    }

    /// Totals over every fleet, per kind.
    pub fn totals(&self) -> FleetTally {
        let mut total = FleetTally::default();
        for tally in self.0.values() {
            for kind in RecordKind::ALL {
                total.get_mut(kind).add(tally.get(kind));
            }
        }
        total
    }
}

/// One fleet and kind whose records differ from what was acknowledged.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TallyDifference {
    /// Fleet.
    pub fleet_id: String,
    /// Kind of record.
    pub kind: RecordKind,
    /// What the ledger recorded.
    pub expected: Tally,
    /// What the store holds.
    pub found: Tally,
}

impl fmt::Display for TallyDifference {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let (expected, found) = (self.expected.count, self.found.count);
        let kind = self.kind.plural();
        if found < expected {
            write!(f, "fleet '{}': {} of {expected} acknowledged {kind} are missing ({found} found)", self.fleet_id, expected - found)
        } else if found > expected {
            write!(f, "fleet '{}': {found} {kind} found where {expected} were acknowledged", self.fleet_id)
        } else {
            write!(f, "fleet '{}': {expected} {kind} found as acknowledged, but not the same ones (key digest differs)", self.fleet_id)
        }
    }
}

/// What the ledger file holds.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct LedgerState {
    /// Records acknowledged (their writes reached disk).
    pub committed: Tallies,
    /// The delta of a write in progress: it may or may not have reached the store.
    pub pending: Option<Tallies>,
}

impl LedgerState {
    /// The committed tallies with the pending delta, if any, folded in: what the store holds
    /// once that delta reached it.
    pub fn committed_with_pending(&self) -> Tallies {
        let mut all = self.committed.clone();
        if let Some(delta) = &self.pending {
            all.add(delta);
        }
        all
    }
}

/// Problems reading the ledger file.
#[derive(Debug, thiserror::Error)]
pub enum LedgerError {
    /// The file could not be read or written.
    #[error("ledger file {path}: {source}")]
    Io {
        /// The file.
        path: PathBuf,
        /// Why.
        source: io::Error,
    },
    /// The file is damaged or not a ledger.
    #[error("ledger file {path} is damaged: {reason}")]
    Damaged {
        /// The file.
        path: PathBuf,
        /// Why.
        reason: String,
    },
}

/// The ledger file of one data directory.
#[derive(Debug)]
pub struct Ledger {
    dir: PathBuf,
    /// What the file holds.
    state: LedgerState,
    /// Whether the file's pending delta is known to be in the store, flushed
    /// ([`Ledger::reached_store`]): it then counts as committed, and the next rewrite says so.
    pending_in_store: bool,
}

impl Ledger {
    /// Path of the ledger in `dir`.
    pub fn path_in(dir: &Path) -> PathBuf {
        dir.join(LEDGER_FILE)
    }

    /// Whether `dir` has a ledger file.
    pub fn exists_in(dir: &Path) -> bool {
        Self::path_in(dir).exists()
    }

    /// Reads the ledger of `dir`.
    pub fn load(dir: &Path) -> Result<Self, LedgerError> {
        let path = Self::path_in(dir);
        let text = fs::read_to_string(&path).map_err(|source| LedgerError::Io { path: path.clone(), source })?;
        let state = parse(&text).map_err(|reason| LedgerError::Damaged { path, reason })?;
        // The committed state an earlier build prepared ahead: never read now.
        let _ = fs::remove_file(dir.join(LEDGER_NEXT));
        Ok(Self { dir: dir.to_owned(), state, pending_in_store: false })
    }

    /// A ledger for `dir` holding `state`, written now.
    pub fn create(dir: &Path, state: LedgerState) -> Result<Self, LedgerError> {
        save(dir, &state)?;
        Ok(Self { dir: dir.to_owned(), state, pending_in_store: false })
    }

    /// The state the file holds (its pending delta may have reached the store already, see
    /// [`Ledger::acknowledged`]).
    pub fn state(&self) -> &LedgerState {
        &self.state
    }

    /// Every record acknowledged: the committed state, with the pending delta when it is known
    /// to have reached the store.
    pub fn acknowledged(&self) -> Tallies {
        if self.pending_in_store {
            self.state.committed_with_pending()
        } else {
            self.state.committed.clone()
        }
    }

    /// Records `delta` as pending (before the store writes it), with every earlier delta that
    /// reached the store folded into committed.
    pub fn begin(&mut self, delta: Tallies) -> Result<(), LedgerError> {
        self.replace(LedgerState { committed: self.acknowledged(), pending: Some(delta) })
    }

    /// Notes that the pending delta reached the store and was flushed: it counts as committed
    /// from now on. Nothing is written; the next [`Ledger::begin`] (or [`Ledger::commit`])
    /// writes it folded, and start-up folds it if none comes.
    pub fn reached_store(&mut self) {
        self.pending_in_store = self.state.pending.is_some();
    }

    /// Folds the pending delta into committed and writes that (after the store flushed it).
    pub fn commit(&mut self) -> Result<(), LedgerError> {
        self.replace(LedgerState { committed: self.state.committed_with_pending(), pending: None })
    }

    /// Drops the pending delta (the store does not hold it); one that reached the store is
    /// kept, as committed.
    pub fn abandon(&mut self) -> Result<(), LedgerError> {
        self.replace(LedgerState { committed: self.acknowledged(), pending: None })
    }

    /// Writes `state`; the ledger changes in memory only once it is on disk.
    fn replace(&mut self, state: LedgerState) -> Result<(), LedgerError> {
        save(&self.dir, &state)?;
        self.state = state;
        self.pending_in_store = false;
        Ok(())
    }
}

/// Writes the ledger file of `dir` atomically: temp file, fsync, rename, fsync of the directory.
fn save(dir: &Path, state: &LedgerState) -> Result<(), LedgerError> {
    let path = Ledger::path_in(dir);
    let tmp = dir.join(LEDGER_TMP);
    write_synced(&tmp, &render(state), &path)?;
    fs::rename(&tmp, &path).map_err(|source| LedgerError::Io { path: path.clone(), source })?;
    File::open(dir).and_then(|d| d.sync_all()).map_err(|source| LedgerError::Io { path, source })?;
    Ok(())
}

/// Writes `text` to `file` and fsyncs it; errors name the ledger file `named`.
fn write_synced(file: &Path, text: &str, named: &Path) -> Result<(), LedgerError> {
    let io_error = |source| LedgerError::Io { path: named.to_owned(), source };
    let mut handle = File::create(file).map_err(io_error)?;
    handle.write_all(text.as_bytes()).map_err(io_error)?;
    handle.sync_all().map_err(io_error)
}

fn render(state: &LedgerState) -> String {
    // Serialising maps of strings and integers cannot fail.
    let body = serde_json::to_string(state).unwrap_or_default();
    format!("{FORMAT_LINE} crc32={:08x}\n{body}\n", crc32fast::hash(body.as_bytes()))
}

fn parse(text: &str) -> Result<LedgerState, String> {
    let (header, rest) = text.split_once('\n').ok_or("no header line")?;
    let body = rest.strip_suffix('\n').ok_or("the file is cut short (no final newline)")?;
    let crc = header
        .strip_prefix(FORMAT_LINE)
        .and_then(|h| h.strip_prefix(" crc32="))
        .ok_or_else(|| format!("the first line is not '{FORMAT_LINE} crc32=…'"))?;
    let crc = u32::from_str_radix(crc.trim(), 16).map_err(|_| "the checksum is not hexadecimal".to_owned())?;
    if crc32fast::hash(body.as_bytes()) != crc {
        return Err("its checksum does not match its contents".into());
    }
    serde_json::from_str(body).map_err(|e| format!("its contents do not parse: {e}"))
}

/// 64-bit FNV-1a of `bytes` (Fowler–Noll–Vo; offset basis and prime of the published
/// parameters).
pub fn fnv1a64(bytes: &[u8]) -> u64 {
    let mut hash: u64 = 0xcbf2_9ce4_8422_2325;
    for byte in bytes {
        hash ^= u64::from(*byte);
        hash = hash.wrapping_mul(0x0000_0100_0000_01b3);
    }
    hash
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn fnv1a64_matches_the_reference_test_vectors() {
        // Test vectors of the FNV reference test suite (Landon Curt Noll, "FNV hash"), values
        // recalled from memory, not re-read from the published file here:
        // "" -> cbf29ce484222325 (the offset basis), "a" -> af63dc4c8601ec8c,
        // "foobar" -> 85944171f73967e8.
        assert_eq!(fnv1a64(b""), 0xcbf2_9ce4_8422_2325);
        assert_eq!(fnv1a64(b"a"), 0xaf63_dc4c_8601_ec8c);
        assert_eq!(fnv1a64(b"foobar"), 0x8594_4171_f739_67e8);
    }

    #[test]
    fn the_file_round_trips_and_damage_is_detected() {
        let dir = tempfile::tempdir().unwrap();
        let mut tallies = Tallies::default();
        tallies.add_key("north", RecordKind::Trip, b"k1");
        let mut ledger = Ledger::create(dir.path(), LedgerState::default()).unwrap();
        ledger.begin(tallies.clone()).unwrap();
        assert_eq!(Ledger::load(dir.path()).unwrap().state().pending, Some(tallies.clone()));
        ledger.commit().unwrap();
        let loaded = Ledger::load(dir.path()).unwrap();
        assert_eq!(loaded.state().committed, tallies);
        assert!(loaded.state().pending.is_none());
        let path = Ledger::path_in(dir.path());
        let text = fs::read_to_string(&path).unwrap();
        fs::write(&path, text.replace("\"count\":1", "\"count\":2")).unwrap();
        assert!(matches!(Ledger::load(dir.path()), Err(LedgerError::Damaged { .. })));
        fs::write(&path, &text[..text.len() - 3]).unwrap();
        assert!(matches!(Ledger::load(dir.path()), Err(LedgerError::Damaged { .. })));
    }

    /// A write's delta stays pending in the file once it reached the store (nothing is
    /// rewritten after the store's flush); the next write's rewrite folds it into committed,
    /// and so does an abandon of a later delta that did not reach the store.
    #[test]
    fn a_delta_that_reached_the_store_is_folded_by_the_next_rewrite() {
        let dir = tempfile::tempdir().unwrap();
        let mut first = Tallies::default();
        first.add_key("north", RecordKind::Vehicle, b"v1");
        let mut second = Tallies::default();
        second.add_key("north", RecordKind::Vehicle, b"v2");
        let mut ledger = Ledger::create(dir.path(), LedgerState::default()).unwrap();
        ledger.begin(first.clone()).unwrap();
        ledger.reached_store();
        let on_disk = LedgerState { committed: Tallies::default(), pending: Some(first.clone()) };
        assert_eq!(Ledger::load(dir.path()).unwrap().state(), &on_disk, "no rewrite after the store's flush");
        assert_eq!(ledger.acknowledged(), first);

        ledger.begin(second.clone()).unwrap();
        let on_disk = LedgerState { committed: first.clone(), pending: Some(second.clone()) };
        assert_eq!(Ledger::load(dir.path()).unwrap().state(), &on_disk, "the first delta folded by the second write");
        assert_eq!(ledger.acknowledged(), first, "the second is not acknowledged before it reaches the store");

        // The second write failed and its delta is absent from the store: dropped.
        ledger.abandon().unwrap();
        assert_eq!(Ledger::load(dir.path()).unwrap().state(), &LedgerState { committed: first.clone(), pending: None });

        // A delta that reached the store survives an abandon (nothing pending is lost).
        ledger.begin(second.clone()).unwrap();
        ledger.reached_store();
        ledger.abandon().unwrap();
        let mut both = first.clone();
        both.add(&second);
        assert_eq!(Ledger::load(dir.path()).unwrap().state(), &LedgerState { committed: both, pending: None });
    }

    /// The committed state an earlier build prepared beside the ledger is removed on load.
    #[test]
    fn an_earlier_builds_prepared_file_is_removed() {
        let dir = tempfile::tempdir().unwrap();
        Ledger::create(dir.path(), LedgerState::default()).unwrap();
        fs::write(dir.path().join(LEDGER_NEXT), "left by an earlier build").unwrap();
        Ledger::load(dir.path()).unwrap();
        assert!(!dir.path().join(LEDGER_NEXT).exists());
    }

    #[test]
    fn differences_name_the_fleet_kind_and_counts() {
        let mut expected = Tallies::default();
        for key in [b"a".as_slice(), b"b", b"c"] {
            expected.add_key("north", RecordKind::Trip, key);
        }
        let mut found = Tallies::default();
        found.add_key("north", RecordKind::Trip, b"a");
        let differences = expected.differences(&found);
        assert_eq!(differences.len(), 1);
        assert_eq!(differences[0].to_string(), "fleet 'north': 2 of 3 acknowledged trips are missing (1 found)");
    }

    proptest! {
        /// The tally of a set of keys does not depend on the order they are added in, and a
        /// set missing one key never tallies the same.
        #[test]
        fn tallies_are_order_independent_and_see_a_missing_key(keys in proptest::collection::btree_set("[a-z0-9]{1,12}", 1..40), seed in any::<u64>()) {
            let keys: Vec<String> = keys.into_iter().collect();
            let mut forward = Tallies::default();
            for k in &keys { forward.add_key("f", RecordKind::Trip, k.as_bytes()); }
            let mut shuffled = keys.clone();
            let n = shuffled.len();
            shuffled.rotate_left((seed as usize) % n);
            let mut other = Tallies::default();
            for k in &shuffled { other.add_key("f", RecordKind::Trip, k.as_bytes()); }
            prop_assert!(forward.same_as(&other));
            let mut missing = Tallies::default();
            for k in &keys[1..] { missing.add_key("f", RecordKind::Trip, k.as_bytes()); }
            prop_assert!(!forward.same_as(&missing));
        }
    }
}
