//! `brakeledger record-inspection` and `record-replacement`: one workshop record each, sent
//! with RecordInspection or RecordReplacement. Without `--id`, the record's identifier is made
//! from its fields, so running the same command twice stores it once.

use std::io::Write;

use brakeledger_proto::v1 as pb;
use chrono::{DateTime, Utc};

use crate::cli::client::{explain, Connection, ServerTarget};
use crate::cli::dates::{parse_instant, to_timestamp};
use crate::cli::parts::{brake_type_of, part_name, PartArg};

/// Examples of `record-inspection`.
pub const INSPECTION_EXAMPLES: &str = "\
Examples:
  brakeledger record-inspection --fleet north --vehicle bus-17 --axle 1 --component pad --thickness-mm 9.4
  brakeledger record-inspection --fleet north --vehicle bus-17 --axle 2 --component drum \\
      --thickness-mm 14.1 --at 2025-03-01T10:15:00+01:00 --id ws-2025-0412";

/// Examples of `record-replacement`.
pub const REPLACEMENT_EXAMPLES: &str = "\
Examples:
  brakeledger record-replacement --fleet north --vehicle bus-17 --axle 1 --component pad
  brakeledger record-replacement --fleet north --vehicle bus-17 --axle 1 --component rotor \\
      --new-thickness-mm 45 --at 2025-03-02T09:00:00Z";

/// Flags that name one part of one vehicle at one time.
#[derive(Debug, clap::Args)]
pub struct PartRecordArgs {
    /// Fleet identifier.
    #[arg(long)]
    pub fleet: String,
    /// Vehicle identifier.
    #[arg(long)]
    pub vehicle: String,
    /// Axle, 1 = front-most.
    #[arg(long)]
    pub axle: u32,
    /// Part: pad (or lining) or rotor (or drum).
    #[arg(long, value_enum)]
    pub component: PartArg,
    /// When, ISO 8601 with offset (e.g. 2025-03-01T10:15:00Z); default now.
    #[arg(long, value_parser = parse_instant)]
    pub at: Option<DateTime<Utc>>,
    /// Identifier of the record (the idempotency key); default made from the fields.
    #[arg(long)]
    pub id: Option<String>,
}

impl PartRecordArgs {
    /// `--at`, or now.
    pub fn when(&self) -> DateTime<Utc> {
        self.at.unwrap_or_else(Utc::now)
    }

    /// The record's identifier: `--id`, or `<kind>-a<axle>-<part>-<time>`.
    fn record_id(&self, kind: &str, when: DateTime<Utc>) -> String {
        self.id.clone().unwrap_or_else(|| {
            let part = match self.component {
                PartArg::Pad => "friction",
                PartArg::Rotor => "disc",
            };
            format!("{kind}-a{}-{part}-{}", self.axle, when.format("%Y%m%dT%H%M%SZ"))
        })
    }
}

/// Flags of `record-inspection`.
#[derive(Debug, clap::Args)]
pub struct InspectionArgs {
    /// The part and time.
    #[command(flatten)]
    pub part: PartRecordArgs,
    /// Measured thickness, mm.
    #[arg(long)]
    pub thickness_mm: f64,
}

/// Flags of `record-replacement`.
#[derive(Debug, clap::Args)]
pub struct ReplacementArgs {
    /// The part and time.
    #[command(flatten)]
    pub part: PartRecordArgs,
    /// Thickness of the part fitted, mm; default the vehicle's configured new thickness.
    #[arg(long)]
    pub new_thickness_mm: Option<f64>,
}

/// The RecordInspection request of `record-inspection`'s flags, measured at `when`.
pub fn inspection_request(args: &InspectionArgs, when: DateTime<Utc>) -> pb::RecordInspectionRequest {
    pb::RecordInspectionRequest {
        fleet_id: args.part.fleet.clone(),
        vehicle_id: args.part.vehicle.clone(),
        inspection_id: args.part.record_id("inspection", when),
        axle_index: args.part.axle,
        component: args.part.component.component() as i32,
        thickness_mm: args.thickness_mm,
        measured_at: Some(to_timestamp(when)),
    }
}

/// The RecordReplacement request of `record-replacement`'s flags, replaced at `when`.
pub fn replacement_request(args: &ReplacementArgs, when: DateTime<Utc>) -> pb::RecordReplacementRequest {
    pb::RecordReplacementRequest {
        fleet_id: args.part.fleet.clone(),
        vehicle_id: args.part.vehicle.clone(),
        replacement_id: args.part.record_id("replacement", when),
        axle_index: args.part.axle,
        component: args.part.component.component() as i32,
        new_thickness_mm: args.new_thickness_mm.unwrap_or(0.0),
        replaced_at: Some(to_timestamp(when)),
    }
}

/// Runs `record-inspection`.
pub async fn record_inspection(server: &ServerTarget, args: &InspectionArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let when = args.part.when();
    let request = inspection_request(args, when);
    let id = request.inspection_id.clone();
    let mut connection = Connection::open(server).await?;
    let response = connection
        .maintenance
        .record_inspection(request)
        .await
        .map_err(|s| explain(s, &format!("recording inspection '{id}' of vehicle '{}'", args.part.vehicle)))?
        .into_inner();
    let part = part_word(&mut connection, &args.part).await;
    let status = if response.duplicate { "already stored, nothing changed" } else { "stored" };
    writeln!(
        out,
        "inspection '{id}' of vehicle '{}', axle {} {}: {} mm at {}: {status}",
        args.part.vehicle,
        args.part.axle,
        part,
        args.thickness_mm,
        when.to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
    )?;
    Ok(())
}

/// Runs `record-replacement`.
pub async fn record_replacement(server: &ServerTarget, args: &ReplacementArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let when = args.part.when();
    let request = replacement_request(args, when);
    let id = request.replacement_id.clone();
    let mut connection = Connection::open(server).await?;
    let response = connection
        .maintenance
        .record_replacement(request)
        .await
        .map_err(|s| explain(s, &format!("recording replacement '{id}' of vehicle '{}'", args.part.vehicle)))?
        .into_inner();
    let part = part_word(&mut connection, &args.part).await;
    let status = if response.duplicate { "already stored, nothing changed" } else { "stored" };
    writeln!(
        out,
        "replacement '{id}' of vehicle '{}', axle {} {} at {}: {status}",
        args.part.vehicle,
        args.part.axle,
        part,
        when.to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
    )?;
    Ok(())
}

/// The part as the trade names it on that axle (pad and rotor on a disc axle, lining and drum
/// on a drum axle), from the vehicle's brake type.
async fn part_word(connection: &mut Connection, part: &PartRecordArgs) -> &'static str {
    let vehicle = connection.vehicle_if_any(&part.fleet, &part.vehicle).await;
    part_name(part.component.component() as i32, brake_type_of(vehicle.as_ref(), part.axle))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cli::{Cli, Command};
    use clap::Parser;

    #[test]
    fn record_ids_are_stable_for_the_same_fields() {
        let cli = Cli::try_parse_from([
            "brakeledger", "record-inspection", "--fleet", "north", "--vehicle", "bus-17", "--axle", "2", "--component", "lining",
            "--thickness-mm", "9.5", "--at", "2025-03-01T10:15:00+01:00",
        ])
        .expect("parse");
        let Command::RecordInspection(args) = cli.command else { panic!("wrong subcommand") };
        assert_eq!(args.part.component, PartArg::Pad);
        let when = args.part.when();
        assert_eq!(args.part.record_id("inspection", when), "inspection-a2-friction-20250301T091500Z");
        assert_eq!(args.thickness_mm, 9.5);
    }

    #[test]
    fn a_time_without_offset_is_refused_with_the_reason() {
        let error = Cli::try_parse_from([
            "brakeledger", "record-replacement", "--fleet", "north", "--vehicle", "bus-17", "--axle", "1", "--component", "rotor",
            "--at", "2025-03-01T10:15:00",
        ])
        .expect_err("no offset");
        assert!(error.to_string().contains("no UTC offset"), "{error}");
    }
}
