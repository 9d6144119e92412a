//! # brakeledger (service)
//!
//! The gRPC service and command-line client. Pure computation lives in `brakeledger-models`;
//! the wire contract in `brakeledger-proto`.
//!
//! # Layout
//! - [`auth`]: access control: fleet-scoped tokens with roles, checked for every surface.
//! - [`limits`]: per-token ingest rate limits.
//! - [`metrics`]: Prometheus metrics and the layer that counts every call.
//! - [`config`]: typed settings (defaults, TOML file, environment).
//! - [`store`]: the [`store::Store`] trait, its records and the sled engine.
//! - [`convert`]: wire ⇄ domain conversions with field-level validation.
//! - [`error`]: the service error enum and its one mapping to gRPC status.
//! - [`state`]: what handlers share.
//! - [`grpc`]: one handler module per gRPC service.
//! - [`forecaster`]: builds model inputs from stored data and keeps forecasts materialised.
//! - [`server`]: the one entry point, [`server::run`].
//! - [`drain`]: the shutdown drain (deadline for open ingest streams, then UNAVAILABLE).
//! - [`write_health`]: gRPC health of the write services follows whether writes are accepted.
//! - [`tls`]: TLS on the gRPC listener, reloaded on SIGHUP.
//! - [`part_names`]: pad, lining, rotor and drum: parts named for people.
//! - [`exports`]: the due list and the visit plan as CSV and iCalendar files.
//! - [`web`]: the planners' web page, on its own listener (`[web] listen`).
//! - [`cli`]: the `brakeledger` command line (server, client subcommands, demo).
//! - [`process`]: a `brakeledger` process from its start: allocator and async runtime.
//!
//! Forecasts support maintenance planning. They do not replace inspection by a qualified
//! technician, nor the roadworthiness rules that apply where the vehicle runs.

#![cfg_attr(test, allow(clippy::unwrap_used))]

pub mod auth;
pub mod cli;
pub mod config;
pub mod convert;
pub mod drain;
pub mod error;
pub mod exports;
pub mod forecaster;
pub mod grpc;
pub mod limits;
pub mod metrics;
pub mod part_names;
pub mod process;
pub mod server;
pub mod state;
pub mod store;
pub mod tls;
pub mod web;
pub mod write_health;

/// The caution printed with every forecast and plan.
pub const SAFETY_CAUTION: &str = "Caution: these forecasts support maintenance planning. They do not replace inspection by a qualified technician, nor the roadworthiness rules that apply where the vehicle runs.";
