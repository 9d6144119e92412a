//! # brakeledger-models
//!
//! Pure computation for brakeledger: no I/O, no async, no storage. The service feeds these
//! functions stored data and serves their answers.
//!
//! # Layout
//! - [`domain`]: vehicles, axles, components and their validity rules.
//! - [`plausibility`]: physical limits a trip summary must respect before it is stored.

pub mod domain;
pub mod plausibility;
