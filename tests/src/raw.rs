//! Raw gRPC calls: send bytes that are not (or not necessarily) valid protobuf to any method
//! over a real HTTP/2 gRPC call, and read the status. The methods are listed from the
//! server's own descriptor set, so an RPC added later is covered without editing the tests.

use bytes::{Buf, BufMut, Bytes};
use prost::Message;
use tonic::codec::{Codec, DecodeBuf, Decoder, EncodeBuf, Encoder};
use tonic::transport::Channel;
use tonic::{Status, Streaming};

/// A codec that sends and receives message bodies as raw bytes.
#[derive(Debug, Clone, Default)]
pub struct RawCodec;

/// Encoder half of [`RawCodec`].
#[derive(Debug, Clone, Default)]
pub struct RawEncoder;

/// Decoder half of [`RawCodec`].
#[derive(Debug, Clone, Default)]
pub struct RawDecoder;

impl Encoder for RawEncoder {
    type Item = Bytes;
    type Error = Status;
    fn encode(&mut self, item: Bytes, buf: &mut EncodeBuf<'_>) -> Result<(), Status> {
        buf.put(item);
        Ok(())
    }
}

impl Decoder for RawDecoder {
    type Item = Bytes;
    type Error = Status;
    fn decode(&mut self, buf: &mut DecodeBuf<'_>) -> Result<Option<Bytes>, Status> {
        Ok(Some(buf.copy_to_bytes(buf.remaining())))
    }
}

impl Codec for RawCodec {
    type Encode = Bytes;
    type Decode = Bytes;
    type Encoder = RawEncoder;
    type Decoder = RawDecoder;
    fn encoder(&mut self) -> RawEncoder {
        RawEncoder
    }
    fn decoder(&mut self) -> RawDecoder {
        RawDecoder
    }
}

/// One RPC of the contract.
#[derive(Debug, Clone)]
pub struct Method {
    /// `/brakeledger.v1.Service/Method`.
    pub path: String,
    /// The client sends a stream.
    pub client_streaming: bool,
    /// The server answers with a stream.
    pub server_streaming: bool,
}

/// Every RPC of every service in package `package` of the brakeledger descriptor set.
pub fn methods(package: &str) -> Vec<Method> {
    let set = prost_types::FileDescriptorSet::decode(brakeledger_proto::FILE_DESCRIPTOR_SET).expect("descriptor set");
    let mut out = Vec::new();
    for file in set.file.iter().filter(|f| f.package() == package) {
        for service in &file.service {
            for method in &service.method {
                out.push(Method {
                    path: format!("/{package}.{}/{}", service.name(), method.name()),
                    client_streaming: method.client_streaming(),
                    server_streaming: method.server_streaming(),
                });
            }
        }
    }
    out
}

/// Calls `method` with `body` as its (first and only) request message and returns the status
/// the call ended with: `Ok(())` if it succeeded.
pub async fn call(channel: Channel, method: &Method, body: Bytes) -> Result<(), Status> {
    let mut grpc = tonic::client::Grpc::new(channel);
    grpc.ready().await.map_err(|e| Status::unavailable(e.to_string()))?;
    let path: http::uri::PathAndQuery = method.path.parse().map_err(|_| Status::internal("bad path"))?;
    let once = tokio_stream::iter(vec![body]);
    match (method.client_streaming, method.server_streaming) {
        (false, false) => grpc.unary(tonic::Request::new(once_body(once).await), path, RawCodec).await.map(drop),
        (true, false) => grpc.client_streaming(tonic::Request::new(once), path, RawCodec).await.map(drop),
        (false, true) => drain(grpc.server_streaming(tonic::Request::new(once_body(once).await), path, RawCodec).await?.into_inner()).await,
        (true, true) => drain(grpc.streaming(tonic::Request::new(once), path, RawCodec).await?.into_inner()).await,
    }
}

async fn once_body(mut stream: impl tokio_stream::Stream<Item = Bytes> + Unpin) -> Bytes {
    use tokio_stream::StreamExt;
    stream.next().await.unwrap_or_default()
}

async fn drain(mut stream: Streaming<Bytes>) -> Result<(), Status> {
    while stream.message().await?.is_some() {}
    Ok(())
}
