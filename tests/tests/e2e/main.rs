//! End-to-end tests: each starts the real server on a loopback port with a temporary data
//! directory and talks gRPC to it. One binary, one module per topic.

mod acknowledged_ingest;
mod auth;
mod backup;
mod bad_bytes;
mod corruption;
mod cli;
mod durability;
mod exports;
mod forecast;
mod full_disk;
mod fleet;
mod health;
mod limits;
mod ingest;
mod long_stream;
mod maintenance;
mod memory_soak;
mod plan;
mod replicas;
mod report_size;
mod safe_defaults;
mod shutdown;
mod tls;
mod web;
