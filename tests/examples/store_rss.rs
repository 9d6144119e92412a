//! Measurement: the resident set of the trip store alone (no server, one thread), fed like the
//! memory soak feeds the server, and of raw sled with the same keys. Prints VmRSS every 20,000
//! trips. With `STORE_RSS_KEEP=1` the store is not dropped at the end, so that a heap profiler
//! (`heaptrack`) lists what it holds as "leaked". See BENCHMARKS.md, "Memory under sustained
//! writes".
//!
//! `cargo run --release -p brakeledger-tests --example store_rss -- MODE TRIPS [CACHE_MIB]`
//! MODE: `store` (SledStore::ingest_trips, chunks of 2,000), `sledkeys` (raw sled, one key per
//! vehicle-day rewritten as it grows: same key count and rewrites, same value bytes),
//! `sledonce` (raw sled, each vehicle-day written once at its final size).

use brakeledger_tests::load::shuffle;
use brakeledger_tests::{now_s, trip, trip_record};

fn rss_mib() -> f64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status.lines().find(|l| l.starts_with("VmRSS:")).and_then(|l| l.split_whitespace().nth(1)).and_then(|v| v.parse::<f64>().ok()).unwrap_or(0.0) / 1024.0
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let mode = args.get(1).cloned().unwrap_or_else(|| "store".into());
    let total: usize = args.get(2).and_then(|v| v.parse().ok()).unwrap_or(300_000);
    let cache_mib: u64 = args.get(3).and_then(|v| v.parse().ok()).unwrap_or(64);
    let vehicles = 200;
    let per_vehicle = total / vehicles;
    let mut order: Vec<(usize, usize)> = (0..vehicles).flat_map(|v| (0..per_vehicle).map(move |n| (v, n))).collect();
    shuffle(&mut order, 0x50a6);
    let end = now_s() - 3600;
    let dir = tempfile::tempdir().expect("dir");
    eprintln!("mode {mode}, {total} trips, cache {cache_mib} MiB; start rss {:.1}", rss_mib());
    match mode.as_str() {
        "store" => {
            let options = brakeledger::store::sled_store::StoreOptions { pages: brakeledger::store::sled_engine::PageSettings::with_cache(cache_mib << 20), ..Default::default() };
            let store = brakeledger::store::sled_store::SledStore::open_with(dir.path(), &options).expect("store");
            let mut done = 0;
            for chunk in order.chunks(2000) {
                let records: Vec<_> = chunk.iter().map(|(v, n)| trip_record(&trip("north", &format!("soak-{v}"), *n, end))).collect();
                brakeledger::store::Store::ingest_trips(&store, &records).expect("ingest");
                done += chunk.len();
                if done % 20_000 == 0 {
                    eprintln!("{done:8} {:7.1}", rss_mib());
                }
            }
            eprintln!("on disk {} bytes", brakeledger::store::Store::size_on_disk(&store).unwrap_or(0));
            if std::env::var_os("STORE_RSS_KEEP").is_some() {
                // What the store holds at the end shows up as "leaked" in a heap profile.
                std::mem::forget(store);
            }
        }
        "sledkeys" | "sledonce" => {
            let db = sled::Config::new().path(dir.path()).cache_capacity(cache_mib << 20).open().expect("sled");
            let blocks = db.open_tree("blocks").expect("tree");
            let daily = db.open_tree("daily").expect("tree");
            let mut sizes: std::collections::HashMap<Vec<u8>, usize> = std::collections::HashMap::new();
            let key_of = |v: usize, n: usize| {
                let mut k = format!("north\0soak-{v}\0").into_bytes();
                k.extend_from_slice(&(((end - 3600 * n as i64) / 86_400) as u64).to_be_bytes());
                k
            };
            if mode == "sledonce" {
                for &(v, n) in &order {
                    *sizes.entry(key_of(v, n)).or_default() += 31;
                }
                let keys: Vec<_> = sizes.iter().map(|(k, s)| (k.clone(), *s)).collect();
                for (i, (k, s)) in keys.iter().enumerate() {
                    blocks.insert(k.as_slice(), vec![7u8; *s + 40]).expect("insert");
                    daily.insert(k.as_slice(), vec![9u8; 90]).expect("insert");
                    if i % 500 == 0 {
                        db.flush().expect("flush");
                    }
                }
                eprintln!("{} keys {:7.1}", keys.len(), rss_mib());
            } else {
                let mut done = 0;
                for chunk in order.chunks(2000) {
                    let mut batch = sled::Batch::default();
                    let mut dbatch = sled::Batch::default();
                    for &(v, n) in chunk {
                        let k = key_of(v, n);
                        let s = sizes.entry(k.clone()).or_default();
                        *s += 31;
                        batch.insert(k.as_slice(), vec![7u8; *s + 40]);
                        dbatch.insert(k.as_slice(), vec![9u8; 90]);
                    }
                    blocks.apply_batch(batch).expect("batch");
                    daily.apply_batch(dbatch).expect("batch");
                    db.flush().expect("flush");
                    done += chunk.len();
                    if done % 20_000 == 0 {
                        eprintln!("{done:8} {:7.1}", rss_mib());
                    }
                }
            }
            eprintln!("on disk {} bytes, {} keys", db.size_on_disk().unwrap_or(0), sizes.len());
        }
        other => panic!("unknown mode {other}"),
    }
    eprintln!("end rss {:.1}", rss_mib());
}
