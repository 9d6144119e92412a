//! Memory stays bounded under sustained writes: a real server process takes a long trip stream
//! (many vehicles, in shuffled order) while its resident set (VmRSS in /proc/<pid>/status) is
//! sampled; the RSS must level off under a stated bound. The sled page cache is
//! `[storage] cache_capacity_bytes` (64 MiB by default) and every queue the server keeps is
//! bounded by its configuration (see `config::reliability`).
//!
//! `BRAKELEDGER_SOAK_TRIPS` sets the number of trips (default 300,000); the samples are printed
//! so that the curve can be recorded (README, "Reliability").

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use brakeledger_proto::v1 as pb;
use brakeledger_tests::load::shuffle;
use brakeledger_tests::{connect, now_s, trip, two_axle_vehicle, ServerProcess};

/// The bound the resident set must stay under, MiB: the 64 MiB page cache, the runtime, the
/// HTTP/2 windows of one connection and sled's own bookkeeping, with room to spare.
const RSS_BOUND_MIB: f64 = 320.0;
const VEHICLES: usize = 200;

fn rss_mib(pid: u32) -> Option<f64> {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    let line = status.lines().find(|l| l.starts_with("VmRSS:"))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn rss_levels_off_under_the_bound_during_a_long_write_soak() {
    let total: usize = std::env::var("BRAKELEDGER_SOAK_TRIPS").ok().and_then(|v| v.parse().ok()).unwrap_or(300_000);
    let dir = tempfile::tempdir().expect("temp dir");
    let server = ServerProcess::spawn(&std::path::PathBuf::from(env!("CARGO_BIN_EXE_brakeledger-test-server")), dir.path());
    let pid = server.child.id();
    let channel = connect(server.addr).await;
    let mut fleet = pb::fleet_service_client::FleetServiceClient::new(channel.clone());
    for v in 0..VEHICLES {
        fleet.upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", &format!("soak-{v}"))) }).await.expect("vehicle");
    }
    let per_vehicle = total / VEHICLES;
    let mut order: Vec<(usize, usize)> = (0..VEHICLES).flat_map(|v| (0..per_vehicle).map(move |n| (v, n))).collect();
    shuffle(&mut order, 0x50a6);
    let sent = Arc::new(AtomicU64::new(0));
    let end = now_s() - 3600;

    let sampler_sent = Arc::clone(&sent);
    let done = Arc::new(std::sync::atomic::AtomicBool::new(false));
    let sampler_done = Arc::clone(&done);
    let sampler = std::thread::spawn(move || {
        let started = Instant::now();
        let mut samples = Vec::new();
        while !sampler_done.load(Ordering::SeqCst) {
            if let Some(rss) = rss_mib(pid) {
                samples.push((started.elapsed().as_secs_f64(), sampler_sent.load(Ordering::SeqCst), rss));
            }
            std::thread::sleep(Duration::from_millis(250));
        }
        samples
    });

    let counter = Arc::clone(&sent);
    let trips = tokio_stream::iter(order.into_iter().map(move |(v, n)| {
        counter.fetch_add(1, Ordering::SeqCst);
        trip("north", &format!("soak-{v}"), n, end)
    }));
    let report = pb::telemetry_service_client::TelemetryServiceClient::new(channel.clone()).stream_trips(trips).await.expect("stream").into_inner();
    assert_eq!(report.accepted as usize, per_vehicle * VEHICLES);
    // Idle after the load: memory must not keep growing.
    tokio::time::sleep(Duration::from_secs(3)).await;
    done.store(true, Ordering::SeqCst);
    let samples = sampler.join().expect("sampler");
    server.kill();

    eprintln!("soak: {} trips; seconds, trips sent, VmRSS MiB:", report.accepted);
    let step = (samples.len() / 24).max(1);
    for (t, n, rss) in samples.iter().step_by(step) {
        eprintln!("  {t:6.1} s  {n:8}  {rss:7.1}");
    }
    let peak = samples.iter().map(|s| s.2).fold(0.0, f64::max);
    let half = samples.len() / 2;
    let first_half_peak = samples[..half].iter().map(|s| s.2).fold(0.0, f64::max);
    let second_half_peak = samples[half..].iter().map(|s| s.2).fold(0.0, f64::max);
    eprintln!("soak: peak {peak:.1} MiB; first half peak {first_half_peak:.1} MiB, second half peak {second_half_peak:.1} MiB");
    assert!(peak < RSS_BOUND_MIB, "RSS peaked at {peak:.1} MiB, over the {RSS_BOUND_MIB} MiB bound");
    // Levelling off: the second half of the run adds little over the first half's peak (a
    // straight-line growth would add as much again).
    assert!(second_half_peak < first_half_peak * 1.25 + 16.0, "RSS still growing: {first_half_peak:.1} then {second_half_peak:.1} MiB");
}
