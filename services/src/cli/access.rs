//! `brakeledger token create|list|revoke` and `brakeledger audit`: managing access tokens and
//! reading a fleet's audit trail through AccessService.

use std::io::Write;

use brakeledger_proto::v1 as pb;

use crate::auth::Role;
use crate::cli::client::{explain, Connection, ServerTarget};
use crate::cli::dates::from_timestamp;
use crate::cli::table::{Align, Table};

/// Examples of `token`.
pub const TOKEN_EXAMPLES: &str = "\
Examples:
  brakeledger --token \"$OPERATOR_TOKEN\" token create --fleet north --role ingest --label \"north telematics\"
  brakeledger token create --fleet north --role workshop --label \"north workshop bay 2\"
  brakeledger token create --role operator --label \"backup job\"
  brakeledger token list --fleet north
  brakeledger token revoke tok_3f9a0c1d2e4b5a69

Roles: ingest (push trips only), workshop (inspections, replacements, corrections; reads),
planner (reads), fleet-admin (its fleet's settings, vehicles, tokens and audit trail; reads),
operator (everything, every fleet). The secret is printed once by `create`: keep it then.";

/// Examples of `audit`.
pub const AUDIT_EXAMPLES: &str = "\
Examples:
  brakeledger audit --fleet north
  brakeledger audit --fleet north --json";

/// `token` subcommands.
#[derive(Debug, clap::Subcommand)]
pub enum TokenCommand {
    /// Create a token and print its secret (shown only this once).
    Create(CreateArgs),
    /// List tokens (never their secrets).
    List(ListArgs),
    /// Revoke a token; calls presenting it are refused at once.
    Revoke(RevokeArgs),
}

/// Flags of `token create`.
#[derive(Debug, clap::Args)]
pub struct CreateArgs {
    /// Fleet the token acts on (omit for an operator token).
    #[arg(long)]
    pub fleet: Option<String>,
    /// Role: ingest, workshop, planner, fleet-admin or operator.
    #[arg(long, value_parser = parse_role)]
    pub role: Role,
    /// Whose token it is, for people ("north telematics").
    #[arg(long, default_value = "")]
    pub label: String,
    /// Print JSON.
    #[arg(long)]
    pub json: bool,
}

/// Flags of `token list`.
#[derive(Debug, clap::Args)]
pub struct ListArgs {
    /// Fleet whose tokens to list (omit, with an operator token, for every token).
    #[arg(long)]
    pub fleet: Option<String>,
    /// Print JSON.
    #[arg(long)]
    pub json: bool,
}

/// Flags of `token revoke`.
#[derive(Debug, clap::Args)]
pub struct RevokeArgs {
    /// The token's identifier (tok_…), from `token list`.
    pub token_id: String,
}

/// Flags of `audit`.
#[derive(Debug, clap::Args)]
pub struct AuditArgs {
    /// Fleet whose audit trail to list.
    #[arg(long)]
    pub fleet: String,
    /// Print JSON Lines, one entry a line.
    #[arg(long)]
    pub json: bool,
}

fn parse_role(text: &str) -> Result<Role, String> {
    Role::from_name(text).ok_or_else(|| format!("'{text}' is not a role: ingest, workshop, planner, fleet-admin or operator"))
}

fn role_name(wire: i32) -> &'static str {
    Role::from_wire(wire).map_or("unknown", Role::name)
}

fn time_text(ts: Option<&prost_types::Timestamp>) -> String {
    ts.and_then(from_timestamp).map_or_else(String::new, |t| t.format("%Y-%m-%d %H:%M UTC").to_string())
}

fn token_json(token: &pb::AccessToken) -> serde_json::Value {
    serde_json::json!({
        "token_id": token.token_id,
        "fleet_id": token.fleet_id,
        "role": role_name(token.role),
        "label": token.label,
        "created_at": time_text(token.created_at.as_ref()),
        "created_by": token.created_by,
        "revoked_at": time_text(token.revoked_at.as_ref()),
    })
}

/// Runs a `token` subcommand.
pub async fn token(target: &ServerTarget, command: &TokenCommand, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(target).await?;
    match command {
        TokenCommand::Create(args) => {
            let request = pb::CreateTokenRequest { fleet_id: args.fleet.clone().unwrap_or_default(), role: args.role.to_wire(), label: args.label.clone() };
            let created = connection.access.create_token(request).await.map_err(|s| explain(s, "creating a token"))?.into_inner();
            let token = created.token.unwrap_or_default();
            if args.json {
                let mut value = token_json(&token);
                value["secret"] = serde_json::Value::String(created.secret);
                writeln!(out, "{}", serde_json::to_string_pretty(&value)?)?;
            } else {
                let scope = if token.fleet_id.is_empty() { "every fleet".to_owned() } else { format!("fleet {}", token.fleet_id) };
                writeln!(out, "Created token {} ({} on {scope}).", token.token_id, role_name(token.role))?;
                writeln!(out, "Secret (shown only now; present it as --token or BRAKELEDGER_TOKEN):")?;
                writeln!(out, "{}", created.secret)?;
            }
        }
        TokenCommand::List(args) => {
            let request = pb::ListTokensRequest { fleet_id: args.fleet.clone().unwrap_or_default() };
            let tokens = connection.access.list_tokens(request).await.map_err(|s| explain(s, "listing tokens"))?.into_inner().tokens;
            if args.json {
                let values: Vec<_> = tokens.iter().map(token_json).collect();
                writeln!(out, "{}", serde_json::to_string_pretty(&values)?)?;
                return Ok(());
            }
            let mut table = Table::new(&[
                ("token", Align::Left),
                ("fleet", Align::Left),
                ("role", Align::Left),
                ("label", Align::Left),
                ("created", Align::Left),
                ("by", Align::Left),
                ("revoked", Align::Left),
            ]);
            for t in &tokens {
                table.row(vec![
                    t.token_id.clone(),
                    if t.fleet_id.is_empty() { "(all)".into() } else { t.fleet_id.clone() },
                    role_name(t.role).into(),
                    t.label.clone(),
                    time_text(t.created_at.as_ref()),
                    t.created_by.clone(),
                    time_text(t.revoked_at.as_ref()),
                ]);
            }
            writeln!(out, "{} token(s):\n\n{}", tokens.len(), table.render())?;
        }
        TokenCommand::Revoke(args) => {
            let revoked = connection
                .access
                .revoke_token(pb::RevokeTokenRequest { token_id: args.token_id.clone() })
                .await
                .map_err(|s| explain(s, &format!("revoking token {}", args.token_id)))?
                .into_inner();
            let token = revoked.token.unwrap_or_default();
            writeln!(out, "Revoked token {} ({}, '{}'); calls presenting it are refused from now on.", token.token_id, role_name(token.role), token.label)?;
        }
    }
    Ok(())
}

/// Runs `audit`: every page of a fleet's audit trail, oldest first.
pub async fn audit(target: &ServerTarget, args: &AuditArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let mut connection = Connection::open(target).await?;
    let mut entries = Vec::new();
    let mut page_token = String::new();
    loop {
        let page = connection
            .access
            .list_audit_entries(pb::ListAuditEntriesRequest { fleet_id: args.fleet.clone(), page_size: 1000, page_token })
            .await
            .map_err(|s| explain(s, &format!("reading the audit trail of fleet '{}'", args.fleet)))?
            .into_inner();
        entries.extend(page.entries);
        if page.next_page_token.is_empty() {
            break;
        }
        page_token = page.next_page_token;
    }
    if args.json {
        for e in &entries {
            let value = serde_json::json!({"at": time_text(e.at.as_ref()), "fleet_id": e.fleet_id, "token_id": e.token_id, "role": role_name(e.role), "action": e.action, "subject": e.subject});
            writeln!(out, "{value}")?;
        }
        return Ok(());
    }
    let mut table = Table::new(&[("when", Align::Left), ("token", Align::Left), ("role", Align::Left), ("action", Align::Left), ("what", Align::Left)]);
    for e in &entries {
        let action = e.action.rsplit('/').next().unwrap_or(&e.action).to_owned();
        table.row(vec![time_text(e.at.as_ref()), e.token_id.clone(), role_name(e.role).into(), action, e.subject.clone()]);
    }
    writeln!(out, "{} audited write(s) in fleet {}:\n\n{}", entries.len(), args.fleet, table.render())?;
    Ok(())
}
