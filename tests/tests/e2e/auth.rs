//! Bearer-token access: a server configured with tokens refuses brakeledger calls without one
//! (UNAUTHENTICATED), keeps health and reflection open, and serves the CLI given `--token`.

use brakeledger::cli::{run_with_output, Cli};
use brakeledger_proto::v1 as pb;
use brakeledger_tests::{two_axle_vehicle, TestServer};
use clap::Parser;
use tonic_health::pb::{health_client::HealthClient, HealthCheckRequest};

fn get_request() -> pb::GetVehicleRequest {
    pb::GetVehicleRequest { fleet_id: "north".into(), vehicle_id: "van-1".into() }
}

#[tokio::test]
async fn calls_need_an_accepted_token_and_health_stays_open() {
    let server = TestServer::start_with_tokens(&["integrator-7f3a", "workshop-19c2"]).await;
    let without = server.fleet().get_vehicle(get_request()).await.expect_err("no token");
    assert_eq!(without.code(), tonic::Code::Unauthenticated);
    let mut wrong = tonic::Request::new(get_request());
    wrong.metadata_mut().insert("authorization", "Bearer integrator-7f3b".parse().expect("header"));
    assert_eq!(server.fleet().get_vehicle(wrong).await.expect_err("wrong token").code(), tonic::Code::Unauthenticated);
    // Nothing was written by a refused call.
    let mut upsert = tonic::Request::new(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", "van-1")) });
    upsert.metadata_mut().insert("authorization", "Bearer nope".parse().expect("header"));
    assert!(server.fleet().upsert_vehicle(upsert).await.is_err());

    let mut upsert = tonic::Request::new(pb::UpsertVehicleRequest { vehicle: Some(two_axle_vehicle("north", "van-1")) });
    upsert.metadata_mut().insert("authorization", "Bearer workshop-19c2".parse().expect("header"));
    assert!(server.fleet().upsert_vehicle(upsert).await.expect("accepted token").into_inner().created, "first write with a token creates");

    let health = HealthClient::new(server.channel.clone())
        .check(HealthCheckRequest { service: "brakeledger.v1.FleetService".into() })
        .await
        .expect("health needs no token");
    assert_eq!(health.into_inner().status, 1, "SERVING");

    // The command line presents its --token.
    let url = format!("http://{}", server.addr);
    let run = |token: Option<&'static str>| {
        let mut argv = vec!["brakeledger".to_owned(), "--server".to_owned(), url.clone()];
        if let Some(token) = token {
            argv.extend(["--token".to_owned(), token.to_owned()]);
        }
        argv.extend(["due", "--fleet", "north"].map(str::to_owned));
        async move {
            let mut out = Vec::new();
            run_with_output(Cli::try_parse_from(argv).expect("flags"), &mut out).await.map(|_| String::from_utf8(out).expect("utf-8"))
        }
    };
    let listed = run(Some("integrator-7f3a")).await.expect("due with a token");
    // The vehicle has no forecast yet: the list says so instead of "nothing due".
    assert!(listed.contains("cannot be forecast") && listed.contains("van-1"), "{listed}");
    let refused = run(None).await.expect_err("due without a token");
    assert!(format!("{refused:#}").contains("Unauthenticated"), "{refused:#}");
    assert!(format!("{refused:#}").contains("--token TOKEN or the BRAKELEDGER_TOKEN environment variable"), "the message names both ways: {refused:#}");
    server.stop().await;
}
