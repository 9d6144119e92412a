//! What the benchmarks under `benches/` share: sizes read from the environment, the invented
//! vehicles' names, and the server configuration they run with.

use std::path::PathBuf;

/// The value of environment variable `name` parsed as `T`, or `default` when it is unset or
/// does not parse.
pub fn env_or<T: std::str::FromStr>(name: &str, default: T) -> T {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).unwrap_or(default)
}

/// The id of invented vehicle number `v`: `v000042`.
pub fn vehicle_id(v: usize) -> String {
    format!("v{v:06}")
}

/// A configuration file for a benchmark's server, removed when dropped: no per-token ingest
/// rate limit (the default 20,000 trips/s, bursts of 200,000, would cap the measurement and
/// refuses a single call of 900,000 trips).
pub struct UnlimitedIngestConfig {
    dir: tempfile::TempDir,
}

impl UnlimitedIngestConfig {
    /// Writes `brakeledger.toml` with `[limits] ingest_trips_per_second = 0` into a temporary
    /// directory.
    pub fn write() -> Self {
        Self::write_with("")
    }

    /// [`Self::write`] followed by `more` (whole TOML tables).
    pub fn write_with(more: &str) -> Self {
        let dir = tempfile::tempdir().expect("config dir");
        std::fs::write(dir.path().join("brakeledger.toml"), format!("[limits]\ningest_trips_per_second = 0\n{more}")).expect("write config");
        Self { dir }
    }

    /// The file, for `serve --config`.
    pub fn path(&self) -> PathBuf {
        self.dir.path().join("brakeledger.toml")
    }
}
