//! IngestTrips: each durable chunk is acknowledged as it reaches disk, so a client cut off in
//! the middle resends only what was not settled, and nothing is stored twice.

use std::time::Duration;

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, register, trip, two_axle_vehicle, TestServer};
use tokio_stream::StreamExt;

fn messages(trips: Vec<pb::TripSummary>, per_message: usize) -> Vec<pb::IngestTripsRequest> {
    trips.chunks(per_message).map(|c| pb::IngestTripsRequest { trips: c.to_vec() }).collect()
}

async fn trips_recorded(server: &TestServer, vehicle_id: &str) -> u64 {
    server
        .fleet()
        .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: vehicle_id.into() })
        .await
        .expect("get vehicle")
        .into_inner()
        .trips_recorded
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn every_chunk_is_acknowledged_and_the_last_ack_settles_the_whole_call() {
    let server = TestServer::start().await;
    register(&server, two_axle_vehicle("north", "bus-1")).await;
    let end = now_s() - 60;
    let mut trips: Vec<pb::TripSummary> = (0..7000).map(|n| trip("north", "bus-1", n, end)).collect();
    trips[10].distance_m = -1.0;
    trips[4500].vehicle_id = "ghost".into();
    trips.push(trip("north", "bus-1", 0, end)); // a duplicate of trip 0
    let mut acks = server.telemetry().ingest_trips(tokio_stream::iter(messages(trips, 250))).await.expect("call").into_inner();
    let mut received = Vec::new();
    while let Some(ack) = acks.next().await {
        received.push(ack.expect("ack"));
    }
    assert!(received.len() >= 3, "an ack per 2,000-trip chunk, the last two at the close: {}", received.len());
    assert!(received.windows(2).all(|w| w[0].settled_trips <= w[1].settled_trips), "settled only grows");
    let last = received.last().expect("acks");
    assert_eq!(last.settled_trips, 7001);
    assert_eq!((last.accepted_total, last.duplicates_total, last.rejected_total), (6998, 1, 2));
    let sum = |f: fn(&pb::IngestAck) -> u64| received.iter().map(f).sum::<u64>();
    assert_eq!((sum(|a| a.accepted), sum(|a| a.duplicates), sum(|a| a.rejected_count)), (6998, 1, 2), "per-ack counts add up");
    let listed: Vec<(u64, String)> = received.iter().flat_map(|a| a.rejected.iter().map(|r| (r.index, r.field.clone()))).collect();
    assert_eq!(listed, vec![(10, "distance_m".to_owned()), (4500, "vehicle_id".to_owned())]);
    // Every ack's promise holds: what it says is stored was on disk when it was sent (checked
    // here at the end: the store holds exactly the accepted trips).
    assert_eq!(trips_recorded(&server, "bus-1").await, 6998);
    server.stop().await;
}

/// A call the ingest limit ends (RESOURCE_EXHAUSTED) settles exactly the trips it stored or
/// refused: the trip the limit turned away is not settled, so a client resuming at the last
/// `settled_trips` sends it again and nothing is skipped. The per-ack counts by reason add up
/// to the refusals.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_call_ended_by_the_ingest_limit_settles_only_what_it_stored_or_refused() {
    use brakeledger::config::{LimitsConfig, ServingConfig};
    let dir = tempfile::tempdir().expect("temp dir");
    let limits = LimitsConfig { ingest_trips_per_second: 0.5, ingest_burst_trips: 100.0, ..LimitsConfig::default() };
    let server = TestServer::start_with(dir.path(), brakeledger_tests::fast_forecasts(), None, ServingConfig { limits, ..ServingConfig::default() }).await;
    register(&server, two_axle_vehicle("north", "bus-4")).await;
    let end = now_s() - 60;
    let mut trips: Vec<pb::TripSummary> = (0..150).map(|n| trip("north", "bus-4", n, end)).collect();
    trips[3].distance_m = -1.0;
    let mut acks = server.telemetry().ingest_trips(tokio_stream::iter(messages(trips.clone(), 25))).await.expect("call").into_inner();
    let mut received = Vec::new();
    let ended = loop {
        match acks.next().await {
            Some(Ok(ack)) => received.push(ack),
            Some(Err(status)) => break status,
            None => panic!("the limit ends the call: {received:?}"),
        }
    };
    assert_eq!(ended.code(), tonic::Code::ResourceExhausted, "{ended:?}");
    let last = received.last().expect("what was read is acknowledged");
    // The burst holds 100 trips (the refused one among them); the 101st is turned away.
    assert_eq!((last.settled_trips, last.accepted_total, last.rejected_total), (100, 99, 1));
    let counted: u64 = received.iter().flat_map(|a| &a.rejection_counts).map(|c| c.count).sum();
    assert_eq!(counted, 1, "every refusal counted by reason");
    assert_eq!(trips_recorded(&server, "bus-4").await, 99);
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_client_cut_off_resends_only_from_the_last_settled_index() {
    let server = TestServer::start().await;
    register(&server, two_axle_vehicle("north", "bus-2")).await;
    let end = now_s() - 60;
    let trips: Vec<pb::TripSummary> = (0..8000).map(|n| trip("north", "bus-2", n, end)).collect();
    let (sender, receiver) = tokio::sync::mpsc::channel::<pb::IngestTripsRequest>(4);
    let mut acks = server
        .telemetry()
        .ingest_trips(tokio_stream::wrappers::ReceiverStream::new(receiver))
        .await
        .expect("call")
        .into_inner();
    for message in messages(trips[..5000].to_vec(), 500) {
        sender.send(message).await.expect("send");
    }
    // Read acks until at least one chunk is settled, then cut the call off.
    let mut settled = 0;
    while settled < 2000 {
        settled = acks.next().await.expect("an ack").expect("ack").settled_trips;
    }
    drop(acks);
    drop(sender);
    tokio::time::sleep(Duration::from_millis(300)).await;
    // The new call resends from the settled index only.
    let rest = trips[settled as usize..].to_vec();
    let resent = rest.len() as u64;
    let mut acks = server.telemetry().ingest_trips(tokio_stream::iter(messages(rest, 500))).await.expect("resume").into_inner();
    let mut last = None;
    while let Some(ack) = acks.next().await {
        last = Some(ack.expect("ack"));
    }
    let last = last.expect("acks");
    assert_eq!(last.settled_trips, resent);
    // Trips the first call stored after its last ack come back as duplicates, never twice.
    assert_eq!(last.accepted_total + last.duplicates_total, resent);
    assert_eq!(trips_recorded(&server, "bus-2").await, 8000, "each trip stored exactly once");
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_pause_in_the_feed_gets_the_partial_chunk_acknowledged() {
    let server = TestServer::start().await;
    register(&server, two_axle_vehicle("north", "bus-3")).await;
    let end = now_s() - 60;
    let (sender, receiver) = tokio::sync::mpsc::channel::<pb::IngestTripsRequest>(4);
    let mut acks = server
        .telemetry()
        .ingest_trips(tokio_stream::wrappers::ReceiverStream::new(receiver))
        .await
        .expect("call")
        .into_inner();
    let few: Vec<pb::TripSummary> = (0..10).map(|n| trip("north", "bus-3", n, end)).collect();
    sender.send(pb::IngestTripsRequest { trips: few }).await.expect("send");
    // The stream stays open; the ack comes after the configured delay (200 ms by default).
    let ack = tokio::time::timeout(Duration::from_secs(5), acks.next()).await.expect("ack within 5 s").expect("ack").expect("ok");
    assert_eq!((ack.settled_trips, ack.accepted), (10, 10));
    assert_eq!(trips_recorded(&server, "bus-3").await, 10, "acknowledged means stored");
    drop(sender);
    while let Some(ack) = acks.next().await {
        ack.expect("closing acks");
    }
    server.stop().await;
}
