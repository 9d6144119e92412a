//! `AccessService`: creating, listing and revoking tokens, and reading the audit trail.
//!
//! Operators manage every token; a fleet administrator manages its own fleet's tokens, up to
//! its own role. Secrets are returned once, by CreateToken; only their hashes are stored.

use brakeledger_proto::v1 as pb;
use pb::access_service_server::AccessService;
use tonic::{Request, Response, Status};

use crate::auth::tokens::{hash_secret, new_secret, new_token_id};
use crate::auth::{Caller, Permission, Role};
use crate::convert::{check_id, ms_timestamp, now_ms};
use crate::error::ServiceError;
use crate::grpc::paging::{decode_token, encode_token, page_size};
use crate::state::AppState;
use crate::store::{AuditCursor, TokenRecord};

/// Longest token label, characters.
const MAX_LABEL_CHARS: usize = 200;

/// Implements `brakeledger.v1.AccessService`.
pub struct AccessApi {
    state: AppState,
}

impl AccessApi {
    /// Handlers over shared state.
    pub fn new(state: AppState) -> Self {
        Self { state }
    }
}

fn token_to_wire(token: TokenRecord) -> pb::AccessToken {
    pb::AccessToken {
        token_id: token.token_id,
        fleet_id: token.fleet_id.unwrap_or_default(),
        role: token.role.to_wire(),
        label: token.label,
        created_at: Some(ms_timestamp(token.created_at_ms)),
        created_by: token.created_by,
        revoked_at: token.revoked_at_ms.map(ms_timestamp),
    }
}

/// Whether `caller` may manage tokens of `fleet` (None: operator tokens) with `role`.
fn require_manage(caller: &Caller, fleet: Option<&str>, role: Role) -> Result<(), ServiceError> {
    match fleet {
        None => caller.require_operator(),
        Some(fleet) => {
            caller.require(fleet, Permission::ManageTokens)?;
            if role > caller.role {
                return Err(ServiceError::PermissionDenied(format!(
                    "a {} token cannot create a {role} token; an operator can",
                    caller.role
                )));
            }
            Ok(())
        }
    }
}

#[tonic::async_trait]
impl AccessService for AccessApi {
    async fn create_token(&self, request: Request<pb::CreateTokenRequest>) -> Result<Response<pb::CreateTokenResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        let role = Role::from_wire(r.role).ok_or_else(|| ServiceError::invalid("role", "must be one of ROLE_INGEST, ROLE_WORKSHOP, ROLE_PLANNER, ROLE_FLEET_ADMIN, ROLE_OPERATOR"))?;
        let fleet_id = match (r.fleet_id.is_empty(), role) {
            (true, Role::Operator) => None,
            (true, _) => return Err(ServiceError::invalid("fleet_id", format!("a {role} token belongs to a fleet: name it")).into()),
            (false, Role::Operator) => return Err(ServiceError::invalid("fleet_id", "an operator token acts on every fleet: leave fleet_id empty").into()),
            (false, _) => {
                check_id("fleet_id", &r.fleet_id).map_err(|v| ServiceError::InvalidArgument(vec![v]))?;
                Some(r.fleet_id.clone())
            }
        };
        if r.label.chars().count() > MAX_LABEL_CHARS || r.label.chars().any(char::is_control) {
            return Err(ServiceError::invalid("label", format!("must be at most {MAX_LABEL_CHARS} characters, without control characters")).into());
        }
        require_manage(&caller, fleet_id.as_deref(), role)?;
        let secret = new_secret();
        let record = TokenRecord {
            token_id: new_token_id(),
            secret_sha256: hash_secret(&secret),
            fleet_id: fleet_id.clone(),
            role,
            label: r.label,
            created_at_ms: now_ms(),
            created_by: caller.token_id.clone(),
            revoked_at_ms: None,
        };
        let stored = record.clone();
        self.state.blocking(move |store| Ok(store.put_token(&stored)?)).await?;
        let subject = format!("token {} created: {role}, '{}'", record.token_id, record.label);
        self.state.audit(&caller, fleet_id.as_deref().unwrap_or(""), "brakeledger.v1.AccessService/CreateToken", subject).await;
        Ok(Response::new(pb::CreateTokenResponse { token: Some(token_to_wire(record)), secret }))
    }

    async fn list_tokens(&self, request: Request<pb::ListTokensRequest>) -> Result<Response<pb::ListTokensResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        if r.fleet_id.is_empty() {
            caller.require_operator()?;
        } else {
            caller.require(&r.fleet_id, Permission::ManageTokens)?;
        }
        let mut tokens = self.state.blocking(move |store| Ok(store.list_tokens()?)).await?;
        if !r.fleet_id.is_empty() {
            tokens.retain(|t| t.fleet_id.as_deref() == Some(r.fleet_id.as_str()));
        }
        tokens.sort_by(|a, b| (a.created_at_ms, &a.token_id).cmp(&(b.created_at_ms, &b.token_id)));
        Ok(Response::new(pb::ListTokensResponse { tokens: tokens.into_iter().map(token_to_wire).collect() }))
    }

    async fn revoke_token(&self, request: Request<pb::RevokeTokenRequest>) -> Result<Response<pb::RevokeTokenResponse>, Status> {
        let caller = Caller::of(&request)?;
        let token_id = request.into_inner().token_id;
        check_id("token_id", &token_id).map_err(|v| ServiceError::InvalidArgument(vec![v]))?;
        let wanted = token_id.clone();
        let found = self.state.blocking(move |store| Ok(store.list_tokens()?.into_iter().find(|t| t.token_id == wanted && t.revoked_at_ms.is_none()))).await?;
        let found = match found {
            Some(token) => token,
            None => {
                // Only an operator learns whether a token id exists at all.
                caller.require_operator()?;
                return Err(ServiceError::NotFound(format!("no valid token has the id '{}'", crate::error::quote_prefix(&token_id, 64))).into());
            }
        };
        match found.fleet_id.as_deref() {
            None => caller.require_operator()?,
            Some(fleet) => caller.require(fleet, Permission::ManageTokens)?,
        }
        let revoked = TokenRecord { revoked_at_ms: Some(now_ms()), ..found };
        let stored = revoked.clone();
        self.state.blocking(move |store| Ok(store.put_token(&stored)?)).await?;
        let subject = format!("token {} revoked ({}, '{}')", revoked.token_id, revoked.role, revoked.label);
        self.state.audit(&caller, revoked.fleet_id.as_deref().unwrap_or(""), "brakeledger.v1.AccessService/RevokeToken", subject).await;
        Ok(Response::new(pb::RevokeTokenResponse { token: Some(token_to_wire(revoked)), revoked_now: true }))
    }

    async fn list_audit_entries(&self, request: Request<pb::ListAuditEntriesRequest>) -> Result<Response<pb::ListAuditEntriesResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        // Operator-wide actions (operator tokens, backups) are kept under the empty fleet id.
        if r.fleet_id.is_empty() {
            caller.require_operator()?;
        } else {
            caller.require(&r.fleet_id, Permission::AdministerFleet)?;
        }
        let after = if r.page_token.is_empty() {
            None
        } else {
            let parts = decode_token(&r.page_token, 3)?;
            let parse = |s: &str| s.parse::<i64>().map_err(|_| ServiceError::invalid("page_token", "is not a token this server made"));
            if parts[0] != r.fleet_id {
                return Err(ServiceError::invalid("page_token", "belongs to another fleet").into());
            }
            Some(AuditCursor { at_ms: parse(&parts[1])?, sequence: parse(&parts[2])? as u64 })
        };
        let limit = page_size(r.page_size);
        let fleet_id = r.fleet_id.clone();
        let mut entries = self.state.blocking(move |store| Ok(store.list_audit(&fleet_id, after, limit + 1)?)).await?;
        let next_page_token = if entries.len() > limit {
            entries.truncate(limit);
            entries
                .last()
                .map(|(cursor, _)| encode_token(&[&r.fleet_id, &cursor.at_ms.to_string(), &(cursor.sequence as i64).to_string()]))
                .unwrap_or_default()
        } else {
            String::new()
        };
        let entries = entries
            .into_iter()
            .map(|(_, e)| pb::AuditEntry { at: Some(ms_timestamp(e.at_ms)), fleet_id: e.fleet_id, token_id: e.token_id, role: e.role.to_wire(), action: e.action, subject: e.subject })
            .collect();
        Ok(Response::new(pb::ListAuditEntriesResponse { entries, next_page_token }))
    }
}
