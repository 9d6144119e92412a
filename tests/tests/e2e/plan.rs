//! PlanVisits over loopback gRPC: parts already due booked first and joined by their vehicle's
//! other work, every other part booked as late as the safety margin allows, the wear life each
//! booking gives up, capacity and due dates kept.

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{now_s, seed_vehicle, ts, wait_for_forecasts, TestServer, DAY_S};
use chrono::NaiveDate;

use crate::forecast::{list_all_due, seeded_fleet};

/// A calendar date of the plan.
fn date(text: &str) -> NaiveDate {
    text.parse().unwrap_or_else(|e| panic!("'{text}' is not an ISO 8601 date: {e}"))
}

/// PlanVisits for fleet "north" from now, `days` long, with ample pad/rotor job hours 1.5/3.
async fn plan(server: &TestServer, days: i64, capacity: f64, bundle_within_days: u32, safety_margin_days: Option<u32>) -> pb::PlanVisitsResponse {
    server
        .forecast()
        .plan_visits(pb::PlanVisitsRequest {
            fleet_id: "north".into(),
            from: Some(ts(now_s())),
            to: Some(ts(now_s() + (days - 1) * DAY_S)),
            capacity_hours_per_day: capacity,
            friction_job_hours: 1.5,
            disc_job_hours: 3.0,
            bundle_within_days,
            band_level: 0.0,
            safety_margin_days,
        })
        .await
        .expect("plan")
        .into_inner()
}

/// The fleet of `seeded_fleet` plus "van-worn": 540 days since its parts were fitted, so its
/// front pad is estimated past its minimum (due now) and its rear pad has about two months left.
async fn fleet_with_a_worn_van() -> TestServer {
    let server = seeded_fleet().await;
    seed_vehicle(&server, "van-worn", 540, 1.0, &[300, 250, 200, 160]).await;
    wait_for_forecasts(&server).await;
    server
}

#[tokio::test]
async fn plan_books_due_now_work_first_and_the_rest_as_late_as_the_margin_allows() {
    let server = fleet_with_a_worn_van().await;
    let margin = 10u32;
    // Capacity far beyond the work: every date below is set by the rules, not by a full day.
    let response = plan(&server, 120, 40.0, 60, Some(margin)).await;
    assert_eq!(response.safety_margin_days, margin);
    assert!(response.unplanned.is_empty(), "{:?}", response.unplanned);
    let first_day = date(&response.visits[0].visit_date);
    let worn = response.visits.iter().find(|v| v.vehicle_id == "van-worn").expect("van-worn booked");
    assert_eq!(date(&worn.visit_date), first_day, "the due-now pad goes on the first day");
    let front_pad = worn.jobs.iter().find(|j| j.axle_index == 1 && j.component == pb::Component::Friction as i32).expect("front pad");
    assert!(front_pad.already_due && front_pad.wear_life_given_up_days == 0, "{front_pad:?}");
    let rear_pad = worn.jobs.iter().find(|j| j.axle_index == 2 && j.component == pb::Component::Friction as i32);
    let rear_pad = rear_pad.expect("the rear pad, due within the 60-day bundling window, joins the due-now visit");
    assert!(!rear_pad.already_due && rear_pad.wear_life_given_up_days > 0, "{rear_pad:?}");
    let mut booked = 0;
    for visit in &response.visits {
        let day = date(&visit.visit_date);
        for job in &visit.jobs {
            booked += 1;
            let median = date(&job.due_median_date);
            assert_eq!(i64::from(job.wear_life_given_up_days), (median - day).num_days().max(0), "{job:?}");
            if job.already_due {
                assert_eq!(day, first_day, "ample capacity: already-due work on the first day");
                continue;
            }
            let due = date(&job.due_earliest_date);
            assert!(day < due, "{} booked on {day}, not before its due date {due}", visit.vehicle_id);
            let latest_safe = due - chrono::Duration::days(1 + i64::from(margin));
            if visit.jobs.len() == 1 {
                // Alone in its visit and nothing full: exactly on its latest safe day (or, when
                // that is before the plan starts, on the first day, marked inside the margin).
                assert_eq!(day, latest_safe.max(first_day), "{} {job:?}", visit.vehicle_id);
                assert_eq!(job.inside_safety_margin, latest_safe < first_day);
            } else {
                assert!(day <= latest_safe || job.inside_safety_margin, "bundling moves parts earlier, never later: {job:?}");
            }
        }
    }
    // Every part due within the plan is booked.
    let due_within = list_all_due(&server, now_s() + 120 * DAY_S, 1000).await;
    let due_dates: Vec<NaiveDate> = due_within.iter().filter_map(|d| d.part.as_ref()).map(|p| date(&p.due_earliest_date)).collect();
    let last_day = first_day + chrono::Duration::days(119);
    assert!(booked >= due_dates.iter().filter(|d| **d <= last_day).count(), "{booked} booked");

    // A short bundling window: the rear pad keeps its own, later visit on its latest safe day.
    let response = plan(&server, 120, 40.0, 3, Some(margin)).await;
    let worn: Vec<&pb::Visit> = response.visits.iter().filter(|v| v.vehicle_id == "van-worn").collect();
    assert_eq!(worn.len(), 2, "{worn:?}");
    let rear = &worn[1].jobs[0];
    assert_eq!(date(&worn[1].visit_date), date(&rear.due_earliest_date) - chrono::Duration::days(1 + i64::from(margin)));
    server.stop().await;
}

#[tokio::test]
async fn plan_keeps_capacity_and_refuses_bad_settings() {
    let server = fleet_with_a_worn_van().await;
    let capacity = 4.0;
    let response = plan(&server, 360, capacity, 30, None).await;
    assert_eq!(response.safety_margin_days, 7, "the documented default");
    assert!(!response.visits.is_empty());
    let mut hours_per_day = std::collections::HashMap::<String, f64>::new();
    for visit in &response.visits {
        *hours_per_day.entry(visit.visit_date.clone()).or_default() += visit.hours;
        for job in visit.jobs.iter().filter(|j| !j.already_due) {
            assert!(visit.visit_date < job.due_earliest_date, "visit {} not before due {}", visit.visit_date, job.due_earliest_date);
        }
        let sum: f64 = visit.jobs.iter().map(|j| j.hours).sum();
        assert!((sum - visit.hours).abs() < 1e-9);
    }
    assert!(hours_per_day.values().all(|h| *h <= capacity + 1e-9), "{hours_per_day:?}");
    let invalid = server
        .forecast()
        .plan_visits(pb::PlanVisitsRequest {
            fleet_id: "north".into(),
            from: Some(ts(now_s())),
            to: Some(ts(now_s() + DAY_S)),
            capacity_hours_per_day: 8.0,
            safety_margin_days: Some(400),
            ..Default::default()
        })
        .await
        .expect_err("a margin over a year");
    assert_eq!(invalid.code(), tonic::Code::InvalidArgument);
    let details = tonic_types::StatusExt::get_details_bad_request(&invalid).expect("field violations");
    assert_eq!(details.field_violations[0].field, "safety_margin_days");
    let invalid = server
        .forecast()
        .plan_visits(pb::PlanVisitsRequest { fleet_id: "north".into(), from: Some(ts(now_s())), to: Some(ts(now_s() - DAY_S)), capacity_hours_per_day: 0.0, ..Default::default() })
        .await
        .expect_err("bad plan request");
    assert_eq!(invalid.code(), tonic::Code::InvalidArgument);
    server.stop().await;
}
