//! The one server entry point: [`run`] serves every brakeledger service, gRPC health and
//! reflection on a listener until `shutdown` resolves, then drains in-flight calls (open
//! streams finish and get their reports), stops the forecast materialiser and flushes the store.

use std::future::Future;

use brakeledger_proto::v1::{
    backup_service_server::BackupServiceServer, fleet_service_server::FleetServiceServer, forecast_service_server::ForecastServiceServer,
    maintenance_service_server::MaintenanceServiceServer, telemetry_service_server::TelemetryServiceServer,
};
use tokio::net::TcpListener;

use crate::{drain, forecaster, write_health};
use crate::grpc::{backup_api::BackupApi, fleet_api::FleetApi, forecast_api::ForecastApi, maintenance_api::MaintenanceApi, telemetry_api::TelemetryApi};
use crate::state::AppState;

/// Failures that stop the server.
#[derive(Debug, thiserror::Error)]
pub enum ServerError {
    /// The transport failed.
    #[error("transport: {0}")]
    Transport(#[from] tonic::transport::Error),
    /// Reflection could not be built from the descriptors.
    #[error("reflection: {0}")]
    Reflection(#[from] tonic_reflection::server::Error),
}

/// Serves on `listener` until `shutdown` resolves; returns after a clean drain and flush.
pub async fn run(listener: TcpListener, state: AppState, shutdown: impl Future<Output = ()> + Send) -> Result<(), ServerError> {
    let (health_reporter, health_service) = tonic_health::server::health_reporter();
    health_reporter.set_serving::<FleetServiceServer<FleetApi>>().await;
    health_reporter.set_serving::<TelemetryServiceServer<TelemetryApi>>().await;
    health_reporter.set_serving::<MaintenanceServiceServer<MaintenanceApi>>().await;
    health_reporter.set_serving::<ForecastServiceServer<ForecastApi>>().await;
    health_reporter.set_serving::<BackupServiceServer<BackupApi>>().await;

    let reflection_v1 = tonic_reflection::server::Builder::configure()
        .register_encoded_file_descriptor_set(brakeledger_proto::FILE_DESCRIPTOR_SET)
        .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
        .build_v1()?;
    let reflection_v1alpha = tonic_reflection::server::Builder::configure()
        .register_encoded_file_descriptor_set(brakeledger_proto::FILE_DESCRIPTOR_SET)
        .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
        .build_v1alpha()?;

    let forecaster_task = tokio::spawn(forecaster::run(state.clone(), state.stopping.subscribe()));
    tokio::spawn(write_health::run(state.clone(), health_reporter.clone()));
    let drain_state = state.clone();
    let shutdown = async move {
        shutdown.await;
        // Ends watch streams and the materialiser, and schedules the ingest cutoff.
        drain::begin(&drain_state);
    };

    let address = listener.local_addr().ok();
    tracing::info!(?address, token_required = state.access.requires_token(), "serving brakeledger.v1");
    let http2 = &state.serving.http2;
    let serve = tonic::transport::Server::builder()
        // Flow control sized so that h2's budget for small DATA frames (half the connection
        // window) covers every stream window filled with small trip messages while ingest waits
        // for a disk flush; hyper's defaults made that budget run out and h2 answered with
        // GOAWAY ENHANCE_YOUR_CALM "too_many_data_frames". See `config::Http2Config`.
        .initial_stream_window_size(http2.stream_window_bytes)
        .initial_connection_window_size(http2.connection_window_bytes)
        .max_concurrent_streams(http2.max_concurrent_streams)
        // A window that adapts to the measured bandwidth-delay product would grow the stream
        // window past what the budget above assumes.
        .http2_adaptive_window(Some(false))
        .add_service(health_service)
        .add_service(reflection_v1)
        .add_service(reflection_v1alpha)
        .add_service(FleetServiceServer::with_interceptor(FleetApi::new(state.clone()), state.access.clone()))
        .add_service(TelemetryServiceServer::with_interceptor(TelemetryApi::new(state.clone()), state.access.clone()))
        .add_service(MaintenanceServiceServer::with_interceptor(MaintenanceApi::new(state.clone()), state.access.clone()))
        .add_service(ForecastServiceServer::with_interceptor(ForecastApi::new(state.clone()), state.access.clone()))
        .add_service(BackupServiceServer::with_interceptor(BackupApi::new(state.clone()), state.access.clone()))
        .serve_with_incoming_shutdown(
            // No Nagle delay: small unary responses otherwise wait for the peer's delayed ACK.
            tonic::transport::server::TcpIncoming::from(listener).with_nodelay(Some(true)),
            shutdown,
        );
    let result = drain::bounded(&state, serve).await;
    tracing::info!("stopped serving; flushing the store");
    state.stopping.send_replace(true);
    drain::cut_off_now(&state);
    let _ = forecaster_task.await;
    let store = std::sync::Arc::clone(&state.store);
    // Every acknowledged write was flushed before it was acknowledged; this last flush covers
    // derived data (forecasts), so its failure (for example a full disk) is logged, not fatal.
    match tokio::task::spawn_blocking(move || store.flush()).await {
        Ok(Ok(())) => tracing::info!("store flushed; stopped"),
        Ok(Err(error)) => tracing::error!(%error, "final flush failed; acknowledged data was already on disk"),
        Err(error) => tracing::error!(%error, "final flush task failed; acknowledged data was already on disk"),
    }
    result.transpose()?;
    Ok(())
}
