//! The codec of brakeledger's gRPC servers: tonic's protobuf codec, except that request bytes
//! which do not decode are the caller's error.
//!
//! tonic's standard codec answers undecodable bytes with INTERNAL, which tells a client the
//! server failed. Here the server's decoder answers INVALID_ARGUMENT with the decoder's reason
//! and a `google.rpc.BadRequest` violation naming the field path where decoding stopped
//! (for example `end_time.seconds`), so the caller knows to fix what it sends. Responses are
//! encoded exactly as by `tonic_prost::ProstCodec`, and clients keep tonic's codec: a response a
//! client cannot decode is still INTERNAL on the client side.

use std::marker::PhantomData;

use prost::Message;
use tonic::codec::{BufferSettings, Codec, DecodeBuf, Decoder};
use tonic::{Code, Status};
use tonic_prost::{ProstDecoder, ProstEncoder};
use tonic_types::{ErrorDetails, StatusExt};

/// Server codec: encodes responses `T`, decodes requests `U`.
#[derive(Debug, Clone)]
pub struct RequestCodec<T, U> {
    _types: PhantomData<(T, U)>,
}

impl<T, U> Default for RequestCodec<T, U> {
    fn default() -> Self {
        Self { _types: PhantomData }
    }
}

impl<T, U> Codec for RequestCodec<T, U>
where
    T: Message + Send + 'static,
    U: Message + Default + Send + 'static,
{
    type Encode = T;
    type Decode = U;
    type Encoder = ProstEncoder<T>;
    type Decoder = RequestDecoder<U>;

    fn encoder(&mut self) -> Self::Encoder {
        ProstEncoder::new(BufferSettings::default())
    }

    fn decoder(&mut self) -> Self::Decoder {
        RequestDecoder { _type: PhantomData }
    }
}

/// Decodes one request message; undecodable bytes are INVALID_ARGUMENT.
#[derive(Debug, Clone)]
pub struct RequestDecoder<U> {
    _type: PhantomData<U>,
}

impl<U: Message + Default> Decoder for RequestDecoder<U> {
    type Item = U;
    type Error = Status;

    fn decode(&mut self, buf: &mut DecodeBuf<'_>) -> Result<Option<U>, Status> {
        U::decode(buf).map(Some).map_err(|error| undecodable_request(&error))
    }

    fn buffer_settings(&self) -> BufferSettings {
        ProstDecoder::<U>::default().buffer_settings()
    }
}

/// The status for request bytes that are not a valid protobuf encoding of the request message.
pub fn undecodable_request(error: &prost::DecodeError) -> Status {
    let reason = error.to_string();
    let field = field_path(&reason);
    let mut details = ErrorDetails::new();
    details.add_bad_request_violation(field.clone(), reason.clone());
    let message = if field.is_empty() {
        format!("the request is not a valid protobuf message ({reason})")
    } else {
        format!("the request is not a valid protobuf message at field {field} ({reason})")
    };
    Status::with_error_details(Code::InvalidArgument, message, details)
}

/// The field path in a prost decode error, outermost field first: prost writes its stack as
/// `Inner.field: Outer.field: description`, innermost message first. Empty when the error
/// names no field (for example a bad tag at the top level).
fn field_path(reason: &str) -> String {
    let rest = reason.strip_prefix("failed to decode Protobuf message: ").unwrap_or(reason);
    let mut fields: Vec<&str> = rest
        .split(": ")
        .map_while(|part| {
            let (message, field) = part.split_once('.')?;
            let is_name = |s: &str| !s.is_empty() && s.chars().all(|c| c.is_ascii_alphanumeric() || c == '_');
            (is_name(message) && is_name(field)).then_some(field)
        })
        .collect();
    fields.reverse();
    fields.join(".")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn field_path_reads_prost_stack_outermost_first() {
        let reason = "failed to decode Protobuf message: Timestamp.seconds: TripSummary.end_time: invalid wire type: LengthDelimited (expected Varint)";
        assert_eq!(field_path(reason), "end_time.seconds");
        assert_eq!(field_path("failed to decode Protobuf message: invalid tag value: 0"), "");
    }

    #[test]
    fn garbage_decodes_to_invalid_argument_with_the_decoders_reason() {
        let error = crate::v1::TripSummary::decode(&b"\xff\xff\xff"[..]).expect_err("garbage");
        let status = undecodable_request(&error);
        assert_eq!(status.code(), Code::InvalidArgument);
        assert!(status.message().contains(&error.to_string()), "{}", status.message());
        assert_eq!(status.get_details_bad_request().map(|b| b.field_violations.len()), Some(1));
    }
}
