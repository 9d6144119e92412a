//! The brakeledger backup file: writing one from an open database, verifying one, and
//! restoring one into an empty directory.
//!
//! # Format (version 1)
//! ```text
//! "BRAKELEDGER-BACKUP\n"                      19 bytes, the file's name for itself
//! frame*                                      in this order: H, R…, T, E
//! frame = tag (1 byte) | length (u32 LE) | payload (length bytes) | CRC-32 of tag+length+payload (u32 LE)
//! ```
//! | tag | payload |
//! |---|---|
//! | `H` | JSON header: format version, schema version of the values, when taken (ms), tree names |
//! | `R` | one stored entry: tree number (1 byte, index into the header's trees), key length (u32 LE), key, value (the stored bytes, with their own checksum) |
//! | `T` | JSON [`Tallies`]: per fleet, count and key digest of fleets, vehicles, trips, inspections, replacements (the ledger's counts) |
//! | `E` | JSON end: entries written and the CRC-32 of every byte of the file before this frame |
//!
//! CRC-32 is the IEEE polynomial (as in zip and PNG). The file carries the records only
//! (fleets, vehicles, per-vehicle totals, the trips' day blocks, the trip-id index, daily roll-ups,
//! inspections, replacements); forecasts, the due index and fleet priors are derived from them
//! and recomputed after a restore.
//!
//! Backups of schema 3 (one entry per trip in `trips`, and `trip_ids`) are restored too: their
//! trips are moved into day blocks after loading. The tallies count one trip per trip either way.
//!
//! Verification reads the whole file: the magic, every frame's checksum, every value's own
//! checksum, the tallies recomputed from the entries against the `T` frame, the entry count and
//! whole-file checksum against the `E` frame, and nothing after it.

use std::fs::File;
use std::io::{self, BufReader, BufWriter, Read, Write};
use std::path::Path;

use serde::{Deserialize, Serialize};

use super::ledger::{Ledger, LedgerState, Tallies};
use super::sled_engine::{checked_body, tally_entry, Engine, PageSettings, RECORD_TREES, SCHEMA_VERSION};
use super::StoreError;

/// The first bytes of every backup file.
pub const MAGIC: &[u8] = b"BRAKELEDGER-BACKUP\n";
/// Format version this build writes and reads.
pub const FORMAT_VERSION: u32 = 1;
/// Largest frame accepted, bytes (a record is far smaller; a damaged length is caught early).
const MAX_FRAME_BYTES: u32 = 64 * 1024 * 1024;
/// Oldest schema whose backups are restored: schema-3 trips (one record per trip) are moved
/// into day blocks after loading, as the start-up migration does.
const SCHEMA_3_RESTORED: u32 = 3;
/// Entries loaded per batch on restore.
const RESTORE_BATCH: usize = 10_000;

/// Problems with a backup file.
#[derive(Debug, thiserror::Error)]
pub enum BackupError {
    /// Reading or writing failed.
    #[error("backup file: {0}")]
    Io(#[from] io::Error),
    /// The file is not a sound backup.
    #[error("the backup file is damaged or not a brakeledger backup: {0}")]
    Damaged(String),
    /// The store failed while exporting or restoring.
    #[error(transparent)]
    Store(#[from] StoreError),
    /// Restore needs an empty (or new) directory.
    #[error("{0}")]
    TargetNotEmpty(String),
}

/// The `H` frame.
#[derive(Debug, Clone, Serialize, Deserialize)]
struct Header {
    format_version: u32,
    schema_version: u32,
    taken_at_ms: i64,
    trees: Vec<String>,
}

/// The `E` frame.
#[derive(Debug, Clone, Serialize, Deserialize)]
struct End {
    entries: u64,
    crc32_before_end: u32,
}

impl From<BackupError> for StoreError {
    fn from(error: BackupError) -> Self {
        match error {
            BackupError::Store(inner) => inner,
            BackupError::Io(io) if super::disk_space::is_out_of_space(&io) => StoreError::StorageFull(format!("no room for the backup's temporary copy beside the database: {io}")),
            BackupError::Io(io) => StoreError::Engine(format!("writing the backup: {io}")),
            other => StoreError::Corrupt(other.to_string()),
        }
    }
}

/// What a backup file holds.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BackupSummary {
    /// Stored entries.
    pub entries: u64,
    /// Per fleet and kind, count and key digest.
    pub tallies: Tallies,
    /// When taken, ms since the Unix epoch.
    pub taken_at_ms: i64,
    /// File size, bytes.
    pub file_bytes: u64,
    /// CRC-32 of the whole file.
    pub file_crc32: u32,
    /// Schema version of the stored values.
    pub schema_version: u32,
}

impl BackupSummary {
    /// "3 fleets, 120 vehicles, 48000 trips, 960 inspections, 480 replacements".
    pub fn describe(&self) -> String {
        let totals = self.tallies.totals();
        format!(
            "{} fleets, {} vehicles, {} trips, {} inspections, {} replacements ({} entries, {} bytes)",
            self.tallies.0.len(),
            totals.vehicles.count,
            totals.trips.count,
            totals.inspections.count,
            totals.replacements.count,
            self.entries,
            self.file_bytes
        )
    }
}

/// Values of these trees are raw (not checksummed postcard): the schema-3 trip-id index.
fn raw_valued(tree: &str) -> bool {
    tree == "trip_ids"
}

/// A writer that keeps the CRC-32 and length of everything written.
struct Counting<W: Write> {
    inner: W,
    crc: crc32fast::Hasher,
    bytes: u64,
}

impl<W: Write> Write for Counting<W> {
    fn write(&mut self, buf: &[u8]) -> io::Result<usize> {
        let n = self.inner.write(buf)?;
        self.crc.update(&buf[..n]);
        self.bytes += n as u64;
        Ok(n)
    }
    fn flush(&mut self) -> io::Result<()> {
        self.inner.flush()
    }
}

fn write_frame(out: &mut impl Write, tag: u8, payload: &[u8]) -> io::Result<()> {
    let length = u32::try_from(payload.len()).map_err(|_| io::Error::new(io::ErrorKind::InvalidInput, "frame too large"))?;
    let mut crc = crc32fast::Hasher::new();
    crc.update(&[tag]);
    crc.update(&length.to_le_bytes());
    crc.update(payload);
    out.write_all(&[tag])?;
    out.write_all(&length.to_le_bytes())?;
    out.write_all(payload)?;
    out.write_all(&crc.finalize().to_le_bytes())
}

fn json<T: Serialize>(value: &T) -> Vec<u8> {
    // Plain structs of numbers and strings always serialise.
    serde_json::to_vec(value).unwrap_or_default()
}

/// Where a backup's entries come from: every (key, stored value) of one of the
/// [`RECORD_TREES`], as the sled engine keys and encodes them, whatever the engine.
pub trait BackupSource {
    /// Hands every entry of `tree` to `entry`, in key order.
    fn each_entry(&self, tree: &str, entry: &mut dyn FnMut(&[u8], &[u8]) -> Result<(), BackupError>) -> Result<(), BackupError>;
}

impl BackupSource for Engine {
    fn each_entry(&self, tree: &str, entry: &mut dyn FnMut(&[u8], &[u8]) -> Result<(), BackupError>) -> Result<(), BackupError> {
        for stored in self.record_entries(tree)? {
            let (key, value) = stored?;
            entry(&key, &value)?;
        }
        Ok(())
    }
}

/// Writes a backup of `engine` to `out`. The caller holds acknowledged writes (so the copy is
/// consistent) and passes the ledger's committed tallies, which the copy must match.
pub fn write(engine: &Engine, expected: Option<&Tallies>, taken_at_ms: i64, out: impl Write) -> Result<BackupSummary, BackupError> {
    write_from(engine, expected, taken_at_ms, out)
}

/// Writes a backup of what `source` holds to `out` (see [`write`]).
pub fn write_from(source: &dyn BackupSource, expected: Option<&Tallies>, taken_at_ms: i64, out: impl Write) -> Result<BackupSummary, BackupError> {
    let mut out = Counting { inner: BufWriter::new(out), crc: crc32fast::Hasher::new(), bytes: 0 };
    out.write_all(MAGIC)?;
    let header = Header { format_version: FORMAT_VERSION, schema_version: SCHEMA_VERSION, taken_at_ms, trees: RECORD_TREES.iter().map(|t| (*t).to_owned()).collect() };
    write_frame(&mut out, b'H', &json(&header))?;
    let mut tallies = Tallies::default();
    let mut entries = 0u64;
    let mut payload = Vec::new();
    for (index, tree) in RECORD_TREES.iter().enumerate() {
        source.each_entry(tree, &mut |key, value| {
            tally_entry(tree, key, value, &mut tallies)?;
            payload.clear();
            payload.push(index as u8);
            payload.extend_from_slice(&(key.len() as u32).to_le_bytes());
            payload.extend_from_slice(key);
            payload.extend_from_slice(value);
            write_frame(&mut out, b'R', &payload)?;
            entries += 1;
            Ok(())
        })?;
    }
    if let Some(expected) = expected {
        if !expected.same_as(&tallies) {
            let lines: Vec<String> = expected.differences(&tallies).iter().map(ToString::to_string).collect();
            return Err(BackupError::Store(StoreError::Damaged(format!("the store does not match its ledger, so no backup was written: {}", lines.join("; ")))));
        }
    }
    write_frame(&mut out, b'T', &json(&tallies))?;
    let end = End { entries, crc32_before_end: out.crc.clone().finalize() };
    write_frame(&mut out, b'E', &json(&end))?;
    out.flush()?;
    Ok(BackupSummary { entries, tallies, taken_at_ms, file_bytes: out.bytes, file_crc32: out.crc.finalize(), schema_version: SCHEMA_VERSION })
}

/// A reader that keeps the CRC-32 and length of everything read.
struct Reading<R: Read> {
    inner: R,
    crc: crc32fast::Hasher,
    bytes: u64,
}

impl<R: Read> Reading<R> {
    fn exact(&mut self, buf: &mut [u8], what: &str) -> Result<(), BackupError> {
        self.inner.read_exact(buf).map_err(|e| match e.kind() {
            io::ErrorKind::UnexpectedEof => BackupError::Damaged(format!("the file ends in the middle of {what} at byte {} (cut short?)", self.bytes)),
            _ => BackupError::Io(e),
        })?;
        self.crc.update(buf);
        self.bytes += buf.len() as u64;
        Ok(())
    }

    /// The next frame: (tag, payload), checksum checked.
    fn frame(&mut self) -> Result<(u8, Vec<u8>), BackupError> {
        let at = self.bytes;
        let mut head = [0u8; 5];
        self.exact(&mut head, "a frame header")?;
        let length = u32::from_le_bytes([head[1], head[2], head[3], head[4]]);
        if length > MAX_FRAME_BYTES {
            return Err(BackupError::Damaged(format!("the frame at byte {at} claims {length} bytes")));
        }
        let mut payload = vec![0u8; length as usize];
        self.exact(&mut payload, "a frame")?;
        let mut crc = [0u8; 4];
        self.exact(&mut crc, "a frame checksum")?;
        let mut expected = crc32fast::Hasher::new();
        expected.update(&head);
        expected.update(&payload);
        if expected.finalize() != u32::from_le_bytes(crc) {
            return Err(BackupError::Damaged(format!("the frame at byte {at} does not match its checksum")));
        }
        Ok((head[0], payload))
    }
}

fn parse_json<T: for<'de> Deserialize<'de>>(payload: &[u8], what: &str) -> Result<T, BackupError> {
    serde_json::from_slice(payload).map_err(|e| BackupError::Damaged(format!("the {what} does not parse: {e}")))
}

/// Reads a backup from start to end, checking everything (see the module docs); each entry is
/// handed to `entry` as (tree name, key, value).
fn read(input: impl Read, mut entry: impl FnMut(&str, Vec<u8>, Vec<u8>) -> Result<(), BackupError>) -> Result<BackupSummary, BackupError> {
    let mut input = Reading { inner: BufReader::new(input), crc: crc32fast::Hasher::new(), bytes: 0 };
    let mut magic = vec![0u8; MAGIC.len()];
    input.exact(&mut magic, "the file's first line")?;
    if magic != MAGIC {
        return Err(BackupError::Damaged("it does not start with BRAKELEDGER-BACKUP".into()));
    }
    let (tag, payload) = input.frame()?;
    if tag != b'H' {
        return Err(BackupError::Damaged("the header frame is missing".into()));
    }
    let header: Header = parse_json(&payload, "header")?;
    if header.format_version != FORMAT_VERSION {
        return Err(BackupError::Damaged(format!("format version {} (this build reads {FORMAT_VERSION})", header.format_version)));
    }
    if !(SCHEMA_3_RESTORED..=SCHEMA_VERSION).contains(&header.schema_version) {
        return Err(BackupError::Damaged(format!("it holds values of schema {} (this build restores {SCHEMA_3_RESTORED} to {SCHEMA_VERSION})", header.schema_version)));
    }
    let mut tallies = Tallies::default();
    let mut entries = 0u64;
    let expected: Tallies = loop {
        let (tag, payload) = input.frame()?;
        match tag {
            b'R' => {
                let bad = || BackupError::Damaged(format!("entry {entries} is malformed"));
                let tree = header.trees.get(*payload.first().ok_or_else(bad)? as usize).ok_or_else(bad)?.clone();
                let key_len = u32::from_le_bytes(payload.get(1..5).ok_or_else(bad)?.try_into().map_err(|_| bad())?) as usize;
                let key = payload.get(5..5 + key_len).ok_or_else(bad)?.to_vec();
                let value = payload[5 + key_len..].to_vec();
                if !raw_valued(&tree) {
                    checked_body(&value).map_err(|e| BackupError::Damaged(format!("entry {entries} ({tree}): {e}")))?;
                }
                tally_entry(&tree, &key, &value, &mut tallies).map_err(|e| BackupError::Damaged(format!("entry {entries} ({tree}): {e}")))?;
                entries += 1;
                entry(&tree, key, value)?;
            }
            b'T' => break parse_json(&payload, "tallies frame")?,
            other => return Err(BackupError::Damaged(format!("unexpected frame '{}' among the entries", other as char))),
        }
    };
    if !expected.same_as(&tallies) {
        let lines: Vec<String> = expected.differences(&tallies).iter().map(ToString::to_string).collect();
        return Err(BackupError::Damaged(format!("its entries do not match its own counts: {}", lines.join("; "))));
    }
    let crc_before_end = input.crc.clone().finalize();
    let (tag, payload) = input.frame()?;
    if tag != b'E' {
        return Err(BackupError::Damaged("the end frame is missing".into()));
    }
    let end: End = parse_json(&payload, "end frame")?;
    if end.entries != entries || end.crc32_before_end != crc_before_end {
        return Err(BackupError::Damaged(format!("the end frame records {} entries and checksum {:08x}; the file has {entries} and {crc_before_end:08x}", end.entries, end.crc32_before_end)));
    }
    let mut rest = [0u8; 1];
    if input.inner.read(&mut rest)? != 0 {
        return Err(BackupError::Damaged("bytes follow the end frame".into()));
    }
    Ok(BackupSummary { entries, tallies, taken_at_ms: header.taken_at_ms, file_bytes: input.bytes, file_crc32: input.crc.finalize(), schema_version: header.schema_version })
}

/// Reads a backup file from start to end, checking everything, and hands each entry to `entry`
/// as (tree name, key, stored value). Restoring into another engine verifies first, as
/// [`restore`] does.
pub fn for_each_entry(path: &Path, entry: impl FnMut(&str, Vec<u8>, Vec<u8>) -> Result<(), BackupError>) -> Result<BackupSummary, BackupError> {
    read(File::open(path)?, entry)
}

/// Verifies a backup file from start to end without restoring it.
pub fn verify(path: &Path) -> Result<BackupSummary, BackupError> {
    read(File::open(path)?, |_, _, _| Ok(()))
}

/// Restores a verified backup into `dir`, which must be empty or not exist: the records, a
/// fresh acknowledged-write ledger with the file's tallies, and every vehicle marked for
/// forecast recomputation. The file is verified completely before anything is written.
pub fn restore(path: &Path, dir: &Path, pages: PageSettings) -> Result<BackupSummary, BackupError> {
    if dir.exists() {
        let mut listing = std::fs::read_dir(dir)?;
        if listing.next().is_some() {
            return Err(BackupError::TargetNotEmpty(format!("{} is not empty: restore writes only into an empty or new directory", dir.display())));
        }
    }
    verify(path)?;
    std::fs::create_dir_all(dir)?;
    let engine = Engine::from_db(super::sled_engine::sled_config(dir, pages).open().map_err(StoreError::from)?)?;
    let mut batch: Vec<(Vec<u8>, Vec<u8>)> = Vec::new();
    let mut batch_tree = String::new();
    let summary = read(File::open(path)?, |tree, key, value| {
        if tree != batch_tree || batch.len() >= RESTORE_BATCH {
            if !batch.is_empty() {
                engine.load_entries(&batch_tree, std::mem::take(&mut batch))?;
            }
            batch_tree = tree.to_owned();
        }
        batch.push((key, value));
        Ok(())
    })?;
    if !batch.is_empty() {
        engine.load_entries(&batch_tree, batch)?;
    }
    if summary.schema_version < SCHEMA_VERSION {
        engine.move_trips_into_blocks()?;
    }
    engine.mark_all_stale()?;
    drop(engine);
    Ledger::create(dir, LedgerState { committed: summary.tallies.clone(), pending: None }).map_err(StoreError::from)?;
    Ok(summary)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn damage_anywhere_in_a_backup_is_caught() {
        let dir = tempfile::tempdir().unwrap();
        let engine = Engine::from_db(crate::store::sled_engine::temporary_db().unwrap()).unwrap();
        engine.upsert_fleet(&crate::store::FleetRecord::default_for("north")).unwrap();
        let mut bytes = Vec::new();
        let summary = write(&engine, None, 1, &mut bytes).unwrap();
        assert_eq!(summary.file_bytes, bytes.len() as u64);
        let path = dir.path().join("b");
        std::fs::write(&path, &bytes).unwrap();
        assert_eq!(verify(&path).unwrap(), summary);
        for at in [0, MAGIC.len() + 3, bytes.len() / 2, bytes.len() - 2] {
            let mut damaged = bytes.clone();
            damaged[at] ^= 0x40;
            std::fs::write(&path, &damaged).unwrap();
            assert!(matches!(verify(&path), Err(BackupError::Damaged(_))), "byte {at}");
        }
        std::fs::write(&path, &bytes[..bytes.len() - 7]).unwrap();
        assert!(matches!(verify(&path), Err(BackupError::Damaged(_))), "cut short");
    }

    #[test]
    fn a_schema_3_backup_restores_its_trips_into_day_blocks() {
        use crate::store::sled_store::SledStore;
        use crate::store::{Store, TripRecord};
        let trips: Vec<TripRecord> = (0..5i64)
            .map(|n| TripRecord {
                fleet_id: "north".into(),
                vehicle_id: "van-1".into(),
                trip_id: format!("t{n}"),
                start_ms: 1_700_000_000_000 + n * 40_000_000,
                end_ms: 1_700_000_100_000 + n * 40_000_000,
                distance_m: 1000.0,
                friction_energy_j: 2.0e6,
                axle_energy_j: vec![1.3e6, 0.7e6],
                axle_split_reported: true,
                brake_applications: 9,
                regen_energy_j: None,
                hot_energy_j: 0.0,
            })
            .collect();
        // A backup as schema 3 wrote it: one `trips` entry per trip and the raw `trip_ids` index.
        let mut bytes = Vec::new();
        let mut out = Counting { inner: &mut bytes, crc: crc32fast::Hasher::new(), bytes: 0 };
        out.write_all(MAGIC).unwrap();
        let trees = vec!["trips".to_owned(), "trip_ids".to_owned(), "totals".to_owned()];
        write_frame(&mut out, b'H', &json(&Header { format_version: FORMAT_VERSION, schema_version: 3, taken_at_ms: 1, trees })).unwrap();
        let mut tallies = Tallies::default();
        for trip in &trips {
            let key = super::super::keys::trip_key("north", "van-1", trip.end_ms, &trip.trip_id);
            tallies.add_key("north", super::super::ledger::RecordKind::Trip, &key);
            let value = super::super::trip_blocks::seal(postcard::to_stdvec(trip).unwrap());
            let mut payload = vec![0u8];
            payload.extend_from_slice(&(key.len() as u32).to_le_bytes());
            payload.extend_from_slice(&key);
            payload.extend_from_slice(&value);
            write_frame(&mut out, b'R', &payload).unwrap();
            let id_key = super::super::keys::child_key("north", "van-1", &trip.trip_id);
            let mut payload = vec![1u8];
            payload.extend_from_slice(&(id_key.len() as u32).to_le_bytes());
            payload.extend_from_slice(&id_key);
            payload.extend_from_slice(&super::super::keys::ordered_i64(trip.end_ms));
            write_frame(&mut out, b'R', &payload).unwrap();
        }
        let totals = crate::store::VehicleTotals { trips_recorded: 5, friction_energy_j: 1.0e7, distance_m: 5000.0, last_trip_end_ms: Some(trips[4].end_ms) };
        let key = super::super::keys::vehicle_key("north", "van-1");
        let mut payload = vec![2u8];
        payload.extend_from_slice(&(key.len() as u32).to_le_bytes());
        payload.extend_from_slice(&key);
        payload.extend_from_slice(&super::super::trip_blocks::seal(postcard::to_stdvec(&totals).unwrap()));
        write_frame(&mut out, b'R', &payload).unwrap();
        write_frame(&mut out, b'T', &json(&tallies)).unwrap();
        let end = End { entries: 11, crc32_before_end: out.crc.clone().finalize() };
        write_frame(&mut out, b'E', &json(&end)).unwrap();
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("old-backup");
        std::fs::write(&path, &bytes).unwrap();
        let target = dir.path().join("restored");
        let summary = restore(&path, &target, PageSettings::with_cache(8 << 20)).expect("a schema-3 backup restores");
        assert_eq!(summary.tallies.totals().trips.count, 5);
        let store = SledStore::open(&target).expect("the restored directory matches its ledger");
        assert_eq!(store.vehicle_trips("north", "van-1").unwrap(), trips);
        let again = TripRecord { end_ms: trips[0].end_ms + 1, ..trips[0].clone() };
        assert_eq!(store.ingest_trips(&[again]).unwrap(), vec![crate::store::IngestOutcome::Duplicate]);
    }
}
