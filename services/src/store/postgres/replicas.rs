//! What lets several replicas share one database:
//!
//! - **Stale-vehicle claims**: [`claim_stale`] takes unclaimed (or expired, or its own) marks
//!   with `FOR UPDATE SKIP LOCKED` and stamps them with this replica's id and a lease, so two
//!   replicas never take the same vehicle at once; a replica killed mid-pass loses its claims
//!   when the lease runs out. A new write to the vehicle ends the claim (new generation).
//! - **Prior re-estimation**: [`lock_fleet_priors`] takes a session advisory lock per fleet,
//!   held on one pooled connection until the returned lock is dropped.
//! - **Change feed**: every stored forecast is announced with `NOTIFY` in its transaction;
//!   [`listen_for_forecasts`] follows the channel on a connection of its own and hands the
//!   forecasts stored by *other* replicas to a callback (the server publishes them to its
//!   WatchDue streams). Notifications sent while its connection was down are lost, so after a
//!   reconnect it replays every forecast stored since shortly before the connection was last
//!   known alive (`forecasts.stored_at_ms`, the database's clock); WatchDue diffs what it is
//!   given, so a forecast it already had changes nothing.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::Duration;

use ::postgres::fallible_iterator::FallibleIterator;

use super::derived::{forecasts_stored_since, get_forecasts, stale_mark, FORECASTS_CHANNEL};
use super::{describe, limit_of, Connection};
use crate::store::*;

/// How long a claim on a stale vehicle lasts, ms: far longer than one vehicle's recomputation.
pub const DEFAULT_CLAIM_LEASE_MS: i64 = 60_000;

/// First key of the two-part advisory locks on fleets' prior re-estimation.
const PRIORS_LOCK_CLASS: i32 = 0x7072; // "pr"

/// A name for this process, unique among replicas: host name, process id and a random part.
pub fn new_replica_id() -> String {
    let host = std::fs::read_to_string("/etc/hostname").map(|h| h.trim().to_owned()).unwrap_or_default();
    format!("{}-{}-{:08x}", if host.is_empty() { "brakeledger" } else { &host }, std::process::id(), rand::random::<u32>())
}

/// See [`Store::claim_stale`].
pub fn claim_stale(client: &mut ::postgres::Client, replica_id: &str, lease_ms: i64, limit: usize) -> StoreResult<Vec<StaleMark>> {
    let rows = client.query(
        concat!(
            "WITH now AS (SELECT ",
            database_now_ms!(),
            " AS ms),
              free AS (
                SELECT fleet_id, vehicle_id FROM stale, now
                WHERE claimed_by IS NULL OR claimed_by = $1 OR claimed_until_ms < now.ms
                ORDER BY fleet_id, vehicle_id LIMIT $3
                FOR UPDATE OF stale SKIP LOCKED)
         UPDATE stale SET claimed_by = $1, claimed_until_ms = (SELECT ms FROM now) + $2
         FROM free WHERE stale.fleet_id = free.fleet_id AND stale.vehicle_id = free.vehicle_id
         RETURNING stale.fleet_id, stale.vehicle_id, stale.generation"
        ),
        &[&replica_id, &lease_ms, &limit_of(limit)],
    )?;
    let mut marks: Vec<StaleMark> = rows.iter().map(stale_mark).collect();
    marks.sort_by(|a, b| (&a.fleet_id, &a.vehicle_id).cmp(&(&b.fleet_id, &b.vehicle_id)));
    Ok(marks)
}

/// A session advisory lock and the connection that holds it; unlocks when dropped.
struct HeldAdvisoryLock {
    connection: Connection,
    key: i32,
}

impl Drop for HeldAdvisoryLock {
    fn drop(&mut self) {
        let key = self.key;
        let connection = &mut self.connection;
        let unlocked = super::off_async(|| connection.execute("SELECT pg_advisory_unlock($1, $2)", &[&PRIORS_LOCK_CLASS, &key]));
        if let Err(error) = unlocked {
            // The pool drops a broken connection, and the server releases its locks with it.
            tracing::warn!(error = %describe(&error), "releasing a fleet priors lock failed");
        }
    }
}

/// See [`Store::lock_fleet_priors`].
pub fn lock_fleet_priors(mut connection: Connection, fleet_id: &str) -> StoreResult<Option<FleetPriorsLock>> {
    let row = connection.query_one("SELECT hashtext($1), pg_try_advisory_lock($2, hashtext($1))", &[&fleet_id, &PRIORS_LOCK_CLASS])?;
    let (key, locked): (i32, bool) = (row.get(0), row.get(1));
    Ok(locked.then(|| FleetPriorsLock::holding(Box::new(HeldAdvisoryLock { connection, key }))))
}

/// Stops a [`listen_for_forecasts`] thread when dropped.
pub struct ListenerHandle {
    stop: Arc<AtomicBool>,
}

impl Drop for ListenerHandle {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::SeqCst);
    }
}

/// Margin taken before the moment the listener was last known alive when replaying after a
/// reconnect, ms.
const REPLAY_MARGIN_MS: i64 = 5_000;

/// `application_name` of the listener's connections (what an operator sees in
/// `pg_stat_activity`).
pub const LISTENER_APPLICATION_NAME: &str = "brakeledger-change-listener";

/// Follows the forecasts channel on a thread of its own and calls `changed` with the
/// forecasts another replica stored (read back from the database). Reconnects after a lost
/// connection, then replays the forecasts stored since [`REPLAY_MARGIN_MS`] before it was last
/// known alive (module docs), so a change made while it was away still arrives.
pub fn listen_for_forecasts(url: &str, own_replica_id: &str, changed: impl Fn(VehicleForecasts) + Send + 'static) -> StoreResult<ListenerHandle> {
    let mut config: ::postgres::Config = url.parse().map_err(|e| StoreError::Engine(format!("the PostgreSQL URL does not parse: {e}")))?;
    config.application_name(LISTENER_APPLICATION_NAME);
    let own = own_replica_id.to_owned();
    let stop = Arc::new(AtomicBool::new(false));
    let stopped = Arc::clone(&stop);
    std::thread::Builder::new()
        .name("brakeledger-pg-listen".into())
        .spawn(move || {
            let mut alive_at_ms = None;
            while !stopped.load(Ordering::SeqCst) {
                if let Err(error) = follow(&config, &own, &stopped, &changed, &mut alive_at_ms) {
                    tracing::warn!(%error, "the PostgreSQL change listener lost its connection; reconnecting");
                    std::thread::sleep(Duration::from_secs(1));
                }
            }
        })
        .map_err(|e| StoreError::Engine(format!("starting the change listener: {e}")))?;
    Ok(ListenerHandle { stop })
}

#[derive(serde::Deserialize)]
struct Announcement {
    replica: String,
    fleet_id: String,
    vehicle_id: String,
}

/// Listens until stopped or the connection fails. `alive_at_ms` is when the listener was last
/// known to be listening, by the database's clock: `None` on the first start; after a lost
/// connection, what was stored since (less a margin) is replayed once LISTEN is in place again.
fn follow(
    config: &::postgres::Config,
    own: &str,
    stop: &AtomicBool,
    changed: &impl Fn(VehicleForecasts),
    alive_at_ms: &mut Option<i64>,
) -> StoreResult<()> {
    let mut listening = config.connect(::postgres::NoTls)?;
    let mut reading = config.connect(::postgres::NoTls)?;
    listening.batch_execute(&format!("LISTEN {FORECASTS_CHANNEL}"))?;
    let listening_since_ms: i64 = reading.query_one(concat!("SELECT ", database_now_ms!()), &[])?.get(0);
    let listening_since = std::time::Instant::now();
    if let Some(last_alive_ms) = *alive_at_ms {
        let missed = forecasts_stored_since(&mut reading, last_alive_ms - REPLAY_MARGIN_MS)?;
        tracing::info!(replayed = missed.len(), "the PostgreSQL change listener is back; replaying forecasts stored meanwhile");
        for forecasts in missed {
            changed(forecasts);
        }
    }
    while !stop.load(Ordering::SeqCst) {
        *alive_at_ms = Some(listening_since_ms + listening_since.elapsed().as_millis() as i64);
        let mut batch: Vec<String> = Vec::new();
        {
            let mut notifications = listening.notifications();
            let mut waiting = notifications.timeout_iter(Duration::from_millis(500));
            while let Some(notification) = waiting.next()? {
                batch.push(notification.payload().to_owned());
                if batch.len() >= 1024 {
                    break;
                }
            }
        }
        for payload in batch {
            let Ok(announced) = serde_json::from_str::<Announcement>(&payload) else { continue };
            if announced.replica == own {
                continue;
            }
            if let Some(forecasts) = get_forecasts(&mut reading, &announced.fleet_id, &announced.vehicle_id)? {
                changed(forecasts);
            }
        }
    }
    Ok(())
}
