//! The crate's one error type.
//!
//! Every fallible function in `brakeledger-models` returns [`ModelError`]; each variant says in
//! plain words why no answer could be given, so the service can pass the reason on.

use thiserror::Error;

/// Why a model could not produce an answer.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum ModelError {
    /// Fewer usable observations than the model needs.
    #[error("too few points: {points} usable, at least {needed} needed ({detail})")]
    TooFewPoints {
        /// Observations available.
        points: usize,
        /// Observations required.
        needed: usize,
        /// What was being fitted.
        detail: String,
    },
    /// The design matrix and the observations disagree in length.
    #[error("length mismatch: {rows} design rows but {observations} observations")]
    LengthMismatch {
        /// Rows of the design matrix.
        rows: usize,
        /// Observations.
        observations: usize,
    },
    /// The regressors are collinear (XᵀX is not positive definite).
    #[error("the regressors are collinear or carry no information: {0}")]
    Singular(String),
    /// A non-finite number reached a model.
    #[error("non-finite input: {0}")]
    NonFinite(String),
    /// The fitted wear rate is zero or negative, which no wearing part can have.
    #[error("the fitted wear rate {rate_mm_per_mj:.3e} mm/MJ is not positive; the vehicle's own fit is rejected")]
    NonPositiveWearRate {
        /// The rejected estimate, mm/MJ.
        rate_mm_per_mj: f64,
    },
    /// The linear-regression backend failed.
    #[error("linear regression failed: {0}")]
    Regression(String),
    /// An argument outside its documented range.
    #[error("invalid argument: {0}")]
    InvalidArgument(String),
}
