//! A demo counter's phone: one pass over one bin laid out in time (opened, a line per
//! key a few seconds to a minute apart, bin done) and sent as the sync request a phone
//! makes, read by the same event parser the sync endpoint uses. No I/O.

use crate::accounts::UserId;
use crate::master::SiteId;
use crate::sync::clock::ClockSample;
use crate::sync::{Sender, SyncBatch, event};
use crate::time::Timestamp;
use crate::time::day::SiteZone;
use cairn_scan::wire::{Entry, EventType, WireEvent};
use rand::Rng;
use rand_chacha::ChaCha8Rng;

/// Seconds between two lines of one bin: a counter finds, counts and keys each key.
const LINE_GAP_S: std::ops::RangeInclusive<i64> = 5..=60;
/// Seconds from the last line to marking the bin done.
const DONE_GAP_S: std::ops::RangeInclusive<i64> = 3..=20;
/// Seconds walking from one bin to the next.
pub const WALK_S: std::ops::RangeInclusive<i64> = 20..=120;
/// Chance that a phone is out of coverage when a bin is done and sends it later.
const P_OFFLINE: f64 = 0.05;
/// Minutes an offline phone holds a pass before it syncs.
const OFFLINE_MIN: std::ops::RangeInclusive<i64> = 5..=40;
/// Round trip of a phone's request, ms.
const RTT_MS: i64 = 180;

/// A counter as their phone knows them.
#[derive(Debug, Clone)]
pub struct Counter {
    pub id: UserId,
    pub name: String,
    /// How far the phone's clock runs ahead of the server's, ms.
    pub skew_ms: i64,
}

/// One key the counter finds on the shelf, in the order they count.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Found {
    pub sku: String,
    pub lot: String,
}

/// One counted line: what was keyed and when (server time, ms).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Keyed {
    pub sku: String,
    pub lot: String,
    pub qty: i64,
    pub at: i64,
}

/// A pass over a bin, laid out in server time.
#[derive(Debug, Clone)]
pub struct Pass {
    pub uid: uuid::Uuid,
    pub counter: usize,
    pub task: i64,
    pub bin: String,
    pub opened_at: i64,
    pub lines: Vec<Keyed>,
    pub done_at: i64,
    pub received_at: i64,
}

/// Returns a version 7 UUID for instant `at`, its random part from `rng`.
pub fn uuid_at(at: i64, rng: &mut ChaCha8Rng) -> uuid::Uuid {
    let mut bytes = [0u8; 10];
    rng.fill(&mut bytes);
    uuid::Builder::from_unix_timestamp_millis(at.max(0) as u64, &bytes).into_uuid()
}

/// Lays out a pass opened at `opened`: `quantity(key, at)` says what the counter keys for
/// a key counted at `at` (nothing for 0). Returns the pass and when the counter is free.
pub fn lay_out(
    counter: usize,
    task: i64,
    bin: &str,
    keys: &[Found],
    opened: i64,
    rng: &mut ChaCha8Rng,
    mut quantity: impl FnMut(&Found, i64) -> i64,
) -> (Pass, i64) {
    let uid = uuid_at(opened, rng);
    let mut at = opened;
    let mut lines = Vec::new();
    for k in keys {
        at += rng.random_range(LINE_GAP_S) * 1_000;
        let qty = quantity(k, at);
        if qty > 0 {
            lines.push(Keyed {
                sku: k.sku.clone(),
                lot: k.lot.clone(),
                qty,
                at,
            });
        }
    }
    let done_at = at + rng.random_range(DONE_GAP_S) * 1_000;
    let received_at = if rng.random_bool(P_OFFLINE) {
        done_at + rng.random_range(OFFLINE_MIN) * 60_000
    } else {
        done_at + rng.random_range(1..=15) * 1_000
    };
    let free = done_at + rng.random_range(WALK_S) * 1_000;
    (
        Pass {
            uid,
            counter,
            task,
            bin: bin.to_string(),
            opened_at: opened,
            lines,
            done_at,
            received_at,
        },
        free,
    )
}

fn wire(pass: &Pass, who: &Counter, id: String, at: i64, kind: EventType) -> WireEvent {
    WireEvent {
        id,
        at: at + who.skew_ms,
        user: Some(who.name.clone()),
        count: pass.uid.to_string(),
        task: Some(pass.task),
        bin: pass.bin.clone(),
        kind,
        label: None,
        sku: None,
        gtin: None,
        packs: None,
        qty: None,
        lot: None,
        expiry: None,
        entry: None,
        line: None,
    }
}

/// Builds the sync request the counter's phone sends for `pass`, through the event
/// parser the sync endpoint uses.
pub fn batch(
    site: SiteId,
    site_code: &str,
    zone: SiteZone,
    pass: &Pass,
    who: &Counter,
    rng: &mut ChaCha8Rng,
) -> SyncBatch {
    let mut events = Vec::with_capacity(pass.lines.len() + 3);
    let mut opened = wire(
        pass,
        who,
        pass.uid.to_string(),
        pass.opened_at,
        EventType::BinOpened,
    );
    opened.label = Some(String::new());
    events.push(opened);
    for l in &pass.lines {
        let mut e = wire(
            pass,
            who,
            uuid_at(l.at, rng).to_string(),
            l.at,
            EventType::Line,
        );
        e.sku = Some(l.sku.clone());
        e.packs = Some(l.qty);
        e.qty = Some(l.qty);
        e.lot = Some(l.lot.clone());
        e.entry = Some(Entry::Keypad);
        events.push(e);
    }
    if pass.lines.is_empty() {
        let at = pass.done_at - 1_000;
        events.push(wire(
            pass,
            who,
            uuid_at(at, rng).to_string(),
            at,
            EventType::BinEmpty,
        ));
    }
    events.push(wire(
        pass,
        who,
        uuid_at(pass.done_at, rng).to_string(),
        pass.done_at,
        EventType::BinDone,
    ));
    let received_at = Timestamp(pass.received_at);
    SyncBatch {
        site,
        site_code: site_code.to_string(),
        zone,
        sender: Sender {
            user: who.id,
            user_name: who.name.clone(),
            device: None,
        },
        clock: ClockSample::measure(
            received_at,
            pass.received_at + who.skew_ms - RTT_MS / 2,
            Some(RTT_MS),
        ),
        received_at,
        events: events
            .iter()
            .enumerate()
            .map(|(i, e)| {
                let raw = serde_json::to_value(e).expect("a WireEvent always serialises");
                event::read(&raw, i)
            })
            .collect(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    #[test]
    fn a_pass_reads_back_as_the_events_a_phone_sends_with_its_clock_put_right() {
        let mut rng = ChaCha8Rng::seed_from_u64(1);
        let keys = [
            Found {
                sku: "FX-10000".into(),
                lot: String::new(),
            },
            Found {
                sku: "FX-10001".into(),
                lot: String::new(),
            },
        ];
        let start = 1_780_000_000_000;
        let (pass, free) = lay_out(0, 9, "A-01-01-1", &keys, start, &mut rng, |k, _| {
            i64::from(k.sku == "FX-10000") * 4
        });
        assert_eq!(pass.lines.len(), 1, "an empty key is not keyed");
        assert!(pass.opened_at < pass.lines[0].at && pass.lines[0].at < pass.done_at);
        assert!(pass.done_at < free && pass.done_at < pass.received_at);
        let who = Counter {
            id: UserId(5),
            name: "esme".into(),
            skew_ms: 1_500,
        };
        let b = batch(SiteId(1), "KLN", SiteZone::UTC, &pass, &who, &mut rng);
        let events: Vec<_> = b.events.iter().map(|e| e.clone().unwrap()).collect();
        assert_eq!(events.len(), 3);
        assert_eq!(events[0].id, pass.uid);
        assert!(
            events
                .iter()
                .all(|e| e.pass == pass.uid && e.task == Some(9))
        );
        // The phone runs 1.5 s fast; the sample measured at receipt puts it right within
        // half the round trip.
        let (at, u) = b.clock.correct(events[2].device_at);
        assert!(
            (at.0 - pass.done_at).abs() <= u,
            "{} vs {}",
            at.0,
            pass.done_at
        );
    }
}
