//! Reports that fit: a stream with very many refused trips gets a report a standard client
//! accepts (4 MB default message limit), listing the first refusals and counting them all.

use brakeledger_tests::{now_s, register, trip, two_axle_vehicle, TestServer};
use prost::Message;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn two_hundred_thousand_refusals_give_a_small_report_that_counts_them_all() {
    let server = TestServer::start().await;
    register(&server, two_axle_vehicle("north", "van-1")).await;
    let end = now_s() - 60;
    // 200,000 refused trips: 100,000 with a negative distance, 100,000 naming unregistered
    // vehicles (a distinct reason each, since the reason quotes the vehicle), and 10 good ones.
    let trips = (0..200_010usize).map(move |n| {
        let mut t = trip("north", "van-1", n, end);
        match n % 20_001 {
            0 => {}
            k if k % 2 == 0 => t.distance_m = -1.0,
            _ => t.vehicle_id = format!("ghost-{n}"),
        }
        t
    });
    let report = server.telemetry().stream_trips(tokio_stream::iter(trips)).await.expect("a client with default limits receives the report").into_inner();
    assert_eq!(report.accepted, 10);
    assert_eq!(report.rejected_count, 200_000);
    assert_eq!(report.rejected.len(), 1000, "the first 1,000 are listed");
    assert_eq!(report.rejected[0].index, 1);
    assert!(report.rejected.windows(2).all(|w| w[0].index < w[1].index), "listed in stream order");
    assert_eq!(report.rejection_counts.iter().map(|c| c.count).sum::<u64>(), 200_000, "every refusal counted once");
    let negative = report.rejection_counts.iter().find(|c| c.field == "distance_m").expect("distance group");
    assert_eq!((negative.reason.as_str(), negative.count), ("must not be negative", 100_000));
    let other = report.rejection_counts.iter().find(|c| c.reason == "other reasons").expect("groups past the cap");
    assert_eq!(other.field, "vehicle_id");
    assert!(report.rejection_counts.len() <= 102, "{} groups", report.rejection_counts.len());
    assert!(report.encoded_len() < 256 * 1024, "report of {} bytes", report.encoded_len());
    server.stop().await;
}
