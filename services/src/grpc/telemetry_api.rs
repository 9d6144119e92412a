//! `TelemetryService`: trip summaries from telematics integrations.
//!
//! All three RPCs feed an [`Ingestor`](super::ingest::Ingestor) (validation, chunked writes, at
//! most two in flight, written in the order received). PushTrips and StreamTrips answer with one report after the last
//! chunk is flushed to disk; IngestTrips acknowledges each chunk as it reaches disk. At
//! shutdown, streams still open at the drain deadline end with UNAVAILABLE after writing what
//! they had read.

use brakeledger_proto::v1 as pb;
use pb::telemetry_service_server::TelemetryService;
use tokio::sync::mpsc;
use tokio_stream::wrappers::ReceiverStream;
use tokio_stream::StreamExt;
use tonic::{Request, Response, Status, Streaming};

use super::ingest::{drive, Ingestor, StreamEnd};
use crate::auth::{Caller, Permission};
use crate::error::ServiceError;
use crate::state::AppState;

/// Largest PushTrips batch.
pub const MAX_BATCH_TRIPS: usize = 10_000;

/// Acks buffered per IngestTrips call before the call waits for its client to read them.
const ACK_QUEUE: usize = 16;

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

/// The status of a stream ended by the shutdown drain deadline.
fn cut_off(ingestor: &Ingestor) -> Status {
    tracing::warn!(summary = %ingestor.summary(), "ingest stream ended by shutdown");
    ServiceError::ShuttingDown(format!("the server is shutting down and ended this stream: {}", ingestor.summary())).into_status()
}

#[tonic::async_trait]
impl TelemetryService for TelemetryApi {
    async fn stream_trips(&self, request: Request<Streaming<pb::TripSummary>>) -> Result<Response<pb::IngestReport>, Status> {
        let caller = Caller::of(&request)?;
        let trips = request.into_inner().map(|trip| trip.map(|t| vec![t]));
        let mut ingestor = Ingestor::new(self.state.clone(), caller);
        if let StreamEnd::Cutoff = drive(&mut ingestor, trips, false, |_| {}).await? {
            return Err(cut_off(&ingestor));
        }
        let received = ingestor.received();
        let report = ingestor.finish().await?;
        tracing::info!(trips = received, accepted = report.accepted, duplicates = report.duplicates, rejected = report.rejected_count, "trip stream ingested");
        Ok(Response::new(report))
    }

    async fn push_trips(&self, request: Request<pb::PushTripsRequest>) -> Result<Response<pb::IngestReport>, Status> {
        let caller = Caller::of(&request)?;
        let trips = request.into_inner().trips;
        // The whole batch is checked before anything is stored: refused as a whole or not at all.
        for trip in &trips {
            caller.require(&trip.fleet_id, Permission::WriteTrips)?;
        }
        if trips.len() > MAX_BATCH_TRIPS {
            return Err(ServiceError::invalid(
                "trips",
                format!("a batch holds at most {MAX_BATCH_TRIPS} trips ({} sent); use StreamTrips or IngestTrips for more", trips.len()),
            )
            .into());
        }
        self.state.limiter.take(&caller.token_id, trips.len() as u64)?;
        let mut ingestor = Ingestor::new(self.state.clone(), caller).with_rate_taken();
        for trip in trips {
            ingestor.add(trip).await?;
        }
        Ok(Response::new(ingestor.finish().await?))
    }

    type IngestTripsStream = ReceiverStream<Result<pb::IngestAck, Status>>;

    async fn ingest_trips(&self, request: Request<Streaming<pb::IngestTripsRequest>>) -> Result<Response<Self::IngestTripsStream>, Status> {
        let caller = Caller::of(&request)?;
        let trips = request.into_inner().map(|message| message.map(|m| m.trips));
        let (sender, receiver) = mpsc::channel(ACK_QUEUE);
        let state = self.state.clone();
        tokio::spawn(async move {
            let mut ingestor = Ingestor::new(state, caller);
            let acks = sender.clone();
            let end = drive(&mut ingestor, trips, true, move |ack| {
                // A client that stops reading acks is still written for; a full queue drops
                // the intermediate ack (the next one carries the totals).
                let _ = acks.try_send(Ok(ack));
            })
            .await;
            let last = match end {
                Ok(StreamEnd::Closed) => {
                    tracing::info!(summary = %ingestor.summary(), "acknowledged trip stream ingested");
                    return;
                }
                Ok(StreamEnd::Cutoff) => cut_off(&ingestor),
                Err(status) => status,
            };
            let _ = sender.send(Err(last)).await;
        });
        Ok(Response::new(ReceiverStream::new(receiver)))
    }
}
