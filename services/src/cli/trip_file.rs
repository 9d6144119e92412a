//! Trip files: trip summaries as CSV (one header row, one trip per row) or JSON Lines (one
//! JSON object per line), read into `TripSummary` messages that remember their line numbers.
//!
//! Both formats carry the same fields (see [`COLUMNS_HELP`]). Reading checks the form of each
//! line (numbers are numbers, times are ISO 8601 with an offset); whether the values make sense
//! for the vehicle is the server's call, reported per trip in the ingest report.

use std::io::Read;
use std::path::Path;

use brakeledger_proto::v1 as pb;
use serde::{Deserialize, Serialize};

use crate::cli::dates::{parse_instant, to_timestamp};

/// The columns of a trip file, for `--help`.
pub const COLUMNS_HELP: &str = "\
Columns (CSV header names; the same keys in JSON Lines):
  fleet_id            fleet identifier (may be left out when --fleet is given)
  vehicle_id          vehicle identifier, registered beforehand (required)
  trip_id             trip identifier, unique per vehicle; sending it again is harmless (required)
  start_time          ISO 8601 / RFC 3339 with offset, e.g. 2025-03-01T07:10:00Z (required)
  end_time            same form, after start_time (required)
  distance_m          distance driven, m (required)
  friction_energy_j   friction braking energy after regeneration, J (required)
  axle_energy_j       per-axle split of friction_energy_j, J, front axle first; CSV: values
                      separated by ';' (e.g. 1.2e7;6.5e6), JSON: an array; optional
  brake_applications  number of brake applications (optional, default 0)
  regen_energy_j      energy recovered by regenerative braking, J (optional)
  hot_energy_j        friction energy of hot stops, J (optional; see `brakeledger summarise`)
  retarder_energy_j   energy taken by a retarder or engine brake, J, NOT part of
                      friction_energy_j (optional)
Empty CSV cells of optional columns mean \"not given\". Blank lines are skipped.";

/// File formats of trip files.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum TripFormat {
    /// Comma-separated values with a header row.
    Csv,
    /// One JSON object per line.
    Jsonl,
}

impl TripFormat {
    /// The format a file name suggests: `.csv` is CSV; `.jsonl`, `.ndjson` and `.json` are
    /// JSON Lines.
    pub fn from_path(path: &Path) -> Option<Self> {
        let extension = path.extension()?.to_str()?.to_ascii_lowercase();
        match extension.as_str() {
            "csv" => Some(Self::Csv),
            "jsonl" | "ndjson" | "json" => Some(Self::Jsonl),
            _ => None,
        }
    }
}

/// One JSON Lines record (also what `summarise` prints when given the trip's identity).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TripJson {
    /// Fleet identifier; `--fleet` fills it in when absent.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fleet_id: Option<String>,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Trip identifier.
    pub trip_id: String,
    /// Start, RFC 3339.
    pub start_time: String,
    /// End, RFC 3339.
    pub end_time: String,
    /// Distance, m.
    pub distance_m: f64,
    /// Friction braking energy, J.
    pub friction_energy_j: f64,
    /// Per-axle friction energy, J, front first; empty when not split.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub axle_energy_j: Vec<f64>,
    /// Brake applications.
    #[serde(default)]
    pub brake_applications: u32,
    /// Regenerated energy, J.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub regen_energy_j: Option<f64>,
    /// Friction energy of hot stops, J.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub hot_energy_j: Option<f64>,
    /// Energy taken by a retarder or engine brake, J (not part of `friction_energy_j`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub retarder_energy_j: Option<f64>,
}

/// A trip read from a file, with the line it came from.
#[derive(Debug, Clone, PartialEq)]
pub struct TripLine {
    /// Line number in the file, from 1.
    pub line: u64,
    /// The trip.
    pub trip: pb::TripSummary,
}

/// A problem with one line of a trip file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LineError {
    /// Line number in the file, from 1 (0 when the problem is the file as a whole).
    pub line: u64,
    /// The column or key concerned, when known.
    pub field: Option<String>,
    /// What is wrong, in plain words.
    pub reason: String,
}

impl std::fmt::Display for LineError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match (&self.field, self.line) {
            (Some(field), 0) => write!(f, "{field}: {}", self.reason),
            (None, 0) => write!(f, "{}", self.reason),
            (Some(field), line) => write!(f, "line {line}, {field}: {}", self.reason),
            (None, line) => write!(f, "line {line}: {}", self.reason),
        }
    }
}

impl LineError {
    fn new(line: u64, field: Option<&str>, reason: impl Into<String>) -> Self {
        Self { line, field: field.map(str::to_owned), reason: reason.into() }
    }
}

/// Reads every trip of a file. On any bad line, returns every problem found instead (nothing
/// should be sent from a file that is partly unreadable).
pub fn read_trips(reader: impl Read, format: TripFormat, default_fleet: Option<&str>) -> Result<Vec<TripLine>, Vec<LineError>> {
    match format {
        TripFormat::Csv => read_csv(reader, default_fleet),
        TripFormat::Jsonl => read_jsonl(reader, default_fleet),
    }
}

/// Columns a CSV trip file must have (besides `fleet_id` when `--fleet` is not given).
const REQUIRED_COLUMNS: [&str; 6] = ["vehicle_id", "trip_id", "start_time", "end_time", "distance_m", "friction_energy_j"];
/// Columns a CSV trip file may have.
const OPTIONAL_COLUMNS: [&str; 6] = ["fleet_id", "axle_energy_j", "brake_applications", "regen_energy_j", "hot_energy_j", "retarder_energy_j"];

/// Line numbers of byte offsets in a text (the csv reader's own line count skips blank lines,
/// so lines are counted here from the bytes).
pub struct LineIndex {
    /// Byte offset of each newline.
    newlines: Vec<usize>,
}

impl LineIndex {
    /// The index of a text.
    pub fn new(text: &[u8]) -> Self {
        Self { newlines: text.iter().enumerate().filter(|(_, b)| **b == b'\n').map(|(i, _)| i).collect() }
    }

    /// The line (from 1) holding the first non-blank byte at or after `byte`.
    pub fn line_of(&self, byte: u64, text: &[u8]) -> u64 {
        let mut at = usize::try_from(byte).unwrap_or(usize::MAX).min(text.len());
        while at < text.len() && matches!(text[at], b'\n' | b'\r') {
            at += 1;
        }
        self.newlines.partition_point(|&n| n < at) as u64 + 1
    }
}

fn read_csv(mut reader: impl Read, default_fleet: Option<&str>) -> Result<Vec<TripLine>, Vec<LineError>> {
    let mut text = Vec::new();
    if let Err(e) = reader.read_to_end(&mut text) {
        return Err(vec![LineError::new(0, None, format!("cannot read the file: {e}"))]);
    }
    let lines = LineIndex::new(&text);
    let mut csv = csv::ReaderBuilder::new().trim(csv::Trim::All).from_reader(text.as_slice());
    let headers: Vec<String> = match csv.headers() {
        Ok(h) => h.iter().map(|h| h.trim().to_ascii_lowercase()).collect(),
        Err(e) => return Err(vec![LineError::new(1, None, format!("cannot read the header row: {e}"))]),
    };
    let mut errors = Vec::new();
    for (i, name) in headers.iter().enumerate() {
        if !REQUIRED_COLUMNS.contains(&name.as_str()) && !OPTIONAL_COLUMNS.contains(&name.as_str()) {
            errors.push(LineError::new(1, Some(name), "unknown column (see --help for the column names)"));
        }
        if headers[..i].contains(name) {
            errors.push(LineError::new(1, Some(name), "column appears twice"));
        }
    }
    for required in REQUIRED_COLUMNS {
        if !headers.iter().any(|h| h == required) {
            errors.push(LineError::new(1, Some(required), "required column is missing from the header row"));
        }
    }
    if default_fleet.is_none() && !headers.iter().any(|h| h == "fleet_id") {
        errors.push(LineError::new(1, Some("fleet_id"), "column is missing and no --fleet was given"));
    }
    if !errors.is_empty() {
        return Err(errors);
    }
    let column = |name: &str| headers.iter().position(|h| h == name);
    let mut trips = Vec::new();
    let mut record = csv::StringRecord::new();
    loop {
        match csv.read_record(&mut record) {
            Ok(false) => break,
            Ok(true) => {}
            Err(e) => {
                let line = e.position().map(|p| lines.line_of(p.byte(), &text)).unwrap_or(0);
                let reason = match e.kind() {
                    csv::ErrorKind::UnequalLengths { expected_len, len, .. } => {
                        format!("has {len} fields, the header row has {expected_len}")
                    }
                    _ => e.to_string(),
                };
                errors.push(LineError::new(line, None, reason));
                continue;
            }
        }
        let line = record.position().map(|p| lines.line_of(p.byte(), &text)).unwrap_or(0);
        if record.iter().all(str::is_empty) {
            continue;
        }
        let cell = |name: &str| column(name).and_then(|i| record.get(i)).filter(|s| !s.is_empty());
        let mut fields = FieldReader { line, errors: Vec::new() };
        let axle_energy_j = match cell("axle_energy_j") {
            None => Vec::new(),
            Some(text) => text
                .split(';')
                .map(str::trim)
                .filter(|s| !s.is_empty())
                .map(|part| fields.number("axle_energy_j", part))
                .collect::<Option<Vec<f64>>>()
                .unwrap_or_default(),
        };
        let raw = RawTrip {
            fleet_id: cell("fleet_id").map(str::to_owned),
            vehicle_id: cell("vehicle_id").unwrap_or_default().to_owned(),
            trip_id: cell("trip_id").unwrap_or_default().to_owned(),
            start_time: cell("start_time").unwrap_or_default().to_owned(),
            end_time: cell("end_time").unwrap_or_default().to_owned(),
            distance_m: fields.required_number("distance_m", cell("distance_m")).unwrap_or(0.0),
            friction_energy_j: fields.required_number("friction_energy_j", cell("friction_energy_j")).unwrap_or(0.0),
            axle_energy_j,
            brake_applications: match cell("brake_applications") {
                None => 0,
                Some(text) => text.parse::<u32>().unwrap_or_else(|_| {
                    fields.fail("brake_applications", format!("'{text}' is not a whole number of at least 0"));
                    0
                }),
            },
            regen_energy_j: cell("regen_energy_j").and_then(|t| fields.number("regen_energy_j", t)),
            hot_energy_j: cell("hot_energy_j").and_then(|t| fields.number("hot_energy_j", t)),
            retarder_energy_j: cell("retarder_energy_j").and_then(|t| fields.number("retarder_energy_j", t)),
        };
        let parse_errors = fields.errors;
        match raw.into_trip(line, default_fleet) {
            Ok(trip) if parse_errors.is_empty() => trips.push(TripLine { line, trip }),
            Ok(_) => errors.extend(parse_errors),
            Err(more) => {
                errors.extend(parse_errors);
                errors.extend(more);
            }
        }
    }
    if errors.is_empty() {
        Ok(trips)
    } else {
        Err(errors)
    }
}

fn read_jsonl(mut reader: impl Read, default_fleet: Option<&str>) -> Result<Vec<TripLine>, Vec<LineError>> {
    let mut text = String::new();
    if let Err(e) = reader.read_to_string(&mut text) {
        return Err(vec![LineError::new(0, None, format!("cannot read the file as UTF-8 text: {e}"))]);
    }
    let mut trips = Vec::new();
    let mut errors = Vec::new();
    for (i, content) in text.lines().enumerate() {
        let line = i as u64 + 1;
        if content.trim().is_empty() {
            continue;
        }
        let record: TripJson = match serde_json::from_str(content) {
            Ok(r) => r,
            Err(e) => {
                let mut reason = e.to_string();
                if let Some(at) = reason.rfind(" at line ") {
                    reason.truncate(at);
                }
                errors.push(LineError::new(line, None, format!("{reason} (at column {})", e.column())));
                continue;
            }
        };
        let raw = RawTrip {
            fleet_id: record.fleet_id,
            vehicle_id: record.vehicle_id,
            trip_id: record.trip_id,
            start_time: record.start_time,
            end_time: record.end_time,
            distance_m: record.distance_m,
            friction_energy_j: record.friction_energy_j,
            axle_energy_j: record.axle_energy_j,
            brake_applications: record.brake_applications,
            regen_energy_j: record.regen_energy_j,
            hot_energy_j: record.hot_energy_j,
            retarder_energy_j: record.retarder_energy_j,
        };
        match raw.into_trip(line, default_fleet) {
            Ok(trip) => trips.push(TripLine { line, trip }),
            Err(more) => errors.extend(more),
        }
    }
    if errors.is_empty() {
        Ok(trips)
    } else {
        Err(errors)
    }
}

/// Parses the cells of one CSV line, collecting problems.
struct FieldReader {
    line: u64,
    errors: Vec<LineError>,
}

impl FieldReader {
    fn fail(&mut self, field: &str, reason: String) {
        self.errors.push(LineError::new(self.line, Some(field), reason));
    }

    fn number(&mut self, field: &str, text: &str) -> Option<f64> {
        match text.parse::<f64>() {
            Ok(v) if v.is_finite() => Some(v),
            _ => {
                self.fail(field, format!("'{text}' is not a number"));
                None
            }
        }
    }

    fn required_number(&mut self, field: &str, text: Option<&str>) -> Option<f64> {
        match text {
            Some(text) => self.number(field, text),
            None => {
                self.fail(field, "is empty; a number is required".to_owned());
                None
            }
        }
    }
}

/// A trip's fields as read, before the identity and times are checked. A number that failed
/// to parse is already reported by the caller and holds a placeholder here.
struct RawTrip {
    fleet_id: Option<String>,
    vehicle_id: String,
    trip_id: String,
    start_time: String,
    end_time: String,
    distance_m: f64,
    friction_energy_j: f64,
    axle_energy_j: Vec<f64>,
    brake_applications: u32,
    regen_energy_j: Option<f64>,
    hot_energy_j: Option<f64>,
    retarder_energy_j: Option<f64>,
}

impl RawTrip {
    fn into_trip(self, line: u64, default_fleet: Option<&str>) -> Result<pb::TripSummary, Vec<LineError>> {
        let mut errors = Vec::new();
        let fleet_id = match self.fleet_id.filter(|f| !f.is_empty()).or_else(|| default_fleet.map(str::to_owned)) {
            Some(f) => f,
            None => {
                errors.push(LineError::new(line, Some("fleet_id"), "is empty and no --fleet was given"));
                String::new()
            }
        };
        for (field, value) in [("vehicle_id", &self.vehicle_id), ("trip_id", &self.trip_id)] {
            if value.is_empty() {
                errors.push(LineError::new(line, Some(field), "is empty"));
            }
        }
        let mut time = |field: &str, text: &str| {
            if text.is_empty() {
                errors.push(LineError::new(line, Some(field), "is empty; an ISO 8601 date and time is required"));
                return None;
            }
            match parse_instant(text) {
                Ok(t) => Some(to_timestamp(t)),
                Err(reason) => {
                    errors.push(LineError::new(line, Some(field), reason));
                    None
                }
            }
        };
        let start_time = time("start_time", &self.start_time);
        let end_time = time("end_time", &self.end_time);
        if !errors.is_empty() {
            return Err(errors);
        }
        Ok(pb::TripSummary {
            fleet_id,
            vehicle_id: self.vehicle_id,
            trip_id: self.trip_id,
            start_time,
            end_time,
            distance_m: self.distance_m,
            friction_energy_j: self.friction_energy_j,
            axle_energy_j: self.axle_energy_j,
            brake_applications: self.brake_applications,
            regen_energy_j: self.regen_energy_j,
            hot_energy_j: self.hot_energy_j,
            retarder_energy_j: self.retarder_energy_j,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const HEADER: &str = "fleet_id,vehicle_id,trip_id,start_time,end_time,distance_m,friction_energy_j,axle_energy_j,brake_applications,regen_energy_j,hot_energy_j\n";

    fn csv(body: &str) -> Result<Vec<TripLine>, Vec<LineError>> {
        read_trips(format!("{HEADER}{body}").as_bytes(), TripFormat::Csv, None)
    }

    #[test]
    fn a_good_csv_file_becomes_trips_with_their_line_numbers() {
        let trips = csv(
            "north,bus-1,t1,2025-03-01T07:00:00Z,2025-03-01T08:00:00+01:00,41000,3.2e7,2.0e7;1.2e7,130,5e6,\n\
             \n\
             north,bus-2,t2,2025-03-01T09:00:00Z,2025-03-01T10:30:00Z,52000.5,40000000,,,,1.5e6\n",
        )
        .expect("valid file");
        assert_eq!(trips.len(), 2);
        assert_eq!((trips[0].line, trips[1].line), (2, 4), "the blank line is skipped but counted");
        let first = &trips[0].trip;
        assert_eq!((first.fleet_id.as_str(), first.vehicle_id.as_str(), first.trip_id.as_str()), ("north", "bus-1", "t1"));
        assert_eq!(first.start_time.as_ref().map(|t| t.seconds), Some(1_740_812_400));
        // 08:00 at +01:00 is 07:00 UTC: a zero-length trip is the server's to refuse, not ours.
        assert_eq!(first.end_time.as_ref().map(|t| t.seconds), Some(1_740_812_400));
        assert_eq!(first.axle_energy_j, vec![2.0e7, 1.2e7]);
        assert_eq!((first.brake_applications, first.regen_energy_j, first.hot_energy_j), (130, Some(5e6), None));
        let second = &trips[1].trip;
        assert_eq!((second.distance_m, second.friction_energy_j), (52000.5, 4.0e7));
        assert!(second.axle_energy_j.is_empty());
        assert_eq!((second.brake_applications, second.regen_energy_j, second.hot_energy_j), (0, None, Some(1.5e6)));
    }

    #[test]
    fn bad_csv_lines_are_each_reported_with_line_and_column() {
        let errors = csv(
            "north,bus-1,t1,2025-03-01T07:00:00Z,2025-03-01T08:00:00Z,41000,3.2e7,,,,\n\
             north,bus-1,t2,2025-03-01T07:00:00,2025-03-01T08:00:00Z,lots,3.2e7,,,,\n\
             north,bus-1,t3,2025-03-01T07:00:00Z,2025-03-01T08:00:00Z,41000,3.2e7,1e7;x,-4,,\n\
             north,bus-1,t4,2025-03-01T07:00:00Z\n\
             ,,t5,2025-03-01T07:00:00Z,2025-03-01T08:00:00Z,41000,,,,,\n",
        )
        .expect_err("bad lines");
        let seen: Vec<(u64, Option<&str>)> = errors.iter().map(|e| (e.line, e.field.as_deref())).collect();
        assert_eq!(
            seen,
            vec![
                (3, Some("distance_m")),
                (3, Some("start_time")),
                (4, Some("axle_energy_j")),
                (4, Some("brake_applications")),
                (5, None),
                (6, Some("friction_energy_j")),
                (6, Some("fleet_id")),
                (6, Some("vehicle_id")),
            ]
        );
        assert!(errors[1].reason.contains("no UTC offset"), "{}", errors[1]);
        assert_eq!(errors[4].to_string(), "line 5: has 4 fields, the header row has 11");
        assert_eq!(errors[0].to_string(), "line 3, distance_m: 'lots' is not a number");
    }

    #[test]
    fn csv_header_problems_are_reported_before_any_row() {
        let errors = read_trips("vehicle_id,trip_id,start_time,end_time,distnce_m,friction_energy_j\n".as_bytes(), TripFormat::Csv, None)
            .expect_err("bad header");
        let fields: Vec<&str> = errors.iter().filter_map(|e| e.field.as_deref()).collect();
        assert_eq!(fields, vec!["distnce_m", "distance_m", "fleet_id"]);
        assert!(errors.iter().all(|e| e.line == 1));
    }

    #[test]
    fn fleet_flag_fills_a_missing_fleet_column() {
        let text = "vehicle_id,trip_id,start_time,end_time,distance_m,friction_energy_j\nvan-3,a,2025-03-01T07:00:00Z,2025-03-01T07:40:00Z,1000,2e6\n";
        let trips = read_trips(text.as_bytes(), TripFormat::Csv, Some("south")).expect("valid");
        assert_eq!(trips[0].trip.fleet_id, "south");
    }

    #[test]
    fn json_lines_read_the_same_fields_and_report_bad_lines() {
        let text = r#"{"fleet_id":"north","vehicle_id":"bus-1","trip_id":"j1","start_time":"2025-03-01T07:00:00Z","end_time":"2025-03-01T08:00:00Z","distance_m":41000,"friction_energy_j":3.2e7,"axle_energy_j":[2e7,1.2e7],"brake_applications":90}

{"vehicle_id":"bus-1","trip_id":"j2","start_time":"2025-03-01T09:00:00Z","end_time":"2025-03-01T10:00:00Z","distance_m":"far","friction_energy_j":1}
{"vehicle_id":"bus-1","trip_id":"j3","start_time":"2025-03-01T09:00:00Z","end_time":"2025-03-01T10:00:00Z","distance_m":1,"friction_energy_j":1,"colour":"red"}
{"vehicle_id":"bus-1","trip_id":"j4","start_time":"2025-03-01T09:00:00Z","end_time":"soon","distance_m":1,"friction_energy_j":1}
not json
"#;
        let errors = read_trips(text.as_bytes(), TripFormat::Jsonl, None).expect_err("bad lines");
        let lines: Vec<u64> = errors.iter().map(|e| e.line).collect();
        assert_eq!(lines, vec![3, 4, 5, 5, 6]);
        assert!(errors[0].reason.contains("invalid type"), "{}", errors[0]);
        assert!(errors[1].reason.contains("unknown field `colour`"), "{}", errors[1]);
        assert_eq!(errors[2].field.as_deref(), Some("fleet_id"));
        assert_eq!(errors[3].field.as_deref(), Some("end_time"));
        assert!(!errors[0].reason.contains("at line"), "the file's line number is ours, not serde's: {}", errors[0]);

        let good = read_trips(text.lines().next().unwrap_or_default().as_bytes(), TripFormat::Jsonl, None).expect("valid");
        assert_eq!(good[0].trip.axle_energy_j, vec![2e7, 1.2e7]);
        assert_eq!(good[0].trip.brake_applications, 90);
        assert_eq!(good[0].line, 1);
    }

    #[test]
    fn format_follows_the_extension() {
        assert_eq!(TripFormat::from_path(Path::new("a/trips.CSV")), Some(TripFormat::Csv));
        assert_eq!(TripFormat::from_path(Path::new("trips.jsonl")), Some(TripFormat::Jsonl));
        assert_eq!(TripFormat::from_path(Path::new("trips.ndjson")), Some(TripFormat::Jsonl));
        assert_eq!(TripFormat::from_path(Path::new("trips.txt")), None);
        assert_eq!(TripFormat::from_path(Path::new("trips")), None);
    }
}
