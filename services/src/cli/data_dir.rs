//! Offline commands on a data directory and on backup files (no server): `check`, `restore`
//! and `verify-backup`; and `backup`, which asks a running server for a backup file.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use tokio_stream::StreamExt;

use crate::cli::client::{explain, Connection, ServerTarget};
use crate::store::sled_engine::PageSettings;
use crate::store::backup_file::{self, BackupSummary};
use crate::store::integrity::{self, Mode};

/// Examples for `check --help`.
pub const CHECK_EXAMPLES: &str = "Examples:\n  brakeledger check --data /var/lib/brakeledger\n\nExit status 0 when the directory holds everything acknowledged, 1 with the findings otherwise.";
/// Examples for `backup --help`.
pub const BACKUP_EXAMPLES: &str = "Examples:\n  brakeledger backup --out brakeledger-2026-12-03.backup\n  brakeledger --server http://10.0.0.5:50051 --token $TOKEN backup --out nightly.backup";
/// Examples for `restore --help`.
pub const RESTORE_EXAMPLES: &str = "Examples:\n  brakeledger restore --from nightly.backup --data /var/lib/brakeledger-restored\n  BRAKELEDGER_STORE=postgres://brakeledger@db.internal/brakeledger brakeledger restore --from nightly.backup\n  brakeledger restore --from nightly.backup --store postgres://brakeledger@127.0.0.1/brakeledger\n\nThe directory or database must be empty or new; the file is verified completely before anything is written.\nA backup taken from either engine restores into either: this is how a data directory moves from the\nembedded database to PostgreSQL (and back).";
/// Examples for `verify-backup --help`.
pub const VERIFY_EXAMPLES: &str = "Examples:\n  brakeledger verify-backup nightly.backup";

/// Flags of `check`.
#[derive(Debug, clap::Args)]
pub struct CheckArgs {
    /// Data directory to check (the server must not be running on it).
    #[arg(long)]
    pub data: PathBuf,
}

/// Flags of `backup`.
#[derive(Debug, clap::Args)]
pub struct BackupArgs {
    /// File to write (written as FILE.partial, verified, then renamed).
    #[arg(long)]
    pub out: PathBuf,
}

/// Flags of `restore`.
#[derive(Debug, clap::Args)]
pub struct RestoreArgs {
    /// Backup file.
    #[arg(long)]
    pub from: PathBuf,
    /// Empty or new data directory to restore into.
    #[arg(long, required_unless_present = "store", conflicts_with = "store")]
    pub data: Option<PathBuf>,
    /// Empty PostgreSQL database to restore into, as a URL (created schema and all).
    #[arg(long, value_name = "URL", env = "BRAKELEDGER_STORE", hide_env_values = true)]
    pub store: Option<String>,
}

/// Flags of `verify-backup`.
#[derive(Debug, clap::Args)]
pub struct VerifyBackupArgs {
    /// Backup file.
    pub file: PathBuf,
}

/// `check`: verifies a data directory offline.
pub fn check(args: &CheckArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let (_, findings) = integrity::open(&args.data, PageSettings::default(), Mode::Check).with_context(|| format!("checking {}", args.data.display()))?;
    if !findings.is_sound() {
        writeln!(out, "{findings}")?;
        anyhow::bail!("{} problem(s) found in {}; restore from a backup (brakeledger restore)", findings.lines.len(), args.data.display());
    }
    let totals = findings.counted.as_ref().map(|t| (t.0.len(), t.totals()));
    match totals {
        Some((fleets, t)) => writeln!(
            out,
            "{} is sound: {fleets} fleets, {} vehicles, {} trips, {} inspections, {} replacements, as acknowledged; every stored value matches its checksum",
            args.data.display(),
            t.vehicles.count,
            t.trips.count,
            t.inspections.count,
            t.replacements.count
        )?,
        None => writeln!(out, "{} holds no records yet", args.data.display())?,
    }
    Ok(())
}

fn describe(path: &Path, summary: &BackupSummary) -> String {
    format!("{}: {}, crc32 {:08x}", path.display(), summary.describe(), summary.file_crc32)
}

/// `verify-backup`.
pub fn verify_backup(args: &VerifyBackupArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let summary = backup_file::verify(&args.file).with_context(|| format!("verifying {}", args.file.display()))?;
    writeln!(out, "sound backup {}", describe(&args.file, &summary))?;
    Ok(())
}

/// `restore`.
pub fn restore(args: &RestoreArgs, out: &mut impl Write) -> anyhow::Result<()> {
    if let Some(dir) = &args.data {
        let summary = backup_file::restore(&args.from, dir, PageSettings::default()).with_context(|| format!("restoring {} into {}", args.from.display(), dir.display()))?;
        writeln!(out, "restored {} into {}; forecasts are recomputed when the server starts", describe(&args.from, &summary), dir.display())?;
        return Ok(());
    }
    let url = args.store.as_deref().context("give --data DIR or --store postgres://…")?;
    anyhow::ensure!(crate::config::is_postgres_url(url), "--store must be a postgres:// URL");
    let target = crate::store::postgres::redacted(url);
    let summary = crate::store::postgres::backup::restore(&args.from, url).with_context(|| format!("restoring {} into {target}", args.from.display()))?;
    writeln!(out, "restored {} into {target}; forecasts are recomputed when a server starts", describe(&args.from, &summary))?;
    Ok(())
}

/// `backup`: streams a backup from the server into FILE.partial, verifies it, renames it.
pub async fn backup(server: &ServerTarget, args: &BackupArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(server).await?;
    let partial = PathBuf::from(format!("{}.partial", args.out.display()));
    let mut file = std::fs::File::create(&partial).with_context(|| format!("creating {}", partial.display()))?;
    let mut stream = connection.backup.export_backup(pb::ExportBackupRequest {}).await.map_err(|s| explain(s, "asking for a backup"))?.into_inner();
    let mut written = 0u64;
    let mut summary = None;
    while let Some(chunk) = stream.next().await {
        let chunk = chunk.map_err(|s| explain(s, "receiving the backup"))?;
        anyhow::ensure!(chunk.offset_bytes == written, "the server sent bytes at {} where {written} were expected", chunk.offset_bytes);
        file.write_all(&chunk.data)?;
        written += chunk.data.len() as u64;
        if chunk.summary.is_some() {
            summary = chunk.summary;
        }
    }
    file.sync_all()?;
    let sent = summary.context("the backup stream ended before its last chunk")?;
    anyhow::ensure!(sent.file_bytes == written, "received {written} of {} bytes", sent.file_bytes);
    let verified = backup_file::verify(&partial).with_context(|| format!("verifying the received {}", partial.display()))?;
    anyhow::ensure!(verified.file_crc32 == sent.file_crc32, "the received file's checksum differs from the server's");
    std::fs::rename(&partial, &args.out).with_context(|| format!("renaming to {}", args.out.display()))?;
    writeln!(out, "backup written and verified: {}", describe(&args.out, &verified))?;
    Ok(())
}
