//! A test-only [`SyncTx`] over plain maps (a savepoint is a copy of the state), so the
//! sync workflow's rules run without a database; the same cases run end to end against
//! SQLite in `tests/sync.rs` and `tests/sync_trust.rs`.

use super::apply::{
    EventBin, EventTask, NewEvent, NewLine, NewPass, PassTrust, StoredPass, SyncTx, apply_batch,
};
use super::clock::ClockSample;
use super::plausible::Sampled;
use super::{Sender, SyncBatch, event};
use crate::accounts::{DeviceId, UserId};
use crate::master::SiteId;
use crate::store::error::StoreError;
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use cairn_scan::wire::{EventFlag, EventResult, EventStatus};
use serde_json::{Value, json};
use std::cell::RefCell;
use std::collections::{BTreeMap, BTreeSet};

const SITE: SiteId = SiteId(1);
/// The server's clock in these tests: 2026-03-02 12:00 UTC.
const NOW: i64 = 1_772_452_800_000;

#[derive(Debug, Clone, Default)]
struct Pass {
    stored: Option<StoredPass>,
    uid: String,
    first: i64,
    done: Option<i64>,
    held: Option<String>,
    first_sample: Option<Sampled>,
}

/// Everything a sync writes; a savepoint copies it.
#[derive(Debug, Clone, Default)]
struct State {
    events: BTreeMap<String, (String, Vec<EventFlag>)>,
    passes: Vec<Pass>,
    lines: BTreeMap<String, String>,
    undone: BTreeSet<String>,
    clocks: BTreeMap<i64, Sampled>,
    started: BTreeSet<i64>,
    finished: BTreeSet<i64>,
}

#[derive(Default)]
struct Memory {
    bins: BTreeMap<String, EventBin>,
    tasks: BTreeMap<i64, EventTask>,
    /// (task, user) pairs where the user counted a key the recount task re-checks.
    own_counts: BTreeSet<(i64, String)>,
    items: BTreeMap<String, i64>,
    packs: BTreeMap<String, (i64, i64)>,
    state: RefCell<State>,
}

impl Memory {
    /// One bin A-01-01-1, item S1 (a case of 6 has GTIN 4006381333931).
    fn new() -> Self {
        let mut m = Self::default();
        m.bins.insert(
            "A-01-01-1".into(),
            EventBin {
                id: 1,
                zone: "A".into(),
                aisle: 1,
                bay: 1,
                level: 1,
            },
        );
        m.items.insert("S1".into(), 1);
        m.packs.insert("04006381333931".into(), (1, 6));
        m
    }

    fn pass(&self, uid: &str) -> Option<Pass> {
        self.state
            .borrow()
            .passes
            .iter()
            .find(|p| p.uid == uid)
            .cloned()
    }
}

impl SyncTx for Memory {
    fn stored_event(&self, uid: &str) -> Result<Option<(String, Vec<EventFlag>)>, StoreError> {
        Ok(self.state.borrow().events.get(uid).cloned())
    }

    fn previous_clock(&self, device: DeviceId) -> Result<Option<Sampled>, StoreError> {
        Ok(self.state.borrow().clocks.get(&device.0).copied())
    }

    fn save_clock(
        &self,
        device: DeviceId,
        clock: &ClockSample,
        at: Timestamp,
    ) -> Result<(), StoreError> {
        self.state
            .borrow_mut()
            .clocks
            .insert(device.0, Sampled::of(clock, at));
        Ok(())
    }

    fn pass_trust(&self, pass: i64) -> Result<PassTrust, StoreError> {
        let s = self.state.borrow();
        let p = &s.passes[pass as usize - 1];
        Ok(PassTrust {
            held: p.held.clone(),
            first: Timestamp(p.first),
            done: p.done.map(Timestamp),
            first_sample: p.first_sample,
        })
    }

    fn hold_pass(&self, pass: i64, reason: &str) -> Result<(), StoreError> {
        let mut s = self.state.borrow_mut();
        let p = &mut s.passes[pass as usize - 1];
        p.held.get_or_insert_with(|| reason.into());
        Ok(())
    }

    fn bin(&self, _: SiteId, code: &str) -> Result<Option<EventBin>, StoreError> {
        Ok(self.bins.get(code).cloned())
    }

    fn task(&self, _: SiteId, task: i64) -> Result<Option<EventTask>, StoreError> {
        Ok(self.tasks.get(&task).cloned())
    }

    fn would_recount_own_count(&self, task: i64, user: &str) -> Result<bool, StoreError> {
        Ok(self.own_counts.contains(&(task, user.to_string())))
    }

    fn pass_by_uid(&self, uid: &str) -> Result<Option<StoredPass>, StoreError> {
        Ok(self.pass(uid).and_then(|p| p.stored))
    }

    fn item_id(&self, _: SiteId, sku: &str) -> Result<Option<i64>, StoreError> {
        Ok(self.items.get(sku).copied())
    }

    fn pack(&self, _: SiteId, gtin: &str) -> Result<Option<(i64, i64)>, StoreError> {
        Ok(self.packs.get(gtin).copied())
    }

    fn bin_holds(&self, _: i64, _: i64) -> Result<bool, StoreError> {
        Ok(true)
    }

    fn extend_pass(&self, pass: i64, at: Timestamp, _: i64, _: bool) -> Result<(), StoreError> {
        let mut s = self.state.borrow_mut();
        let p = &mut s.passes[pass as usize - 1];
        p.first = p.first.min(at.0);
        Ok(())
    }

    fn insert_pass(&self, p: &NewPass<'_>) -> Result<i64, StoreError> {
        let mut s = self.state.borrow_mut();
        let id = s.passes.len() as i64 + 1;
        s.passes.push(Pass {
            stored: Some(StoredPass {
                id,
                bin: p.bin,
                task: p.task,
                user: p.batch.sender.user.0,
            }),
            uid: p.uid.into(),
            first: p.at.0,
            done: None,
            held: None,
            first_sample: Some(Sampled::of(&p.batch.clock, p.batch.received_at)),
        });
        Ok(id)
    }

    fn start_task(&self, task: i64) -> Result<(), StoreError> {
        self.state.borrow_mut().started.insert(task);
        Ok(())
    }

    fn insert_line(&self, l: &NewLine<'_>) -> Result<(), StoreError> {
        let mut s = self.state.borrow_mut();
        let uid = s.passes[l.pass as usize - 1].uid.clone();
        s.lines.insert(l.uid.clone(), uid);
        Ok(())
    }

    fn line_pass(&self, line: &str) -> Result<Option<String>, StoreError> {
        Ok(self.state.borrow().lines.get(line).cloned())
    }

    fn undo_line(&self, line: &str, _: &str, _: &str, _: Timestamp) -> Result<bool, StoreError> {
        Ok(self.state.borrow_mut().undone.insert(line.into()))
    }

    fn mark_empty(&self, _: i64) -> Result<(), StoreError> {
        Ok(())
    }

    fn mark_done(&self, pass: i64, at: Timestamp) -> Result<(), StoreError> {
        let mut s = self.state.borrow_mut();
        let p = &mut s.passes[pass as usize - 1];
        p.done = Some(p.done.map_or(at.0, |d| d.max(at.0)));
        Ok(())
    }

    fn finish_task(&self, _: SiteId, task: i64, _: Timestamp) -> Result<(), StoreError> {
        self.state.borrow_mut().finished.insert(task);
        Ok(())
    }

    fn insert_event(&self, e: &NewEvent<'_>) -> Result<(), StoreError> {
        self.state.borrow_mut().events.insert(
            e.event.id.to_string(),
            (e.event.canonical.clone(), e.flags.to_vec()),
        );
        Ok(())
    }
}

/// A batch from cora's phone (device 1) received at `NOW`, its clock `offset_ms` behind.
fn batch(user: &str, offset_ms: i64, events: &[Value]) -> SyncBatch {
    SyncBatch {
        site: SITE,
        site_code: "T".into(),
        zone: SiteZone::UTC,
        sender: Sender {
            user: UserId(if user == "cora" { 1 } else { 2 }),
            user_name: user.into(),
            device: Some(DeviceId(if user == "cora" { 1 } else { 2 })),
        },
        clock: ClockSample::measure(Timestamp(NOW), NOW - offset_ms, Some(20)),
        received_at: Timestamp(NOW),
        events: events
            .iter()
            .enumerate()
            .map(|(i, e)| event::read(e, i))
            .collect(),
    }
}

/// A phone-made id (a version 7 UUID), told apart by `n`.
fn uid(n: u128) -> String {
    let tail = n.to_be_bytes();
    let mut random = [0u8; 10];
    random.copy_from_slice(&tail[6..]);
    uuid::Builder::from_unix_timestamp_millis(NOW as u64, &random)
        .into_uuid()
        .to_string()
}

/// An event of pass `pass` at `secs_before` seconds before `NOW` on the phone's clock.
fn ev(id: u128, pass: u128, secs_before: i64, kind: &str, extra: Value) -> Value {
    let mut e = json!({
        "id": uid(id),
        "at": NOW - secs_before * 1_000,
        "count": uid(pass),
        "task": null,
        "bin": "A-01-01-1",
        "type": kind,
    });
    e.as_object_mut()
        .unwrap()
        .extend(extra.as_object().unwrap().clone());
    e
}

fn line(id: u128, pass: u128, secs_before: i64, qty: i64) -> Value {
    ev(
        id,
        pass,
        secs_before,
        "line",
        json!({"sku": "S1", "gtin": null, "packs": 1, "qty": qty, "lot": "", "entry": "keypad"}),
    )
}

fn opened(pass: u128, secs_before: i64) -> Value {
    ev(pass, pass, secs_before, "bin_opened", json!({"label": ""}))
}

fn statuses(results: &[EventResult]) -> Vec<EventStatus> {
    results.iter().map(|r| r.status).collect()
}

#[test]
fn a_resent_event_is_acknowledged_again_and_a_changed_one_is_a_conflict() {
    let m = Memory::new();
    let first = [opened(1, 120), line(2, 1, 60, 12)];
    let r = apply_batch(&m, &batch("cora", 0, &first)).unwrap();
    assert_eq!(statuses(&r), [EventStatus::Accepted, EventStatus::Accepted]);
    let again = apply_batch(&m, &batch("cora", 0, &first)).unwrap();
    assert!(again.iter().all(|r| r.repeat), "{again:?}");
    let changed = apply_batch(&m, &batch("cora", 0, &[line(2, 1, 60, 13)])).unwrap();
    assert_eq!(statuses(&changed), [EventStatus::Conflict]);
    assert_eq!(m.state.borrow().events.len(), 2, "nothing more is kept");
}

#[test]
fn a_refused_event_leaves_nothing_and_the_rest_of_the_batch_goes_on() {
    let m = Memory::new();
    let mut bad = line(3, 1, 50, 7);
    bad["bin"] = json!("Z-99-99-9");
    let r = apply_batch(
        &m,
        &batch("cora", 0, &[opened(1, 120), bad, line(4, 1, 40, 5)]),
    )
    .unwrap();
    assert_eq!(
        statuses(&r),
        [
            EventStatus::Accepted,
            EventStatus::Rejected,
            EventStatus::Accepted
        ]
    );
    assert!(
        r[1].reason
            .as_deref()
            .unwrap_or("")
            .contains("no bin Z-99-99-9")
    );
    assert_eq!(m.state.borrow().lines.len(), 1);
}

#[test]
fn a_pack_line_must_be_packs_times_units_and_a_count_belongs_to_its_counter() {
    let m = Memory::new();
    let mut case = line(2, 1, 60, 13);
    case["gtin"] = json!("4006381333931");
    case["packs"] = json!(2);
    let r = apply_batch(&m, &batch("cora", 0, &[opened(1, 120), case])).unwrap();
    assert_eq!(r[1].status, EventStatus::Rejected);
    assert!(
        r[1].reason.as_deref().unwrap_or("").contains("2 × 6"),
        "{r:?}"
    );
    // Dev may not add to cora's count.
    let r = apply_batch(&m, &batch("dev", 0, &[line(5, 1, 30, 1)])).unwrap();
    assert!(
        r[0].reason
            .as_deref()
            .unwrap_or("")
            .contains("another counter"),
        "{r:?}"
    );
}

#[test]
fn a_recount_by_the_first_counter_and_a_new_count_of_a_withdrawn_recount_are_refused() {
    let mut m = Memory::new();
    let task = |withdrawn: Option<&str>| EventTask {
        bin: 1,
        bin_code: "A-01-01-1".into(),
        holder: "cora".into(),
        day: "2026-03-02".into(),
        built_at: Timestamp(NOW - 3_600_000),
        recheck_done_at: Some(Timestamp(NOW - 1_800_000)),
        is_recount: true,
        withdrawn: withdrawn.map(str::to_string),
    };
    m.tasks.insert(7, task(None));
    m.tasks.insert(8, task(Some("the late pick explained it")));
    m.own_counts.insert((7, "cora".into()));
    let mut own = opened(1, 120);
    own["task"] = json!(7);
    let r = apply_batch(&m, &batch("cora", 0, &[own])).unwrap();
    assert!(
        r[0].reason
            .as_deref()
            .unwrap_or("")
            .contains("recount of a count you made"),
        "{r:?}"
    );
    let mut late = opened(2, 120);
    late["task"] = json!(8);
    let r = apply_batch(&m, &batch("dev", 0, &[late])).unwrap();
    assert!(
        r[0].reason
            .as_deref()
            .unwrap_or("")
            .contains("was withdrawn"),
        "{r:?}"
    );
    assert!(m.state.borrow().passes.is_empty(), "no pass was kept");
}

#[test]
fn a_pass_whose_phone_clock_stepped_between_syncs_is_held() {
    // DESIGN §6: a clock that moves while a bin is counted holds the count for review.
    let m = Memory::new();
    let r = apply_batch(&m, &batch("cora", 0, &[opened(1, 120)])).unwrap();
    assert!(!r[0].flags.contains(&EventFlag::Held));
    // The phone's clock was set an hour back between two syncs of the same pass: it stamps
    // the bin done an hour early, and its clock reads an hour behind the server's.
    let done = ev(9, 1, 3_600 + 10, "bin_done", json!({}));
    let r = apply_batch(&m, &batch("cora", 3_600_000, &[done])).unwrap();
    assert!(r[0].flags.contains(&EventFlag::Held), "{r:?}");
    let held = m.pass(&uid(1)).unwrap().held;
    assert!(held.unwrap().contains("clock was changed"));
}

#[test]
fn an_event_far_before_the_server_received_it_is_refused() {
    // The bounds of a phone's times (DESIGN §6): at most 72 hours before receipt.
    let m = Memory::new();
    let r = apply_batch(&m, &batch("cora", 0, &[opened(1, 80 * 3_600)])).unwrap();
    assert_eq!(r[0].status, EventStatus::Rejected, "{r:?}");
    assert!(
        r[0].reason.as_deref().unwrap_or("").contains("72 hours"),
        "the reason names the time bounds: {r:?}"
    );
    assert!(m.state.borrow().passes.is_empty());
}

#[test]
fn an_undo_sees_a_line_sent_earlier_in_the_same_request_and_a_refused_undo_opens_no_count() {
    let m = Memory::new();
    let undo =
        |id: u128, pass: u128, line: u128| ev(id, pass, 30, "undo", json!({ "line": uid(line) }));
    let events = [
        opened(1, 120),
        line(2, 1, 60, 12),
        undo(3, 1, 2),
        // The same line again: undone already.
        undo(4, 1, 2),
        // From a count the line is not of: refused before that count is opened.
        undo(5, 9, 2),
        // The line's event resent within the request: a repeat.
        line(2, 1, 60, 12),
    ];
    let r = apply_batch(&m, &batch("cora", 0, &events)).unwrap();
    assert_eq!(
        statuses(&r),
        [
            EventStatus::Accepted,
            EventStatus::Accepted,
            EventStatus::Accepted,
            EventStatus::Rejected,
            EventStatus::Rejected,
            EventStatus::Accepted,
        ],
        "{r:?}"
    );
    assert!(
        r[3].reason
            .as_deref()
            .unwrap_or("")
            .contains("undone already")
    );
    assert!(
        r[4].reason
            .as_deref()
            .unwrap_or("")
            .contains("not a line of count")
    );
    assert!(r[5].repeat, "{r:?}");
    let s = m.state.borrow();
    assert_eq!(s.passes.len(), 1, "the refused undo opened no count");
    assert_eq!(s.events.len(), 3);
    assert_eq!(s.undone.len(), 1);
}
