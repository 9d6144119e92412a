//! A bounded in-memory cache of stored values by key, kept by [`super::sled_store::SledStore`]
//! in front of sled's tree of stored forecasts (`[storage] forecast_cache_bytes`).
//!
//! # Why
//! sled caches whole pages of about a dozen values each. Dashboards and planners read the
//! forecasts of some vehicles far more often than the rest, and those vehicles are spread over
//! the whole tree, so keeping them in sled's cache means keeping nearly every page of it (at
//! 100,000 vehicles, about 175 MB decoded). This keeps only the values read, as the bytes
//! stored (about 1.2 KB a vehicle), so a bounded amount of memory serves the vehicles that are
//! actually asked for (BENCHMARKS.md, "Fleet scale").
//!
//! # How
//! Two generations of entries: reads are served from either, and a hit in the older one moves
//! the entry to the newer one. When an entry would take the newer one over half the capacity,
//! the older one is dropped and the newer one becomes the older one. So the cache holds at most its capacity
//! (counted as key, value and [`ENTRY_OVERHEAD_BYTES`] an entry), and what is read again within
//! a generation stays.
//!
//! # Never older than the store
//! A writer calls [`ValueCache::invalidate`] with the keys it wrote once its write has ended
//! (committed or not), which removes them and advances the generation counter of each key's
//! stripe (one of [`STRIPES`], by a hash of the key). A reader takes [`ValueCache::generation`]
//! of its key before it reads the store and offers what it read with
//! [`ValueCache::insert_if_unchanged`], which keeps it only if no invalidation touched the key's
//! stripe in between. So a value read before a write can never be kept after it. The counters
//! are per stripe, not one for the whole cache, because forecast passes write other vehicles
//! all the time while dashboards read: with a single counter, any write anywhere during a read
//! kept the value read out of the cache (BENCHMARKS.md, "Fleet scale").

use std::collections::HashMap;
use std::sync::Mutex;

use sled::IVec;

/// Bytes an entry costs beyond its key and value (the map's slot, the key's allocation and the
/// value's shared allocation), an estimate for 64-bit targets.
pub const ENTRY_OVERHEAD_BYTES: usize = 96;

/// How many generation counters keys are spread over. Two keys in one stripe only cost a
/// value not kept when the other is written during the read; 4,096 counters are 32 KiB.
pub const STRIPES: usize = 4_096;

/// Bounded cache of values by key; see the module docs.
pub struct ValueCache {
    capacity_bytes: usize,
    state: Mutex<Generations>,
}

struct Generations {
    /// Generation counter of each stripe, advanced by every invalidation of a key in it.
    counters: Vec<u64>,
    newer: HashMap<Vec<u8>, IVec>,
    newer_bytes: usize,
    older: HashMap<Vec<u8>, IVec>,
}

impl Default for Generations {
    fn default() -> Self {
        Self { counters: vec![0; STRIPES], newer: HashMap::new(), newer_bytes: 0, older: HashMap::new() }
    }
}

/// The stripe of a key: FNV-1a over its bytes.
fn stripe(key: &[u8]) -> usize {
    let hash = key.iter().fold(0xcbf2_9ce4_8422_2325_u64, |hash, &byte| (hash ^ u64::from(byte)).wrapping_mul(0x0100_0000_01b3));
    (hash % STRIPES as u64) as usize
}

fn entry_bytes(key: &[u8], value: &IVec) -> usize {
    key.len() + value.len() + ENTRY_OVERHEAD_BYTES
}

impl Generations {
    /// Puts an entry of at most half the capacity in the newer generation, turning that into
    /// the older one first if the entry would take it over half the capacity.
    fn put_newer(&mut self, key: Vec<u8>, value: IVec, capacity_bytes: usize) {
        if let Some(replaced) = self.newer.remove(&key) {
            self.newer_bytes -= entry_bytes(&key, &replaced);
        }
        let bytes = entry_bytes(&key, &value);
        if (self.newer_bytes + bytes) * 2 > capacity_bytes {
            self.older = std::mem::take(&mut self.newer);
            self.newer_bytes = 0;
        }
        self.newer_bytes += bytes;
        self.newer.insert(key, value);
    }
}

impl ValueCache {
    /// An empty cache holding at most `capacity_bytes`; 0 keeps nothing.
    pub fn new(capacity_bytes: u64) -> Self {
        Self { capacity_bytes: usize::try_from(capacity_bytes).unwrap_or(usize::MAX), state: Mutex::new(Generations::default()) }
    }

    fn state(&self) -> std::sync::MutexGuard<'_, Generations> {
        // The state is consistent between statements, so a panic elsewhere leaves it usable.
        self.state.lock().unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// The value cached for `key`, if any.
    pub fn get(&self, key: &[u8]) -> Option<IVec> {
        let mut state = self.state();
        if let Some(value) = state.newer.get(key) {
            return Some(value.clone());
        }
        let (key, value) = state.older.remove_entry(key)?;
        state.put_newer(key, value.clone(), self.capacity_bytes);
        Some(value)
    }

    /// The generation of `key`'s stripe, to take before reading the store for it.
    pub fn generation(&self, key: &[u8]) -> u64 {
        self.state().counters[stripe(key)]
    }

    /// Keeps `value`, read from the store for `key` after taking `generation` for it, unless
    /// an invalidation touched the key's stripe since, or the value alone is over half the
    /// capacity. Whether it was kept.
    pub fn insert_if_unchanged(&self, generation: u64, key: Vec<u8>, value: IVec) -> bool {
        if entry_bytes(&key, &value) * 2 > self.capacity_bytes {
            return false;
        }
        let mut state = self.state();
        if state.counters[stripe(&key)] != generation {
            return false;
        }
        state.put_newer(key, value, self.capacity_bytes);
        true
    }

    /// Forgets `keys` and advances their stripes' generations; called by writers once their
    /// write has ended, committed or not.
    pub fn invalidate<'k>(&self, keys: impl IntoIterator<Item = &'k [u8]>) {
        let mut state = self.state();
        for key in keys {
            state.counters[stripe(key)] += 1;
            if let Some(value) = state.newer.remove(key) {
                state.newer_bytes -= entry_bytes(key, &value);
            }
            state.older.remove(key);
        }
    }

    #[cfg(test)]
    fn held_bytes(&self) -> usize {
        let state = self.state();
        state.newer_bytes + state.older.iter().map(|(k, v)| entry_bytes(k, v)).sum::<usize>()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn value(n: u8, len: usize) -> IVec {
        IVec::from(vec![n; len])
    }

    #[test]
    fn a_read_that_began_before_a_write_is_not_kept() {
        let cache = ValueCache::new(1 << 20);
        let before = cache.generation(b"a");
        cache.invalidate([b"a".as_slice()]);
        assert!(!cache.insert_if_unchanged(before, b"a".to_vec(), value(1, 10)));
        assert_eq!(cache.get(b"a"), None, "read before the write, offered after it");
        let after = cache.generation(b"a");
        assert!(cache.insert_if_unchanged(after, b"a".to_vec(), value(2, 10)));
        assert_eq!(cache.get(b"a"), Some(value(2, 10)));
        cache.invalidate([b"a".as_slice()]);
        assert_eq!(cache.get(b"a"), None, "a write forgets the key");
    }

    #[test]
    fn a_write_to_another_stripe_during_a_read_does_not_stop_it_being_kept() {
        let cache = ValueCache::new(1 << 20);
        let other = (0..u16::MAX).map(|n| n.to_be_bytes().to_vec()).find(|key| stripe(key) != stripe(b"a")).expect("a key in another stripe");
        let before = cache.generation(b"a");
        cache.invalidate([other.as_slice()]);
        assert!(cache.insert_if_unchanged(before, b"a".to_vec(), value(1, 10)), "the write was to another vehicle");
        assert_eq!(cache.get(b"a"), Some(value(1, 10)));
        // The same read spanning a write of a key that shares the stripe is not kept.
        let same = (0..u16::MAX).map(|n| n.to_be_bytes().to_vec()).find(|key| key.as_slice() != b"a" && stripe(key) == stripe(b"a")).expect("a key in the same stripe");
        cache.invalidate([b"a".as_slice()]);
        let before = cache.generation(b"a");
        cache.invalidate([same.as_slice()]);
        assert!(!cache.insert_if_unchanged(before, b"a".to_vec(), value(2, 10)));
        assert_eq!(cache.get(b"a"), None);
    }

    #[test]
    fn what_is_read_again_stays_and_what_is_not_goes() {
        // Room for about eight 1,000-byte entries: four a generation.
        let cache = ValueCache::new(8 * (1_000 + ENTRY_OVERHEAD_BYTES as u64 + 1));
        for key in 0..40u8 {
            cache.insert_if_unchanged(cache.generation(&[key]), vec![key], value(key, 1_000));
            // Key 0 is read after every insert, so it keeps moving to the newer generation.
            assert_eq!(cache.get(&[0]), Some(value(0, 1_000)), "after inserting {key}");
        }
        assert_eq!(cache.get(&[1]), None, "read once, long ago");
        assert_eq!(cache.get(&[39]), Some(value(39, 1_000)), "the last one inserted");
    }

    proptest! {
        /// Whatever the interleaving of writes, reads of the store that span them, and cache
        /// lookups: the cache never holds more than its capacity, and a value it returns is the
        /// store's current value for that key (a write is a new value, then an invalidation).
        #[test]
        fn bounded_and_never_older_than_the_store(ops in proptest::collection::vec((0u8..5, 0u8..12, 1usize..600), 1..300)) {
            let capacity = 4_000;
            let cache = ValueCache::new(capacity as u64);
            // The store: each key's current value.
            let mut store: HashMap<u8, IVec> = HashMap::new();
            // Reads of the store begun and not yet offered: key, generation taken, value read.
            let mut reading: Vec<(u8, u64, IVec)> = Vec::new();
            for (step, (op, key, len)) in ops.into_iter().enumerate() {
                match op {
                    0 => {
                        store.insert(key, value(step as u8, len));
                        cache.invalidate([[key].as_slice()]);
                    }
                    1 => {
                        let generation = cache.generation(&[key]);
                        if let Some(read) = store.get(&key) {
                            reading.push((key, generation, read.clone()));
                        }
                    }
                    2 => {
                        if !reading.is_empty() {
                            let (key, generation, read) = reading.remove(len % reading.len());
                            cache.insert_if_unchanged(generation, vec![key], read);
                        }
                    }
                    _ => {
                        if let Some(found) = cache.get(&[key]) {
                            prop_assert_eq!(Some(&found), store.get(&key), "key {}", key);
                        }
                    }
                }
                prop_assert!(cache.held_bytes() <= capacity, "{} bytes held", cache.held_bytes());
            }
        }
    }
}
