//! FleetService: vehicles and fleets.

use brakeledger_proto::v1 as pb;
use brakeledger_tests::{register, two_axle_vehicle, TestServer};
use tonic_types::StatusExt;

#[tokio::test]
async fn upsert_then_get_a_vehicle() {
    let server = TestServer::start().await;
    let mut fleet = server.fleet();
    let mut vehicle = two_axle_vehicle("north", "van-7");
    vehicle.vin = Some("ZZZEXAMPLE0000001".into());
    let created = fleet.upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(vehicle.clone()) }).await.expect("upsert").into_inner();
    assert!(created.created);
    let again = fleet.upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(vehicle.clone()) }).await.expect("upsert").into_inner();
    assert!(!again.created, "second upsert replaces");
    let got = fleet
        .get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "van-7".into() })
        .await
        .expect("get")
        .into_inner();
    assert_eq!(got.vehicle, Some(vehicle));
    assert_eq!(got.trips_recorded, 0);
    assert!(got.last_trip_end.is_none());
    let missing = fleet.get_vehicle(pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "van-8".into() }).await;
    assert_eq!(missing.expect_err("unknown").code(), tonic::Code::NotFound);
    server.stop().await;
}

#[tokio::test]
async fn invalid_vehicle_gets_field_violations() {
    let server = TestServer::start().await;
    let mut vehicle = two_axle_vehicle("north", "van-7");
    vehicle.axles[1].energy_share = 0.5;
    vehicle.axles[0].friction_min_mm = 30.0;
    vehicle.vin = Some("short".into());
    let status = server.fleet().upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(vehicle) }).await.expect_err("invalid");
    assert_eq!(status.code(), tonic::Code::InvalidArgument);
    let details = status.get_error_details();
    let fields: Vec<String> = details.bad_request().expect("bad request details").field_violations.iter().map(|v| v.field.clone()).collect();
    assert_eq!(fields, vec!["vehicle.vin", "vehicle.axles[0].friction_min_mm", "vehicle.axles"]);
    server.stop().await;
}

#[tokio::test]
async fn list_vehicles_pages_through_every_vehicle_once() {
    let server = TestServer::start().await;
    for i in 0..25 {
        register(&server, two_axle_vehicle("north", &format!("v{i:02}"))).await;
    }
    register(&server, two_axle_vehicle("south", "other")).await;
    let mut seen = Vec::new();
    let mut token = String::new();
    loop {
        let page = server
            .fleet()
            .list_vehicles(pb::ListVehiclesRequest { fleet_id: "north".into(), page_size: 10, page_token: token.clone() })
            .await
            .expect("list")
            .into_inner();
        assert!(page.vehicles.len() <= 10);
        seen.extend(page.vehicles.into_iter().map(|v| v.vehicle_id));
        if page.next_page_token.is_empty() {
            break;
        }
        token = page.next_page_token;
    }
    let expected: Vec<String> = (0..25).map(|i| format!("v{i:02}")).collect();
    assert_eq!(seen, expected);
    let bad = server.fleet().list_vehicles(pb::ListVehiclesRequest { fleet_id: "north".into(), page_size: 10, page_token: "xyz".into() }).await;
    assert_eq!(bad.expect_err("bad token").code(), tonic::Code::InvalidArgument);
    server.stop().await;
}

#[tokio::test]
async fn fleet_time_zone_is_validated_and_stored() {
    let server = TestServer::start().await;
    let mut fleet = server.fleet();
    // A fleet never set up and holding no vehicle does not exist.
    let unknown = fleet.get_fleet(pb::GetFleetRequest { fleet_id: "north".into() }).await.expect_err("unknown fleet");
    assert_eq!(unknown.code(), tonic::Code::NotFound, "{unknown:?}");
    let bad = fleet
        .upsert_fleet(pb::UpsertFleetRequest { fleet: Some(pb::Fleet { fleet_id: "north".into(), time_zone: "Mars/Olympus".into(), display_name: String::new() }) })
        .await
        .expect_err("bad zone");
    assert_eq!(bad.code(), tonic::Code::InvalidArgument);
    fleet
        .upsert_fleet(pb::UpsertFleetRequest { fleet: Some(pb::Fleet { fleet_id: "north".into(), time_zone: "Pacific/Auckland".into(), display_name: "North depot".into() }) })
        .await
        .expect("good zone");
    let stored = fleet.get_fleet(pb::GetFleetRequest { fleet_id: "north".into() }).await.expect("get").into_inner();
    assert_eq!(stored.fleet.expect("fleet").time_zone, "Pacific/Auckland");
    server.stop().await;
}

#[tokio::test]
async fn fleets_are_created_changed_shown_and_listed_from_the_command_line() {
    use crate::cli::brakeledger;
    let server = TestServer::start().await;
    // "south" is never set up but holds a vehicle; "north" is created by the command line.
    register(&server, two_axle_vehicle("south", "bus-1")).await;
    let said = brakeledger(&server, &["set-fleet", "--fleet", "north", "--time-zone", "Europe/Lisbon", "--name", "North depot"]).await.expect("create");
    assert_eq!(said.trim(), "created fleet north (North depot): time zone Europe/Lisbon, 0 vehicle(s)");
    register(&server, two_axle_vehicle("north", "van-1")).await;
    // A flag left out keeps its value.
    let said = brakeledger(&server, &["set-fleet", "--fleet", "north", "--name", "North coaches"]).await.expect("change");
    assert_eq!(said.trim(), "updated fleet north (North coaches): time zone Europe/Lisbon, 1 vehicle(s)");
    let stored = server.fleet().get_fleet(pb::GetFleetRequest { fleet_id: "north".into() }).await.expect("get").into_inner();
    assert_eq!(stored.fleet.map(|f| (f.time_zone, f.display_name)), Some(("Europe/Lisbon".into(), "North coaches".into())));
    let bad = brakeledger(&server, &["set-fleet", "--fleet", "north", "--time-zone", "Mars/Olympus"]).await.expect_err("unknown zone");
    assert!(format!("{bad:#}").contains("time_zone"), "{bad:#}");

    let shown = brakeledger(&server, &["show-fleet", "--fleet", "north", "--json"]).await.expect("show");
    assert!(shown.contains("\"time_zone\": \"Europe/Lisbon\"") && shown.contains("\"vehicle_count\": 1"), "{shown}");
    let typo = brakeledger(&server, &["show-fleet", "--fleet", "nrth"]).await.expect_err("never set up, no vehicle");
    assert!(format!("{typo:#}").contains("NotFound"), "{typo:#}");

    let listed = server.fleet().list_fleets(pb::ListFleetsRequest {}).await.expect("list fleets").into_inner().fleets;
    let ids: Vec<(&str, bool, u64)> = listed.iter().map(|f| (f.fleet.as_ref().map_or("", |x| x.fleet_id.as_str()), f.set_up, f.vehicle_count)).collect();
    assert_eq!(ids, vec![("north", true, 1), ("south", false, 1)]);
    let table = brakeledger(&server, &["fleets"]).await.expect("fleets");
    let south = table.lines().find(|l| l.starts_with("south")).unwrap_or_else(|| panic!("{table}"));
    assert!(south.contains("UTC") && south.contains("never set up"), "{south}");
    let json = brakeledger(&server, &["fleets", "--json"]).await.expect("fleets json");
    assert_eq!(json.matches("\"fleet_id\"").count(), 2, "{json}");

    let vehicles = brakeledger(&server, &["vehicles", "--fleet", "north"]).await.expect("vehicles");
    assert!(vehicles.starts_with("1 vehicle(s) in fleet north") && vehicles.contains("van-1") && vehicles.contains("disc, disc"), "{vehicles}");
    let json = brakeledger(&server, &["vehicles", "--fleet", "south", "--json"]).await.expect("vehicles json");
    assert!(json.contains("\"vehicle_id\": \"bus-1\""), "{json}");
    server.stop().await;
}

#[tokio::test]
async fn huge_or_odd_values_get_a_short_clear_refusal() {
    let server = TestServer::start().await;
    let mut fleet = server.fleet();
    // A 10 KB time zone: the refusal quotes a short prefix, so a standard client reads it.
    let zone = "Z".repeat(10_000);
    let bad = fleet
        .upsert_fleet(pb::UpsertFleetRequest { fleet: Some(pb::Fleet { fleet_id: "north".into(), time_zone: zone, display_name: String::new() }) })
        .await
        .expect_err("bad zone");
    assert_eq!(bad.code(), tonic::Code::InvalidArgument);
    assert!(bad.message().len() < 500 && bad.details().len() < 1_000, "{} bytes of message, {} of details", bad.message().len(), bad.details().len());
    // Classes and names have rules.
    let mut vehicle = brakeledger_tests::two_axle_vehicle("north", "van-1");
    vehicle.vehicle_class = "city bus\u{0007}".into();
    let refused = fleet.upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(vehicle) }).await.expect_err("bad class");
    assert_eq!(refused.code(), tonic::Code::InvalidArgument);
    assert!(refused.message().contains("vehicle_class"), "{}", refused.message());
    let named = fleet
        .upsert_fleet(pb::UpsertFleetRequest { fleet: Some(pb::Fleet { fleet_id: "north".into(), time_zone: "UTC".into(), display_name: "N".repeat(201) }) })
        .await
        .expect_err("long name");
    assert!(named.message().contains("display_name"), "{}", named.message());
    server.stop().await;
}
