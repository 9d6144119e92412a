//! `brakeledger push-trips`: reads a trip file, sends it to the server with IngestTrips (a
//! progress bar for large files; waiting and resuming when the server's ingest limit is
//! reached) and prints the ingest report, naming each refused trip by its line in the file.

use std::collections::HashMap;
use std::io::Write;
use std::path::PathBuf;
use std::sync::Arc;
use std::time::Duration;

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use indicatif::{ProgressBar, ProgressStyle};
use serde::Serialize;
use tonic_types::StatusExt;

use crate::cli::client::{explain, Connection, ServerTarget};
use crate::cli::trip_file::{read_trips, TripFormat, TripLine};

/// Longer description of `push-trips`, with the file columns.
pub const PUSH_LONG_ABOUT: &str = "\
Send trip summaries from a CSV or JSON Lines file to the server (IngestTrips, acknowledged as
they reach disk), then print how many were stored, how many were already there, and each
refused trip with its line, field and reason. Trips already stored are counted as duplicates,
so a file can be sent again safely. The whole file is checked first: if any line cannot be
read, nothing is sent. When the server's ingest limit for the token is reached, the command
waits as the server advises and resumes after the last acknowledged trip.";

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

/// Trips per IngestTrips message.
const TRIPS_PER_MESSAGE: usize = 500;
/// Shortest wait before resuming after the server's ingest limit refused a trip. The server's
/// hint is the time until one more trip fits, often a millisecond; waiting a second lets a
/// second's worth of trips through per call instead of a handful.
const MIN_LIMIT_WAIT: Duration = Duration::from_secs(1);
/// Calls in a row that settle nothing before a push gives up waiting for the limit.
const MAX_IDLE_CALLS: u32 = 5;
/// Refused trips listed in a report (each call lists at most the server's `[ingest]
/// max_listed_rejections`; a push resumed after the ingest limit makes several calls).
const MAX_LISTED_REFUSALS: usize = 1000;

/// Sends trips with IngestTrips and ties the acknowledgements' rejections back to file lines.
/// With `progress`, large files show a progress bar on stderr.
///
/// When the server's per-token ingest limit refuses a trip (`RESOURCE_EXHAUSTED` with
/// `google.rpc.RetryInfo`), the call ends after storing what it read; the push waits (the
/// server's hint, at least [`MIN_LIMIT_WAIT`]) and resumes from the last acknowledged trip, so a
/// file larger than the limit's burst goes in whole at the limit's rate. Any other error ends
/// the push, saying how far the file was settled (resending it is safe: stored trips count as
/// duplicates).
pub async fn send_trips(connection: &mut Connection, trips: Vec<TripLine>, progress: bool) -> anyhow::Result<PushReport> {
    let lines: Vec<u64> = trips.iter().map(|t| t.line).collect();
    let summaries: Arc<Vec<pb::TripSummary>> = Arc::new(trips.into_iter().map(|t| t.trip).collect());
    let bar = if progress && summaries.len() >= PROGRESS_THRESHOLD {
        let bar = ProgressBar::new(summaries.len() as u64);
        if let Ok(style) = ProgressStyle::with_template("{msg} [{bar:40}] {pos}/{len} trips, {per_sec}, {eta} left") {
            bar.set_style(style.progress_chars("=> "));
        }
        bar.set_message("sending");
        bar
    } else {
        ProgressBar::hidden()
    };
    let mut tally = AckTally::default();
    // The first trip of the current call, as an index into the file's trips.
    let mut base = 0usize;
    let mut idle_calls = 0;
    loop {
        let shared = Arc::clone(&summaries);
        let messages = futures::stream::iter((base..shared.len()).step_by(TRIPS_PER_MESSAGE).map(move |from| pb::IngestTripsRequest {
            trips: shared[from..(from + TRIPS_PER_MESSAGE).min(shared.len())].to_vec(),
        }));
        let mut settled = 0usize;
        let ended: Result<(), tonic::Status> = async {
            let mut acks = connection.telemetry.ingest_trips(messages).await?.into_inner();
            while let Some(ack) = acks.message().await? {
                tally.add(&ack, base, &lines);
                settled = usize::try_from(ack.settled_trips).unwrap_or(usize::MAX);
                bar.set_position(base.saturating_add(settled).min(summaries.len()) as u64);
            }
            Ok(())
        }
        .await;
        let Err(status) = ended else { break };
        base = base.saturating_add(settled).min(summaries.len());
        let retry = (status.code() == tonic::Code::ResourceExhausted).then(|| status.get_details_retry_info()).flatten();
        let Some(retry) = retry else {
            bar.finish_and_clear();
            let settled_note = format!(
                "sending trips ({} of {} settled: stored, already stored or refused; sending the file again is safe)",
                base,
                summaries.len()
            );
            return Err(explain(status, &settled_note));
        };
        idle_calls = if settled == 0 { idle_calls + 1 } else { 0 };
        if idle_calls > MAX_IDLE_CALLS {
            bar.finish_and_clear();
            return Err(explain(status, &format!("sending trips ({base} of {} settled; the server's ingest limit let none through in {MAX_IDLE_CALLS} tries)", summaries.len())));
        }
        let wait = retry.retry_delay.unwrap_or_default().max(MIN_LIMIT_WAIT);
        bar.suspend(|| eprintln!("the server's ingest limit for this token was reached at trip {base} of {}: waiting {:.1} s, then resuming", summaries.len(), wait.as_secs_f64()));
        tokio::time::sleep(wait).await;
    }
    bar.finish_and_clear();
    Ok(tally.into_report(summaries.len() as u64))
}

/// What the acknowledgements of one push said, over every call it took.
#[derive(Debug, Default)]
struct AckTally {
    accepted: u64,
    duplicates: u64,
    refused: u64,
    rejected: Vec<RejectedTrip>,
    groups: HashMap<(String, String), u64>,
}

impl AckTally {
    /// Adds one acknowledgement of a call whose first trip is the file's trip `base`.
    fn add(&mut self, ack: &pb::IngestAck, base: usize, lines: &[u64]) {
        self.accepted += ack.accepted;
        self.duplicates += ack.duplicates;
        self.refused += ack.rejected_count;
        let room = MAX_LISTED_REFUSALS.saturating_sub(self.rejected.len());
        self.rejected.extend(ack.rejected.iter().take(room).map(|r| RejectedTrip {
            line: usize::try_from(r.index).ok().and_then(|i| i.checked_add(base)).and_then(|i| lines.get(i)).copied().unwrap_or(0),
            trip_id: r.trip_id.clone(),
            field: r.field.clone(),
            reason: r.reason.clone(),
        }));
        if ack.rejection_counts.is_empty() {
            // A server from before the acks counted refusals by reason: the listed ones, and
            // the rest under one line.
            for r in &ack.rejected {
                *self.groups.entry((r.field.clone(), r.reason.clone())).or_insert(0) += 1;
            }
            let unlisted = ack.rejected_count.saturating_sub(ack.rejected.len() as u64);
            if unlisted > 0 {
                *self.groups.entry((String::new(), "not listed by the server".into())).or_insert(0) += unlisted;
            }
        }
        for c in &ack.rejection_counts {
            *self.groups.entry((c.field.clone(), c.reason.clone())).or_insert(0) += c.count;
        }
    }

    fn into_report(self, sent: u64) -> PushReport {
        // In the order of the server's own report: most frequent first.
        let refused_by_reason: Vec<RefusalCount> = crate::grpc::refusals::sorted_counts(self.groups)
            .into_iter()
            .map(|c| RefusalCount { field: c.field, reason: c.reason, count: c.count })
            .collect();
        PushReport { sent, accepted: self.accepted, duplicates: self.duplicates, rejected: self.rejected, refused: self.refused, refused_by_reason }
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

    fn rejection(index: u64, trip_id: &str, field: &str, reason: &str) -> pb::Rejection {
        pb::Rejection { index, trip_id: trip_id.into(), field: field.into(), reason: reason.into() }
    }

    fn count(field: &str, reason: &str, count: u64) -> pb::RejectionCount {
        pb::RejectionCount { field: field.into(), reason: reason.into(), count }
    }

    /// Two calls (the second resumed at the file's third trip after the ingest limit): each
    /// call's indices count from its own first trip.
    #[test]
    fn rejections_of_resumed_calls_point_at_file_lines_and_print_as_a_table() {
        // Trips 0..4 came from lines 2, 3, 5, 6 (line 4 was blank).
        let lines = [2, 3, 5, 6];
        let mut tally = AckTally::default();
        let first_call = pb::IngestAck {
            settled_trips: 2,
            accepted: 1,
            rejected_count: 1,
            rejected: vec![rejection(1, "t2", "end_time", "must be after start_time")],
            rejection_counts: vec![count("end_time", "must be after start_time", 1)],
            ..Default::default()
        };
        tally.add(&first_call, 0, &lines);
        let resumed_call = pb::IngestAck {
            settled_trips: 2,
            accepted: 1,
            duplicates: 1,
            rejected_count: 1,
            rejected: vec![rejection(9, "zz", "trip_id", "odd")],
            rejection_counts: vec![count("trip_id", "odd", 1)],
            ..Default::default()
        };
        tally.add(&resumed_call, 2, &lines);
        let report = tally.into_report(4);
        assert_eq!((report.sent, report.accepted, report.duplicates, report.refused), (4, 2, 1, 2));
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
        let ack = pb::IngestAck {
            settled_trips: 5000,
            rejected: vec![rejection(0, "t1", "distance_m", "must not be negative")],
            rejected_count: 5000,
            rejection_counts: vec![count("distance_m", "must not be negative", 5000)],
            ..Default::default()
        };
        let mut tally = AckTally::default();
        tally.add(&ack, 0, &[2]);
        let text = render_report(&tally.into_report(5000));
        assert!(text.starts_with("sent 5000 trips: 0 stored, 0 already stored, 5000 refused\nthe first 1 refused trips are listed below"), "{text}");
        assert!(text.contains(" 5000  distance_m  must not be negative"), "{text}");

        // A server whose acks carry no counts by reason: the listed ones, and the rest as such.
        let mut tally = AckTally::default();
        tally.add(&pb::IngestAck { rejection_counts: Vec::new(), ..ack }, 0, &[2]);
        let report = tally.into_report(5000);
        assert_eq!(report.refused_by_reason.iter().map(|c| (c.field.as_str(), c.count)).collect::<Vec<_>>(), vec![("", 4999), ("distance_m", 1)]);
    }

    #[test]
    fn a_clean_report_is_one_line() {
        let mut tally = AckTally::default();
        tally.add(&pb::IngestAck { settled_trips: 3, accepted: 3, ..Default::default() }, 0, &[2, 3, 4]);
        assert_eq!(render_report(&tally.into_report(3)), "sent 3 trips: 3 stored, 0 already stored, 0 refused\n");
    }
}
