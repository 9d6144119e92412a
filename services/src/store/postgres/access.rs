//! Access tokens (global: looked up by the SHA-256 of a secret) and the per-fleet audit trail.

use ::postgres::GenericClient;

use super::limit_of;
use super::rows;
use crate::store::*;

/// See [`Store::put_token`].
pub fn put_token(client: &mut impl GenericClient, token: &TokenRecord) -> StoreResult<()> {
    client.execute(
        "INSERT INTO access_tokens (secret_sha256, token_id, fleet_id, role, label, created_at_ms, created_by, revoked_at_ms)
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8)
         ON CONFLICT (secret_sha256) DO UPDATE SET token_id = EXCLUDED.token_id, fleet_id = EXCLUDED.fleet_id, role = EXCLUDED.role,
           label = EXCLUDED.label, created_at_ms = EXCLUDED.created_at_ms, created_by = EXCLUDED.created_by, revoked_at_ms = EXCLUDED.revoked_at_ms",
        &[
            &token.secret_sha256.as_slice(),
            &token.token_id,
            &token.fleet_id,
            &token.role.name(),
            &token.label,
            &token.created_at_ms,
            &token.created_by,
            &token.revoked_at_ms,
        ],
    )?;
    Ok(())
}

/// See [`Store::token_by_hash`].
pub fn token_by_hash(client: &mut impl GenericClient, secret_sha256: &[u8; 32]) -> StoreResult<Option<TokenRecord>> {
    let sql = format!("SELECT {} FROM access_tokens WHERE secret_sha256 = $1", rows::TOKEN_COLUMNS);
    client.query_opt(&sql, &[&secret_sha256.as_slice()])?.map(|r| rows::token(&r)).transpose()
}

/// See [`Store::list_tokens`].
pub fn list_tokens(client: &mut ::postgres::Client) -> StoreResult<Vec<TokenRecord>> {
    let sql = format!("SELECT {} FROM access_tokens ORDER BY secret_sha256", rows::TOKEN_COLUMNS);
    client.query(&sql, &[])?.iter().map(rows::token).collect()
}

/// See [`Store::append_audit`].
pub fn append_audit(client: &mut impl GenericClient, entry: &AuditRecord) -> StoreResult<()> {
    client.execute(
        "INSERT INTO audit (fleet_id, at_ms, sequence, token_id, role, action, subject)
         VALUES ($1, $2, nextval('audit_sequence'), $3, $4, $5, $6)",
        &[&entry.fleet_id, &entry.at_ms, &entry.token_id, &entry.role.name(), &entry.action, &entry.subject],
    )?;
    Ok(())
}

/// See [`Store::list_audit`].
pub fn list_audit(client: &mut impl GenericClient, fleet_id: &str, after: Option<AuditCursor>, limit: usize) -> StoreResult<Vec<(AuditCursor, AuditRecord)>> {
    let (at_ms, sequence) = after.map_or((i64::MIN, i64::MIN), |c| (c.at_ms, c.sequence as i64));
    let sql = format!(
        "SELECT {} FROM audit WHERE fleet_id = $1 AND (at_ms, sequence) > ($2, $3) ORDER BY at_ms, sequence LIMIT $4",
        rows::AUDIT_COLUMNS
    );
    client.query(&sql, &[&fleet_id, &at_ms, &sequence, &limit_of(limit)])?.iter().map(rows::audit).collect()
}
