//! Prometheus metrics: what the process counts, the request layer that counts every gRPC call,
//! and the text exposition served on its own listener (`[metrics] listen`).
//!
//! | metric | labels | what |
//! |---|---|---|
//! | `brakeledger_requests_total` | rpc, code | finished gRPC calls by final status |
//! | `brakeledger_request_duration_seconds` | rpc | call latency until the final status (streams: their whole life) |
//! | `brakeledger_trips_total` | outcome | trips stored, duplicate or refused |
//! | `brakeledger_trips_refused_total` | field | refused trips by the first field at fault |
//! | `brakeledger_workshop_records_total` | kind, outcome | inspections and replacements stored or duplicate |
//! | `brakeledger_auth_refusals_total` | reason | calls refused by access control |
//! | `brakeledger_forecast_stale_vehicles` | | vehicles waiting for their forecasts to be recomputed |
//! | `brakeledger_forecast_refresh_lag_seconds` | | age of the oldest write not yet reflected in forecasts |
//! | `brakeledger_forecast_refresh_seconds` | | duration of forecast refresh passes |
//! | `brakeledger_store_bytes` | | size of the store on disk |
//! | `brakeledger_forecast_cache_lookups_total` | outcome | stored-forecast reads: `hit` in the by-vehicle cache, `miss_kept` (read from the store and kept), `miss_not_kept` (a write to its stripe overlapped the read) |
//! | `brakeledger_heap_bytes` | kind | the allocator's counts at the scrape: `allocated`, `active`, `resident`, `metadata`, `retained` |
//!
//! The metrics are process-wide (one registry), as Prometheus scrapes a process.

use std::future::Future;
use std::pin::Pin;
use std::sync::LazyLock;
use std::task::{Context, Poll};
use std::time::Instant;

use prometheus_client::encoding::EncodeLabelSet;
use prometheus_client::metrics::counter::Counter;
use prometheus_client::metrics::family::Family;
use prometheus_client::metrics::gauge::Gauge;
use prometheus_client::metrics::histogram::{exponential_buckets, Histogram};
use prometheus_client::registry::Registry;


#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
struct CallLabels {
    rpc: String,
    code: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
struct RpcLabels {
    rpc: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
struct OutcomeLabels {
    outcome: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
struct FieldLabels {
    field: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
struct RecordLabels {
    kind: String,
    outcome: String,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
struct ReasonLabels {
    reason: String,
}

struct Metrics {
    registry: Registry,
    requests: Family<CallLabels, Counter>,
    latency: Family<RpcLabels, Histogram>,
    trips: Family<OutcomeLabels, Counter>,
    trips_refused: Family<FieldLabels, Counter>,
    workshop_records: Family<RecordLabels, Counter>,
    auth_refusals: Family<ReasonLabels, Counter>,
    stale_vehicles: Gauge,
    refresh_lag_seconds: Gauge<f64, std::sync::atomic::AtomicU64>,
    refresh_seconds: Histogram,
    store_bytes: Gauge,
    /// `brakeledger_forecast_cache_lookups_total` by [`CacheLookup`], in its order: made once
    /// at registration, since every GetVehicleForecast counts one.
    forecast_cache: [Counter; 3],
    heap_bytes: Family<KindLabels, Gauge>,
}

#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
struct KindLabels {
    kind: String,
}

/// How a read of a vehicle's stored forecasts went in the by-vehicle cache.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CacheLookup {
    /// Served from the cache.
    Hit,
    /// Read from the store and kept.
    MissKept,
    /// Read from the store and not kept, because a write to its stripe overlapped the read
    /// (or the value was too large to keep).
    MissNotKept,
}

impl CacheLookup {
    /// Every outcome, in declaration order (= `as usize`).
    const ALL: [CacheLookup; 3] = [CacheLookup::Hit, CacheLookup::MissKept, CacheLookup::MissNotKept];

    /// The metric's label.
    fn label(self) -> &'static str {
        match self {
            CacheLookup::Hit => "hit",
            CacheLookup::MissKept => "miss_kept",
            CacheLookup::MissNotKept => "miss_not_kept",
        }
    }
}

static METRICS: LazyLock<Metrics> = LazyLock::new(|| {
    let mut registry = Registry::default();
    let requests = Family::<CallLabels, Counter>::default();
    registry.register("brakeledger_requests", "Finished gRPC calls by RPC and final status code", requests.clone());
    let latency = Family::<RpcLabels, Histogram>::new_with_constructor(|| Histogram::new(exponential_buckets(0.000_25, 2.0, 18)));
    registry.register("brakeledger_request_duration_seconds", "gRPC call latency until the final status, seconds", latency.clone());
    let trips = Family::<OutcomeLabels, Counter>::default();
    registry.register("brakeledger_trips", "Trips by outcome: stored, duplicate, refused", trips.clone());
    let trips_refused = Family::<FieldLabels, Counter>::default();
    registry.register("brakeledger_trips_refused", "Refused trips by the first field at fault", trips_refused.clone());
    let workshop_records = Family::<RecordLabels, Counter>::default();
    registry.register("brakeledger_workshop_records", "Inspections and replacements by outcome", workshop_records.clone());
    let auth_refusals = Family::<ReasonLabels, Counter>::default();
    registry.register("brakeledger_auth_refusals", "Calls refused by access control, by reason", auth_refusals.clone());
    let stale_vehicles = Gauge::default();
    registry.register("brakeledger_forecast_stale_vehicles", "Vehicles whose forecasts wait to be recomputed", stale_vehicles.clone());
    let refresh_lag_seconds = Gauge::<f64, std::sync::atomic::AtomicU64>::default();
    registry.register("brakeledger_forecast_refresh_lag_seconds", "Age of the oldest write not yet reflected in forecasts, seconds", refresh_lag_seconds.clone());
    let refresh_seconds = Histogram::new(exponential_buckets(0.001, 2.0, 18));
    registry.register("brakeledger_forecast_refresh_seconds", "Duration of forecast refresh passes, seconds", refresh_seconds.clone());
    let store_bytes = Gauge::default();
    registry.register("brakeledger_store_bytes", "Size of the store on disk, bytes", store_bytes.clone());
    let forecast_cache = Family::<OutcomeLabels, Counter>::default();
    registry.register("brakeledger_forecast_cache_lookups", "Stored-forecast reads by outcome in the by-vehicle cache: hit, miss_kept, miss_not_kept", forecast_cache.clone());
    let forecast_cache = CacheLookup::ALL.map(|lookup| forecast_cache.get_or_create(&OutcomeLabels { outcome: lookup.label().to_owned() }).clone());
    let heap_bytes = Family::<KindLabels, Gauge>::default();
    registry.register("brakeledger_heap_bytes", "The allocator's counts of the heap at the scrape, bytes: allocated, active, resident, metadata, retained", heap_bytes.clone());
    Metrics { registry, requests, latency, trips, trips_refused, workshop_records, auth_refusals, stale_vehicles, refresh_lag_seconds, refresh_seconds, store_bytes, forecast_cache, heap_bytes }
});

/// The metrics in the Prometheus text format.
pub fn render() -> String {
    if let Some(heap) = crate::process::heap_bytes() {
        let kinds = [("allocated", heap.allocated_bytes), ("active", heap.active_bytes), ("resident", heap.resident_bytes), ("metadata", heap.metadata_bytes), ("retained", heap.retained_bytes)];
        for (kind, bytes) in kinds {
            METRICS.heap_bytes.get_or_create(&KindLabels { kind: kind.to_owned() }).set(bytes.min(i64::MAX as u64) as i64);
        }
    }
    let mut out = String::new();
    // Writing to a String cannot fail.
    let _ = prometheus_client::encoding::text::encode(&mut out, &METRICS.registry);
    out
}

/// Counts a refusal by access control with a named reason.
pub fn auth_refused_reason(reason: &str) {
    METRICS.auth_refusals.get_or_create(&ReasonLabels { reason: reason.to_owned() }).inc();
}

/// Counts ingested trips.
pub fn trips(stored: u64, duplicates: u64) {
    METRICS.trips.get_or_create(&OutcomeLabels { outcome: "stored".into() }).inc_by(stored);
    METRICS.trips.get_or_create(&OutcomeLabels { outcome: "duplicate".into() }).inc_by(duplicates);
}

/// Counts one refused trip by the first field at fault.
pub fn trip_refused(field: &str) {
    METRICS.trips.get_or_create(&OutcomeLabels { outcome: "refused".into() }).inc();
    // Field paths are bounded by the contract; indices are dropped to keep the label set small.
    let field = field.split('[').next().unwrap_or(field);
    METRICS.trips_refused.get_or_create(&FieldLabels { field: field.to_owned() }).inc();
}

/// Counts an inspection or replacement.
pub fn workshop_record(kind: &str, stored: bool) {
    let outcome = if stored { "stored" } else { "duplicate" };
    METRICS.workshop_records.get_or_create(&RecordLabels { kind: kind.to_owned(), outcome: outcome.to_owned() }).inc();
}

/// Records the forecast queue: stale vehicles and the age of the oldest unreflected write.
pub fn forecast_queue(stale_vehicles: u64, lag_seconds: f64) {
    METRICS.stale_vehicles.set(stale_vehicles.min(i64::MAX as u64) as i64);
    METRICS.refresh_lag_seconds.set(lag_seconds);
}

/// Records one forecast refresh pass.
pub fn forecast_refresh(seconds: f64) {
    METRICS.refresh_seconds.observe(seconds);
}

/// Counts one read of a vehicle's stored forecasts by how the by-vehicle cache served it.
pub fn forecast_cache_lookup(lookup: CacheLookup) {
    METRICS.forecast_cache[lookup as usize].inc();
}

/// Records the store's size on disk.
pub fn store_bytes(bytes: u64) {
    METRICS.store_bytes.set(bytes.min(i64::MAX as u64) as i64);
}

fn finished(rpc: &str, code: &str, started: Instant) {
    METRICS.requests.get_or_create(&CallLabels { rpc: rpc.to_owned(), code: code.to_owned() }).inc();
    METRICS.latency.get_or_create(&RpcLabels { rpc: rpc.to_owned() }).observe(started.elapsed().as_secs_f64());
}

/// The name of a gRPC status code as a metric label.
fn code_name(value: &[u8]) -> String {
    let number = std::str::from_utf8(value).ok().and_then(|s| s.trim().parse::<i32>().ok()).unwrap_or(2);
    format!("{:?}", tonic::Code::from_i32(number))
}

/// Tower layer that counts every call the server answers (requests and latency by RPC and
/// final status). Reflection and health are counted too.
#[derive(Debug, Clone, Copy, Default)]
pub struct RequestMetricsLayer;

impl<S> tower_layer::Layer<S> for RequestMetricsLayer {
    type Service = RequestMetrics<S>;

    fn layer(&self, inner: S) -> Self::Service {
        RequestMetrics { inner }
    }
}

/// The service [`RequestMetricsLayer`] wraps around the server's routes.
#[derive(Debug, Clone)]
pub struct RequestMetrics<S> {
    inner: S,
}

impl<S, B> tower_service::Service<http::Request<B>> for RequestMetrics<S>
where
    S: tower_service::Service<http::Request<B>, Response = http::Response<tonic::body::Body>>,
    S::Future: Send + 'static,
{
    type Response = http::Response<tonic::body::Body>;
    type Error = S::Error;
    type Future = Pin<Box<dyn Future<Output = Result<Self::Response, Self::Error>> + Send>>;

    fn poll_ready(&mut self, cx: &mut Context<'_>) -> Poll<Result<(), Self::Error>> {
        self.inner.poll_ready(cx)
    }

    fn call(&mut self, request: http::Request<B>) -> Self::Future {
        let rpc = request.uri().path().trim_start_matches('/').to_owned();
        let started = Instant::now();
        // One span per call; the access interceptor and the handlers record the token's id
        // (never the token) and the fleet into it.
        let span = tracing::info_span!("grpc", rpc = %rpc, token_id = tracing::field::Empty, fleet_id = tracing::field::Empty);
        let response = {
            let _entered = span.enter();
            self.inner.call(request)
        };
        Box::pin(tracing::Instrument::instrument(async move {
            let response = response.await?;
            let (parts, body) = response.into_parts();
            // A call that fails before its first message answers with the status in headers.
            if let Some(code) = parts.headers.get("grpc-status") {
                finished(&rpc, &code_name(code.as_bytes()), started);
                return Ok(http::Response::from_parts(parts, body));
            }
            let observed = ObservedBody { inner: body, rpc, started, recorded: false };
            Ok(http::Response::from_parts(parts, tonic::body::Body::new(observed)))
        }, span))
    }
}

/// A response body that records the call when its trailers (the final status) pass.
struct ObservedBody {
    inner: tonic::body::Body,
    rpc: String,
    started: Instant,
    recorded: bool,
}

impl http_body::Body for ObservedBody {
    type Data = bytes::Bytes;
    type Error = tonic::Status;

    fn poll_frame(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<Result<http_body::Frame<Self::Data>, Self::Error>>> {
        let polled = Pin::new(&mut self.inner).poll_frame(cx);
        if let Poll::Ready(Some(Ok(frame))) = &polled {
            if let Some(code) = frame.trailers_ref().and_then(|t| t.get("grpc-status")) {
                let code = code_name(code.as_bytes());
                finished(&self.rpc, &code, self.started);
                self.recorded = true;
            }
        }
        polled
    }

    fn is_end_stream(&self) -> bool {
        self.inner.is_end_stream()
    }

    fn size_hint(&self) -> http_body::SizeHint {
        self.inner.size_hint()
    }
}

impl Drop for ObservedBody {
    fn drop(&mut self) {
        if !self.recorded {
            // The client went away before the final status.
            finished(&self.rpc, "Cancelled", self.started);
        }
    }
}

/// Serves `GET /metrics` on `listener` until `shutdown` resolves.
pub async fn serve(listener: tokio::net::TcpListener, shutdown: impl Future<Output = ()> + Send + 'static) -> std::io::Result<()> {
    let app = axum::Router::new().route(
        "/metrics",
        axum::routing::get(|| async { ([(http::header::CONTENT_TYPE, "text/plain; version=0.0.4; charset=utf-8")], render()) }),
    );
    axum::serve(listener, app).with_graceful_shutdown(shutdown).await
}
