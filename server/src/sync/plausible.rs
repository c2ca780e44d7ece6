//! Whether a phone's times can be believed (DESIGN.md §6): a phone's clock is evidence,
//! never truth. One rule in one place, no I/O; the store asks it about every event it is
//! about to keep.
//!
//! The bounds:
//! - **The request**: its `device_clock` must lie within [`MAX_CLOCK_SKEW_MS`] of the
//!   server's clock when it arrives. A phone whose date is that far off is told to set its
//!   clock, and nothing of the request is stored.
//! - **An event**, corrected to server time (`at ± u`, [`super::clock`]), must overlap
//!   `[earliest, latest]`: `latest` is the moment the server received it (an event cannot
//!   happen after it arrived); `earliest` is the latest of: [`MAX_OFFLINE_MS`] before the
//!   receipt (the longest a phone is expected to stay offline), and, for an event of a
//!   task, the moment the task could first be known ([`TaskFloor`]). A refused event
//!   stores nothing.
//! - **A pass** is held for review (its results are out of tolerance whatever the
//!   variance, so a stretched window can never make a hit) when the phone's clock moved
//!   between two syncs that carried its events by more than the clocks' own uncertainty
//!   and drift allow ([`clock_step`]), or when its first scan and its bin-done lie more
//!   than [`MAX_PASS_SPAN_MS`] apart.

use super::clock::{ClockSample, drift_ms};
use crate::time::Timestamp;

/// Largest distance between a request's `device_clock` and the server's clock, in ms: a
/// day. Phones take their time from the network; a clock a day off is a wrong date.
pub const MAX_CLOCK_SKEW_MS: i64 = crate::time::DAY_MS;
/// Oldest an event may be when it reaches the server, in ms: 72 hours, a weekend offline.
pub const MAX_OFFLINE_MS: i64 = 72 * 3_600_000;
/// Longest a pass over one bin may take from first scan to bin-done before its results
/// are held, in ms: 4 hours. A bin is counted in minutes (common practice, no source); a
/// pass spanning hours says the clock or the counter's record cannot be trusted.
pub const MAX_PASS_SPAN_MS: i64 = 4 * 3_600_000;
/// Slack on top of the measured uncertainties before a change of offset counts as a
/// step of the phone's clock, in ms (timer resolution and scheduling).
pub const CLOCK_STEP_SLACK_MS: i64 = 1_000;

/// The earliest moment an event of a task can have been made: the task could not be known
/// before its list was built, nor (for a recount) before the count it re-checks was done.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TaskFloor {
    /// An ordinary task: the earlier of its list's build and the start of its list's day.
    Listed(Timestamp),
    /// A recount or supervisor count: when the pass it re-checks was marked done.
    Recount(Timestamp),
}

impl TaskFloor {
    fn at(self) -> Timestamp {
        match self {
            TaskFloor::Listed(t) | TaskFloor::Recount(t) => t,
        }
    }
}

/// Checks a request's device clock against the server's; the error is for the counter.
pub fn check_device_clock(received: Timestamp, device_clock: i64) -> Result<(), String> {
    let apart = device_clock.abs_diff(received.0);
    if apart <= MAX_CLOCK_SKEW_MS as u64 {
        return Ok(());
    }
    let shown = Timestamp(device_clock)
        .to_utc()
        .format("%Y-%m-%d %H:%M UTC")
        .to_string();
    let days = apart / crate::time::DAY_MS.unsigned_abs();
    let far = if days >= 1 {
        format!("{days} day{} away from", if days == 1 { "" } else { "s" })
    } else {
        "far from".to_string()
    };
    Err(format!(
        "device_clock: this phone's clock reads {shown}, {far} the server's time. Set the \
         phone's date and time (automatic), then sync again; nothing of this request was \
         stored and the phone keeps its counts."
    ))
}

/// The interval an event's corrected time must overlap.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Bounds {
    pub earliest: Timestamp,
    pub latest: Timestamp,
    /// What `earliest` is, for the refusal's words.
    floor: Option<TaskFloor>,
}

/// Returns the bounds of an event received at `received`, of a task with `floor` if any.
pub fn bounds(received: Timestamp, floor: Option<TaskFloor>) -> Bounds {
    let offline = received.plus_ms(-MAX_OFFLINE_MS);
    let (earliest, floor) = match floor {
        Some(f) if f.at() > offline => (f.at(), Some(f)),
        _ => (offline, None),
    };
    Bounds {
        earliest,
        latest: received,
        floor,
    }
}

/// Checks an event's corrected time `at ± uncertainty_ms`; the error, in plain words, is
/// shown to the counter.
pub fn check_event(at: Timestamp, uncertainty_ms: i64, b: &Bounds) -> Result<(), String> {
    let u = uncertainty_ms.max(0);
    if at.plus_ms(u) < b.earliest {
        let before = match b.floor {
            Some(TaskFloor::Listed(_)) => "before its task was on a count list",
            Some(TaskFloor::Recount(_)) => "before the count it re-checks was finished",
            None => "more than 72 hours before it reached the server",
        };
        return Err(format!(
            "the phone's clock puts this at {at}, {before}: the time cannot be right, so it \
             was not kept. Check the phone's date and time, then count the bin again."
        ));
    }
    if at.plus_ms(-u) > b.latest {
        return Err(format!(
            "the phone's clock puts this at {at}, after it reached the server ({}): the time \
             cannot be right, so it was not kept. Check the phone's date and time, then count \
             the bin again.",
            b.latest
        ));
    }
    Ok(())
}

/// A sample of a phone's clock and when the server took it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Sampled {
    pub offset_ms: i64,
    pub uncertainty_ms: i64,
    pub at: Timestamp,
}

impl Sampled {
    /// Returns the sample a request gave, taken at `received`.
    pub fn of(clock: &ClockSample, received: Timestamp) -> Self {
        Self {
            offset_ms: clock.offset_ms,
            uncertainty_ms: clock.uncertainty_ms,
            at: received,
        }
    }
}

/// Returns how far the phone's clock stepped between two samples (later − earlier offset,
/// in ms) when that is more than both uncertainties, the drift allowed between them and
/// [`CLOCK_STEP_SLACK_MS`]; `None` when the two agree.
pub fn clock_step(earlier: Sampled, later: Sampled) -> Option<i64> {
    let drift = drift_ms(later.at.0, earlier.at.0);
    let allowed = earlier
        .uncertainty_ms
        .max(0)
        .saturating_add(later.uncertainty_ms.max(0))
        .saturating_add(drift)
        .saturating_add(CLOCK_STEP_SLACK_MS);
    let step = later.offset_ms.saturating_sub(earlier.offset_ms);
    (step.saturating_abs() > allowed).then_some(step)
}

/// Why a pass's results are held for review, in plain words.
pub fn step_reason(step_ms: i64) -> String {
    format!(
        "the phone's clock was changed by {} while this bin was being counted, so the \
         count's times cannot be trusted",
        span_text(step_ms.saturating_abs())
    )
}

/// Returns why a pass from `first` to `done` is held, when it spans too long.
pub fn span_reason(first: Timestamp, done: Timestamp) -> Option<String> {
    let span = done.0.saturating_sub(first.0);
    (span > MAX_PASS_SPAN_MS).then(|| {
        format!(
            "the count of this bin spans {} from first scan to done (more than {}), so its \
             times cannot be trusted",
            span_text(span),
            span_text(MAX_PASS_SPAN_MS)
        )
    })
}

/// Writes a duration in words a counter reads, to the nearest minute from an hour up and
/// the nearest second below: "3 h 05 min", "4 min 10 s", "42 s".
fn span_text(ms: i64) -> String {
    let s = ms.saturating_add(500) / 1_000;
    if s >= 3_600 {
        let min = (s + 30) / 60;
        format!("{} h {:02} min", min / 60, min % 60)
    } else if s >= 60 {
        format!("{} min {:02} s", s / 60, s % 60)
    } else {
        format!("{s} s")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const NOW: Timestamp = Timestamp(1_780_000_000_000);

    #[test]
    fn a_clock_within_a_day_is_taken_and_one_beyond_is_refused_with_its_reading() {
        assert!(check_device_clock(NOW, NOW.0 - MAX_CLOCK_SKEW_MS).is_ok());
        assert!(check_device_clock(NOW, NOW.0 + MAX_CLOCK_SKEW_MS).is_ok());
        let e = check_device_clock(NOW, 1_000).unwrap_err();
        assert!(e.contains("1970-01-01 00:00 UTC"), "{e}");
        assert!(e.contains("days away"), "{e}");
        assert!(check_device_clock(NOW, i64::MAX).is_err());
        assert!(check_device_clock(NOW, i64::MIN).is_err());
    }

    #[test]
    fn an_event_from_1970_or_after_its_arrival_is_refused() {
        let b = bounds(NOW, None);
        assert!(check_event(Timestamp(1_000), 500, &b).is_err());
        assert!(check_event(Timestamp(i64::MAX), 500, &b).is_err());
        assert!(check_event(NOW.plus_ms(2_000), 500, &b).is_err());
        // Within its uncertainty of the receipt: the clock's own error, accepted.
        assert!(check_event(NOW.plus_ms(400), 500, &b).is_ok());
        assert!(check_event(NOW.plus_ms(-MAX_OFFLINE_MS + 1), 0, &b).is_ok());
        assert!(check_event(NOW.plus_ms(-MAX_OFFLINE_MS - 1), 0, &b).is_err());
    }

    #[test]
    fn a_task_cannot_be_counted_before_it_was_listed_nor_a_recount_before_the_count() {
        let listed = NOW.plus_ms(-3_600_000);
        let b = bounds(NOW, Some(TaskFloor::Listed(listed)));
        assert_eq!(b.earliest, listed);
        let e = check_event(listed.plus_ms(-10_000), 1_000, &b).unwrap_err();
        assert!(e.contains("before its task was on a count list"), "{e}");
        assert!(check_event(listed.plus_ms(-500), 1_000, &b).is_ok());
        let r = bounds(NOW, Some(TaskFloor::Recount(listed)));
        let e = check_event(listed.plus_ms(-10_000), 0, &r).unwrap_err();
        assert!(e.contains("re-checks"), "{e}");
        // A floor older than the offline bound gives way to it.
        let old = bounds(NOW, Some(TaskFloor::Listed(Timestamp(0))));
        assert_eq!(old.earliest, NOW.plus_ms(-MAX_OFFLINE_MS));
    }

    #[test]
    fn a_clock_stepped_by_minutes_is_caught_and_drift_within_the_allowance_is_not() {
        let first = Sampled {
            offset_ms: 120_000,
            uncertainty_ms: 100,
            at: NOW,
        };
        // Two hours later: 7,200,000 ms × 200 ppm = 1,440 ms of drift allowed, plus
        // 100 + 100 of uncertainty and 1,000 of slack: 2,640 ms.
        let later = |offset_ms| Sampled {
            offset_ms,
            uncertainty_ms: 100,
            at: NOW.plus_ms(7_200_000),
        };
        assert_eq!(clock_step(first, later(120_000 + 2_640)), None);
        assert_eq!(clock_step(first, later(120_000 + 2_641)), Some(2_641));
        assert_eq!(
            clock_step(first, later(120_000 - 3_600_000)),
            Some(-3_600_000)
        );
        assert!(step_reason(-3_600_000).contains("1 h 00 min"));
        // A step measured a little short of two hours reads as the two hours it was.
        assert!(step_reason(-7_199_930).contains("2 h 00 min"));
        assert!(step_reason(61_400).contains("1 min 01 s"));
    }

    #[test]
    fn a_pass_spanning_more_than_four_hours_is_held() {
        assert_eq!(span_reason(NOW, NOW.plus_ms(MAX_PASS_SPAN_MS)), None);
        let r = span_reason(NOW, NOW.plus_ms(MAX_PASS_SPAN_MS + 65_000)).unwrap();
        assert!(r.contains("4 h 01 min"), "{r}");
    }
}
