//! Compiles `brakeledger/v1/*.proto` with the pure-Rust `protox` compiler (no system `protoc`),
//! writes the descriptor set used by gRPC reflection, and generates tonic clients and servers.
//!
//! Two passes: messages and clients with tonic's standard protobuf codec (`client/`), then the
//! servers alone (`server/`, messages taken from the first pass) with [`RequestCodec`], which
//! answers undecodable request bytes with INVALID_ARGUMENT instead of INTERNAL.
//!
//! [`RequestCodec`]: ../brakeledger_proto/codec/struct.RequestCodec.html

use std::{env, fs, path::PathBuf};

use prost::Message;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    println!("cargo:rerun-if-changed=brakeledger");
    let files = [
        "brakeledger/v1/common.proto",
        "brakeledger/v1/fleet.proto",
        "brakeledger/v1/telemetry.proto",
        "brakeledger/v1/maintenance.proto",
        "brakeledger/v1/forecast.proto",
        "brakeledger/v1/access.proto",
        "brakeledger/v1/backup.proto",
    ];
    let descriptors = protox::compile(files, ["."])?;
    let out_dir = PathBuf::from(env::var("OUT_DIR")?);
    fs::write(
        out_dir.join("brakeledger_descriptor.bin"),
        descriptors.encode_to_vec(),
    )?;
    let (client_dir, server_dir) = (out_dir.join("client"), out_dir.join("server"));
    fs::create_dir_all(&client_dir)?;
    fs::create_dir_all(&server_dir)?;
    tonic_prost_build::configure()
        .build_client(true)
        .build_server(false)
        .out_dir(&client_dir)
        .compile_fds(descriptors.clone())?;
    tonic_prost_build::configure()
        .build_client(false)
        .build_server(true)
        .extern_path(".brakeledger.v1", "crate::v1")
        .codec_path("crate::codec::RequestCodec")
        .out_dir(&server_dir)
        .compile_fds(descriptors)?;
    Ok(())
}
