//! The PostgreSQL schema: an ordered list of migrations, applied at start under an advisory
//! lock (so replicas starting together migrate once), and the refusal of a newer schema.
//!
//! Every table that holds fleet data has a primary key, and every index, leading with
//! `fleet_id`, so the tables can be distributed by fleet (see the README, "Sharding by
//! fleet"). Two tables are global: `brakeledger_schema` (one row) and `access_tokens` (looked
//! up by the hash of a secret; operator tokens belong to no fleet). Identifiers are
//! `text COLLATE "C"`, so their order is byte order, the same as the sled engine's keys.
//!
//! Derived data (materialised forecasts, fleet priors) are stored as the same checksummed
//! postcard bytes the sled engine stores: they are rebuilt from the records, never queried by
//! field. Records are plain columns.

use ::postgres::GenericClient;

use crate::store::{StoreError, StoreResult};

/// Schema version this build writes; a database with a higher one is refused.
pub const SCHEMA_VERSION: u32 = 3;

/// Advisory lock key held while migrating (any constant shared by every replica).
const MIGRATION_LOCK: i64 = 0x6272_616b_656c_6467; // "brakeldg"

/// The migrations, in order: entry `i` takes the schema from version `i` to `i + 1`.
const MIGRATIONS: [&str; SCHEMA_VERSION as usize] = [r#"
CREATE SEQUENCE stale_generation;
CREATE SEQUENCE audit_sequence;

-- Element-wise sum of two arrays of energies, the shorter padded with zeros (daily roll-up).
CREATE FUNCTION brakeledger_add_arrays(a float8[], b float8[]) RETURNS float8[]
LANGUAGE sql IMMUTABLE AS $$
  SELECT coalesce(array_agg(coalesce(a[i], 0) + coalesce(b[i], 0) ORDER BY i), '{}')
  FROM generate_series(1, greatest(coalesce(cardinality(a), 0), coalesce(cardinality(b), 0))) AS i
$$;

CREATE TABLE fleets (
  fleet_id text COLLATE "C" PRIMARY KEY,
  time_zone text NOT NULL,
  display_name text NOT NULL
);

CREATE TABLE vehicles (
  fleet_id text COLLATE "C" NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  vin text,
  spec jsonb NOT NULL,
  PRIMARY KEY (fleet_id, vehicle_id)
);

CREATE TABLE vehicle_totals (
  fleet_id text COLLATE "C" NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  trips_recorded bigint NOT NULL,
  friction_energy_j float8 NOT NULL,
  distance_m float8 NOT NULL,
  last_trip_end_ms bigint,
  PRIMARY KEY (fleet_id, vehicle_id)
);

CREATE TABLE trips (
  fleet_id text COLLATE "C" NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  trip_id text COLLATE "C" NOT NULL,
  start_ms bigint NOT NULL,
  end_ms bigint NOT NULL,
  distance_m float8 NOT NULL,
  friction_energy_j float8 NOT NULL,
  axle_energy_j float8[] NOT NULL,
  axle_split_reported boolean NOT NULL,
  brake_applications bigint NOT NULL,
  regen_energy_j float8,
  hot_energy_j float8 NOT NULL,
  PRIMARY KEY (fleet_id, vehicle_id, trip_id)
);
CREATE INDEX trips_by_end ON trips (fleet_id, vehicle_id, end_ms, trip_id);

CREATE TABLE daily_energy (
  fleet_id text COLLATE "C" NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  day bigint NOT NULL,
  axle_energy_j float8[] NOT NULL,
  axle_hot_energy_j float8[] NOT NULL,
  trips bigint NOT NULL,
  distance_m float8 NOT NULL,
  PRIMARY KEY (fleet_id, vehicle_id, day)
);

CREATE TABLE inspections (
  fleet_id text COLLATE "C" NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  inspection_id text COLLATE "C" NOT NULL,
  axle_index bigint NOT NULL,
  component smallint NOT NULL,
  thickness_mm float8 NOT NULL,
  measured_at_ms bigint NOT NULL,
  PRIMARY KEY (fleet_id, vehicle_id, inspection_id)
);

CREATE TABLE replacements (
  fleet_id text COLLATE "C" NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  replacement_id text COLLATE "C" NOT NULL,
  axle_index bigint NOT NULL,
  component smallint NOT NULL,
  new_thickness_mm float8 NOT NULL,
  replaced_at_ms bigint NOT NULL,
  PRIMARY KEY (fleet_id, vehicle_id, replacement_id)
);

CREATE TABLE corrections (
  fleet_id text COLLATE "C" NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  kind "char" NOT NULL,
  record_id text COLLATE "C" NOT NULL,
  reason text NOT NULL,
  corrected_at_ms bigint NOT NULL,
  superseded_by text COLLATE "C",
  PRIMARY KEY (fleet_id, vehicle_id, kind, record_id)
);

CREATE TABLE forecasts (
  fleet_id text COLLATE "C" NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  body bytea NOT NULL,
  PRIMARY KEY (fleet_id, vehicle_id)
);

CREATE TABLE due_index (
  fleet_id text COLLATE "C" NOT NULL,
  level smallint NOT NULL,
  due_earliest_ms bigint NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  axle_index bigint NOT NULL,
  component smallint NOT NULL,
  PRIMARY KEY (fleet_id, level, due_earliest_ms, vehicle_id, axle_index, component)
);
CREATE INDEX due_index_by_vehicle ON due_index (fleet_id, vehicle_id);

CREATE TABLE stale (
  fleet_id text COLLATE "C" NOT NULL,
  vehicle_id text COLLATE "C" NOT NULL,
  generation bigint NOT NULL,
  claimed_by text,
  claimed_until_ms bigint,
  PRIMARY KEY (fleet_id, vehicle_id)
);

CREATE TABLE priors (
  fleet_id text COLLATE "C" PRIMARY KEY,
  body bytea NOT NULL
);

CREATE TABLE access_tokens (
  secret_sha256 bytea PRIMARY KEY,
  token_id text NOT NULL,
  fleet_id text COLLATE "C",
  role text NOT NULL,
  label text NOT NULL,
  created_at_ms bigint NOT NULL,
  created_by text NOT NULL,
  revoked_at_ms bigint
);

CREATE TABLE audit (
  fleet_id text COLLATE "C" NOT NULL,
  at_ms bigint NOT NULL,
  sequence bigint NOT NULL,
  token_id text NOT NULL,
  role text NOT NULL,
  action text NOT NULL,
  subject text NOT NULL,
  PRIMARY KEY (fleet_id, at_ms, sequence)
);
"#,
    // 1 → 2: when each forecast row was last stored, by the database's clock, so that a change
    // listener that lost its connection can replay what it missed (`replicas::listen_for_forecasts`).
    r#"
ALTER TABLE forecasts ADD COLUMN stored_at_ms bigint NOT NULL DEFAULT 0;
CREATE INDEX forecasts_by_stored_at ON forecasts (fleet_id, stored_at_ms);
"#,
    // 2 → 3: stored forecasts in the compact layout; no change to the tables, the bodies are
    // re-encoded by `compact_stored_forecasts` in the same transaction.
    "",
];

/// Forecast bodies re-encoded per round trip by [`compact_stored_forecasts`].
const COMPACTION_CHUNK: i64 = 1_000;

/// Migration 2 → 3: re-encodes every stored forecast body from the schema-4 layout of the sled
/// engine into the compact one ([`crate::store::forecast_layout`]); no value changes, so the due
/// index and `stored_at_ms` stay as they are (replicas have nothing new to hear).
fn compact_stored_forecasts(tx: &mut ::postgres::Transaction<'_>) -> StoreResult<()> {
    use crate::store::forecast_layout::LegacyVehicleForecasts;
    use crate::store::sled_engine::{decode, encode};
    use crate::store::VehicleForecasts;

    let mut after = (String::new(), String::new());
    loop {
        let rows = tx.query(
            "SELECT fleet_id, vehicle_id, body FROM forecasts WHERE (fleet_id, vehicle_id) > ($1, $2) ORDER BY fleet_id, vehicle_id LIMIT $3",
            &[&after.0, &after.1, &COMPACTION_CHUNK],
        )?;
        let Some(last) = rows.last() else { return Ok(()) };
        after = (last.get(0), last.get(1));
        for row in &rows {
            let old: LegacyVehicleForecasts = decode(row.get::<_, &[u8]>(2))?;
            let body = encode(&VehicleForecasts::from(old))?;
            tx.execute("UPDATE forecasts SET body = $3 WHERE fleet_id = $1 AND vehicle_id = $2", &[&row.get::<_, &str>(0), &row.get::<_, &str>(1), &body])?;
        }
    }
}

/// Creates or migrates the schema, or refuses a database written by a newer brakeledger.
pub fn migrate(client: &mut ::postgres::Client) -> StoreResult<()> {
    client.execute("SELECT pg_advisory_lock($1)", &[&MIGRATION_LOCK])?;
    let result = migrate_locked(client);
    let unlocked = client.execute("SELECT pg_advisory_unlock($1)", &[&MIGRATION_LOCK]);
    result?;
    unlocked?;
    Ok(())
}

fn migrate_locked(client: &mut ::postgres::Client) -> StoreResult<()> {
    client.batch_execute(
        "CREATE TABLE IF NOT EXISTS brakeledger_schema (
           one boolean PRIMARY KEY DEFAULT true CHECK (one),
           version integer NOT NULL
         )",
    )?;
    let found = stored_version(client)?;
    if found > SCHEMA_VERSION {
        return Err(StoreError::NewerSchema { found, supported: SCHEMA_VERSION });
    }
    for (index, sql) in MIGRATIONS.iter().enumerate().skip(found as usize) {
        let to = index as i32 + 1;
        let mut tx = client.transaction()?;
        tx.batch_execute(sql)?;
        if to == 3 {
            compact_stored_forecasts(&mut tx)?;
        }
        tx.execute(
            "INSERT INTO brakeledger_schema (one, version) VALUES (true, $1) ON CONFLICT (one) DO UPDATE SET version = EXCLUDED.version",
            &[&to],
        )?;
        tx.commit()?;
        tracing::info!(to, "PostgreSQL schema migrated");
    }
    Ok(())
}

/// The schema version stored (0 for a database brakeledger never wrote to).
pub fn stored_version(client: &mut impl GenericClient) -> StoreResult<u32> {
    let row = client.query_opt("SELECT version FROM brakeledger_schema", &[])?;
    Ok(row.map_or(0, |r| r.get::<_, i32>(0).max(0) as u32))
}

/// Writes a schema version (tests of the refusal to open newer databases).
pub fn force_version(client: &mut impl GenericClient, version: u32) -> StoreResult<()> {
    let version = i32::try_from(version).map_err(|_| StoreError::Engine("schema version out of range".into()))?;
    client.execute("UPDATE brakeledger_schema SET version = $1", &[&version])?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::forecast_layout::{computed_forecasts, LegacyVehicleForecasts};
    use crate::store::postgres::scratch::ScratchDatabase;
    use crate::store::postgres::PostgresStore;
    use crate::store::sled_engine::encode;
    use crate::store::Store;

    #[test]
    fn a_schema_2_database_gets_its_forecasts_in_the_compact_layout_with_every_value_kept() {
        let Some(database) = ScratchDatabase::for_test("brakeledger_migration") else { return };
        let mut forecasts = computed_forecasts(6);
        // One part with quantiles off the hour (as the old layout stored every computed one).
        if let Some(due) = forecasts[0].0.parts[0].outlook.due.as_mut() {
            due.quantile_days.iter_mut().for_each(|d| *d += 0.01);
        }
        let store = PostgresStore::open(&database.url).unwrap();
        for (record, _) in &forecasts {
            store.put_forecasts(record).unwrap();
        }
        drop(store);
        let mut client = ::postgres::Client::connect(&database.url, ::postgres::NoTls).unwrap();
        for (record, fits) in &forecasts {
            let body = encode(&LegacyVehicleForecasts::of(record, fits)).unwrap();
            client.execute("UPDATE forecasts SET body = $3 WHERE fleet_id = $1 AND vehicle_id = $2", &[&record.fleet_id, &record.vehicle_id, &body]).unwrap();
        }
        force_version(&mut client, 2).unwrap();
        let due_rows = |client: &mut ::postgres::Client| -> Vec<(String, i64)> {
            client.query("SELECT vehicle_id, due_earliest_ms FROM due_index ORDER BY 1, 2", &[]).unwrap().iter().map(|r| (r.get(0), r.get(1))).collect()
        };
        let body_bytes = |client: &mut ::postgres::Client| -> i64 { client.query_one("SELECT sum(length(body))::int8 FROM forecasts", &[]).unwrap().get(0) };
        let (due_before, bytes_before) = (due_rows(&mut client), body_bytes(&mut client));

        let store = PostgresStore::open(&database.url).expect("migrated at start");
        for (record, _) in &forecasts {
            assert_eq!(store.get_forecasts("north", &record.vehicle_id).unwrap().as_ref(), Some(record));
        }
        assert_eq!(stored_version(&mut client).unwrap(), SCHEMA_VERSION);
        assert_eq!(due_rows(&mut client), due_before, "the due index is unchanged");
        let bytes_after = body_bytes(&mut client);
        assert!(bytes_after * 2 < bytes_before, "{bytes_after} bytes after the migration, {bytes_before} before");
        drop(client);
        drop(store);
    }
}
