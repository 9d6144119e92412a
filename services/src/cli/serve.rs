//! `brakeledger serve`: settings, logging, signals, and the server.

use std::sync::Arc;

use anyhow::Context;
use tokio::net::TcpListener;

use crate::auth::AccessPolicy;
use crate::cli::ServeArgs;
use crate::config::{LogFormat, Settings};
use crate::server;
use crate::state::AppState;
use crate::store::sled_store::{SledStore, StoreOptions};

/// Sets up `tracing` output once for the process.
pub fn init_logging(format: LogFormat, filter: &str) {
    let filter = tracing_subscriber::EnvFilter::try_new(filter).unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info"));
    let builder = tracing_subscriber::fmt().with_env_filter(filter).with_writer(std::io::stderr);
    let _ = match format {
        LogFormat::Json => builder.json().try_init(),
        LogFormat::Text => builder.try_init(),
    };
}

/// SIGINT and SIGTERM, installed once so that a second signal can be told from the first.
pub struct Signals {
    #[cfg(unix)]
    terminate: Option<tokio::signal::unix::Signal>,
}

impl Signals {
    /// Starts listening (before the server starts, so no signal is missed).
    pub fn install() -> Self {
        #[cfg(unix)]
        {
            let terminate = tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()).ok();
            Self { terminate }
        }
        #[cfg(not(unix))]
        {
            Self {}
        }
    }

    /// Resolves at the next SIGINT or SIGTERM.
    pub async fn next(&mut self) {
        #[cfg(unix)]
        if let Some(terminate) = self.terminate.as_mut() {
            tokio::select! {
                _ = tokio::signal::ctrl_c() => {}
                _ = terminate.recv() => {}
            }
            return;
        }
        let _ = tokio::signal::ctrl_c().await;
    }
}

/// Resolves at the first signal; a second signal then forces a prompt exit: open ingest
/// streams are ended, the store is flushed (everything acknowledged already was), and the
/// process exits 0 without waiting for the drain deadline.
pub async fn shutdown_signal(mut signals: Signals, state: AppState) {
    signals.next().await;
    tracing::info!("shutdown signal received; a second signal exits at once");
    tokio::spawn(async move {
        signals.next().await;
        tracing::warn!("second shutdown signal: ending open streams, flushing the store and exiting now");
        crate::drain::cut_off_now(&state);
        let store = Arc::clone(&state.store);
        match tokio::task::spawn_blocking(move || store.flush()).await {
            Ok(Ok(())) => tracing::info!("store flushed; exiting"),
            Ok(Err(error)) => tracing::error!(%error, "flush before a forced exit failed; acknowledged data was already on disk"),
            Err(error) => tracing::error!(%error, "flush before a forced exit failed; acknowledged data was already on disk"),
        }
        std::process::exit(0);
    });
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
    let options = StoreOptions { on_mismatch: settings.integrity.on_mismatch, ..StoreOptions::from(&settings.storage) };
    let store = tokio::task::spawn_blocking(move || SledStore::open_with(&data_dir, &options))
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
    let signals = Signals::install();
    server::run(listener, state.clone(), shutdown_signal(signals, state)).await?;
    Ok(())
}
