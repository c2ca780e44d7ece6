//! Where a person goes on a site: the navigation bar every page of a site shows (the
//! site's pages this person may open, by their roles there) and the start page signing
//! in takes them to. The bar only saves a click: every route still checks its own rule
//! in `access::authorize`, and a test holds each link's roles to its route's rule.

use crate::accounts::Role;
use crate::http::access::{ADMINS, BOOK_READERS, SITE_MEMBERS};
use crate::master::Site;

/// One of a site's pages, as the bar links it.
pub struct Entry {
    pub label: &'static str,
    /// The page's path after `/sites/{site}`.
    pub suffix: &'static str,
    /// Who may open it: the roles of its route's rule.
    pub roles: &'static [Role],
}

/// The bar's links, in the order shown.
pub const ENTRIES: [Entry; 10] = [
    Entry {
        label: "Phone app",
        suffix: "/phone",
        roles: SITE_MEMBERS,
    },
    Entry {
        label: "Count list",
        suffix: "/count-lists",
        roles: BOOK_READERS,
    },
    Entry {
        label: "Differences",
        suffix: "/differences",
        roles: BOOK_READERS,
    },
    Entry {
        label: "Accuracy",
        suffix: "/accuracy",
        roles: BOOK_READERS,
    },
    Entry {
        label: "Buffer",
        suffix: "/buffer",
        roles: BOOK_READERS,
    },
    Entry {
        label: "Count policy",
        suffix: "/count-policy",
        roles: BOOK_READERS,
    },
    Entry {
        label: "People",
        suffix: "/admin/users",
        roles: ADMINS,
    },
    Entry {
        label: "Phones",
        suffix: "/admin/devices",
        roles: ADMINS,
    },
    Entry {
        label: "Tokens",
        suffix: "/admin/tokens",
        roles: ADMINS,
    },
    Entry {
        label: "Audit trail",
        suffix: "/admin/audit",
        roles: ADMINS,
    },
];

/// A link of the bar.
pub struct NavLink {
    pub label: &'static str,
    pub href: String,
}

/// The bar of one site's pages.
pub struct Nav {
    pub site_code: String,
    pub site_name: String,
    pub links: Vec<NavLink>,
}

/// Returns the bar for someone holding `roles` at `site`.
pub fn bar(site: &Site, roles: &[Role]) -> Nav {
    Nav {
        site_code: site.code.to_string(),
        site_name: site.name.clone(),
        links: ENTRIES
            .iter()
            .filter(|e| roles.iter().any(|r| e.roles.contains(r)))
            .map(|e| NavLink {
                label: e.label,
                href: format!("/sites/{}{}", site.code, e.suffix),
            })
            .collect(),
    }
}

/// Where each role starts, first match wins: someone with several roles starts at the
/// work that decides the most (an inventory manager who also supervises reviews
/// differences first; an admin who also plans sees the buffer).
const STARTS: [(Role, &str); 5] = [
    (Role::InventoryManager, "/differences"),
    (Role::Supervisor, "/count-lists"),
    (Role::Planner, "/buffer"),
    (Role::Admin, "/admin/users"),
    (Role::Counter, "/phone"),
];

/// Returns the start page of someone holding `roles` at `site`, if they hold any.
pub fn start_page(site: &Site, roles: &[Role]) -> Option<String> {
    STARTS
        .iter()
        .find(|(r, _)| roles.contains(r))
        .map(|(_, suffix)| format!("/sites/{}{suffix}", site.code))
}

/// Returns where signing in takes someone: their start page at their one site, or the
/// list of their sites (`/`) when they have several or none.
pub fn landing(sites: &[(Site, Vec<Role>)]) -> String {
    let mut held = sites.iter().filter(|(_, roles)| !roles.is_empty());
    match (held.next(), held.next()) {
        (Some((site, roles)), None) => start_page(site, roles).unwrap_or_else(|| "/".into()),
        _ => "/".into(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::http::access::Access;
    use axum::http::Method;

    #[test]
    fn each_link_is_open_to_exactly_the_roles_its_route_lets_in() {
        let rules = crate::http::route_rules();
        for e in &ENTRIES {
            let path = format!("/sites/{{site}}{}", e.suffix);
            let rule = rules
                .iter()
                .find(|r| r.method == Method::GET && r.path == path)
                .unwrap_or_else(|| panic!("no GET route {path}"));
            let Access::Site(allowed) = rule.access else {
                panic!("{path} is not a site route");
            };
            for r in Role::ALL {
                assert_eq!(
                    e.roles.contains(&r),
                    allowed.contains(&r),
                    "{} and {path} disagree about {r}",
                    e.label
                );
            }
        }
    }

    #[test]
    fn every_role_has_a_start_page_it_may_open() {
        for r in Role::ALL {
            let (_, suffix) = STARTS
                .iter()
                .find(|(s, _)| *s == r)
                .unwrap_or_else(|| panic!("{r} has no start page"));
            let entry = ENTRIES
                .iter()
                .find(|e| e.suffix == *suffix)
                .unwrap_or_else(|| panic!("{suffix} is not on the bar"));
            assert!(entry.roles.contains(&r), "{r} may not open {suffix}");
        }
    }
}
