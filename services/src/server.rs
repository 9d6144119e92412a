//! The one server entry point: [`run`] serves every brakeledger service, gRPC health and
//! reflection on a listener until `shutdown` resolves, then drains in-flight calls (open
//! streams finish and get their reports), stops the forecast materialiser and flushes the store.

use std::future::Future;

use brakeledger_proto::v1::{
    fleet_service_server::FleetServiceServer, forecast_service_server::ForecastServiceServer,
    maintenance_service_server::MaintenanceServiceServer, telemetry_service_server::TelemetryServiceServer,
};
use tokio::net::TcpListener;

use crate::forecaster;
use crate::grpc::{fleet_api::FleetApi, forecast_api::ForecastApi, maintenance_api::MaintenanceApi, telemetry_api::TelemetryApi};
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
    /// The final flush failed.
    #[error("flush on shutdown: {0}")]
    Flush(#[from] crate::store::StoreError),
}

/// Serves on `listener` until `shutdown` resolves; returns after a clean drain and flush.
pub async fn run(listener: TcpListener, state: AppState, shutdown: impl Future<Output = ()> + Send) -> Result<(), ServerError> {
    let (health_reporter, health_service) = tonic_health::server::health_reporter();
    health_reporter.set_serving::<FleetServiceServer<FleetApi>>().await;
    health_reporter.set_serving::<TelemetryServiceServer<TelemetryApi>>().await;
    health_reporter.set_serving::<MaintenanceServiceServer<MaintenanceApi>>().await;
    health_reporter.set_serving::<ForecastServiceServer<ForecastApi>>().await;

    let reflection_v1 = tonic_reflection::server::Builder::configure()
        .register_encoded_file_descriptor_set(brakeledger_proto::FILE_DESCRIPTOR_SET)
        .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
        .build_v1()?;
    let reflection_v1alpha = tonic_reflection::server::Builder::configure()
        .register_encoded_file_descriptor_set(brakeledger_proto::FILE_DESCRIPTOR_SET)
        .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
        .build_v1alpha()?;

    let forecaster_task = tokio::spawn(forecaster::run(state.clone(), state.stopping.subscribe()));
    let stopping = std::sync::Arc::clone(&state.stopping);
    let shutdown = async move {
        shutdown.await;
        // Ends watch streams and the materialiser, so that draining can finish.
        stopping.send_replace(true);
    };

    let address = listener.local_addr().ok();
    tracing::info!(?address, token_required = state.access.requires_token(), "serving brakeledger.v1");
    let http2 = &state.serving.http2;
    let result = tonic::transport::Server::builder()
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
        .serve_with_incoming_shutdown(
            // No Nagle delay: small unary responses otherwise wait for the peer's delayed ACK.
            tonic::transport::server::TcpIncoming::from(listener).with_nodelay(Some(true)),
            shutdown,
        )
        .await;
    tracing::info!("stopped accepting calls; draining done, flushing the store");
    state.stopping.send_replace(true);
    let _ = forecaster_task.await;
    let store = std::sync::Arc::clone(&state.store);
    tokio::task::spawn_blocking(move || store.flush()).await.ok().transpose()?;
    result?;
    Ok(())
}
