//! The netting rule: a count of one key judged against the movements made
//! while it was taken (DESIGN §4), and when such a result settles (§4.5).
//! Pure arithmetic on instants and integer quantities: no I/O, no clock.
//!
//! Where this file departs from the letter of §4 it says so beside the code;
//! DEVELOPERS.md ("Netting") states the rule as implemented.

use crate::time::Timestamp;
use serde::{Deserialize, Serialize};

/// The event-time uncertainty a count adjustment is posted with: the server
/// stamps it itself, so [`KeyResult::adjustment`] lands where it was meant to.
pub const ADJUSTMENT_UNCERTAINTY_MS: i64 = 0;

/// The ledger's sequence number of a movement: unique and stable, so it orders
/// movements that share an event time.
#[derive(
    Debug,
    Clone,
    Copy,
    PartialEq,
    Eq,
    PartialOrd,
    Ord,
    Hash,
    Serialize,
    Deserialize,
    utoipa::ToSchema,
)]
#[serde(transparent)]
pub struct MoveId(pub i64);

/// The timing of one counter's pass over one bin, in server time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct CountTiming {
    /// `s`: the first scan in the bin (for a bin marked done with no scan at
    /// all, the moment it was opened or marked done).
    pub first_scan: Timestamp,
    /// `e`: when the bin was marked done; `None` while it is still open.
    pub done: Option<Timestamp>,
    /// `u`: the device clock's uncertainty at the time, in ms (negative reads as 0).
    pub clock_uncertainty_ms: i64,
}

/// How one key `(item, lot)` of the bin was counted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "how", rename_all = "snake_case")]
pub enum KeyCount {
    /// Scanned or keyed: the quantity in base units and the key's last scan
    /// (or the moment its quantity was keyed).
    Scanned { qty: i64, last: Timestamp },
    /// In the book but not scanned in this count.
    NotScanned,
}

/// A closed interval of server time `[start, end]`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct Window {
    pub start: Timestamp,
    pub end: Timestamp,
}

/// Where a movement falls relative to a window.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Place {
    /// Entirely before it, even widened by its uncertainty: part of the opening balance.
    Before,
    /// Its widened event time overlaps the window.
    Inside,
    /// Entirely after it: it cannot have been seen by the count.
    After,
}

/// One movement of the key as the netting sees it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
pub struct NetMove {
    pub id: MoveId,
    /// When it physically happened, in server time.
    pub event_at: Timestamp,
    /// Signed quantity in base units.
    pub delta: i64,
    /// Its source's event-time uncertainty, ms (negative reads as 0).
    pub uncertainty_ms: i64,
}

/// One feasible book value: the opening balance, or the balance once every
/// window movement up to one event instant has been applied.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct BookState {
    pub qty: i64,
    /// The event instant of the movements that produced it; `None` for the opening.
    pub at: Option<Timestamp>,
    /// The movements applied at that instant (empty for the opening).
    pub moves: Vec<MoveId>,
}

/// What happened, in words a manager can act on.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Status {
    /// Nothing moved in the window: the count is compared with one book value.
    NoMovesInWindow,
    /// Stock moved during the count and the count equals one of the book states.
    MatchesState,
    /// Stock moved during the count and the count equals none of the states, so
    /// the size of the difference is uncertain: it is measured to the nearest.
    MatchesNoState,
    /// Counted here while the book showed none throughout the window.
    FoundStock,
    /// In the book, not scanned in a bin marked done, and no state was 0.
    MissingFromBin,
}

/// Why a key gets no result.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Skipped {
    /// Not scanned and the bin is not marked done: the counter may not have reached it.
    BinNotDone,
    /// Not scanned and the book showed 0 throughout the window (§4.3 nets only
    /// keys that were counted or had a non-zero balance in the window). A
    /// re-net that gets this for a key with a stored result means the book now
    /// agrees with the count of 0: the result's variance is 0 (this is what
    /// re-netting a missing key gives once its adjustment is posted).
    NothingToNet,
}

/// The netting of one key: the evidence and the verdict.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct KeyResult {
    pub window: Window,
    /// `c`: the counted quantity (0 for a key not scanned in a bin marked done).
    pub counted: i64,
    pub scanned: bool,
    /// The balance of every movement entirely before the window.
    pub opening: i64,
    /// `F` in event order, duplicates kept (the sequence is evidence).
    pub states: Vec<BookState>,
    /// Index of `f*` in `states`.
    pub nearest: usize,
    /// `f*`: the state nearest to the count; on a tie, the later one.
    pub f_star: i64,
    /// `c − f*` (0 when the count equals a state).
    pub variance: i64,
    /// The movements inside the window, in event order (ties by id).
    pub moves_in_window: Vec<MoveId>,
    pub status: Status,
    /// Where an adjustment of `variance` must be posted (see [`KeyResult::adjustment`]).
    pub post_at: Timestamp,
}

/// A count adjustment to post: `delta` at `event_at`, with uncertainty
/// [`ADJUSTMENT_UNCERTAINTY_MS`].
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Adjustment {
    pub delta: i64,
    pub event_at: Timestamp,
}

impl CountTiming {
    fn u(&self) -> i64 {
        self.clock_uncertainty_ms.max(0)
    }

    /// Returns `s − u`, where every key's window starts.
    pub fn window_start(&self) -> Timestamp {
        self.first_scan.plus_ms(-self.u())
    }

    /// Returns `e + u`, the end of the bin's window, or `None` while the bin is open.
    pub fn bin_window_end(&self) -> Option<Timestamp> {
        self.done.map(|e| e.plus_ms(self.u()))
    }

    /// Returns a key's window: `[s − u, last + u]` when scanned, the bin's
    /// `[s − u, e + u]` when not scanned in a bin marked done, `None` otherwise.
    /// An end before the start (a scan stamped before the first scan) is
    /// raised to the start.
    pub fn key_window(&self, count: KeyCount) -> Option<Window> {
        let start = self.window_start();
        let end = match count {
            KeyCount::Scanned { last, .. } => last.plus_ms(self.u()),
            KeyCount::NotScanned => self.bin_window_end()?,
        };
        Some(Window {
            start,
            end: end.max(start),
        })
    }
}

impl Window {
    /// Says where a movement falls: inside when `[event_at − su, event_at + su]`
    /// overlaps the window (both intervals closed).
    pub fn place(&self, m: &NetMove) -> Place {
        let su = m.uncertainty_ms.max(0);
        if m.event_at.plus_ms(su) < self.start {
            Place::Before
        } else if m.event_at.plus_ms(-su) > self.end {
            Place::After
        } else {
            Place::Inside
        }
    }

    /// Returns the instant from which movements must be passed one by one to
    /// [`net_key`]; everything stamped earlier may be summed into its
    /// `balance_before`, given that no source's uncertainty exceeds `max_uncertainty_ms`.
    pub fn history_from(&self, max_uncertainty_ms: i64) -> Timestamp {
        self.start.plus_ms(-max_uncertainty_ms.max(0))
    }
}

impl KeyResult {
    /// Returns the adjustment that makes the book agree with the count
    /// (`c − f*` at [`KeyResult::post_at`]), or `None` when the variance is 0.
    pub fn adjustment(&self) -> Option<Adjustment> {
        (self.variance != 0).then_some(Adjustment {
            delta: self.variance,
            event_at: self.post_at,
        })
    }
}

/// Nets one key of a count.
///
/// `balance_before` is the sum of every movement of the key not passed in
/// `moves`; all of those must lie entirely before the window (pass everything
/// stamped from [`Window::history_from`] on). `moves` may come in any order and
/// may also hold movements before or after the window.
pub fn net_key(
    timing: &CountTiming,
    count: KeyCount,
    balance_before: i64,
    moves: &[NetMove],
) -> Result<KeyResult, Skipped> {
    let window = timing.key_window(count).ok_or(Skipped::BinNotDone)?;
    let (counted, scanned) = match count {
        KeyCount::Scanned { qty, .. } => (qty, true),
        KeyCount::NotScanned => (0, false),
    };

    // Sorting on every field makes the result independent of the input order,
    // even if a caller passed the same id twice.
    let mut sorted = moves.to_vec();
    sorted.sort_by_key(|m| (m.event_at, m.id, m.delta, m.uncertainty_ms));

    // The opening is the sum of what lies entirely before the window, not the
    // point-in-time balance at its start: a move stamped before the start but
    // widened into the window belongs to the window, and counting it in both
    // would apply it twice.
    let mut opening = balance_before;
    let mut inside = Vec::new();
    for m in &sorted {
        match window.place(m) {
            Place::Before => opening = opening.saturating_add(m.delta),
            Place::Inside => inside.push(*m),
            Place::After => {}
        }
    }

    // One state per distinct event instant: the balance at an instant includes
    // every move stamped then (§3), and an adjustment posted at an instant
    // cannot be placed between two moves that share it.
    let mut states = vec![BookState {
        qty: opening,
        at: None,
        moves: Vec::new(),
    }];
    let mut running = opening;
    for m in &inside {
        running = running.saturating_add(m.delta);
        match states.last_mut() {
            Some(last) if last.at == Some(m.event_at) => {
                last.qty = running;
                last.moves.push(m.id);
            }
            _ => states.push(BookState {
                qty: running,
                at: Some(m.event_at),
                moves: vec![m.id],
            }),
        }
    }

    let nearest = nearest_state(&states, counted);
    let f_star = states[nearest].qty;
    let variance = counted.saturating_sub(f_star);
    let all_zero = states.iter().all(|s| s.qty == 0);
    if !scanned && all_zero {
        return Err(Skipped::NothingToNet);
    }
    let status = if !scanned && variance != 0 {
        Status::MissingFromBin
    } else if scanned && counted > 0 && all_zero {
        Status::FoundStock
    } else if inside.is_empty() {
        Status::NoMovesInWindow
    } else if variance == 0 {
        Status::MatchesState
    } else {
        Status::MatchesNoState
    };
    let post_at = posting_instant(&window, &states[nearest]);
    Ok(KeyResult {
        window,
        counted,
        scanned,
        opening,
        states,
        nearest,
        f_star,
        variance,
        moves_in_window: inside.iter().map(|m| m.id).collect(),
        status,
        post_at,
    })
}

/// Returns the index of the state nearest to `counted`; on equal distance the
/// later state wins, because the count of a key ends at its last scan and the
/// later state is the book's latest word on what stood there. Posting later
/// also rewrites less of the window's history.
fn nearest_state(states: &[BookState], counted: i64) -> usize {
    let mut best = 0;
    for (i, s) in states.iter().enumerate() {
        if counted.abs_diff(s.qty) <= counted.abs_diff(states[best].qty) {
            best = i;
        }
    }
    best
}

/// Returns where an adjustment for `state` goes so that re-netting the same
/// count finds the count among the states (variance 0).
///
/// Any position at or before the state works, because the adjustment shifts
/// every later state by `c − f*`; §4.6 asks for the state's own instant, the
/// latest such position. Two cases need care:
/// - the opening: `start − 1 ms`, so it joins the opening (a move stamped
///   before the start may already be inside the window, and an adjustment at
///   the start would land after it);
/// - a state whose moves are stamped after the window end (pulled in by their
///   uncertainty): an adjustment there would fall after the window and be
///   ignored by a re-net, so it goes at the window end, just before them.
fn posting_instant(window: &Window, state: &BookState) -> Timestamp {
    match state.at {
        None => window.start.plus_ms(-1),
        Some(at) => at.min(window.end),
    }
}

/// The event-time habits of one movement source.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct SourceTiming {
    /// How far its event times may be from the truth, ms.
    pub uncertainty_ms: i64,
    /// How long after the event it may record a movement, ms.
    pub posting_lag_ms: i64,
}

/// Whether a count's results may still change.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "state", rename_all = "snake_case")]
pub enum Settling {
    /// The bin is not marked done yet.
    Open,
    /// A source may still record a movement that changes the result, up to and
    /// including `settles_after`.
    Provisional { settles_after: Timestamp },
    /// Every source's allowed lag has passed.
    Settled,
}

/// Returns the last instant at which an allowed movement could still change
/// the count: `e + u + max over sources (uncertainty + posting lag)`, or `None`
/// while the bin is open.
///
/// §4.5 counts only the posting lag; a movement stamped up to its source's
/// uncertainty after `e + u` is still inside a window, so that is added too.
pub fn settles_after(timing: &CountTiming, sources: &[SourceTiming]) -> Option<Timestamp> {
    let reach = sources
        .iter()
        .map(|s| {
            s.uncertainty_ms
                .max(0)
                .saturating_add(s.posting_lag_ms.max(0))
        })
        .max()
        .unwrap_or(0);
    timing.bin_window_end().map(|end| end.plus_ms(reach))
}

/// Says whether the count's results are open, provisional or settled at `now`.
pub fn settling(timing: &CountTiming, sources: &[SourceTiming], now: Timestamp) -> Settling {
    match settles_after(timing, sources) {
        None => Settling::Open,
        Some(t) if now > t => Settling::Settled,
        Some(t) => Settling::Provisional { settles_after: t },
    }
}

/// Says whether a newly recorded movement of `moved_key` must re-net the
/// result of `result_key`: same key, and its widened event time reaches back
/// to `e + u` or earlier (`event_at − su ≤ e + u`; §4.5 says `event_at ≤ e + u`,
/// which misses a movement its uncertainty pulls into the window). While the
/// bin is open every movement of the key re-nets.
pub fn must_renet<K: PartialEq>(
    result_key: &K,
    timing: &CountTiming,
    moved_key: &K,
    event_at: Timestamp,
    uncertainty_ms: i64,
) -> bool {
    if result_key != moved_key {
        return false;
    }
    match timing.bin_window_end() {
        None => true,
        Some(end) => event_at.plus_ms(-uncertainty_ms.max(0)) <= end,
    }
}
