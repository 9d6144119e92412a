//! Compiles `brakeledger/v1/*.proto` with the pure-Rust `protox` compiler (no system `protoc`),
//! writes the descriptor set used by gRPC reflection, and generates tonic clients and servers.

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
    ];
    let descriptors = protox::compile(files, ["."])?;
    let out_dir = PathBuf::from(env::var("OUT_DIR")?);
    fs::write(
        out_dir.join("brakeledger_descriptor.bin"),
        descriptors.encode_to_vec(),
    )?;
    tonic_prost_build::configure()
        .build_client(true)
        .build_server(true)
        .compile_fds(descriptors)?;
    Ok(())
}
