//! The one server entry point: [`run`] serves every brakeledger service, gRPC health and
//! reflection (as gRPC and as gRPC-Web) on a listener until `shutdown` resolves, then drains in-flight calls (open
//! streams finish and get their reports), stops the forecast materialiser and flushes the store.

use std::future::Future;

use brakeledger_proto::v1::{
    access_service_server::AccessServiceServer, backup_service_server::BackupServiceServer, fleet_service_server::FleetServiceServer, forecast_service_server::ForecastServiceServer,
    maintenance_service_server::MaintenanceServiceServer, telemetry_service_server::TelemetryServiceServer,
};
use tokio::net::TcpListener;

use crate::{drain, forecaster, write_health};
use crate::grpc::{access_api::AccessApi, backup_api::BackupApi, fleet_api::FleetApi, forecast_api::ForecastApi, maintenance_api::MaintenanceApi, telemetry_api::TelemetryApi};
use crate::state::AppState;

/// Failures that stop the server.
#[derive(Debug, thiserror::Error)]
pub enum ServerError {
    /// The transport failed.
    #[error("transport: {0}")]
    Transport(#[from] tonic::transport::Error),
    /// A listener could not be bound.
    #[error("binding {address}: {source}")]
    Bind {
        /// The address.
        address: std::net::SocketAddr,
        /// Why.
        source: std::io::Error,
    },
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
    health_reporter.set_serving::<AccessServiceServer<AccessApi>>().await;
    health_reporter.set_serving::<BackupServiceServer<BackupApi>>().await;

    let reflection_v1 = tonic_reflection::server::Builder::configure()
        .register_encoded_file_descriptor_set(brakeledger_proto::FILE_DESCRIPTOR_SET)
        .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
        .build_v1()?;
    let reflection_v1alpha = tonic_reflection::server::Builder::configure()
        .register_encoded_file_descriptor_set(brakeledger_proto::FILE_DESCRIPTOR_SET)
        .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
        .build_v1alpha()?;

    if let Some(address) = state.serving.health.listen {
        let health_listener = TcpListener::bind(address).await.map_err(|source| ServerError::Bind { address, source })?;
        tracing::info!(address = ?health_listener.local_addr().ok(), "plain-text gRPC health listener for probes");
        let mut stopping = state.stopping.subscribe();
        let health_only = health_service.clone();
        tokio::spawn(async move {
            let stopped = async move {
                let _ = stopping.wait_for(|stop| *stop).await;
            };
            let served = tonic::transport::Server::builder()
                .add_service(health_only)
                .serve_with_incoming_shutdown(tonic::transport::server::TcpIncoming::from(health_listener), stopped)
                .await;
            if let Err(error) = served {
                tracing::error!(%error, "health listener failed");
            }
        });
    }

    let forecaster_task = tokio::spawn(forecaster::run(state.clone(), state.stopping.subscribe()));
    tokio::spawn(write_health::run(state.clone(), health_reporter.clone()));
    tokio::spawn(sample_gauges(state.clone()));
    let drain_state = state.clone();
    let shutdown = async move {
        shutdown.await;
        // Ends watch streams and the materialiser, and schedules the ingest cutoff.
        drain::begin(&drain_state);
    };

    let address = listener.local_addr().ok();
    tracing::info!(?address, token_required = state.access.requires_token(), tls = state.tls.is_some(), "serving brakeledger.v1");
    let http2 = &state.serving.http2;
    let limits = &state.serving.limits;
    let (max_in, max_out) = (limits.max_request_bytes, limits.max_response_bytes);
    let mut builder = tonic::transport::Server::builder();
    if limits.max_call_seconds > 0 {
        // A client's shorter grpc-timeout is honoured by tonic in any case.
        builder = builder.timeout(std::time::Duration::from_secs(limits.max_call_seconds));
    }
    let serve = builder
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
        // gRPC-Web (HTTP/1.1 or HTTP/2, binary or base64 text) for dashboards in a browser,
        // translated to gRPC before the metrics layer, so calls are counted alike.
        .accept_http1(true)
        .layer(tonic_web::GrpcWebLayer::new())
        .layer(crate::metrics::RequestMetricsLayer)
        .add_service(health_service)
        .add_service(reflection_v1)
        .add_service(reflection_v1alpha)
        .add_service(tonic::service::interceptor::InterceptedService::new(FleetServiceServer::new(FleetApi::new(state.clone())).max_decoding_message_size(max_in).max_encoding_message_size(max_out), state.access.clone()))
        .add_service(tonic::service::interceptor::InterceptedService::new(TelemetryServiceServer::new(TelemetryApi::new(state.clone())).max_decoding_message_size(max_in).max_encoding_message_size(max_out), state.access.clone()))
        .add_service(tonic::service::interceptor::InterceptedService::new(MaintenanceServiceServer::new(MaintenanceApi::new(state.clone())).max_decoding_message_size(max_in).max_encoding_message_size(max_out), state.access.clone()))
        .add_service(tonic::service::interceptor::InterceptedService::new(ForecastServiceServer::new(ForecastApi::new(state.clone())).max_decoding_message_size(max_in).max_encoding_message_size(max_out), state.access.clone()))
        .add_service(tonic::service::interceptor::InterceptedService::new(
            AccessServiceServer::new(AccessApi::new(state.clone())).max_decoding_message_size(max_in).max_encoding_message_size(max_out),
            state.access.clone(),
        ))
        .add_service(tonic::service::interceptor::InterceptedService::new(
            BackupServiceServer::new(BackupApi::new(state.clone())).max_encoding_message_size(max_out),
            state.access.clone(),
        ))
        ;
    let serve: std::pin::Pin<Box<dyn Future<Output = Result<(), tonic::transport::Error>> + Send>> = match state.tls.clone() {
        Some(tls) => Box::pin(serve.serve_with_incoming_shutdown(crate::tls::incoming(listener, tls), shutdown)),
        // No Nagle delay: small unary responses otherwise wait for the peer's delayed ACK.
        None => Box::pin(serve.serve_with_incoming_shutdown(tonic::transport::server::TcpIncoming::from(listener).with_nodelay(Some(true)), shutdown)),
    };
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

/// Every few seconds, the gauges that are read from the store: forecast queue and store size.
async fn sample_gauges(state: AppState) {
    let mut stopping = state.stopping.subscribe();
    let mut pending_since: Option<std::time::Instant> = None;
    loop {
        let store = std::sync::Arc::clone(&state.store);
        if let Ok(Ok((stale, bytes))) = tokio::task::spawn_blocking(move || -> crate::store::StoreResult<(u64, u64)> {
            Ok((store.count_all_stale()?, store.size_on_disk()?))
        })
        .await
        {
            pending_since = if stale == 0 { None } else { pending_since.or_else(|| Some(std::time::Instant::now())) };
            crate::metrics::forecast_queue(stale, pending_since.map_or(0.0, |since| since.elapsed().as_secs_f64()));
            crate::metrics::store_bytes(bytes);
        }
        tokio::select! {
            _ = stopping.wait_for(|stop| *stop) => return,
            _ = tokio::time::sleep(std::time::Duration::from_secs(2)) => {}
        }
    }
}
