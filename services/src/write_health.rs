//! gRPC health of the write services follows whether the store can take writes.
//!
//! Every `[storage] space_check_interval_ms` the store is asked [`Store::writable`]: while the
//! disk is (nearly) full (or the store is read-only), `TelemetryService` and
//! `MaintenanceService`, whose every RPC writes, report NOT_SERVING; the read services and the
//! server as a whole stay SERVING, and reads keep working. `FleetService` serves reads and
//! writes, so it stays SERVING; its writes fail with RESOURCE_EXHAUSTED meanwhile. The check
//! also lets the store recover by itself once space is freed, so writes resume without a restart.
//!
//! [`Store::writable`]: crate::store::Store::writable

use std::time::Duration;

use brakeledger_proto::v1::{maintenance_service_server::MaintenanceServiceServer, telemetry_service_server::TelemetryServiceServer};
use tonic_health::server::HealthReporter;

use crate::grpc::{maintenance_api::MaintenanceApi, telemetry_api::TelemetryApi};
use crate::state::AppState;

/// Watches the store until the server stops.
pub async fn run(state: AppState, health: HealthReporter) {
    let interval = Duration::from_millis(state.serving.storage.space_check_interval_ms.max(10));
    let mut stopping = state.stopping.subscribe();
    let mut serving = true;
    loop {
        let check = state.blocking(|store| Ok(store.writable())).await;
        let writable = match check {
            Ok(Ok(())) => Ok(()),
            Ok(Err(error)) => Err(error.to_string()),
            Err(error) => Err(error.to_string()),
        };
        match (&writable, serving) {
            (Err(reason), true) => {
                tracing::warn!(%reason, "writes refused: write services report NOT_SERVING");
                health.set_not_serving::<TelemetryServiceServer<TelemetryApi>>().await;
                health.set_not_serving::<MaintenanceServiceServer<MaintenanceApi>>().await;
                serving = false;
            }
            (Ok(()), false) => {
                tracing::info!("writes accepted again: write services report SERVING");
                health.set_serving::<TelemetryServiceServer<TelemetryApi>>().await;
                health.set_serving::<MaintenanceServiceServer<MaintenanceApi>>().await;
                serving = true;
            }
            _ => {}
        }
        tokio::select! {
            _ = tokio::time::sleep(interval) => {}
            _ = async { let _ = stopping.wait_for(|s| *s).await; } => return,
        }
    }
}
