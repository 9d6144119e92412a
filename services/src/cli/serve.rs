//! `brakeledger serve`: settings, logging, signals, and the server.

use std::sync::Arc;

use anyhow::Context;
use tokio::net::TcpListener;

use crate::cli::ServeArgs;
use crate::config::{LogFormat, Settings};
use crate::server;
use crate::state::AppState;
use crate::store::postgres::PostgresStore;
use crate::store::sled_store::{SledStore, StoreOptions};

/// Every server setting beyond the flags, for `serve --help`.
pub const SERVE_SETTINGS_HELP: &str = "\
Settings, layered once at start-up: defaults, then the --config TOML file, then environment
variables, then the flags above.

  TOML key (section)            environment                       default
  listen                        BRAKELEDGER_LISTEN                127.0.0.1:50051
  data_dir                      BRAKELEDGER_DATA                  ./brakeledger-data
  url (store)                   BRAKELEDGER_STORE                 none: the embedded database in data_dir
  log_format                    (--json-logs)                     text (or json)
  log_filter                    BRAKELEDGER_LOG                   info (tracing env-filter syntax)
  operator_token_file  [auth]   BRAKELEDGER_OPERATOR_TOKEN_FILE   none
  insecure_no_auth     [auth]   (--insecure-no-auth)              false

Tokens: the first operator token is read from operator_token_file (one line, at least 20
characters; only its SHA-256 is stored). Every other token is made with `brakeledger token
create --fleet F --role ingest|workshop|planner|fleet-admin` and revoked with `brakeledger token
revoke`. Once the store holds tokens, every brakeledger.v1 call must carry `authorization:
Bearer <token>`; clients pass it with --token or BRAKELEDGER_TOKEN. Health and reflection stay
open. Without tokens the server serves only on a loopback address, unless --insecure-no-auth.

  [limits]    ingest_trips_per_second, ingest_burst_trips, max_request_bytes,
              max_response_bytes, max_call_seconds, earliest_record_date
  [metrics]   listen (Prometheus text at GET /metrics)
  [tls]       cert_file, key_file, client_ca_file (re-read at SIGHUP)
  [health]    listen (plain-text listener for gRPC health only)
  [forecast]  energy_window_days, monte_carlo_draws, coalesce_ms, coalesce_max_ms,
              priors_interval_ms, batch_vehicles, materialised_max_age_s
  [ingest]    chunk_trips, max_listed_rejections, max_rejection_groups, ack_delay_ms
  [http2]     stream_window_bytes, connection_window_bytes, max_concurrent_streams
  [shutdown]  drain_deadline_ms
  [storage]   cache_capacity_bytes, forecast_cache_bytes, compress_new_directories, min_free_bytes,
              space_check_interval_ms, change_feed_capacity, watch_queue_events
  [integrity] on_mismatch
  [store]     url, pool_size (PostgreSQL instead of the embedded database)
  [web]       listen (the planners' web page on its own port, --web-listen; default off)

deploy/brakeledger.toml is a commented example of every setting.";

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

/// The store the settings name, and the engine behind it when it is shared with other replicas.
struct OpenedStore {
    store: Arc<dyn crate::store::Store>,
    postgres: Option<Arc<PostgresStore>>,
}

impl OpenedStore {
    /// Publishes forecasts stored by other replicas on the state's change feed.
    fn follow_other_replicas(&self, state: &AppState) -> anyhow::Result<Option<crate::store::postgres::replicas::ListenerHandle>> {
        let Some(postgres) = &self.postgres else { return Ok(None) };
        let changes = state.changes.clone();
        let handle = postgres
            .listen_for_forecasts(move |after| {
                let _ = changes.send(crate::state::ForecastChange { before: None, after: Arc::new(after) });
            })
            .context("following forecasts stored by other replicas")?;
        Ok(Some(handle))
    }
}

/// Opens the embedded database in the data directory, or the PostgreSQL database of
/// `[store] url` / `--store`.
async fn open_store(settings: &Settings) -> anyhow::Result<OpenedStore> {
    if let Some(url) = settings.store.postgres_url() {
        let (url, pool_size) = (url.to_owned(), settings.store.pool_size);
        let store = tokio::task::spawn_blocking(move || PostgresStore::open_with(&url, pool_size))
            .await?
            .with_context(|| format!("opening the PostgreSQL store at {}", crate::store::postgres::redacted(settings.store.postgres_url().unwrap_or_default())))?;
        tracing::info!(store = %crate::store::postgres::redacted(settings.store.postgres_url().unwrap_or_default()), replica = store.replica_id(), "using the PostgreSQL store");
        let store = Arc::new(store);
        return Ok(OpenedStore { store: Arc::clone(&store) as Arc<dyn crate::store::Store>, postgres: Some(store) });
    }
    let data_dir = settings.data_dir.clone();
    let options = StoreOptions { on_mismatch: settings.integrity.on_mismatch, ..StoreOptions::from(&settings.storage) };
    let store = tokio::task::spawn_blocking(move || SledStore::open_with(&data_dir, &options))
        .await?
        .map_err(|e| open_failure(e, &settings.data_dir))?;
    Ok(OpenedStore { store: Arc::new(store), postgres: None })
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

/// Re-reads the TLS files at every SIGHUP (certificate renewal without a restart).
fn reload_tls_on_hangup(tls: Arc<crate::tls::TlsReloader>) {
    #[cfg(unix)]
    tokio::spawn(async move {
        let Ok(mut hangups) = tokio::signal::unix::signal(tokio::signal::unix::SignalKind::hangup()) else {
            tracing::warn!("cannot listen for SIGHUP: TLS files are read only at start");
            return;
        };
        while hangups.recv().await.is_some() {
            match tls.reload() {
                Ok(()) => tracing::info!("SIGHUP: TLS certificate and key reloaded"),
                Err(error) => tracing::error!(%error, "SIGHUP: TLS reload failed; the previous certificate stays in use"),
            }
        }
    });
    #[cfg(not(unix))]
    drop(tls);
}

/// Serves the web page on `listener` until the server begins to stop.
pub fn spawn_web_page(listener: TcpListener, state: AppState) {
    let mut stopping = state.stopping.subscribe();
    tokio::spawn(async move {
        let stopped = async move {
            let _ = stopping.wait_for(|stop| *stop).await;
        };
        if let Err(error) = crate::web::serve(listener, state, stopped).await {
            tracing::error!(%error, "web page listener failed");
        }
    });
}

/// Runs the server until a signal. `client_token` is the client's `--token` /
/// `BRAKELEDGER_TOKEN`, which a server never uses: given as a flag it is refused, and from the
/// environment it is refused when the server would otherwise run without tokens.
pub async fn serve(args: ServeArgs, client_token: Option<String>) -> anyhow::Result<()> {
    let token_from_env = std::env::var("BRAKELEDGER_TOKEN").ok();
    if client_token.is_some() && client_token != token_from_env {
        anyhow::bail!(
            "--token is a client option (the token a client presents); a server takes its first operator token from [auth] operator_token_file (or BRAKELEDGER_OPERATOR_TOKEN_FILE)"
        );
    }
    let mut settings = Settings::load(args.config.as_deref(), |name| std::env::var(name).ok())?;
    if let Some(data) = args.data {
        settings.data_dir = data;
    }
    if let Some(url) = args.store {
        settings.store.url = Some(url);
    }
    settings.store.check()?;
    if let Some(listen) = args.listen {
        settings.listen = listen;
    }
    if args.json_logs {
        settings.log_format = LogFormat::Json;
    }
    if let Some(file) = args.operator_token_file {
        settings.auth.operator_token_file = Some(file);
    }
    if args.insecure_no_auth {
        settings.auth.insecure_no_auth = true;
    }
    if let Some(address) = args.web_listen {
        settings.web.listen = Some(address);
    }
    init_logging(settings.log_format, &settings.log_filter);
    let opened = open_store(&settings).await?;
    let store = Arc::clone(&opened.store);
    let access = crate::auth::bootstrap::set_up(&settings.auth, settings.listen, Arc::clone(&store), client_token.as_deref(), crate::convert::now_ms())?;
    if let Some(warning) = &access.warning {
        tracing::warn!(listen = %settings.listen, "{warning}");
    }
    let listener = TcpListener::bind(settings.listen).await.with_context(|| format!("listening on {}", settings.listen))?;
    // Tests and scripts read this line to learn the port when listening on :0.
    println!("brakeledger listening on {}", listener.local_addr()?);
    let mut state = AppState::new(store, settings.forecast.clone()).with_access(access.policy).with_serving(settings.serving());
    if settings.tls.enabled() {
        let tls = Arc::new(crate::tls::TlsReloader::new(settings.tls.clone()).context("setting up TLS")?);
        reload_tls_on_hangup(Arc::clone(&tls));
        state = state.with_tls(tls);
    } else if !settings.listen.ip().is_loopback() {
        tracing::warn!(listen = %settings.listen, "serving plain HTTP/2 beyond loopback: tokens cross the network in clear unless a TLS proxy is in front ([tls] cert_file, key_file)");
    }
    if let Some(address) = settings.metrics.listen {
        let metrics_listener = TcpListener::bind(address).await.with_context(|| format!("metrics listener on {address}"))?;
        println!("brakeledger metrics on http://{}/metrics", metrics_listener.local_addr()?);
        let mut stopping = state.stopping.subscribe();
        tokio::spawn(async move {
            let stopped = async move {
                let _ = stopping.wait_for(|stop| *stop).await;
            };
            if let Err(error) = crate::metrics::serve(metrics_listener, stopped).await {
                tracing::error!(%error, "metrics listener failed");
            }
        });
    }
    // Forecasts stored by other replicas reach this server's WatchDue streams.
    let _listener = opened.follow_other_replicas(&state)?;
    if let Some(address) = settings.web.listen {
        let web_listener = TcpListener::bind(address).await.with_context(|| format!("web page listener on {address}"))?;
        // Tests and scripts read this line to learn the page's port when listening on :0.
        println!("brakeledger web page on http://{}/", web_listener.local_addr()?);
        spawn_web_page(web_listener, state.clone());
    }
    let signals = Signals::install();
    server::run(listener, state.clone(), shutdown_signal(signals, state)).await?;
    Ok(())
}
