//! `brakeledger chart`: the wear chart of one part as an SVG file, from GetWearTrajectory:
//! measured thicknesses (dots), the forecast median (line) inside its shaded band, the minimum
//! thickness (dashed red line) and today (grey line), with dated axes and the safety caution
//! at the foot. Drawn with `plotters`' SVG backend; text stays text, so the file is small and
//! searchable.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use chrono::{DateTime, Utc};
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
    Ok(ChartData { title: format!("vehicle {vehicle_id}, axle {axle_index} {name}"), trajectory, today: Some(Utc::now()) })
}

/// A vehicle identifier made safe for a file name.
fn file_safe(id: &str) -> String {
    id.chars().map(|c| if c.is_ascii_alphanumeric() || c == '-' || c == '_' { c } else { '_' }).collect()
}

/// Days since the Unix epoch (the chart's x axis).
fn day_number(ts: &prost_types::Timestamp) -> Option<f64> {
    from_timestamp(ts).map(|t| t.timestamp() as f64 / SECONDS_PER_DAY as f64)
}

/// The date of a day number, for axis labels.
fn day_label(day: f64) -> String {
    DateTime::from_timestamp((day * SECONDS_PER_DAY as f64).round() as i64, 0)
        .map(|t| t.date_naive().to_string())
        .unwrap_or_default()
}

/// Draws the chart to an SVG file.
pub fn write_chart(path: &Path, data: &ChartData) -> anyhow::Result<()> {
    draw(path, data).map_err(|e| anyhow::anyhow!("{e}")).with_context(|| format!("writing the chart to {}", path.display()))
}

fn draw(path: &Path, data: &ChartData) -> Result<(), Box<dyn std::error::Error + Send + Sync>> {
    let trajectory = &data.trajectory;
    let part = trajectory.part.clone().unwrap_or_default();
    let measured: Vec<(f64, f64)> = trajectory
        .measured
        .iter()
        .filter_map(|m| Some((day_number(m.measured_at.as_ref()?)?, m.thickness_mm)))
        .filter(|(_, y)| y.is_finite())
        .collect();
    let band: Vec<(f64, f64, f64, f64)> = trajectory
        .forecast
        .iter()
        .filter_map(|p| Some((day_number(p.date.as_ref()?)?, p.median_mm, p.low_mm, p.high_mm)))
        .filter(|(_, m, l, h)| m.is_finite() && l.is_finite() && h.is_finite())
        .collect();
    if measured.is_empty() && band.is_empty() {
        return Err("the server returned neither measurements nor a forecast for this part; nothing to draw".into());
    }
    let today = data.today.map(|t| t.timestamp() as f64 / SECONDS_PER_DAY as f64);
    let fitted = trajectory.fitted_at.as_ref().and_then(day_number);
    let xs = measured.iter().map(|p| p.0).chain(band.iter().map(|p| p.0)).chain(fitted).chain(today);
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
    let (y_min, y_max) = ((y_low - 0.1 * y_span).max(0.0), y_high + 0.1 * y_span);

    let root = SVGBackend::new(path, SIZE).into_drawing_area();
    root.fill(&WHITE)?;
    let (plot_area, foot) = root.split_vertically(SIZE.1 - 50);
    let mut chart = ChartBuilder::on(&plot_area)
        .caption(format!("Wear of {}", data.title), ("sans-serif", 22))
        .margin(15)
        .x_label_area_size(45)
        .y_label_area_size(60)
        .build_cartesian_2d(x_min..x_max, y_min..y_max)?;
    let label = |x: &f64| day_label(*x);
    chart
        .configure_mesh()
        .x_desc("Date (UTC)")
        .y_desc("Thickness (mm)")
        .x_labels(8)
        .y_labels(8)
        .x_label_formatter(&label)
        .light_line_style(RGBColor(235, 235, 235))
        .draw()?;

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
    if let Some(today) = today {
        let grey = RGBColor(150, 150, 150);
        chart
            .draw_series(LineSeries::new([(today, y_min), (today, y_max)], grey.stroke_width(1)))?
            .label("today")
            .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], grey.stroke_width(1)));
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

    #[test]
    fn the_svg_holds_points_band_median_minimum_axes_title_and_caution() {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("pad.svg");
        let data = ChartData { title: "vehicle bus-17, axle 1 pad".into(), trajectory: trajectory(), today: Some(Utc.with_ymd_and_hms(2025, 3, 9, 12, 0, 0).single().expect("valid")) };
        write_chart(&path, &data).expect("chart written");
        let svg = std::fs::read_to_string(&path).expect("read svg");
        assert!(svg.starts_with("<svg"), "an SVG document");
        assert!(svg.contains("Wear of vehicle bus-17, axle 1 pad"), "title");
        assert!(svg.contains("Thickness (mm)") && svg.contains("Date (UTC)"), "axis labels with units");
        assert_eq!(svg.matches("<circle").count(), 3 + 1, "three measured points and the legend's dot");
        assert!(svg.contains("<polygon"), "the shaded band");
        assert!(svg.contains("forecast band (80 %)") && svg.contains("forecast median") && svg.contains("minimum thickness (3 mm)"));
        assert!(svg.contains("2025-"), "dates on the x axis");
        assert!(svg.contains("roadworthiness rules"), "the safety caution");
        // The minimum line is red (plotters writes colours as #RRGGBB).
        assert!(svg.contains("#FF0000"), "a red minimum line");
    }

    #[test]
    fn nothing_to_draw_is_an_error_not_an_empty_file() {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("empty.svg");
        let data = ChartData { title: "x".into(), trajectory: pb::GetWearTrajectoryResponse::default(), today: None };
        let error = write_chart(&path, &data).expect_err("nothing to draw");
        assert!(format!("{error:#}").contains("nothing to draw"), "{error:#}");
        assert!(!path.exists());
    }

    #[test]
    fn file_names_keep_only_safe_characters() {
        assert_eq!(file_safe("bus 17/ä"), "bus_17__");
        assert_eq!(day_label(20_000.0), "2024-10-04");
    }
}
