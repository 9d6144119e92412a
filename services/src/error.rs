//! The service's error type and its one mapping to gRPC status.
//!
//! Every handler returns [`ServiceError`]; [`ServiceError::into_status`] is the only place that
//! chooses a gRPC code. The `match` has no catch-all arm, so a new variant must choose its code.

use brakeledger_models::domain::FieldViolation;
use tonic::{Code, Status};
use tonic_types::{ErrorDetails, StatusExt};

use crate::store::StoreError;

/// Everything that can go wrong while serving a request.
#[derive(Debug, thiserror::Error)]
pub enum ServiceError {
    /// The request as a whole is malformed; each violation names a field.
    #[error("invalid request: {}", summarise(.0))]
    InvalidArgument(Vec<FieldViolation>),
    /// A fleet, vehicle or part the request names does not exist.
    #[error("{0}")]
    NotFound(String),
    /// The request is well-formed but cannot be answered from the data held (for example no
    /// forecast can be made yet).
    #[error("{0}")]
    FailedPrecondition(String),
    /// The record's id is already stored with other values (the message names them).
    #[error("{0}")]
    AlreadyExists(String),
    /// The storage engine failed.
    #[error("storage: {0}")]
    Storage(#[from] StoreError),
    /// The call carries no accepted bearer token.
    #[error("{0}")]
    Unauthenticated(String),
    /// The server is shutting down; the client should retry against it later (or another
    /// instance). The message says what the call got done.
    #[error("{0}")]
    ShuttingDown(String),
    /// A background computation failed or was cancelled.
    #[error("internal: {0}")]
    Internal(String),
}

fn summarise(violations: &[FieldViolation]) -> String {
    violations.iter().map(|v| format!("{}: {}", v.field, v.reason)).collect::<Vec<_>>().join("; ")
}

impl ServiceError {
    /// One invalid field.
    pub fn invalid(field: impl Into<String>, reason: impl Into<String>) -> Self {
        Self::InvalidArgument(vec![FieldViolation::new(field, reason)])
    }

    /// Invalid fields, each prefixed with `prefix.` (for nested messages such as `vehicle.`).
    pub fn invalid_in(prefix: &str, violations: Vec<FieldViolation>) -> Self {
        Self::InvalidArgument(
            violations
                .into_iter()
                .map(|v| FieldViolation::new(format!("{prefix}.{}", v.field), v.reason))
                .collect(),
        )
    }

    /// The gRPC status for this error; INVALID_ARGUMENT carries `google.rpc.BadRequest`.
    pub fn into_status(self) -> Status {
        let message = self.to_string();
        match self {
            ServiceError::InvalidArgument(violations) => {
                let mut details = ErrorDetails::new();
                for v in &violations {
                    details.add_bad_request_violation(v.field.clone(), v.reason.clone());
                }
                Status::with_error_details(Code::InvalidArgument, message, details)
            }
            ServiceError::NotFound(_) => Status::not_found(message),
            ServiceError::FailedPrecondition(_) => Status::failed_precondition(message),
            ServiceError::AlreadyExists(_) => Status::already_exists(message),
            ServiceError::Unauthenticated(_) => Status::unauthenticated(message),
            ServiceError::ShuttingDown(_) => Status::unavailable(message),
            ServiceError::Storage(StoreError::NewerSchema { .. }) => Status::failed_precondition(message),
            ServiceError::Storage(StoreError::StorageFull(_)) => {
                tracing::warn!(error = %message, "write refused: disk full");
                Status::resource_exhausted(message)
            }
            ServiceError::Storage(StoreError::Engine(_))
            | ServiceError::Storage(StoreError::Corrupt(_))
            | ServiceError::Storage(StoreError::Conflict) => {
                tracing::error!(error = %message, "storage failure");
                Status::internal(message)
            }
            ServiceError::Internal(_) => {
                tracing::error!(error = %message, "internal failure");
                Status::internal(message)
            }
        }
    }
}

impl From<ServiceError> for Status {
    fn from(error: ServiceError) -> Self {
        error.into_status()
    }
}

/// Result type of handlers and service logic.
pub type ServiceResult<T> = Result<T, ServiceError>;
