//! `brakeledger push-trips`: reads a trip file, streams it to the server with StreamTrips
//! (a progress bar for large files) and prints the ingest report, naming each refused trip by
//! its line in the file.

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use futures::StreamExt;
use indicatif::{ProgressBar, ProgressStyle};
use serde::Serialize;

use crate::cli::client::{explain, Connection, ServerTarget};
use crate::cli::trip_file::{read_trips, TripFormat, TripLine};

/// Longer description of `push-trips`, with the file columns.
pub const PUSH_LONG_ABOUT: &str = "\
Send trip summaries from a CSV or JSON Lines file to the server over one stream, then print
how many were stored, how many were already there, and each refused trip with its line, field
and reason. Trips already stored are counted as duplicates, so a file can be sent again safely.
The whole file is checked first: if any line cannot be read, nothing is sent.";

/// Examples of `push-trips`, with the columns.
pub const PUSH_EXAMPLES: &str = concat!(
    "Examples:\n",
    "  brakeledger push-trips trips-march.csv\n",
    "  brakeledger push-trips --fleet north --format jsonl export.txt\n",
    "  brakeledger --server http://fleet-host:50051 push-trips trips.jsonl --json\n\n",
    "A CSV file starts like this:\n",
    "  fleet_id,vehicle_id,trip_id,start_time,end_time,distance_m,friction_energy_j,axle_energy_j,brake_applications\n",
    "  north,bus-1,t-0001,2025-03-01T07:10:00Z,2025-03-01T08:02:00Z,38400,2.9e7,1.9e7;1.0e7,141\n\n",
);

/// Trips in a file before the progress bar is shown.
const PROGRESS_THRESHOLD: usize = 2_000;
/// Rejections printed before the rest are summarised.
const FILE_ERRORS_SHOWN: usize = 50;

/// Flags of `push-trips`.
#[derive(Debug, clap::Args)]
pub struct PushTripsArgs {
    /// The trip file.
    pub file: PathBuf,
    /// File format; by default from the extension (.csv, or .jsonl/.ndjson/.json).
    #[arg(long, value_enum)]
    pub format: Option<TripFormat>,
    /// Fleet of trips whose fleet_id is empty or absent.
    #[arg(long)]
    pub fleet: Option<String>,
    /// Print the report as JSON.
    #[arg(long)]
    pub json: bool,
}

/// The report of one push, with rejections tied to file lines.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PushReport {
    /// Trips sent.
    pub sent: u64,
    /// Trips stored.
    pub accepted: u64,
    /// Trips already stored.
    pub duplicates: u64,
    /// Refused trips, the first ones only when there were very many (see `refused`).
    pub rejected: Vec<RejectedTrip>,
    /// Every refused trip, listed in `rejected` or not.
    pub refused: u64,
    /// Every refused trip counted by field and reason, most frequent first.
    pub refused_by_reason: Vec<RefusalCount>,
}

/// How many refused trips share a field and reason.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RefusalCount {
    /// The offending field.
    pub field: String,
    /// Why.
    pub reason: String,
    /// Trips.
    pub count: u64,
}

/// A refused trip.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RejectedTrip {
    /// Line in the file (0 when the server named a trip this file did not send).
    pub line: u64,
    /// The trip's identifier.
    pub trip_id: String,
    /// The offending field.
    pub field: String,
    /// Why.
    pub reason: String,
}

/// Runs `push-trips`.
pub async fn push_trips(server: &ServerTarget, args: &PushTripsArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let format = match args.format.or_else(|| TripFormat::from_path(&args.file)) {
        Some(f) => f,
        None => anyhow::bail!("cannot tell the format of {} from its extension; give --format csv or --format jsonl", args.file.display()),
    };
    let file = std::fs::File::open(&args.file).with_context(|| format!("opening {}", args.file.display()))?;
    let trips = read_trips(std::io::BufReader::new(file), format, args.fleet.as_deref()).map_err(|errors| {
        let mut message = format!("{} has {} problem(s); nothing was sent:", args.file.display(), errors.len());
        for error in errors.iter().take(FILE_ERRORS_SHOWN) {
            message.push_str(&format!("\n  {error}"));
        }
        if errors.len() > FILE_ERRORS_SHOWN {
            message.push_str(&format!("\n  ... and {} more", errors.len() - FILE_ERRORS_SHOWN));
        }
        anyhow::anyhow!(message)
    })?;
    let mut connection = Connection::open(server).await?;
    let report = send_trips(&mut connection, trips, true).await.with_context(|| format!("sending {}", args.file.display()))?;
    if args.json {
        serde_json::to_writer_pretty(&mut *out, &report)?;
        writeln!(out)?;
    } else {
        write!(out, "{}", render_report(&report))?;
    }
    if report.refused > 0 {
        // The report above says which; the exit status tells scripts that not everything landed.
        anyhow::bail!("the server refused {} of {} trip(s); the others were stored", report.refused, report.sent);
    }
    Ok(())
}

/// Streams trips with StreamTrips and ties the report's rejections back to file lines. With
/// `progress`, large files show a progress bar on stderr.
pub async fn send_trips(connection: &mut Connection, trips: Vec<TripLine>, progress: bool) -> anyhow::Result<PushReport> {
    let lines: Vec<u64> = trips.iter().map(|t| t.line).collect();
    let bar = if progress && trips.len() >= PROGRESS_THRESHOLD {
        let bar = ProgressBar::new(trips.len() as u64);
        if let Ok(style) = ProgressStyle::with_template("{msg} [{bar:40}] {pos}/{len} trips, {per_sec}, {eta} left") {
            bar.set_style(style.progress_chars("=> "));
        }
        bar.set_message("sending");
        bar
    } else {
        ProgressBar::hidden()
    };
    let counter = bar.clone();
    let stream = futures::stream::iter(trips).map(move |t| {
        counter.inc(1);
        t.trip
    });
    let result = connection.telemetry.stream_trips(stream).await;
    bar.finish_and_clear();
    let report = result.map_err(|s| explain(s, "streaming trips"))?.into_inner();
    Ok(tie_to_lines(report, &lines))
}

/// The report with each rejection's stream position replaced by its file line.
pub fn tie_to_lines(report: pb::IngestReport, lines: &[u64]) -> PushReport {
    PushReport {
        sent: lines.len() as u64,
        accepted: report.accepted,
        duplicates: report.duplicates,
        // A server from before the counts were added lists every refusal and counts none.
        refused: report.rejected_count.max(report.rejected.len() as u64),
        refused_by_reason: report
            .rejection_counts
            .into_iter()
            .map(|c| RefusalCount { field: c.field, reason: c.reason, count: c.count })
            .collect(),
        rejected: report
            .rejected
            .into_iter()
            .map(|r| RejectedTrip {
                line: usize::try_from(r.index).ok().and_then(|i| lines.get(i)).copied().unwrap_or(0),
                trip_id: r.trip_id,
                field: r.field,
                reason: r.reason,
            })
            .collect(),
    }
}

/// The report for people.
pub fn render_report(report: &PushReport) -> String {
    let mut text = format!(
        "sent {} trips: {} stored, {} already stored, {} refused\n",
        report.sent,
        report.accepted,
        report.duplicates,
        report.refused
    );
    if report.refused > report.rejected.len() as u64 {
        text.push_str(&format!("the first {} refused trips are listed below; all of them by field and reason:\n\n", report.rejected.len()));
        let mut counts = crate::cli::table::Table::new(&[
            ("trips", crate::cli::table::Align::Right),
            ("field", crate::cli::table::Align::Left),
            ("reason", crate::cli::table::Align::Left),
        ]);
        for c in &report.refused_by_reason {
            counts.row(vec![c.count.to_string(), c.field.clone(), c.reason.clone()]);
        }
        text.push_str(&counts.render());
    }
    if !report.rejected.is_empty() {
        let mut table = crate::cli::table::Table::new(&[
            ("line", crate::cli::table::Align::Right),
            ("trip", crate::cli::table::Align::Left),
            ("field", crate::cli::table::Align::Left),
            ("reason", crate::cli::table::Align::Left),
        ]);
        for r in &report.rejected {
            let line = if r.line == 0 { "?".to_owned() } else { r.line.to_string() };
            table.row(vec![line, r.trip_id.clone(), r.field.clone(), r.reason.clone()]);
        }
        text.push('\n');
        text.push_str(&table.render());
    }
    text
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rejections_point_at_file_lines_and_print_as_a_table() {
        let server_report = pb::IngestReport {
            accepted: 2,
            duplicates: 1,
            rejected: vec![
                pb::Rejection { index: 1, trip_id: "t2".into(), field: "end_time".into(), reason: "must be after start_time".into() },
                pb::Rejection { index: 9, trip_id: "zz".into(), field: "trip_id".into(), reason: "odd".into() },
            ],
            ..Default::default()
        };
        // Trips 0..4 came from lines 2, 3, 5, 6 (line 4 was blank).
        let report = tie_to_lines(server_report, &[2, 3, 5, 6]);
        assert_eq!((report.sent, report.accepted, report.duplicates), (4, 2, 1));
        assert_eq!(report.rejected[0].line, 3);
        assert_eq!(report.rejected[1].line, 0, "an index the file did not send has no line");
        let text = render_report(&report);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "sent 4 trips: 2 stored, 1 already stored, 2 refused");
        assert!(lines[2].starts_with("line  trip  field"), "{text}");
        assert_eq!(lines[4], "   3  t2    end_time  must be after start_time");
        assert!(lines[5].starts_with("   ?  zz"), "{text}");
    }

    #[test]
    fn a_capped_report_says_so_and_prints_the_counts() {
        let server_report = pb::IngestReport {
            rejected: vec![pb::Rejection { index: 0, trip_id: "t1".into(), field: "distance_m".into(), reason: "must not be negative".into() }],
            rejected_count: 5000,
            rejection_counts: vec![pb::RejectionCount { field: "distance_m".into(), reason: "must not be negative".into(), count: 5000 }],
            ..Default::default()
        };
        let text = render_report(&tie_to_lines(server_report, &[2]));
        assert!(text.starts_with("sent 1 trips: 0 stored, 0 already stored, 5000 refused\nthe first 1 refused trips are listed below"), "{text}");
        assert!(text.contains(" 5000  distance_m  must not be negative"), "{text}");
    }

    #[test]
    fn a_clean_report_is_one_line() {
        let report = tie_to_lines(pb::IngestReport { accepted: 3, ..Default::default() }, &[2, 3, 4]);
        assert_eq!(render_report(&report), "sent 3 trips: 3 stored, 0 already stored, 0 refused\n");
    }
}
