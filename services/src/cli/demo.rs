//! `brakeledger demo`: the whole service on an invented fleet, in one command. Starts the real
//! server in this process on a loopback port with a temporary database, simulates a fleet
//! with the models crate's seeded simulator (two years of history ending today), sends it
//! through the gRPC API as an integration would ([`crate::cli::demo_feed`]), waits for the
//! forecasts, then prints what a planner would ask for: the parts due in the next 60 days,
//! one vehicle's forecast, a two-week workshop plan, the accuracy against the simulator's
//! true dates ([`crate::cli::demo_accuracy`]), and writes one SVG wear chart.
//!
//! Progress lines go to stderr; the answers go to stdout.

use std::io::Write;
use std::path::PathBuf;
use std::sync::Arc;
use std::time::{Duration, Instant};

use anyhow::Context;
use brakeledger_models::simulator::{simulate, SimConfig};
use brakeledger_proto::v1 as pb;
use chrono::Utc;
use tokio::net::TcpListener;

use crate::cli::chart::{fetch_chart, write_chart};
use crate::cli::client::{Connection, ServerTarget};
use crate::cli::dates::{today_in, SECONDS_PER_DAY};
use crate::cli::demo_accuracy::{render_accuracy, score_fleet};
use crate::cli::demo_feed::{feed_fleet, wait_for_forecasts};
use crate::cli::forecast_view::{fetch_due, fetch_forecast, render_due, render_forecast, VehicleIndex};
use crate::cli::parts::PartArg;
use crate::cli::plan_view::{fetch_plan, render_plan, PlanSettings};
use crate::config::{ForecastConfig, LogFormat};
use crate::state::AppState;
use crate::store::sled_store::SledStore;
use crate::SAFETY_CAUTION;

/// Longer description of `demo`.
pub const DEMO_LONG_ABOUT: &str = "\
Run the whole service on an invented fleet: a server starts inside this process on a loopback
port with a temporary database; a seeded simulator invents a fleet and two years of its trips,
inspections and replacements, ending today; these go through the gRPC API as an integration
would send them. Then the demo prints the parts due in the next 60 days, one vehicle's forecast,
a workshop plan for the next two weeks and how close the forecasts came to the simulator's
hidden true dates (next to two simpler methods), and writes a wear chart as SVG. The planners'
web page runs beside it; its address and a planner token to sign in with are printed (with
--keep-serving it stays up after the output, until Ctrl-C). Nothing is kept afterwards except
the chart. The fleet, its vehicles and all numbers are invented.";

/// Examples of `demo`.
pub const DEMO_EXAMPLES: &str = "\
Examples:
  brakeledger demo
  brakeledger demo --vehicles 400 --seed 11 --chart /tmp/wear.svg
  brakeledger demo --keep-serving --web-listen 127.0.0.1:8090   # then open the printed address";

/// The demo fleet's identifier.
pub const DEMO_FLEET: &str = "demo-harbour";
/// The demo fleet's time zone.
pub const DEMO_TIME_ZONE: &str = "Europe/Lisbon";
/// Days of simulated history.
const HISTORY_DAYS: usize = 730;
/// The due window shown, days.
const DUE_WINDOW_DAYS: i64 = 60;
/// Days in the plan shown.
const PLAN_DAYS: u32 = 14;
/// Band level of everything shown.
const BAND_LEVEL: f64 = 0.8;
/// Rows of the due list printed (the count line gives the total).
const DUE_ROWS_SHOWN: usize = 25;
/// Longest wait for the forecasts.
const FORECAST_WAIT: Duration = Duration::from_secs(300);

/// Flags of `demo`.
#[derive(Debug, clap::Args)]
pub struct DemoArgs {
    /// Number of vehicles to invent.
    #[arg(long, default_value_t = 300, value_parser = clap::value_parser!(u32).range(4..=5000))]
    pub vehicles: u32,
    /// Seed of the simulator; equal seeds give equal fleets.
    #[arg(long, default_value_t = 2024)]
    pub seed: u64,
    /// Where to write the SVG wear chart.
    #[arg(long, default_value = "brakeledger-demo-chart.svg")]
    pub chart: PathBuf,
    /// Workshop hours per day for the plan.
    #[arg(long, default_value_t = 16.0)]
    pub hours_per_day: f64,
    /// Address of the planners' web page (port 0: any free port; the address is printed).
    #[arg(long, default_value = "127.0.0.1:0")]
    pub web_listen: std::net::SocketAddr,
    /// Keep the server and the web page running after the demo's output, until Ctrl-C.
    #[arg(long)]
    pub keep_serving: bool,
}

/// Progress lines on stderr, stamped with the seconds since the start.
struct Progress {
    started: Instant,
}

impl Progress {
    fn say(&self, line: impl AsRef<str>) {
        eprintln!("[{:5.1} s] {}", self.started.elapsed().as_secs_f64(), line.as_ref());
    }
}

/// Runs `demo`.
pub async fn demo(args: &DemoArgs, out: &mut impl Write) -> anyhow::Result<()> {
    if !(args.hours_per_day.is_finite() && args.hours_per_day > 0.0) {
        anyhow::bail!("--hours-per-day must be greater than 0");
    }
    crate::cli::serve::init_logging(LogFormat::Text, "warn");
    let progress = Progress { started: Instant::now() };

    // The invented fleet: two years of history ending at the start of today (UTC).
    let today_day = Utc::now().timestamp().div_euclid(SECONDS_PER_DAY);
    let config = SimConfig {
        seed: args.seed,
        vehicles: args.vehicles as usize,
        start_day: today_day - HISTORY_DAYS as i64,
        history_days: HISTORY_DAYS,
        ..SimConfig::default()
    };
    let fleet = tokio::task::spawn_blocking(move || simulate(&config)).await.context("the simulator stopped")?;
    let trips: usize = fleet.vehicles.iter().map(|v| v.trips.len()).sum();
    progress.say(format!(
        "simulated {} invented vehicles over {HISTORY_DAYS} days (seed {}): {trips} trips",
        fleet.vehicles.len(),
        args.seed
    ));

    // The server, in this process, on a loopback port with a temporary database.
    let data_dir = tempfile::tempdir().context("creating a temporary data directory")?;
    let data_path = data_dir.path().to_owned();
    let store = tokio::task::spawn_blocking(move || SledStore::open(&data_path))
        .await
        .context("opening the temporary database")?
        .context("opening the temporary database")?;
    let forecast_config = ForecastConfig::default();
    let energy_window_days = forecast_config.energy_window_days;
    let listener = TcpListener::bind("127.0.0.1:0").await.context("binding a loopback port")?;
    let address = listener.local_addr()?;
    // The demo server requires tokens, like a production one: an operator token from a file,
    // then a planner token of the demo fleet for every read.
    let operator = crate::auth::tokens::new_secret();
    let token_file = data_dir.path().join("operator-token");
    std::fs::write(&token_file, &operator).context("writing the demo's operator token file")?;
    let store: Arc<dyn crate::store::Store> = Arc::new(store);
    let auth = crate::config::AuthConfig { operator_token_file: Some(token_file), insecure_no_auth: false };
    let access = crate::auth::bootstrap::set_up(&auth, address, Arc::clone(&store), None, crate::convert::now_ms())?;
    // The demo loads two years of a fleet's history in one stream, as an import does; a
    // production server's per-token ingest limit (`[limits] ingest_trips_per_second`, sized for
    // live feeds) would refuse it part-way once the stream outruns its burst, so it is off here.
    let mut serving = crate::config::ServingConfig::default();
    serving.limits.ingest_trips_per_second = 0.0;
    let state = AppState::new(store, forecast_config).with_serving(serving).with_access(access.policy);
    let web_listener = TcpListener::bind(args.web_listen).await.with_context(|| format!("web page listener on {}", args.web_listen))?;
    let web_address = web_listener.local_addr()?;
    crate::cli::serve::spawn_web_page(web_listener, state.clone());
    let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
    let server = tokio::spawn(crate::server::run(listener, state, async {
        let _ = stopped.await;
    }));
    let url = format!("http://{address}");
    let mut feeder = connect(&url, &operator).await?;
    let planner = feeder
        .access
        .create_token(pb::CreateTokenRequest { fleet_id: DEMO_FLEET.into(), role: crate::auth::Role::Planner.to_wire(), label: "demo planner".into() })
        .await
        .context("creating the demo's planner token")?
        .into_inner()
        .secret;
    let mut reader = connect(&url, &planner).await?;
    progress.say(format!("server listening on {address} (tokens required), data in a temporary directory"));

    progress.say(format!("web page on http://{web_address}/"));
    let mut result = show(args, &mut feeder, &mut reader, &fleet, energy_window_days, &progress, out).await;
    if result.is_ok() {
        result = web_page_note(web_address, &planner, args.keep_serving, out);
    }
    if result.is_ok() && args.keep_serving {
        progress.say("serving until Ctrl-C");
        let _ = tokio::signal::ctrl_c().await;
    }

    let _ = stop.send(());
    match server.await {
        Ok(Ok(())) => {}
        Ok(Err(e)) => eprintln!("the demo server stopped with an error: {e}"),
        Err(e) => eprintln!("the demo server task failed: {e}"),
    }
    drop(data_dir);
    result?;
    progress.say("done");
    Ok(())
}

/// Where the web page is and how to sign in.
fn web_page_note(address: std::net::SocketAddr, planner_token: &str, keep_serving: bool, out: &mut impl Write) -> anyhow::Result<()> {
    let open = if keep_serving { "open it now; Ctrl-C stops it" } else { "it stops with the demo: run `brakeledger demo --keep-serving` to keep it up" };
    writeln!(
        out,
        "\n== Web page ==\n\nThe planners' web page is at http://{address}/ ({open}).\n\
         Sign in with the demo fleet's planner token: {planner_token}\n\
         Fleet at a glance: http://{address}/fleets/{DEMO_FLEET}\n\
         Visit plan with CSV and iCalendar downloads: http://{address}/fleets/{DEMO_FLEET}/plan\n\n{SAFETY_CAUTION}"
    )?;
    out.flush()?;
    Ok(())
}

/// Connects with `token`, retrying briefly while the server starts.
async fn connect(url: &str, token: &str) -> anyhow::Result<Connection> {
    let mut last = None;
    let target = ServerTarget { token: Some(token.to_owned()), ..ServerTarget::open(url) };
    for _ in 0..100 {
        match Connection::open(&target).await {
            Ok(c) => return Ok(c),
            Err(e) => last = Some(e),
        }
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    Err(last.unwrap_or_else(|| anyhow::anyhow!("cannot connect to the demo server")))
}

/// Feeds the fleet and prints every answer.
async fn show(
    args: &DemoArgs,
    feeder: &mut Connection,
    connection: &mut Connection,
    fleet: &brakeledger_models::simulator::SimulatedFleet,
    energy_window_days: usize,
    progress: &Progress,
    out: &mut impl Write,
) -> anyhow::Result<()> {
    let mut say = |line: String| progress.say(line);
    let counts = feed_fleet(feeder, DEMO_FLEET, DEMO_TIME_ZONE, fleet, &mut say).await?;
    for refusal in &counts.refusals {
        progress.say(format!("  refused: {refusal}"));
    }
    let waited = wait_for_forecasts(connection, DEMO_FLEET, FORECAST_WAIT).await?;
    progress.say(format!("all forecasts up to date ({:.1} s after the last record)", waited.as_secs_f64()));

    let zone = connection.fleet_time_zone(DEMO_FLEET).await?;
    let vehicles: VehicleIndex =
        connection.all_vehicles(DEMO_FLEET).await?.into_iter().map(|v| (v.vehicle_id.clone(), v)).collect();

    writeln!(
        out,
        "brakeledger demo: the invented fleet '{DEMO_FLEET}' ({} vehicles, time zone {zone})\n\
         sent through the gRPC API: {} trips ({} refused), {} inspections, {} replacements ({} refused)\n",
        counts.vehicles, counts.trips_sent, counts.trips_rejected, counts.inspections, counts.replacements, counts.records_rejected
    )?;

    // 1. What is due in the next 60 days.
    let window_end = Utc::now() + chrono::Duration::days(DUE_WINDOW_DAYS);
    let (due, time_zone) = fetch_due(connection, DEMO_FLEET, window_end, BAND_LEVEL, None).await?;
    writeln!(out, "== Parts due in the next {DUE_WINDOW_DAYS} days ==\n")?;
    let shown: Vec<pb::DuePart> = due.iter().take(DUE_ROWS_SHOWN).cloned().collect();
    let window_label = format!("{} {time_zone}", window_end.with_timezone(&zone).format("%Y-%m-%d"));
    let mut due_text = render_due(&shown, &vehicles, &window_label);
    if due.len() > shown.len() {
        due_text = due_text.replacen(
            &format!("{} part(s) on", shown.len()),
            &format!("{} part(s) (first {} shown) on", due.len(), shown.len()),
            1,
        );
    }
    writeln!(out, "{due_text}")?;

    // 2. One vehicle's forecast: the vehicle of the listed part not yet at its minimum whose
    // median date is nearest six weeks out (its chart shows history and a band well apart),
    // else of the first part listed, else the first vehicle.
    let today = today_in(zone);
    let weeks_out = |p: &pb::PartForecast| {
        chrono::NaiveDate::parse_from_str(&p.due_median_date, "%Y-%m-%d").map_or(i64::MAX, |d| ((d - today).num_days() - 42).abs())
    };
    let featured = due
        .iter()
        .filter_map(|d| d.part.as_ref().map(|p| (d, p)))
        .filter(|(_, p)| p.current_thickness_low_mm > p.min_thickness_mm && p.due_earliest_date != p.due_latest_date)
        .min_by_key(|(_, p)| weeks_out(p))
        .or_else(|| due.iter().find_map(|d| d.part.as_ref().map(|p| (d, p))))
        .map(|(d, p)| (d.vehicle_id.clone(), p.axle_index, p.component))
        .or_else(|| fleet.vehicles.first().map(|v| (v.vehicle_id.clone(), 1, pb::Component::Friction as i32)));
    let Some((vehicle_id, axle, component)) = featured else {
        anyhow::bail!("the simulated fleet has no vehicle");
    };
    let (forecast, vehicle) = fetch_forecast(connection, DEMO_FLEET, &vehicle_id, BAND_LEVEL).await?;
    writeln!(out, "== One vehicle's forecast ==\n")?;
    writeln!(out, "{}", render_forecast(&forecast, vehicle.as_ref()))?;

    // 3. A two-week workshop plan.
    let first_day = today;
    let settings = PlanSettings { hours_per_day: args.hours_per_day, pad_job_hours: 0.0, rotor_job_hours: 0.0, bundle_days: 0, band_level: BAND_LEVEL, safety_margin_days: None };
    let plan = fetch_plan(connection, DEMO_FLEET, zone, first_day, PLAN_DAYS, settings).await?;
    let last_day = first_day + chrono::Duration::days(i64::from(PLAN_DAYS) - 1);
    writeln!(out, "== Workshop plan for the next two weeks ==\n")?;
    let heading = format!("{first_day} to {last_day} ({time_zone}), {} workshop hours per day", args.hours_per_day);
    writeln!(out, "{}", render_plan(&heading, &plan, &vehicles))?;

    // 4. Accuracy against the simulator's hidden true dates.
    let (report, listed) = score_fleet(connection, DEMO_FLEET, fleet, BAND_LEVEL, energy_window_days).await?;
    progress.say("scored the forecasts against the simulator's true dates");
    writeln!(out, "== How close the forecasts came ==\n")?;
    writeln!(
        out,
        "The simulator knows when each part fitted today truly reaches its minimum thickness;\n\
         the forecasts never saw those dates. For comparison: a fixed replacement interval in km\n\
         per vehicle class, and a straight line through each part's measurements against km.\n"
    )?;
    writeln!(out, "{}", render_accuracy(&report, listed))?;

    // 5. One chart.
    let part = if component == pb::Component::Disc as i32 { PartArg::Rotor } else { PartArg::Pad };
    let chart = fetch_chart(connection, DEMO_FLEET, &vehicle_id, axle, part, BAND_LEVEL).await?;
    write_chart(&args.chart, &chart)?;
    let shown_path = std::fs::canonicalize(&args.chart).unwrap_or_else(|_| args.chart.clone());
    writeln!(out, "== Chart ==\n\nThe wear chart of {} is in {}\n", chart.title, shown_path.display())?;
    writeln!(out, "{SAFETY_CAUTION}")?;
    out.flush()?;
    Ok(())
}
