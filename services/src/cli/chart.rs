//! `brakeledger chart`: the wear chart of one part as an SVG file, from GetWearTrajectory:
//! measured thicknesses (dots), the forecast median (line) inside its shaded band up to the
//! band's latest due date, the minimum thickness (dashed red line), today (labelled line), the
//! replacement that began the part's cycle (labelled dashed line) and the due band on the time
//! axis (a strip from the earliest to the latest due date, the median marked). Dates are in the
//! fleet's time zone, ticked at month starts. The safety caution is at the foot. Drawn with
//! `plotters`' SVG backend; text stays text, so the file is small and searchable.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use chrono::{DateTime, Datelike, NaiveDate, Utc};
use chrono_tz::Tz;
use plotters::prelude::*;

use crate::cli::client::{explain, Connection, ServerTarget};
use crate::cli::dates::{from_timestamp, SECONDS_PER_DAY};
use crate::cli::forecast_view::parse_band_level;
use crate::cli::parts::{brake_type_of, part_name, PartArg};
use crate::SAFETY_CAUTION;

/// Examples of `chart`.
pub const CHART_EXAMPLES: &str = "\
Examples:
  brakeledger chart --fleet north --vehicle bus-17 --axle 1 --component pad
  brakeledger chart --fleet north --vehicle bus-17 --axle 2 --component drum --out drum.svg --band-level 0.9";

/// Flags of `chart`.
#[derive(Debug, clap::Args)]
pub struct ChartArgs {
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
    /// Band level, between 0 and 1.
    #[arg(long, default_value_t = 0.8, value_parser = parse_band_level)]
    pub band_level: f64,
    /// SVG file to write; default <vehicle>-axle<N>-<part>.svg in the current directory.
    #[arg(long)]
    pub out: Option<PathBuf>,
}

/// Everything a chart shows.
#[derive(Debug, Clone)]
pub struct ChartData {
    /// Title line.
    pub title: String,
    /// The trajectory.
    pub trajectory: pb::GetWearTrajectoryResponse,
    /// "Today" marker; `None` leaves it out.
    pub today: Option<DateTime<Utc>>,
    /// The fleet's time zone: dates on the chart are calendar dates there.
    pub time_zone: Tz,
}

/// Chart size in pixels.
const SIZE: (u32, u32) = (1000, 620);

/// Runs `chart`.
pub async fn chart(server: &ServerTarget, args: &ChartArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(server).await?;
    let path = match &args.out {
        Some(p) => p.clone(),
        None => PathBuf::from(format!("{}-axle{}-{}.svg", file_safe(&args.vehicle), args.axle, match args.component {
            PartArg::Pad => "pad",
            PartArg::Rotor => "rotor",
        })),
    };
    let data = fetch_chart(&mut connection, &args.fleet, &args.vehicle, args.axle, args.component, args.band_level).await?;
    write_chart(&path, &data)?;
    writeln!(out, "wrote the wear chart of {} to {}", data.title, path.display())?;
    writeln!(out, "{SAFETY_CAUTION}")?;
    Ok(())
}

/// Reads the trajectory of one part and names it for the title.
pub async fn fetch_chart(
    connection: &mut Connection,
    fleet_id: &str,
    vehicle_id: &str,
    axle_index: u32,
    part: PartArg,
    band_level: f64,
) -> anyhow::Result<ChartData> {
    let trajectory = connection
        .forecast
        .get_wear_trajectory(pb::GetWearTrajectoryRequest {
            fleet_id: fleet_id.to_owned(),
            vehicle_id: vehicle_id.to_owned(),
            axle_index,
            component: part.component() as i32,
            band_level,
        })
        .await
        .map_err(|s| explain(s, &format!("reading the wear trajectory of vehicle '{vehicle_id}' axle {axle_index}")))?
        .into_inner();
    let vehicle = connection.vehicle_if_any(fleet_id, vehicle_id).await;
    let name = part_name(part.component() as i32, brake_type_of(vehicle.as_ref(), axle_index));
    let time_zone = connection.fleet_time_zone(fleet_id).await?;
    Ok(ChartData { title: format!("vehicle {vehicle_id}, axle {axle_index} {name}"), trajectory, today: Some(Utc::now()), time_zone })
}

/// A vehicle identifier made safe for a file name.
fn file_safe(id: &str) -> String {
    id.chars().map(|c| if c.is_ascii_alphanumeric() || c == '-' || c == '_' { c } else { '_' }).collect()
}

/// The chart's x axis: calendar days since 1970-01-01 in the fleet's time zone (fractional),
/// so a month tick at local midnight of the 1st sits on the 1st whatever the zone.
#[derive(Debug, Clone, Copy)]
struct LocalDays(Tz);

impl LocalDays {
    fn of(self, instant: DateTime<Utc>) -> f64 {
        instant.with_timezone(&self.0).naive_local().and_utc().timestamp() as f64 / SECONDS_PER_DAY as f64
    }

    fn of_timestamp(self, ts: &prost_types::Timestamp) -> Option<f64> {
        from_timestamp(ts).map(|t| self.of(t))
    }
}

/// Day number of a calendar date on the [`LocalDays`] axis.
fn date_day(date: NaiveDate) -> f64 {
    date.and_hms_opt(0, 0, 0).map_or(0.0, |t| t.and_utc().timestamp() as f64 / SECONDS_PER_DAY as f64)
}

/// The calendar date of a day number on the [`LocalDays`] axis.
fn day_label(day: f64) -> String {
    DateTime::from_timestamp((day * SECONDS_PER_DAY as f64).floor() as i64, 0)
        .map(|t| t.date_naive().to_string())
        .unwrap_or_default()
}

/// Month starts between two day numbers, every `step` months (1, 2, 3, 6, 12 or 24, the
/// smallest giving at most 12 ticks), each with its label ("Mar 2026"; January shows the year
/// alone when ticks are a year or more apart).
fn month_ticks(first_day: f64, last_day: f64) -> Vec<(f64, String)> {
    let Some(start) = DateTime::from_timestamp((first_day * SECONDS_PER_DAY as f64).floor() as i64, 0) else { return Vec::new() };
    let months_between = ((last_day - first_day) / 30.44).ceil().max(1.0) as i64;
    let step: i64 = [1, 2, 3, 6, 12, 24].into_iter().find(|s| months_between / s <= 12).unwrap_or(48);
    let mut ticks = Vec::new();
    // Months counted from year 0, so that ticks fall on months whose number is a multiple of
    // the step (Jan, Apr, Jul, Oct for 3; January for 12).
    let mut month = i64::from(start.year()) * 12 + i64::from(start.month0());
    loop {
        let Some(date) = NaiveDate::from_ymd_opt(month.div_euclid(12) as i32, month.rem_euclid(12) as u32 + 1, 1) else { break };
        let day = date_day(date);
        if day > last_day {
            break;
        }
        if day >= first_day && month % step == 0 {
            let label = if step >= 12 { date.format("%Y").to_string() } else { date.format("%b %Y").to_string() };
            ticks.push((day, label));
        }
        month += 1;
    }
    ticks
}

/// Draws the chart to an SVG file.
pub fn write_chart(path: &Path, data: &ChartData) -> anyhow::Result<()> {
    let svg = render_chart(data)?;
    std::fs::write(path, svg).with_context(|| format!("writing the chart to {}", path.display()))
}

/// Draws the chart as an SVG document.
pub fn render_chart(data: &ChartData) -> anyhow::Result<String> {
    let mut svg = String::new();
    draw(&mut svg, data).map_err(|e| anyhow::anyhow!("drawing the chart: {e}"))?;
    Ok(svg)
}

fn draw(svg: &mut String, data: &ChartData) -> Result<(), Box<dyn std::error::Error + Send + Sync>> {
    let trajectory = &data.trajectory;
    let axis = LocalDays(data.time_zone);
    let part = trajectory.part.clone().unwrap_or_default();
    let measured: Vec<(f64, f64)> = trajectory
        .measured
        .iter()
        .filter_map(|m| Some((axis.of_timestamp(m.measured_at.as_ref()?)?, m.thickness_mm)))
        .filter(|(_, y)| y.is_finite())
        .collect();
    let band: Vec<(f64, f64, f64, f64)> = trajectory
        .forecast
        .iter()
        .filter_map(|p| Some((axis.of_timestamp(p.date.as_ref()?)?, p.median_mm.max(0.0), p.low_mm.max(0.0), p.high_mm.max(0.0))))
        .filter(|(_, m, l, h)| m.is_finite() && l.is_finite() && h.is_finite())
        .collect();
    if measured.is_empty() && band.is_empty() {
        return Err("the server returned neither measurements nor a forecast for this part; nothing to draw".into());
    }
    let today = data.today.map(|t| axis.of(t));
    let fitted = trajectory.fitted_at.as_ref().and_then(|t| axis.of_timestamp(t));
    let due_day = |ts: &Option<prost_types::Timestamp>| ts.as_ref().and_then(|t| axis.of_timestamp(t));
    let due = match (due_day(&part.due_earliest), due_day(&part.due_median), due_day(&part.due_latest)) {
        (Some(earliest), Some(median), Some(latest)) => Some((earliest, median, latest)),
        _ => None,
    };
    let xs = measured
        .iter()
        .map(|p| p.0)
        .chain(band.iter().map(|p| p.0))
        .chain(fitted)
        .chain(today)
        .chain(due.map(|d| d.2));
    let (mut x_min, mut x_max) = xs.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), x| (lo.min(x), hi.max(x)));
    if x_max - x_min < 10.0 {
        x_max = x_min + 10.0;
    }
    let x_pad = (x_max - x_min) * 0.03;
    x_min -= x_pad;
    x_max += x_pad;
    let ys = measured.iter().map(|p| p.1).chain(band.iter().flat_map(|p| [p.2, p.3])).chain([part.min_thickness_mm].into_iter().filter(|v| v.is_finite() && *v > 0.0));
    let (y_low, y_high) = ys.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), y| (lo.min(y), hi.max(y)));
    let y_span = (y_high - y_low).max(1.0);
    // Room below the lowest value for the due strip; a thickness is never below zero.
    let (y_min, y_max) = ((y_low - 0.16 * y_span).max(0.0), y_high + 0.1 * y_span);

    let root = SVGBackend::with_string(svg, SIZE).into_drawing_area();
    root.fill(&WHITE)?;
    let (plot_area, foot) = root.split_vertically(SIZE.1 - 50);
    let mut chart = ChartBuilder::on(&plot_area)
        .caption(format!("Wear of {}", data.title), ("sans-serif", 22))
        .margin(15)
        .x_label_area_size(45)
        .y_label_area_size(60)
        .build_cartesian_2d(x_min..x_max, y_min..y_max)?;
    chart
        .configure_mesh()
        .x_desc(format!("Date ({})", data.time_zone.name()))
        .y_desc("Thickness (mm)")
        .disable_x_mesh()
        .x_labels(0)
        .x_label_formatter(&|_| String::new())
        .y_labels(8)
        .light_line_style(RGBColor(235, 235, 235))
        .draw()?;

    // Month ticks: a light line at each month start and its label under the axis.
    let ticks = month_ticks(x_min, x_max);
    let tick_colour = RGBColor(225, 225, 225);
    chart.draw_series(ticks.iter().map(|(x, _)| PathElement::new(vec![(*x, y_min), (*x, y_max)], tick_colour.stroke_width(1))))?;
    let tick_style = ("sans-serif", 12).into_font().color(&RGBColor(60, 60, 60)).pos(plotters::style::text_anchor::Pos::new(
        plotters::style::text_anchor::HPos::Center,
        plotters::style::text_anchor::VPos::Top,
    ));
    for (x, label) in &ticks {
        let (px, py) = chart.backend_coord(&(*x, y_min));
        plot_area.draw_text(label, &tick_style, (px, py + 6))?;
    }

    let band_colour = RGBColor(70, 120, 200);
    if !band.is_empty() {
        let outline: Vec<(f64, f64)> =
            band.iter().map(|p| (p.0, p.3)).chain(band.iter().rev().map(|p| (p.0, p.2))).collect();
        let level = if part.band_level > 0.0 { part.band_level } else { 0.8 };
        chart
            .draw_series(std::iter::once(Polygon::new(outline, band_colour.mix(0.2).filled())))?
            .label(format!("forecast band ({:.0} %)", level * 100.0))
            .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], band_colour.mix(0.2).filled()));
        chart
            .draw_series(LineSeries::new(band.iter().map(|p| (p.0, p.1)), band_colour.stroke_width(2)))?
            .label("forecast median")
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], band_colour.stroke_width(2)));
    }
    if part.min_thickness_mm.is_finite() && part.min_thickness_mm > 0.0 {
        let min = part.min_thickness_mm;
        chart
            .draw_series(DashedLineSeries::new([(x_min, min), (x_max, min)], 8, 5, RED.stroke_width(2)))?
            .label(format!("minimum thickness ({min} mm)"))
            .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], RED.stroke_width(2)));
    }
    // The due band on the time axis: a strip from the earliest to the latest due date.
    if let Some((earliest, median, latest)) = due {
        let due_colour = RGBColor(200, 60, 40);
        let strip = (y_min + 0.01 * y_span, y_min + 0.05 * y_span);
        chart
            .draw_series(std::iter::once(Rectangle::new([(earliest, strip.0), (latest.max(earliest + 0.5), strip.1)], due_colour.mix(0.35).filled())))?
            .label(format!("due: {} to {}, median {}", day_label(earliest), day_label(latest), day_label(median)))
            .legend(move |(x, y)| Rectangle::new([(x, y - 4), (x + 18, y + 4)], due_colour.mix(0.35).filled()));
        chart.draw_series(std::iter::once(PathElement::new(vec![(median, strip.0), (median, strip.1)], due_colour.stroke_width(3))))?;
    }
    let label_style = ("sans-serif", 13).into_font();
    if let Some(fitted) = fitted {
        let green = RGBColor(40, 130, 60);
        chart
            .draw_series(DashedLineSeries::new([(fitted, y_min), (fitted, y_max)], 6, 4, green.stroke_width(2)))?
            .label(format!("fitted {} (start of this part's wear)", day_label(fitted)))
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], green.stroke_width(2)));
        let (px, py) = chart.backend_coord(&(fitted, y_max));
        plot_area.draw_text("fitted", &label_style.clone().color(&green), (px + 4, py + 4))?;
    }
    if let Some(today) = today {
        let orange = RGBColor(230, 120, 0);
        chart
            .draw_series(LineSeries::new([(today, y_min), (today, y_max)], orange.stroke_width(3)))?
            .label(format!("today {}", day_label(today)))
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], orange.stroke_width(3)));
        let (px, py) = chart.backend_coord(&(today, y_max));
        plot_area.draw_text("today", &label_style.clone().color(&orange), (px + 4, py + 4))?;
    }
    if !measured.is_empty() {
        chart
            .draw_series(measured.iter().map(|&(x, y)| Circle::new((x, y), 4, BLACK.filled())))?
            .label("measured")
            .legend(|(x, y)| Circle::new((x + 9, y), 4, BLACK.filled()));
    }
    chart
        .configure_series_labels()
        .position(SeriesLabelPosition::UpperRight)
        .background_style(WHITE.mix(0.85))
        .border_style(RGBColor(180, 180, 180))
        .draw()?;

    // The caution, wrapped onto two lines at a sentence break.
    let (first, second) = SAFETY_CAUTION.split_once(". ").map(|(a, b)| (format!("{a}."), b.to_owned())).unwrap_or((SAFETY_CAUTION.to_owned(), String::new()));
    let style = ("sans-serif", 12).into_font().color(&RGBColor(90, 90, 90));
    foot.draw_text(&first, &style, (20, 8))?;
    foot.draw_text(&second, &style, (20, 26))?;
    root.present()?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cli::dates::to_timestamp;
    use chrono::TimeZone;

    fn day(y: i32, m: u32, d: u32) -> prost_types::Timestamp {
        to_timestamp(Utc.with_ymd_and_hms(y, m, d, 0, 0, 0).single().expect("valid"))
    }

    fn trajectory() -> pb::GetWearTrajectoryResponse {
        let measured = [(2024, 9, 1, 21.5), (2025, 1, 10, 15.2), (2025, 3, 2, 12.9)]
            .iter()
            .enumerate()
            .map(|(i, &(y, m, d, mm))| pb::MeasuredPoint { measured_at: Some(day(y, m, d)), thickness_mm: mm, energy_since_fitted_mj: 0.0, inspection_id: format!("i{i}"), cycles_ago: 0 })
            .collect();
        let forecast = (0..40)
            .map(|i| {
                let date = to_timestamp(Utc.with_ymd_and_hms(2025, 3, 10, 0, 0, 0).single().expect("valid") + chrono::Duration::days(7 * i));
                let median = 12.5 - 0.3 * i as f64;
                pb::TrajectoryPoint { date: Some(date), calendar_date: String::new(), median_mm: median, low_mm: median - 0.05 * i as f64, high_mm: median + 0.05 * i as f64 }
            })
            .collect();
        pb::GetWearTrajectoryResponse {
            part: Some(pb::PartForecast { axle_index: 1, component: pb::Component::Friction as i32, min_thickness_mm: 3.0, band_level: 0.8, ..Default::default() }),
            measured,
            forecast,
            fitted_at: Some(day(2024, 8, 20)),
            earlier: Vec::new(),
        }
    }

    fn berlin() -> Tz {
        "Europe/Berlin".parse().expect("zone")
    }

    #[test]
    fn the_svg_holds_points_band_median_minimum_axes_title_and_caution() {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("pad.svg");
        let mut trajectory = trajectory();
        if let Some(part) = trajectory.part.as_mut() {
            part.due_earliest = Some(day(2025, 9, 1));
            part.due_median = Some(day(2025, 10, 15));
            part.due_latest = Some(day(2026, 2, 20));
        }
        let data = ChartData {
            title: "vehicle bus-17, axle 1 pad".into(),
            trajectory,
            today: Some(Utc.with_ymd_and_hms(2025, 3, 9, 12, 0, 0).single().expect("valid")),
            time_zone: berlin(),
        };
        write_chart(&path, &data).expect("chart written");
        let svg = std::fs::read_to_string(&path).expect("read svg");
        assert!(svg.starts_with("<svg"), "an SVG document");
        assert!(svg.contains("Wear of vehicle bus-17, axle 1 pad"), "title");
        assert!(svg.contains("Thickness (mm)") && svg.contains("Date (Europe/Berlin)"), "axis labels with units and the fleet's zone");
        assert!(!svg.contains("UTC"), "no UTC dates on a Berlin fleet's chart");
        assert_eq!(svg.matches("<circle").count(), 3 + 1, "three measured points and the legend's dot");
        assert!(svg.contains("<polygon"), "the shaded band");
        assert!(svg.contains("forecast band (80 %)") && svg.contains("forecast median") && svg.contains("minimum thickness (3 mm)"));
        let texts: Vec<&str> = svg.split("<text").skip(1).filter_map(|t| Some(t.split_once('>')?.1.split_once("</text>")?.0.trim())).collect();
        assert!(texts.contains(&"today 2025-03-09") && texts.contains(&"today"), "today in the legend and labelled on the chart: {texts:?}");
        assert!(texts.contains(&"fitted"), "the fitting labelled on the chart");
        assert!(svg.contains("fitted 2024-08-20"), "the replacement that began the cycle");
        // The chart's dates are the fleet's: midnight UTC is 01:00 or 02:00 in Berlin, same day.
        assert!(svg.contains("due: 2025-09-01 to 2026-02-20, median 2025-10-15"), "the due band on the time axis");
        // Month ticks: the span runs Aug 2024 to Mar 2026, so every second month.
        let months = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"];
        let ticks: Vec<&&str> = texts.iter().filter(|t| t.len() == 8 && months.contains(&&t[..3]) && t[4..].parse::<i32>().is_ok()).collect();
        assert!((6..=12).contains(&ticks.len()), "month labels: {ticks:?}");
        assert!(ticks.contains(&&"Jan 2025") && ticks.contains(&&"Jan 2026"), "month labels: {ticks:?}");
        assert!(svg.contains("roadworthiness rules"), "the safety caution");
        // The minimum line is red (plotters writes colours as #RRGGBB).
        assert!(svg.contains("#FF0000"), "a red minimum line");
    }

    #[test]
    fn month_ticks_fall_on_month_starts_at_most_twelve_per_chart() {
        let from = date_day(NaiveDate::from_ymd_opt(2024, 11, 17).expect("date"));
        for span_days in [20.0, 95.0, 400.0, 1500.0, 4000.0] {
            let ticks = month_ticks(from, from + span_days);
            assert!(!ticks.is_empty() && ticks.len() <= 13, "{span_days}: {ticks:?}");
            for (day, label) in &ticks {
                assert!(day_label(*day).ends_with("-01"), "{label} at {}", day_label(*day));
                assert!(*day >= from && *day <= from + span_days);
            }
        }
        assert_eq!(month_ticks(from, from + 95.0).iter().map(|t| t.1.as_str()).collect::<Vec<_>>(), ["Dec 2024", "Jan 2025", "Feb 2025"]);
    }

    #[test]
    fn the_axis_counts_calendar_days_of_the_fleet_zone() {
        // 23:30 UTC on 1 March is already 2 March in Berlin (UTC+1) and still 1 March in UTC.
        let late = Utc.with_ymd_and_hms(2025, 3, 1, 23, 30, 0).single().expect("valid");
        assert_eq!(day_label(LocalDays(berlin()).of(late)), "2025-03-02");
        assert_eq!(day_label(LocalDays(chrono_tz::UTC).of(late)), "2025-03-01");
    }

    #[test]
    fn nothing_to_draw_is_an_error_not_an_empty_file() {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("empty.svg");
        let data = ChartData { title: "x".into(), trajectory: pb::GetWearTrajectoryResponse::default(), today: None, time_zone: chrono_tz::UTC };
        let error = write_chart(&path, &data).expect_err("nothing to draw");
        assert!(format!("{error:#}").contains("nothing to draw"), "{error:#}");
        assert!(!path.exists());
    }

    #[test]
    fn file_names_keep_only_safe_characters() {
        assert_eq!(file_safe("bus 17/ä"), "bus_17__");
        assert_eq!(day_label(20_000.0), "2024-10-04");
        assert_eq!(day_label(20_000.99), "2024-10-04", "a day runs to its end");
    }
}
