//! Builds model inputs from stored data and keeps forecasts materialised (placeholder until
//! the forecast issue lands).

use tokio::sync::watch;

use crate::state::AppState;

/// Runs until `stop` turns true.
pub async fn run(_state: AppState, mut stop: watch::Receiver<bool>) {
    while !*stop.borrow() {
        if stop.changed().await.is_err() {
            break;
        }
    }
}
