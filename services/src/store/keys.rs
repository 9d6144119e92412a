//! Key layout of the sled trees.
//!
//! Identifiers never contain NUL (validated at the boundary), so `0x00` separates key parts and
//! a prefix ending in `0x00` selects exactly one fleet or vehicle. Integers are big-endian with
//! the sign bit flipped, so byte order equals numeric order and per-vehicle history and
//! per-fleet listings are range scans.
//!
//! | tree | key | value |
//! |---|---|---|
//! | `fleets` | fleet | [`FleetRecord`](super::FleetRecord) |
//! | `vehicles` | fleet 0 vehicle | [`VehicleRecord`](super::VehicleRecord) |
//! | `totals` | fleet 0 vehicle | [`VehicleTotals`](super::VehicleTotals) |
//! | `trip_blocks` | fleet 0 vehicle 0 day | every trip of the vehicle ending that UTC day (see [`super::trip_blocks`]) |
//! | `trip_id_index` | fleet 0 vehicle 0 segment | hashes of the vehicle's trip ids and their days (see [`super::trip_blocks`]) |
//! | `daily` | fleet 0 vehicle 0 day | [`DailyEnergy`](super::DailyEnergy) |
//! | `inspections`, `replacements` | fleet 0 vehicle 0 id | record (kept when voided or superseded) |
//! | `corrections` | fleet 0 vehicle 0 kind id (kind `i` inspection, `r` replacement) | [`CorrectionRecord`](super::CorrectionRecord) |
//! | `forecasts` | fleet 0 vehicle | [`VehicleForecasts`](super::VehicleForecasts) |
//! | `due_index` | fleet 0 level due_ms vehicle 0 axle component | empty |
//! | `stale` | fleet 0 vehicle | generation |
//! | `priors` | fleet | [`FleetPriors`](super::FleetPriors) |
//! | `tokens` | SHA-256 of the secret | [`TokenRecord`](super::TokenRecord) |
//! | `audit` | fleet 0 at_ms sequence | [`AuditRecord`](super::AuditRecord) |
//! | `meta` | name | value (`schema_version`) |

use brakeledger_models::domain::Component;

use super::{DueCursor, StoreError, StoreResult};

/// Separator between key parts.
pub const SEP: u8 = 0;

/// Order-preserving encoding of a signed integer.
pub fn ordered_i64(value: i64) -> [u8; 8] {
    ((value as u64) ^ (1 << 63)).to_be_bytes()
}

/// Inverse of [`ordered_i64`].
pub fn read_ordered_i64(bytes: &[u8]) -> StoreResult<i64> {
    let array: [u8; 8] = bytes.try_into().map_err(|_| StoreError::Corrupt("integer key part".into()))?;
    Ok((u64::from_be_bytes(array) ^ (1 << 63)) as i64)
}

/// `fleet 0`
pub fn fleet_prefix(fleet_id: &str) -> Vec<u8> {
    let mut key = Vec::with_capacity(fleet_id.len() + 1);
    key.extend_from_slice(fleet_id.as_bytes());
    key.push(SEP);
    key
}

/// `fleet 0 vehicle`
pub fn vehicle_key(fleet_id: &str, vehicle_id: &str) -> Vec<u8> {
    let mut key = fleet_prefix(fleet_id);
    key.extend_from_slice(vehicle_id.as_bytes());
    key
}

/// `fleet 0 vehicle 0`
pub fn vehicle_prefix(fleet_id: &str, vehicle_id: &str) -> Vec<u8> {
    let mut key = vehicle_key(fleet_id, vehicle_id);
    key.push(SEP);
    key
}

/// `fleet 0 vehicle 0 child` for an identifier child (trip, inspection, replacement).
pub fn child_key(fleet_id: &str, vehicle_id: &str, child_id: &str) -> Vec<u8> {
    let mut key = vehicle_prefix(fleet_id, vehicle_id);
    key.extend_from_slice(child_id.as_bytes());
    key
}

/// `fleet 0 vehicle 0 end_ms trip`: the key the ledger counts a trip under (and the key of
/// the schema-3 `trips` tree).
pub fn trip_key(fleet_id: &str, vehicle_id: &str, end_ms: i64, trip_id: &str) -> Vec<u8> {
    let mut key = vehicle_prefix(fleet_id, vehicle_id);
    key.extend_from_slice(&ordered_i64(end_ms));
    key.extend_from_slice(trip_id.as_bytes());
    key
}

/// `fleet 0 vehicle 0 day`
pub fn day_key(fleet_id: &str, vehicle_id: &str, day: i64) -> Vec<u8> {
    let mut key = vehicle_prefix(fleet_id, vehicle_id);
    key.extend_from_slice(&ordered_i64(day));
    key
}

/// The day part of a [`day_key`].
pub fn day_of_key(key: &[u8]) -> StoreResult<i64> {
    let start = key.len().checked_sub(8).ok_or_else(|| StoreError::Corrupt("day key".into()))?;
    read_ordered_i64(&key[start..])
}

fn component_code(component: Component) -> u8 {
    match component {
        Component::Friction => 1,
        Component::Disc => 2,
    }
}

fn component_of_code(code: u8) -> StoreResult<Component> {
    match code {
        1 => Ok(Component::Friction),
        2 => Ok(Component::Disc),
        other => Err(StoreError::Corrupt(format!("component code {other}"))),
    }
}

/// `fleet 0 level`
pub fn due_level_prefix(fleet_id: &str, level_code: u8) -> Vec<u8> {
    let mut key = fleet_prefix(fleet_id);
    key.push(level_code);
    key
}

/// `fleet 0 level due_ms vehicle 0 axle component`
pub fn due_key(fleet_id: &str, level_code: u8, cursor: &DueCursor) -> Vec<u8> {
    let mut key = due_level_prefix(fleet_id, level_code);
    key.extend_from_slice(&ordered_i64(cursor.due_earliest_ms));
    key.extend_from_slice(cursor.vehicle_id.as_bytes());
    key.push(SEP);
    key.extend_from_slice(&cursor.axle_index.to_be_bytes());
    key.push(component_code(cursor.component));
    key
}

/// Decodes the part of a [`due_key`] after its `fleet 0 level` prefix.
pub fn due_cursor_of_key(key: &[u8], prefix_len: usize) -> StoreResult<DueCursor> {
    let bad = || StoreError::Corrupt("due index key".into());
    let rest = key.get(prefix_len..).ok_or_else(bad)?;
    if rest.len() < 8 + 1 + 4 + 1 {
        return Err(bad());
    }
    let due_earliest_ms = read_ordered_i64(&rest[..8])?;
    let tail = &rest[8..];
    let (vehicle, suffix) = tail.split_at(tail.len() - 6);
    if suffix[0] != SEP {
        return Err(bad());
    }
    let axle_index = u32::from_be_bytes(suffix[1..5].try_into().map_err(|_| bad())?);
    Ok(DueCursor {
        due_earliest_ms,
        vehicle_id: String::from_utf8(vehicle.to_vec()).map_err(|_| bad())?,
        axle_index,
        component: component_of_code(suffix[5])?,
    })
}

/// The smallest key strictly greater than every key starting with `prefix`.
pub fn prefix_end(prefix: &[u8]) -> Vec<u8> {
    let mut end = prefix.to_vec();
    end.push(0xff);
    end
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        /// Byte order of the encoding equals numeric order, and it round-trips.
        #[test]
        fn ordered_i64_preserves_order(a in any::<i64>(), b in any::<i64>()) {
            prop_assert_eq!(a.cmp(&b), ordered_i64(a).cmp(&ordered_i64(b)));
            prop_assert_eq!(read_ordered_i64(&ordered_i64(a)).unwrap(), a);
        }

        /// Due keys sort like their cursors and decode back to them.
        #[test]
        fn due_keys_sort_and_round_trip(
            due_a in -1_000_000_000_000i64..4_000_000_000_000, due_b in -1_000_000_000_000i64..4_000_000_000_000,
            vehicle in "[a-z0-9-]{1,12}", axle in 1u32..6, disc in any::<bool>(),
        ) {
            let component = if disc { Component::Disc } else { Component::Friction };
            let a = DueCursor { due_earliest_ms: due_a, vehicle_id: vehicle.clone(), axle_index: axle, component };
            let b = DueCursor { due_earliest_ms: due_b, vehicle_id: vehicle, axle_index: axle, component };
            let prefix_len = due_level_prefix("fleet", 80).len();
            prop_assert_eq!(due_cursor_of_key(&due_key("fleet", 80, &a), prefix_len).unwrap(), a.clone());
            if due_a < due_b {
                prop_assert!(due_key("fleet", 80, &a) < due_key("fleet", 80, &b));
            }
        }
    }
}

/// `fleet 0 at_ms sequence` (audit trail).
pub fn audit_key(fleet_id: &str, cursor: super::AuditCursor) -> Vec<u8> {
    let mut key = fleet_prefix(fleet_id);
    key.extend_from_slice(&ordered_i64(cursor.at_ms));
    key.extend_from_slice(&cursor.sequence.to_be_bytes());
    key
}

/// The cursor of an audit key whose fleet prefix is `prefix_len` bytes.
pub fn audit_cursor_of_key(key: &[u8], prefix_len: usize) -> StoreResult<super::AuditCursor> {
    let rest = key.get(prefix_len..).filter(|rest| rest.len() == 16).ok_or_else(|| StoreError::Corrupt("audit key".into()))?;
    let sequence: [u8; 8] = rest[8..].try_into().map_err(|_| StoreError::Corrupt("audit key".into()))?;
    Ok(super::AuditCursor { at_ms: read_ordered_i64(&rest[..8])?, sequence: u64::from_be_bytes(sequence) })
}
