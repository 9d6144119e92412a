//! Per-token ingest rate limits: a token bucket per token, refilled at
//! `[limits] ingest_trips_per_second` up to `ingest_burst_trips`. A call that would take more
//! than the bucket holds is refused with RESOURCE_EXHAUSTED and the time after which the same
//! amount would be allowed (`google.rpc.RetryInfo`).
//!
//! Buckets live in this process: with several replicas each enforces the limit on the calls it
//! serves.

use std::collections::HashMap;
use std::sync::Mutex;
use std::time::Instant;

use crate::config::LimitsConfig;
use crate::error::ServiceError;

/// Most tokens tracked at once; idle full buckets are dropped beyond it.
const MAX_BUCKETS: usize = 10_000;

#[derive(Debug, Clone, Copy)]
struct Bucket {
    /// Trips available now.
    available: f64,
    /// When `available` was last brought up to date.
    updated: Instant,
}

/// The buckets of every token that pushed trips.
#[derive(Debug)]
pub struct IngestLimiter {
    per_second: f64,
    burst: f64,
    buckets: Mutex<HashMap<String, Bucket>>,
}

impl IngestLimiter {
    /// Limiter with the configured rate and burst (a rate of 0 turns it off).
    pub fn new(config: &LimitsConfig) -> Self {
        Self { per_second: config.ingest_trips_per_second.max(0.0), burst: config.ingest_burst_trips.max(1.0), buckets: Mutex::new(HashMap::new()) }
    }

    /// Takes `trips` from `token_id`'s bucket at `now`, or says how long to wait.
    pub fn take_at(&self, token_id: &str, trips: u64, now: Instant) -> Result<(), ServiceError> {
        if self.per_second <= 0.0 || trips == 0 {
            return Ok(());
        }
        let wanted = trips as f64;
        let mut buckets = self.buckets.lock().unwrap_or_else(|poisoned| poisoned.into_inner());
        if buckets.len() >= MAX_BUCKETS && !buckets.contains_key(token_id) {
            let (per_second, burst) = (self.per_second, self.burst);
            buckets.retain(|_, b| b.available + now.saturating_duration_since(b.updated).as_secs_f64() * per_second < burst);
        }
        let bucket = buckets.entry(token_id.to_owned()).or_insert(Bucket { available: self.burst, updated: now });
        let refill = now.saturating_duration_since(bucket.updated).as_secs_f64() * self.per_second;
        bucket.available = (bucket.available + refill).min(self.burst);
        bucket.updated = now;
        if wanted <= bucket.available {
            bucket.available -= wanted;
            return Ok(());
        }
        // A call larger than the burst never fits: wait for a full bucket and send less.
        let (missing, advice) = if wanted > self.burst {
            (self.burst - bucket.available, format!("; a call of {trips} trips is more than the burst allows: send at most {} at once", self.burst))
        } else {
            (wanted - bucket.available, String::new())
        };
        let retry_after_ms = ((missing / self.per_second) * 1000.0).ceil().max(1.0) as u64;
        Err(ServiceError::RateLimited {
            message: format!(
                "token {token_id} pushed trips faster than its limit ({} trips/s, bursts of {}; [limits] ingest_trips_per_second){advice}",
                self.per_second, self.burst
            ),
            retry_after_ms,
        })
    }

    /// [`IngestLimiter::take_at`] now.
    pub fn take(&self, token_id: &str, trips: u64) -> Result<(), ServiceError> {
        self.take_at(token_id, trips, Instant::now())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    fn limiter(per_second: f64, burst: f64) -> IngestLimiter {
        IngestLimiter::new(&LimitsConfig { ingest_trips_per_second: per_second, ingest_burst_trips: burst, ..LimitsConfig::default() })
    }

    #[test]
    fn a_burst_then_the_sustained_rate_with_an_honest_retry_hint() {
        let limiter = limiter(100.0, 1000.0);
        let start = Instant::now();
        assert!(limiter.take_at("a", 1000, start).is_ok());
        match limiter.take_at("a", 50, start) {
            Err(ServiceError::RateLimited { retry_after_ms, .. }) => assert_eq!(retry_after_ms, 500, "50 trips at 100/s"),
            other => panic!("{other:?}"),
        }
        // Another token has its own bucket.
        assert!(limiter.take_at("b", 1000, start).is_ok());
        // After the hinted wait the same amount goes through.
        assert!(limiter.take_at("a", 50, start + Duration::from_millis(500)).is_ok());
        assert!(limiter.take_at("a", 1, start + Duration::from_millis(500)).is_err());
    }

    #[test]
    fn zero_rate_means_no_limit() {
        let limiter = limiter(0.0, 1.0);
        assert!(limiter.take("a", 1_000_000).is_ok());
    }
}
