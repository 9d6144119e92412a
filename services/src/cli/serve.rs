//! `brakeledger serve`: settings, logging, signals, and the server.

use std::sync::Arc;

use anyhow::Context;
use tokio::net::TcpListener;

use crate::auth::AccessPolicy;
use crate::cli::ServeArgs;
use crate::config::{LogFormat, Settings};
use crate::server;
use crate::state::AppState;
use crate::store::sled_store::SledStore;

/// Sets up `tracing` output once for the process.
pub fn init_logging(format: LogFormat, filter: &str) {
    let filter = tracing_subscriber::EnvFilter::try_new(filter).unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info"));
    let builder = tracing_subscriber::fmt().with_env_filter(filter).with_writer(std::io::stderr);
    let _ = match format {
        LogFormat::Json => builder.json().try_init(),
        LogFormat::Text => builder.try_init(),
    };
}

/// Resolves when SIGINT or SIGTERM arrives.
pub async fn shutdown_signal() {
    let interrupt = tokio::signal::ctrl_c();
    #[cfg(unix)]
    {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut terminate) => {
                tokio::select! {
                    _ = interrupt => {}
                    _ = terminate.recv() => {}
                }
            }
            Err(_) => {
                let _ = interrupt.await;
            }
        }
    }
    #[cfg(not(unix))]
    {
        let _ = interrupt.await;
    }
    tracing::info!("shutdown signal received");
}

/// Runs the server until a signal.
pub async fn serve(args: ServeArgs) -> anyhow::Result<()> {
    let mut settings = Settings::load(args.config.as_deref(), |name| std::env::var(name).ok())?;
    if let Some(data) = args.data {
        settings.data_dir = data;
    }
    if let Some(listen) = args.listen {
        settings.listen = listen;
    }
    if args.json_logs {
        settings.log_format = LogFormat::Json;
    }
    init_logging(settings.log_format, &settings.log_filter);
    let data_dir = settings.data_dir.clone();
    let store = tokio::task::spawn_blocking(move || SledStore::open(&data_dir))
        .await?
        .with_context(|| format!("opening the database in {}", settings.data_dir.display()))?;
    let listener = TcpListener::bind(settings.listen).await.with_context(|| format!("listening on {}", settings.listen))?;
    // Tests and scripts read this line to learn the port when listening on :0.
    println!("brakeledger listening on {}", listener.local_addr()?);
    let access = AccessPolicy::with_tokens(settings.auth_tokens.clone());
    if !access.requires_token() && !settings.listen.ip().is_loopback() {
        tracing::warn!(listen = %settings.listen, "listening beyond loopback with no auth_tokens: any caller can read and write");
    }
    let state = AppState::new(Arc::new(store), settings.forecast.clone()).with_access(access).with_serving(settings.serving());
    server::run(listener, state, shutdown_signal()).await?;
    Ok(())
}
