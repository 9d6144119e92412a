//! Undecodable request bytes are the caller's error: every brakeledger RPC answers raw garbage
//! with INVALID_ARGUMENT carrying the protobuf decoder's reason, over a real HTTP/2 gRPC call.

use brakeledger_proto::v1 as pb;
use brakeledger_tests::raw::{call, methods};
use brakeledger_tests::TestServer;
use bytes::Bytes;
use prost::Message;
use tonic_types::StatusExt;

/// Eleven 0xff bytes: a field key that is not a valid varint, whatever the message type.
fn garbage() -> Bytes {
    Bytes::from_static(&[0xff; 11])
}

#[tokio::test]
async fn raw_garbage_to_every_rpc_is_invalid_argument_with_the_decoders_reason() {
    let server = TestServer::start().await;
    let rpcs = methods("brakeledger.v1");
    assert!(rpcs.len() >= 14, "the contract's RPCs are listed: {rpcs:?}");
    assert!(rpcs.iter().any(|m| m.client_streaming) && rpcs.iter().any(|m| m.server_streaming), "streaming RPCs are among them");
    for method in &rpcs {
        let status = call(server.channel.clone(), method, garbage()).await.expect_err(&method.path);
        assert_eq!(status.code(), tonic::Code::InvalidArgument, "{}: {status:?}", method.path);
        assert!(status.message().contains("failed to decode Protobuf message") && status.message().contains("invalid varint"), "{}: {}", method.path, status.message());
        let bad_request = status.get_details_bad_request().unwrap_or_else(|| panic!("{}: no BadRequest detail", method.path));
        assert_eq!(bad_request.field_violations.len(), 1, "{}", method.path);
    }
    // The same raw path with well-formed bytes succeeds, so the refusals above are about the bytes.
    let get_fleet = rpcs.iter().find(|m| m.path == "/brakeledger.v1.FleetService/GetFleet").expect("GetFleet");
    server
        .fleet()
        .upsert_fleet(pb::UpsertFleetRequest { fleet: Some(pb::Fleet { fleet_id: "north".into(), time_zone: "UTC".into(), display_name: String::new() }) })
        .await
        .expect("fleet");
    let valid = pb::GetFleetRequest { fleet_id: "north".into() }.encode_to_vec();
    call(server.channel.clone(), get_fleet, Bytes::from(valid)).await.expect("valid bytes are served");
    server.stop().await;
}

#[tokio::test]
async fn a_wrong_wire_type_names_the_field_where_decoding_stopped() {
    let server = TestServer::start().await;
    let push = methods("brakeledger.v1").into_iter().find(|m| m.path == "/brakeledger.v1.TelemetryService/PushTrips").expect("PushTrips");
    // PushTripsRequest.trips[0] is a TripSummary whose end_time (field 5) is sent as a varint
    // instead of a nested Timestamp message.
    let trip = [0x28, 0x01];
    let mut body = vec![0x0a, trip.len() as u8];
    body.extend_from_slice(&trip);
    let status = call(server.channel.clone(), &push, Bytes::from(body)).await.expect_err("wrong wire type");
    assert_eq!(status.code(), tonic::Code::InvalidArgument);
    let violation = &status.get_details_bad_request().expect("BadRequest").field_violations[0];
    assert_eq!(violation.field, "trips.end_time");
    assert!(violation.description.contains("invalid wire type"), "{}", violation.description);
    server.stop().await;
}
