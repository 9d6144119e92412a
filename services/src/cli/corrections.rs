//! `brakeledger void-record`, `supersede-inspection`, `supersede-replacement` and `records`:
//! correcting a workshop record entered by mistake (VoidRecord, SupersedeRecord) and listing a
//! vehicle's records with their status (ListServiceRecords). The original is always kept.

use std::io::Write;

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use serde::Serialize;

use crate::cli::client::{explain, Connection, ServerTarget};
use crate::cli::dates::from_timestamp;
use crate::cli::maintenance::{inspection_request, replacement_request, InspectionArgs, ReplacementArgs};
use crate::cli::parts::{brake_type_of, part_name};
use crate::cli::table::{number, Align, Table};

/// Examples of the correction commands.
pub const CORRECTION_EXAMPLES: &str = "\
Examples:
  brakeledger void-record --fleet north --vehicle bus-17 --inspection ws-2025-0412 --reason 'measured the wrong bus'
  brakeledger supersede-inspection --supersedes ws-2025-0412 --reason 'typed 4.9 for 9.4' \\
      --fleet north --vehicle bus-17 --axle 1 --component pad --thickness-mm 9.4 --at 2025-03-01T10:15:00Z
  brakeledger records --fleet north --vehicle bus-17

The record corrected stays on file, listed by `records` as voided or superseded with the
reason; forecasts stop using it and are recomputed.";

/// Flags of `void-record`.
#[derive(Debug, clap::Args)]
pub struct VoidArgs {
    /// Fleet identifier.
    #[arg(long)]
    pub fleet: String,
    /// Vehicle identifier.
    #[arg(long)]
    pub vehicle: String,
    /// Id of the inspection to void.
    #[arg(long, required_unless_present = "replacement", conflicts_with = "replacement")]
    pub inspection: Option<String>,
    /// Id of the replacement to void.
    #[arg(long)]
    pub replacement: Option<String>,
    /// Why it is voided (kept with the record).
    #[arg(long)]
    pub reason: String,
}

/// Flags of `supersede-inspection`.
#[derive(Debug, clap::Args)]
pub struct SupersedeInspectionArgs {
    /// Id of the inspection corrected.
    #[arg(long)]
    pub supersedes: String,
    /// Why it is corrected (kept with the record).
    #[arg(long)]
    pub reason: String,
    /// The corrected inspection (without `--id`: the corrected id followed by `-corrected`).
    #[command(flatten)]
    pub inspection: InspectionArgs,
}

/// Flags of `supersede-replacement`.
#[derive(Debug, clap::Args)]
pub struct SupersedeReplacementArgs {
    /// Id of the replacement corrected.
    #[arg(long)]
    pub supersedes: String,
    /// Why it is corrected (kept with the record).
    #[arg(long)]
    pub reason: String,
    /// The corrected replacement (without `--id`: the corrected id followed by `-corrected`).
    #[command(flatten)]
    pub replacement: ReplacementArgs,
}

/// Flags of `records`.
#[derive(Debug, clap::Args)]
pub struct RecordsArgs {
    /// Fleet identifier.
    #[arg(long)]
    pub fleet: String,
    /// Vehicle identifier.
    #[arg(long)]
    pub vehicle: String,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

/// What a correction command prints.
fn said(duplicate: bool) -> &'static str {
    if duplicate {
        "already corrected so, nothing changed"
    } else {
        "done; the original is kept, forecasts are being recomputed"
    }
}

/// Runs `void-record`.
pub async fn void_record(server: &ServerTarget, args: &VoidArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let (kind, id) = match (&args.inspection, &args.replacement) {
        (Some(id), _) => (pb::RecordKind::Inspection, id.clone()),
        (None, Some(id)) => (pb::RecordKind::Replacement, id.clone()),
        (None, None) => anyhow::bail!("name the record: --inspection ID or --replacement ID"),
    };
    let request = pb::VoidRecordRequest {
        fleet_id: args.fleet.clone(),
        vehicle_id: args.vehicle.clone(),
        kind: kind as i32,
        record_id: id.clone(),
        reason: args.reason.clone(),
    };
    let mut connection = Connection::open(server).await?;
    let response = connection
        .maintenance
        .void_record(request)
        .await
        .map_err(|s| explain(s, &format!("voiding {} '{id}' of vehicle '{}'", kind_word(kind as i32), args.vehicle)))?
        .into_inner();
    writeln!(out, "{} '{id}' of vehicle '{}' voided: {}", kind_word(kind as i32), args.vehicle, said(response.duplicate))?;
    Ok(())
}

/// Runs `supersede-inspection`.
pub async fn supersede_inspection(server: &ServerTarget, args: &SupersedeInspectionArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut correction = inspection_request(&args.inspection, args.inspection.part.when());
    if args.inspection.part.id.is_none() {
        correction.inspection_id = format!("{}-corrected", args.supersedes);
    }
    let new_id = correction.inspection_id.clone();
    let vehicle = correction.vehicle_id.clone();
    supersede(server, pb::RecordKind::Inspection, &args.supersedes, &args.reason, pb::supersede_record_request::Correction::Inspection(correction), &new_id, &vehicle, out).await
}

/// Runs `supersede-replacement`.
pub async fn supersede_replacement(server: &ServerTarget, args: &SupersedeReplacementArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut correction = replacement_request(&args.replacement, args.replacement.part.when());
    if args.replacement.part.id.is_none() {
        correction.replacement_id = format!("{}-corrected", args.supersedes);
    }
    let new_id = correction.replacement_id.clone();
    let vehicle = correction.vehicle_id.clone();
    supersede(server, pb::RecordKind::Replacement, &args.supersedes, &args.reason, pb::supersede_record_request::Correction::Replacement(correction), &new_id, &vehicle, out).await
}

#[allow(clippy::too_many_arguments)] // one call per command; a struct would only rename the arguments
async fn supersede(
    server: &ServerTarget,
    kind: pb::RecordKind,
    superseded_id: &str,
    reason: &str,
    correction: pb::supersede_record_request::Correction,
    new_id: &str,
    vehicle: &str,
    out: &mut impl Write,
) -> anyhow::Result<()> {
    let request = pb::SupersedeRecordRequest { kind: kind as i32, superseded_id: superseded_id.to_owned(), reason: reason.to_owned(), correction: Some(correction) };
    let word = kind_word(kind as i32);
    let mut connection = Connection::open(server).await?;
    let response = connection
        .maintenance
        .supersede_record(request)
        .await
        .map_err(|s| explain(s, &format!("superseding {word} '{superseded_id}' of vehicle '{vehicle}'")))?
        .into_inner();
    writeln!(out, "{word} '{superseded_id}' of vehicle '{vehicle}' superseded by '{new_id}': {}", said(response.duplicate))?;
    Ok(())
}

fn kind_word(kind: i32) -> &'static str {
    match pb::RecordKind::try_from(kind) {
        Ok(pb::RecordKind::Inspection) => "inspection",
        Ok(pb::RecordKind::Replacement) => "replacement",
        _ => "record",
    }
}

fn status_word(status: i32) -> &'static str {
    match pb::RecordStatus::try_from(status) {
        Ok(pb::RecordStatus::InForce) => "in force",
        Ok(pb::RecordStatus::Voided) => "voided",
        Ok(pb::RecordStatus::Superseded) => "superseded",
        _ => "?",
    }
}

/// One record for scripts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RecordView {
    /// inspection or replacement.
    pub kind: &'static str,
    /// Its id.
    pub record_id: String,
    /// When measured or replaced (RFC 3339, UTC).
    pub at: String,
    /// Axle, 1 = front-most.
    pub axle_index: u32,
    /// pad, lining, rotor or drum.
    pub part: &'static str,
    /// Measured or fitted thickness, mm.
    pub thickness_mm: f64,
    /// in force, voided or superseded.
    pub status: &'static str,
    /// Why it was corrected.
    pub reason: String,
    /// The record superseding it.
    pub superseded_by: String,
    /// The record it corrects.
    pub supersedes: String,
}

/// Runs `records`.
pub async fn records(server: &ServerTarget, args: &RecordsArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(server).await?;
    let request = pb::ListServiceRecordsRequest { fleet_id: args.fleet.clone(), vehicle_id: args.vehicle.clone() };
    let response = connection
        .maintenance
        .list_service_records(request)
        .await
        .map_err(|s| explain(s, &format!("listing the records of vehicle '{}' in fleet '{}'", args.vehicle, args.fleet)))?
        .into_inner();
    let vehicle = connection
        .fleet
        .get_vehicle(pb::GetVehicleRequest { fleet_id: args.fleet.clone(), vehicle_id: args.vehicle.clone() })
        .await
        .map_err(|s| explain(s, &format!("reading vehicle '{}'", args.vehicle)))?
        .into_inner()
        .vehicle;
    let views: Vec<RecordView> = response
        .records
        .iter()
        .map(|r| RecordView {
            kind: kind_word(r.kind),
            record_id: r.record_id.clone(),
            at: r.at.as_ref().and_then(from_timestamp).map(|t| t.to_rfc3339_opts(chrono::SecondsFormat::Secs, true)).unwrap_or_default(),
            axle_index: r.axle_index,
            part: part_name(r.component, brake_type_of(vehicle.as_ref(), r.axle_index)),
            thickness_mm: r.thickness_mm,
            status: status_word(r.status),
            reason: r.reason.clone(),
            superseded_by: r.superseded_by.clone(),
            supersedes: r.supersedes.clone(),
        })
        .collect();
    if args.json {
        serde_json::to_writer_pretty(&mut *out, &views).context("writing JSON")?;
        writeln!(out)?;
        return Ok(());
    }
    writeln!(out, "Workshop records of vehicle {} (fleet {}), oldest first:\n", args.vehicle, args.fleet)?;
    let mut table = Table::new(&[
        ("at (UTC)", Align::Left),
        ("record", Align::Left),
        ("id", Align::Left),
        ("axle", Align::Right),
        ("part", Align::Left),
        ("mm", Align::Right),
        ("status", Align::Left),
        ("note", Align::Left),
    ]);
    for v in &views {
        let note = match (v.superseded_by.is_empty(), v.supersedes.is_empty()) {
            (false, _) => format!("by {}: {}", v.superseded_by, v.reason),
            (true, false) => format!("corrects {}", v.supersedes),
            (true, true) => v.reason.clone(),
        };
        table.row(vec![v.at.clone(), v.kind.to_owned(), v.record_id.clone(), v.axle_index.to_string(), v.part.to_owned(), number(v.thickness_mm, 1), v.status.to_owned(), note]);
    }
    write!(out, "{}", table.render())?;
    Ok(())
}
