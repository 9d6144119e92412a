//! Deciding at start-up how calls are authenticated, and the first operator token.
//!
//! The first operator token comes from the file named in `[auth] operator_token_file`: its
//! SHA-256 is stored as the token `bootstrap` (replacing an earlier bootstrap hash when the
//! file changed, keeping a revocation of the same secret). Tokens are then required. They are
//! also required whenever the store already holds tokens, so deleting the setting never opens
//! a server. Without tokens the server serves only on loopback, or beyond it when
//! `insecure_no_auth` says so.

use std::net::SocketAddr;
use std::sync::Arc;

use super::policy::AccessPolicy;
use super::roles::Role;
use super::tokens::hash_secret;
use crate::config::AuthConfig;
use crate::store::{Store, StoreError, TokenRecord};

/// token_id of the operator token read from the configured file.
pub const BOOTSTRAP_TOKEN_ID: &str = "bootstrap";

/// Shortest operator token accepted from the file, characters.
pub const MIN_OPERATOR_TOKEN_CHARS: usize = 20;

/// Why the server must not start with these access settings.
#[derive(Debug, thiserror::Error)]
pub enum AccessSetupError {
    /// The operator token file could not be read.
    #[error("cannot read [auth] operator_token_file {path}: {source}")]
    Read {
        /// The file.
        path: String,
        /// Why.
        source: std::io::Error,
    },
    /// The operator token file holds no usable token.
    #[error("[auth] operator_token_file {path} {problem}")]
    BadToken {
        /// The file.
        path: String,
        /// What is wrong.
        problem: String,
    },
    /// No authentication on an address others can reach.
    #[error("refusing to serve on {listen} without authentication: set [auth] operator_token_file (or BRAKELEDGER_OPERATOR_TOKEN_FILE), or pass --insecure-no-auth to serve without tokens on purpose")]
    OpenBeyondLoopback {
        /// The address.
        listen: SocketAddr,
    },
    /// Tokens are configured and the open option is set too.
    #[error("insecure_no_auth is set but {0}: remove one of the two")]
    Contradiction(String),
    /// A client-only setting was given to the server.
    #[error("{0}")]
    ClientSetting(String),
    /// The store failed.
    #[error("reading or storing tokens: {0}")]
    Store(#[from] StoreError),
}

/// How the server authenticates, and what to say about it in the log.
#[derive(Debug)]
pub struct AccessSetup {
    /// The interceptor's policy.
    pub policy: AccessPolicy,
    /// A warning to log at start (serving without tokens).
    pub warning: Option<String>,
}

/// Reads the operator token file: one line, trimmed, at least [`MIN_OPERATOR_TOKEN_CHARS`].
fn read_operator_token(path: &std::path::Path) -> Result<String, AccessSetupError> {
    let shown = path.display().to_string();
    let text = std::fs::read_to_string(path).map_err(|source| AccessSetupError::Read { path: shown.clone(), source })?;
    let token = text.trim();
    if token.is_empty() {
        return Err(AccessSetupError::BadToken { path: shown, problem: "is empty (an empty token list is a configuration error, not \"open\")".into() });
    }
    if token.lines().count() > 1 || token.chars().any(|c| c.is_whitespace() || c.is_control()) {
        return Err(AccessSetupError::BadToken { path: shown, problem: "must hold one token on one line, without spaces".into() });
    }
    if token.chars().count() < MIN_OPERATOR_TOKEN_CHARS {
        return Err(AccessSetupError::BadToken { path: shown, problem: format!("holds a token shorter than {MIN_OPERATOR_TOKEN_CHARS} characters") });
    }
    Ok(token.to_owned())
}

/// Stores the bootstrap operator token's hash, replacing an earlier one of another secret.
fn store_bootstrap(store: &dyn Store, secret: &str, path: &std::path::Path, now_ms: i64) -> Result<(), AccessSetupError> {
    let hash = hash_secret(secret);
    let existing = store.list_tokens()?;
    if existing.iter().any(|t| t.token_id == BOOTSTRAP_TOKEN_ID && t.secret_sha256 == hash) {
        return Ok(());
    }
    for old in existing.into_iter().filter(|t| t.token_id == BOOTSTRAP_TOKEN_ID && t.revoked_at_ms.is_none()) {
        // The file changed: the old bootstrap secret stops working.
        store.put_token(&TokenRecord { revoked_at_ms: Some(now_ms), ..old })?;
    }
    store.put_token(&TokenRecord {
        token_id: BOOTSTRAP_TOKEN_ID.to_owned(),
        secret_sha256: hash,
        fleet_id: None,
        role: Role::Operator,
        label: format!("operator token from {}", path.display()),
        created_at_ms: now_ms,
        created_by: BOOTSTRAP_TOKEN_ID.to_owned(),
        revoked_at_ms: None,
    })?;
    Ok(())
}

/// Decides how calls to a server on `listen` over `store` are authenticated. `client_token`
/// is a client's token found in the server's own settings (`--token`, `BRAKELEDGER_TOKEN`).
pub fn set_up(
    config: &AuthConfig,
    listen: SocketAddr,
    store: Arc<dyn Store>,
    client_token: Option<&str>,
    now_ms: i64,
) -> Result<AccessSetup, AccessSetupError> {
    if let Some(path) = &config.operator_token_file {
        if config.insecure_no_auth {
            return Err(AccessSetupError::Contradiction("[auth] operator_token_file is set".into()));
        }
        let secret = read_operator_token(path)?;
        store_bootstrap(store.as_ref(), &secret, path, now_ms)?;
        return Ok(AccessSetup { policy: AccessPolicy::with_store(store), warning: None });
    }
    let held = store.list_tokens()?.iter().filter(|t| t.revoked_at_ms.is_none()).count();
    if held > 0 {
        if config.insecure_no_auth {
            return Err(AccessSetupError::Contradiction(format!("the store holds {held} valid token(s)")));
        }
        return Ok(AccessSetup { policy: AccessPolicy::with_store(store), warning: None });
    }
    if client_token.is_some() {
        return Err(AccessSetupError::ClientSetting(
            "BRAKELEDGER_TOKEN (or --token) is the token a client presents; it does not protect a server, which would run without authentication. \
             Name the first operator token's file in [auth] operator_token_file (or BRAKELEDGER_OPERATOR_TOKEN_FILE), or unset BRAKELEDGER_TOKEN"
                .into(),
        ));
    }
    if listen.ip().is_loopback() {
        let warning = "serving without tokens on a loopback address: any local process can read and change every fleet (set [auth] operator_token_file to require tokens)";
        return Ok(AccessSetup { policy: AccessPolicy::open(), warning: Some(warning.into()) });
    }
    if config.insecure_no_auth {
        let warning = format!("insecure_no_auth: serving on {listen} WITHOUT authentication; anyone who reaches this port can read and change every fleet");
        return Ok(AccessSetup { policy: AccessPolicy::open(), warning: Some(warning) });
    }
    Err(AccessSetupError::OpenBeyondLoopback { listen })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::sled_store::SledStore;

    fn store() -> Arc<dyn Store> {
        Arc::new(SledStore::temporary().unwrap())
    }

    fn beyond() -> SocketAddr {
        "0.0.0.0:50051".parse().unwrap()
    }

    #[test]
    fn no_tokens_is_refused_beyond_loopback_unless_said_on_purpose() {
        let open = AuthConfig::default();
        assert!(matches!(set_up(&open, beyond(), store(), None, 0), Err(AccessSetupError::OpenBeyondLoopback { .. })));
        let local = set_up(&open, "127.0.0.1:1".parse().unwrap(), store(), None, 0).unwrap();
        assert!(!local.policy.requires_token() && local.warning.is_some());
        let insecure = AuthConfig { insecure_no_auth: true, ..AuthConfig::default() };
        let setup = set_up(&insecure, beyond(), store(), None, 0).unwrap();
        assert!(setup.warning.unwrap().contains("WITHOUT authentication"));
        let client = set_up(&open, "127.0.0.1:1".parse().unwrap(), store(), Some("x"), 0).unwrap_err();
        assert!(client.to_string().contains("BRAKELEDGER_TOKEN"), "{client}");
    }

    #[test]
    fn the_operator_file_is_checked_and_its_hash_stored_once() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("operator-token");
        let config = AuthConfig { operator_token_file: Some(path.clone()), insecure_no_auth: false };
        for bad in ["", "  \n", "short", "two words-and-more-than-twenty", "line-one-aaaaaaaaaaaa\nline-two-bbbbbbbbbbbbbb"] {
            std::fs::write(&path, bad).unwrap();
            assert!(matches!(set_up(&config, beyond(), store(), None, 0), Err(AccessSetupError::BadToken { .. })), "{bad:?}");
        }
        let store = store();
        std::fs::write(&path, "first-operator-secret-0001\n").unwrap();
        assert!(set_up(&config, beyond(), Arc::clone(&store), None, 1).unwrap().policy.requires_token());
        assert!(set_up(&config, beyond(), Arc::clone(&store), None, 2).is_ok());
        assert_eq!(store.list_tokens().unwrap().len(), 1, "restarting with the same file stores nothing new");
        std::fs::write(&path, "second-operator-secret-02\n").unwrap();
        set_up(&config, beyond(), Arc::clone(&store), None, 3).unwrap();
        let old = store.token_by_hash(&hash_secret("first-operator-secret-0001")).unwrap().unwrap();
        assert_eq!(old.revoked_at_ms, Some(3), "a changed file revokes the old secret");
        // With tokens held, removing the setting does not open the server.
        let setup = set_up(&AuthConfig::default(), beyond(), Arc::clone(&store), None, 4).unwrap();
        assert!(setup.policy.requires_token());
        let contradiction = AuthConfig { insecure_no_auth: true, ..AuthConfig::default() };
        assert!(matches!(set_up(&contradiction, beyond(), store, None, 5), Err(AccessSetupError::Contradiction(_))));
    }
}
