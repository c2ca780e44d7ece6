//! Accounts: people, their roles per site, the phones they enrol, the tokens
//! host systems use, and the audit trail of who did what.
//!
//! The rest of Cairn sees an authenticated [`Principal`]; the one place that
//! decides whether a principal may use a route is `http::access`.

pub mod admin;
pub mod audit;
pub mod hashing;
pub mod routes;
pub mod secret;
pub mod session;
pub mod signin;
pub mod store;
pub mod throttle;

use crate::master::SiteId;
use serde::Serialize;
use std::fmt;

/// The store's id of a user; never reused, so counts and reviews can name it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
pub struct UserId(pub i64);

/// The store's id of an enrolled device.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
pub struct DeviceId(pub i64);

/// What a person may do at a site. A user holds one or more per site.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Role {
    Counter,
    Supervisor,
    InventoryManager,
    Planner,
    Admin,
}

impl Role {
    /// Every role, in the order pages list them.
    pub const ALL: [Role; 5] = [
        Role::Counter,
        Role::Supervisor,
        Role::InventoryManager,
        Role::Planner,
        Role::Admin,
    ];

    /// Returns the stored and wire form, e.g. `inventory_manager`.
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Counter => "counter",
            Role::Supervisor => "supervisor",
            Role::InventoryManager => "inventory_manager",
            Role::Planner => "planner",
            Role::Admin => "admin",
        }
    }

    /// Returns the name pages show.
    pub fn label(self) -> &'static str {
        match self {
            Role::Counter => "counter",
            Role::Supervisor => "supervisor",
            Role::InventoryManager => "inventory manager",
            Role::Planner => "planner",
            Role::Admin => "admin",
        }
    }

    /// Parses the stored form (also accepts `inventory-manager`).
    pub fn parse(text: &str) -> Result<Self, String> {
        let t = text.trim().to_ascii_lowercase().replace(['-', ' '], "_");
        Role::ALL
            .into_iter()
            .find(|r| r.as_str() == t)
            .ok_or_else(|| {
                format!(
                    "'{text}' is not a role (one of: counter, supervisor, inventory_manager, planner, admin)"
                )
            })
    }

    /// Parses a comma-separated list of roles, e.g. `counter,supervisor`.
    pub fn parse_list(text: &str) -> Result<Vec<Role>, String> {
        let mut roles = Vec::new();
        for part in text.split(',').filter(|p| !p.trim().is_empty()) {
            let r = Role::parse(part)?;
            if !roles.contains(&r) {
                roles.push(r);
            }
        }
        roles.sort();
        Ok(roles)
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.label())
    }
}

/// Longest user name, in characters.
pub const MAX_USER_NAME_CHARS: usize = 64;

/// A user's sign-in name: letters, digits, `.`, `-`, `_`; compared without case.
#[derive(Debug, Clone, PartialEq, Eq, Hash, Serialize)]
pub struct UserName(String);

impl UserName {
    /// Parses a user name, refusing empty, overlong or odd ones.
    pub fn parse(text: &str) -> Result<Self, String> {
        let t = text.trim();
        if t.is_empty() {
            return Err("the user name is empty".into());
        }
        if t.chars().count() > MAX_USER_NAME_CHARS {
            return Err(format!(
                "a user name has at most {MAX_USER_NAME_CHARS} characters"
            ));
        }
        if !t
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '-' | '_'))
        {
            return Err("a user name uses only letters, digits, '.', '-' and '_'".into());
        }
        Ok(Self(t.to_ascii_lowercase()))
    }

    /// Returns the name in its stored (lower-case) form.
    pub fn as_str(&self) -> &str {
        &self.0
    }
}

impl fmt::Display for UserName {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

/// A user as pages and the audit trail see one (no secrets).
#[derive(Debug, Clone, Serialize)]
pub struct User {
    pub id: UserId,
    pub name: UserName,
    pub display_name: String,
}

/// How a request proved who sent it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Credential {
    /// A browser session (cookie); `csrf` is the session's form token.
    Session { csrf: secret::CsrfToken },
    /// An enrolled phone's device token: counter rights at its one site.
    Device { id: DeviceId, site: SiteId },
    /// A host system's integration token: one role at one site.
    ApiToken { id: i64, site: SiteId },
}

/// An authenticated sender and the roles it holds, per site.
#[derive(Debug, Clone)]
pub struct Principal {
    pub user: User,
    pub credential: Credential,
    /// The roles in force for this request, per site (already narrowed to what
    /// the credential grants: a device holds only `counter` at its site).
    pub roles: Vec<(SiteId, Role)>,
}

impl Principal {
    /// Returns the roles this principal holds at `site`.
    pub fn roles_at(&self, site: SiteId) -> impl Iterator<Item = Role> + '_ {
        self.roles
            .iter()
            .filter(move |(s, _)| *s == site)
            .map(|(_, r)| *r)
    }

    /// Tells whether the principal holds any of `roles` at `site`.
    pub fn holds_any(&self, site: SiteId, roles: &[Role]) -> bool {
        self.roles_at(site).any(|r| roles.contains(&r))
    }

    /// Returns who to name in the audit trail.
    pub fn actor(&self) -> audit::Actor {
        audit::Actor::User {
            id: self.user.id,
            name: self.user.name.to_string(),
        }
    }
}

/// Why a review was refused by the separation-of-duties rule.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("you counted this bin, so someone else must review its difference")]
pub struct OwnCount;

/// Refuses a reviewer who is among the counters of the bin under review.
/// Counts record the counting user's [`UserId`], so the netting code can call
/// this with the counters of every pass over the bin.
pub fn check_not_own_count(
    reviewer: UserId,
    counters: impl IntoIterator<Item = UserId>,
) -> Result<(), OwnCount> {
    if counters.into_iter().any(|c| c == reviewer) {
        Err(OwnCount)
    } else {
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn roles_parse_from_their_stored_form_and_lists_deduplicate() {
        for r in Role::ALL {
            assert_eq!(Role::parse(r.as_str()), Ok(r));
        }
        assert_eq!(
            Role::parse_list("planner, inventory-manager,planner"),
            Ok(vec![Role::InventoryManager, Role::Planner])
        );
        assert!(Role::parse("owner").is_err());
    }

    #[test]
    fn user_names_are_case_insensitive_and_refuse_odd_characters() {
        assert_eq!(UserName::parse(" Ada ").unwrap().as_str(), "ada");
        assert!(UserName::parse("ada lovelace").is_err());
        assert!(UserName::parse("").is_err());
        assert!(UserName::parse(&"a".repeat(65)).is_err());
    }

    #[test]
    fn a_reviewer_who_counted_the_bin_is_refused() {
        assert_eq!(
            check_not_own_count(UserId(3), [UserId(1), UserId(3)]),
            Err(OwnCount)
        );
        assert_eq!(check_not_own_count(UserId(2), [UserId(1)]), Ok(()));
    }
}
