//! The netting service's decisions, without I/O: from one pass's facts (its timing,
//! each key's lines, the key's movements around the window, the site's tolerances and
//! source timings) to the rows the store writes, and from a first result and its
//! recount to what happens next. The store (`store/sqlite/netting`) gathers the facts
//! and writes the rows inside the write transaction that brought the news (a bin marked
//! done, a late line, a late movement); see DEVELOPERS.md ("The netting service").

use super::rule::{self, CountTiming, KeyCount, KeyResult, NetMove, SourceTiming, Status, Window};
use super::tolerance::{ClassTolerances, RecountOutcome, Tolerance, Verdict, judge};
use crate::input::{bounds, text};
use crate::planning::abc::Class;
use crate::time::Timestamp;
use serde::{Deserialize, Serialize};
use std::collections::HashMap;

/// The reason code the adjustments feed gives an automatic adjustment (DESIGN §5: a small
/// variance within tolerance, posted without a review where the site allows it). It is
/// not one a reviewer picks; the feed's `automatic` says which rows are.
pub const AUTO_REASON_CODE: &str = "auto_within_tolerance";
/// What an automatic adjustment's reason says on the pages.
pub const AUTO_REASON: &str = "within tolerance, automatic";

/// Most keys one pass may net: a bin holds a few dozen keys at most, so more means bad data.
pub const MAX_KEYS_PER_PASS: usize = 10_000;

/// The stored verdict of a hit (exact or within tolerance).
pub const VERDICT_HIT: &str = "hit";
/// The stored verdict of a variance outside its class's tolerance.
pub const VERDICT_OUT: &str = "out_of_tolerance";

/// A site's netting policy: tolerance per class and the review limits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct NettingSettings {
    pub tolerances: ClassTolerances,
    /// Post small within-tolerance variances without a review.
    pub auto_adjust: bool,
    /// Above this absolute adjustment value only an inventory manager may approve.
    pub manager_value_minor: i64,
    /// Bulk approval is offered only below this absolute value.
    pub bulk_value_minor: i64,
}

impl Default for NettingSettings {
    /// Returns the default tolerances (A exact, B 2 %, C 5 %: common practice, no
    /// source), no automatic adjustment, a manager above 500.00 and bulk below 50.00
    /// (round figures of ours, no source).
    fn default() -> Self {
        Self {
            tolerances: ClassTolerances::default(),
            auto_adjust: false,
            manager_value_minor: 50_000,
            bulk_value_minor: 5_000,
        }
    }
}

impl NettingSettings {
    /// Checks the settings: no limit may be negative.
    pub fn check(&self) -> Result<(), String> {
        for (class, t) in [
            ("a", self.tolerances.a),
            ("b", self.tolerances.b),
            ("c", self.tolerances.c),
        ] {
            t.check().map_err(|e| format!("tolerances.{class}: {e}"))?;
        }
        for (name, v) in [
            ("manager_value_minor", self.manager_value_minor),
            ("bulk_value_minor", self.bulk_value_minor),
        ] {
            bounds::check_at_most(name, v, bounds::MAX_MONEY_MINOR, "minor units")?;
        }
        Ok(())
    }

    /// Returns the tolerance of an item's class; an item not yet classified is held to
    /// class A's, the strictest, so an unknown item never passes more easily.
    pub fn tolerance_for(&self, class: Option<Class>) -> Tolerance {
        self.tolerances.for_class(class.unwrap_or(Class::A))
    }
}

/// One movement source's timing, as stored and on the wire.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SourceTimingRow {
    pub source: String,
    pub uncertainty_ms: i64,
    pub posting_lag_ms: i64,
}

/// Most sources or reason codes one settings request may carry.
pub const MAX_POLICY_ROWS: usize = 200;

/// Checks a list of source timings: names given once, non-empty, limits not negative.
pub fn check_sources(rows: &[SourceTimingRow]) -> Result<(), String> {
    if rows.len() > MAX_POLICY_ROWS {
        return Err(format!(
            "{} sources; send at most {MAX_POLICY_ROWS}",
            rows.len()
        ));
    }
    let mut seen = std::collections::HashSet::new();
    for (i, r) in rows.iter().enumerate() {
        let name =
            text::check(text::Kind::Name, &r.source).map_err(|e| format!("[{i}].source: {e}"))?;
        if name.is_empty() || name != r.source {
            return Err(format!(
                "[{i}].source must be 1 to {} characters without spaces around it",
                text::MAX_NAME_CHARS
            ));
        }
        if !seen.insert(r.source.as_str()) {
            return Err(format!("[{i}].source '{}' is given twice", r.source));
        }
        for (field, v) in [
            ("uncertainty_ms", r.uncertainty_ms),
            ("posting_lag_ms", r.posting_lag_ms),
        ] {
            bounds::check_at_most(field, v, bounds::MAX_SOURCE_TIMING_MS, "ms")
                .map_err(|e| format!("[{i}].{e}"))?;
        }
    }
    Ok(())
}

/// A reason code a reviewer picks from.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ReasonCode {
    pub code: String,
    pub label: String,
}

/// Checks a list of reason codes: codes given once, short, of letters, digits, `_` or `-`,
/// and none the code the feed gives automatic adjustments.
pub fn check_reason_codes(rows: &[ReasonCode]) -> Result<(), String> {
    if rows.len() > MAX_POLICY_ROWS {
        return Err(format!(
            "{} reason codes; send at most {MAX_POLICY_ROWS}",
            rows.len()
        ));
    }
    let mut seen = std::collections::HashSet::new();
    for (i, r) in rows.iter().enumerate() {
        let ok = (1..=32).contains(&r.code.len())
            && r.code
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-');
        if !ok {
            return Err(format!(
                "[{i}].code '{}' must be 1 to 32 letters, digits, '_' or '-'",
                r.code
            ));
        }
        if r.code == AUTO_REASON_CODE {
            return Err(format!(
                "[{i}].code '{}' is reserved for automatic adjustments; pick another",
                r.code
            ));
        }
        let label =
            text::check(text::Kind::Label, &r.label).map_err(|e| format!("[{i}].label: {e}"))?;
        if label.is_empty() {
            return Err(format!(
                "[{i}].label must be 1 to {} characters",
                text::MAX_LABEL_CHARS
            ));
        }
        if !seen.insert(r.code.as_str()) {
            return Err(format!("[{i}].code '{}' is given twice", r.code));
        }
    }
    Ok(())
}

/// The site's sources by name; a source with no row has uncertainty and lag 0.
#[derive(Debug, Clone, Default)]
pub struct Sources {
    by_name: HashMap<String, SourceTiming>,
}

impl Sources {
    /// Builds the lookup from stored rows.
    pub fn new(rows: &[SourceTimingRow]) -> Self {
        Self {
            by_name: rows
                .iter()
                .map(|r| {
                    (
                        r.source.clone(),
                        SourceTiming {
                            uncertainty_ms: r.uncertainty_ms,
                            posting_lag_ms: r.posting_lag_ms,
                        },
                    )
                })
                .collect(),
        }
    }

    /// Returns a source's event-time uncertainty, ms (0 for a source with no row).
    pub fn uncertainty_ms(&self, source: &str) -> i64 {
        self.by_name.get(source).map_or(0, |t| t.uncertainty_ms)
    }

    /// Returns the widest uncertainty of any source, ms.
    pub fn max_uncertainty_ms(&self) -> i64 {
        self.by_name
            .values()
            .map(|t| t.uncertainty_ms)
            .max()
            .unwrap_or(0)
    }

    /// Returns every source's timing.
    pub fn timings(&self) -> Vec<SourceTiming> {
        self.by_name.values().copied().collect()
    }
}

/// One movement of a key as the ledger holds it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct LedgerMove {
    pub id: i64,
    pub uid: String,
    pub event_at: Timestamp,
    pub delta: i64,
    pub kind: String,
    pub source: String,
}

/// The facts of one key of a pass, gathered by the store.
#[derive(Debug, Clone)]
pub struct KeyFacts {
    pub item_id: i64,
    pub sku: String,
    pub lot: String,
    pub class: Option<Class>,
    pub unit_cost_minor: i64,
    pub count: KeyCount,
    /// The sum of every movement of the key stamped before `history_from`.
    pub balance_before: i64,
    /// Every movement of the key stamped at or after `history_from`.
    pub moves: Vec<LedgerMove>,
}

/// A movement of the window in the evidence, with what a manager needs to find it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct EvidenceMove {
    pub id: i64,
    pub uid: String,
    pub event_at: Timestamp,
    pub delta: i64,
    pub kind: String,
    pub source: String,
    pub uncertainty_ms: i64,
}

/// Why a result is what it is: stored as the `evidence` JSON of `count_result`.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct Evidence {
    pub sku: String,
    pub timing: CountTiming,
    /// The instant from which movements were read one by one.
    pub history_from: Timestamp,
    /// The sum of the movements stamped before `history_from`.
    pub balance_before: i64,
    /// The netting itself: window, opening, feasible states, f*, variance, status.
    pub netting: KeyResult,
    /// The movements inside the window, in event order (ties by id).
    pub moves: Vec<EvidenceMove>,
    /// The tolerance the variance was judged against (its class's, or A's when unclassified).
    pub tolerance: Tolerance,
    pub judged: Verdict,
    /// The last instant a movement within its source's allowed lag could change the result.
    pub settles_at: Timestamp,
}

impl Evidence {
    /// Reads a result's stored evidence (`count_result.evidence`); the one reader of it.
    pub fn parse(json: &str) -> Result<Self, String> {
        serde_json::from_str(json).map_err(|e| format!("the stored evidence does not parse: {e}"))
    }

    /// Returns the index of `f*` in the book states: the stored one when it points at a
    /// state equal to `f_star`, else the last state equal to `f_star`.
    pub fn f_star_index(&self, f_star: i64) -> Option<usize> {
        let states = &self.netting.states;
        match states.get(self.netting.nearest) {
            Some(s) if s.qty == f_star => Some(self.netting.nearest),
            _ => states.iter().rposition(|s| s.qty == f_star),
        }
    }
}

/// Holds a netted key for review: out of tolerance whatever its variance, because its
/// pass's times cannot be trusted (`reason`, in plain words). A stretched window must
/// never make a hit (DESIGN §6).
pub fn hold(n: &mut Netted, reason: &str) {
    if matches!(n.evidence.judged, Verdict::Held { .. }) {
        return;
    }
    let variance = Box::new(n.evidence.judged.clone());
    n.evidence.judged = Verdict::Held {
        reason: reason.to_string(),
        variance,
    };
    n.verdict = VERDICT_OUT;
}

/// One key of a pass, netted and judged: what the store writes as a `count_result` row.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Netted {
    pub item_id: i64,
    pub lot: String,
    pub class: Option<Class>,
    pub unit_cost_minor: i64,
    pub counted: i64,
    pub f_star: i64,
    pub variance: i64,
    pub status: Status,
    /// [`VERDICT_HIT`] or [`VERDICT_OUT`].
    pub verdict: &'static str,
    pub counted_at: Timestamp,
    pub window: Window,
    pub settles_at: Timestamp,
    pub evidence: Evidence,
}

/// Returns the stored text of a netting status.
pub fn status_text(s: Status) -> &'static str {
    match s {
        Status::NoMovesInWindow => "no_moves_in_window",
        Status::MatchesState => "matches_state",
        Status::MatchesNoState => "matches_no_state",
        Status::FoundStock => "found_stock",
        Status::MissingFromBin => "missing_from_bin",
    }
}

/// Returns the instant from which a key's movements must be read one by one: the
/// earliest any key's window may start, widened by the widest source uncertainty.
pub fn history_from(timing: &CountTiming, sources: &Sources) -> Timestamp {
    Window {
        start: timing.window_start(),
        end: timing.window_start(),
    }
    .history_from(sources.max_uncertainty_ms())
}

/// Nets and judges one key. `None` when the rule gives no result (a key not scanned
/// and zero throughout the bin's window, or a bin not marked done).
pub fn net_one(
    timing: &CountTiming,
    facts: &KeyFacts,
    sources: &Sources,
    settings: &NettingSettings,
) -> Option<Netted> {
    let moves: Vec<NetMove> = facts
        .moves
        .iter()
        .map(|m| NetMove {
            id: rule::MoveId(m.id),
            event_at: m.event_at,
            delta: m.delta,
            uncertainty_ms: sources.uncertainty_ms(&m.source),
        })
        .collect();
    let result = rule::net_key(timing, facts.count, facts.balance_before, &moves).ok()?;
    let settles_at = rule::settles_after(timing, &sources.timings())?;
    let tolerance = settings.tolerance_for(facts.class);
    let judged = judge(
        result.variance,
        result.f_star,
        facts.unit_cost_minor,
        &tolerance,
    );
    let by_id: HashMap<i64, &LedgerMove> = facts.moves.iter().map(|m| (m.id, m)).collect();
    let evidence_moves = result
        .moves_in_window
        .iter()
        .filter_map(|id| by_id.get(&id.0))
        .map(|m| EvidenceMove {
            id: m.id,
            uid: m.uid.clone(),
            event_at: m.event_at,
            delta: m.delta,
            kind: m.kind.clone(),
            source: m.source.clone(),
            uncertainty_ms: sources.uncertainty_ms(&m.source),
        })
        .collect();
    let counted_at = match facts.count {
        KeyCount::Scanned { last, .. } => last,
        KeyCount::NotScanned => timing.done.unwrap_or(timing.first_scan),
    };
    Some(Netted {
        item_id: facts.item_id,
        lot: facts.lot.clone(),
        class: facts.class,
        unit_cost_minor: facts.unit_cost_minor,
        counted: result.counted,
        f_star: result.f_star,
        variance: result.variance,
        status: result.status,
        verdict: if judged.is_hit() {
            VERDICT_HIT
        } else {
            VERDICT_OUT
        },
        counted_at,
        window: result.window,
        settles_at,
        evidence: Evidence {
            sku: facts.sku.clone(),
            timing: *timing,
            history_from: history_from(timing, sources),
            balance_before: facts.balance_before,
            moves: evidence_moves,
            tolerance,
            judged,
            settles_at,
            netting: result,
        },
    })
}

/// Says whether a new netting differs from the stored one in anything but bookkeeping
/// (ids, watermark, times of computing): only then is a superseding row written, so
/// news that changes nothing leaves the history alone.
pub fn differs(stored: &Evidence, fresh: &Evidence) -> bool {
    let key = |e: &Evidence| {
        (
            e.netting.clone(),
            e.moves
                .iter()
                .map(|m| (m.uid.clone(), m.event_at, m.delta))
                .collect::<Vec<_>>(),
            e.tolerance,
            e.settles_at,
        )
    };
    // Movement ids follow arrival order, so compare the netting without them.
    let strip = |mut k: (
        KeyResult,
        Vec<(String, Timestamp, i64)>,
        Tolerance,
        Timestamp,
    )| {
        k.0.moves_in_window.clear();
        for s in &mut k.0.states {
            s.moves.clear();
        }
        k
    };
    strip(key(stored)) != strip(key(fresh))
}

/// Says whether a result is adjusted without a review (DESIGN §5), given that the store
/// found it current, settled, unreviewed, not a recount's and not waiting for one, and
/// its site allowing it: the variance is not 0 and within its class's tolerance, both as
/// judged when it was netted and under the site's tolerance now (a tightened policy
/// stops older results from passing on the old limits).
pub fn adjusts_automatically(
    settings: &NettingSettings,
    class: Option<Class>,
    unit_cost_minor: i64,
    evidence: &Evidence,
) -> bool {
    let n = &evidence.netting;
    let now = judge(
        n.variance,
        n.f_star,
        unit_cost_minor,
        &settings.tolerance_for(class),
    );
    settings.auto_adjust && n.variance != 0 && evidence.judged.is_hit() && now.is_hit()
}

/// Where a recount task goes in the day's list.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Placement {
    /// Into this run, whose holder is not the first counter.
    Run(u32),
    /// Into a run with no holder (every held run is the first counter's, or there is no
    /// other counter); the warning says so on the list.
    Unassigned { run: u32, warning: String },
}

/// Chooses the run for a recount: a run held by someone other than the first counter
/// (the one with the fewest tasks), else a run held by no one. `runs` is
/// `(run, holder, open tasks)`; `free_run` is the number a new empty run would get.
pub fn place_recount(runs: &[(u32, String, u32)], first_counter: &str, free_run: u32) -> Placement {
    let other = runs
        .iter()
        .filter(|(_, h, _)| !h.is_empty() && h != first_counter)
        .min_by_key(|(r, _, n)| (*n, *r));
    if let Some((run, _, _)) = other {
        return Placement::Run(*run);
    }
    let run = runs
        .iter()
        .filter(|(_, h, _)| h.is_empty())
        .map(|(r, _, _)| *r)
        .min()
        .unwrap_or(free_run);
    Placement::Unassigned {
        run,
        warning: format!(
            "recounts in run {run} have no counter other than {first_counter}: give run \
             {run} to another counter"
        ),
    }
}

/// What a recount does to the first result.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct RecountEffect {
    pub outcome: RecountOutcome,
    /// The stored `recount_outcome` text of the first result.
    pub outcome_text: &'static str,
    /// The first result's verdict afterwards.
    pub verdict: &'static str,
    /// The first count was wrong (logged against it).
    pub first_count_wrong: bool,
    /// A supervisor must count the bin.
    pub supervisor_count: bool,
}

/// Applies the recount rule (DESIGN §5) to a first result and its recount.
pub fn recount_effect(
    first: &KeyResult,
    recount: &KeyResult,
    unit_cost_minor: i64,
    tolerance: &Tolerance,
) -> RecountEffect {
    let outcome = super::tolerance::recount_outcome(first, recount, unit_cost_minor, tolerance);
    match outcome {
        RecountOutcome::DifferenceConfirmed => RecountEffect {
            outcome,
            outcome_text: "confirmed",
            verdict: VERDICT_OUT,
            first_count_wrong: false,
            supervisor_count: false,
        },
        RecountOutcome::BookRight => RecountEffect {
            outcome,
            outcome_text: "book_right",
            verdict: VERDICT_HIT,
            first_count_wrong: true,
            supervisor_count: false,
        },
        RecountOutcome::SupervisorCount => RecountEffect {
            outcome,
            outcome_text: "supervisor_count",
            verdict: VERDICT_OUT,
            first_count_wrong: false,
            supervisor_count: true,
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_recount_goes_to_the_least_busy_other_counter() {
        let runs = vec![
            (1, "ada".to_string(), 3),
            (2, "bruno".to_string(), 5),
            (3, "chiara".to_string(), 2),
        ];
        assert_eq!(place_recount(&runs, "chiara", 4), Placement::Run(1));
    }

    #[test]
    fn a_recount_with_no_other_counter_waits_unassigned_with_a_warning() {
        let runs = vec![(1, "ada".to_string(), 3)];
        match place_recount(&runs, "ada", 2) {
            Placement::Unassigned { run, warning } => {
                assert_eq!(run, 2);
                assert!(
                    warning.contains("run 2") && warning.contains("ada"),
                    "{warning}"
                );
                // The same words for every recount of the run, so the list says it once
                // however many recounts wait there.
                assert_eq!(
                    place_recount(&runs, "ada", 2),
                    Placement::Unassigned { run, warning }
                );
            }
            p => panic!("expected unassigned, got {p:?}"),
        }
        let runs = vec![(1, "ada".to_string(), 3), (2, String::new(), 0)];
        assert!(matches!(
            place_recount(&runs, "ada", 3),
            Placement::Unassigned { run: 2, .. }
        ));
    }

    /// Nets a count of `counted` against a book of `book` with no moves, class `class`.
    fn netted(counted: i64, book: i64, class: Option<Class>, settings: &NettingSettings) -> Netted {
        netted_over(counted, book, Vec::new(), class, settings)
    }

    /// Nets a count of `counted` (first scan at 10 s, last at 15 s, done at 20 s, ±0.5 s)
    /// against a book of `book` before 10 s and the movements `moves`.
    fn netted_over(
        counted: i64,
        book: i64,
        moves: Vec<LedgerMove>,
        class: Option<Class>,
        settings: &NettingSettings,
    ) -> Netted {
        let timing = CountTiming {
            first_scan: Timestamp(10_000),
            done: Some(Timestamp(20_000)),
            clock_uncertainty_ms: 500,
        };
        let facts = KeyFacts {
            item_id: 1,
            sku: "S1".into(),
            lot: String::new(),
            class,
            unit_cost_minor: 450,
            count: KeyCount::Scanned {
                qty: counted,
                last: Timestamp(15_000),
            },
            balance_before: book,
            moves,
        };
        net_one(&timing, &facts, &Sources::default(), settings).expect("a scanned key nets")
    }

    /// The stored evidence of a netted key reads back through its one parser, with the
    /// feasible states, f* and the posting instant the review shows and posts from.
    #[test]
    fn a_keys_stored_evidence_reads_back_with_f_star_and_its_posting_instant() {
        // A count of 6 while a pick of 3 happened: F = {10, 7}, f* = 7, variance −1,
        // posted at the pick's instant.
        let pick = LedgerMove {
            id: 41,
            uid: "p-41".into(),
            event_at: Timestamp(12_000),
            delta: -3,
            kind: "pick".into(),
            source: "host".into(),
        };
        let n = netted_over(6, 10, vec![pick], None, &NettingSettings::default());
        let e = Evidence::parse(&serde_json::to_string(&n.evidence).unwrap()).unwrap();
        assert_eq!(e, n.evidence);
        assert_eq!(e.netting.opening, 10);
        let qtys: Vec<i64> = e.netting.states.iter().map(|s| s.qty).collect();
        assert_eq!(qtys, [10, 7]);
        assert_eq!(
            e.netting.states[1].moves,
            [crate::netting::rule::MoveId(41)]
        );
        assert_eq!(e.f_star_index(7), Some(1));
        assert_eq!(e.f_star_index(5), None);
        assert_eq!(
            e.netting.post_at,
            e.netting.adjustment().expect("a variance").event_at
        );
        let bad = Evidence::parse("[").unwrap_err();
        assert!(bad.contains("does not parse"), "{bad}");
    }

    #[test]
    fn only_a_non_zero_variance_within_tolerance_is_adjusted_automatically_where_allowed() {
        // Class C 5 % of f* (common practice, no source): 2 units of 40.
        let on = NettingSettings {
            auto_adjust: true,
            ..NettingSettings::default()
        };
        let c = Some(Class::C);
        let adjusts = |n: &Netted, s: &NettingSettings| {
            adjusts_automatically(s, n.class, n.unit_cost_minor, &n.evidence)
        };
        assert!(adjusts(&netted(39, 40, c, &on), &on));
        assert!(adjusts(&netted(42, 40, c, &on), &on));
        assert!(
            !adjusts(&netted(39, 40, c, &on), &NettingSettings::default()),
            "switch off"
        );
        assert!(!adjusts(&netted(40, 40, c, &on), &on), "variance 0");
        assert!(!adjusts(&netted(37, 40, c, &on), &on), "3 of 40 is out");
        // Unclassified is held to class A's: exact.
        assert!(!adjusts(&netted(39, 40, None, &on), &on));
        // Judged a hit when netted, but the site's class C is exact now: not adjusted.
        let mut tightened = on;
        tightened.tolerances.c = Tolerance::EXACT;
        let n = netted(39, 40, c, &on);
        assert!(n.evidence.judged.is_hit());
        assert!(!adjusts(&n, &tightened));
    }

    #[test]
    fn an_unknown_source_has_no_uncertainty() {
        let s = Sources::new(&[SourceTimingRow {
            source: "host".into(),
            uncertainty_ms: 2_000,
            posting_lag_ms: 900_000,
        }]);
        assert_eq!(s.uncertainty_ms("host"), 2_000);
        assert_eq!(s.uncertainty_ms("scanner"), 0);
        assert_eq!(s.max_uncertainty_ms(), 2_000);
    }

    #[test]
    fn settings_refuse_negative_limits_and_repeated_names() {
        let mut s = NettingSettings::default();
        assert!(s.check().is_ok());
        s.tolerances.b.units = Some(-1);
        assert!(s.check().unwrap_err().contains("tolerances.b"));
        let rows = vec![
            SourceTimingRow {
                source: "host".into(),
                uncertainty_ms: 0,
                posting_lag_ms: 0,
            };
            2
        ];
        assert!(check_sources(&rows).unwrap_err().contains("twice"));
        let codes = vec![ReasonCode {
            code: "bad code".into(),
            label: "x".into(),
        }];
        assert!(check_reason_codes(&codes).is_err());
        // The feed tells automatic rows by this code too: a reviewer's code may not take it.
        let codes = vec![ReasonCode {
            code: AUTO_REASON_CODE.into(),
            label: "Small and fine".into(),
        }];
        assert!(
            check_reason_codes(&codes)
                .unwrap_err()
                .contains("reserved for automatic")
        );
    }
}
