//! sled still reclaims the space of overwritten values with the patched segment cleaning
//! (the patched sled under `vendor/sled` drains a log segment only once at most
//! `SEGMENT_DRAIN_LIVE_PERCENT` of it is live; see its `PATCHED.md`): values overwritten again
//! and again bring the directory to a steady size, where a log that reclaimed nothing would
//! grow by every byte written. (Its size there, about five times the live values at this small
//! scale, is sled's log segments and buffers more than the values; at 100,000 vehicles the
//! directory measured 1.42-1.43 times the trips' protobuf size, BENCHMARKS.md "Fleet scale".)

use brakeledger::store::sled_engine::{sled_config, PageSettings};

/// Keys written, and how many times each is written in all.
const KEYS: u32 = 4_000;
const ROUNDS: u32 = 12;
/// Bytes a value: incompressible, so that what is live on disk is known.
const VALUE_BYTES: usize = 1_000;

/// A value that zstd cannot shrink: random bytes, seeded by key and round.
fn value(key: u32, round: u32) -> Vec<u8> {
    use rand::{RngCore, SeedableRng};
    let mut bytes = vec![0u8; VALUE_BYTES];
    rand::rngs::StdRng::seed_from_u64(u64::from(key) << 32 | u64::from(round)).fill_bytes(&mut bytes);
    bytes
}

/// Bytes of the files under `dir`.
fn dir_bytes(dir: &std::path::Path) -> u64 {
    std::fs::read_dir(dir)
        .expect("read dir")
        .map(|entry| {
            let entry = entry.expect("dir entry");
            let meta = entry.metadata().expect("metadata");
            if meta.is_dir() {
                dir_bytes(&entry.path())
            } else {
                meta.len()
            }
        })
        .sum()
}

/// Writes every key once more per round, flushing after each round, for each of `rounds`.
fn write_rounds(db: &sled::Db, tree: &sled::Tree, rounds: std::ops::Range<u32>) {
    for round in rounds {
        for key in 0..KEYS {
            tree.insert(key.to_be_bytes(), value(key, round)).expect("insert");
        }
        db.flush().expect("flush");
    }
}

#[test]
fn overwritten_values_are_reclaimed_within_sleds_own_bound() {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("db");
    let db = sled_config(&path, PageSettings::with_cache(8 << 20)).open().expect("open");
    let tree = db.open_tree("values").expect("tree");
    let live = u64::from(KEYS) * VALUE_BYTES as u64;
    write_rounds(&db, &tree, 0..ROUNDS);
    let after_first = dir_bytes(&path);
    write_rounds(&db, &tree, ROUNDS..2 * ROUNDS);
    drop(tree);
    drop(db);
    let after_second = dir_bytes(&path);
    let amplification = after_second as f64 / live as f64;
    println!(
        "{KEYS} values of {VALUE_BYTES} B: after {ROUNDS} rounds of writes {after_first} B on disk, after {} rounds {after_second} B, {amplification:.2}x the live values",
        2 * ROUNDS
    );
    // Space is reclaimed: the second half of the writes hardly grows the directory, where
    // without reclaiming it would double it, and the directory holds far less than was written.
    assert!((after_second as f64) < after_first as f64 * 1.25, "{after_first} B then {after_second} B: overwritten values not reclaimed");
    let written = live * u64::from(2 * ROUNDS);
    assert!(after_second < written / 3, "{after_second} B on disk for {written} B written");
}
