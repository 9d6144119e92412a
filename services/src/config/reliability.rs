//! Settings that keep the service reliable under load and failure: HTTP/2 flow control,
//! ingest chunking and report size, the shutdown drain, the storage engine's memory and disk
//! reserve, and what to do when start-up verification finds damage. Each is a TOML section of
//! its own (`[http2]`, `[ingest]`, `[shutdown]`, `[storage]`, `[integrity]`); every value has a
//! documented default, and every queue the server keeps is sized here.

use serde::Deserialize;

/// `[http2]`: flow-control windows and stream limits of accepted connections.
///
/// The HTTP/2 layer (h2) closes a connection with GOAWAY `ENHANCE_YOUR_CALM`
/// ("too_many_data_frames") when DATA frames smaller than 256 bytes that it holds unread cost
/// more than a budget of half the *connection* window: each such frame costs `256 - payload`
/// bytes. A trip message is about 80 bytes, so one frame costs about 2.2 bytes of budget per
/// byte of payload; whenever ingest pauses for a disk flush, a client that writes one message per
/// frame can fill the stream window with such frames. With hyper's defaults (1 MiB stream and
/// connection windows) one paused stream could hold 1 MiB of frames costing about 2.2 MiB
/// against a 512 KiB budget, hence the GOAWAY that cut long streams (and every other call on the
/// connection) off.
///
/// What a connection can hold unread is bounded by the *stream* window times the number of
/// streams, not by the connection window alone; the budget follows the connection window. So the
/// defaults keep the stream window moderate (memory) and the connection window large (budget):
/// `connection_window_bytes / 2 ≥ max_concurrent_streams × stream_window_bytes × (256 − p) / p`
/// holds for every stream paused at once for messages of p ≥ 85 bytes, and for 47 paused
/// streams at once of the smallest valid trip messages (about 40 bytes). Memory held per
/// connection stays at most `max_concurrent_streams × stream_window_bytes` (12.5 MiB).
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct Http2Config {
    /// Flow-control window of each stream, bytes: what one call may send ahead of the server
    /// reading it. Default 128 KiB.
    pub stream_window_bytes: u32,
    /// Flow-control window of each connection, bytes. Default 64 MiB (a budget of 32 MiB for
    /// small frames; see the type's docs).
    pub connection_window_bytes: u32,
    /// Calls open at once on one connection. Default 100.
    pub max_concurrent_streams: u32,
}

impl Default for Http2Config {
    fn default() -> Self {
        Self { stream_window_bytes: 128 * 1024, connection_window_bytes: 64 * 1024 * 1024, max_concurrent_streams: 100 }
    }
}

/// `[ingest]`: how trip calls are chunked, acknowledged and reported.
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct IngestConfig {
    /// Valid trips per storage transaction (one flush to disk each). Default 2,000. Each call
    /// holds at most three chunks in memory: the one being filled and two being written (the
    /// later one sorted against the store while the earlier one is written).
    pub chunk_trips: usize,
    /// Refused trips listed one by one in a report; the rest are only counted by field and
    /// reason. Default 1,000 (about 100 KB), far below a client's 4 MB default message limit.
    pub max_listed_rejections: usize,
    /// Distinct (field, reason) pairs counted in a report; refusals beyond them are counted under
    /// their field with the reason "other reasons". Default 100.
    pub max_rejection_groups: usize,
    /// IngestTrips: longest time, ms, a valid trip waits for its chunk to fill before the partial
    /// chunk is written and acknowledged. Default 200 ms.
    pub ack_delay_ms: u64,
}

impl Default for IngestConfig {
    fn default() -> Self {
        Self { chunk_trips: 2000, max_listed_rejections: 1000, max_rejection_groups: 100, ack_delay_ms: 200 }
    }
}

/// `[shutdown]`: what happens on SIGTERM or SIGINT.
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct ShutdownConfig {
    /// Time, ms, that open ingest streams get to finish after the signal; then they are ended
    /// with UNAVAILABLE (what was stored stays stored). Default 10,000 ms.
    pub drain_deadline_ms: u64,
}

impl Default for ShutdownConfig {
    fn default() -> Self {
        Self { drain_deadline_ms: 10_000 }
    }
}

/// `[storage]`: memory and disk of the embedded database.
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct StorageConfig {
    /// Page cache of the storage engine, bytes of decoded pages in memory (the patched sled
    /// under `vendor/sled` charges each page the larger of its decoded size and its bytes in
    /// the log; upstream sled charged compressed bytes, so the cache took 2.5-6.6 times the
    /// setting). sled keeps up to about 2,000 recently used pages beyond it, and a page table
    /// entry for every page, cached or not (BENCHMARKS.md, "Fleet scale": 263 MB resident
    /// after a refresh at 100,000 vehicles and 10 million trips with the defaults, 299-300 MB
    /// with 64 MiB). Default 32 MiB (sled's own default is 1 GB): GetVehicleForecast reads
    /// through the forecast cache below, so a larger page cache mostly keeps more trip pages
    /// for ingest and ListDue; a smaller one saves memory.
    pub cache_capacity_bytes: u64,
    /// Stored forecasts kept in memory by vehicle, bytes (as stored, about 1.2 KB a vehicle
    /// with four parts), in front of the page cache: the vehicles read most stay in memory
    /// without the pages around them. 0 keeps none. Default 32 MiB (about 25,000 vehicles).
    pub forecast_cache_bytes: u64,
    /// Whether a data directory created from now on compresses its pages (zstd level 1).
    /// Default true: about a third of the disk and of the bytes written, at the price of
    /// CPU on every page written and every page read back from disk (BENCHMARKS.md, "Fleet
    /// scale"). A directory keeps the setting it was made with; sled cannot change it later
    /// (a backup restored into a new directory takes the current one).
    pub compress_new_directories: bool,
    /// Free space, bytes, kept on the data directory's file system: writes are refused with
    /// RESOURCE_EXHAUSTED below it, before the engine hits a full disk. Default 64 MiB.
    pub min_free_bytes: u64,
    /// How often, ms, the server re-checks free space while writes are refused, to resume
    /// them without a restart. Default 1,000 ms.
    pub space_check_interval_ms: u64,
    /// Forecast changes buffered for WatchDue streams before a slow stream re-reads instead.
    /// Default 4,096.
    pub change_feed_capacity: usize,
    /// Events buffered per WatchDue stream. Default 256.
    pub watch_queue_events: usize,
}

impl Default for StorageConfig {
    fn default() -> Self {
        Self {
            cache_capacity_bytes: 32 * 1024 * 1024,
            forecast_cache_bytes: 32 * 1024 * 1024,
            compress_new_directories: true,
            min_free_bytes: 64 * 1024 * 1024,
            space_check_interval_ms: 1000,
            change_feed_capacity: 4096,
            watch_queue_events: 256,
        }
    }
}

/// `[integrity]`: start-up verification of the data directory.
#[derive(Debug, Clone, Deserialize, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct IntegrityConfig {
    /// What to do when what the database holds does not match what was acknowledged.
    pub on_mismatch: OnMismatch,
}

impl Default for IntegrityConfig {
    fn default() -> Self {
        Self { on_mismatch: OnMismatch::Refuse }
    }
}

/// Start-up policy after a failed verification.
#[derive(Debug, Clone, Copy, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "snake_case")]
pub enum OnMismatch {
    /// Refuse to start, naming what is missing (the default).
    Refuse,
    /// Start, serve reads, refuse every write (health: write services NOT_SERVING).
    ReadOnly,
}

/// The reliability settings handlers and the server read at run time.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ServingConfig {
    /// HTTP/2 settings.
    pub http2: Http2Config,
    /// Ingest settings.
    pub ingest: IngestConfig,
    /// Shutdown settings.
    pub shutdown: ShutdownConfig,
    /// Storage settings (the queue sizes are read at run time).
    pub storage: StorageConfig,
    /// Per-token limits.
    pub limits: super::LimitsConfig,
    /// Plain-text health listener.
    pub health: super::HealthConfig,
}
