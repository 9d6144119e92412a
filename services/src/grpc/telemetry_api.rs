//! `TelemetryService`: trip summaries from telematics integrations.
//!
//! Both RPCs feed an [`Ingestor`], which validates each trip, gathers valid ones into chunks and
//! writes a chunk while the next one is being read (at most one write in flight). The report is
//! sent only after the last chunk is flushed to disk.

use std::collections::HashMap;

use brakeledger_models::domain::FieldViolation;
use brakeledger_proto::v1 as pb;
use pb::telemetry_service_server::TelemetryService;
use tokio::task::JoinHandle;
use tokio_stream::StreamExt;
use tonic::{Request, Response, Status, Streaming};

use crate::convert::{check_id, now_ms, trip_record};
use crate::error::{ServiceError, ServiceResult};
use crate::state::AppState;
use crate::store::{IngestOutcome, StoreResult, TripRecord, VehicleRecord};

/// Trips per storage transaction.
pub const CHUNK_TRIPS: usize = 2000;
/// Largest PushTrips batch.
pub const MAX_BATCH_TRIPS: usize = 10_000;

/// Implements `brakeledger.v1.TelemetryService`.
pub struct TelemetryApi {
    state: AppState,
}

impl TelemetryApi {
    /// Handlers over shared state.
    pub fn new(state: AppState) -> Self {
        Self { state }
    }
}

/// Validates and stores trips of one call, and counts what became of them.
pub struct Ingestor {
    state: AppState,
    vehicles: HashMap<(String, String), Option<VehicleRecord>>,
    chunk: Vec<TripRecord>,
    in_flight: Option<JoinHandle<StoreResult<Vec<IngestOutcome>>>>,
    report: pb::IngestReport,
    now_ms: i64,
}

impl Ingestor {
    /// A fresh ingest call.
    pub fn new(state: AppState) -> Self {
        Self {
            state,
            vehicles: HashMap::new(),
            chunk: Vec::with_capacity(CHUNK_TRIPS),
            in_flight: None,
            report: pb::IngestReport::default(),
            now_ms: now_ms(),
        }
    }

    fn reject(&mut self, index: usize, trip_id: String, violations: Vec<FieldViolation>) {
        let mut iter = violations.into_iter();
        let Some(first) = iter.next() else { return };
        let others: Vec<String> = iter.map(|v| format!("{}: {}", v.field, v.reason)).collect();
        let reason = if others.is_empty() { first.reason } else { format!("{} (also {})", first.reason, others.join("; ")) };
        self.report.rejected.push(pb::Rejection { index: index as u64, trip_id, field: first.field, reason });
    }

    async fn vehicle(&mut self, fleet_id: &str, vehicle_id: &str) -> ServiceResult<Option<VehicleRecord>> {
        let key = (fleet_id.to_owned(), vehicle_id.to_owned());
        if let Some(found) = self.vehicles.get(&key) {
            return Ok(found.clone());
        }
        let (fleet, vehicle) = key.clone();
        let found = self.state.blocking(move |store| Ok(store.get_vehicle(&fleet, &vehicle)?)).await?;
        self.vehicles.insert(key, found.clone());
        Ok(found)
    }

    /// Takes the trip at position `index` of the call.
    pub async fn add(&mut self, index: usize, trip: pb::TripSummary) -> ServiceResult<()> {
        let ids: Vec<FieldViolation> = [("fleet_id", &trip.fleet_id), ("vehicle_id", &trip.vehicle_id)]
            .into_iter()
            .filter_map(|(field, value)| check_id(field, value).err())
            .collect();
        if !ids.is_empty() {
            self.reject(index, trip.trip_id, ids);
            return Ok(());
        }
        let Some(vehicle) = self.vehicle(&trip.fleet_id, &trip.vehicle_id).await? else {
            let reason = format!("vehicle '{}' is not registered in fleet '{}'", trip.vehicle_id, trip.fleet_id);
            self.reject(index, trip.trip_id, vec![FieldViolation::new("vehicle_id", reason)]);
            return Ok(());
        };
        let trip_id = trip.trip_id.clone();
        match trip_record(trip, &vehicle, self.now_ms) {
            Ok(record) => {
                self.chunk.push(record);
                if self.chunk.len() >= CHUNK_TRIPS {
                    self.write_chunk().await?;
                }
            }
            Err(violations) => self.reject(index, trip_id, violations),
        }
        Ok(())
    }

    async fn settle_in_flight(&mut self) -> ServiceResult<()> {
        if let Some(handle) = self.in_flight.take() {
            let outcomes = handle.await.map_err(|e| ServiceError::Internal(format!("ingest task failed: {e}")))??;
            for outcome in outcomes {
                match outcome {
                    IngestOutcome::Stored => self.report.accepted += 1,
                    IngestOutcome::Duplicate => self.report.duplicates += 1,
                }
            }
            self.state.wake_forecaster.notify_one();
        }
        Ok(())
    }

    async fn write_chunk(&mut self) -> ServiceResult<()> {
        self.settle_in_flight().await?;
        if self.chunk.is_empty() {
            return Ok(());
        }
        let chunk = std::mem::replace(&mut self.chunk, Vec::with_capacity(CHUNK_TRIPS));
        let store = std::sync::Arc::clone(&self.state.store);
        self.in_flight = Some(tokio::task::spawn_blocking(move || store.ingest_trips(&chunk)));
        Ok(())
    }

    /// Writes what is left and returns the report; every accepted trip is on disk.
    pub async fn finish(mut self) -> ServiceResult<pb::IngestReport> {
        self.write_chunk().await?;
        self.settle_in_flight().await?;
        Ok(self.report)
    }
}

#[tonic::async_trait]
impl TelemetryService for TelemetryApi {
    async fn stream_trips(&self, request: Request<Streaming<pb::TripSummary>>) -> Result<Response<pb::IngestReport>, Status> {
        let mut stream = request.into_inner();
        let mut ingestor = Ingestor::new(self.state.clone());
        let mut index = 0usize;
        while let Some(trip) = stream.next().await {
            ingestor.add(index, trip?).await?;
            index += 1;
        }
        let report = ingestor.finish().await?;
        tracing::info!(trips = index, accepted = report.accepted, duplicates = report.duplicates, rejected = report.rejected.len(), "trip stream ingested");
        Ok(Response::new(report))
    }

    async fn push_trips(&self, request: Request<pb::PushTripsRequest>) -> Result<Response<pb::IngestReport>, Status> {
        let trips = request.into_inner().trips;
        if trips.len() > MAX_BATCH_TRIPS {
            return Err(ServiceError::invalid(
                "trips",
                format!("a batch holds at most {MAX_BATCH_TRIPS} trips ({} sent); use StreamTrips for more", trips.len()),
            )
            .into());
        }
        let mut ingestor = Ingestor::new(self.state.clone());
        for (index, trip) in trips.into_iter().enumerate() {
            ingestor.add(index, trip).await?;
        }
        Ok(Response::new(ingestor.finish().await?))
    }
}
