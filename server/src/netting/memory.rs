//! A test-only implementation of the workflows' transaction traits over plain maps
//! (`NettingTx`, `RecountTx`, `LedgerTx`, `ReviewTx`, `SettleTx`, `AuditTx`), so netting,
//! recounts, decisions and settling run without a database; the same cases run end to
//! end against SQLite in `tests/netting.rs`, `tests/review.rs` and `tests/auto_adjust.rs`.

use super::pass::{
    self, AppliedEvent, CurrentResult, ItemFacts, ItemLot, NettingTx, NewResult, OpenTask,
    PassFacts, Sent, WrittenMove,
};
use super::recount::{DayList, NewRecountTask, Rechecked, RecountTx, RunLoad, SentResult};
use super::results::NetOutcome;
use super::rule::CountTiming;
use super::service::{Evidence, LedgerMove, NettingSettings, SourceTimingRow, VERDICT_OUT};
use super::tolerance::Verdict;
use crate::accounts::UserId;
use crate::accounts::audit::{AuditEvent, AuditTx};
use crate::ledger::{
    Inserted, ItemRef, LedgerKey, LedgerTx, MovementKind, NewMovement, StoredMovement, WatermarkTx,
};
use crate::master::SiteId;
use crate::master::codes::{BinCode, MovementUid, Sku};
use crate::netting::settle::{AutoCandidate, SettleTx};
use crate::planning::abc::Class;
use crate::review::decide::{DecisionFacts, ReviewTx};
use crate::review::store::NewDecision;
use crate::review::{Candidate, Decider, ReasonCode, ReviewPolicy};
use crate::store::error::StoreError;
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use std::cell::RefCell;
use std::collections::{BTreeMap, BTreeSet, HashMap};

const SITE: SiteId = SiteId(1);
const BIN: i64 = 1;

#[derive(Debug, Clone)]
struct Row {
    id: i64,
    pass: i64,
    key: ItemLot,
    status: String,
    verdict: String,
    recount_outcome: Option<String>,
    first_count_wrong: bool,
    unit_cost_minor: i64,
    counted: i64,
    f_star: i64,
    evidence: Evidence,
    superseded_by: Option<i64>,
    reason: String,
}

#[derive(Debug, Clone)]
struct Task {
    id: i64,
    list: i64,
    run: u32,
    supervisor: bool,
    results: Vec<i64>,
    detail: String,
    withdrawn: Option<String>,
}

/// One site, one bin; items, a ledger, passes and their lines, results and tasks.
#[derive(Default)]
struct Memory {
    items: HashMap<i64, ItemFacts>,
    sources: Vec<SourceTimingRow>,
    moves: RefCell<Vec<(ItemLot, LedgerMove)>>,
    passes: RefCell<BTreeMap<i64, PassFacts>>,
    lines: RefCell<Vec<(i64, ItemLot, i64, Timestamp)>>,
    results: RefCell<Vec<Row>>,
    tasks: RefCell<Vec<Task>>,
    lists: RefCell<Vec<(String, DayList)>>,
    /// (list, run, holder)
    runs: RefCell<Vec<(i64, u32, String)>>,
    settings: NettingSettings,
    audit: RefCell<Vec<AuditEvent>>,
    /// (result, decision, movement)
    reviews: RefCell<Vec<(i64, String, Option<i64>)>>,
    /// (result, movement) adjusted automatically
    auto: RefCell<Vec<(i64, i64)>>,
    /// Items that need a lot on every movement.
    lot_tracked: BTreeSet<i64>,
    /// Movements that have a reversal.
    reversed: RefCell<BTreeSet<i64>>,
}

fn key(item: i64) -> ItemLot {
    (item, String::new())
}

impl Memory {
    /// Items 1 (class A) and 2 (class A), 4.50 each; a host source stamping exactly.
    fn new() -> Self {
        let item = |sku: &str| ItemFacts {
            sku: sku.into(),
            unit_cost_minor: 450,
            class: Some(Class::A),
        };
        Self {
            items: [(1, item("S1")), (2, item("S2"))].into_iter().collect(),
            sources: vec![SourceTimingRow {
                source: "host".into(),
                uncertainty_ms: 0,
                posting_lag_ms: 60_000,
            }],
            ..Self::default()
        }
    }

    /// Records a movement of `delta` of `item` at `at` ms; returns what the re-net needs.
    fn movement(&self, uid: &str, item: i64, delta: i64, at: i64) -> WrittenMove {
        let mut moves = self.moves.borrow_mut();
        let id = moves.len() as i64 + 1;
        moves.push((
            key(item),
            LedgerMove {
                id,
                uid: uid.into(),
                event_at: Timestamp(at),
                delta,
                kind: if delta < 0 { "pick" } else { "receipt" }.into(),
                source: "host".into(),
            },
        ));
        WrittenMove {
            id,
            uid: uid.into(),
            bin_id: BIN,
            key: key(item),
            event_at: Timestamp(at),
            source: "host".into(),
        }
    }

    /// Adds pass `id` by `user`, scanned from `first` to `done` ms (±500 ms), against a
    /// recount task or none, with its lines `(item, qty, at)`.
    fn pass(&self, id: i64, user: &str, task: Option<i64>, lines: &[(i64, i64, i64)]) {
        let first = lines.iter().map(|l| l.2).min().unwrap_or(0);
        let last = lines.iter().map(|l| l.2).max().unwrap_or(0);
        self.passes.borrow_mut().insert(
            id,
            PassFacts {
                id,
                uid: format!("pass-{id}"),
                site: SITE,
                zone: SiteZone::UTC,
                bin_id: BIN,
                bin_code: "A-01-01-1".into(),
                task_est_s: None,
                user_name: user.into(),
                timing: CountTiming {
                    first_scan: Timestamp(first),
                    done: Some(Timestamp(last + 1_000)),
                    clock_uncertainty_ms: 500,
                },
                recount_task: task,
                withdrawn: false,
                held: None,
            },
        );
        for &(item, qty, at) in lines {
            self.lines
                .borrow_mut()
                .push((id, key(item), qty, Timestamp(at)));
        }
    }

    fn current(&self, pass: i64, item: i64) -> Row {
        self.results
            .borrow()
            .iter()
            .find(|r| r.pass == pass && r.key == key(item) && r.superseded_by.is_none())
            .cloned()
            .unwrap_or_else(|| panic!("no current result of item {item} of pass {pass}"))
    }

    fn live_tasks(&self) -> Vec<Task> {
        self.tasks
            .borrow()
            .iter()
            .filter(|t| t.withdrawn.is_none())
            .cloned()
            .collect()
    }

    fn row_ids_of(&self, pass: i64, key: &ItemLot) -> BTreeSet<i64> {
        self.results
            .borrow()
            .iter()
            .filter(|r| r.pass == pass && &r.key == key)
            .map(|r| r.id)
            .collect()
    }

    fn counted_against(&self, task: i64) -> Vec<PassFacts> {
        self.passes
            .borrow()
            .values()
            .filter(|p| p.recount_task == Some(task) && p.timing.done.is_some())
            .cloned()
            .collect()
    }

    /// Makes the list of 1970-01-01 (the day these tests count on) with runs held by
    /// `holders` in order.
    fn list(&self, holders: &[&str]) {
        self.lists.borrow_mut().push((
            "1970-01-01".into(),
            DayList {
                id: 1,
                counters: holders.len() as u32,
                warnings: Vec::new(),
            },
        ));
        for (i, h) in holders.iter().enumerate() {
            self.runs
                .borrow_mut()
                .push((1, i as u32 + 1, h.to_string()));
        }
    }

    fn net_all(&self, pass: i64) -> NetOutcome {
        pass::after_sync(
            self,
            &[AppliedEvent {
                pass_uid: format!("pass-{pass}"),
                event_uid: format!("done-{pass}"),
            }],
            Timestamp(10_000_000),
        )
        .unwrap()
    }
}

impl RecountTx for Memory {
    fn open_task_of(&self, pass: i64, supervisor: bool) -> Result<Option<(i64, i64)>, StoreError> {
        let of_pass: BTreeSet<i64> = self
            .results
            .borrow()
            .iter()
            .filter(|r| r.pass == pass)
            .map(|r| r.id)
            .collect();
        Ok(self
            .live_tasks()
            .into_iter()
            .find(|t| {
                t.supervisor == supervisor
                    && t.results.iter().any(|r| of_pass.contains(r))
                    && self.counted_against(t.id).is_empty()
            })
            .map(|t| (t.id, t.list)))
    }

    fn link_rechecks(&self, task: i64, results: &[i64]) -> Result<(), StoreError> {
        let mut tasks = self.tasks.borrow_mut();
        let t = tasks.iter_mut().find(|t| t.id == task).unwrap();
        for r in results {
            if !t.results.contains(r) {
                t.results.push(*r);
            }
        }
        Ok(())
    }

    fn rechecked(&self, task: i64) -> Result<Vec<Rechecked>, StoreError> {
        let tasks = self.tasks.borrow();
        let rows = self.results.borrow();
        let mut ids = tasks.iter().find(|t| t.id == task).unwrap().results.clone();
        ids.sort();
        Ok(ids
            .into_iter()
            .map(|id| {
                let r = &rows[id as usize - 1];
                Rechecked {
                    result: id,
                    sku: self.items[&r.key.0].sku.clone(),
                    lot: r.key.1.clone(),
                }
            })
            .collect())
    }

    fn set_task_detail(&self, task: i64, detail: &str) -> Result<(), StoreError> {
        let mut tasks = self.tasks.borrow_mut();
        tasks.iter_mut().find(|t| t.id == task).unwrap().detail = detail.into();
        Ok(())
    }

    fn bump_list(&self, _: i64) -> Result<(), StoreError> {
        Ok(())
    }

    fn day_list(&self, _: SiteId, day: &str) -> Result<Option<DayList>, StoreError> {
        Ok(self
            .lists
            .borrow()
            .iter()
            .find(|(d, _)| d == day)
            .map(|(_, l)| l.clone()))
    }

    fn create_day_list(
        &self,
        _: SiteId,
        day: &str,
        _: i64,
        _: &Sent,
    ) -> Result<DayList, StoreError> {
        let id = self.lists.borrow().len() as i64 + 1;
        let list = DayList {
            id,
            counters: 1,
            warnings: Vec::new(),
        };
        self.lists.borrow_mut().push((day.into(), list.clone()));
        self.runs.borrow_mut().push((id, 1, String::new()));
        Ok(list)
    }

    fn runs(&self, list: i64) -> Result<Vec<RunLoad>, StoreError> {
        let live = self.live_tasks();
        Ok(self
            .runs
            .borrow()
            .iter()
            .filter(|r| r.0 == list)
            .map(|(l, run, holder)| {
                let load = live
                    .iter()
                    .filter(|t| t.list == *l && t.run == *run)
                    .count();
                (*run, holder.clone(), load as u32)
            })
            .collect())
    }

    fn add_run(&self, list: i64, run: u32) -> Result<(), StoreError> {
        self.runs.borrow_mut().push((list, run, String::new()));
        for (_, l) in self.lists.borrow_mut().iter_mut() {
            if l.id == list {
                l.counters = run;
            }
        }
        Ok(())
    }

    fn sent_results(&self, results: &[i64]) -> Result<Vec<SentResult>, StoreError> {
        let rows = self.results.borrow();
        let mut ids = results.to_vec();
        ids.sort_unstable();
        ids.dedup();
        Ok(ids
            .into_iter()
            .map(|id| {
                let key = &rows[id as usize - 1].key;
                SentResult {
                    key: Rechecked {
                        result: id,
                        sku: self.items[&key.0].sku.clone(),
                        lot: key.1.clone(),
                    },
                    class: self.items[&key.0].class,
                }
            })
            .collect())
    }

    fn bin_lines(&self, _: i64) -> Result<i64, StoreError> {
        let mut sums: BTreeMap<ItemLot, i64> = BTreeMap::new();
        for (k, m) in self.moves.borrow().iter() {
            *sums.entry(k.clone()).or_default() += m.delta;
        }
        Ok(sums.values().filter(|q| **q != 0).count() as i64)
    }

    fn insert_recount_task(&self, t: &NewRecountTask) -> Result<i64, StoreError> {
        let mut tasks = self.tasks.borrow_mut();
        let id = tasks.len() as i64 + 1;
        tasks.push(Task {
            id,
            list: t.list,
            run: t.run,
            supervisor: t.supervisor,
            results: Vec::new(),
            detail: String::new(),
            withdrawn: None,
        });
        Ok(id)
    }

    fn set_list_warnings(&self, list: i64, warnings: &[String]) -> Result<(), StoreError> {
        for (_, l) in self.lists.borrow_mut().iter_mut() {
            if l.id == list {
                l.warnings = warnings.to_vec();
            }
        }
        Ok(())
    }
}

impl NettingTx for Memory {
    fn pass_facts(&self, pass: i64) -> Result<Option<PassFacts>, StoreError> {
        Ok(self.passes.borrow().get(&pass).cloned())
    }

    fn netting_settings(&self, _: SiteId) -> Result<NettingSettings, StoreError> {
        Ok(self.settings)
    }

    fn source_timings(&self, _: SiteId) -> Result<Vec<SourceTimingRow>, StoreError> {
        Ok(self.sources.clone())
    }

    fn counted_keys(&self, pass: i64) -> Result<BTreeMap<ItemLot, (i64, Timestamp)>, StoreError> {
        let mut out: BTreeMap<ItemLot, (i64, Timestamp)> = BTreeMap::new();
        for (p, k, qty, at) in self.lines.borrow().iter() {
            if *p == pass {
                let e = out.entry(k.clone()).or_insert((0, *at));
                e.0 += qty;
                e.1 = e.1.max(*at);
            }
        }
        Ok(out)
    }

    fn bin_keys(&self, _: i64) -> Result<Vec<ItemLot>, StoreError> {
        let keys: BTreeSet<ItemLot> = self.moves.borrow().iter().map(|m| m.0.clone()).collect();
        Ok(keys.into_iter().collect())
    }

    fn netted_keys(&self, pass: i64) -> Result<Vec<ItemLot>, StoreError> {
        Ok(self
            .results
            .borrow()
            .iter()
            .filter(|r| r.pass == pass && r.superseded_by.is_none())
            .map(|r| r.key.clone())
            .collect())
    }

    fn current_result(
        &self,
        pass: i64,
        key: &ItemLot,
    ) -> Result<Option<CurrentResult>, StoreError> {
        Ok(self
            .results
            .borrow()
            .iter()
            .find(|r| r.pass == pass && &r.key == key && r.superseded_by.is_none())
            .map(|r| CurrentResult {
                id: r.id,
                status: r.status.clone(),
                verdict: r.verdict.clone(),
                recount_outcome: r.recount_outcome.clone(),
                unit_cost_minor: r.unit_cost_minor,
                evidence: r.evidence.clone(),
            }))
    }

    fn item_facts(&self, item: i64) -> Result<ItemFacts, StoreError> {
        Ok(self.items[&item].clone())
    }

    fn balance_as_of(&self, _: i64, key: &ItemLot, at: Timestamp) -> Result<i64, StoreError> {
        Ok(self
            .moves
            .borrow()
            .iter()
            .filter(|(k, m)| k == key && m.event_at <= at)
            .map(|(_, m)| m.delta)
            .sum())
    }

    fn key_moves(
        &self,
        _: i64,
        key: &ItemLot,
        from: Timestamp,
        to: Timestamp,
    ) -> Result<Vec<LedgerMove>, StoreError> {
        let mut out: Vec<LedgerMove> = self
            .moves
            .borrow()
            .iter()
            .filter(|(k, m)| k == key && from <= m.event_at && m.event_at <= to)
            .map(|(_, m)| m.clone())
            .collect();
        out.sort_by_key(|m| (m.event_at, m.id));
        Ok(out)
    }

    fn insert_result(&self, r: &NewResult<'_>) -> Result<i64, StoreError> {
        let mut rows = self.results.borrow_mut();
        let id = rows.len() as i64 + 1;
        rows.push(Row {
            id,
            pass: r.pass.id,
            key: (r.netted.item_id, r.netted.lot.clone()),
            status: r.status.into(),
            verdict: r.netted.verdict.into(),
            recount_outcome: None,
            first_count_wrong: false,
            unit_cost_minor: r.netted.unit_cost_minor,
            counted: r.netted.counted,
            f_star: r.netted.f_star,
            evidence: r.netted.evidence.clone(),
            superseded_by: None,
            reason: r.reason.into(),
        });
        Ok(id)
    }

    fn supersede(&self, old: i64, new: i64) -> Result<(), StoreError> {
        self.results.borrow_mut()[old as usize - 1].superseded_by = Some(new);
        Ok(())
    }

    fn done_pass_by_uid(&self, uid: &str) -> Result<Option<(i64, bool)>, StoreError> {
        let passes = self.passes.borrow();
        let Some(p) = passes
            .values()
            .find(|p| p.uid == uid && p.timing.done.is_some())
        else {
            return Ok(None);
        };
        let netted = self.results.borrow().iter().any(|r| r.pass == p.id);
        Ok(Some((p.id, netted)))
    }

    fn widest_done_uncertainty(&self, _: SiteId) -> Result<Option<i64>, StoreError> {
        Ok(self
            .passes
            .borrow()
            .values()
            .filter(|p| p.timing.done.is_some())
            .map(|p| p.timing.clock_uncertainty_ms)
            .max())
    }

    fn done_passes_of_bin(
        &self,
        _: i64,
        done_from: Timestamp,
    ) -> Result<Vec<(i64, CountTiming)>, StoreError> {
        Ok(self
            .passes
            .borrow()
            .values()
            .filter(|p| p.timing.done.is_some_and(|d| d >= done_from))
            .map(|p| (p.id, p.timing))
            .collect())
    }

    fn done_passes(&self, _: SiteId, pass: Option<&str>) -> Result<Vec<i64>, StoreError> {
        let mut done: Vec<(Timestamp, i64)> = self
            .passes
            .borrow()
            .values()
            .filter(|p| pass.is_none_or(|u| u == p.uid || u == p.id.to_string()))
            .filter_map(|p| p.timing.done.map(|d| (d, p.id)))
            .collect();
        done.sort();
        Ok(done.into_iter().map(|(_, id)| id).collect())
    }

    fn rechecked_keys(&self, task: i64) -> Result<Vec<(ItemLot, i64)>, StoreError> {
        let tasks = self.tasks.borrow();
        let rows = self.results.borrow();
        let t = tasks
            .iter()
            .find(|t| t.id == task)
            .expect("the task exists");
        let keys: BTreeSet<(i64, ItemLot)> = t
            .results
            .iter()
            .map(|id| {
                let r = &rows[*id as usize - 1];
                (r.pass, r.key.clone())
            })
            .collect();
        Ok(keys.into_iter().map(|(p, k)| (k, p)).collect())
    }

    fn live_tasks_of(&self, pass: i64, key: &ItemLot) -> Result<i64, StoreError> {
        let ids = self.row_ids_of(pass, key);
        Ok(self
            .live_tasks()
            .iter()
            .filter(|t| t.results.iter().any(|r| ids.contains(r)))
            .count() as i64)
    }

    fn latest_recount_pass(&self, pass: i64, key: &ItemLot) -> Result<Option<i64>, StoreError> {
        let ids = self.row_ids_of(pass, key);
        Ok(self
            .live_tasks()
            .iter()
            .filter(|t| t.results.iter().any(|r| ids.contains(r)))
            .flat_map(|t| self.counted_against(t.id))
            .max_by_key(|p| (p.timing.done, p.id))
            .map(|p| p.id))
    }

    fn set_recount_outcome(
        &self,
        result: i64,
        verdict: &str,
        outcome: Option<&str>,
        first_count_wrong: bool,
    ) -> Result<(), StoreError> {
        let mut rows = self.results.borrow_mut();
        let r = &mut rows[result as usize - 1];
        r.verdict = verdict.into();
        r.recount_outcome = outcome.map(str::to_string);
        r.first_count_wrong = first_count_wrong;
        Ok(())
    }

    fn open_tasks_of(&self, first_pass: i64) -> Result<Vec<OpenTask>, StoreError> {
        let of_pass: BTreeSet<i64> = self
            .results
            .borrow()
            .iter()
            .filter(|r| r.pass == first_pass)
            .map(|r| r.id)
            .collect();
        Ok(self
            .live_tasks()
            .iter()
            .filter(|t| t.results.iter().any(|r| of_pass.contains(r)))
            .filter(|t| self.counted_against(t.id).is_empty())
            .map(|t| OpenTask {
                id: t.id,
                list: 1,
                supervisor: t.supervisor,
            })
            .collect())
    }

    fn withdraw_task(&self, task: OpenTask, _: Timestamp, why: &str) -> Result<(), StoreError> {
        let mut tasks = self.tasks.borrow_mut();
        tasks
            .iter_mut()
            .find(|t| t.id == task.id)
            .unwrap()
            .withdrawn = Some(why.into());
        Ok(())
    }
}

/// Forty of S1 and twenty of S2 received at 1 s.
fn stocked() -> Memory {
    let m = Memory::new();
    m.movement("r1", 1, 40, 1_000);
    m.movement("r2", 2, 20, 1_000);
    m
}

#[test]
fn a_pick_during_the_count_is_netted_not_flagged() {
    // DESIGN §4: the count of 37 matches the book after the pick of 3 inside its window.
    let m = stocked();
    m.movement("p1", 1, -3, 15_000);
    m.pass(1, "cora", None, &[(1, 37, 18_000), (2, 20, 18_500)]);
    let out = m.net_all(1);
    assert_eq!(out.written.len(), 2);
    assert!(out.tasks.is_empty(), "{out:?}");
    let r = m.current(1, 1);
    assert_eq!((r.counted, r.f_star, r.verdict.as_str()), (37, 37, "hit"));
}

#[test]
fn out_of_tolerance_keys_of_one_count_go_to_one_recount_of_the_bin() {
    let m = stocked();
    m.pass(1, "cora", None, &[(1, 30, 18_000), (2, 19, 18_500)]);
    let out = m.net_all(1);
    // Class A is judged exact (common practice, no source): both keys are out.
    assert_eq!(m.current(1, 1).verdict, VERDICT_OUT);
    assert_eq!(m.current(1, 2).verdict, VERDICT_OUT);
    assert_eq!(out.tasks.len(), 1, "one recount for the bin: {out:?}");
    let tasks = m.live_tasks();
    assert_eq!(tasks.len(), 1);
    assert_eq!(tasks[0].results.len(), 2, "it re-checks both keys");
    // Netting the same pass again writes nothing and sends nothing.
    let again = pass::net(&m, 1, None, "again", Timestamp(10_000_000)).unwrap();
    assert_eq!(again, NetOutcome::default());
}

#[test]
fn a_recount_goes_to_another_counters_run_else_waits_unassigned_with_a_warning() {
    // DESIGN §5: the recount is blind and by someone else.
    let m = stocked();
    m.list(&["cora", "dev", "ines"]);
    m.pass(1, "cora", None, &[(1, 30, 18_000), (2, 20, 18_500)]);
    m.net_all(1);
    let tasks = m.live_tasks();
    assert_eq!(tasks.len(), 1);
    assert_eq!(
        (tasks[0].list, tasks[0].run),
        (1, 2),
        "dev's run: the first other"
    );
    assert_eq!(tasks[0].detail, "recount of S1 (result 1)");

    // Only cora holds a run: the recount waits in a run held by no one, with a warning.
    let alone = stocked();
    alone.list(&["cora"]);
    alone.pass(1, "cora", None, &[(1, 30, 18_000), (2, 20, 18_500)]);
    alone.net_all(1);
    let t = &alone.live_tasks()[0];
    assert_eq!(t.run, 2, "a new run");
    let lists = alone.lists.borrow();
    assert_eq!(lists[0].1.counters, 2);
    assert!(
        lists[0].1.warnings[0].contains("have no counter other than cora"),
        "{:?}",
        lists[0].1.warnings
    );
}

#[test]
fn a_recount_without_a_list_makes_the_days_list() {
    let m = stocked();
    m.pass(1, "cora", None, &[(1, 30, 18_000), (2, 20, 18_500)]);
    m.net_all(1);
    let lists = m.lists.borrow();
    assert_eq!(lists.len(), 1);
    assert_eq!(lists[0].0, "1970-01-01", "the count's local day");
}

#[test]
fn a_late_pick_re_nets_keeps_the_old_row_and_withdraws_the_recount() {
    // Only S1 in the bin: S2 (not scanned, book 20) would keep the recount for itself.
    let m = Memory::new();
    m.movement("r1", 1, 40, 1_000);
    m.pass(1, "cora", None, &[(1, 30, 18_000)]);
    m.net_all(1);
    let first = m.current(1, 1);
    assert_eq!(first.verdict, VERDICT_OUT);
    // The host posts a pick of 10 stamped inside the count, after the count arrived.
    let late = m.movement("p-late", 1, -10, 17_000);
    let out = pass::after_movements(&m, SITE, &[late], Timestamp(11_000_000)).unwrap();
    assert_eq!(out.written.len(), 1);
    let now = m.current(1, 1);
    assert_eq!((now.f_star, now.verdict.as_str()), (30, "hit"));
    assert!(now.reason.contains("p-late"), "{}", now.reason);
    let old = &m.results.borrow()[first.id as usize - 1];
    assert_eq!(
        old.superseded_by,
        Some(now.id),
        "the old row stays, superseded"
    );
    assert!(m.live_tasks().is_empty(), "the recount is withdrawn");
    let why = m.tasks.borrow()[0].withdrawn.clone().unwrap();
    assert!(
        why.contains("no key it re-checks is out of tolerance"),
        "{why}"
    );
}

#[test]
fn a_recount_stays_while_one_key_it_re_checks_is_still_out() {
    // S2 is in the bin and not scanned: netted as a count of 0 against a book of 20.
    let m = stocked();
    m.pass(1, "cora", None, &[(1, 30, 18_000)]);
    m.net_all(1);
    assert_eq!(m.current(1, 2).counted, 0);
    assert_eq!(m.live_tasks()[0].results.len(), 2);
    let late = m.movement("p-late", 1, -10, 17_000);
    pass::after_movements(&m, SITE, &[late], Timestamp(11_000_000)).unwrap();
    assert_eq!(m.current(1, 1).verdict, "hit");
    assert_eq!(m.live_tasks().len(), 1, "S2 still needs the recount");
}

#[test]
fn a_movement_outside_every_count_window_re_nets_nothing() {
    let m = stocked();
    m.pass(1, "cora", None, &[(1, 40, 18_000)]);
    m.net_all(1);
    let later = m.movement("p-after", 1, -5, 60_000);
    let out = pass::after_movements(&m, SITE, &[later], Timestamp(11_000_000)).unwrap();
    assert_eq!(out, NetOutcome::default());
}

/// What a result says, without ids: item, counted, book, verdict.
fn essence(m: &Memory) -> Vec<(i64, i64, i64, String)> {
    let mut out: Vec<_> = m
        .results
        .borrow()
        .iter()
        .filter(|r| r.superseded_by.is_none())
        .map(|r| (r.key.0, r.counted, r.f_star, r.verdict.clone()))
        .collect();
    out.sort();
    out
}

#[test]
fn results_do_not_depend_on_whether_movements_arrive_before_or_after_the_count() {
    let moves = [
        ("p1", 1, -3, 15_000),
        ("p2", 2, -4, 16_000),
        ("p3", 1, -2, 19_000),
    ];
    let lines = [(1, 37, 17_000), (2, 16, 18_000)];

    let before = stocked();
    for (uid, item, d, at) in moves {
        before.movement(uid, item, d, at);
    }
    before.pass(1, "cora", None, &lines);
    before.net_all(1);

    let after = stocked();
    after.pass(1, "cora", None, &lines);
    after.net_all(1);
    let written: Vec<WrittenMove> = moves
        .iter()
        .map(|&(uid, item, d, at)| after.movement(uid, item, d, at))
        .collect();
    pass::after_movements(&after, SITE, &written, Timestamp(11_000_000)).unwrap();

    assert_eq!(essence(&before), essence(&after));
    assert!(
        essence(&before).iter().all(|e| e.3 == "hit"),
        "{:?}",
        essence(&before)
    );
}

#[test]
fn a_recount_confirms_clears_or_calls_a_supervisor() {
    // DESIGN §5: a recount that finds the first count's figure confirms the difference; one
    // that finds the book clears it (the first count was wrong); one that agrees with
    // neither calls a supervisor count.
    for (recounted, verdict, outcome, supervisor) in [
        (30, VERDICT_OUT, "confirmed", false),
        (40, "hit", "book_right", false),
        (35, VERDICT_OUT, "supervisor_count", true),
    ] {
        let m = stocked();
        m.pass(1, "cora", None, &[(1, 30, 18_000)]);
        m.net_all(1);
        let task = m.live_tasks()[0].id;
        m.pass(2, "dev", Some(task), &[(1, recounted, 30_000)]);
        let out = m.net_all(2);
        let first = m.current(1, 1);
        assert_eq!(first.verdict, verdict, "recount of {recounted}");
        assert_eq!(first.recount_outcome.as_deref(), Some(outcome));
        assert_eq!(first.first_count_wrong, outcome == "book_right");
        let supervisor_tasks = m.live_tasks().iter().filter(|t| t.supervisor).count();
        assert_eq!(supervisor_tasks, usize::from(supervisor), "{out:?}");
    }
}

#[test]
fn a_held_pass_is_out_of_tolerance_whatever_its_variance() {
    let m = stocked();
    m.pass(1, "cora", None, &[(1, 40, 18_000)]);
    m.passes.borrow_mut().get_mut(&1).unwrap().held = Some("the phone's clock moved".into());
    m.net_all(1);
    let r = m.current(1, 1);
    assert_eq!(
        (r.counted, r.f_star, r.verdict.as_str()),
        (40, 40, VERDICT_OUT)
    );
    assert!(
        matches!(r.evidence.judged, Verdict::Held { .. }),
        "{:?}",
        r.evidence.judged
    );
}

#[test]
fn an_open_pass_is_not_netted() {
    let m = stocked();
    m.pass(1, "cora", None, &[(1, 30, 18_000)]);
    m.passes.borrow_mut().get_mut(&1).unwrap().timing.done = None;
    assert_eq!(m.net_all(1), NetOutcome::default());
    assert_eq!(
        pass::net(&m, 1, None, "", Timestamp(1)).unwrap(),
        NetOutcome::default()
    );
}

// ---------------------------------------------------------------------------
// The ledger, the audit trail, decisions and settling, for the review and settle
// workflows.

impl WatermarkTx for Memory {
    fn watermark(&self) -> Result<i64, StoreError> {
        Ok(self.moves.borrow().len() as i64)
    }
}

/// The one bin's code.
const BIN_CODE: &str = "A-01-01-1";

impl LedgerTx for Memory {
    fn bin_id(&self, _: SiteId, bin: &BinCode) -> Result<Option<i64>, StoreError> {
        Ok((bin.as_str() == BIN_CODE).then_some(BIN))
    }

    fn item_ref(&self, _: SiteId, sku: &Sku) -> Result<Option<ItemRef>, StoreError> {
        Ok(self
            .items
            .iter()
            .find(|(_, f)| f.sku == sku.as_str())
            .map(|(&id, _)| ItemRef {
                id,
                lot_tracked: self.lot_tracked.contains(&id),
            }))
    }

    fn movement_by_uid(&self, uid: &MovementUid) -> Result<Option<StoredMovement>, StoreError> {
        Ok(self
            .moves
            .borrow()
            .iter()
            .find(|(_, m)| m.uid == uid.as_str())
            .map(|((item, lot), m)| StoredMovement {
                id: m.id,
                site: SITE,
                key: LedgerKey {
                    bin_id: BIN,
                    item_id: *item,
                    lot: lot.clone(),
                },
                qty: m.delta,
                kind: MovementKind::parse(&m.kind).expect("a kind this memory wrote"),
                event_at: m.event_at,
            }))
    }

    fn is_reversed(&self, movement: i64) -> Result<bool, StoreError> {
        Ok(self.reversed.borrow().contains(&movement))
    }

    fn insert_movement(
        &self,
        _: SiteId,
        m: &NewMovement,
        key: &LedgerKey,
        _: Timestamp,
        reverses: Option<i64>,
    ) -> Result<Inserted, StoreError> {
        if self.movement_by_uid(&m.uid)?.is_some() {
            return Ok(Inserted::Existing);
        }
        let id = self.moves.borrow().len() as i64 + 1;
        self.moves.borrow_mut().push((
            (key.item_id, key.lot.clone()),
            LedgerMove {
                id,
                uid: m.uid.as_str().into(),
                event_at: m.event_at,
                delta: m.qty,
                kind: m.kind.as_str().into(),
                source: m.source.clone(),
            },
        ));
        if let Some(r) = reverses {
            self.reversed.borrow_mut().insert(r);
        }
        Ok(Inserted::New(id))
    }
}

impl AuditTx for Memory {
    fn insert_audit(&self, event: &AuditEvent) -> Result<(), StoreError> {
        self.audit.borrow_mut().push(event.clone());
        Ok(())
    }
}

/// The user id the tests give a counter's name.
fn user_id(name: &str) -> UserId {
    UserId(match name {
        "cora" => 1,
        "dev" => 2,
        _ => 3,
    })
}

impl ReviewTx for Memory {
    fn seed_reason_codes(&self, _: SiteId) -> Result<(), StoreError> {
        Ok(())
    }

    fn review_policy(&self, _: SiteId) -> Result<ReviewPolicy, StoreError> {
        Ok(ReviewPolicy::default())
    }

    fn reason_codes(&self, _: SiteId) -> Result<Vec<ReasonCode>, StoreError> {
        Ok(crate::review::default_reasons())
    }

    fn decision_facts(&self, _: SiteId, result: i64) -> Result<Option<DecisionFacts>, StoreError> {
        let rows = self.results.borrow();
        let Some(r) = rows.get(result as usize - 1) else {
            return Ok(None);
        };
        let counter = self.passes.borrow()[&r.pass].user_name.clone();
        Ok(Some(DecisionFacts {
            candidate: Candidate {
                id: r.id,
                verdict: r.verdict.clone(),
                superseded_by: r.superseded_by,
                decided: self
                    .reviews
                    .borrow()
                    .iter()
                    .find(|v| v.0 == r.id)
                    .map(|v| v.1.clone()),
                settled: true,
                settles_at: r.evidence.settles_at,
                value_minor: ((r.counted - r.f_star) * r.unit_cost_minor).abs(),
                recount_pending: false,
                counters: vec![user_id(&counter)],
            },
            evidence: serde_json::to_string(&r.evidence).unwrap(),
            variance: r.counted - r.f_star,
            bin: "A-01-01-1".into(),
            sku: self.items[&r.key.0].sku.clone(),
            lot: r.key.1.clone(),
        }))
    }

    fn insert_review(&self, d: &NewDecision, decision: &str) -> Result<i64, StoreError> {
        let mut reviews = self.reviews.borrow_mut();
        reviews.push((d.result, decision.into(), None));
        Ok(reviews.len() as i64)
    }

    fn set_review_movement(&self, review: i64, movement: i64) -> Result<(), StoreError> {
        self.reviews.borrow_mut()[review as usize - 1].2 = Some(movement);
        Ok(())
    }
}

impl SettleTx for Memory {
    fn mark_settled(&self, _: Timestamp) -> Result<usize, StoreError> {
        Ok(0)
    }

    fn next_auto_candidate(
        &self,
        after: i64,
        _: Timestamp,
    ) -> Result<Option<AutoCandidate>, StoreError> {
        let adjusted = self.auto.borrow();
        Ok(self
            .results
            .borrow()
            .iter()
            .filter(|r| r.id > after && r.superseded_by.is_none() && r.verdict == "hit")
            .filter(|r| r.counted != r.f_star)
            .filter(|r| {
                // One automatic adjustment per counted key of a count.
                !adjusted.iter().any(|(id, _)| {
                    let a = &self.results.borrow()[*id as usize - 1];
                    a.pass == r.pass && a.key == r.key
                })
            })
            .map(|r| AutoCandidate {
                id: r.id,
                site: SITE,
                bin: "A-01-01-1".into(),
                sku: self.items[&r.key.0].sku.clone(),
                lot: r.key.1.clone(),
                variance: r.counted - r.f_star,
                class: self.items[&r.key.0].class,
                unit_cost_minor: r.unit_cost_minor,
                evidence: serde_json::to_string(&r.evidence).unwrap(),
            })
            .next())
    }

    fn insert_auto_adjustment(
        &self,
        result: i64,
        movement: i64,
        _: Timestamp,
    ) -> Result<i64, StoreError> {
        let mut auto = self.auto.borrow_mut();
        auto.push((result, movement));
        Ok(auto.len() as i64)
    }
}

fn decision(result: i64, by: &str) -> NewDecision {
    NewDecision {
        result,
        decider: Decider {
            user: user_id(by),
            inventory_manager: true,
        },
        actor: crate::accounts::audit::Actor::System,
        reason: "damaged".into(),
        note: String::new(),
        at: Timestamp(20_000_000),
        address: String::new(),
    }
}

#[test]
fn an_approval_posts_the_variance_at_the_book_states_instant_and_re_nets_the_key() {
    // DESIGN §5: the adjustment of c − f* joins f*'s instant, so the re-net finds the
    // count among the book states.
    let m = Memory::new();
    m.movement("r1", 1, 40, 1_000);
    m.pass(1, "cora", None, &[(1, 36, 18_000)]);
    m.net_all(1);
    let first = m.current(1, 1);
    assert_eq!((first.counted, first.f_star), (36, 40));
    let decided =
        crate::review::decide::approve(&m, SITE, &[decision(first.id, "ines")], false).unwrap();
    let d = decided[0].as_ref().expect("approved");
    assert!(d.movement.is_some());
    let moves = m.moves.borrow();
    let (_, adj) = moves.last().unwrap();
    assert_eq!(
        (adj.delta, adj.event_at),
        (-4, first.evidence.netting.post_at)
    );
    assert_eq!(adj.source, crate::review::decide::COUNT_SOURCE);
    drop(moves);
    let now = m.current(1, 1);
    assert_eq!((now.f_star, now.verdict.as_str()), (36, "hit"), "re-netted");
    assert_eq!(
        m.reviews.borrow()[0].2,
        Some(2),
        "the review names its movement"
    );
    let actions: Vec<_> = m.audit.borrow().iter().map(|e| e.action).collect();
    assert_eq!(
        actions,
        vec![
            crate::accounts::audit::Action::Approval,
            crate::accounts::audit::Action::Adjustment
        ]
    );
    // A second decision on the same result is refused and posts nothing.
    let again =
        crate::review::decide::approve(&m, SITE, &[decision(first.id, "ines")], false).unwrap();
    assert!(again[0].is_err(), "{again:?}");
    assert_eq!(m.moves.borrow().len(), 2);
}

#[test]
fn nobody_decides_a_difference_they_counted_and_a_rejection_posts_nothing() {
    let m = Memory::new();
    m.movement("r1", 1, 40, 1_000);
    m.pass(1, "cora", None, &[(1, 36, 18_000)]);
    m.net_all(1);
    let id = m.current(1, 1).id;
    let own = crate::review::decide::approve(&m, SITE, &[decision(id, "cora")], false).unwrap();
    assert!(own[0].is_err(), "{own:?}");
    let rejected = crate::review::decide::reject(&m, SITE, &decision(id, "ines")).unwrap();
    assert_eq!(rejected.unwrap().movement, None);
    assert_eq!(m.moves.borrow().len(), 1, "the book stands");
    assert_eq!(m.reviews.borrow()[0].1, "rejected");
}

#[test]
fn settling_adjusts_a_within_tolerance_variance_once_where_the_site_allows_it() {
    // A class C item (5 % tolerance, common practice, no source): 39 of 40 is a hit with a
    // variance of −1.
    let mut m = Memory::new();
    m.items.get_mut(&1).unwrap().class = Some(Class::C);
    m.settings.auto_adjust = true;
    m.movement("r1", 1, 40, 1_000);
    m.pass(1, "cora", None, &[(1, 39, 18_000)]);
    m.net_all(1);
    let r = m.current(1, 1);
    assert_eq!((r.verdict.as_str(), r.counted - r.f_star), ("hit", -1));
    let out = crate::netting::settle::settle_due(&m, Timestamp(30_000_000)).unwrap();
    assert_eq!(out.adjusted.len(), 1, "{out:?}");
    assert_eq!(out.adjusted[0].qty, -1);
    assert_eq!(m.moves.borrow().last().unwrap().1.delta, -1);
    let again = crate::netting::settle::settle_due(&m, Timestamp(31_000_000)).unwrap();
    assert!(again.adjusted.is_empty(), "once: {again:?}");
    // Where the site does not allow it, nothing is posted.
    let mut off = Memory::new();
    off.items.get_mut(&1).unwrap().class = Some(Class::C);
    off.movement("r1", 1, 40, 1_000);
    off.pass(1, "cora", None, &[(1, 39, 18_000)]);
    off.net_all(1);
    let none = crate::netting::settle::settle_due(&off, Timestamp(30_000_000)).unwrap();
    assert!(none.adjusted.is_empty());
}

// The ledger's batch rules (`ledger::write_batch`), end to end in `tests/ledger.rs`.

/// A movement of `qty` of `sku` in `bin` with id `uid`, reversing `reverses` if given.
fn moved(uid: &str, bin: &str, sku: &str, qty: i64, reverses: Option<&str>) -> NewMovement {
    NewMovement {
        uid: MovementUid::parse(uid).unwrap(),
        bin: BinCode::parse(bin).unwrap(),
        sku: Sku::parse(sku).unwrap(),
        lot: String::new(),
        expiry: None,
        qty,
        kind: if qty < 0 {
            MovementKind::Pick
        } else {
            MovementKind::Receipt
        },
        event_at: Timestamp(1_000),
        source: "host".into(),
        doc_ref: String::new(),
        actor: String::new(),
        reverses: reverses.map(|r| MovementUid::parse(r).unwrap()),
        recorded_at: None,
    }
}

fn refused(m: &Memory, rows: &[NewMovement]) -> Vec<(usize, String, String)> {
    match crate::ledger::write_batch(m, SITE, rows, Timestamp(2_000), &Default::default()) {
        Err(StoreError::Rejected(errs)) => errs
            .into_iter()
            .map(|e| (e.row, e.field, e.message))
            .collect(),
        other => panic!("expected a refusal, got {other:?}"),
    }
}

#[test]
fn a_batch_is_refused_with_every_rows_reason() {
    let mut m = Memory::new();
    m.lot_tracked.insert(2);
    let mut lotted = moved("m-5", BIN_CODE, "S1", 1, None);
    lotted.lot = "L1".into();
    let errs = refused(
        &m,
        &[
            moved("m-1", BIN_CODE, "S1", 4, None),
            moved("m-1", BIN_CODE, "S1", 4, None),
            moved("m-2", "Z-09-09-9", "S1", 4, None),
            moved("m-3", BIN_CODE, "NOPE", 4, None),
            moved("m-4", BIN_CODE, "S2", 4, None),
            lotted,
        ],
    );
    let fields: Vec<_> = errs.iter().map(|e| (e.0, e.1.as_str())).collect();
    assert_eq!(
        fields,
        [(1, "id"), (2, "bin"), (3, "sku"), (4, "lot"), (5, "lot")]
    );
    assert!(errs[0].2.contains("first at row 0"), "{}", errs[0].2);
    assert!(errs[3].2.contains("lot is required"), "{}", errs[3].2);
    assert!(errs[4].2.contains("leave lot empty"), "{}", errs[4].2);
}

#[test]
fn a_resend_is_acknowledged_once_and_other_content_under_its_id_refused() {
    let m = Memory::new();
    let first = [moved("m-1", BIN_CODE, "S1", 4, None)];
    let (out, written) =
        crate::ledger::write_batch(&m, SITE, &first, Timestamp(2_000), &Default::default())
            .unwrap();
    assert_eq!(
        (out.recorded, out.already_recorded, written.len()),
        (1, 0, 1)
    );
    let (out, written) =
        crate::ledger::write_batch(&m, SITE, &first, Timestamp(3_000), &Default::default())
            .unwrap();
    assert_eq!(
        (out.recorded, out.already_recorded, written.len()),
        (0, 1, 0)
    );
    assert_eq!(out.watermark, 1);
    let errs = refused(&m, &[moved("m-1", BIN_CODE, "S1", 5, None)]);
    assert_eq!(errs.len(), 1);
    assert!(errs[0].2.contains("different content"), "{}", errs[0].2);
}

#[test]
fn a_reversal_mirrors_its_movement_and_happens_once() {
    let m = Memory::new();
    let batch = [
        moved("m-1", BIN_CODE, "S1", 4, None),
        moved("r-1", BIN_CODE, "S1", -4, Some("m-1")),
    ];
    let (out, _) =
        crate::ledger::write_batch(&m, SITE, &batch, Timestamp(2_000), &Default::default())
            .unwrap();
    assert_eq!(out.recorded, 2, "a reversal of a row earlier in its batch");
    let again = refused(&m, &[moved("r-2", BIN_CODE, "S1", -4, Some("m-1"))]);
    assert!(again[0].2.contains("already been reversed"), "{again:?}");
    crate::ledger::write_batch(
        &m,
        SITE,
        &[moved("m-2", BIN_CODE, "S2", 3, None)],
        Timestamp(2_000),
        &Default::default(),
    )
    .unwrap();
    let wrong = refused(&m, &[moved("r-3", BIN_CODE, "S2", -2, Some("m-2"))]);
    assert!(wrong[0].2.contains("quantity -3"), "{wrong:?}");
    let missing = refused(&m, &[moved("r-4", BIN_CODE, "S2", -3, Some("m-9"))]);
    assert!(missing[0].2.contains("not in the ledger"), "{missing:?}");
}
