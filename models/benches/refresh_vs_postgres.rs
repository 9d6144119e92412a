//! A full forecast refresh (own fits, fleet priors, due-date bands) of 400,000 parts, against
//! PostgreSQL computing only the per-part least-squares slopes of the same inspection points
//! (`regr_slope(thickness_mm, energy_mj) ... GROUP BY part_id`), measured in the same run.
//!
//! Run: `cargo bench -p brakeledger-models --bench refresh_vs_postgres`
//! (`BRAKELEDGER_BENCH_PARTS=N` for another part count; `BRAKELEDGER_PG_BIN=DIR` for the
//! directory holding PostgreSQL's `initdb`, `pg_ctl` and `psql`, found under
//! `/usr/lib/postgresql/*/bin` otherwise).
//!
//! PostgreSQL runs as a throwaway cluster in a temporary directory, listening on a unix socket
//! in that directory only (no TCP), with its default settings; it is stopped and deleted at the
//! end. The inspection points (part, cumulative energy MJ, thickness mm) are written with
//! `COPY ... FROM STDIN`, then `VACUUM ANALYZE`d, and the query is run once unmeasured and then
//! timed by psql's `\timing` (server round trip, no client start-up). The query returns the
//! count and sum of the slopes, so every slope is computed but 400,000 rows need not cross the
//! socket.
//!
//! The refresh is `pipeline::forecast_parts_in_passes` on both cores (rayon), as the service's
//! refresh runs it (no chart trajectories). The two are measured in 5 interleaved rounds (the
//! query at PostgreSQL's default settings, the refresh, the query with `work_mem = '1GB'`), so
//! that a machine that slows down or speeds up during the run weighs on both alike; the medians
//! and each round's ratios are printed. With `BRAKELEDGER_BENCH_ONE_THREAD=1` the
//! same on one thread is printed beside it. The bench links jemalloc with the service's
//! settings (`tikv-jemallocator`, a dev-dependency, and `.cargo/config.toml`), as the server
//! binary does, so the refresh allocates as it does in the service; the models crate itself
//! stays free of it.

#![allow(missing_docs)]

/// The allocator the service's binaries use (`services/src/process.rs`).
#[global_allocator]
static ALLOCATOR: tikv_jemallocator::Jemalloc = tikv_jemallocator::Jemalloc;

use std::io::Write;
use std::path::PathBuf;
use std::process::{Command, Stdio};
use std::time::Instant;

use brakeledger_models::calibration::repeated_fleet_inputs;
use brakeledger_models::pipeline::{forecast_parts, forecast_parts_in_passes, PartInput};
use brakeledger_models::{ForecastSettings, PartEventKind};

const DEFAULT_PARTS: usize = 400_000;
const ROUNDS: usize = 3;
/// Rounds of the refresh interleaved with PostgreSQL's query.
const INTERLEAVED_ROUNDS: usize = 5;
/// Vehicles per pass of the service's forecast worker (`[forecast] batch_vehicles`, default).
const PASS_VEHICLES: usize = 256;

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// The inspection points of every part as CSV: `part_id,energy_mj,thickness_mm`.
fn inspection_csv(inputs: &[PartInput]) -> (String, usize) {
    let mut out = String::with_capacity(inputs.len() * 200);
    let mut rows = 0;
    for (part, input) in inputs.iter().enumerate() {
        for event in &input.history.events {
            if let PartEventKind::Inspection { thickness_mm } = event.kind {
                out.push_str(&format!("{part},{:.6},{:.3}\n", event.cumulative_energy_mj, thickness_mm));
                rows += 1;
            }
        }
    }
    (out, rows)
}

/// A throwaway PostgreSQL cluster; stopped on drop (the directory goes with the `TempDir`).
struct Postgres {
    bin: PathBuf,
    dir: tempfile::TempDir,
    /// Run server commands as this user (PostgreSQL refuses to run as root).
    run_as: Option<String>,
}

fn is_root() -> bool {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| s.lines().find(|l| l.starts_with("Uid:")).map(|l| l.split_whitespace().nth(1) == Some("0")))
        .unwrap_or(false)
}

fn find_pg_bin() -> Option<PathBuf> {
    if let Some(dir) = std::env::var_os("BRAKELEDGER_PG_BIN") {
        return Some(PathBuf::from(dir));
    }
    let mut candidates: Vec<PathBuf> = std::fs::read_dir("/usr/lib/postgresql")
        .ok()?
        .filter_map(|e| e.ok().map(|e| e.path().join("bin")))
        .filter(|p| p.join("initdb").exists())
        .collect();
    candidates.sort();
    candidates.pop()
}

impl Postgres {
    fn command(&self, program: &str) -> Command {
        let path = self.bin.join(program);
        match &self.run_as {
            Some(user) => {
                let mut c = Command::new("runuser");
                c.args(["-u", user, "--"]).arg(path);
                c
            }
            None => Command::new(path),
        }
    }

    fn data(&self) -> PathBuf {
        self.dir.path().join("data")
    }

    fn start() -> Result<Self, String> {
        let bin = find_pg_bin().ok_or("no PostgreSQL server binaries (initdb) under /usr/lib/postgresql/*/bin")?;
        let dir = tempfile::Builder::new().prefix("bl-pg").tempdir_in("/tmp").map_err(|e| e.to_string())?;
        let run_as = is_root().then(|| "postgres".to_owned());
        if let Some(user) = &run_as {
            let status = Command::new("chown").arg(user).arg(dir.path()).status().map_err(|e| e.to_string())?;
            if !status.success() {
                return Err(format!("running as root and cannot hand {} to user {user}", dir.path().display()));
            }
        }
        let pg = Self { bin, dir, run_as };
        let out = pg
            .command("initdb")
            .arg("-D")
            .arg(pg.data())
            .args(["-A", "trust", "-U", "bench", "-E", "UTF8", "--locale=C", "--no-sync"])
            .output()
            .map_err(|e| format!("initdb: {e}"))?;
        if !out.status.success() {
            return Err(format!("initdb failed: {}", String::from_utf8_lossy(&out.stderr)));
        }
        let options = format!("-c listen_addresses='' -c unix_socket_directories='{}' -p 5432", pg.dir.path().display());
        let out = pg
            .command("pg_ctl")
            .arg("-D")
            .arg(pg.data())
            .args(["-w", "-l"])
            .arg(pg.dir.path().join("server.log"))
            .args(["-o", &options, "start"])
            .output()
            .map_err(|e| format!("pg_ctl: {e}"))?;
        if !out.status.success() {
            return Err(format!("pg_ctl start failed: {}", String::from_utf8_lossy(&out.stderr)));
        }
        Ok(pg)
    }

    /// Runs psql against the cluster with `args`, feeding it `stdin`; returns its stdout.
    fn run_psql(&self, args: &[&str], stdin: Option<&str>) -> Result<String, String> {
        let mut child = self
            .command("psql")
            .arg("-h")
            .arg(self.dir.path())
            .args(["-p", "5432", "-U", "bench", "-d", "postgres", "-X", "-q", "-v", "ON_ERROR_STOP=1"])
            .args(args)
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .map_err(|e| format!("psql: {e}"))?;
        if let (Some(mut pipe), Some(data)) = (child.stdin.take(), stdin) {
            pipe.write_all(data.as_bytes()).map_err(|e| format!("writing to psql: {e}"))?;
        }
        let out = child.wait_with_output().map_err(|e| format!("psql: {e}"))?;
        if !out.status.success() {
            return Err(format!("psql {args:?} failed: {}", String::from_utf8_lossy(&out.stderr)));
        }
        Ok(String::from_utf8_lossy(&out.stdout).into_owned())
    }

    /// Runs `sql`; `stdin` is fed to it (for COPY). Returns stdout.
    fn psql(&self, sql: &str, stdin: Option<&str>) -> Result<String, String> {
        self.run_psql(&["-c", sql], stdin)
    }

    /// Server time of `query` after `setup`, ms, by psql's `\timing`, and its answer.
    fn time_query(&self, setup: &str, query: &str) -> Result<(f64, String), String> {
        let script = format!("{setup}\n\\timing on\n{query}");
        let text = self.run_psql(&["-A", "-t"], Some(&script))?;
        let times: Vec<f64> = text
            .lines()
            .filter_map(|l| l.strip_prefix("Time: "))
            .filter_map(|l| l.split_whitespace().next()?.parse().ok())
            .collect();
        let [time] = times[..] else {
            return Err(format!("expected one timing from psql, got: {text}"));
        };
        let answer = text.lines().find(|l| !l.starts_with("Time: ") && !l.is_empty()).unwrap_or("").to_owned();
        Ok((time, answer))
    }
}

impl Drop for Postgres {
    fn drop(&mut self) {
        let _ = self.command("pg_ctl").arg("-D").arg(self.data()).args(["-m", "immediate", "-w", "stop"]).output();
    }
}

fn how_to_get_postgres(reason: &str) {
    println!("PostgreSQL baseline skipped: {reason}");
    println!("To measure it, install the PostgreSQL server (Debian/Ubuntu: `apt-get install postgresql`,");
    println!("which puts initdb and pg_ctl under /usr/lib/postgresql/<version>/bin), or point");
    println!("BRAKELEDGER_PG_BIN at a directory holding initdb, pg_ctl and psql.");
}

/// CPU time of this process so far (user + system, all threads), seconds, from
/// `/proc/self/stat` (clock ticks of 1/100 s); NaN where that file is missing.
fn process_cpu_s() -> f64 {
    let Ok(stat) = std::fs::read_to_string("/proc/self/stat") else { return f64::NAN };
    // Fields after the command name (which is in parentheses): utime and stime are 14 and 15.
    let after = stat.rsplit(')').next().unwrap_or("");
    let fields: Vec<&str> = after.split_whitespace().collect();
    let ticks = |i: usize| fields.get(i).and_then(|f| f.parse::<f64>().ok()).unwrap_or(f64::NAN);
    (ticks(11) + ticks(12)) / 100.0
}

/// Median wall time and median CPU time of `refresh` (which returns the parts dated), seconds,
/// and the parts dated.
fn time_refresh(refresh: impl Fn() -> usize) -> (f64, f64, usize) {
    let mut dated = 0;
    let (walls, cpus): (Vec<f64>, Vec<f64>) = (0..ROUNDS)
        .map(|_| {
            let cpu = process_cpu_s();
            let started = Instant::now();
            dated = refresh();
            (started.elapsed().as_secs_f64(), process_cpu_s() - cpu)
        })
        .unzip();
    (median(walls), median(cpus), dated)
}

/// The refresh as the service's forecast worker runs it: fits and priors over every part, then
/// the vehicles in passes of [`PASS_VEHICLES`], each pass's results dropped (the worker stores
/// them) before the next. Returns the parts dated.
fn refresh_in_passes(inputs: &[PartInput], today: f64, settings: &ForecastSettings) -> usize {
    let mut dated = 0;
    forecast_parts_in_passes(inputs, today, settings, PASS_VEHICLES, |_, pass| dated += pass.iter().filter(|(_, outlook)| outlook.due.is_some()).count());
    dated
}

/// The whole refresh held at once: every part's result in one vector. Returns the parts dated.
fn refresh_held_whole(inputs: &[PartInput], today: f64, settings: &ForecastSettings) -> usize {
    let results = forecast_parts(inputs, today, settings);
    let dated = results.iter().filter(|r| r.outlook.due.is_some()).count();
    drop(results);
    dated
}

fn main() {
    // `cargo bench` passes `--bench`; nothing else is read from the command line.
    let parts = std::env::var("BRAKELEDGER_BENCH_PARTS").ok().and_then(|v| v.parse().ok()).unwrap_or(DEFAULT_PARTS);
    let (inputs, today) = repeated_fleet_inputs(parts);
    // As the service's refresh runs it: bands kept whole, no chart trajectories.
    let settings = ForecastSettings { with_trajectory: false, ..ForecastSettings::default() };
    let (csv, rows) = inspection_csv(&inputs);
    println!("{parts} parts, {rows} inspection points, {} threads", rayon::current_num_threads());

    let query = "SELECT count(slope), sum(slope) FROM (SELECT part_id, regr_slope(thickness_mm, energy_mj) AS slope FROM inspection_points GROUP BY part_id) AS s;";
    let postgres = Postgres::start().and_then(|pg| {
        pg.psql("CREATE TABLE inspection_points (part_id integer NOT NULL, energy_mj double precision NOT NULL, thickness_mm double precision NOT NULL)", None)?;
        let started = Instant::now();
        pg.psql("COPY inspection_points FROM STDIN WITH (FORMAT csv)", Some(&csv))?;
        let copy_s = started.elapsed().as_secs_f64();
        pg.psql("VACUUM ANALYZE inspection_points", None)?;
        // One unmeasured run of each, so that every measured one finds the table in memory.
        pg.time_query("", query)?;
        let version = pg.psql("SHOW server_version", None)?;
        Ok((pg, copy_s, version.lines().nth(2).unwrap_or("").trim().to_owned()))
    });

    // Interleaved, round by round: PostgreSQL at default settings, the refresh, PostgreSQL with
    // `work_mem` raised. A machine that slows down or speeds up during the run then weighs on
    // both sides alike; each round's ratio is printed beside the ratio of the medians.
    let mut rounds: Vec<(f64, f64, Option<(f64, f64)>)> = Vec::new();
    let mut pg_result: Result<String, String> = Ok(String::new());
    let mut dated = 0;
    for _ in 0..INTERLEAVED_ROUNDS {
        let default = postgres.as_ref().map_err(Clone::clone).and_then(|(pg, _, _)| pg.time_query("", query));
        let cpu = process_cpu_s();
        let started = Instant::now();
        dated = refresh_in_passes(&inputs, today, &settings);
        let (wall, cpu) = (started.elapsed().as_secs_f64(), process_cpu_s() - cpu);
        let raised = postgres.as_ref().map_err(Clone::clone).and_then(|(pg, _, _)| pg.time_query("SET work_mem = '1GB';", query));
        let pg_times = match (default, raised) {
            (Ok((default_ms, answer)), Ok((raised_ms, _))) => {
                pg_result = Ok(answer);
                Some((default_ms / 1e3, raised_ms / 1e3))
            }
            (Err(e), _) | (_, Err(e)) => {
                pg_result = Err(e);
                None
            }
        };
        rounds.push((wall, cpu, pg_times));
    }
    let refresh_s = median(rounds.iter().map(|r| r.0).collect());
    let refresh_cpu_s = median(rounds.iter().map(|r| r.1).collect());
    let (whole_s, whole_cpu_s, _) = time_refresh(|| refresh_held_whole(&inputs, today, &settings));
    let cpu = process_cpu_s();
    let started = Instant::now();
    let (fits, priors) = brakeledger_models::pipeline::fit_and_pool(&inputs, &settings);
    let fit_pool = (started.elapsed().as_secs_f64(), process_cpu_s() - cpu);
    drop((fits, priors));
    let single = std::env::var_os("BRAKELEDGER_BENCH_ONE_THREAD")
        .and_then(|_| rayon::ThreadPoolBuilder::new().num_threads(1).build().ok())
        .map(|pool| pool.install(|| time_refresh(|| refresh_in_passes(&inputs, today, &settings)).0));

    println!();
    println!("| what | time | ratio to full refresh |");
    println!("|---|---|---|");
    println!(
        "| brakeledger full refresh (fit, pool, bands; {} threads; vehicles in passes of {PASS_VEHICLES}), {dated} parts dated; CPU {refresh_cpu_s:.2} s = {:.1} µs per part | {refresh_s:.3} s | 1.00 |",
        rayon::current_num_threads(),
        refresh_cpu_s / parts as f64 * 1e6
    );
    println!(
        "| the same held whole (every part's result in one vector); CPU {whole_cpu_s:.2} s = {:.1} µs per part | {whole_s:.3} s | {:.2} |",
        whole_cpu_s / parts as f64 * 1e6,
        whole_s / refresh_s
    );
    println!("| of which fits and priors alone; CPU {:.2} s = {:.1} µs per part | {:.3} s | {:.2} |", fit_pool.1, fit_pool.1 / parts as f64 * 1e6, fit_pool.0, fit_pool.0 / refresh_s);
    if let Some(single_s) = single {
        println!("| the same on one thread | {single_s:.3} s | {:.2} |", single_s / refresh_s);
    }
    let pg_rounds: Vec<(f64, f64)> = rounds.iter().filter_map(|r| r.2).collect();
    match (&postgres, &pg_result) {
        (Ok((_, copy_s, version)), Ok(answer)) if pg_rounds.len() == rounds.len() => {
            let default_s = median(pg_rounds.iter().map(|p| p.0).collect());
            let raised_s = median(pg_rounds.iter().map(|p| p.1).collect());
            println!("| PostgreSQL {version} `regr_slope ... GROUP BY` only, default settings | {default_s:.3} s | {:.2} |", default_s / refresh_s);
            println!("| the same with `work_mem = '1GB'` | {raised_s:.3} s | {:.2} |", raised_s / refresh_s);
            println!("(COPY of {rows} points took {copy_s:.2} s; slopes count|sum: {answer})");
            println!();
            println!("Round by round (PostgreSQL default, refresh, PostgreSQL `work_mem = '1GB'`; ratio = PostgreSQL / refresh):");
            for (i, (wall, _, pg)) in rounds.iter().enumerate() {
                if let Some((default, raised)) = pg {
                    println!("- round {}: {default:.3} s, {wall:.3} s, {raised:.3} s: {:.2} / {:.2}", i + 1, default / wall, raised / wall);
                }
            }
        }
        (Err(reason), _) | (_, Err(reason)) => how_to_get_postgres(reason),
        _ => how_to_get_postgres("a PostgreSQL round failed"),
    }
}
