//! What `cairn simulate-counting` prints and draws: the week-by-week table of both
//! policies, their totals, the verdict, and an SVG chart of the error value each
//! found. Pure string building; no I/O.

use super::{Policy, WeekRow};
use crate::accuracy::chart::{escape, nice_ticks};
use std::fmt::Write as _;

/// Which policy the reader is weighing as the proposal; `Both` marks neither.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Shown {
    Both,
    Proposal(Policy),
}

/// One policy's figures over the whole run.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Totals {
    pub policy: Policy,
    pub errors_found: u32,
    /// Minor units.
    pub error_value_found: f64,
    /// Of it, errors that stood on the run's first day; minor units.
    pub first_day_value_found: f64,
    /// Mean age of every error found, days.
    pub mean_age_days: Option<f64>,
    pub minutes_used: f64,
    pub final_ira: f64,
    pub final_value_accuracy: f64,
    pub final_safety_stock_value: f64,
    /// Error value left standing at the end of each week, averaged over the weeks:
    /// the wrong value the records carry on an ordinary day; minor units.
    pub mean_standing_value: f64,
}

impl Totals {
    /// Returns the value found of errors that arose during the run (not standing on its
    /// first day), minor units.
    pub fn arisen_value(&self) -> f64 {
        self.error_value_found - self.first_day_value_found
    }
}

/// Sums one policy's weeks.
pub fn totals(rows: &[WeekRow], policy: Policy) -> Totals {
    let mine: Vec<&WeekRow> = rows.iter().filter(|r| r.policy == policy).collect();
    let errors: u32 = mine.iter().map(|r| r.errors_found).sum();
    let age: f64 = mine
        .iter()
        .filter_map(|r| r.mean_age_days.map(|a| a * f64::from(r.errors_found)))
        .sum();
    let last = mine.last();
    Totals {
        policy,
        errors_found: errors,
        error_value_found: mine.iter().map(|r| r.error_value_found).sum(),
        first_day_value_found: mine.iter().map(|r| r.first_day_value_found).sum(),
        mean_age_days: (errors > 0).then(|| age / f64::from(errors)),
        minutes_used: mine.iter().map(|r| r.minutes_used).sum(),
        final_ira: last.map_or(1.0, |r| r.ira),
        final_value_accuracy: last.map_or(1.0, |r| r.value_accuracy),
        final_safety_stock_value: last.map_or(0.0, |r| r.safety_stock_value),
        mean_standing_value: if mine.is_empty() {
            0.0
        } else {
            mine.iter().map(|r| r.standing_error_value).sum::<f64>() / mine.len() as f64
        },
    }
}

/// Formats minor units as major units with two decimals and thousands separators.
pub fn money(minor: f64) -> String {
    let cents = minor.round() as i64;
    let (sign, cents) = if cents < 0 {
        ("-", -cents)
    } else {
        ("", cents)
    };
    let whole = (cents / 100).to_string();
    let mut grouped = String::new();
    for (i, ch) in whole.chars().enumerate() {
        if i > 0 && (whole.len() - i) % 3 == 0 {
            grouped.push(',');
        }
        grouped.push(ch);
    }
    format!("{sign}{grouped}.{:02}", cents % 100)
}

fn pct(v: f64) -> String {
    format!("{:.2} %", v * 100.0)
}

fn name(policy: Policy, shown: Shown) -> String {
    match shown {
        Shown::Proposal(p) if p == policy => format!("{}*", policy.as_str()),
        _ => policy.as_str().to_string(),
    }
}

/// Writes the week-by-week table, both policies, then their totals and the verdict.
pub fn table(rows: &[WeekRow], shown: Shown) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{:>4}  {:<6} {:>8} {:>10} {:>7} {:>14} {:>8} {:>14} {:>14} {:>8}",
        "week",
        "policy",
        "IRA",
        "value acc",
        "errors",
        "error value",
        "age (d)",
        "left standing",
        "safety stock",
        "minutes"
    );
    for r in rows {
        let _ = writeln!(
            out,
            "{:>4}  {:<6} {:>8} {:>10} {:>7} {:>14} {:>8} {:>14} {:>14} {:>8.0}",
            r.week,
            name(r.policy, shown),
            pct(r.ira),
            pct(r.value_accuracy),
            r.errors_found,
            money(r.error_value_found),
            r.mean_age_days.map_or("-".into(), |a| format!("{a:.1}")),
            money(r.standing_error_value),
            money(r.safety_stock_value),
            r.minutes_used
        );
    }
    let _ = writeln!(out);
    let _ = writeln!(
        out,
        "{:<6} {:>7} {:>16} {:>16} {:>12} {:>10} {:>10} {:>12} {:>14}",
        "totals",
        "errors",
        "error value",
        "of it, day one",
        "mean age (d)",
        "minutes",
        "final IRA",
        "final value",
        "safety stock"
    );
    let both = Policy::BOTH.map(|p| totals(rows, p));
    for t in &both {
        let _ = writeln!(
            out,
            "{:<6} {:>7} {:>16} {:>16} {:>12} {:>10.0} {:>10} {:>12} {:>14}",
            name(t.policy, shown),
            t.errors_found,
            money(t.error_value_found),
            money(t.first_day_value_found),
            t.mean_age_days.map_or("-".into(), |a| format!("{a:.1}")),
            t.minutes_used,
            pct(t.final_ira),
            pct(t.final_value_accuracy),
            money(t.final_safety_stock_value)
        );
    }
    let _ = writeln!(out);
    let _ = writeln!(out, "{}", verdict(&both[0], &both[1]));
    let _ = writeln!(out, "{}", arising_verdict(&both[0], &both[1]));
    let _ = writeln!(out, "{}", standing_verdict(&both[0], &both[1]));
    if let Shown::Proposal(p) = shown {
        let _ = writeln!(out, "* {} is the policy proposed (--policy)", p.as_str());
    }
    out
}

/// Says which policy found more error value, by how much.
pub fn verdict(abc: &Totals, risk: &Totals) -> String {
    let diff = risk.error_value_found - abc.error_value_found;
    let rel = if abc.error_value_found > 0.0 {
        format!(" ({:+.1} %)", diff / abc.error_value_found * 100.0)
    } else {
        String::new()
    };
    let word = if diff > 0.0 {
        "more"
    } else if diff < 0.0 {
        "less"
    } else {
        "the same"
    };
    if diff == 0.0 {
        return "risk found the same error value as abc at equal minutes".into();
    }
    format!(
        "risk found {} {word} error value than abc{rel} at equal minutes ({} against {})",
        money(diff.abs()),
        money(risk.error_value_found),
        money(abc.error_value_found)
    )
}

/// Says the same of the errors that arose during the run (those standing on its first
/// day left out): what the policies' choice of intervals is about, apart from where the
/// history happened to leave errors.
pub fn arising_verdict(abc: &Totals, risk: &Totals) -> String {
    compared(
        "of the errors that arose during the run (not standing on its first day)",
        risk.arisen_value(),
        abc.arisen_value(),
    )
}

/// Writes `what: risk R, abc A (±x %)`, the change left out when `abc`'s figure is 0.
fn compared(what: &str, risk: f64, abc: f64) -> String {
    let rel = if abc > 0.0 {
        format!(" ({})", change(risk, abc))
    } else {
        String::new()
    };
    format!("{what}: risk {}, abc {}{rel}", money(risk), money(abc))
}

/// Says which policy left less error value standing on an ordinary day: the mean of
/// the weeks' ends. Over a run, the value found is what stood on the first day plus
/// what arose, less what stands on the last: the same errors arise under both
/// policies, so the found verdicts differ only by the last day's standing, one
/// snapshot; this line weighs every week.
pub fn standing_verdict(abc: &Totals, risk: &Totals) -> String {
    compared(
        "error value left standing at the weeks' ends, on average",
        risk.mean_standing_value,
        abc.mean_standing_value,
    )
}

/// Most seeds one `--seeds` run may take.
pub const MAX_SEEDS: u64 = 100;

/// One seed's figures in a several-seed run: both policies' totals.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SeedRow {
    pub seed: u64,
    pub abc: Totals,
    pub risk: Totals,
}

fn change(risk: f64, abc: f64) -> String {
    if abc > 0.0 {
        format!("{:+.1} %", (risk - abc) / abc * 100.0)
    } else {
        "-".into()
    }
}

/// Writes one line a seed (error value found, of it what arose during the run, and
/// the mean standing, each policy's and risk's change) and the verdicts over them all:
/// the seeds' sums compared, and in how many seeds risk was ahead. One seed's figures
/// turn on a few large errors; the sums over many weigh the policies, not the draws.
pub fn seeds_table(rows: &[SeedRow]) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "{:>6} {:>14} {:>14} {:>8} {:>14} {:>14} {:>8} {:>14} {:>14} {:>8}",
        "seed",
        "found abc",
        "found risk",
        "change",
        "arose abc",
        "arose risk",
        "change",
        "standing abc",
        "standing risk",
        "change"
    );
    for r in rows {
        let _ = writeln!(
            out,
            "{:>6} {:>14} {:>14} {:>8} {:>14} {:>14} {:>8} {:>14} {:>14} {:>8}",
            r.seed,
            money(r.abc.error_value_found),
            money(r.risk.error_value_found),
            change(r.risk.error_value_found, r.abc.error_value_found),
            money(r.abc.arisen_value()),
            money(r.risk.arisen_value()),
            change(r.risk.arisen_value(), r.abc.arisen_value()),
            money(r.abc.mean_standing_value),
            money(r.risk.mean_standing_value),
            change(r.risk.mean_standing_value, r.abc.mean_standing_value),
        );
    }
    let sum = |f: &dyn Fn(&SeedRow) -> f64| rows.iter().map(f).sum::<f64>();
    let ahead = |f: &dyn Fn(&SeedRow) -> bool| rows.iter().filter(|r| f(r)).count();
    let n = rows.len();
    let _ = writeln!(out);
    let _ = writeln!(
        out,
        "over {n} seeds, risk against abc: error value found {} in sum (ahead in {} of {n}); \
         of the errors that arose during the runs {} (ahead in {} of {n}); error value left \
         standing, mean of the weeks, {} (less in {} of {n})",
        change(
            sum(&|r| r.risk.error_value_found),
            sum(&|r| r.abc.error_value_found)
        ),
        ahead(&|r| r.risk.error_value_found > r.abc.error_value_found),
        change(
            sum(&|r| r.risk.arisen_value()),
            sum(&|r| r.abc.arisen_value())
        ),
        ahead(&|r| r.risk.arisen_value() > r.abc.arisen_value()),
        change(
            sum(&|r| r.risk.mean_standing_value),
            sum(&|r| r.abc.mean_standing_value)
        ),
        ahead(&|r| r.risk.mean_standing_value < r.abc.mean_standing_value),
    );
    out
}

const WIDTH: f64 = 720.0;
const HEIGHT: f64 = 320.0;
const LEFT: f64 = 84.0;
const RIGHT: f64 = 120.0;
const TOP: f64 = 40.0;
const BOTTOM: f64 = 44.0;
/// Least distance between the two end labels' baselines (a line of 12-unit text).
const LABEL_GAP: f64 = 15.0;

/// Draws the cumulative error value each policy found, week by week: one line each,
/// told apart by dash and marker as well as colour; the proposal drawn heavier.
pub fn svg(rows: &[WeekRow], shown: Shown, title: &str) -> String {
    let weeks: u32 = rows.iter().map(|r| r.week).max().unwrap_or(0);
    let series: Vec<(Policy, Vec<f64>)> = Policy::BOTH
        .iter()
        .map(|&p| {
            let mut sum = 0.0;
            let vals = rows
                .iter()
                .filter(|r| r.policy == p)
                .map(|r| {
                    sum += r.error_value_found / 100.0;
                    sum
                })
                .collect();
            (p, vals)
        })
        .collect();
    let top = series
        .iter()
        .flat_map(|(_, v)| v.iter().copied())
        .fold(0.0, f64::max)
        .max(1.0);
    let ticks = nice_ticks(0.0, top, 5, 1.0);
    let y_max = ticks.last().copied().unwrap_or(top).max(top);
    let (pw, ph) = (WIDTH - LEFT - RIGHT, HEIGHT - TOP - BOTTOM);
    let x = |w: u32| LEFT + pw * f64::from(w) / f64::from(weeks.max(1));
    let y = |v: f64| TOP + ph * (1.0 - v / y_max);
    let mut s = String::new();
    let _ = write!(
        s,
        r##"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" width="{WIDTH}" height="{HEIGHT}" role="img" font-family="sans-serif" font-size="12"><title>{t}</title><rect width="{WIDTH}" height="{HEIGHT}" fill="#fdfcf8"/><text x="{LEFT}" y="22" font-size="14" fill="#1f2a30">{t}</text>"##,
        t = escape(title)
    );
    for v in &ticks {
        let _ = write!(
            s,
            r##"<line x1="{LEFT}" x2="{x2:.1}" y1="{yy:.1}" y2="{yy:.1}" stroke="#d5d2c8"/><text x="{tx:.1}" y="{ty:.1}" text-anchor="end" fill="#50616b">{label}</text>"##,
            x2 = LEFT + pw,
            yy = y(*v),
            tx = LEFT - 6.0,
            ty = y(*v) + 4.0,
            label = escape(&money(v * 100.0).replace(".00", ""))
        );
    }
    let step = (weeks / 12).max(1);
    for w in (0..=weeks).step_by(step as usize) {
        let _ = write!(
            s,
            r##"<text x="{xx:.1}" y="{yy:.1}" text-anchor="middle" fill="#50616b">{w}</text>"##,
            xx = x(w),
            yy = TOP + ph + 16.0
        );
    }
    let _ = write!(
        s,
        r##"<text x="{xx:.1}" y="{yy:.1}" text-anchor="middle" fill="#50616b">week</text><line x1="{LEFT}" x2="{LEFT}" y1="{TOP}" y2="{b:.1}" stroke="#1f2a30"/><line x1="{LEFT}" x2="{r:.1}" y1="{b:.1}" y2="{b:.1}" stroke="#1f2a30"/>"##,
        xx = LEFT + pw / 2.0,
        yy = HEIGHT - 8.0,
        b = TOP + ph,
        r = LEFT + pw
    );
    // End labels beside each line's last point, pushed apart so they never overlap.
    let ends: Vec<f64> = series
        .iter()
        .map(|(_, v)| y(v.last().copied().unwrap_or(0.0)) + 4.0)
        .collect();
    let mut label_y = ends.clone();
    if (ends[0] - ends[1]).abs() < LABEL_GAP {
        let mid = (ends[0] + ends[1]) / 2.0;
        let (upper, lower) = if ends[0] <= ends[1] { (0, 1) } else { (1, 0) };
        label_y[upper] = mid - LABEL_GAP / 2.0;
        label_y[lower] = mid + LABEL_GAP / 2.0;
    }
    for (n, (p, vals)) in series.iter().enumerate() {
        let (colour, dash) = match p {
            Policy::Abc => ("#50616b", "6 4"),
            Policy::Risk => ("#9a3b2f", "none"),
        };
        let width = if shown == Shown::Proposal(*p) {
            3.5
        } else {
            2.0
        };
        let points: Vec<String> = std::iter::once((0u32, 0.0))
            .chain(vals.iter().enumerate().map(|(i, v)| (i as u32 + 1, *v)))
            .map(|(w, v)| format!("{:.1},{:.1}", x(w), y(v)))
            .collect();
        let _ = write!(
            s,
            r##"<g class="series" data-policy="{name}"><polyline fill="none" stroke="{colour}" stroke-width="{width}" stroke-dasharray="{dash}" points="{pts}"/>"##,
            name = p.as_str(),
            pts = points.join(" ")
        );
        for (i, v) in vals.iter().enumerate() {
            let (cx, cy) = (x(i as u32 + 1), y(*v));
            let _ = match p {
                Policy::Abc => write!(
                    s,
                    r##"<circle cx="{cx:.1}" cy="{cy:.1}" r="3.5" fill="{colour}"/>"##
                ),
                Policy::Risk => write!(
                    s,
                    r##"<rect x="{:.1}" y="{:.1}" width="7" height="7" fill="{colour}"/>"##,
                    cx - 3.5,
                    cy - 3.5
                ),
            };
        }
        let last = vals.last().copied().unwrap_or(0.0);
        let _ = write!(
            s,
            r##"<text x="{lx:.1}" y="{ly:.1}" fill="{colour}">{name} {amount}</text></g>"##,
            lx = LEFT + pw + 8.0,
            ly = label_y[n],
            name = escape(&name(*p, shown)),
            amount = escape(&money(last * 100.0))
        );
    }
    s.push_str("</svg>\n");
    s
}
