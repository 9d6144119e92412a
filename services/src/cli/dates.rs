//! Dates and times on the command line: ISO 8601 / RFC 3339 input (a calendar date is the start
//! of that day in the fleet's time zone), conversion to and from protobuf timestamps, and
//! calendar dates for display.

use chrono::{DateTime, NaiveDate, TimeZone, Utc};
use chrono_tz::Tz;
use prost_types::Timestamp;

/// Seconds in a day.
pub const SECONDS_PER_DAY: i64 = 86_400;

/// A protobuf timestamp for an instant.
pub fn to_timestamp(at: DateTime<Utc>) -> Timestamp {
    Timestamp { seconds: at.timestamp(), nanos: at.timestamp_subsec_nanos() as i32 }
}

/// The instant of a protobuf timestamp; `None` when out of range.
pub fn from_timestamp(ts: &Timestamp) -> Option<DateTime<Utc>> {
    DateTime::from_timestamp(ts.seconds, ts.nanos.clamp(0, 999_999_999) as u32)
}

/// An instant given as RFC 3339 (`2025-03-01T08:30:00Z`, `2025-03-01T08:30:00+01:00`).
pub fn parse_instant(text: &str) -> Result<DateTime<Utc>, String> {
    let text = text.trim();
    DateTime::parse_from_rfc3339(text).map(|t| t.with_timezone(&Utc)).map_err(|e| {
        if NaiveDate::parse_from_str(text, "%Y-%m-%d").is_ok() {
            format!("'{text}' is a date; a date and time with a UTC offset is needed, e.g. {text}T08:00:00Z")
        } else if text.contains('T') && !text.ends_with(['Z', 'z']) && !text.chars().rev().take(6).any(|c| c == '+' || c == '-') {
            format!("'{text}' has no UTC offset; add one, e.g. {text}Z or {text}+02:00")
        } else {
            format!("'{text}' is not an ISO 8601 date and time (RFC 3339, e.g. 2025-03-01T08:30:00Z): {e}")
        }
    })
}

/// An instant given as RFC 3339, or a calendar date `YYYY-MM-DD` meaning the start of that day
/// in `zone`.
pub fn parse_date_or_instant(text: &str, zone: Tz) -> Result<DateTime<Utc>, String> {
    let trimmed = text.trim();
    if let Ok(date) = NaiveDate::parse_from_str(trimmed, "%Y-%m-%d") {
        return start_of_day(date, zone);
    }
    parse_instant(trimmed).map_err(|_| {
        format!("'{trimmed}' is neither a date (YYYY-MM-DD) nor a date and time with a UTC offset (e.g. 2025-03-01T08:30:00Z)")
    })
}

/// The first instant of a calendar day in `zone`.
pub fn start_of_day(date: NaiveDate, zone: Tz) -> Result<DateTime<Utc>, String> {
    let midnight = date.and_hms_opt(0, 0, 0).ok_or_else(|| format!("{date} has no midnight"))?;
    // A day can start with a daylight-saving gap; take the earliest valid instant that day.
    (0..=2)
        .find_map(|hours| zone.from_local_datetime(&(midnight + chrono::Duration::hours(hours))).earliest())
        .map(|t| t.with_timezone(&Utc))
        .ok_or_else(|| format!("{date} does not exist in time zone {zone}"))
}

/// Today's calendar date in `zone`.
pub fn today_in(zone: Tz) -> NaiveDate {
    Utc::now().with_timezone(&zone).date_naive()
}

/// The calendar date (ISO 8601) of a timestamp in `zone`; `-` when unset.
pub fn calendar_date(ts: Option<&Timestamp>, zone: Tz) -> String {
    ts.and_then(from_timestamp).map(|t| t.with_timezone(&zone).date_naive().to_string()).unwrap_or_else(|| "-".to_owned())
}

/// Whole days from `from` to `to` (negative when `to` is earlier), as a float.
pub fn days_between(from: DateTime<Utc>, to: DateTime<Utc>) -> f64 {
    (to - from).num_milliseconds() as f64 / (SECONDS_PER_DAY as f64 * 1000.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn instants_need_an_offset_and_say_how_to_fix_it() {
        let at = parse_instant("2025-03-01T08:30:00+01:00").expect("valid");
        assert_eq!(at, Utc.with_ymd_and_hms(2025, 3, 1, 7, 30, 0).single().expect("valid"));
        let missing = parse_instant("2025-03-01T08:30:00").expect_err("no offset");
        assert!(missing.contains("no UTC offset"), "{missing}");
        let date = parse_instant("2025-03-01").expect_err("date only");
        assert!(date.contains("2025-03-01T08:00:00Z"), "{date}");
        assert!(parse_instant("yesterday").expect_err("nonsense").contains("not an ISO 8601"));
    }

    #[test]
    fn a_date_is_the_start_of_the_day_in_the_fleet_zone() {
        let lisbon: Tz = "Europe/Lisbon".parse().expect("zone");
        // Lisbon is UTC+1 in summer: midnight local is 23:00 UTC the day before.
        let start = parse_date_or_instant("2025-07-10", lisbon).expect("date");
        assert_eq!(start, Utc.with_ymd_and_hms(2025, 7, 9, 23, 0, 0).single().expect("valid"));
        let utc = parse_date_or_instant("2025-07-10", chrono_tz::UTC).expect("date");
        assert_eq!(utc, Utc.with_ymd_and_hms(2025, 7, 10, 0, 0, 0).single().expect("valid"));
        assert!(parse_date_or_instant("10/07/2025", lisbon).is_err());
    }

    #[test]
    fn timestamps_round_trip_and_show_as_zone_dates() {
        let at = Utc.with_ymd_and_hms(2025, 1, 31, 23, 30, 0).single().expect("valid");
        let ts = to_timestamp(at);
        assert_eq!(from_timestamp(&ts), Some(at));
        assert_eq!(calendar_date(Some(&ts), chrono_tz::UTC), "2025-01-31");
        let tokyo: Tz = "Asia/Tokyo".parse().expect("zone");
        assert_eq!(calendar_date(Some(&ts), tokyo), "2025-02-01");
        assert_eq!(calendar_date(None, tokyo), "-");
    }
}
