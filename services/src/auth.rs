//! Access control: bearer tokens for the brakeledger services.
//!
//! When the server is configured with tokens (`auth_tokens` in the config file, or
//! `BRAKELEDGER_TOKENS`, comma-separated), every call to a `brakeledger.v1` service must carry
//! `authorization: Bearer <token>` with one of them; otherwise it is refused with
//! UNAUTHENTICATED. gRPC health and reflection stay open, for load balancers and probes. With no
//! tokens configured the service is open (for a loopback or private-network deployment).
//! Tokens are compared in constant time.

use std::sync::Arc;

use tonic::service::Interceptor;
use tonic::{Request, Status};

use crate::error::ServiceError;

/// Who may call the brakeledger services.
#[derive(Clone, Default)]
pub struct AccessPolicy {
    tokens: Arc<Vec<Vec<u8>>>,
}

impl std::fmt::Debug for AccessPolicy {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        // Never print the tokens themselves.
        f.debug_struct("AccessPolicy").field("tokens", &self.tokens.len()).finish()
    }
}

/// Equality that takes the same time wherever the first difference is.
fn constant_time_eq(a: &[u8], b: &[u8]) -> bool {
    a.len() == b.len() && a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

impl AccessPolicy {
    /// Open to every caller.
    pub fn open() -> Self {
        Self::default()
    }

    /// Calls must present one of `tokens` (empty strings are ignored; none left means open).
    pub fn with_tokens<I: IntoIterator<Item = String>>(tokens: I) -> Self {
        let tokens: Vec<Vec<u8>> = tokens.into_iter().map(|t| t.trim().as_bytes().to_vec()).filter(|t| !t.is_empty()).collect();
        Self { tokens: Arc::new(tokens) }
    }

    /// Whether calls must present a token.
    pub fn requires_token(&self) -> bool {
        !self.tokens.is_empty()
    }

    /// Checks the `authorization` metadata of a call.
    pub fn check(&self, request: &Request<()>) -> Result<(), ServiceError> {
        if !self.requires_token() {
            return Ok(());
        }
        let presented = request
            .metadata()
            .get("authorization")
            .and_then(|v| v.to_str().ok())
            .and_then(|v| v.strip_prefix("Bearer "))
            .map(str::trim);
        match presented {
            None => Err(ServiceError::Unauthenticated("this server requires 'authorization: Bearer <token>'".into())),
            Some(token) if self.tokens.iter().any(|known| constant_time_eq(known, token.as_bytes())) => Ok(()),
            Some(_) => Err(ServiceError::Unauthenticated("the bearer token is not one this server accepts".into())),
        }
    }
}

impl Interceptor for AccessPolicy {
    fn call(&mut self, request: Request<()>) -> Result<Request<()>, Status> {
        self.check(&request).map_err(ServiceError::into_status)?;
        Ok(request)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn request(header: Option<&str>) -> Request<()> {
        let mut request = Request::new(());
        if let Some(value) = header {
            request.metadata_mut().insert("authorization", value.parse().unwrap());
        }
        request
    }

    #[test]
    fn open_policy_lets_everyone_in() {
        assert!(AccessPolicy::open().check(&request(None)).is_ok());
        assert!(AccessPolicy::with_tokens(vec![String::new()]).check(&request(None)).is_ok());
    }

    #[test]
    fn tokens_are_required_and_compared_exactly() {
        let policy = AccessPolicy::with_tokens(vec!["s3cret-a".to_owned(), "s3cret-b".to_owned()]);
        assert!(policy.check(&request(Some("Bearer s3cret-b"))).is_ok());
        for bad in [None, Some("Bearer s3cret"), Some("Bearer s3cret-c"), Some("s3cret-a"), Some("Basic s3cret-a")] {
            assert!(matches!(policy.check(&request(bad)), Err(ServiceError::Unauthenticated(_))), "{bad:?}");
        }
        assert!(!format!("{policy:?}").contains("s3cret"), "tokens never printed");
    }
}
