//! The `brakeledger.v1` wire contract: generated message types, tonic clients and servers, and the
//! encoded descriptor set that the server registers for gRPC reflection.
//!
//! The `.proto` files under `proto/brakeledger/v1/` are the source of truth; names of services,
//! RPCs, messages and fields are a contract with clients outside this project.

#![allow(missing_docs)] // generated code carries the .proto comments as its docs

/// Generated code for package `brakeledger.v1`.
pub mod v1 {
    include!(concat!(env!("OUT_DIR"), "/client/brakeledger.v1.rs"));
    include!(concat!(env!("OUT_DIR"), "/server/brakeledger.v1.rs"));
}

pub mod codec;

/// Encoded `FileDescriptorSet` of every brakeledger proto file, for gRPC server reflection.
pub const FILE_DESCRIPTOR_SET: &[u8] = tonic::include_file_descriptor_set!("brakeledger_descriptor");

pub use prost_types::Timestamp;
