//! TelemetryService: streaming and batched trips, idempotency, per-record rejection.

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, register, trip, ts, two_axle_vehicle, TestServer};

async fn totals(server: &TestServer, vehicle_id: &str) -> pb::GetVehicleResponse {
    server
        .fleet()
        .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: vehicle_id.into() })
        .await
        .expect("get vehicle")
        .into_inner()
}

#[tokio::test]
async fn stream_ten_thousand_trips_then_again_as_duplicates() {
    let server = TestServer::start().await;
    register(&server, two_axle_vehicle("north", "bus-1")).await;
    register(&server, two_axle_vehicle("north", "bus-2")).await;
    let end = now_s() - 60;
    // 5,000 hourly trips per vehicle, interleaved as two integrations would send them.
    let trips: Vec<pb::TripSummary> =
        (0..5000).flat_map(|n| [trip("north", "bus-1", n, end), trip("north", "bus-2", n, end)]).collect();

    let report = server.telemetry().stream_trips(tokio_stream::iter(trips.clone())).await.expect("stream").into_inner();
    assert_eq!((report.accepted, report.duplicates, report.rejected.len()), (10_000, 0, 0));
    let first = totals(&server, "bus-1").await;
    assert_eq!(first.trips_recorded, 5000);
    assert!((first.friction_energy_j - 5000.0 * 30.0e6).abs() < 1.0);
    assert_eq!(first.last_trip_end, Some(ts(end)));

    let again = server.telemetry().stream_trips(tokio_stream::iter(trips)).await.expect("stream").into_inner();
    assert_eq!((again.accepted, again.duplicates, again.rejected.len()), (0, 10_000, 0));
    assert_eq!(totals(&server, "bus-1").await, first, "totals unchanged by duplicates");
    assert_eq!(totals(&server, "bus-2").await.trips_recorded, 5000);
    server.stop().await;
}

/// Chunks of one call are written two at a time (the next one sorted while the previous one is
/// written): a trip id sent again in a later chunk, with other values, must still find the
/// first copy stored, and every chunk must see the trips of the chunks before it.
#[tokio::test]
async fn a_trip_sent_again_chunks_later_keeps_its_first_copy() {
    let server = TestServer::start().await;
    register(&server, two_axle_vehicle("north", "bus-1")).await;
    register(&server, two_axle_vehicle("north", "bus-2")).await;
    let end = now_s() - 60;
    // 4,000 trips of both vehicles interleaved (two chunks of the default 2,000, each touching
    // both vehicles), then the first 1,500 of each vehicle again with twice the energy, then
    // 500 new ones.
    let mut trips: Vec<pb::TripSummary> = (0..2000).flat_map(|n| [trip("north", "bus-1", n, end), trip("north", "bus-2", n, end)]).collect();
    let resent = (0..1500).flat_map(|n| [trip("north", "bus-1", n, end), trip("north", "bus-2", n, end)]).map(|t| pb::TripSummary { friction_energy_j: 60.0e6, ..t });
    trips.extend(resent);
    trips.extend((2000..2250).flat_map(|n| [trip("north", "bus-1", n, end), trip("north", "bus-2", n, end)]));

    let report = server.telemetry().stream_trips(tokio_stream::iter(trips)).await.expect("stream").into_inner();
    assert_eq!((report.accepted, report.duplicates, report.rejected.len()), (4500, 3000, 0));
    for vehicle in ["bus-1", "bus-2"] {
        let stored = totals(&server, vehicle).await;
        assert_eq!(stored.trips_recorded, 2250);
        assert!((stored.friction_energy_j - 2250.0 * 30.0e6).abs() < 1.0, "{vehicle}: the first copies' energy, {}", stored.friction_energy_j);
    }
    server.stop().await;
}

#[tokio::test]
async fn mixed_batch_rejects_bad_records_and_keeps_good_ones() {
    let server = TestServer::start().await;
    register(&server, two_axle_vehicle("north", "van-1")).await;
    let end = now_s() - 60;
    let good = |n| trip("north", "van-1", n, end);
    let mut unknown_vehicle = good(1);
    unknown_vehicle.vehicle_id = "ghost".into();
    let mut reversed = good(2);
    reversed.end_time = Some(ts(end - 3 * 3600 - 4000));
    let mut negative = good(3);
    negative.distance_m = -5.0;
    let mut not_a_number = good(4);
    not_a_number.friction_energy_j = f64::NAN;
    let mut bad_split = good(5);
    bad_split.axle_energy_j = vec![10.0e6, 10.0e6];
    let mut wrong_axles = good(6);
    wrong_axles.axle_energy_j = vec![30.0e6];
    let mut impossible = good(7);
    impossible.friction_energy_j = 5.0e12;
    let mut future = good(8);
    future.start_time = Some(ts(now_s() + 3000));
    future.end_time = Some(ts(now_s() + 3600));
    let mut too_long = good(9);
    too_long.start_time = Some(ts(end - 9 * 3600 - 25 * 3600));
    let mut empty_id = good(10);
    empty_id.trip_id = String::new();
    let mut good_split = good(11);
    good_split.axle_energy_j = vec![20.0e6, 10.1e6];
    let batch = vec![
        good(0), unknown_vehicle, reversed, negative, not_a_number, bad_split, wrong_axles, impossible, future, too_long,
        empty_id, good_split, good(0),
    ];
    let report = server.telemetry().push_trips(pb::PushTripsRequest { trips: batch }).await.expect("push").into_inner();
    assert_eq!(report.accepted, 2, "good(0) and good_split");
    assert_eq!(report.duplicates, 1, "good(0) repeated in the batch");
    let rejected: Vec<(u64, &str)> = report.rejected.iter().map(|r| (r.index, r.field.as_str())).collect();
    assert_eq!(
        rejected,
        vec![
            (1, "vehicle_id"),
            (2, "end_time"),
            (3, "distance_m"),
            (4, "friction_energy_j"),
            (5, "axle_energy_j"),
            (6, "axle_energy_j"),
            (7, "friction_energy_j"),
            (8, "end_time"),
            (9, "end_time"),
            (10, "trip_id"),
        ]
    );
    assert!(report.rejected.iter().all(|r| !r.reason.is_empty()));
    assert_eq!(report.rejected[0].trip_id, "trip-000001");
    let stored = totals(&server, "van-1").await;
    assert_eq!(stored.trips_recorded, 2);
    assert!((stored.friction_energy_j - 60.0e6).abs() < 1.0);
    server.stop().await;
}

#[tokio::test]
async fn oversized_batch_is_an_invalid_request() {
    let server = TestServer::start().await;
    register(&server, two_axle_vehicle("north", "van-1")).await;
    let end = now_s() - 60;
    let trips = (0..10_001).map(|n| trip("north", "van-1", n % 20, end)).collect();
    let status = server.telemetry().push_trips(pb::PushTripsRequest { trips }).await.expect_err("too many");
    assert_eq!(status.code(), tonic::Code::InvalidArgument);
    assert_eq!(totals(&server, "van-1").await.trips_recorded, 0, "nothing of a refused request is stored");
    server.stop().await;
}
