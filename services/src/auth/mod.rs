//! Access control, in one place for every surface: tokens that belong to a fleet (or are
//! operator tokens) and carry a role.
//!
//! - [`roles`]: the roles and what each may do.
//! - [`tokens`]: secrets, their hashes and identifiers.
//! - [`policy`]: the interceptor that authenticates every call, and the per-fleet checks.
//! - [`bootstrap`]: the first operator token, from the file named in the settings.

pub mod bootstrap;
pub mod policy;
pub mod roles;
pub mod tokens;

pub use policy::{AccessPolicy, Caller, OPEN_ACCESS_ID};
pub use roles::{Permission, Role};
