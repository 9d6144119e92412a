//! Benchmarks of the service's hot paths, each as a ratio against a baseline measured in the
//! same run (the machines here are shared and noisy; absolute numbers move, ratios less so).
//!
//! 1. Ingest: trips/s streamed over loopback gRPC (validation, chunked transactions, fsync per
//!    chunk, report) against the storage engine alone taking the same records in the same
//!    chunks (the floor the gRPC path sits on).
//! 2. Due list: one ListDue page (100 parts) over gRPC from the materialised due index,
//!    against the naive alternative of reading every stored forecast of the fleet and sorting
//!    by due date per request (itself far cheaper than refitting the fleet), and the same
//!    page read from the index in-process (the part of the gRPC time that is storage).
//!
//! Run: `cargo bench -p brakeledger-tests --bench service_paths`

use std::sync::Arc;
use std::time::Instant;

use brakeledger::store::{sled_store::SledStore, FleetRecord, Store, TripRecord};
use brakeledger_tests::dated_forecasts::dated_forecasts;
use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, trip, trip_record, two_axle_vehicle, TestServer};

const TRIPS: usize = 40_000;
const ROUNDS: usize = 3;
const FLEET_VEHICLES: usize = 5_000;

fn median(mut values: Vec<f64>) -> f64 {
    values.sort_by(f64::total_cmp);
    values[values.len() / 2]
}

fn trips(end: i64) -> Vec<pb::TripSummary> {
    (0..TRIPS).map(|n| trip("bench", &format!("v{}", n % 20), n / 20, end)).collect()
}

fn records(summaries: &[pb::TripSummary]) -> Vec<TripRecord> {
    summaries.iter().map(trip_record).collect()
}

async fn ingest_rounds() -> (f64, f64) {
    let end = now_s() - 60;
    let summaries = trips(end);
    let direct_records = records(&summaries);
    let (mut direct, mut grpc) = (Vec::new(), Vec::new());
    for _ in 0..ROUNDS {
        let dir = tempfile::tempdir().expect("temp dir");
        let store = SledStore::open(dir.path()).expect("store");
        let started = Instant::now();
        for chunk in direct_records.chunks(2000) {
            store.ingest_trips(chunk).expect("ingest");
        }
        direct.push(TRIPS as f64 / started.elapsed().as_secs_f64());
        drop(store);

        let server = TestServer::start().await;
        for v in 0..20 {
            server
                .fleet()
                .upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("bench", &format!("v{v}"))) })
                .await
                .expect("vehicle");
        }
        let started = Instant::now();
        let report = server.telemetry().stream_trips(tokio_stream::iter(summaries.clone())).await.expect("stream").into_inner();
        grpc.push(TRIPS as f64 / started.elapsed().as_secs_f64());
        assert_eq!(report.accepted as usize, TRIPS);
        server.stop().await;
    }
    (median(direct), median(grpc))
}

fn synthetic_forecasts(store: &dyn Store) {
    // ListDue answers NOT_FOUND for a fleet never set up that holds no vehicle.
    store.upsert_fleet(&FleetRecord::default_for("bench")).expect("fleet");
    for v in 0..FLEET_VEHICLES {
        store.put_forecasts(&dated_forecasts("bench", &format!("v{v:05}"), v)).expect("put");
    }
}

async fn due_list_rounds() -> (f64, f64, f64) {
    let dir = tempfile::tempdir().expect("temp dir");
    {
        let store = SledStore::open(dir.path()).expect("store");
        synthetic_forecasts(&store);
        store.flush().expect("flush");
    }
    let server = TestServer::start_on(dir.path(), brakeledger_tests::fast_forecasts()).await;
    let (mut naive, mut indexed) = (Vec::new(), Vec::new());
    let due_before = prost_types::Timestamp { seconds: (20_000 + 3650) * 86_400, nanos: 0 };
    for _ in 0..ROUNDS * 3 {
        let started = Instant::now();
        let page = server
            .forecast()
            .list_due(pb::ListDueRequest {
                fleet_id: "bench".into(),
                due_before: Some(due_before),
                band_level: 0.8,
                component: 0,
                page_size: 100,
                page_token: String::new(),
                include_undated: false,
            })
            .await
            .expect("list")
            .into_inner();
        indexed.push(started.elapsed().as_secs_f64());
        assert_eq!(page.parts.len(), 100);
    }
    // The naive path reads the same database: every vehicle's forecasts, then a sort.
    server.stop().await;
    let store = Arc::new(SledStore::open(dir.path()).expect("reopen"));
    let mut direct = Vec::new();
    for _ in 0..ROUNDS * 3 {
        let started = Instant::now();
        let cursors = brakeledger::grpc::due_queries::scan_due_filtered(store.as_ref(), "bench", brakeledger::store::BandLevel::P80, due_before.seconds * 1000, None, None, 101).expect("scan");
        let parts = brakeledger::grpc::due_queries::due_parts(store.as_ref(), "bench", &cursors[..100], 0.8, chrono_tz::UTC, 0).expect("parts");
        direct.push(started.elapsed().as_secs_f64());
        assert_eq!(parts.len(), 100);
    }
    for _ in 0..ROUNDS * 3 {
        let started = Instant::now();
        let mut all: Vec<(i64, String, u32)> = store
            .fleet_forecasts("bench")
            .expect("scan")
            .into_iter()
            .flat_map(|f| {
                let vehicle = f.vehicle_id.clone();
                f.parts.into_iter().filter_map(move |p| p.due_earliest_ms(0.8).map(|ms| (ms, vehicle.clone(), p.axle_index)))
            })
            .collect();
        all.sort();
        all.truncate(100);
        naive.push(started.elapsed().as_secs_f64());
        assert_eq!(all.len(), 100);
    }
    (median(naive), median(indexed), median(direct))
}

fn main() {
    let runtime = tokio::runtime::Builder::new_multi_thread().enable_all().build().expect("runtime");
    runtime.block_on(async {
        if std::env::var_os("BENCH_SKIP_INGEST").is_none() {
            let (direct, grpc) = ingest_rounds().await;
            println!("ingest, {TRIPS} trips, median of {ROUNDS} rounds:");
            println!("  storage engine alone (baseline): {direct:>10.0} trips/s");
            println!("  StreamTrips over loopback gRPC:  {grpc:>10.0} trips/s   ratio {:.2} of baseline", grpc / direct);
        }
        let (naive, indexed, in_process) = due_list_rounds().await;
        println!("due list, fleet of {FLEET_VEHICLES} vehicles ({} parts), first page of 100, median of {} rounds:", FLEET_VEHICLES * 4, ROUNDS * 3);
        println!("  read all forecasts and sort (baseline): {:>8.2} ms", naive * 1e3);
        println!("  ListDue over gRPC from the due index:   {:>8.2} ms   {:.1}x faster", indexed * 1e3, naive / indexed);
        println!("  the same page read in-process:          {:>8.2} ms   {:.1}x faster", in_process * 1e3, naive / in_process);
    });
}
