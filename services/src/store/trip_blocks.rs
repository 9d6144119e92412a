//! The compact trip layout (schema 4): every trip of one vehicle that ends on one UTC day is
//! kept in one stored value, a *day block*, and each vehicle has a small *trip-id index* for
//! exact de-duplication. This module owns the byte formats; [`super::sled_engine`] owns the
//! trees and transactions.
//!
//! # Why
//! One sled record per trip (schema 3) cost about 400 bytes on disk per trip, six times the
//! trip's protobuf encoding: sled's per-record overhead, the fleet and vehicle ids repeated in
//! every key and value, and a second record per trip for the id index. A block stores the fleet
//! and vehicle once (in its key) and a typical trip in about 30 bytes.
//!
//! # Day block (value of `trip_blocks`, key `fleet 0 vehicle 0 day`)
//! Integers are unsigned LEB128 varints (signed ones zigzag-encoded first); floats are the 8
//! bytes of the IEEE double, little-endian, so every value comes back bit for bit.
//! ```text
//! version (1 byte, = 1)
//! share_count, then per share vector: axle_count, axle_count × f64
//! trip_count, then per trip, in (end_ms, trip_id) order:
//!   flags (1 byte: 1 split reported, 2 regen present, 4 hot energy non-zero, 8 axles from a share vector)
//!   id: bytes shared with the previous trip's id, suffix length, suffix
//!   end: ms after the previous trip's end (the first: after the day's start)
//!   duration: zigzag(end_ms - start_ms)
//!   brake_applications, distance_m (f64), friction_energy_j (f64)
//!   axles: share vector number, or axle_count then axle_count × f64
//!   regen_energy_j (f64) when flagged, hot_energy_j (f64) when flagged
//! CRC-32 of everything before it (u32 LE), as every stored value
//! ```
//! A trip whose per-axle energy came from the vehicle's configured shares
//! (`axle_split_reported` false) stores a number instead of its axle energies when
//! `share × friction_energy_j` gives back each of them exactly; the block keeps the few
//! distinct share vectors once.
//!
//! # Trip-id index (value of `trip_id_index`, key `fleet 0 vehicle 0 segment`)
//! Segments (u32 big-endian numbers from 0) of at most [`SEGMENT_ENTRIES`] entries, appended
//! to in ingest order; only the last one is rewritten by a write. An entry is the 32-bit hash
//! of a trip id ([`id_hash`]) and the UTC day of the trip's block (zigzag delta from the
//! previous entry's day). A hash only narrows the search: a trip id counts as stored when the
//! block of a matching entry's day holds that exact id, so de-duplication is exact whatever the
//! trip's time (a resent trip with another end time is still a duplicate).
//! ```text
//! entry_count, then per entry: hash (u32 LE), zigzag(day - previous day)
//! CRC-32 (u32 LE)
//! ```

use super::keys::{read_ordered_i64, SEP};
use super::{utc_day, StoreError, StoreResult, TripRecord, MS_PER_DAY};

/// Entries per trip-id index segment (a full segment is about 5 KB).
pub const SEGMENT_ENTRIES: usize = 1024;

const BLOCK_VERSION: u8 = 1;
const SPLIT_REPORTED: u8 = 1;
const HAS_REGEN: u8 = 2;
const HAS_HOT: u8 = 4;
const FROM_SHARES: u8 = 8;

/// 32-bit hash of a trip id for the index: the high half of its 64-bit FNV-1a.
pub fn id_hash(trip_id: &str) -> u32 {
    (super::ledger::fnv1a64(trip_id.as_bytes()) >> 32) as u32
}

/// Appends the CRC-32 (IEEE, little-endian) of `bytes` to them: the form of every stored value.
pub fn seal(mut bytes: Vec<u8>) -> Vec<u8> {
    let crc = crc32fast::hash(&bytes);
    bytes.extend_from_slice(&crc.to_le_bytes());
    bytes
}

fn put_varint(out: &mut Vec<u8>, mut value: u64) {
    while value >= 0x80 {
        out.push((value as u8) | 0x80);
        value >>= 7;
    }
    out.push(value as u8);
}

fn zigzag(value: i64) -> u64 {
    ((value << 1) ^ (value >> 63)) as u64
}

fn unzigzag(value: u64) -> i64 {
    ((value >> 1) as i64) ^ -((value & 1) as i64)
}

fn put_f64(out: &mut Vec<u8>, value: f64) {
    out.extend_from_slice(&value.to_le_bytes());
}

/// A cursor over an encoded value; every read fails cleanly on truncated input.
struct Reader<'a> {
    bytes: &'a [u8],
    what: &'static str,
}

impl<'a> Reader<'a> {
    fn bad(&self) -> StoreError {
        StoreError::Corrupt(format!("{} is malformed", self.what))
    }

    fn byte(&mut self) -> StoreResult<u8> {
        let (&first, rest) = self.bytes.split_first().ok_or_else(|| self.bad())?;
        self.bytes = rest;
        Ok(first)
    }

    fn take(&mut self, n: usize) -> StoreResult<&'a [u8]> {
        if self.bytes.len() < n {
            return Err(self.bad());
        }
        let (head, rest) = self.bytes.split_at(n);
        self.bytes = rest;
        Ok(head)
    }

    fn varint(&mut self) -> StoreResult<u64> {
        let mut value = 0u64;
        for shift in (0..64).step_by(7) {
            let byte = self.byte()?;
            value |= u64::from(byte & 0x7f) << shift;
            if byte & 0x80 == 0 {
                return Ok(value);
            }
        }
        Err(self.bad())
    }

    fn count(&mut self) -> StoreResult<usize> {
        let n = self.varint()?;
        // No count can exceed the bytes left (every counted item takes at least one byte).
        usize::try_from(n).ok().filter(|n| *n <= self.bytes.len()).ok_or_else(|| self.bad())
    }

    /// A position or length that refers back to data already read (not bounded by what is left).
    fn index(&mut self) -> StoreResult<usize> {
        usize::try_from(self.varint()?).map_err(|_| self.bad())
    }

    fn f64(&mut self) -> StoreResult<f64> {
        let bytes: [u8; 8] = self.take(8)?.try_into().map_err(|_| self.bad())?;
        Ok(f64::from_le_bytes(bytes))
    }

    fn u32(&mut self) -> StoreResult<u32> {
        u32::try_from(self.varint()?).map_err(|_| self.bad())
    }
}

/// Whether `share × friction` gives back every axle energy exactly.
fn shares_reproduce(shares: &[f64], friction: f64, axles: &[f64]) -> bool {
    shares.len() == axles.len() && shares.iter().zip(axles).all(|(s, a)| (s * friction).to_bits() == a.to_bits())
}

/// Encodes the trips of one vehicle and UTC day (`day`) as a sealed block (their fleet and
/// vehicle ids are the block key's and are not stored). Sorts them by (end, id); every trip
/// must end on `day`.
pub fn encode_block(day: i64, trips: &mut [TripRecord]) -> StoreResult<Vec<u8>> {
    trips.sort_by(|a, b| (a.end_ms, &a.trip_id).cmp(&(b.end_ms, &b.trip_id)));
    let mut shares: Vec<Vec<f64>> = Vec::new();
    let mut share_of: Vec<Option<usize>> = Vec::with_capacity(trips.len());
    for trip in trips.iter() {
        let mut found = None;
        if !trip.axle_split_reported && trip.friction_energy_j != 0.0 && trip.friction_energy_j.is_finite() {
            found = shares.iter().position(|s| shares_reproduce(s, trip.friction_energy_j, &trip.axle_energy_j));
            if found.is_none() {
                let candidate: Vec<f64> = trip.axle_energy_j.iter().map(|a| a / trip.friction_energy_j).collect();
                if shares_reproduce(&candidate, trip.friction_energy_j, &trip.axle_energy_j) {
                    shares.push(candidate);
                    found = Some(shares.len() - 1);
                }
            }
        }
        share_of.push(found);
    }
    let mut out = Vec::with_capacity(16 + trips.len() * 48);
    out.push(BLOCK_VERSION);
    put_varint(&mut out, shares.len() as u64);
    for vector in &shares {
        put_varint(&mut out, vector.len() as u64);
        vector.iter().for_each(|s| put_f64(&mut out, *s));
    }
    put_varint(&mut out, trips.len() as u64);
    let mut previous_end = day * MS_PER_DAY;
    let mut previous_id: &[u8] = &[];
    for (trip, share) in trips.iter().zip(&share_of) {
        if utc_day(trip.end_ms) != day {
            return Err(StoreError::Corrupt(format!("trip {} does not end on day {day}", trip.trip_id)));
        }
        let mut flags = 0u8;
        if trip.axle_split_reported {
            flags |= SPLIT_REPORTED;
        }
        if trip.regen_energy_j.is_some() {
            flags |= HAS_REGEN;
        }
        if trip.hot_energy_j.to_bits() != 0 {
            flags |= HAS_HOT;
        }
        if share.is_some() {
            flags |= FROM_SHARES;
        }
        out.push(flags);
        let id = trip.trip_id.as_bytes();
        let shared = id.iter().zip(previous_id).take_while(|(a, b)| a == b).count();
        put_varint(&mut out, shared as u64);
        put_varint(&mut out, (id.len() - shared) as u64);
        out.extend_from_slice(&id[shared..]);
        previous_id = id;
        // Sorted by end, so the delta is never negative.
        put_varint(&mut out, (trip.end_ms - previous_end) as u64);
        previous_end = trip.end_ms;
        put_varint(&mut out, zigzag(trip.end_ms.wrapping_sub(trip.start_ms)));
        put_varint(&mut out, u64::from(trip.brake_applications));
        put_f64(&mut out, trip.distance_m);
        put_f64(&mut out, trip.friction_energy_j);
        match share {
            Some(index) => put_varint(&mut out, *index as u64),
            None => {
                put_varint(&mut out, trip.axle_energy_j.len() as u64);
                trip.axle_energy_j.iter().for_each(|a| put_f64(&mut out, *a));
            }
        }
        if let Some(regen) = trip.regen_energy_j {
            put_f64(&mut out, regen);
        }
        if flags & HAS_HOT != 0 {
            put_f64(&mut out, trip.hot_energy_j);
        }
    }
    Ok(seal(out))
}

/// Decodes a block of day `day` of a vehicle (its checksum already checked: pass the body).
pub fn decode_block(fleet_id: &str, vehicle_id: &str, day: i64, body: &[u8]) -> StoreResult<Vec<TripRecord>> {
    let mut input = Reader { bytes: body, what: "a day block of trips" };
    if input.byte()? != BLOCK_VERSION {
        return Err(input.bad());
    }
    let share_count = input.count()?;
    let mut shares = Vec::with_capacity(share_count);
    for _ in 0..share_count {
        let axles = input.count()?;
        shares.push((0..axles).map(|_| input.f64()).collect::<StoreResult<Vec<f64>>>()?);
    }
    let trip_count = input.count()?;
    let mut trips = Vec::with_capacity(trip_count);
    let mut previous_end = day * MS_PER_DAY;
    let mut previous_id: Vec<u8> = Vec::new();
    for _ in 0..trip_count {
        let flags = input.byte()?;
        let shared = input.index()?;
        let suffix_len = input.count()?;
        let mut id = previous_id.get(..shared).ok_or_else(|| input.bad())?.to_vec();
        id.extend_from_slice(input.take(suffix_len)?);
        let trip_id = String::from_utf8(id.clone()).map_err(|_| input.bad())?;
        previous_id = id;
        let end_ms = previous_end.checked_add(i64::try_from(input.varint()?).map_err(|_| input.bad())?).ok_or_else(|| input.bad())?;
        previous_end = end_ms;
        let start_ms = end_ms.wrapping_sub(unzigzag(input.varint()?));
        let brake_applications = input.u32()?;
        let distance_m = input.f64()?;
        let friction_energy_j = input.f64()?;
        let axle_energy_j = if flags & FROM_SHARES != 0 {
            let vector = shares.get(input.index()?).ok_or_else(|| input.bad())?;
            vector.iter().map(|s| s * friction_energy_j).collect()
        } else {
            let axles = input.count()?;
            (0..axles).map(|_| input.f64()).collect::<StoreResult<Vec<f64>>>()?
        };
        let regen_energy_j = if flags & HAS_REGEN != 0 { Some(input.f64()?) } else { None };
        let hot_energy_j = if flags & HAS_HOT != 0 { input.f64()? } else { 0.0 };
        trips.push(TripRecord {
            fleet_id: fleet_id.to_owned(),
            vehicle_id: vehicle_id.to_owned(),
            trip_id,
            start_ms,
            end_ms,
            distance_m,
            friction_energy_j,
            axle_energy_j,
            axle_split_reported: flags & SPLIT_REPORTED != 0,
            brake_applications,
            regen_energy_j,
            hot_energy_j,
        });
    }
    if !input.bytes.is_empty() || utc_day(previous_end) != day && trip_count > 0 {
        return Err(input.bad());
    }
    Ok(trips)
}

/// Stored entries as (key, sealed value) pairs, in key order.
pub type KeyedValues = Vec<(Vec<u8>, Vec<u8>)>;

/// The stored entries of one vehicle's trips: its day blocks (`trip_blocks`) and its trip-id
/// index segments (`trip_id_index`, entries in the trips' order). `prefix` is the vehicle's
/// `fleet 0 vehicle 0`. Used where whole histories are laid out at once: the schema-3
/// migration, and backups taken from another engine.
pub fn vehicle_entries(prefix: &[u8], trips: Vec<TripRecord>) -> StoreResult<(KeyedValues, KeyedValues)> {
    let mut days: std::collections::BTreeMap<i64, Vec<TripRecord>> = std::collections::BTreeMap::new();
    let mut entries = Vec::with_capacity(trips.len());
    for trip in trips {
        let day = utc_day(trip.end_ms);
        entries.push(IdEntry { hash: id_hash(&trip.trip_id), day });
        days.entry(day).or_default().push(trip);
    }
    let mut blocks = Vec::with_capacity(days.len());
    for (day, mut block) in days {
        let mut key = prefix.to_vec();
        key.extend_from_slice(&super::keys::ordered_i64(day));
        blocks.push((key, encode_block(day, &mut block)?));
    }
    let segments = entries.chunks(SEGMENT_ENTRIES).enumerate().map(|(n, chunk)| (segment_key(prefix, n as u32), encode_segment(chunk))).collect();
    Ok((blocks, segments))
}

/// One trip-id index entry: hash of the id and the UTC day of its block.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct IdEntry {
    /// [`id_hash`] of the trip id.
    pub hash: u32,
    /// UTC day of the block holding the trip.
    pub day: i64,
}

/// Encodes a sealed trip-id index segment.
pub fn encode_segment(entries: &[IdEntry]) -> Vec<u8> {
    let mut out = Vec::with_capacity(4 + entries.len() * 6);
    put_varint(&mut out, entries.len() as u64);
    let mut previous_day = 0i64;
    for entry in entries {
        out.extend_from_slice(&entry.hash.to_le_bytes());
        put_varint(&mut out, zigzag(entry.day.wrapping_sub(previous_day)));
        previous_day = entry.day;
    }
    seal(out)
}

/// Decodes a trip-id index segment (its checksum already checked: pass the body).
pub fn decode_segment(body: &[u8]) -> StoreResult<Vec<IdEntry>> {
    let mut input = Reader { bytes: body, what: "a trip-id index segment" };
    let count = input.count()?;
    let mut entries = Vec::with_capacity(count);
    let mut previous_day = 0i64;
    for _ in 0..count {
        let hash = u32::from_le_bytes(input.take(4)?.try_into().map_err(|_| input.bad())?);
        let day = previous_day.wrapping_add(unzigzag(input.varint()?));
        previous_day = day;
        entries.push(IdEntry { hash, day });
    }
    if !input.bytes.is_empty() {
        return Err(input.bad());
    }
    Ok(entries)
}

/// `fleet 0 vehicle 0 segment` (segment as u32 big-endian).
pub fn segment_key(vehicle_prefix: &[u8], segment: u32) -> Vec<u8> {
    let mut key = vehicle_prefix.to_vec();
    key.extend_from_slice(&segment.to_be_bytes());
    key
}

/// The segment number of a [`segment_key`].
pub fn segment_of_key(key: &[u8]) -> StoreResult<u32> {
    let start = key.len().checked_sub(4).ok_or_else(|| StoreError::Corrupt("trip-id index key".into()))?;
    let bytes: [u8; 4] = key[start..].try_into().map_err(|_| StoreError::Corrupt("trip-id index key".into()))?;
    Ok(u32::from_be_bytes(bytes))
}

/// (fleet, vehicle, rest) of a key `fleet 0 vehicle 0 rest`.
pub fn split_vehicle_key(key: &[u8]) -> StoreResult<(&str, &str, &[u8])> {
    let bad = || StoreError::Corrupt("a per-vehicle key lacks its fleet or vehicle part".into());
    let fleet_end = key.iter().position(|b| *b == SEP).ok_or_else(bad)?;
    let after_fleet = &key[fleet_end + 1..];
    let vehicle_end = after_fleet.iter().position(|b| *b == SEP).ok_or_else(bad)?;
    let fleet = std::str::from_utf8(&key[..fleet_end]).map_err(|_| bad())?;
    let vehicle = std::str::from_utf8(&after_fleet[..vehicle_end]).map_err(|_| bad())?;
    Ok((fleet, vehicle, &after_fleet[vehicle_end + 1..]))
}

/// (fleet, vehicle, end_ms, trip_id) of a logical trip key (`keys::trip_key`): the key the
/// ledger counts a trip under, in every layout.
pub fn parse_trip_key(key: &[u8]) -> StoreResult<(&str, &str, i64, &str)> {
    let (fleet, vehicle, rest) = split_vehicle_key(key)?;
    if rest.len() < 8 {
        return Err(StoreError::Corrupt("trip key".into()));
    }
    let end_ms = read_ordered_i64(&rest[..8])?;
    let trip_id = std::str::from_utf8(&rest[8..]).map_err(|_| StoreError::Corrupt("trip key".into()))?;
    Ok((fleet, vehicle, end_ms, trip_id))
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn body(sealed: &[u8]) -> &[u8] {
        super::super::sled_engine::checked_body(sealed).unwrap()
    }

    fn any_trip(day: i64) -> impl Strategy<Value = TripRecord> {
        (
            "[a-z0-9-]{1,16}",
            0i64..MS_PER_DAY,
            -5_000_000i64..86_400_000,
            any::<f64>(),
            prop_oneof![Just(0.0), Just(-0.0), any::<f64>(), 1.0e3f64..1.0e9],
            prop::collection::vec(any::<f64>(), 0..5),
            0usize..3,
            any::<u32>(),
            proptest::option::of(any::<f64>()),
            prop_oneof![Just(0.0), Just(-0.0), any::<f64>()],
        )
            .prop_map(move |(trip_id, offset, duration, distance_m, friction, raw_axles, kind, brake_applications, regen_energy_j, hot_energy_j)| {
                let end_ms = day * MS_PER_DAY + offset;
                // kind 0: reported split; 1: the vehicle's shares applied; 2: shares not reproducible.
                let shares = [0.62, 0.38];
                let (axle_energy_j, axle_split_reported) = match kind {
                    0 => (raw_axles, true),
                    1 => (shares.iter().map(|s| s * friction).collect(), false),
                    _ => (raw_axles, false),
                };
                TripRecord {
                    fleet_id: "north".into(),
                    vehicle_id: "van-1".into(),
                    trip_id,
                    start_ms: end_ms - duration,
                    end_ms,
                    distance_m,
                    friction_energy_j: friction,
                    axle_energy_j,
                    axle_split_reported,
                    brake_applications,
                    regen_energy_j,
                    hot_energy_j,
                }
            })
    }

    fn same_bits(a: &TripRecord, b: &TripRecord) -> bool {
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        (&a.fleet_id, &a.vehicle_id, &a.trip_id, a.start_ms, a.end_ms, a.axle_split_reported, a.brake_applications) == (&b.fleet_id, &b.vehicle_id, &b.trip_id, b.start_ms, b.end_ms, b.axle_split_reported, b.brake_applications)
            && bits(&[a.distance_m, a.friction_energy_j, a.hot_energy_j]) == bits(&[b.distance_m, b.friction_energy_j, b.hot_energy_j])
            && bits(&a.axle_energy_j) == bits(&b.axle_energy_j)
            && a.regen_energy_j.map(f64::to_bits) == b.regen_energy_j.map(f64::to_bits)
    }

    proptest! {
        /// Every field of every trip comes back bit for bit (NaN, -0.0 and infinities included),
        /// whatever the ids, times and axle splits.
        #[test]
        fn blocks_round_trip_exactly(day in -1000i64..40_000, trips in prop::collection::vec(any_trip(0), 0..40)) {
            let mut trips: Vec<TripRecord> = trips.into_iter().map(|mut t| {
                let shift = day * MS_PER_DAY;
                t.end_ms += shift;
                t.start_ms += shift;
                t
            }).collect();
            let sealed = encode_block(day, &mut trips).unwrap();
            let decoded = decode_block("north", "van-1", day, body(&sealed)).unwrap();
            prop_assert_eq!(decoded.len(), trips.len());
            for (a, b) in trips.iter().zip(&decoded) {
                prop_assert!(same_bits(a, b), "{:?} != {:?}", a, b);
            }
        }

        /// Index segments round-trip, days in any order.
        #[test]
        fn segments_round_trip(entries in prop::collection::vec((any::<u32>(), -100_000i64..100_000), 0..300)) {
            let entries: Vec<IdEntry> = entries.into_iter().map(|(hash, day)| IdEntry { hash, day }).collect();
            prop_assert_eq!(decode_segment(body(&encode_segment(&entries))).unwrap(), entries);
        }

        /// Truncated or altered bodies are refused or decode to something, never panic.
        #[test]
        fn damaged_blocks_never_panic(trips in prop::collection::vec(any_trip(5), 1..10), cut in 0usize..400, flip in 0usize..400) {
            let mut trips = trips;
            let sealed = encode_block(5, &mut trips).unwrap();
            let body = body(&sealed);
            let _ = decode_block("north", "van-1", 5, &body[..cut.min(body.len())]);
            let mut altered = body.to_vec();
            let at = flip % altered.len();
            altered[at] ^= 0x5a;
            let _ = decode_block("north", "van-1", 5, &altered);
        }
    }

    #[test]
    fn a_trip_from_another_day_is_refused() {
        let mut trips = vec![TripRecord {
            fleet_id: "north".into(),
            vehicle_id: "van-1".into(),
            trip_id: "t".into(),
            start_ms: 0,
            end_ms: MS_PER_DAY + 5,
            distance_m: 1.0,
            friction_energy_j: 1.0,
            axle_energy_j: vec![1.0],
            axle_split_reported: true,
            brake_applications: 1,
            regen_energy_j: None,
            hot_energy_j: 0.0,
        }];
        assert!(encode_block(0, &mut trips).is_err());
    }

    #[test]
    fn a_typical_trip_takes_far_less_than_its_protobuf() {
        // Hourly trips of one vehicle with the configured two-axle shares applied.
        let mut trips: Vec<TripRecord> = (0..24)
            .map(|h| TripRecord {
                fleet_id: "north".into(),
                vehicle_id: "van-1".into(),
                trip_id: format!("trip-{:06}", 1000 + h),
                start_ms: h * 3_600_000 + 100_000,
                end_ms: h * 3_600_000 + 3_100_000,
                distance_m: 40_000.0 + h as f64,
                friction_energy_j: 30.0e6 + h as f64,
                axle_energy_j: vec![0.65 * (30.0e6 + h as f64), 0.35 * (30.0e6 + h as f64)],
                axle_split_reported: false,
                brake_applications: 120,
                regen_energy_j: None,
                hot_energy_j: 0.0,
            })
            .collect();
        let sealed = encode_block(0, &mut trips).unwrap();
        // Per trip: flags 1, id 4, end 4, duration 3, applications 1, two f64 16, share 1: 30
        // bytes; the block adds its share vector and checksum. The protobuf of such a trip
        // (tests/src/lib.rs `trip`, fleet and vehicle ids included) is about 67 bytes.
        assert!(sealed.len() <= 24 * 30 + 40, "{} bytes", sealed.len());
    }
}
