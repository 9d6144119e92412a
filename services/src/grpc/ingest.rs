//! The ingest pipeline shared by the three TelemetryService RPCs.
//!
//! An [`Ingestor`] validates each trip of a call, gathers valid ones into chunks of
//! `[ingest] chunk_trips` and writes chunks while the next one is being read: at most
//! [`WRITES_IN_FLIGHT`] at a time, so a call holds at most three chunks. A chunk's store work
//! that only reads ([`crate::store::Store::prepare_trips`]) runs as soon as the chunk is full;
//! its write waits until the call's previous chunk is written, so chunks are stored in the
//! order received (a trip id sent twice is stored from its first copy). It counts what became
//! of every trip, knows
//! which prefix of the call is *settled* (durable, duplicate or refused) for IngestTrips acks,
//! and builds the final report with the refusal listing capped ([`super::refusals`]).
//!
//! [`drive`] runs a call's stream through an ingestor until the client closes it, the client's
//! stream fails, or the server's drain deadline passes at shutdown; it writes everything valid
//! it has read before it returns.

use std::collections::{HashMap, VecDeque};
use std::sync::mpsc;
use std::time::Duration;

use brakeledger_models::domain::FieldViolation;
use brakeledger_proto::v1 as pb;
use tokio::task::JoinHandle;
use tokio::time::Instant;
use tokio_stream::{Stream, StreamExt};
use tonic::Status;

use super::refusals::Refusals;
use crate::auth::{Caller, Permission};
use crate::convert::{check_id, now_ms, trip_record};
use crate::error::{ServiceError, ServiceResult};
use crate::state::AppState;
use crate::store::{IngestOutcome, StoreResult, TripRecord, VehicleRecord};

/// Vehicles remembered per call; the cache is emptied when a call names more (bounded memory
/// for calls that name very many vehicles, for example unknown ones).
const VEHICLE_CACHE_MAX: usize = 10_000;

/// Chunks of one call being written at once: the next chunk's reads (the sort against what is
/// stored) overlap the previous chunk's write, on the other core.
pub const WRITES_IN_FLIGHT: usize = 2;

/// A chunk being written, and the number of the call's trips it settles.
struct InFlight {
    handle: JoinHandle<StoreResult<Vec<IngestOutcome>>>,
    settles_through: u64,
}

/// What happened since the last acknowledgement.
#[derive(Default)]
struct AckDelta {
    accepted: u64,
    duplicates: u64,
    rejected_count: u64,
    rejected: Vec<pb::Rejection>,
    /// Refusals by (field, reason) group.
    groups: HashMap<(String, String), u64>,
}

/// Validates and stores trips of one call, and counts what became of them.
pub struct Ingestor {
    state: AppState,
    caller: Caller,
    /// The call's trips were taken from the rate limit as a whole (PushTrips).
    rate_taken: bool,
    earliest_ms: i64,
    vehicles: HashMap<(String, String), Option<VehicleRecord>>,
    chunk: Vec<TripRecord>,
    /// Oldest first.
    in_flight: VecDeque<InFlight>,
    /// Signalled when the last chunk started has been written (or has failed).
    last_written: Option<mpsc::Receiver<()>>,
    received: u64,
    settled: u64,
    acked_settled: u64,
    accepted: u64,
    duplicates: u64,
    refusals: Refusals,
    delta: AckDelta,
    /// Make an ack each time a chunk settles (IngestTrips), kept in `ready` until sent.
    ack_each_chunk: bool,
    ready: Vec<pb::IngestAck>,
    now_ms: i64,
}

impl Ingestor {
    /// A fresh ingest call by `caller`.
    pub fn new(state: AppState, caller: Caller) -> Self {
        let ingest = &state.serving.ingest;
        let earliest_ms = state.serving.limits.earliest_record_ms().unwrap_or(i64::MIN);
        let refusals = Refusals::new(ingest.max_listed_rejections, ingest.max_rejection_groups);
        let chunk = Vec::with_capacity(ingest.chunk_trips.max(1));
        Self {
            state,
            caller,
            rate_taken: false,
            earliest_ms,
            vehicles: HashMap::new(),
            chunk,
            in_flight: VecDeque::new(),
            last_written: None,
            received: 0,
            settled: 0,
            acked_settled: 0,
            accepted: 0,
            duplicates: 0,
            refusals,
            delta: AckDelta::default(),
            ack_each_chunk: false,
            ready: Vec::new(),
            now_ms: now_ms(),
        }
    }

    /// The same ingestor for a call whose trips were already taken from the rate limit.
    pub fn with_rate_taken(mut self) -> Self {
        self.rate_taken = true;
        self
    }

    fn refuse(&mut self, index: u64, trip_id: String, violations: Vec<FieldViolation>) {
        crate::metrics::trip_refused(violations.first().map_or("", |v| v.field.as_str()));
        self.delta.rejected_count += 1;
        let (listed, group) = self.refusals.refuse(index, trip_id, violations);
        self.delta.rejected.extend(listed);
        if let Some(group) = group {
            *self.delta.groups.entry(group).or_insert(0) += 1;
        }
    }

    async fn vehicle(&mut self, fleet_id: &str, vehicle_id: &str) -> ServiceResult<Option<VehicleRecord>> {
        let key = (fleet_id.to_owned(), vehicle_id.to_owned());
        if let Some(found) = self.vehicles.get(&key) {
            return Ok(found.clone());
        }
        let (fleet, vehicle) = key.clone();
        let found = self.state.blocking(move |store| Ok(store.get_vehicle(&fleet, &vehicle)?)).await?;
        if self.vehicles.len() >= VEHICLE_CACHE_MAX {
            self.vehicles.clear();
        }
        self.vehicles.insert(key, found.clone());
        Ok(found)
    }

    /// The checks whose failure ends the call (permission, the rate limit, a store error), then
    /// the trip's vehicle, if registered. The permission comes before any lookup: a refusal
    /// never says whether another fleet's vehicle exists.
    async fn admit(&mut self, trip: &pb::TripSummary) -> ServiceResult<Option<VehicleRecord>> {
        self.caller.require(&trip.fleet_id, Permission::WriteTrips)?;
        if !self.rate_taken {
            self.state.limiter.take(&self.caller.token_id, 1)?;
        }
        self.vehicle(&trip.fleet_id, &trip.vehicle_id).await
    }

    /// Takes the next trip of the call.
    pub async fn add(&mut self, trip: pb::TripSummary) -> ServiceResult<()> {
        let index = self.received;
        self.received += 1;
        let ids: Vec<FieldViolation> = [("fleet_id", &trip.fleet_id), ("vehicle_id", &trip.vehicle_id)]
            .into_iter()
            .filter_map(|(field, value)| check_id(field, value).err())
            .collect();
        if !ids.is_empty() {
            self.refuse(index, trip.trip_id, ids);
            return Ok(());
        }
        let found = match self.admit(&trip).await {
            Ok(found) => found,
            Err(error) => {
                // The call ends here and this trip is neither stored nor reported: it is not
                // settled, so that an acknowledgement's `settled_trips` stops before it and a
                // client resuming there (after the rate limit, say) sends it again.
                self.received = index;
                return Err(error);
            }
        };
        let Some(vehicle) = found else {
            let reason = format!("vehicle '{}' is not registered in fleet '{}'", trip.vehicle_id, trip.fleet_id);
            self.refuse(index, trip.trip_id, vec![FieldViolation::new("vehicle_id", reason)]);
            return Ok(());
        };
        let trip_id = trip.trip_id.clone();
        match trip_record(trip, &vehicle, self.now_ms) {
            Ok(record) if record.start_ms < self.earliest_ms => {
                let reason = format!(
                    "is before {}, the earliest date this server accepts ([limits] earliest_record_date)",
                    self.state.serving.limits.earliest_record_date
                );
                self.refuse(index, trip_id, vec![FieldViolation::new("start_time", reason)]);
            }
            Ok(record) => {
                self.chunk.push(record);
                if self.chunk.len() >= self.state.serving.ingest.chunk_trips.max(1) {
                    self.write_chunk().await?;
                }
            }
            Err(violations) => self.refuse(index, trip_id, violations),
        }
        Ok(())
    }

    /// Waits for the oldest chunk being written, if any, and counts its outcomes. Cancel-safe:
    /// if the wait is abandoned, the write stays in flight and a later call settles it.
    pub async fn settle_in_flight(&mut self) -> ServiceResult<()> {
        let Some(in_flight) = self.in_flight.front_mut() else { return Ok(()) };
        let joined = (&mut in_flight.handle).await;
        let settles_through = in_flight.settles_through;
        self.in_flight.pop_front();
        let outcomes = joined.map_err(|e| ServiceError::Internal(format!("ingest task failed: {e}")))??;
        let stored = outcomes.iter().filter(|o| **o == IngestOutcome::Stored).count() as u64;
        crate::metrics::trips(stored, outcomes.len() as u64 - stored);
        for outcome in outcomes {
            match outcome {
                IngestOutcome::Stored => {
                    self.accepted += 1;
                    self.delta.accepted += 1;
                }
                IngestOutcome::Duplicate => {
                    self.duplicates += 1;
                    self.delta.duplicates += 1;
                }
            }
        }
        self.settled = self.settled.max(settles_through);
        self.state.wake_forecaster.notify_one();
        if self.ack_each_chunk {
            if let Some(ack) = self.take_ack() {
                self.ready.push(ack);
            }
        }
        Ok(())
    }

    /// The acks of chunks settled since the last call, oldest first, then one of what happened
    /// since if `everything` (refusals after the last chunk, the close of the call).
    fn acks_ready(&mut self, everything: bool) -> Vec<pb::IngestAck> {
        let mut acks = std::mem::take(&mut self.ready);
        if everything {
            acks.extend(self.take_ack());
        }
        acks
    }

    /// True while a chunk is being written.
    pub fn writing(&self) -> bool {
        !self.in_flight.is_empty()
    }

    /// Starts writing the chunk gathered so far (once fewer than [`WRITES_IN_FLIGHT`] are).
    async fn write_chunk(&mut self) -> ServiceResult<()> {
        while self.in_flight.len() >= WRITES_IN_FLIGHT {
            self.settle_in_flight().await?;
        }
        if self.chunk.is_empty() {
            return Ok(());
        }
        let capacity = self.state.serving.ingest.chunk_trips.max(1);
        let chunk = std::mem::replace(&mut self.chunk, Vec::with_capacity(capacity));
        let store = std::sync::Arc::clone(&self.state.store);
        let after = self.last_written.take();
        let (written, last_written) = mpsc::sync_channel(1);
        self.last_written = Some(last_written);
        let handle = tokio::task::spawn_blocking(move || {
            let prepared = store.prepare_trips(chunk);
            // The previous chunk first, whatever became of it (a closed channel: it ended too).
            if let Some(after) = after {
                let _ = after.recv();
            }
            let outcomes = prepared.and_then(|prepared| store.ingest_prepared(prepared));
            let _ = written.send(());
            outcomes
        });
        self.in_flight.push_back(InFlight { handle, settles_through: self.received });
        Ok(())
    }

    /// Writes everything gathered and waits until it is on disk: afterwards every trip received
    /// is settled.
    pub async fn write_all(&mut self) -> ServiceResult<()> {
        self.write_chunk().await?;
        while self.writing() {
            self.settle_in_flight().await?;
        }
        // Every trip received is now written, a duplicate or refused.
        self.settled = self.received;
        Ok(())
    }

    /// True when something happened that the client has not been told in an ack.
    pub fn unacknowledged(&self) -> bool {
        self.received > self.acked_settled || self.delta.rejected_count > 0
    }

    /// An ack of what happened since the previous one, or `None` when nothing did.
    pub fn take_ack(&mut self) -> Option<pb::IngestAck> {
        let delta = std::mem::take(&mut self.delta);
        if self.settled == self.acked_settled && delta.accepted + delta.duplicates + delta.rejected_count == 0 {
            return None;
        }
        self.acked_settled = self.settled;
        Some(pb::IngestAck {
            settled_trips: self.settled,
            accepted: delta.accepted,
            duplicates: delta.duplicates,
            rejected_count: delta.rejected_count,
            rejected: delta.rejected,
            accepted_total: self.accepted,
            duplicates_total: self.duplicates,
            rejected_total: self.refusals.total(),
            rejection_counts: super::refusals::sorted_counts(delta.groups),
        })
    }

    /// Trips received so far in this call.
    pub fn received(&self) -> u64 {
        self.received
    }

    /// One line on what this call stored, for logs and status messages.
    pub fn summary(&self) -> String {
        format!(
            "{} trips received, {} stored, {} duplicates, {} refused; trips below index {} are settled",
            self.received,
            self.accepted,
            self.duplicates,
            self.refusals.total(),
            self.settled
        )
    }

    /// Writes what is left and returns the report; every accepted trip is on disk.
    pub async fn finish(mut self) -> ServiceResult<pb::IngestReport> {
        self.write_all().await?;
        let mut report = pb::IngestReport { accepted: self.accepted, duplicates: self.duplicates, ..Default::default() };
        self.refusals.into_report(&mut report);
        Ok(report)
    }
}

/// How a call's stream ended.
#[derive(Debug)]
pub enum StreamEnd {
    /// The client closed its side; everything is written.
    Closed,
    /// The drain deadline of a shutdown passed; everything read is written.
    Cutoff,
}

/// Runs `trips` (a stream of messages, each holding trips) through `ingestor`, calling `on_ack`
/// with each acknowledgement when `acks` is true (writes then also happen after
/// `[ingest] ack_delay_ms` when the client pauses). Returns after writing everything read.
pub async fn drive<S>(
    ingestor: &mut Ingestor,
    mut trips: S,
    acks: bool,
    mut on_ack: impl FnMut(pb::IngestAck),
) -> Result<StreamEnd, Status>
where
    S: Stream<Item = Result<Vec<pb::TripSummary>, Status>> + Unpin,
{
    let state = ingestor.state.clone();
    let mut cutoff = state.ingest_cutoff.subscribe();
    let ack_delay = Duration::from_millis(state.serving.ingest.ack_delay_ms);
    ingestor.ack_each_chunk = acks;
    let mut ack_due: Option<Instant> = None;
    // Sends the acks ready; true when there were any.
    let mut send = |ingestor: &mut Ingestor, everything: bool| {
        let ready = ingestor.acks_ready(everything);
        let sent = !ready.is_empty();
        ready.into_iter().for_each(&mut on_ack);
        sent
    };
    let outcome = loop {
        if acks && ack_due.is_none() && ingestor.unacknowledged() {
            ack_due = Some(Instant::now() + ack_delay);
        }
        let writing = ingestor.writing();
        tokio::select! {
            biased;
            _ = async { let _ = cutoff.wait_for(|cut| *cut).await; } => break Ok(StreamEnd::Cutoff),
            settled = ingestor.settle_in_flight(), if acks && writing => {
                if let Err(error) = settled {
                    break Err(error.into_status());
                }
                if send(ingestor, false) {
                    ack_due = None;
                }
            }
            _ = tokio::time::sleep_until(ack_due.unwrap_or_else(Instant::now)), if acks && ack_due.is_some() => {
                if let Err(error) = ingestor.write_all().await {
                    break Err(error.into_status());
                }
                send(ingestor, true);
                ack_due = None;
            }
            message = trips.next() => match message {
                None => break Ok(StreamEnd::Closed),
                Some(Err(status)) => break Err(status),
                Some(Ok(batch)) => {
                    let mut refused = None;
                    for trip in batch {
                        if let Err(error) = ingestor.add(trip).await {
                            refused = Some(error);
                            break;
                        }
                    }
                    // A refused call (permission, rate limit) still writes what it read before.
                    if let Some(error) = refused {
                        break Err(error.into_status());
                    }
                    // Chunks settled while the batch was read (to make room for the next one).
                    if acks && send(ingestor, false) {
                        ack_due = None;
                    }
                }
            },
        }
    };
    // Whatever ended the stream, what was read and is valid is written (and acknowledged).
    let written = ingestor.write_all().await.map_err(ServiceError::into_status);
    if acks {
        send(ingestor, true);
    }
    written?;
    outcome
}
