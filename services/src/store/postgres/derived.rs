//! Derived data: materialised forecasts and their due index, stale marks with generations,
//! fleet priors. Forecasts and priors are stored as the sled engine's checksummed postcard
//! bytes (they are read whole, never by field).

use ::postgres::{GenericClient, Transaction};

use super::rows::{component_code, component_of_code};
use super::limit_of;
use crate::store::sled_engine::{decode, encode};
use crate::store::*;

/// The channel on which stored forecasts are announced (see [`super::replicas`]).
pub const FORECASTS_CHANNEL: &str = "brakeledger_forecasts";

/// See [`Store::put_forecasts`]: the forecasts, their due-index rows and a notification to
/// the other replicas, in one transaction.
pub fn put_forecasts(tx: &mut Transaction<'_>, record: &VehicleForecasts, replica_id: &str) -> StoreResult<()> {
    let (fleet_id, vehicle_id) = (&record.fleet_id, &record.vehicle_id);
    let body = encode(record)?;
    tx.execute(
        concat!(
            "INSERT INTO forecasts (fleet_id, vehicle_id, body, stored_at_ms) VALUES ($1, $2, $3, ",
            database_now_ms!(),
            ") ON CONFLICT (fleet_id, vehicle_id) DO UPDATE SET body = EXCLUDED.body, stored_at_ms = EXCLUDED.stored_at_ms"
        ),
        &[fleet_id, vehicle_id, &body],
    )?;
    tx.execute("DELETE FROM due_index WHERE fleet_id = $1 AND vehicle_id = $2", &[fleet_id, vehicle_id])?;
    let (mut levels, mut dues, mut axles, mut components) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for part in &record.parts {
        for level in BandLevel::ALL {
            if let Some(due_earliest_ms) = part.due_earliest_ms(level.probability()) {
                levels.push(i16::from(level.code()));
                dues.push(due_earliest_ms);
                axles.push(i64::from(part.axle_index));
                components.push(component_code(part.component));
            }
        }
    }
    if !levels.is_empty() {
        tx.execute(
            "INSERT INTO due_index (fleet_id, level, due_earliest_ms, vehicle_id, axle_index, component)
             SELECT $1, l, d, $2, a, c FROM unnest($3::int2[], $4::int8[], $5::int8[], $6::int2[]) AS u(l, d, a, c)
             ON CONFLICT DO NOTHING",
            &[fleet_id, vehicle_id, &levels, &dues, &axles, &components],
        )?;
    }
    let payload = serde_json::json!({ "replica": replica_id, "fleet_id": fleet_id, "vehicle_id": vehicle_id }).to_string();
    tx.execute("SELECT pg_notify($1, $2)", &[&FORECASTS_CHANNEL, &payload])?;
    Ok(())
}

/// See [`Store::get_forecasts`].
pub fn get_forecasts(client: &mut impl GenericClient, fleet_id: &str, vehicle_id: &str) -> StoreResult<Option<VehicleForecasts>> {
    let row = client.query_opt("SELECT body FROM forecasts WHERE fleet_id = $1 AND vehicle_id = $2", &[&fleet_id, &vehicle_id])?;
    row.map(|r| decode(r.get::<_, &[u8]>(0))).transpose()
}

/// See [`Store::get_many_forecasts`]: one query for all of them.
pub fn get_many_forecasts(client: &mut impl GenericClient, fleet_id: &str, vehicle_ids: &[&str]) -> StoreResult<Vec<VehicleForecasts>> {
    if vehicle_ids.is_empty() {
        return Ok(Vec::new());
    }
    let rows = client.query("SELECT body FROM forecasts WHERE fleet_id = $1 AND vehicle_id = ANY($2)", &[&fleet_id, &vehicle_ids])?;
    rows.iter().map(|r| decode(r.get::<_, &[u8]>(0))).collect()
}

/// Every fleet's forecasts stored at or after `since_ms` (the database's clock), fleet by
/// fleet: what a change listener replays after it lost its connection.
pub fn forecasts_stored_since(client: &mut impl GenericClient, since_ms: i64) -> StoreResult<Vec<VehicleForecasts>> {
    let fleets = client.query("SELECT fleet_id FROM fleets ORDER BY fleet_id", &[])?;
    let mut out = Vec::new();
    for fleet in fleets {
        let fleet_id: &str = fleet.get(0);
        let rows = client.query(
            "SELECT body FROM forecasts WHERE fleet_id = $1 AND stored_at_ms >= $2 ORDER BY vehicle_id",
            &[&fleet_id, &since_ms],
        )?;
        for row in rows {
            out.push(decode(row.get::<_, &[u8]>(0))?);
        }
    }
    Ok(out)
}

/// See [`Store::fleet_forecasts`].
pub fn fleet_forecasts(client: &mut impl GenericClient, fleet_id: &str) -> StoreResult<Vec<VehicleForecasts>> {
    let rows = client.query("SELECT body FROM forecasts WHERE fleet_id = $1 ORDER BY vehicle_id", &[&fleet_id])?;
    rows.iter().map(|r| decode(r.get::<_, &[u8]>(0))).collect()
}

/// See [`Store::scan_due`]: one index range scan from the cursor.
pub fn scan_due(client: &mut impl GenericClient, fleet_id: &str, level: BandLevel, due_before_ms: i64, after: Option<&DueCursor>, limit: usize) -> StoreResult<Vec<DueCursor>> {
    let level = i16::from(level.code());
    let limit = limit_of(limit);
    let rows = match after {
        None => client.query(
            "SELECT due_earliest_ms, vehicle_id, axle_index, component FROM due_index
             WHERE fleet_id = $1 AND level = $2 AND due_earliest_ms < $3
             ORDER BY due_earliest_ms, vehicle_id, axle_index, component LIMIT $4",
            &[&fleet_id, &level, &due_before_ms, &limit],
        )?,
        Some(cursor) => client.query(
            "SELECT due_earliest_ms, vehicle_id, axle_index, component FROM due_index
             WHERE fleet_id = $1 AND level = $2 AND due_earliest_ms < $3
               AND (due_earliest_ms, vehicle_id, axle_index, component) > ($5, $6, $7, $8)
             ORDER BY due_earliest_ms, vehicle_id, axle_index, component LIMIT $4",
            &[
                &fleet_id,
                &level,
                &due_before_ms,
                &limit,
                &cursor.due_earliest_ms,
                &cursor.vehicle_id,
                &i64::from(cursor.axle_index),
                &component_code(cursor.component),
            ],
        )?,
    };
    rows.iter()
        .map(|r| {
            let axle: i64 = r.get(2);
            Ok(DueCursor {
                due_earliest_ms: r.get(0),
                vehicle_id: r.get(1),
                axle_index: u32::try_from(axle).map_err(|_| StoreError::Corrupt(format!("axle index {axle}")))?,
                component: component_of_code(r.get(3))?,
            })
        })
        .collect()
}

/// See [`Store::mark_stale`]: a new generation for each vehicle, which also ends any claim on
/// it (the claimant's [`clear_stale`] will find a newer generation and leave the mark).
pub fn mark_stale(client: &mut impl GenericClient, fleet_id: &str, vehicle_ids: &[String]) -> StoreResult<()> {
    if vehicle_ids.is_empty() {
        return Ok(());
    }
    client.execute(
        "INSERT INTO stale (fleet_id, vehicle_id, generation)
         SELECT $1, v, nextval('stale_generation') FROM (SELECT DISTINCT unnest($2::text[]) AS v ORDER BY 1) AS u
         ON CONFLICT (fleet_id, vehicle_id) DO UPDATE SET generation = EXCLUDED.generation, claimed_by = NULL, claimed_until_ms = NULL",
        &[&fleet_id, &vehicle_ids],
    )?;
    Ok(())
}

/// See [`Store::stale_vehicles`]: claimed or not, in key order.
pub fn stale_vehicles(client: &mut impl GenericClient, limit: usize) -> StoreResult<Vec<StaleMark>> {
    let rows = client.query("SELECT fleet_id, vehicle_id, generation FROM stale ORDER BY fleet_id, vehicle_id LIMIT $1", &[&limit_of(limit)])?;
    Ok(rows.iter().map(stale_mark).collect())
}

/// A `fleet_id, vehicle_id, generation` row.
pub fn stale_mark(row: &::postgres::Row) -> StaleMark {
    StaleMark { fleet_id: row.get(0), vehicle_id: row.get(1), generation: row.get::<_, i64>(2) as u64 }
}

/// See [`Store::clear_stale`].
pub fn clear_stale(client: &mut impl GenericClient, mark: &StaleMark) -> StoreResult<()> {
    let generation = mark.generation as i64;
    client.execute("DELETE FROM stale WHERE fleet_id = $1 AND vehicle_id = $2 AND generation = $3", &[&mark.fleet_id, &mark.vehicle_id, &generation])?;
    Ok(())
}

/// See [`Store::put_priors`].
pub fn put_priors(client: &mut impl GenericClient, fleet_id: &str, priors: &FleetPriors) -> StoreResult<()> {
    let body = encode(priors)?;
    client.execute("INSERT INTO priors (fleet_id, body) VALUES ($1, $2) ON CONFLICT (fleet_id) DO UPDATE SET body = EXCLUDED.body", &[&fleet_id, &body])?;
    Ok(())
}

/// See [`Store::get_priors`].
pub fn get_priors(client: &mut impl GenericClient, fleet_id: &str) -> StoreResult<Option<FleetPriors>> {
    let row = client.query_opt("SELECT body FROM priors WHERE fleet_id = $1", &[&fleet_id])?;
    row.map(|r| decode(r.get::<_, &[u8]>(0))).transpose()
}
