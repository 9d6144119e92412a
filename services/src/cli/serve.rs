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

/// Every server setting beyond the flags, for `serve --help`.
pub const SERVE_SETTINGS_HELP: &str = "\
Settings, layered once at start-up: defaults, then the --config TOML file, then environment
variables, then the flags above.

  TOML key (section)            environment          default
  listen                        BRAKELEDGER_LISTEN   127.0.0.1:50051
  data_dir                      BRAKELEDGER_DATA     ./brakeledger-data
  log_format                    (--json-logs)        text (or json)
  log_filter                    BRAKELEDGER_LOG      info (tracing env-filter syntax)
  auth_tokens                   BRAKELEDGER_TOKENS   none: no token needed

Tokens: with auth_tokens = [\"token-a\", \"token-b\"] in the file, or
BRAKELEDGER_TOKENS=token-a,token-b (preferred: from a secret store), every brakeledger.v1 call
must carry `authorization: Bearer <token>`; clients pass it with --token or BRAKELEDGER_TOKEN.
Health and reflection stay open.

  [forecast]  energy_window_days, monte_carlo_draws, coalesce_ms, batch_vehicles
  [ingest]    chunk_trips, max_listed_rejections, max_rejection_groups, ack_delay_ms
  [http2]     stream_window_bytes, connection_window_bytes, max_concurrent_streams
  [shutdown]  drain_deadline_ms
  [storage]   cache_capacity_bytes, min_free_bytes, space_check_interval_ms,
              change_feed_capacity, watch_queue_events
  [integrity] on_mismatch

deploy/brakeledger.toml is a commented example.";

/// What to say when the database cannot be opened: a data directory locked by another
/// process is named as such (sled holds an exclusive lock on it while open).
fn open_failure(error: crate::store::StoreError, dir: &std::path::Path) -> anyhow::Error {
    let text = error.to_string();
    if text.contains("could not acquire lock") || text.contains("WouldBlock") {
        anyhow::anyhow!(
            "the data directory {} is in use by another brakeledger server (or another process holding its database); stop that server or give another --data",
            dir.display()
        )
    } else {
        anyhow::Error::new(error).context(format!("opening the database in {}", dir.display()))
    }
}

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
    let options = StoreOptions::from(&settings.storage);
    let store = tokio::task::spawn_blocking(move || SledStore::open_with(&data_dir, &options))
        .await?
        .map_err(|e| open_failure(e, &settings.data_dir))?;
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
