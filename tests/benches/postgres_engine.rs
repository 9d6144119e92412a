//! The PostgreSQL engine through the real server, against PostgreSQL's own bulk load and
//! against a small fleet, all in one run on one throwaway database:
//!
//! 1. **Ingest**: a server process on the PostgreSQL store (`serve --store URL`) takes N
//!    invented trips of many vehicles through `StreamTrips` (one call, timed from the first
//!    message to the report, which comes after every trip is committed), then N/2 more
//!    through `IngestTrips` (messages of 500 trips, timed to the last acknowledgement). The
//!    store alone (`PostgresStore::ingest_trips` in this process, chunks of 2,000 as the
//!    server writes them) takes the StreamTrips rows once more into a second database, so
//!    the gRPC share of the time shows. Baseline: `COPY ... FROM STDIN (FORMAT binary)` of
//!    exactly the rows the service stored (converted by the service's own `trip_record`) into
//!    a plain table with the same columns and primary key as the service's `trips` table
//!    (schema `copy_baseline` of the same database), once as one COPY in one transaction and
//!    once as one COPY and commit per 2,000 rows.
//! 2. **Due list**: two fleets in a second database, 1,000 and 100,000 vehicles with four
//!    dated parts each, written through the engine's own statements (`writes::upsert_vehicle`,
//!    `derived::put_forecasts`, 1,000 vehicles per transaction, no fitting); then a fresh
//!    server process on that database answers `ListDue` (100 parts a page, 80 % band) for the
//!    first page and for the page 3,000 parts in (reached by following the page tokens),
//!    repeated; p50 and p99 of each, the large fleet as a ratio to the small one.
//!
//! Needs a PostgreSQL server where it may create databases, named by
//! `BRAKELEDGER_TEST_POSTGRES_URL`; `scripts/with-scratch-postgres` starts a throwaway one:
//!
//! ```sh
//! scripts/with-scratch-postgres cargo bench -p brakeledger-tests --bench postgres_engine
//! # reusing the release build:
//! scripts/with-scratch-postgres cargo test --release -p brakeledger-tests --bench postgres_engine
//! ```
//!
//! Sizes by environment (defaults in brackets): `PG_BENCH_TRIPS` trips through StreamTrips
//! [200000], spread over `PG_BENCH_VEHICLES` vehicles [1000] (20 vehicles' trips at a time,
//! newest first, as an integration forwarding per-vehicle uploads sends them);
//! `PG_BENCH_ACKED_TRIPS` trips through IngestTrips [half of PG_BENCH_TRIPS, 0 skips it];
//! `PG_BENCH_DUE_VEHICLES` vehicles of the large fleet [100000] (0 skips the due list);
//! `PG_BENCH_DUE_CALLS` timed ListDue calls per page and fleet [200].

use std::path::PathBuf;
use std::time::{Duration, Instant};

use brakeledger::store::postgres::scratch::ScratchDatabase;
use brakeledger::store::postgres::{derived, writes, PostgresStore};
use brakeledger::store::{FleetRecord, Store, TripRecord, VehicleRecord};
use brakeledger_proto::v1 as pb;
use brakeledger_tests::bench::{env_or, vehicle_id, UnlimitedIngestConfig};
use brakeledger_tests::dated_forecasts::{dated_forecasts, DUE_SPREAD_DAYS, FIRST_DUE_DAY};
use brakeledger_tests::{connect, now_s, trip, two_axle_vehicle, ServerProcess, DAY_S};
use postgres::binary_copy::BinaryCopyInWriter;
use postgres::types::{ToSql, Type};
use tonic::transport::Channel;

const INGEST_FLEET: &str = "north";
const SMALL_FLEET: &str = "depot-small";
const LARGE_FLEET: &str = "depot-large";
const SMALL_FLEET_VEHICLES: usize = 1_000;
/// Trips per chunk: the server's `[ingest] chunk_trips` default, used by the in-process and
/// chunked-COPY lines.
const CHUNK_TRIPS: usize = 2_000;
/// Trips per IngestTrips message.
const ACKED_MESSAGE_TRIPS: usize = 500;
/// Vehicles written per transaction when loading the due-list fleets.
const LOAD_BATCH_VEHICLES: usize = 1_000;
const PAGE_PARTS: u32 = 100;
/// Where the deeper page starts, in parts.
const DEEP_PAGE_OFFSET: usize = 3_000;

/// Trips `first..first + per_vehicle` (hourly, newest first) of every vehicle, 20 vehicles at a
/// time.
fn bench_trips(vehicles: usize, first: usize, per_vehicle: usize, end_s: i64) -> Vec<pb::TripSummary> {
    let mut out = Vec::with_capacity(vehicles * per_vehicle);
    for group in (0..vehicles).step_by(20) {
        for n in first..first + per_vehicle {
            for v in group..(group + 20).min(vehicles) {
                let mut t = trip(INGEST_FLEET, &vehicle_id(v), n, end_s);
                // Energies and distances vary a little per trip, as measured ones do.
                t.friction_energy_j = 30.0e6 + ((v * 7 + n * 13) % 1000) as f64 * 1.0e3;
                t.distance_m = 40_000.0 + ((v + n * 31) % 500) as f64;
                out.push(t);
            }
        }
    }
    out
}

fn percentile(sorted: &[f64], p: f64) -> f64 {
    sorted[((sorted.len() as f64 - 1.0) * p).round() as usize]
}

/// p50 and p99 of latencies in ms.
fn p50_p99(mut ms: Vec<f64>) -> (f64, f64) {
    ms.sort_by(f64::total_cmp);
    (percentile(&ms, 0.5), percentile(&ms, 0.99))
}

/// CPU seconds (user and system) a process has used, from `/proc/PID/stat` (clock ticks of
/// 1/100 s, Linux's usual `CLK_TCK`); 0 when unreadable.
fn cpu_seconds(pid: u32) -> f64 {
    let stat = std::fs::read_to_string(format!("/proc/{pid}/stat")).unwrap_or_default();
    // The fields after the command name, which is in parentheses and may hold spaces.
    let fields: Vec<&str> = stat.rsplit_once(')').map_or("", |(_, rest)| rest).split_whitespace().collect();
    let ticks = |i: usize| fields.get(i).and_then(|v| v.parse::<f64>().ok()).unwrap_or(0.0);
    // utime and stime are fields 14 and 15 of the line, 12 and 13 after the name.
    (ticks(11) + ticks(12)) / 100.0
}

fn start_server(binary: &std::path::Path, config: &std::path::Path, url: &str) -> ServerProcess {
    ServerProcess::spawn_serving(binary, &["--config".as_ref(), config.as_os_str(), "--store".as_ref(), url.as_ref()])
        .unwrap_or_else(|output| panic!("server on PostgreSQL did not start: {output}"))
}

async fn register_vehicles(channel: &Channel, vehicles: usize) {
    let mut tasks = Vec::new();
    for worker in 0..16 {
        let channel = channel.clone();
        tasks.push(tokio::spawn(async move {
            let mut fleet = pb::fleet_service_client::FleetServiceClient::new(channel);
            for v in (worker..vehicles).step_by(16) {
                fleet.upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle(INGEST_FLEET, &vehicle_id(v))) }).await.expect("register vehicle");
            }
        }));
    }
    for task in tasks {
        task.await.expect("register worker");
    }
}

/// Waits until the fleet has no forecasts pending; seconds waited.
async fn wait_for_refresh(channel: &Channel, fleet_id: &str) -> f64 {
    let started = Instant::now();
    let mut fleet = pb::fleet_service_client::FleetServiceClient::new(channel.clone());
    while started.elapsed() < Duration::from_secs(600) {
        let pending = fleet.get_fleet(pb::GetFleetRequest { fleet_id: fleet_id.into() }).await.expect("get fleet").into_inner().forecasts_pending;
        if pending == 0 {
            return started.elapsed().as_secs_f64();
        }
        tokio::time::sleep(Duration::from_millis(200)).await;
    }
    panic!("forecasts of {fleet_id} still pending after 600 s");
}

/// StreamTrips of `trips` in one call: trips/s to the report.
async fn stream_trips(channel: &Channel, trips: Vec<pb::TripSummary>) -> f64 {
    let count = trips.len();
    let mut telemetry = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone());
    let started = Instant::now();
    let report = telemetry.stream_trips(tokio_stream::iter(trips)).await.expect("StreamTrips").into_inner();
    let seconds = started.elapsed().as_secs_f64();
    assert_eq!(report.accepted as usize, count, "StreamTrips stored fewer trips than sent: {:?}", report.rejected.first());
    count as f64 / seconds
}

/// IngestTrips of `trips` in messages of [`ACKED_MESSAGE_TRIPS`]: trips/s to the last ack.
async fn acknowledged_ingest(channel: &Channel, trips: Vec<pb::TripSummary>) -> f64 {
    use tokio_stream::StreamExt;
    let count = trips.len();
    let messages: Vec<pb::IngestTripsRequest> = trips.chunks(ACKED_MESSAGE_TRIPS).map(|chunk| pb::IngestTripsRequest { trips: chunk.to_vec() }).collect();
    let mut telemetry = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone());
    let started = Instant::now();
    let mut acks = telemetry.ingest_trips(tokio_stream::iter(messages)).await.expect("IngestTrips").into_inner();
    let mut last = None;
    while let Some(ack) = acks.next().await {
        last = Some(ack.expect("IngestTrips ack"));
    }
    let seconds = started.elapsed().as_secs_f64();
    let last = last.expect("at least one ack");
    assert_eq!(last.settled_trips as usize, count, "IngestTrips settled fewer trips than sent");
    assert_eq!(last.accepted_total as usize, count, "IngestTrips stored fewer trips than sent");
    count as f64 / seconds
}

/// The rows the service stores for `trips` (its own conversion and validation).
fn stored_rows(trips: &[pb::TripSummary]) -> Vec<TripRecord> {
    let vehicle = VehicleRecord::try_from(two_axle_vehicle(INGEST_FLEET, "any")).expect("vehicle record");
    let now_ms = now_s() * 1000;
    trips
        .iter()
        .map(|t| {
            let vehicle = VehicleRecord { vehicle_id: t.vehicle_id.clone(), ..vehicle.clone() };
            brakeledger::convert::trip_record(t.clone(), &vehicle, now_ms).expect("a valid trip")
        })
        .collect()
}

const COPY_TYPES: [Type; 12] =
    [Type::TEXT, Type::TEXT, Type::TEXT, Type::INT8, Type::INT8, Type::FLOAT8, Type::FLOAT8, Type::FLOAT8_ARRAY, Type::BOOL, Type::INT8, Type::FLOAT8, Type::FLOAT8];

/// One binary COPY of `rows` into `table` inside `tx`.
fn copy_rows(tx: &mut postgres::Transaction<'_>, table: &str, rows: &[TripRecord]) {
    let sink = tx.copy_in(&format!("COPY {table} FROM STDIN (FORMAT binary)")).expect("COPY");
    let mut writer = BinaryCopyInWriter::new(sink, &COPY_TYPES);
    for r in rows {
        let applications = i64::from(r.brake_applications);
        let values: [&(dyn ToSql + Sync); 12] = [
            &r.fleet_id,
            &r.vehicle_id,
            &r.trip_id,
            &r.start_ms,
            &r.end_ms,
            &r.distance_m,
            &r.friction_energy_j,
            &r.axle_energy_j,
            &r.axle_split_reported,
            &applications,
            &r.regen_energy_j,
            &r.hot_energy_j,
        ];
        writer.write(&values).expect("COPY row");
    }
    writer.finish().expect("COPY end");
}

/// COPY baselines on `url`, into tables made `LIKE` the service's `trips` (the same columns,
/// types, collations and NOT NULLs) with its primary key and no other index: (one COPY in one
/// transaction, one COPY and commit per chunk), trips/s.
fn copy_baselines(url: &str, rows: &[TripRecord]) -> (f64, f64) {
    let mut client = postgres::Client::connect(url, postgres::NoTls).expect("connect for COPY");
    client
        .batch_execute(
            "CREATE SCHEMA copy_baseline;
             CREATE TABLE copy_baseline.trips_one (LIKE public.trips);
             ALTER TABLE copy_baseline.trips_one ADD PRIMARY KEY (fleet_id, vehicle_id, trip_id);
             CREATE TABLE copy_baseline.trips_chunked (LIKE public.trips);
             ALTER TABLE copy_baseline.trips_chunked ADD PRIMARY KEY (fleet_id, vehicle_id, trip_id);",
        )
        .expect("baseline tables");
    let started = Instant::now();
    let mut tx = client.transaction().expect("begin");
    copy_rows(&mut tx, "copy_baseline.trips_one", rows);
    tx.commit().expect("commit");
    let one = rows.len() as f64 / started.elapsed().as_secs_f64();
    let started = Instant::now();
    for chunk in rows.chunks(CHUNK_TRIPS) {
        let mut tx = client.transaction().expect("begin");
        copy_rows(&mut tx, "copy_baseline.trips_chunked", chunk);
        tx.commit().expect("commit");
    }
    let chunked = rows.len() as f64 / started.elapsed().as_secs_f64();
    let copied: i64 = client.query_one("SELECT (SELECT count(*) FROM copy_baseline.trips_one) + (SELECT count(*) FROM copy_baseline.trips_chunked)", &[]).expect("count").get(0);
    assert_eq!(copied as usize, 2 * rows.len(), "COPY stored fewer rows than sent");
    (one, chunked)
}

/// The store alone, in this process: `PostgresStore::ingest_trips` in chunks as the server
/// writes them, into a database of its own. Trips/s, and this process's CPU µs per trip.
fn store_alone(admin_url: &str, rows: &[TripRecord]) -> (f64, f64) {
    let db = ScratchDatabase::create(admin_url, "brakeledger_bench_store").expect("store database");
    let store = PostgresStore::open(&db.url).expect("open store");
    let vehicles: std::collections::BTreeSet<&str> = rows.iter().map(|r| r.vehicle_id.as_str()).collect();
    for v in vehicles {
        store.upsert_vehicle(&VehicleRecord::try_from(two_axle_vehicle(INGEST_FLEET, v)).expect("vehicle")).expect("upsert vehicle");
    }
    let cpu_before = cpu_seconds(std::process::id());
    let started = Instant::now();
    for chunk in rows.chunks(CHUNK_TRIPS) {
        store.ingest_trips(chunk).expect("ingest");
    }
    let rate = rows.len() as f64 / started.elapsed().as_secs_f64();
    (rate, (cpu_seconds(std::process::id()) - cpu_before) * 1e6 / rows.len() as f64)
}

/// Writes a fleet of `vehicles` vehicles with dated forecasts through the engine's own
/// statements, `LOAD_BATCH_VEHICLES` per transaction on two connections, and removes the
/// stale marks the vehicle writes leave (the forecasts are already there). Seconds taken.
fn load_due_fleet(url: &str, fleet_id: &str, vehicles: usize) -> f64 {
    let started = Instant::now();
    let mut client = postgres::Client::connect(url, postgres::NoTls).expect("connect for loading");
    let mut tx = client.transaction().expect("begin");
    writes::upsert_fleet(&mut tx, &FleetRecord::default_for(fleet_id)).expect("fleet");
    tx.commit().expect("commit");
    let template = VehicleRecord::try_from(two_axle_vehicle(fleet_id, "any")).expect("vehicle record");
    let batches: Vec<usize> = (0..vehicles).step_by(LOAD_BATCH_VEHICLES).collect();
    std::thread::scope(|scope| {
        for half in 0..2 {
            let (batches, template) = (&batches, &template);
            scope.spawn(move || {
                let mut client = postgres::Client::connect(url, postgres::NoTls).expect("connect for loading");
                for &from in batches.iter().skip(half).step_by(2) {
                    let mut tx = client.transaction().expect("begin");
                    for v in from..(from + LOAD_BATCH_VEHICLES).min(vehicles) {
                        let id = vehicle_id(v);
                        writes::upsert_vehicle(&mut tx, &VehicleRecord { vehicle_id: id.clone(), ..template.clone() }).expect("vehicle");
                        derived::put_forecasts(&mut tx, &dated_forecasts(fleet_id, &id, v), "bench-loader").expect("forecasts");
                    }
                    tx.execute("DELETE FROM stale WHERE fleet_id = $1", &[&fleet_id]).expect("stale marks");
                    tx.commit().expect("commit");
                }
            });
        }
    });
    started.elapsed().as_secs_f64()
}

fn list_due_request(fleet_id: &str, page_token: String) -> pb::ListDueRequest {
    pb::ListDueRequest {
        fleet_id: fleet_id.into(),
        due_before: Some(prost_types::Timestamp { seconds: (FIRST_DUE_DAY + DUE_SPREAD_DAYS + 200) * DAY_S, nanos: 0 }),
        band_level: 0.8,
        component: 0,
        page_size: PAGE_PARTS,
        page_token,
        include_undated: false,
    }
}

/// The page token of the page starting `offset` parts in.
async fn token_at(channel: &Channel, fleet_id: &str, offset: usize) -> String {
    let mut forecast = pb::forecast_service_client::ForecastServiceClient::new(channel.clone());
    let mut token = String::new();
    for _ in 0..offset / PAGE_PARTS as usize {
        let page = forecast.list_due(list_due_request(fleet_id, token)).await.expect("ListDue").into_inner();
        assert_eq!(page.parts.len(), PAGE_PARTS as usize, "a full page");
        token = page.next_page_token;
    }
    token
}

/// Latencies (ms) of `calls` ListDue calls for the page at `token`, after five untimed ones.
async fn time_page(channel: &Channel, fleet_id: &str, token: &str, calls: usize) -> Vec<f64> {
    let mut forecast = pb::forecast_service_client::ForecastServiceClient::new(channel.clone());
    let mut ms = Vec::with_capacity(calls);
    for call in 0..calls + 5 {
        let started = Instant::now();
        let page = forecast.list_due(list_due_request(fleet_id, token.to_owned())).await.expect("ListDue").into_inner();
        if call >= 5 {
            ms.push(started.elapsed().as_secs_f64() * 1e3);
        }
        assert_eq!(page.parts.len(), PAGE_PARTS as usize, "a full page");
    }
    ms
}

struct DueTimes {
    first: (f64, f64),
    deep: (f64, f64),
}

async fn due_times(channel: &Channel, fleet_id: &str, calls: usize) -> DueTimes {
    let first = p50_p99(time_page(channel, fleet_id, "", calls).await);
    let token = token_at(channel, fleet_id, DEEP_PAGE_OFFSET).await;
    let deep = p50_p99(time_page(channel, fleet_id, &token, calls).await);
    DueTimes { first, deep }
}

fn main() {
    let admin_url = std::env::var("BRAKELEDGER_TEST_POSTGRES_URL").ok().filter(|u| !u.is_empty()).expect(
        "BRAKELEDGER_TEST_POSTGRES_URL must name a PostgreSQL server where this may create databases: \
         scripts/with-scratch-postgres cargo test --release -p brakeledger-tests --bench postgres_engine",
    );
    let trips_n: usize = env_or("PG_BENCH_TRIPS", 200_000);
    let vehicles: usize = env_or("PG_BENCH_VEHICLES", 1_000).clamp(1, trips_n.max(1));
    let acked_n: usize = env_or("PG_BENCH_ACKED_TRIPS", trips_n / 2);
    let due_vehicles: usize = env_or("PG_BENCH_DUE_VEHICLES", 100_000);
    let due_calls: usize = env_or("PG_BENCH_DUE_CALLS", 200).max(1);
    let per_vehicle = trips_n.div_ceil(vehicles);
    let acked_per_vehicle = acked_n.div_ceil(vehicles);
    let binary = PathBuf::from(env!("CARGO_BIN_EXE_brakeledger-test-server"));
    let config_file = UnlimitedIngestConfig::write();
    let config = config_file.path();
    let runtime = tokio::runtime::Builder::new_multi_thread().enable_all().build().expect("runtime");
    let run_started = Instant::now();
    let server_version = {
        let mut client = postgres::Client::connect(&admin_url, postgres::NoTls).expect("connect to the PostgreSQL server");
        client.query_one("SELECT version()", &[]).expect("version").get::<_, String>(0)
    };
    println!("PostgreSQL: {server_version}");

    // 1. Ingest through the server, then the COPY baselines on the same database.
    let end_s = now_s() - 3600;
    let streamed = bench_trips(vehicles, 0, per_vehicle, end_s);
    let acknowledged = bench_trips(vehicles, per_vehicle, acked_per_vehicle, end_s);
    let ingest_db = ScratchDatabase::create(&admin_url, "brakeledger_bench").expect("bench database");
    let server = start_server(&binary, &config, &ingest_db.url);
    let server_pid = server.child.id();
    let mut stream_cpu_us = 0.0;
    let (stream_rate, stream_refresh_s, acked_rate, acked_refresh_s) = runtime.block_on(async {
        let channel = connect(server.addr).await;
        register_vehicles(&channel, vehicles).await;
        wait_for_refresh(&channel, INGEST_FLEET).await;
        let cpu_before = cpu_seconds(server_pid);
        let stream_rate = stream_trips(&channel, streamed.clone()).await;
        stream_cpu_us = (cpu_seconds(server_pid) - cpu_before) * 1e6 / streamed.len() as f64;
        println!("StreamTrips: {} trips of {vehicles} vehicles, {stream_rate:.0} trips/s; server process CPU {stream_cpu_us:.1} µs per trip", streamed.len());
        let stream_refresh_s = wait_for_refresh(&channel, INGEST_FLEET).await;
        let (acked_rate, acked_refresh_s) = if acknowledged.is_empty() {
            (f64::NAN, 0.0)
        } else {
            let rate = acknowledged_ingest(&channel, acknowledged.clone()).await;
            println!("IngestTrips: {} trips, {rate:.0} trips/s", acknowledged.len());
            (rate, wait_for_refresh(&channel, INGEST_FLEET).await)
        };
        (stream_rate, stream_refresh_s, acked_rate, acked_refresh_s)
    });
    let status = server.terminate();
    assert!(status.success(), "server stopped with {status}");
    let rows = stored_rows(&streamed);
    let (copy_one, copy_chunked) = copy_baselines(&ingest_db.url, &rows);
    println!("COPY: one statement {copy_one:.0} trips/s, per {CHUNK_TRIPS} rows {copy_chunked:.0} trips/s");
    drop(ingest_db);
    let (alone, alone_cpu_us) = store_alone(&admin_url, &rows);
    println!("PostgresStore::ingest_trips in-process: {alone:.0} trips/s; CPU of this process {alone_cpu_us:.1} µs per trip");

    // 2. The due list at two fleet sizes, in one database.
    let due = (due_vehicles > 0).then(|| {
        let due_db = ScratchDatabase::create(&admin_url, "brakeledger_bench_due").expect("due database");
        drop(PostgresStore::open(&due_db.url).expect("schema"));
        let small_s = load_due_fleet(&due_db.url, SMALL_FLEET, SMALL_FLEET_VEHICLES);
        let large_s = load_due_fleet(&due_db.url, LARGE_FLEET, due_vehicles);
        println!("loaded {SMALL_FLEET_VEHICLES} vehicles in {small_s:.1} s and {due_vehicles} in {large_s:.1} s");
        {
            let mut client = postgres::Client::connect(&due_db.url, postgres::NoTls).expect("connect");
            client.batch_execute("VACUUM ANALYZE").expect("vacuum analyze");
        }
        let server = start_server(&binary, &config, &due_db.url);
        let times = runtime.block_on(async {
            let channel = connect(server.addr).await;
            // Fleets are interleaved so that drift in the machine's load affects both alike.
            let small_warm = due_times(&channel, SMALL_FLEET, due_calls / 2).await;
            let large_warm = due_times(&channel, LARGE_FLEET, due_calls / 2).await;
            let small = due_times(&channel, SMALL_FLEET, due_calls).await;
            let large = due_times(&channel, LARGE_FLEET, due_calls).await;
            drop((small_warm, large_warm));
            (small, large)
        });
        let status = server.terminate();
        assert!(status.success(), "server stopped with {status}");
        (large_s, times)
    });

    println!();
    println!("PostgreSQL engine run: {} trips through StreamTrips and {} through IngestTrips over {vehicles} vehicles; {:.0} s in all", streamed.len(), acknowledged.len(), run_started.elapsed().as_secs_f64());
    println!("| path | baseline | measured | ratio |");
    println!("|---|---|---|---|");
    println!("| ingest, StreamTrips (committed before the report) | COPY, one statement: {copy_one:.0} trips/s | {stream_rate:.0} trips/s | {:.2} |", stream_rate / copy_one);
    println!("| | COPY per {CHUNK_TRIPS} rows, each committed: {copy_chunked:.0} trips/s | | {:.2} |", stream_rate / copy_chunked);
    if !acknowledged.is_empty() {
        println!("| ingest, IngestTrips (to the last ack) | COPY, one statement: {copy_one:.0} trips/s | {acked_rate:.0} trips/s | {:.2} |", acked_rate / copy_one);
    }
    println!("| PostgresStore::ingest_trips in-process, {CHUNK_TRIPS} per call | COPY per {CHUNK_TRIPS} rows: {copy_chunked:.0} trips/s | {alone:.0} trips/s | {:.2} |", alone / copy_chunked);
    println!("CPU per trip: the server process during StreamTrips {stream_cpu_us:.1} µs (forecast worker included); PostgresStore::ingest_trips in-process {alone_cpu_us:.1} µs (PostgreSQL's own processes not counted)");
    println!("forecast refresh after the ingest: {stream_refresh_s:.1} s after StreamTrips, {acked_refresh_s:.1} s after IngestTrips");
    if let Some((large_s, (small, large))) = due {
        for (name, s, l) in [("first page", small.first, large.first), (&format!("page at part {DEEP_PAGE_OFFSET}") as &str, small.deep, large.deep)] {
            println!(
                "| ListDue {name}, {due_vehicles} vehicles ({} parts), p50 / p99 | {SMALL_FLEET_VEHICLES} vehicles: {:.2} / {:.2} ms | {:.2} / {:.2} ms | {:.2} (p50) |",
                due_vehicles * 4,
                s.0,
                s.1,
                l.0,
                l.1,
                l.0 / s.0
            );
        }
        println!("loading the {due_vehicles}-vehicle fleet (vehicles and forecasts, engine statements) took {large_s:.1} s");
    }
}
