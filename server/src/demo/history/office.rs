//! The demo site's office work: the policy the fictional site runs (how often each
//! class is counted, automatic adjustment of small variances, the planner's lead times
//! by item group) and the inventory manager's decisions on differences, each through
//! the same `Store` operations the pages and the API use.

use crate::accounts::audit::{Action, Actor, AuditEvent};
use crate::accounts::{User, UserName};
use crate::accuracy::inputs::{InputTarget, LeadTimes, NewPlannerInput};
use crate::master::Site;
use crate::review::Decider;
use crate::review::store::{DifferenceFilter, DifferenceRow, NewDecision};
use crate::store::Store;
use crate::time::Timestamp;
use rand::Rng;
use rand_chacha::ChaCha8Rng;

/// Counts per year of classes A, B and C at the demo site: A items twice a month, so
/// the record-error growth of the busiest items can be fitted within the history.
pub const DEMO_PER_YEAR: [u32; 3] = [26, 6, 2];
/// Share of settled differences the manager approves; the rest are rejected for an
/// investigation (invented rates for a site fixing its records).
const P_APPROVE: f64 = 0.85;
/// Most differences the manager looks at in one sitting.
const MAX_REVIEW_ROWS: usize = 1_000;

/// The planner's lead times by item group: (group, lead time days, its sd, review days).
/// Invented figures for the fictional suppliers.
pub const GROUP_LEAD_TIMES: &[(&str, f64, f64, f64)] = &[
    ("fasteners", 5.0, 1.0, 5.0),
    ("tools", 10.0, 3.0, 5.0),
    ("electrical", 7.0, 2.0, 5.0),
    ("cleaning", 4.0, 1.0, 5.0),
    ("safety", 8.0, 2.5, 5.0),
    ("adhesives", 6.0, 1.5, 5.0),
    ("batteries", 12.0, 4.0, 10.0),
    ("paint", 9.0, 2.0, 10.0),
];

/// Investigation notes the manager writes on a rejection (invented wording).
const REJECT_NOTES: &[&str] = &[
    "Stock may be in the overflow bay: check before adjusting.",
    "Delivery note disputed with the supplier; hold until it is answered.",
    "Ask the picker on the morning shift about the last order.",
];

/// Sets the demo site's policy at `at`, the start of its counting history: the
/// planning frequencies, automatic adjustment of settled variances within tolerance,
/// and the planner's lead times for every item group.
pub async fn set_policy(
    store: &dyn Store,
    site: &Site,
    at: Timestamp,
    planner: &User,
) -> anyhow::Result<()> {
    let mut planning = store.planning_settings(site.id).await?;
    planning.frequency.per_year = DEMO_PER_YEAR;
    store.put_planning_settings(site.id, planning).await?;
    let mut netting = store.netting_settings(site.id).await?;
    netting.auto_adjust = true;
    let mut audit = AuditEvent::now(Actor::System, Action::CountPolicyChanged, "settings")
        .at_site(site.id)
        .detail(serde_json::json!({ "now": netting }));
    audit.at = at;
    store.put_netting_settings(site.id, netting, audit).await?;
    let rows = GROUP_LEAD_TIMES
        .iter()
        .map(|&(group, lead, sd, review)| NewPlannerInput {
            target: InputTarget::Group(group.to_string()),
            times: LeadTimes {
                lead_time_days: lead,
                lead_time_sd_days: sd,
                review_days: review,
                service_level: None,
            },
        })
        .collect();
    store
        .put_planner_inputs(site.id, rows, planner.name.as_str().to_string(), None)
        .await?;
    Ok(())
}

/// What the manager decided in one sitting.
#[derive(Debug, Clone, Default)]
pub struct Sitting {
    /// Approved differences (each posted one count adjustment).
    pub approved: Vec<DifferenceRow>,
    pub rejected: usize,
    /// Refused by the review's own checks (e.g. not settled yet).
    pub refused: usize,
}

/// Picks a reason code for a difference from its sign (the manager's judgement).
fn reason_for(row: &DifferenceRow, rng: &mut ChaCha8Rng) -> &'static str {
    match (row.variance < 0, rng.random_bool(0.5)) {
        (true, true) => "mis_pick",
        (true, false) => "theft_or_loss",
        (false, true) => "receiving_error",
        (false, false) => "mis_pick",
    }
}

/// The inventory manager reviews every settled difference waiting at `at` that no
/// recount still checks: most are approved with a reason code, the rest rejected with
/// an investigation note.
pub async fn review(
    store: &dyn Store,
    site: &Site,
    manager: &User,
    at: Timestamp,
    rng: &mut ChaCha8Rng,
) -> anyhow::Result<Sitting> {
    let rows = store
        .differences(
            site.id,
            DifferenceFilter {
                limit: MAX_REVIEW_ROWS,
                ..DifferenceFilter::default()
            },
            at,
        )
        .await?;
    let mut sitting = Sitting::default();
    let actor = Actor::User {
        id: manager.id,
        name: manager.name.as_str().to_string(),
    };
    for row in rows {
        if !row.settled && row.settles_at > at || row.recount == "pending" {
            continue;
        }
        let approve = rng.random_bool(P_APPROVE);
        let decision = NewDecision {
            result: row.id,
            decider: Decider {
                user: manager.id,
                inventory_manager: true,
            },
            actor: actor.clone(),
            reason: reason_for(&row, rng).to_string(),
            note: if approve {
                String::new()
            } else {
                REJECT_NOTES[rng.random_range(0..REJECT_NOTES.len())].to_string()
            },
            at,
            address: String::new(),
        };
        if approve {
            match crate::writes::approve(store, site.id, vec![decision], false)
                .await?
                .pop()
            {
                Some(Ok(_)) => sitting.approved.push(row),
                _ => sitting.refused += 1,
            }
        } else {
            match crate::writes::reject(store, site.id, decision).await? {
                Ok(_) => sitting.rejected += 1,
                Err(_) => sitting.refused += 1,
            }
        }
    }
    Ok(sitting)
}

/// Finds a demo person by name.
pub async fn person(store: &dyn Store, name: &str) -> anyhow::Result<User> {
    let parsed = UserName::parse(name).map_err(anyhow::Error::msg)?;
    store
        .user(&parsed)
        .await?
        .ok_or_else(|| anyhow::anyhow!("the demo person '{name}' does not exist"))
}
