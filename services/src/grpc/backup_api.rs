//! `BackupService`: an online, consistent backup of the whole store, streamed as one file.
//!
//! The store copies every record into an unnamed temporary file beside the database while it
//! holds acknowledged writes (they wait, none is refused), then lets them go; the file is then
//! streamed in chunks of [`CHUNK_BYTES`] through a queue of [`CHUNK_QUEUE`] chunks, so a slow
//! client holds neither writes nor memory.

use std::io::Read;

use brakeledger_proto::v1 as pb;
use pb::backup_service_server::BackupService;
use tokio::sync::mpsc;
use tokio_stream::wrappers::ReceiverStream;
use tonic::{Request, Response, Status};

use crate::auth::Caller;
use crate::convert::{ms_timestamp, now_ms};
use crate::error::ServiceError;
use crate::state::AppState;
use crate::store::backup_file::BackupSummary;

/// Bytes of the file per chunk.
pub const CHUNK_BYTES: usize = 64 * 1024;
/// Chunks buffered per call before the sender waits for the client.
const CHUNK_QUEUE: usize = 4;

/// Implements `brakeledger.v1.BackupService`.
pub struct BackupApi {
    state: AppState,
}

impl BackupApi {
    /// Handlers over shared state.
    pub fn new(state: AppState) -> Self {
        Self { state }
    }
}

fn summary_message(summary: &BackupSummary) -> pb::BackupSummary {
    let totals = summary.tallies.totals();
    pb::BackupSummary {
        file_bytes: summary.file_bytes,
        entries: summary.entries,
        fleets: summary.tallies.0.len() as u64,
        vehicles: totals.vehicles.count,
        trips: totals.trips.count,
        inspections: totals.inspections.count,
        replacements: totals.replacements.count,
        taken_at: Some(ms_timestamp(summary.taken_at_ms)),
        file_crc32: summary.file_crc32,
    }
}

#[tonic::async_trait]
impl BackupService for BackupApi {
    type ExportBackupStream = ReceiverStream<Result<pb::BackupChunk, Status>>;

    async fn export_backup(&self, request: Request<pb::ExportBackupRequest>) -> Result<Response<Self::ExportBackupStream>, Status> {
        // A backup holds every fleet: operators only.
        let caller = Caller::of(&request)?;
        caller.require_operator()?;
        self.state.audit(&caller, "", "brakeledger.v1.BackupService/ExportBackup", "backup taken".into()).await;
        let (mut file, summary) = self.state.blocking(|store| Ok(store.export_backup(now_ms())?)).await?;
        tracing::info!(summary = %summary.describe(), "backup copy taken; streaming it");
        let (sender, receiver) = mpsc::channel(CHUNK_QUEUE);
        tokio::task::spawn_blocking(move || {
            let mut offset = 0u64;
            loop {
                let mut data = vec![0u8; CHUNK_BYTES];
                let read = match file.read(&mut data) {
                    Ok(n) => n,
                    Err(error) => {
                        let _ = sender.blocking_send(Err(ServiceError::Internal(format!("reading the backup copy: {error}")).into_status()));
                        return;
                    }
                };
                data.truncate(read);
                let last = offset + read as u64 >= summary.file_bytes;
                let chunk = pb::BackupChunk { data, offset_bytes: offset, summary: last.then(|| summary_message(&summary)) };
                offset += read as u64;
                if sender.blocking_send(Ok(chunk)).is_err() || last || read == 0 {
                    return;
                }
            }
        });
        Ok(Response::new(ReceiverStream::new(receiver)))
    }
}
