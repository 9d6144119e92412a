//! The demo's scorecard: the server's forecasts, read back over gRPC (ListDue with a window
//! far in the future, every page), scored against the simulator's hidden true crossing days
//! with `brakeledger_models::calibration`, next to the mileage-interval and
//! odometer-extrapolation baselines.
//!
//! The wire gives three points of each due-date distribution (early end, median, late end at
//! the band level); the scorer wants 99 quantiles. [`three_point_distribution`] fills them by
//! straight lines through those three points, so the band and median the scorer reads back
//! at the same level are exactly the server's.

use std::collections::HashMap;

use brakeledger_models::calibration::{accuracy_report, AccuracyReport, PartKey};
use brakeledger_models::domain::Component;
use brakeledger_models::simulator::SimulatedFleet;
use brakeledger_models::DueDistribution;
use brakeledger_proto::v1 as pb;
use chrono::Utc;

use crate::cli::client::Connection;
use crate::cli::dates::SECONDS_PER_DAY;
use crate::cli::forecast_view::fetch_due;

/// How far ahead the scoring window reaches, days (beyond every simulated crossing).
const SCORING_WINDOW_DAYS: i64 = 20 * 366;

/// A due distribution whose quantiles run in straight lines through (½ − level/2, low),
/// (½, median) and (½ + level/2, high), extended beyond them with the same slopes. Returns
/// `None` unless low ≤ median ≤ high, all finite.
pub fn three_point_distribution(low_day: f64, median_day: f64, high_day: f64, level: f64) -> Option<DueDistribution> {
    let ordered = low_day <= median_day && median_day <= high_day;
    if !(ordered && low_day.is_finite() && high_day.is_finite() && level > 0.0 && level < 1.0) {
        return None;
    }
    let half = level / 2.0;
    let quantile_days = (1..=99)
        .map(|i| {
            let p = f64::from(i) / 100.0;
            if p <= 0.5 {
                median_day - (median_day - low_day) * (0.5 - p) / half
            } else {
                median_day + (high_day - median_day) * (p - 0.5) / half
            }
        })
        .collect();
    Some(DueDistribution { quantile_days })
}

/// Days since the Unix epoch of a timestamp.
fn epoch_day(ts: Option<&prost_types::Timestamp>) -> Option<f64> {
    ts.map(|t| (t.seconds as f64 + f64::from(t.nanos) * 1e-9) / SECONDS_PER_DAY as f64)
}

/// The due distribution of one listed part, keyed for the scorer.
pub fn scored_part(due: &pb::DuePart) -> Option<(PartKey, DueDistribution)> {
    let part = due.part.as_ref()?;
    let component = match pb::Component::try_from(part.component).ok()? {
        pb::Component::Friction => Component::Friction,
        pb::Component::Disc => Component::Disc,
        pb::Component::Unspecified => return None,
    };
    let level = if part.band_level > 0.0 { part.band_level } else { 0.8 };
    let distribution = three_point_distribution(
        epoch_day(part.due_earliest.as_ref())?,
        epoch_day(part.due_median.as_ref())?,
        epoch_day(part.due_latest.as_ref())?,
        level,
    )?;
    Some((PartKey { vehicle_id: due.vehicle_id.clone(), axle_index: part.axle_index, component }, distribution))
}

/// Reads every forecast of the fleet over gRPC and scores it against the simulated truth.
pub async fn score_fleet(
    connection: &mut Connection,
    fleet_id: &str,
    fleet: &SimulatedFleet,
    band_level: f64,
    energy_window_days: usize,
) -> anyhow::Result<(AccuracyReport, usize)> {
    let far = Utc::now() + chrono::Duration::days(SCORING_WINDOW_DAYS);
    let (parts, _) = fetch_due(connection, fleet_id, far, band_level, None).await?;
    let listed = parts.len();
    let forecasts: HashMap<PartKey, DueDistribution> = parts.iter().filter_map(scored_part).collect();
    Ok((accuracy_report(fleet, &forecasts, band_level, energy_window_days), listed))
}

/// The scorecard as text.
pub fn render_accuracy(report: &AccuracyReport, listed: usize) -> String {
    let all = &report.overall;
    let ratio = |baseline: f64| {
        if baseline > 0.0 {
            format!("{:.2} times", baseline / all.median_mae_days.max(f64::MIN_POSITIVE))
        } else {
            "-".to_owned()
        }
    };
    let mut table = crate::cli::table::Table::new(&[
        ("method", crate::cli::table::Align::Left),
        ("mean error of the date (days)", crate::cli::table::Align::Right),
        ("error relative to brakeledger", crate::cli::table::Align::Right),
    ]);
    table.row(vec!["brakeledger median".into(), format!("{:.1}", all.median_mae_days), "1.00 times".into()]);
    table.row(vec!["oracle (true wear known)".into(), format!("{:.1}", all.oracle_mae_days), ratio(all.oracle_mae_days)]);
    table.row(vec!["fixed mileage interval".into(), format!("{:.1}", all.mileage_baseline_mae_days), ratio(all.mileage_baseline_mae_days)]);
    table.row(vec!["odometer straight line".into(), format!("{:.1}", all.odometer_baseline_mae_days), ratio(all.odometer_baseline_mae_days)]);
    format!(
        "{listed} forecasts read over gRPC; {} parts were scored ({} without a date, {} already worn\n\
         out, {} not worn out within the simulated {:.0} days).\n\
         The true date fell inside the {:.0} % band for {:.1} % of them.\n\n{}",
        all.parts,
        all.undated,
        all.past_minimum,
        all.beyond_horizon,
        report.horizon_days,
        report.band_level * 100.0,
        all.band_coverage * 100.0,
        table.render()
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_three_points_come_back_exactly_at_their_level() {
        let due = three_point_distribution(20_100.0, 20_130.0, 20_190.0, 0.8).expect("ordered");
        let (low, median, high) = due.band(0.8);
        assert!((low - 20_100.0).abs() < 1e-6 && (median - 20_130.0).abs() < 1e-6 && (high - 20_190.0).abs() < 1e-6, "{low} {median} {high}");
        assert!(due.quantile_days.windows(2).all(|w| w[0] <= w[1]), "non-decreasing");
        // Beyond the band the slopes continue: the 1st percentile is 0.49/0.4 of the lower half-width below the median.
        assert!((due.quantile_days[0] - (20_130.0 - 30.0 * 0.49 / 0.4)).abs() < 1e-6);
        assert!(three_point_distribution(5.0, 4.0, 6.0, 0.8).is_none(), "unordered points are refused");
        assert!(three_point_distribution(4.0, 5.0, f64::INFINITY, 0.8).is_none());
    }

    #[test]
    fn a_listed_part_needs_all_three_dates() {
        let ts = |day: i64| Some(prost_types::Timestamp { seconds: day * 86_400, nanos: 0 });
        let mut part = pb::PartForecast {
            axle_index: 2,
            component: pb::Component::Disc as i32,
            due_earliest: ts(20_000),
            due_median: ts(20_010),
            due_latest: ts(20_030),
            band_level: 0.8,
            ..Default::default()
        };
        let due = pb::DuePart { vehicle_id: "sim-0003".into(), part: Some(part.clone()), ..Default::default() };
        let (key, distribution) = scored_part(&due).expect("scored");
        assert_eq!((key.vehicle_id.as_str(), key.axle_index, key.component), ("sim-0003", 2, Component::Disc));
        assert!((distribution.at(0.5) - 20_010.0).abs() < 1e-9);
        part.due_latest = None;
        assert!(scored_part(&pb::DuePart { part: Some(part), ..due }).is_none());
    }
}
