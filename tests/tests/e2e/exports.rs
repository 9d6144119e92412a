//! Exports from the command line, read back with general-purpose parsers: the due list as CSV
//! (the `csv` crate), the visit plan as CSV and as iCalendar (the `icalendar` crate's parser,
//! RFC 5545), dated in the fleet's time zone.

use brakeledger::exports::csv::{DUE_HEADER, PLAN_HEADER};
use brakeledger_proto::v1 as pb;
use brakeledger_tests::{register, seed_vehicle, two_axle_vehicle, wait_for_forecasts, TestServer};
use chrono::NaiveDate;
use icalendar::Component;

use crate::cli::brakeledger;

/// One event of a parsed iCalendar file.
#[derive(Debug, Clone)]
pub(crate) struct ParsedEvent {
    /// UID.
    pub uid: String,
    /// All-day start date.
    pub start: NaiveDate,
    /// All-day end date (exclusive).
    pub end: NaiveDate,
    /// SUMMARY, unescaped.
    pub summary: String,
    /// DESCRIPTION, unescaped.
    pub description: String,
}

/// Parses an iCalendar file with the `icalendar` crate after checking the octet rules the
/// parser forgives: CRLF line ends and lines of at most 75 octets (RFC 5545 §3.1).
pub(crate) fn parse_ics(text: &str) -> Vec<ParsedEvent> {
    assert!(text.ends_with("\r\n") && !text.replace("\r\n", "").contains('\n'), "every line ends in CRLF");
    for line in text.split("\r\n") {
        assert!(line.len() <= 75, "a line of {} octets: {line}", line.len());
    }
    let unfolded = icalendar::parser::unfold(text);
    let calendar: icalendar::Calendar = icalendar::parser::read_calendar(&unfolded).unwrap_or_else(|e| panic!("not iCalendar: {e}\n{text}")).into();
    let date = |d: Option<icalendar::DatePerhapsTime>| match d {
        Some(icalendar::DatePerhapsTime::Date(date)) => date,
        other => panic!("an all-day date was expected, got {other:?}"),
    };
    calendar
        .components
        .iter()
        .filter_map(|c| match c {
            icalendar::CalendarComponent::Event(event) => Some(ParsedEvent {
                uid: event.get_uid().unwrap_or_default().to_owned(),
                start: date(event.get_start()),
                end: date(event.get_end()),
                summary: event.get_summary().unwrap_or_default().to_owned(),
                description: event.get_description().unwrap_or_default().to_owned(),
            }),
            _ => None,
        })
        .collect()
}

/// Rows of a CSV text read with the `csv` crate, after checking its header.
pub(crate) fn parse_csv(text: &str, header: &[&str]) -> Vec<csv::StringRecord> {
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let found: Vec<String> = reader.headers().expect("a header row").iter().map(str::to_owned).collect();
    assert_eq!(found, header, "header row");
    reader.records().map(|r| r.expect("a well-formed CSV record")).collect()
}

/// A fleet 14 hours ahead of UTC, with a worn vehicle whose id needs escaping everywhere, one
/// ordinary vehicle and one registered without any data.
async fn fleet_far_from_utc() -> TestServer {
    let server = TestServer::start().await;
    let fleet = pb::Fleet { fleet_id: "north".into(), time_zone: "Pacific/Kiritimati".into(), display_name: "North depot".into() };
    server.fleet().upsert_fleet(pb::UpsertFleetRequest { fleet: Some(fleet) }).await.expect("set up the fleet");
    seed_vehicle(&server, "worn,van;1", 540, 1.0, &[300, 250, 200, 160]).await;
    seed_vehicle(&server, "van-2", 200, 1.0, &[160, 120, 80, 40, 5]).await;
    register(&server, two_axle_vehicle("north", "van-new")).await;
    wait_for_forecasts(&server).await;
    server
}

#[tokio::test]
async fn due_list_and_visit_plan_export_as_csv_and_icalendar_in_the_fleets_time_zone() {
    let server = fleet_far_from_utc().await;
    let zone: chrono_tz::Tz = "Pacific/Kiritimati".parse().expect("zone");
    let today = chrono::Utc::now().with_timezone(&zone).date_naive();

    // The due list: the due-now pad first, every dated part as in the table, then van-new's
    // four parts that cannot be forecast, with the reason.
    let due_csv = brakeledger(&server, &["due", "--fleet", "north", "--within-days", "800", "--format", "csv"]).await.expect("due csv");
    let rows = parse_csv(&due_csv, &DUE_HEADER);
    let due_json: serde_json::Value = serde_json::from_str(&brakeledger(&server, &["due", "--fleet", "north", "--within-days", "800", "--json"]).await.expect("due json")).expect("json");
    let dated = due_json["parts"].as_array().expect("parts").len();
    assert_eq!(rows.len(), dated + 4, "{due_csv}");
    assert_eq!((&rows[0][0], &rows[0][4], &rows[0][6], &rows[0][7]), ("due now", "worn,van;1", "1", "pad"), "{due_csv}");
    assert_eq!(&rows[0][1], &today.to_string(), "a due-now part is due today in the fleet's zone");
    for (row, part) in rows.iter().zip(due_json["parts"].as_array().expect("parts")) {
        assert_eq!((&row[1], &row[4]), (part["due_earliest_date"].as_str().expect("date"), part["vehicle_id"].as_str().expect("id")));
    }
    let undated: Vec<_> = rows[dated..].iter().collect();
    assert!(undated.iter().all(|r| &r[4] == "van-new" && !r[12].is_empty() && r[1].is_empty()), "{due_csv}");

    // The plan as JSON (the reference), CSV and iCalendar.
    let args = |format: &'static str| ["plan", "--fleet", "north", "--days", "90", "--hours-per-day", "8", "--format", format];
    let plan: serde_json::Value = serde_json::from_str(&brakeledger(&server, &args("json")).await.expect("plan json")).expect("json");
    let visits = plan["visits"].as_array().expect("visits");
    assert!(visits.len() >= 2, "{plan}");
    let plan_csv = parse_csv(&brakeledger(&server, &args("csv")).await.expect("plan csv"), &PLAN_HEADER);
    let jobs: usize = visits.iter().map(|v| v["jobs"].as_array().map_or(0, Vec::len)).sum();
    assert_eq!(plan_csv.len(), jobs + plan["unplanned"].as_array().map_or(0, Vec::len));
    assert_eq!((&plan_csv[0][0], &plan_csv[0][1]), (visits[0]["visit_date"].as_str().expect("date"), visits[0]["vehicle_id"].as_str().expect("id")));

    let ics = brakeledger(&server, &args("ics")).await.expect("plan ics");
    assert!(ics.starts_with("BEGIN:VCALENDAR\r\nVERSION:2.0\r\nPRODID:"), "{ics}");
    let events = parse_ics(&ics);
    assert_eq!(events.len(), visits.len(), "one event per visit");
    let uids: std::collections::BTreeSet<&str> = events.iter().map(|e| e.uid.as_str()).collect();
    assert_eq!(uids.len(), events.len(), "UIDs are unique");
    for (event, visit) in events.iter().zip(visits) {
        let day: NaiveDate = visit["visit_date"].as_str().expect("date").parse().expect("date");
        assert_eq!((event.start, event.end), (day, day.succ_opt().expect("next day")), "all day on the visit's date");
        let vehicle = visit["vehicle_id"].as_str().expect("id");
        assert!(event.summary.contains(vehicle), "{event:?}");
        for job in visit["jobs"].as_array().expect("jobs") {
            let line = format!("axle {} {}: due earliest {}", job["axle_index"], job["part"].as_str().expect("part"), job["due_earliest_date"].as_str().expect("date"));
            assert!(event.description.contains(&line), "{line} not in {:?}", event.description);
        }
        assert!(event.description.contains("Pacific/Kiritimati") && event.description.contains("roadworthiness"), "{event:?}");
    }
    let worn = events.iter().find(|e| e.summary.contains("worn,van;1")).expect("the worn van's visit; its id survives escaping");
    assert_eq!(worn.start, today, "due-now work is booked today in the fleet's zone");
    assert!(worn.description.contains("already due"), "{worn:?}");
    let again = parse_ics(&brakeledger(&server, &args("ics")).await.expect("plan ics again"));
    assert_eq!(again.iter().map(|e| &e.uid).collect::<Vec<_>>(), events.iter().map(|e| &e.uid).collect::<Vec<_>>(), "UIDs are stable across exports");
    server.stop().await;
}
