//! The service's error types and their one mapping each: [`ServiceError`] to gRPC status,
//! [`WebError`] to an HTTP status of the web page.
//!
//! Every handler returns [`ServiceError`]; [`ServiceError::into_status`] is the only place that
//! chooses a gRPC code. The `match` has no catch-all arm, so a new variant must choose its code.
//! The web page reads through the gRPC handlers, so its refusals arrive as gRPC status;
//! [`WebError::http_status`] is the only place that turns them into HTTP codes, again without a
//! catch-all arm.

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
    /// The caller's token may not do this on this fleet; the message names the role needed.
    #[error("{0}")]
    PermissionDenied(String),
    /// The caller sent more than its limit allows; it may retry after `retry_after_ms`.
    #[error("{message}; retry after {retry_after_ms} ms")]
    RateLimited {
        /// What was refused and which limit.
        message: String,
        /// When the limit allows the refused amount again, ms.
        retry_after_ms: u64,
    },
    /// The server is shutting down; the client should retry against it later (or another
    /// instance). The message says what the call got done.
    #[error("{0}")]
    ShuttingDown(String),
    /// A background computation failed or was cancelled.
    #[error("internal: {0}")]
    Internal(String),
}

/// Longest status message sent, characters.
pub const MAX_MESSAGE_CHARS: usize = 2_000;
/// Longest field path or reason in a `BadRequest` violation, characters.
pub const MAX_REASON_CHARS: usize = 300;
/// Most violations listed in one `BadRequest`.
pub const MAX_VIOLATIONS: usize = 100;

/// The first `max` characters of `text`, with "…" when it was longer: what an error quotes of
/// a value a client sent, so a huge value never comes back whole.
pub fn quote_prefix(text: &str, max: usize) -> String {
    match text.char_indices().nth(max) {
        Some((end, _)) => format!("{}…", &text[..end]),
        None => text.to_owned(),
    }
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
    /// Messages and reasons are capped (see [`MAX_MESSAGE_CHARS`]), so an error about a huge
    /// value never grows past what a client accepts.
    pub fn into_status(self) -> Status {
        let message = quote_prefix(&self.to_string(), MAX_MESSAGE_CHARS);
        match self {
            ServiceError::InvalidArgument(violations) => {
                let mut details = ErrorDetails::new();
                for v in violations.iter().take(MAX_VIOLATIONS) {
                    details.add_bad_request_violation(quote_prefix(&v.field, MAX_REASON_CHARS), quote_prefix(&v.reason, MAX_REASON_CHARS));
                }
                Status::with_error_details(Code::InvalidArgument, message, details)
            }
            ServiceError::PermissionDenied(_) => {
                crate::metrics::auth_refused_reason("permission_denied");
                Status::permission_denied(message)
            }
            ServiceError::RateLimited { retry_after_ms, .. } => {
                let mut details = ErrorDetails::new();
                details.set_retry_info(Some(std::time::Duration::from_millis(retry_after_ms)));
                Status::with_error_details(Code::ResourceExhausted, message, details)
            }
            ServiceError::NotFound(_) => Status::not_found(message),
            ServiceError::FailedPrecondition(_) => Status::failed_precondition(message),
            ServiceError::AlreadyExists(_) => Status::already_exists(message),
            ServiceError::Unauthenticated(_) => Status::unauthenticated(message),
            ServiceError::ShuttingDown(_) => Status::unavailable(message),
            ServiceError::Storage(StoreError::NewerSchema { .. }) | ServiceError::Storage(StoreError::Damaged(_)) => Status::failed_precondition(message),
            // Read-only after failed start-up verification: no retry helps until an operator
            // restores the directory.
            ServiceError::Storage(StoreError::ReadOnly(_)) => Status::failed_precondition(message),
            ServiceError::Storage(StoreError::StorageFull(_)) => {
                tracing::warn!(error = %message, "write refused: disk full");
                Status::resource_exhausted(message)
            }
            ServiceError::Storage(StoreError::Engine(_))
            | ServiceError::Storage(StoreError::Corrupt(_))
            | ServiceError::Storage(StoreError::Ledger(_))
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

/// Everything that can go wrong while serving the web page.
#[derive(Debug, thiserror::Error)]
pub enum WebError {
    /// A read was refused or failed with this status: exactly what a gRPC client asking the
    /// same question would get (no token, another fleet's token, unknown fleet, ...).
    #[error("{}", .0.message())]
    Refused(Status),
    /// A parameter of the page's address is not valid (the message names it).
    #[error("{0}")]
    BadQuery(String),
    /// An export file could not be written.
    #[error(transparent)]
    Export(#[from] crate::exports::ExportError),
    /// A wear chart could not be drawn.
    #[error("drawing the wear chart: {0}")]
    Chart(String),
}

impl From<ServiceError> for WebError {
    fn from(error: ServiceError) -> Self {
        WebError::Refused(error.into_status())
    }
}

impl From<Status> for WebError {
    fn from(status: Status) -> Self {
        WebError::Refused(status)
    }
}

impl WebError {
    /// The HTTP status of the page that reports this error.
    pub fn http_status(&self) -> http::StatusCode {
        use http::StatusCode as Http;
        match self {
            WebError::Refused(status) => match status.code() {
                Code::Ok => Http::OK,
                Code::InvalidArgument | Code::OutOfRange => Http::BAD_REQUEST,
                Code::Unauthenticated => Http::UNAUTHORIZED,
                Code::PermissionDenied => Http::FORBIDDEN,
                Code::NotFound => Http::NOT_FOUND,
                Code::AlreadyExists | Code::Aborted => Http::CONFLICT,
                Code::FailedPrecondition => Http::UNPROCESSABLE_ENTITY,
                Code::ResourceExhausted => Http::TOO_MANY_REQUESTS,
                Code::Unavailable => Http::SERVICE_UNAVAILABLE,
                Code::DeadlineExceeded => Http::GATEWAY_TIMEOUT,
                Code::Unimplemented => Http::NOT_IMPLEMENTED,
                Code::Cancelled | Code::Unknown | Code::Internal | Code::DataLoss => Http::INTERNAL_SERVER_ERROR,
            },
            WebError::BadQuery(_) => Http::BAD_REQUEST,
            WebError::Export(_) | WebError::Chart(_) => {
                tracing::error!(error = %self, "web page failure");
                Http::INTERNAL_SERVER_ERROR
            }
        }
    }
}
