//! Settings an operator sets for access, limits and monitoring: where the first operator token
//! comes from, whether the server may run without tokens, per-token ingest rates, message sizes,
//! the earliest date a record may carry, where metrics are served and where the planners' web
//! page is served (`[auth]`, `[limits]`, `[metrics]` and `[web]` in the TOML file).

use std::path::PathBuf;

use serde::Deserialize;

/// `[auth]`: tokens.
///
/// Tokens are required when `operator_token_file` is set or the store already holds tokens.
/// Without either, the server serves without tokens only on a loopback address, or beyond it
/// with `insecure_no_auth = true` (logged as a warning at every start); otherwise it refuses
/// to start.
#[derive(Debug, Clone, Default, Deserialize, PartialEq, Eq)]
#[serde(default, deny_unknown_fields)]
pub struct AuthConfig {
    /// File holding the first operator token (one line; at least 20 characters). Its hash is
    /// stored at start as the token `bootstrap`; every other token is created through
    /// `AccessService` (`brakeledger token create`). Default: none.
    pub operator_token_file: Option<PathBuf>,
    /// Serve without tokens on a non-loopback address. Default false. Anyone who can reach
    /// the port can then read and change every fleet.
    pub insecure_no_auth: bool,
}

/// `[limits]`: what one caller may send.
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct LimitsConfig {
    /// Sustained trips per second one token may push (all its ingest calls together). Default
    /// 20,000; 0 turns the limit off.
    pub ingest_trips_per_second: f64,
    /// Trips one token may push at once above the sustained rate. Default 200,000.
    pub ingest_burst_trips: f64,
    /// Largest request message the server decodes, bytes. Default 4 MiB (gRPC's usual
    /// default; a PushTrips batch of 10,000 trips is about 1 MB).
    pub max_request_bytes: usize,
    /// Largest response message the server sends, bytes. Default 16 MiB.
    pub max_response_bytes: usize,
    /// Longest a call may run when the client sets no deadline, seconds; a client's
    /// `grpc-timeout` shorter than this is honoured. 0: no server-side limit (the default,
    /// since ingest streams and WatchDue are long-lived by design).
    pub max_call_seconds: u64,
    /// Records (trips, inspections, replacements) dated before this ISO 8601 date are refused.
    /// Default "1990-01-01".
    pub earliest_record_date: String,
}

impl Default for LimitsConfig {
    fn default() -> Self {
        Self {
            ingest_trips_per_second: 20_000.0,
            ingest_burst_trips: 200_000.0,
            max_request_bytes: 4 * 1024 * 1024,
            max_response_bytes: 16 * 1024 * 1024,
            max_call_seconds: 0,
            earliest_record_date: "1990-01-01".to_owned(),
        }
    }
}

impl LimitsConfig {
    /// [`LimitsConfig::earliest_record_date`] as ms since the Unix epoch.
    pub fn earliest_record_ms(&self) -> Result<i64, String> {
        chrono::NaiveDate::parse_from_str(&self.earliest_record_date, "%Y-%m-%d")
            .map_err(|e| format!("limits.earliest_record_date '{}' is not an ISO 8601 date: {e}", self.earliest_record_date))
            .map(|date| date.and_hms_opt(0, 0, 0).map(|t| t.and_utc().timestamp_millis()).unwrap_or(0))
    }
}

/// `[metrics]`: Prometheus metrics.
#[derive(Debug, Clone, Default, Deserialize, PartialEq, Eq)]
#[serde(default, deny_unknown_fields)]
pub struct MetricsConfig {
    /// Address of the metrics listener (`GET /metrics`, Prometheus text format), apart from
    /// the gRPC port so it can stay on an internal network. Default: none (no listener).
    pub listen: Option<std::net::SocketAddr>,
}

/// `[web]`: the planners' web page.
#[derive(Debug, Clone, Default, Deserialize, PartialEq, Eq)]
#[serde(default, deny_unknown_fields)]
pub struct WebConfig {
    /// Address of the web page's listener (plain HTTP/1.1), apart from the gRPC port. Browsers
    /// sign in with a token, as gRPC clients do. Default: none (no web page).
    pub listen: Option<std::net::SocketAddr>,
}

/// `[tls]`: TLS on the gRPC listener (rustls). Both files set: TLS on; neither: plain HTTP/2
/// (for a loopback listener or a terminating proxy in front). SIGHUP re-reads the files.
#[derive(Debug, Clone, Default, Deserialize, PartialEq, Eq)]
#[serde(default, deny_unknown_fields)]
pub struct TlsConfig {
    /// PEM certificate chain of the server, leaf first. Default: none.
    pub cert_file: Option<PathBuf>,
    /// PEM private key of the server (PKCS#8, PKCS#1 or SEC1). Default: none.
    pub key_file: Option<PathBuf>,
    /// PEM CA certificates; when set, clients must present a certificate signed by one of
    /// them (mutual TLS). Default: none (no client certificate asked for).
    pub client_ca_file: Option<PathBuf>,
}

impl TlsConfig {
    /// Whether TLS is configured at all.
    pub fn enabled(&self) -> bool {
        self.cert_file.is_some() || self.key_file.is_some()
    }
}

/// `[health]`: a plain-text listener serving only gRPC health, for probes that cannot speak TLS
/// (Kubernetes' native gRPC probes) when `[tls]` is on.
#[derive(Debug, Clone, Default, Deserialize, PartialEq, Eq)]
#[serde(default, deny_unknown_fields)]
pub struct HealthConfig {
    /// Address of the health-only listener. Default: none (health is served on the gRPC port).
    pub listen: Option<std::net::SocketAddr>,
}
