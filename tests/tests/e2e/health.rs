//! gRPC health and reflection.

use brakeledger_tests::TestServer;
use tokio_stream::StreamExt;
use tonic_health::pb::{health_check_response::ServingStatus, health_client::HealthClient, HealthCheckRequest};
use tonic_reflection::pb::v1::{
    server_reflection_client::ServerReflectionClient, server_reflection_request::MessageRequest,
    server_reflection_response::MessageResponse, ServerReflectionRequest,
};

#[tokio::test]
async fn health_reports_serving_for_the_server_and_each_service() {
    let server = TestServer::start().await;
    let mut health = HealthClient::new(server.channel.clone());
    for service in ["", "brakeledger.v1.FleetService", "brakeledger.v1.TelemetryService", "brakeledger.v1.MaintenanceService", "brakeledger.v1.ForecastService", "brakeledger.v1.BackupService"] {
        let response = health.check(HealthCheckRequest { service: service.into() }).await.expect("health check").into_inner();
        assert_eq!(response.status, ServingStatus::Serving as i32, "service {service:?}");
    }
    let unknown = health.check(HealthCheckRequest { service: "no.such.Service".into() }).await;
    assert_eq!(unknown.expect_err("unknown service").code(), tonic::Code::NotFound);
    server.stop().await;
}

#[tokio::test]
async fn reflection_lists_the_four_services() {
    let server = TestServer::start().await;
    let mut reflection = ServerReflectionClient::new(server.channel.clone());
    let request = ServerReflectionRequest { host: String::new(), message_request: Some(MessageRequest::ListServices(String::new())) };
    let mut responses = reflection.server_reflection_info(tokio_stream::iter(vec![request])).await.expect("reflection").into_inner();
    let response = responses.next().await.expect("one response").expect("ok");
    let Some(MessageResponse::ListServicesResponse(list)) = response.message_response else {
        panic!("unexpected reflection response {response:?}");
    };
    let names: Vec<String> = list.service.into_iter().map(|s| s.name).collect();
    for expected in ["brakeledger.v1.FleetService", "brakeledger.v1.TelemetryService", "brakeledger.v1.MaintenanceService", "brakeledger.v1.ForecastService", "brakeledger.v1.BackupService", "grpc.health.v1.Health"] {
        assert!(names.iter().any(|n| n == expected), "{expected} missing from {names:?}");
    }
    server.stop().await;
}
