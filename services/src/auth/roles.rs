//! Roles a token carries and the permissions each grants.
//!
//! | role | may |
//! |---|---|
//! | `ingest` | push trip summaries of its fleet; nothing else (not even read) |
//! | `workshop` | record inspections and replacements of its fleet and their corrections; read its fleet |
//! | `planner` | read its fleet: settings, vehicles, forecasts, due lists, plans, charts |
//! | `fleet-admin` | change its fleet's settings and vehicles, manage its fleet's tokens, read its audit trail; read its fleet |
//! | `operator` | everything on every fleet: tokens, backups, settings |
//!
//! A fleet token acts on its own fleet only; an operator token has no fleet and acts on all.

use serde::{Deserialize, Serialize};

/// What a token may do (see the module table).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
pub enum Role {
    /// Pushes trips of its fleet.
    Ingest,
    /// Records inspections, replacements and corrections of its fleet; reads its fleet.
    Workshop,
    /// Reads its fleet.
    Planner,
    /// Administers its fleet (settings, vehicles, tokens, audit trail); reads its fleet.
    FleetAdmin,
    /// Everything on every fleet.
    Operator,
}

/// One kind of action a call performs.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Permission {
    /// Read a fleet's settings, vehicles, forecasts, due lists and plans.
    ReadFleet,
    /// Write trip summaries.
    WriteTrips,
    /// Write inspections, replacements and their corrections.
    WriteWorkshopRecords,
    /// Change a fleet's settings and vehicles, read its audit trail.
    AdministerFleet,
    /// Create, list and revoke a fleet's tokens.
    ManageTokens,
    /// Act across fleets: operator tokens, backups, every fleet's listings.
    Operate,
}

impl Role {
    /// Every role, least to most powerful.
    pub const ALL: [Role; 5] = [Role::Ingest, Role::Workshop, Role::Planner, Role::FleetAdmin, Role::Operator];

    /// The role's name in the configuration, the CLI and messages.
    pub fn name(self) -> &'static str {
        match self {
            Role::Ingest => "ingest",
            Role::Workshop => "workshop",
            Role::Planner => "planner",
            Role::FleetAdmin => "fleet-admin",
            Role::Operator => "operator",
        }
    }

    /// The role named `name` (as [`Role::name`] spells it).
    pub fn from_name(name: &str) -> Option<Role> {
        Role::ALL.into_iter().find(|role| role.name() == name)
    }

    /// Whether the role grants `permission` (on its own fleet, for fleet roles).
    pub fn grants(self, permission: Permission) -> bool {
        use Permission::*;
        match self {
            Role::Operator => true,
            Role::Ingest => permission == WriteTrips,
            Role::Workshop => matches!(permission, WriteWorkshopRecords | ReadFleet),
            Role::Planner => permission == ReadFleet,
            Role::FleetAdmin => matches!(permission, AdministerFleet | ManageTokens | ReadFleet),
        }
    }

    /// Roles that grant `permission`, for messages that say which role a call needs.
    pub fn granting(permission: Permission) -> Vec<Role> {
        Role::ALL.into_iter().filter(|role| role.grants(permission)).collect()
    }

    /// The wire value.
    pub fn to_wire(self) -> i32 {
        use brakeledger_proto::v1::Role as Wire;
        (match self {
            Role::Ingest => Wire::Ingest,
            Role::Workshop => Wire::Workshop,
            Role::Planner => Wire::Planner,
            Role::FleetAdmin => Wire::FleetAdmin,
            Role::Operator => Wire::Operator,
        }) as i32
    }

    /// The role of a wire value; `None` for unspecified or unknown values.
    pub fn from_wire(value: i32) -> Option<Role> {
        use brakeledger_proto::v1::Role as Wire;
        match Wire::try_from(value).ok()? {
            Wire::Unspecified => None,
            Wire::Ingest => Some(Role::Ingest),
            Wire::Workshop => Some(Role::Workshop),
            Wire::Planner => Some(Role::Planner),
            Wire::FleetAdmin => Some(Role::FleetAdmin),
            Wire::Operator => Some(Role::Operator),
        }
    }
}

impl std::fmt::Display for Role {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ingest_tokens_only_push_trips() {
        for permission in [Permission::ReadFleet, Permission::WriteWorkshopRecords, Permission::AdministerFleet, Permission::ManageTokens, Permission::Operate] {
            assert!(!Role::Ingest.grants(permission), "{permission:?}");
        }
        assert!(Role::Ingest.grants(Permission::WriteTrips));
    }

    #[test]
    fn only_operators_act_across_fleets_and_names_round_trip() {
        assert_eq!(Role::granting(Permission::Operate), vec![Role::Operator]);
        assert_eq!(Role::granting(Permission::WriteTrips), vec![Role::Ingest, Role::Operator]);
        for role in Role::ALL {
            assert_eq!(Role::from_name(role.name()), Some(role));
            assert_eq!(Role::from_wire(role.to_wire()), Some(role));
        }
        assert_eq!(Role::from_wire(0), None);
        assert_eq!(Role::from_name("admin"), None);
    }
}
