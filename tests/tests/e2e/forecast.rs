//! ForecastService over loopback gRPC: forecasts, the due list and its paging, live updates and
//! wear trajectories (visit plans: `plan.rs`).

use std::time::Duration;

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, record_test_inspection, seed_vehicle, ts, wait_for_forecasts, TestServer, DAY_S};
use tokio_stream::StreamExt;

/// Five vehicles of one class with 200 days of history and five inspections each, at slightly
/// different wear speeds, so the fleet prior exists.
pub(crate) async fn seeded_fleet() -> TestServer {
    let server = TestServer::start().await;
    for (i, speed) in [0.9, 1.0, 1.1, 1.2, 0.8].into_iter().enumerate() {
        seed_vehicle(&server, &format!("van-{i}"), 200, speed, &[160, 120, 80, 40, 5]).await;
    }
    wait_for_forecasts(&server).await;
    server
}

/// Every page of ListDue for parts due before `due_before_s` (one window for all pages: a
/// token belongs to its window).
pub(crate) async fn list_all_due(server: &TestServer, due_before_s: i64, page_size: u32) -> Vec<pb::DuePart> {
    let due_before = Some(ts(due_before_s));
    let mut all = Vec::new();
    let mut token = String::new();
    loop {
        let page = server
            .forecast()
            .list_due(pb::ListDueRequest {
                fleet_id: "north".into(),
                due_before,
                band_level: 0.0,
                component: 0,
                page_size,
                page_token: token,
                include_undated: false,
            })
            .await
            .expect("list due")
            .into_inner();
        assert!(page.parts.len() <= page_size as usize);
        all.extend(page.parts);
        if page.next_page_token.is_empty() {
            return all;
        }
        token = page.next_page_token;
    }
}

/// `days` days from now, s.
fn window_end(days: i64) -> i64 {
    now_s() + days * DAY_S
}

fn seconds(t: &Option<prost_types::Timestamp>) -> i64 {
    t.as_ref().expect("timestamp").seconds
}

#[tokio::test]
async fn vehicle_forecast_has_every_part_with_ordered_bands() {
    let server = seeded_fleet().await;
    let forecast = server
        .forecast()
        .get_vehicle_forecast(pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: "van-1".into(), band_level: 0.0 })
        .await
        .expect("forecast")
        .into_inner();
    assert_eq!(forecast.parts.len(), 4);
    assert!(forecast.caution.contains("qualified technician"));
    for part in &forecast.parts {
        assert!(seconds(&part.due_earliest) <= seconds(&part.due_median) && seconds(&part.due_median) <= seconds(&part.due_latest), "{part:?}");
        assert!(seconds(&part.due_earliest) < seconds(&part.due_latest), "a band has width");
        assert!(part.current_thickness_low_mm <= part.current_thickness_mm && part.current_thickness_mm <= part.current_thickness_high_mm);
        assert_eq!(part.inspections_used, 5);
        assert!(part.wear_rate_mm_per_mj > 0.0 && part.wear_rate_stderr > 0.0);
        assert_eq!(part.band_level, 0.8);
        assert_eq!(part.due_median_date.len(), 10, "ISO 8601 calendar date");
    }
    // The front pad (fastest wearing, highest energy share) is due before the rear rotor.
    let front_pad = &forecast.parts[0];
    let rear_rotor = &forecast.parts[3];
    assert!(seconds(&front_pad.due_median) < seconds(&rear_rotor.due_median));
    // A wider band level gives a band at least as wide.
    let wide = server
        .forecast()
        .get_vehicle_forecast(pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: "van-1".into(), band_level: 0.95 })
        .await
        .expect("forecast")
        .into_inner();
    assert!(seconds(&wide.parts[0].due_earliest) <= seconds(&front_pad.due_earliest));
    assert!(seconds(&wide.parts[0].due_latest) >= seconds(&front_pad.due_latest));

    let missing = server
        .forecast()
        .get_vehicle_forecast(pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: "ghost".into(), band_level: 0.0 })
        .await;
    assert_eq!(missing.expect_err("unknown").code(), tonic::Code::NotFound);
    brakeledger_tests::register(&server, brakeledger_tests::two_axle_vehicle("north", "idle")).await;
    let idle = server
        .forecast()
        .get_vehicle_forecast(pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: "idle".into(), band_level: 0.0 })
        .await;
    assert_eq!(idle.expect_err("no data").code(), tonic::Code::FailedPrecondition);
    let bad_level = server
        .forecast()
        .get_vehicle_forecast(pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: "van-1".into(), band_level: 1.5 })
        .await;
    assert_eq!(bad_level.expect_err("bad level").code(), tonic::Code::InvalidArgument);
    server.stop().await;
}

/// A vehicle with nothing to forecast from is refused with FAILED_PRECONDITION naming each
/// part as the trade does (a drum axle's lining and drum), both while its forecast is computed
/// afresh and once it is answered from the stored one (which reads the vehicle's axles only
/// for this message).
#[tokio::test]
async fn a_vehicle_with_no_data_is_refused_with_its_parts_named_fresh_or_stored() {
    let server = TestServer::start().await;
    let mut vehicle = brakeledger_tests::two_axle_vehicle("north", "idle-drum");
    vehicle.axles[1].brake_type = pb::BrakeType::Drum as i32;
    brakeledger_tests::register(&server, vehicle).await;
    let refusal = || async {
        let request = pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: "idle-drum".into(), band_level: 0.0 };
        server.forecast().get_vehicle_forecast(request).await.expect_err("nothing to forecast from")
    };
    let fresh = refusal().await;
    wait_for_forecasts(&server).await;
    let stored = refusal().await;
    for status in [fresh, stored] {
        assert_eq!(status.code(), tonic::Code::FailedPrecondition, "{status:?}");
        for part in ["axle 1 pad:", "axle 1 rotor:", "axle 2 lining:", "axle 2 drum:"] {
            assert!(status.message().contains(part), "{part} in {:?}", status.message());
        }
    }
    server.stop().await;
}

#[tokio::test]
async fn list_due_pages_return_each_part_once_in_order() {
    let server = seeded_fleet().await;
    let five_years = window_end(5 * 365);
    let everything = list_all_due(&server, five_years, 1000).await;
    assert_eq!(everything.len(), 20, "five vehicles, four parts each, all due within five years");
    let paged = list_all_due(&server, five_years, 3).await;
    assert_eq!(paged, everything, "pages of 3 give the same parts in the same order");
    let keys: Vec<(i64, String, u32, i32)> = paged
        .iter()
        .map(|d| {
            let p = d.part.as_ref().expect("part");
            (seconds(&p.due_earliest), d.vehicle_id.clone(), p.axle_index, p.component)
        })
        .collect();
    let mut sorted = keys.clone();
    sorted.sort();
    assert_eq!(keys, sorted, "sorted by due_earliest");
    sorted.dedup();
    assert_eq!(sorted.len(), keys.len(), "no part twice");
    // A shorter window lists exactly the parts whose due_earliest falls inside it.
    let cut = window_end(200);
    let soon = list_all_due(&server, cut, 7).await;
    let expected: Vec<_> = everything.iter().filter(|d| seconds(&d.part.as_ref().expect("part").due_earliest) < cut).cloned().collect();
    assert_eq!(soon, expected);
    // Component filter.
    let rotors = server
        .forecast()
        .list_due(pb::ListDueRequest {
            fleet_id: "north".into(),
            due_before: Some(ts(now_s() + 5 * 365 * DAY_S)),
            band_level: 0.0,
            component: pb::Component::Disc as i32,
            page_size: 4,
            page_token: String::new(),
            include_undated: false,
        })
        .await
        .expect("list")
        .into_inner();
    assert_eq!(rotors.parts.len(), 4);
    assert!(rotors.parts.iter().all(|d| d.part.as_ref().expect("part").component == pb::Component::Disc as i32));
    assert!(!rotors.next_page_token.is_empty());
    server.stop().await;
}

#[tokio::test]
async fn a_new_inspection_moves_the_forecast_and_the_due_index_and_watchers_see_it_enter() {
    let server = seeded_fleet().await;
    let window_days = 60;
    let before = server
        .forecast()
        .get_vehicle_forecast(pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: "van-2".into(), band_level: 0.0 })
        .await
        .expect("forecast")
        .into_inner();
    assert!(seconds(&before.parts[0].due_earliest) > now_s() + window_days * DAY_S, "front pad not yet in the window");
    assert!(list_all_due(&server, window_end(window_days), 100).await.iter().all(|d| d.vehicle_id != "van-2"));

    let mut watch = server
        .forecast()
        .watch_due(pb::WatchDueRequest { fleet_id: "north".into(), due_before: Some(ts(now_s() + window_days * DAY_S)), band_level: 0.0 })
        .await
        .expect("watch")
        .into_inner();
    loop {
        let e = watch.next().await.expect("event").expect("ok");
        if e.change == pb::DueChange::SnapshotDone as i32 {
            break;
        }
        assert_eq!(e.change, pb::DueChange::Current as i32);
    }

    // The workshop finds the front pad of van-2 at 4.2 mm (minimum 3 mm): much more worn.
    record_test_inspection(&server, "van-2", 200, 1.1, 1, Some(4.2)).await;
    let entered = tokio::time::timeout(Duration::from_secs(30), async {
        loop {
            let e = watch.next().await.expect("event").expect("ok");
            if e.change == pb::DueChange::Entered as i32 && e.part.as_ref().is_some_and(|p| p.vehicle_id == "van-2") {
                return e;
            }
        }
    })
    .await
    .expect("an ENTERED event within 30 s");
    let part = entered.part.expect("part").part.expect("forecast");
    assert_eq!((part.axle_index, part.component), (1, pb::Component::Friction as i32));

    wait_for_forecasts(&server).await;
    let after = server
        .forecast()
        .get_vehicle_forecast(pb::GetVehicleForecastRequest { fleet_id: "north".into(), vehicle_id: "van-2".into(), band_level: 0.0 })
        .await
        .expect("forecast")
        .into_inner();
    assert!(seconds(&after.parts[0].due_median) < seconds(&before.parts[0].due_median) - 30 * DAY_S, "due much earlier");
    assert!(after.parts[0].current_thickness_mm < 6.0);
    let due = list_all_due(&server, window_end(window_days), 100).await;
    assert!(due.iter().any(|d| d.vehicle_id == "van-2" && d.part.as_ref().is_some_and(|p| p.axle_index == 1 && p.component == pb::Component::Friction as i32)));
    server.stop().await;
}

#[tokio::test]
async fn wear_trajectory_has_measured_points_and_a_falling_band() {
    let server = seeded_fleet().await;
    let trajectory = server
        .forecast()
        .get_wear_trajectory(pb::GetWearTrajectoryRequest {
            fleet_id: "north".into(),
            vehicle_id: "van-0".into(),
            axle_index: 1,
            component: pb::Component::Friction as i32,
            band_level: 0.0,
        })
        .await
        .expect("trajectory")
        .into_inner();
    assert_eq!(trajectory.measured.len(), 5);
    assert!(trajectory.fitted_at.is_some());
    let energies: Vec<f64> = trajectory.measured.iter().map(|m| m.energy_since_fitted_mj).collect();
    assert!(energies.windows(2).all(|w| w[0] < w[1]), "energy since fitting grows: {energies:?}");
    // One 30 MJ trip a day, 65 % on the front axle: 40 days after fitting, 40 × 19.5 MJ.
    assert!((energies[0] - 40.0 * 19.5).abs() < 1e-6);
    assert!(trajectory.forecast.len() > 2);
    for point in &trajectory.forecast {
        assert!(point.low_mm <= point.median_mm && point.median_mm <= point.high_mm);
    }
    let medians: Vec<f64> = trajectory.forecast.iter().map(|p| p.median_mm).collect();
    assert!(medians.windows(2).all(|w| w[1] <= w[0] + 1e-9), "median thickness never grows");
    server.stop().await;
}
