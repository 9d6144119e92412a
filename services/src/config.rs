//! Typed settings, layered once at start-up: built-in defaults, then an optional TOML file,
//! then environment variables (`BRAKELEDGER_LISTEN`, `BRAKELEDGER_DATA`, `BRAKELEDGER_LOG`,
//! `BRAKELEDGER_OPERATOR_TOKEN_FILE`, `BRAKELEDGER_STORE`), then command-line flags. Libraries never read the environment; the
//! `serve` subcommand does, through [`Settings::load`].

use std::net::SocketAddr;
use std::path::{Path, PathBuf};

use serde::Deserialize;

mod operations;
mod reliability;
mod store_engine;
pub use operations::*;
pub use reliability::*;
pub use store_engine::*;

/// Everything the server needs to start.
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct Settings {
    /// Address the gRPC server listens on.
    pub listen: SocketAddr,
    /// Directory of the sled database.
    pub data_dir: PathBuf,
    /// Log format: "text" or "json".
    pub log_format: LogFormat,
    /// Log filter in `tracing` env-filter syntax, e.g. "info,brakeledger=debug".
    pub log_filter: String,
    /// Tokens: the first operator token, and whether the server may run without tokens.
    pub auth: AuthConfig,
    /// Per-token ingest rates, message sizes, call deadlines, earliest record date.
    pub limits: LimitsConfig,
    /// Prometheus metrics listener.
    pub metrics: MetricsConfig,
    /// The planners' web page listener.
    pub web: WebConfig,
    /// TLS on the gRPC listener.
    pub tls: TlsConfig,
    /// Plain-text health listener for probes.
    pub health: HealthConfig,
    /// Forecast settings.
    pub forecast: ForecastConfig,
    /// HTTP/2 flow control (see [`Http2Config`] for why these values).
    pub http2: Http2Config,
    /// Ingest chunking, acknowledgement and report size.
    pub ingest: IngestConfig,
    /// The shutdown drain.
    pub shutdown: ShutdownConfig,
    /// Storage memory and disk reserve.
    pub storage: StorageConfig,
    /// Start-up verification policy.
    pub integrity: IntegrityConfig,
    /// The storage engine: embedded sled (default) or PostgreSQL.
    pub store: StoreConfig,
}

/// Log output format.
#[derive(Debug, Clone, Copy, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum LogFormat {
    /// Human-readable lines.
    Text,
    /// One JSON object per line.
    Json,
}

/// Settings of the forecast materialiser.
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct ForecastConfig {
    /// Days of trip history the energy forecast reads.
    pub energy_window_days: usize,
    /// Monte Carlo draws per part.
    pub monte_carlo_draws: usize,
    /// Quiet time after a write before stale forecasts are recomputed, ms: a refresh starts
    /// once no write has arrived for this long, so that a burst or a stream of trips becomes
    /// one pass after it ends instead of one rewrite of the same forecasts per chunk. Default
    /// 200 ms.
    pub coalesce_ms: u64,
    /// Longest a refresh waits for writes to pause, ms, counted from the first write it waits
    /// for: under writes that never pause (live telematics) forecasts are still refreshed at
    /// least this often. Default 60,000 ms (a minute).
    pub coalesce_max_ms: u64,
    /// Longest the fleet priors go without re-estimation in a round that does not end (writes
    /// that never pause), ms; a round that ends re-estimates them anyway. A re-estimation whose
    /// prior moved recomputes every vehicle of the class, so during a bulk load (new vehicles
    /// moving the priors each time) a short interval recomputes the whole fleet again and
    /// again. Default 600,000 ms (10 minutes).
    pub priors_interval_ms: u64,
    /// Vehicles recomputed per pass.
    pub batch_vehicles: usize,
    /// GetVehicleForecast answers from the materialised forecast (a few key reads) when no
    /// write reached the vehicle since and it was computed less than this many seconds ago;
    /// otherwise it computes afresh (the Monte Carlo, milliseconds per call). 0: always
    /// afresh. Default 3,600 s (today's thickness then moves by at most an hour's wear).
    pub materialised_max_age_s: u64,
}

impl Default for ForecastConfig {
    fn default() -> Self {
        Self { energy_window_days: 120, monte_carlo_draws: 2000, coalesce_ms: 200, coalesce_max_ms: 60_000, priors_interval_ms: 600_000, batch_vehicles: 256, materialised_max_age_s: 3600 }
    }
}

impl Default for Settings {
    fn default() -> Self {
        Self {
            listen: SocketAddr::from(([127, 0, 0, 1], 50_051)),
            data_dir: PathBuf::from("brakeledger-data"),
            log_format: LogFormat::Text,
            log_filter: "info".to_owned(),
            auth: AuthConfig::default(),
            limits: LimitsConfig::default(),
            metrics: MetricsConfig::default(),
            web: WebConfig::default(),
            tls: TlsConfig::default(),
            health: HealthConfig::default(),
            forecast: ForecastConfig::default(),
            http2: Http2Config::default(),
            ingest: IngestConfig::default(),
            shutdown: ShutdownConfig::default(),
            storage: StorageConfig::default(),
            integrity: IntegrityConfig::default(),
            store: StoreConfig::default(),
        }
    }
}

/// Problems loading settings.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    /// The file could not be read.
    #[error("cannot read config file {path}: {source}")]
    Read {
        /// The file.
        path: PathBuf,
        /// Why.
        source: std::io::Error,
    },
    /// The file is not valid TOML for these settings.
    #[error("config file {path}: {message}")]
    Parse {
        /// The file.
        path: PathBuf,
        /// Why.
        message: String,
    },
    /// A setting has a value that cannot work.
    #[error("{message}")]
    Invalid {
        /// Why.
        message: String,
    },
    /// An environment variable has a bad value.
    #[error("environment variable {name}: {message}")]
    Env {
        /// The variable.
        name: &'static str,
        /// Why.
        message: String,
    },
}

impl Settings {
    /// The settings handlers and the server read at run time.
    pub fn serving(&self) -> ServingConfig {
        ServingConfig {
            http2: self.http2.clone(),
            ingest: self.ingest.clone(),
            shutdown: self.shutdown.clone(),
            storage: self.storage.clone(),
            limits: self.limits.clone(),
            health: self.health.clone(),
        }
    }

    /// Defaults, then `file` (if given), then the environment as read by `env`.
    pub fn load(file: Option<&Path>, env: impl Fn(&str) -> Option<String>) -> Result<Self, ConfigError> {
        let mut settings = match file {
            Some(path) => {
                let text = std::fs::read_to_string(path).map_err(|source| ConfigError::Read { path: path.to_owned(), source })?;
                toml::from_str(&text).map_err(|e| ConfigError::Parse { path: path.to_owned(), message: e.to_string() })?
            }
            None => Settings::default(),
        };
        if let Some(listen) = env("BRAKELEDGER_LISTEN") {
            settings.listen = listen
                .parse()
                .map_err(|e| ConfigError::Env { name: "BRAKELEDGER_LISTEN", message: format!("{e}") })?;
        }
        if let Some(dir) = env("BRAKELEDGER_DATA") {
            settings.data_dir = PathBuf::from(dir);
        }
        if let Some(url) = env("BRAKELEDGER_STORE") {
            settings.store.url = Some(url);
        }
        settings.store.check()?;
        if let Some(filter) = env("BRAKELEDGER_LOG") {
            settings.log_filter = filter;
        }
        if env("BRAKELEDGER_TOKENS").is_some() {
            return Err(ConfigError::Env {
                name: "BRAKELEDGER_TOKENS",
                message: "is no longer read: tokens now belong to a fleet and carry a role. Name the first operator token's file in [auth] operator_token_file (or BRAKELEDGER_OPERATOR_TOKEN_FILE) and create the others with `brakeledger token create`".into(),
            });
        }
        if let Some(file) = env("BRAKELEDGER_OPERATOR_TOKEN_FILE") {
            if file.trim().is_empty() {
                return Err(ConfigError::Env { name: "BRAKELEDGER_OPERATOR_TOKEN_FILE", message: "is set but empty".into() });
            }
            settings.auth.operator_token_file = Some(PathBuf::from(file));
        }
        settings.limits.earliest_record_ms().map_err(|message| ConfigError::Invalid { message })?;
        Ok(settings)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn file_then_environment_override() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("brakeledger.toml");
        std::fs::write(&path, "listen = \"127.0.0.1:6000\"\ndata_dir = \"/var/lib/x\"\n[forecast]\nmonte_carlo_draws = 500\n").unwrap();
        let settings = Settings::load(Some(&path), |name| (name == "BRAKELEDGER_DATA").then(|| "/srv/y".to_owned())).unwrap();
        assert_eq!(settings.listen, "127.0.0.1:6000".parse().unwrap());
        assert_eq!(settings.data_dir, PathBuf::from("/srv/y"));
        assert_eq!(settings.forecast.monte_carlo_draws, 500);
        assert_eq!(settings.forecast.energy_window_days, 120);
    }

    #[test]
    fn the_example_config_in_deploy_parses() {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../deploy/brakeledger.toml");
        let settings = Settings::load(Some(&path), |_| None).unwrap();
        assert_eq!(settings.data_dir, PathBuf::from("/var/lib/brakeledger"));
        assert_eq!(settings.log_format, LogFormat::Json);
        assert_eq!(settings.auth.operator_token_file, Some(PathBuf::from("/etc/brakeledger/operator-token")));
        assert_eq!(settings.limits, LimitsConfig::default());
    }

    #[test]
    fn unknown_keys_and_bad_env_are_errors() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("bad.toml");
        std::fs::write(&path, "listn = \"x\"\n").unwrap();
        assert!(matches!(Settings::load(Some(&path), |_| None), Err(ConfigError::Parse { .. })));
        let bad_env = Settings::load(None, |name| (name == "BRAKELEDGER_LISTEN").then(|| "nowhere".to_owned()));
        assert!(matches!(bad_env, Err(ConfigError::Env { .. })));
        // Settings that used to leave the server open are refused, not ignored.
        for (name, value) in [("BRAKELEDGER_TOKENS", ""), ("BRAKELEDGER_TOKENS", " , "), ("BRAKELEDGER_OPERATOR_TOKEN_FILE", " ")] {
            let loaded = Settings::load(None, |asked| (asked == name).then(|| value.to_owned()));
            assert!(matches!(loaded, Err(ConfigError::Env { .. })), "{name}={value:?}");
        }
        std::fs::write(&path, "auth_tokens = [\"a\"]\n").unwrap();
        let old = Settings::load(Some(&path), |_| None).unwrap_err().to_string();
        assert!(old.contains("auth_tokens"), "{old}");
    }
}
