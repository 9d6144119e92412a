//! The shutdown drain: what happens between the first shutdown signal and the end of
//! [`crate::server::run`].
//!
//! 1. The server stops accepting calls (the transport's graceful shutdown: GOAWAY to every
//!    connection) and `stopping` turns true: WatchDue streams end with UNAVAILABLE so clients
//!    know to reconnect, and the forecast materialiser stops.
//! 2. Open ingest streams may go on until `[shutdown] drain_deadline_ms`; then `ingest_cutoff`
//!    turns true and each writes what it has read, logs what it stored and ends with
//!    UNAVAILABLE (IngestTrips after a last ack).
//! 3. Calls still open a short grace after the deadline (a client holding some other stream
//!    open) no longer hold the server: `run` stops waiting for them, flushes the store and
//!    returns, so the process exits 0 within the deadline plus the grace.

use std::future::Future;
use std::time::Duration;

use crate::state::AppState;

/// Time after the drain deadline for cut-off streams to write their last chunk and send their
/// status before the server stops waiting for connections.
pub const GRACE_AFTER_DEADLINE: Duration = Duration::from_millis(1500);

/// Starts the drain (call when the shutdown signal arrives): stops streams that never end on
/// their own and schedules the ingest cutoff.
pub fn begin(state: &AppState) {
    let deadline = Duration::from_millis(state.serving.shutdown.drain_deadline_ms);
    tracing::info!(drain_deadline_ms = deadline.as_millis() as u64, "shutting down: no new calls; open ingest streams may finish until the deadline");
    state.stopping.send_replace(true);
    let cutoff = std::sync::Arc::clone(&state.ingest_cutoff);
    tokio::spawn(async move {
        tokio::time::sleep(deadline).await;
        if !cutoff.send_replace(true) {
            tracing::info!("drain deadline reached: ending open ingest streams");
        }
    });
}

/// Ends open ingest streams now (a second signal).
pub fn cut_off_now(state: &AppState) {
    state.ingest_cutoff.send_replace(true);
}

/// Runs `serve` (the transport with graceful shutdown) to completion, but once the drain has
/// begun, for at most the drain deadline plus [`GRACE_AFTER_DEADLINE`]. Returns `None` when it
/// stopped waiting.
pub async fn bounded<T>(state: &AppState, serve: impl Future<Output = T>) -> Option<T> {
    let mut stopping = state.stopping.subscribe();
    let limit = Duration::from_millis(state.serving.shutdown.drain_deadline_ms) + GRACE_AFTER_DEADLINE;
    tokio::select! {
        result = serve => Some(result),
        _ = async {
            let _ = stopping.wait_for(|s| *s).await;
            tokio::time::sleep(limit).await;
        } => {
            tracing::warn!("calls still open after the drain deadline; closing their connections");
            None
        }
    }
}
