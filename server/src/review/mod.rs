//! The inventory manager's review of count differences (DESIGN §5): the list
//! of out-of-tolerance results waiting for a decision, the evidence behind
//! each, approvals that post one count-adjustment movement, rejections that
//! open an investigation, and the feed of posted adjustments for the host.
//!
//! This file holds the rules of a decision as pure functions (who may decide
//! what, and when); `evidence` reads a result's stored evidence, `timeline`
//! draws it, `store` names what the review needs from storage, `pages` and
//! `routes` are the HTTP side.

pub mod decide;
pub mod pages;
pub mod routes;
pub mod store;
pub mod timeline;

use crate::accounts::{Role, UserId};
use crate::time::Timestamp;
use serde::Serialize;

/// Roles that may decide on a difference (the value rule narrows approvals
/// above the site's threshold to inventory managers).
pub const DECIDERS: &[Role] = &[Role::InventoryManager, Role::Admin];

/// Most differences one list page shows.
pub const MAX_LIST_ROWS: usize = 500;
/// Most differences one bulk approval may carry.
pub const MAX_BULK_IDS: usize = 200;
/// Longest investigation note, in characters.
pub const MAX_NOTE_CHARS: usize = crate::input::text::MAX_NOTE_CHARS;
/// Most adjustments one feed page returns.
pub const MAX_FEED_ROWS: usize = 1_000;

pub use crate::netting::service::{AUTO_REASON, AUTO_REASON_CODE};

/// Reason codes a site starts with when it has none of its own: our own wording.
pub const DEFAULT_REASONS: &[(&str, &str)] = &[
    ("damaged", "Damaged stock taken out"),
    ("mis_pick", "Mis-pick found"),
    ("theft_or_loss", "Theft or loss"),
    ("receiving_error", "Receiving error"),
    ("unit_of_measure", "Unit of measure error"),
];

/// A site's review policy.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct ReviewPolicy {
    /// Above this absolute value only an inventory manager may approve.
    pub manager_value_minor: i64,
    /// Bulk approval only below this absolute value.
    pub bulk_value_minor: i64,
}

impl Default for ReviewPolicy {
    /// Returns the limits of the netting settings' defaults, which a site keeps
    /// until it stores its own.
    fn default() -> Self {
        let s = crate::netting::service::NettingSettings::default();
        Self {
            manager_value_minor: s.manager_value_minor,
            bulk_value_minor: s.bulk_value_minor,
        }
    }
}

/// One reason a reviewer may give: the same codes the netting policy routes keep.
pub use crate::netting::service::ReasonCode;

/// Returns the reason codes a site starts with.
pub fn default_reasons() -> Vec<ReasonCode> {
    DEFAULT_REASONS
        .iter()
        .map(|(code, label)| ReasonCode {
            code: (*code).into(),
            label: (*label).into(),
        })
        .collect()
}

/// Returns the absolute value of a variance at a unit cost, in minor units.
pub fn value_minor(variance: i64, unit_cost_minor: i64) -> i64 {
    let v = i128::from(variance).abs() * i128::from(unit_cost_minor);
    i64::try_from(v).unwrap_or(i64::MAX)
}

/// Writes minor units as a decimal amount with two places, e.g. `-12.05`.
pub fn money(minor: i64) -> String {
    let sign = if minor < 0 { "-" } else { "" };
    let m = minor.unsigned_abs();
    format!("{sign}{}.{:02}", m / 100, m % 100)
}

/// Parses a decimal amount (`12`, `12.5`, `12.05`) into minor units.
pub fn parse_money(text: &str) -> Result<i64, String> {
    let t = text.trim();
    let bad = || format!("'{text}' is not an amount like 120 or 120.50");
    let (whole, frac) = t.split_once('.').unwrap_or((t, ""));
    if whole.is_empty() || !whole.chars().all(|c| c.is_ascii_digit()) || frac.len() > 2 {
        return Err(bad());
    }
    if !frac.chars().all(|c| c.is_ascii_digit()) {
        return Err(bad());
    }
    let whole: i64 = whole.parse().map_err(|_| bad())?;
    let frac: i64 = format!("{frac:0<2}").parse().map_err(|_| bad())?;
    whole
        .checked_mul(100)
        .and_then(|w| w.checked_add(frac))
        .ok_or_else(bad)
}

/// What a decision is checked against: the result as stored now.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Candidate {
    pub id: i64,
    pub verdict: String,
    /// A newer row (a re-net) replaced this one.
    pub superseded_by: Option<i64>,
    /// The decision already taken on it, if any.
    pub decided: Option<String>,
    pub settled: bool,
    pub settles_at: Timestamp,
    pub value_minor: i64,
    /// A recount (or supervisor count) of it is not done yet.
    pub recount_pending: bool,
    /// Everyone who counted the bin for this result (its pass and recounts).
    pub counters: Vec<UserId>,
}

/// Who decides, and with which roles at the site.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Decider {
    pub user: UserId,
    pub inventory_manager: bool,
}

/// What is being decided.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Decision {
    Approve { bulk: bool },
    Reject,
}

/// The verdict of a result that waits for review.
pub const OUT_OF_TOLERANCE: &str = "out_of_tolerance";

/// Why a decision was refused. Each says what to do instead.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum Refusal {
    #[error("difference {0} does not exist at this site")]
    NotFound(i64),
    #[error(
        "difference {id} was already {decision}: a decision is taken once (post a \
         correcting movement if it was wrong)"
    )]
    AlreadyDecided { id: i64, decision: String },
    #[error(
        "difference {id} was re-netted and replaced by difference {by}: review the current one"
    )]
    Superseded { id: i64, by: i64 },
    #[error("result {id} is not a difference waiting for review (it is '{verdict}')")]
    NotADifference { id: i64, verdict: String },
    #[error(
        "difference {id} is provisional until {settles_at}: late movements may still change \
         it, so decide once it has settled"
    )]
    Provisional { id: i64, settles_at: Timestamp },
    #[error(
        "difference {0} waits for its recount: a difference is decided once a second count \
         has confirmed it"
    )]
    RecountPending(i64),
    #[error("you counted this bin, so someone else must review difference {0}")]
    OwnCount(i64),
    #[error(
        "difference {id} is worth {value} (over the site's limit of {limit}): only an \
         inventory manager may approve it"
    )]
    NeedsManager {
        id: i64,
        value: String,
        limit: String,
    },
    #[error(
        "difference {id} is worth {value}, not below the bulk limit of {limit}: approve it \
         on its own page"
    )]
    AboveBulkLimit {
        id: i64,
        value: String,
        limit: String,
    },
    #[error(
        "difference {0} has no posting instant in its evidence: it must be netted again \
         before it can be approved"
    )]
    NoPostingInstant(i64),
    #[error("reason '{0}' is not one of this site's reason codes")]
    UnknownReason(String),
    #[error(
        "a rejection needs a note saying what to investigate (at most {MAX_NOTE_CHARS} characters)"
    )]
    NoteNeeded,
    #[error("note: {0}")]
    BadNote(String),
}

impl Refusal {
    /// Tells whether the refusal is about who decides (403) rather than the
    /// state of the difference (409) or the form (400).
    pub fn kind(&self) -> RefusalKind {
        match self {
            Refusal::NotFound(_) => RefusalKind::NotFound,
            Refusal::OwnCount(_) | Refusal::NeedsManager { .. } => RefusalKind::Forbidden,
            Refusal::UnknownReason(_) | Refusal::NoteNeeded | Refusal::BadNote(_) => {
                RefusalKind::BadForm
            }
            _ => RefusalKind::Conflict,
        }
    }
}

/// The class of a refusal, for its HTTP status.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RefusalKind {
    NotFound,
    Forbidden,
    Conflict,
    BadForm,
}

/// Checks a decision against the rules of §5: current, out of tolerance, not
/// yet decided, settled, not the decider's own count, and for approvals the
/// value limits (manager above `manager_value_minor`; bulk only below
/// `bulk_value_minor`).
pub fn check_decision(
    c: &Candidate,
    who: &Decider,
    policy: &ReviewPolicy,
    decision: Decision,
    now: Timestamp,
) -> Result<(), Refusal> {
    if let Some(d) = &c.decided {
        return Err(Refusal::AlreadyDecided {
            id: c.id,
            decision: d.clone(),
        });
    }
    if let Some(by) = c.superseded_by {
        return Err(Refusal::Superseded { id: c.id, by });
    }
    if c.verdict != OUT_OF_TOLERANCE {
        return Err(Refusal::NotADifference {
            id: c.id,
            verdict: c.verdict.clone(),
        });
    }
    if !is_settled(c.settled, c.settles_at, now) {
        return Err(Refusal::Provisional {
            id: c.id,
            settles_at: c.settles_at,
        });
    }
    if c.recount_pending {
        return Err(Refusal::RecountPending(c.id));
    }
    if crate::accounts::check_not_own_count(who.user, c.counters.iter().copied()).is_err() {
        return Err(Refusal::OwnCount(c.id));
    }
    if let Decision::Approve { bulk } = decision {
        if bulk && c.value_minor >= policy.bulk_value_minor {
            return Err(Refusal::AboveBulkLimit {
                id: c.id,
                value: money(c.value_minor),
                limit: money(policy.bulk_value_minor),
            });
        }
        if c.value_minor > policy.manager_value_minor && !who.inventory_manager {
            return Err(Refusal::NeedsManager {
                id: c.id,
                value: money(c.value_minor),
                limit: money(policy.manager_value_minor),
            });
        }
    }
    Ok(())
}

/// Tells whether a result has settled: marked so, or its settling instant has passed.
pub fn is_settled(settled: bool, settles_at: Timestamp, now: Timestamp) -> bool {
    settled || now > settles_at
}

/// Checks and trims an investigation note.
pub fn investigation_note(text: &str) -> Result<String, Refusal> {
    match crate::input::text::check(crate::input::text::Kind::Note, text) {
        Ok(t) if !t.is_empty() => Ok(t),
        Ok(_) => Err(Refusal::NoteNeeded),
        Err(e) => Err(Refusal::BadNote(e.to_string())),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn candidate() -> Candidate {
        Candidate {
            id: 7,
            verdict: OUT_OF_TOLERANCE.into(),
            superseded_by: None,
            decided: None,
            settled: true,
            settles_at: Timestamp(1_000),
            value_minor: 5_000,
            recount_pending: false,
            counters: vec![UserId(1)],
        }
    }

    fn manager() -> Decider {
        Decider {
            user: UserId(2),
            inventory_manager: true,
        }
    }

    const APPROVE: Decision = Decision::Approve { bulk: false };
    const NOW: Timestamp = Timestamp(2_000);

    #[test]
    fn a_settled_difference_counted_by_someone_else_may_be_approved() {
        let p = ReviewPolicy::default();
        assert_eq!(
            check_decision(&candidate(), &manager(), &p, APPROVE, NOW),
            Ok(())
        );
    }

    #[test]
    fn the_counter_of_the_bin_may_not_decide_on_it() {
        let p = ReviewPolicy::default();
        let who = Decider {
            user: UserId(1),
            inventory_manager: true,
        };
        for d in [APPROVE, Decision::Reject] {
            assert_eq!(
                check_decision(&candidate(), &who, &p, d, NOW),
                Err(Refusal::OwnCount(7))
            );
        }
    }

    #[test]
    fn above_the_manager_limit_only_an_inventory_manager_approves() {
        let p = ReviewPolicy {
            manager_value_minor: 4_999,
            bulk_value_minor: 100,
        };
        let admin = Decider {
            user: UserId(3),
            inventory_manager: false,
        };
        let e = check_decision(&candidate(), &admin, &p, APPROVE, NOW).unwrap_err();
        assert_eq!(e.kind(), RefusalKind::Forbidden);
        assert!(e.to_string().contains("50.00"), "{e}");
        assert_eq!(
            check_decision(&candidate(), &manager(), &p, APPROVE, NOW),
            Ok(())
        );
        // At the limit itself an admin may still approve: "above" is strict.
        let at = ReviewPolicy {
            manager_value_minor: 5_000,
            ..p
        };
        assert_eq!(
            check_decision(&candidate(), &admin, &at, APPROVE, NOW),
            Ok(())
        );
        // Rejecting changes no record, so the value rule does not apply.
        assert_eq!(
            check_decision(&candidate(), &admin, &p, Decision::Reject, NOW),
            Ok(())
        );
    }

    #[test]
    fn bulk_approval_takes_only_differences_below_the_bulk_limit() {
        let bulk = Decision::Approve { bulk: true };
        let p = ReviewPolicy {
            manager_value_minor: 1_000_000,
            bulk_value_minor: 5_000,
        };
        assert!(matches!(
            check_decision(&candidate(), &manager(), &p, bulk, NOW),
            Err(Refusal::AboveBulkLimit { .. })
        ));
        let p = ReviewPolicy {
            bulk_value_minor: 5_001,
            ..p
        };
        assert_eq!(
            check_decision(&candidate(), &manager(), &p, bulk, NOW),
            Ok(())
        );
    }

    #[test]
    fn decided_superseded_provisional_and_hits_are_refused() {
        let p = ReviewPolicy::default();
        let cases = [
            Candidate {
                decided: Some("approved".into()),
                ..candidate()
            },
            Candidate {
                superseded_by: Some(9),
                ..candidate()
            },
            Candidate {
                settled: false,
                settles_at: Timestamp(2_000),
                ..candidate()
            },
            Candidate {
                verdict: "hit".into(),
                ..candidate()
            },
            Candidate {
                recount_pending: true,
                ..candidate()
            },
        ];
        for c in cases {
            let e = check_decision(&c, &manager(), &p, APPROVE, NOW).unwrap_err();
            assert_eq!(e.kind(), RefusalKind::Conflict, "{e}");
        }
        // Unsettled but past its instant counts as settled.
        let late = Candidate {
            settled: false,
            settles_at: Timestamp(1_999),
            ..candidate()
        };
        assert_eq!(check_decision(&late, &manager(), &p, APPROVE, NOW), Ok(()));
    }

    #[test]
    fn amounts_read_and_write_with_two_places() {
        assert_eq!(money(-1_205), "-12.05");
        assert_eq!(money(7), "0.07");
        assert_eq!(parse_money("12"), Ok(1_200));
        assert_eq!(parse_money(" 12.5 "), Ok(1_250));
        assert_eq!(parse_money("0.05"), Ok(5));
        for bad in ["", "1.234", "-3", "1,5", ".5", "x"] {
            assert!(parse_money(bad).is_err(), "{bad}");
        }
        assert_eq!(value_minor(-4, 450), 1_800);
        assert_eq!(value_minor(i64::MIN, i64::MAX), i64::MAX);
    }

    #[test]
    fn a_rejection_needs_a_note() {
        assert_eq!(investigation_note("  "), Err(Refusal::NoteNeeded));
        assert_eq!(
            investigation_note(" check the inbound dock "),
            Ok("check the inbound dock".into())
        );
        assert!(investigation_note(&"x".repeat(MAX_NOTE_CHARS + 1)).is_err());
    }
}
