//! `cairn net`'s text: a pass's every key with the full reasoning of its netting, in the
//! order a person checks it by hand. Formatting only, no I/O.

use super::rule::Status;
use super::tolerance::{Limit, Tolerance, Verdict};
use crate::netting::results::{PassReport, ResultDetail};
use crate::time::Timestamp;
use std::fmt::Write as _;

fn tolerance_text(t: &Tolerance) -> String {
    let mut parts = Vec::new();
    if let Some(u) = t.units {
        parts.push(format!("{u} units"));
    }
    if let Some(bp) = t.percent_bp {
        parts.push(format!("{}.{:02} % of f*", bp / 100, bp % 100));
    }
    if let Some(v) = t.value_minor {
        parts.push(format!("{}.{:02} in value", v / 100, v % 100));
    }
    if parts.is_empty() {
        "exact (no limit set)".into()
    } else {
        parts.join(" and ")
    }
}

fn verdict_text(v: &Verdict) -> String {
    match v {
        Verdict::Exact => "exact".into(),
        Verdict::WithinTolerance => "within tolerance".into(),
        Verdict::OutOfTolerance { breached } => {
            let names: Vec<&str> = breached
                .iter()
                .map(|l| match l {
                    Limit::Units => "units",
                    Limit::Percent => "percent",
                    Limit::Value => "value",
                })
                .collect();
            format!("out of tolerance (breaks {})", names.join(", "))
        }
        Verdict::Held { reason, variance } => {
            format!(
                "held for review: {reason} (the variance alone: {})",
                verdict_text(variance)
            )
        }
    }
}

fn status_words(s: Status) -> &'static str {
    match s {
        Status::NoMovesInWindow => "nothing moved in the window: one book value",
        Status::MatchesState => "stock moved during the count and the count equals a book state",
        Status::MatchesNoState => {
            "stock moved during the count and the count equals no state: measured to the nearest"
        }
        Status::FoundStock => "counted where the book showed none throughout the window",
        Status::MissingFromBin => "in the book, not scanned in a bin marked done",
    }
}

fn key_text(out: &mut String, d: &ResultDetail, now: Timestamp) {
    let r = &d.row;
    let e = &d.evidence;
    let n = &e.netting;
    let lot = if r.lot.is_empty() {
        String::new()
    } else {
        format!(" lot {}", r.lot)
    };
    let _ = writeln!(out, "\n{} {}{} (result {})", r.bin, r.sku, lot, r.id);
    let _ = writeln!(
        out,
        "  class {}, unit cost {}.{:02}",
        r.class.as_deref().unwrap_or("none (held to A's tolerance)"),
        r.unit_cost_minor / 100,
        r.unit_cost_minor % 100
    );
    let how = if n.scanned {
        format!("counted {} (last scan {})", n.counted, r.counted_at)
    } else {
        "not scanned: counted 0 over the bin's window".to_string()
    };
    let _ = writeln!(out, "  {how}");
    let _ = writeln!(
        out,
        "  window [{}, {}]: first scan − u to {} + u, u = {} ms",
        n.window.start,
        n.window.end,
        if n.scanned { "last scan" } else { "bin done" },
        e.timing.clock_uncertainty_ms.max(0)
    );
    let _ = writeln!(
        out,
        "  opening {}: {} summed before {}, plus the moves entirely before the window",
        n.opening, e.balance_before, e.history_from
    );
    if e.moves.is_empty() {
        let _ = writeln!(out, "  moves in the window: none");
    } else {
        let _ = writeln!(out, "  moves in the window (event order):");
        for m in &e.moves {
            let _ = writeln!(
                out,
                "    {} {:+} {} from {} (±{} ms) id {} [{}]",
                m.event_at, m.delta, m.kind, m.source, m.uncertainty_ms, m.uid, m.id
            );
        }
    }
    let states: Vec<String> = n
        .states
        .iter()
        .enumerate()
        .map(|(i, s)| {
            let mark = if i == n.nearest { "*" } else { "" };
            match s.at {
                None => format!("{}{mark} (opening)", s.qty),
                Some(t) => format!("{}{mark} (after {t})", s.qty),
            }
        })
        .collect();
    let _ = writeln!(out, "  feasible states F: {}", states.join(", "));
    let _ = writeln!(
        out,
        "  f* = {} (nearest to {}; a tie goes to the later state); variance c − f* = {:+}",
        n.f_star, n.counted, n.variance
    );
    let _ = writeln!(out, "  status {}: {}", r.status, status_words(n.status));
    let _ = writeln!(
        out,
        "  tolerance {}: {}; verdict {}",
        tolerance_text(&e.tolerance),
        verdict_text(&e.judged),
        r.verdict
    );
    if let Some(o) = &r.recount_outcome {
        let _ = writeln!(
            out,
            "  recount: {o}{}",
            if r.first_count_wrong {
                " (the first count was wrong)"
            } else {
                ""
            }
        );
    }
    let settling = if r.settled || now > r.settles_at {
        format!("settled (after {})", r.settles_at)
    } else {
        format!("provisional until {}", r.settles_at)
    };
    let _ = writeln!(out, "  {settling}; ledger watermark {}", r.watermark);
    if !r.renet_reason.is_empty() {
        let _ = writeln!(
            out,
            "  re-netted (replaces {:?}): {}",
            d.replaces, r.renet_reason
        );
    }
}

/// Renders a pass and every key of it.
pub fn to_text(report: &PassReport, now: Timestamp) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "count {} (pass {}) of bin {} at site {} by {}",
        report.pass, report.pass_id, report.bin, report.site, report.counter
    );
    let _ = writeln!(
        out,
        "first scan {}, bin done {}, clock uncertainty {} ms{}",
        report.first_at,
        report
            .done_at
            .map_or_else(|| "not yet".to_string(), |t| t.to_string()),
        report.uncertainty_ms,
        match report.rechecks.as_slice() {
            [] => String::new(),
            [one] => format!(", a recount of result {one}"),
            many => format!(
                ", a recount of results {}",
                many.iter()
                    .map(i64::to_string)
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        }
    );
    if report.results.is_empty() {
        let _ = writeln!(
            out,
            "no results{}",
            if report.done_at.is_none() {
                ": the bin is not marked done"
            } else {
                ""
            }
        );
    }
    for d in &report.results {
        key_text(&mut out, d, now);
    }
    out
}
