//! DEMO ONLY: the sign-ins of the fictional demo site, one person per role.
//! These passwords and PINs are published on purpose (they are printed when
//! `cairn demo` starts) and open nothing but a demo database on loopback.
//! Real sites make their users with `cairn user add` and the admin pages.

use crate::accounts::audit::{Action, Actor, AuditEvent};
use crate::accounts::secret::{self, Secret};
use crate::accounts::store::NewUser;
use crate::accounts::{Role, UserName};
use crate::master::Site;
use crate::store::Store;
use std::fmt::Write as _;

/// One demo sign-in. DEMO ONLY.
pub struct DemoLogin {
    pub user: &'static str,
    pub role: Role,
    pub password: &'static str,
    pub pin: Option<&'static str>,
}

/// The demo site's people (names from `PEOPLE`), one per role, two counters
/// so a recount can go to a different counter. DEMO ONLY credentials.
pub const DEMO_LOGINS: &[DemoLogin] = &[
    DemoLogin {
        user: "ada",
        role: Role::Admin,
        password: "demo-only-ada-admin",
        pin: None,
    },
    DemoLogin {
        user: "bruno",
        role: Role::Supervisor,
        password: "demo-only-bruno-supervisor",
        pin: None,
    },
    DemoLogin {
        user: "chiara",
        role: Role::InventoryManager,
        password: "demo-only-chiara-manager",
        pin: None,
    },
    DemoLogin {
        user: "dmitri",
        role: Role::Planner,
        password: "demo-only-dmitri-planner",
        pin: None,
    },
    DemoLogin {
        user: "esme",
        role: Role::Counter,
        password: "demo-only-esme-counter",
        pin: Some("2468"),
    },
    DemoLogin {
        user: "farid",
        role: Role::Counter,
        password: "demo-only-farid-counter",
        pin: Some("1357"),
    },
];

fn display_name(user: &str) -> String {
    super::PEOPLE
        .iter()
        .find(|(u, _)| *u == user)
        .map_or_else(|| user.to_string(), |(_, name)| (*name).to_string())
}

/// Creates the demo users at the demo site, skipping any that exist; returns how many it made.
pub async fn create_demo_users(store: &dyn Store, site: &Site) -> anyhow::Result<usize> {
    let mut made = 0;
    for login in DEMO_LOGINS {
        let name = UserName::parse(login.user).map_err(anyhow::Error::msg)?;
        if store.user(&name).await?.is_some() {
            continue;
        }
        let password = secret::hash(Secret::new(login.password)).await?;
        let pin = match login.pin {
            Some(p) => Some(secret::hash(Secret::new(p)).await?),
            None => None,
        };
        let audit =
            AuditEvent::now(Actor::System, Action::UserCreated, name.as_str()).at_site(site.id);
        store
            .create_user(
                NewUser {
                    display_name: display_name(login.user),
                    name,
                    password,
                    pin,
                    roles: vec![(site.id, login.role)],
                },
                audit,
            )
            .await?;
        made += 1;
    }
    Ok(made)
}

/// Returns the note printed when the demo starts: every demo sign-in.
pub fn login_note() -> String {
    let mut note = format!(
        "Demo site {} (Kestrel Lane Supply, Northgate). DEMO-ONLY sign-ins (published, for this demo database only):\n",
        super::DEMO_SITE
    );
    for l in DEMO_LOGINS {
        let mut line = format!(
            "  {:<8} {:<18} password {:<28}",
            l.user,
            l.role.label(),
            l.password
        );
        if let Some(pin) = l.pin {
            let _ = write!(line, " phone PIN {pin}");
        }
        note.push_str(line.trim_end());
        note.push('\n');
    }
    note.push_str("Cookies are sent without the Secure flag here: keep the demo on 127.0.0.1.");
    note
}

/// Counters who hold today's runs on the demo site, in run order.
pub const DEMO_COUNTERS: [&str; 2] = ["esme", "farid"];
/// Minutes each demo counter has for counting today.
const DEMO_MINUTES: u32 = 120;

/// Builds today's count list on the demo site if there is none yet, and gives its runs
/// to the demo counters, so their phones have work the moment they sign in. Returns the
/// number of tasks of today's list.
pub async fn todays_list(store: &dyn Store, site: &Site) -> anyhow::Result<usize> {
    use crate::planning::plan::{Capacity, Fill};
    let day = site.time_zone.today();
    if let Some(list) = store.count_list(site.id, day).await? {
        return Ok(list.tasks.len());
    }
    let capacity = Capacity {
        counters: DEMO_COUNTERS.len() as u32,
        minutes: DEMO_MINUTES,
    };
    let list =
        crate::planning::service::build(store, site, day, capacity, Fill::Level, false).await?;
    for run in &list.runs {
        if let Some(who) = DEMO_COUNTERS.get(run.run as usize - 1) {
            store
                .hold_run(
                    site.id,
                    day,
                    run.run,
                    Some(crate::accounts::UserName::parse(who).map_err(anyhow::Error::msg)?),
                )
                .await?;
        }
    }
    Ok(list.tasks.len())
}
