//! Shared state handed to every gRPC handler and background task.

use std::sync::Arc;

use tokio::sync::{broadcast, watch, Notify};

use crate::auth::{AccessPolicy, Caller, Role};
use crate::config::{ForecastConfig, ServingConfig};
use crate::error::{ServiceError, ServiceResult};
use crate::limits::IngestLimiter;
use crate::store::{AuditRecord, Store, VehicleForecasts, VehicleRecord};

/// A change of one vehicle's materialised forecasts, for WatchDue streams.
#[derive(Debug, Clone)]
pub struct ForecastChange {
    /// The forecasts before the change (`None` when there were none).
    pub before: Option<Arc<VehicleForecasts>>,
    /// The forecasts after the change.
    pub after: Arc<VehicleForecasts>,
}

/// What handlers share.
#[derive(Clone)]
pub struct AppState {
    /// The storage engine.
    pub store: Arc<dyn Store>,
    /// Forecast settings.
    pub forecast: ForecastConfig,
    /// Wakes the forecast materialiser after writes.
    pub wake_forecaster: Arc<Notify>,
    /// Forecast changes, published by the materialiser.
    pub changes: broadcast::Sender<ForecastChange>,
    /// Who may call the brakeledger services.
    pub access: AccessPolicy,
    /// Turns true when the server begins to shut down; long-lived streams and background
    /// tasks end when they see it.
    pub stopping: Arc<watch::Sender<bool>>,
    /// Turns true when open ingest streams must end: the shutdown drain deadline passed (or a
    /// second signal arrived). Streams write what they have read, then end with UNAVAILABLE.
    pub ingest_cutoff: Arc<watch::Sender<bool>>,
    /// HTTP/2, ingest, shutdown, queue and limit settings.
    pub serving: ServingConfig,
    /// Per-token ingest rate limits.
    pub limiter: Arc<IngestLimiter>,
    /// TLS of the gRPC listener; `None` serves plain HTTP/2.
    pub tls: Option<Arc<crate::tls::TlsReloader>>,
}

impl AppState {
    /// State around a store.
    pub fn new(store: Arc<dyn Store>, forecast: ForecastConfig) -> Self {
        let (changes, _) = broadcast::channel(4096);
        let (stopping, _) = watch::channel(false);
        Self {
            store,
            forecast,
            wake_forecaster: Arc::new(Notify::new()),
            changes,
            access: AccessPolicy::open(),
            stopping: Arc::new(stopping),
            ingest_cutoff: Arc::new(watch::channel(false).0),
            limiter: Arc::new(IngestLimiter::new(&ServingConfig::default().limits)),
            serving: ServingConfig::default(),
            tls: None,
        }
    }

    /// The same state serving TLS.
    pub fn with_tls(mut self, tls: Arc<crate::tls::TlsReloader>) -> Self {
        self.tls = Some(tls);
        self
    }

    /// The same state with reliability settings (the change feed is sized from them).
    pub fn with_serving(mut self, serving: ServingConfig) -> Self {
        let (changes, _) = broadcast::channel(serving.storage.change_feed_capacity.max(1));
        self.changes = changes;
        self.limiter = Arc::new(IngestLimiter::new(&serving.limits));
        self.serving = serving;
        self
    }

    /// The same state with an access policy.
    pub fn with_access(mut self, access: AccessPolicy) -> Self {
        self.access = access;
        self
    }

    /// Runs a short read of a few keys: inline when the engine's reads are cheap
    /// ([`Store::reads_inline`], sled), saving the hand-off to the blocking pool and back that
    /// costs more than the reads; on the blocking pool otherwise. Only for bounded work (a
    /// handful of keyed reads), never for scans or computation.
    pub async fn short_read<T, F>(&self, work: F) -> ServiceResult<T>
    where
        T: Send + 'static,
        F: FnOnce(&dyn Store) -> ServiceResult<T> + Send + 'static,
    {
        if self.store.reads_inline() {
            work(self.store.as_ref())
        } else {
            self.blocking(work).await
        }
    }

    /// Runs blocking store work off the async runtime.
    pub async fn blocking<T, F>(&self, work: F) -> ServiceResult<T>
    where
        T: Send + 'static,
        F: FnOnce(&dyn Store) -> ServiceResult<T> + Send + 'static,
    {
        let store = Arc::clone(&self.store);
        tokio::task::spawn_blocking(move || work(store.as_ref()))
            .await
            .map_err(|e| ServiceError::Internal(format!("background task failed: {e}")))?
    }

    /// Appends a write to the fleet's audit trail when the caller's role is audited (workshop,
    /// fleet-admin, operator; ingest writes are counted in metrics instead). The write itself
    /// is already durable: a failure here is logged, not returned, so a client never resends a
    /// write that was stored.
    pub async fn audit(&self, caller: &Caller, fleet_id: &str, action: &str, subject: String) {
        if !matches!(caller.role, Role::Workshop | Role::FleetAdmin | Role::Operator) {
            return;
        }
        let entry = AuditRecord {
            at_ms: crate::convert::now_ms(),
            fleet_id: fleet_id.to_owned(),
            token_id: caller.token_id.clone(),
            role: caller.role,
            action: action.to_owned(),
            subject,
        };
        if let Err(error) = self.blocking(move |store| Ok(store.append_audit(&entry)?)).await {
            tracing::error!(%error, fleet_id, action, "could not append to the audit trail");
        }
    }

    /// Reads a vehicle or fails with NOT_FOUND.
    pub async fn vehicle(&self, fleet_id: &str, vehicle_id: &str) -> ServiceResult<VehicleRecord> {
        let (fleet, vehicle) = (fleet_id.to_owned(), vehicle_id.to_owned());
        self.blocking(move |store| {
            store.get_vehicle(&fleet, &vehicle)?.ok_or_else(|| {
                ServiceError::NotFound(format!("vehicle '{vehicle}' is not registered in fleet '{fleet}'"))
            })
        })
        .await
    }
}
