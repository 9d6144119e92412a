//! What storing forecasts costs in sled, apart from the service: bytes written (this process's
//! `/proc/self/io` write_bytes) and time for 10,000 vehicles, each with a 1,015-byte value and 16
//! due-index entries (4 parts × 4 band levels) that all move between rounds, stored three times.
//! Invented keys and values; the figures are in BENCHMARKS.md ("Fleet scale").
//!
//! `cargo run --release -p brakeledger --example forecast_writes -- WAY [COMPRESSED]`, where WAY is
//! - `value`: the value alone, plain inserts;
//! - `value-index`: the value and the due-index entries, plain inserts and removals;
//! - `value-transaction`: the value alone, one transaction per vehicle;
//! - `one-transaction-each`: value and entries, one transaction per vehicle (before
//!   `Store::replace_forecasts`);
//! - `one-transaction-per-pass`: value and entries, one transaction per 256 vehicles (a pass);
//!
//! and COMPRESSED is 1 (default: zstd level as the service) or 0.

use brakeledger::store::sled_engine::{sled_config, PageSettings};
use sled::transaction::ConflictableTransactionError;
use sled::Transactional;

const VEHICLES: usize = 10_000;
const PASS: usize = 256;

fn written_bytes() -> u64 {
    let io = std::fs::read_to_string("/proc/self/io").unwrap_or_default();
    io.lines().find_map(|l| l.strip_prefix("write_bytes:")).and_then(|v| v.trim().parse().ok()).unwrap_or(0)
}

fn value(vehicle: usize, round: usize) -> Vec<u8> {
    (0..1015).map(|i| ((i * 31 + vehicle * 7 + round * 13) % 251) as u8).collect()
}

/// The vehicle's 16 due-index keys in `round`: level, due hour, vehicle, part.
fn due_keys(vehicle: usize, round: usize) -> Vec<Vec<u8>> {
    (0..16)
        .map(|p| {
            let mut key = b"north\0".to_vec();
            key.push(p as u8 % 4);
            key.extend_from_slice(&(((vehicle * 7919 + p * 104_729) % 700 * 24 + round * 36) as u64).to_be_bytes());
            key.extend_from_slice(format!("veh-{vehicle:06}\0").as_bytes());
            key.push(p as u8);
            key
        })
        .collect()
}

fn main() {
    let way = std::env::args().nth(1).unwrap_or_else(|| "one-transaction-per-pass".into());
    let compressed = std::env::args().nth(2).is_none_or(|a| a != "0");
    let dir = tempfile::tempdir().expect("temporary directory");
    let db = sled_config(dir.path(), PageSettings { cache_capacity_bytes: 64 << 20, compress_new_directories: compressed }).open().expect("open sled");
    let (values, index) = (db.open_tree("forecasts").expect("tree"), db.open_tree("due_index").expect("tree"));
    for round in 0..3 {
        let (before, started) = (written_bytes(), std::time::Instant::now());
        let vehicles: Vec<usize> = (0..VEHICLES).collect();
        let per_transaction = if way == "one-transaction-per-pass" { PASS } else { 1 };
        for group in vehicles.chunks(per_transaction) {
            let each = |v: usize| (format!("north\0veh-{v:06}").into_bytes(), value(v, round), if round > 0 { due_keys(v, round - 1) } else { Vec::new() }, due_keys(v, round));
            match way.as_str() {
                "value" | "value-index" => {
                    for &v in group {
                        let (key, bytes, old, new) = each(v);
                        values.insert(key, bytes).expect("insert");
                        if way == "value-index" {
                            old.iter().for_each(|k| drop(index.remove(k).expect("remove")));
                            new.iter().for_each(|k| drop(index.insert(k.as_slice(), &[]).expect("insert")));
                        }
                    }
                }
                "value-transaction" | "one-transaction-each" | "one-transaction-per-pass" => {
                    let with_index = way != "value-transaction";
                    (&values, &index)
                        .transaction(|(values, index)| {
                            for &v in group {
                                let (key, bytes, old, new) = each(v);
                                values.get(&key)?;
                                values.insert(key, bytes)?;
                                if with_index {
                                    for k in &old {
                                        index.remove(k.as_slice())?;
                                    }
                                    for k in &new {
                                        index.insert(k.as_slice(), &[])?;
                                    }
                                }
                            }
                            Ok::<(), ConflictableTransactionError<()>>(())
                        })
                        .expect("transaction");
                }
                other => panic!("unknown way '{other}'"),
            }
        }
        db.flush().expect("flush");
        let per_vehicle = (written_bytes() - before) as f64 / VEHICLES as f64;
        println!("{way}, compressed {compressed}, round {round}: {per_vehicle:.0} B written per vehicle, {:.2} s for {VEHICLES}", started.elapsed().as_secs_f64());
    }
}
