//! Who is calling, and whether they may: the interceptor every `brakeledger.v1` service sits
//! behind, and the checks handlers make once they know which fleet a call touches.
//!
//! - [`AccessPolicy`] (the interceptor) turns `authorization: Bearer <secret>` into a
//!   [`Caller`] in the request's extensions, looking the secret's hash up in the store on every
//!   call, so a revocation takes effect at once (on every replica sharing the store). No token,
//!   an unknown or a revoked one: UNAUTHENTICATED. gRPC health and reflection are not behind it.
//! - Handlers call [`Caller::require`] with the fleet the request names before they read or
//!   write anything, so a refusal (PERMISSION_DENIED, naming the role needed) never reveals
//!   whether another fleet's vehicle exists.
//! - On a server run without tokens (loopback only, or `insecure_no_auth`), every caller is
//!   the operator `open-access`.

use std::sync::Arc;

use tonic::service::Interceptor;
use tonic::{Request, Status};

use super::roles::{Permission, Role};
use super::tokens::hash_secret;
use crate::error::ServiceError;
use crate::store::Store;

/// token_id of every caller of a server run without tokens.
pub const OPEN_ACCESS_ID: &str = "open-access";

/// The authenticated caller of one request.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Caller {
    /// The token's identifier ([`OPEN_ACCESS_ID`] without tokens).
    pub token_id: String,
    /// The fleet the token acts on; `None` for operators.
    pub fleet_id: Option<String>,
    /// What it may do.
    pub role: Role,
}

impl Caller {
    /// Every caller of a server run without tokens.
    pub fn open_access() -> Self {
        Self { token_id: OPEN_ACCESS_ID.to_owned(), fleet_id: None, role: Role::Operator }
    }

    /// The caller the interceptor attached to `request`.
    pub fn of<T>(request: &Request<T>) -> Result<Caller, ServiceError> {
        request
            .extensions()
            .get::<Caller>()
            .cloned()
            .ok_or_else(|| ServiceError::Internal("the access interceptor did not run for this service".into()))
    }

    /// Whether the caller may act on `fleet_id` with `permission`.
    pub fn may(&self, fleet_id: &str, permission: Permission) -> bool {
        let fleet_ok = match &self.fleet_id {
            None => true,
            Some(own) => own == fleet_id && permission != Permission::Operate,
        };
        fleet_ok && self.role.grants(permission)
    }

    /// Fails with PERMISSION_DENIED unless the caller may act on `fleet_id` with `permission`.
    /// The message names the roles that would do and the caller's own, never anything stored.
    pub fn require(&self, fleet_id: &str, permission: Permission) -> Result<(), ServiceError> {
        tracing::Span::current().record("fleet_id", fleet_id);
        if self.may(fleet_id, permission) {
            return Ok(());
        }
        let needed: Vec<&str> = Role::granting(permission).into_iter().map(Role::name).collect();
        let scope = if permission == Permission::Operate { "an operator token".to_owned() } else { format!("a token of fleet '{}' with the role {}", short(fleet_id), needed.join(" or ")) };
        let own = match &self.fleet_id {
            Some(fleet) => format!("token {} is {} on fleet '{}'", self.token_id, self.role, short(fleet)),
            None => format!("token {} is {}", self.token_id, self.role),
        };
        Err(ServiceError::PermissionDenied(format!("this call needs {scope}; {own}")))
    }

    /// Fails with PERMISSION_DENIED unless the caller is an operator.
    pub fn require_operator(&self) -> Result<(), ServiceError> {
        self.require("", Permission::Operate)
    }
}

/// A fleet id as quoted in a refusal: at most 64 characters of it.
fn short(text: &str) -> String {
    crate::error::quote_prefix(text, crate::convert::MAX_QUOTED_CHARS)
}

/// How calls are authenticated.
#[derive(Clone)]
enum Mode {
    /// Every caller is [`Caller::open_access`].
    Open,
    /// Callers present a token whose hash the store holds.
    Tokens(Arc<dyn Store>),
}

/// The interceptor in front of every `brakeledger.v1` service.
#[derive(Clone)]
pub struct AccessPolicy {
    mode: Mode,
}

impl std::fmt::Debug for AccessPolicy {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("AccessPolicy").field("requires_token", &self.requires_token()).finish()
    }
}

impl Default for AccessPolicy {
    fn default() -> Self {
        Self::open()
    }
}

impl AccessPolicy {
    /// No token needed: every caller is the operator `open-access` (loopback or explicitly
    /// insecure deployments, tests).
    pub fn open() -> Self {
        Self { mode: Mode::Open }
    }

    /// Callers must present a token stored in `store`.
    pub fn with_store(store: Arc<dyn Store>) -> Self {
        Self { mode: Mode::Tokens(store) }
    }

    /// Whether calls must present a token.
    pub fn requires_token(&self) -> bool {
        matches!(self.mode, Mode::Tokens(_))
    }

    /// The caller presenting the `authorization` metadata of `request`.
    pub fn authenticate<T>(&self, request: &Request<T>) -> Result<Caller, ServiceError> {
        let store = match &self.mode {
            Mode::Open => return Ok(Caller::open_access()),
            Mode::Tokens(store) => store,
        };
        let presented = request
            .metadata()
            .get("authorization")
            .and_then(|v| v.to_str().ok())
            .and_then(|v| v.strip_prefix("Bearer "))
            .map(str::trim)
            .filter(|token| !token.is_empty());
        let Some(secret) = presented else {
            crate::metrics::auth_refused_reason("no_token");
            return Err(ServiceError::Unauthenticated(
                "this server requires 'authorization: Bearer <token>' (the CLI sends --token or BRAKELEDGER_TOKEN)".into(),
            ));
        };
        // The lookup is by SHA-256 of the secret, so its timing says nothing about the secret.
        match store.token_by_hash(&hash_secret(secret))? {
            Some(token) if token.revoked_at_ms.is_none() => Ok(Caller { token_id: token.token_id, fleet_id: token.fleet_id, role: token.role }),
            Some(_) => {
                crate::metrics::auth_refused_reason("revoked_token");
                Err(ServiceError::Unauthenticated("the bearer token was revoked".into()))
            }
            None => {
                crate::metrics::auth_refused_reason("unknown_token");
                Err(ServiceError::Unauthenticated("the bearer token is not one this server knows".into()))
            }
        }
    }
}

impl Interceptor for AccessPolicy {
    fn call(&mut self, mut request: Request<()>) -> Result<Request<()>, Status> {
        let caller = self.authenticate(&request).map_err(ServiceError::into_status)?;
        tracing::Span::current().record("token_id", caller.token_id.as_str());
        request.extensions_mut().insert(caller);
        Ok(request)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::sled_store::SledStore;
    use crate::store::TokenRecord;

    fn request(header: Option<&str>) -> Request<()> {
        let mut request = Request::new(());
        if let Some(value) = header {
            request.metadata_mut().insert("authorization", value.parse().unwrap());
        }
        request
    }

    fn token(secret: &str, fleet: Option<&str>, role: Role, revoked: bool) -> TokenRecord {
        TokenRecord {
            token_id: format!("tok_{role}"),
            secret_sha256: hash_secret(secret),
            fleet_id: fleet.map(str::to_owned),
            role,
            label: String::new(),
            created_at_ms: 0,
            created_by: "test".into(),
            revoked_at_ms: revoked.then_some(1),
        }
    }

    #[test]
    fn open_policy_makes_every_caller_the_operator() {
        assert_eq!(AccessPolicy::open().authenticate(&request(None)).unwrap(), Caller::open_access());
    }

    #[test]
    fn tokens_are_looked_up_by_hash_and_revocation_refuses() {
        let store: Arc<dyn Store> = Arc::new(SledStore::temporary().unwrap());
        store.put_token(&token("s3cret-a", Some("north"), Role::Planner, false)).unwrap();
        store.put_token(&token("s3cret-b", None, Role::Operator, true)).unwrap();
        let policy = AccessPolicy::with_store(store);
        let caller = policy.authenticate(&request(Some("Bearer s3cret-a"))).unwrap();
        assert_eq!((caller.fleet_id.as_deref(), caller.role), (Some("north"), Role::Planner));
        for bad in [None, Some("Bearer s3cret"), Some("Bearer s3cret-b"), Some("s3cret-a"), Some("Basic s3cret-a"), Some("Bearer ")] {
            assert!(matches!(policy.authenticate(&request(bad)), Err(ServiceError::Unauthenticated(_))), "{bad:?}");
        }
    }

    #[test]
    fn fleet_tokens_act_on_their_own_fleet_only() {
        let planner = Caller { token_id: "tok_p".into(), fleet_id: Some("north".into()), role: Role::Planner };
        assert!(planner.require("north", Permission::ReadFleet).is_ok());
        let other = planner.require("south", Permission::ReadFleet).unwrap_err();
        assert!(matches!(&other, ServiceError::PermissionDenied(m) if m.contains("fleet 'south'") && m.contains("planner")), "{other}");
        assert!(matches!(planner.require("north", Permission::WriteTrips), Err(ServiceError::PermissionDenied(m)) if m.contains("ingest or operator")));
        let fleet_admin = Caller { token_id: "tok_a".into(), fleet_id: Some("north".into()), role: Role::FleetAdmin };
        assert!(fleet_admin.require_operator().is_err(), "a fleet token never acts across fleets");
        assert!(Caller::open_access().require("any", Permission::WriteTrips).is_ok());
    }
}
