//! Long ingest streams finish: a stream of small trip messages in shuffled vehicle order, one
//! HTTP/2 DATA frame per message, completes while other clients write, and the other calls on
//! the same connection are not cut off.

use std::time::Instant;

use brakeledger_proto::v1 as pb;
use brakeledger_tests::load::{shuffled_trips, FramePerMessage};
use brakeledger_tests::{now_s, register, two_axle_vehicle, TestServer};

/// Streams `vehicles × per_vehicle` shuffled trips one frame per message while two other
/// clients push batches, and checks every trip is stored once. Returns trips per second.
pub async fn shuffled_stream_with_concurrent_writers(vehicles: usize, per_vehicle: usize) -> f64 {
    let server = TestServer::start().await;
    for v in 0..vehicles {
        register(&server, two_axle_vehicle("north", &format!("stream-{v}"))).await;
    }
    for w in 0..2 {
        register(&server, two_axle_vehicle("north", &format!("writer-{w}"))).await;
    }
    let end = now_s() - 3600;
    let trips = shuffled_trips("stream", vehicles, per_vehicle, end, 0x5eed);
    let total = trips.len() as u64;
    let started = Instant::now();
    let mut telemetry = server.telemetry();
    let stream = tokio::spawn(async move { telemetry.stream_trips(FramePerMessage::new(trips.into_iter())).await });
    // Other clients: one on the same connection, one on a connection of its own, each pushing
    // batches of 500 trips of its own vehicle for as long as the stream runs.
    let mut writers = Vec::new();
    for w in 0..2usize {
        let channel = if w == 0 { server.channel.clone() } else { brakeledger_tests::connect(server.addr).await };
        writers.push(tokio::spawn(async move {
            let mut client = pb::telemetry_service_client::TelemetryServiceClient::new(channel);
            let mut sent = 0usize;
            for batch in 0..40usize {
                let trips = (0..500).map(|n| brakeledger_tests::trip("north", &format!("writer-{w}"), batch * 500 + n, end)).collect();
                let report = client.push_trips(pb::PushTripsRequest { trips }).await.expect("concurrent push").into_inner();
                assert_eq!(report.accepted, 500);
                sent += 500;
            }
            sent
        }));
    }
    let report = stream.await.expect("join").expect("the long stream completes").into_inner();
    let rate = total as f64 / started.elapsed().as_secs_f64();
    assert_eq!((report.accepted, report.duplicates, report.rejected.len()), (total, 0, 0));
    for writer in writers {
        assert_eq!(writer.await.expect("writer"), 20_000);
    }
    let mut stored = 0;
    for v in 0..vehicles {
        let got = server
            .fleet()
            .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: format!("stream-{v}") })
            .await
            .expect("get vehicle")
            .into_inner();
        assert_eq!(got.trips_recorded, per_vehicle as u64, "stream-{v}");
        stored += got.trips_recorded;
    }
    assert_eq!(stored, total);
    server.stop().await;
    rate
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_100k_trip_shuffled_stream_completes_with_other_clients_writing() {
    shuffled_stream_with_concurrent_writers(200, 500).await;
}

/// The 1,000,000-trip version (several minutes): `cargo test -p brakeledger-tests --release
/// --test e2e -- --ignored --nocapture million`. Figures in BENCHMARKS.md.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
#[ignore = "long: a million trips; run on demand"]
async fn a_million_trip_shuffled_stream_completes_with_other_clients_writing() {
    let rate = shuffled_stream_with_concurrent_writers(1000, 1000).await;
    println!("1,000,000 shuffled trips, one frame per message, 2 concurrent writers: {rate:.0} trips/s");
}
