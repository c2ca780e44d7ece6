//! Value-axis ticks at round numbers: a step of 1, 2 or 5 × 10^k, never finer than
//! the axis's labels can tell apart, and ticks that cover the data. No I/O.

/// The mantissas of a round step, smallest first.
const MANTISSAS: [f64; 3] = [1.0, 2.0, 5.0];
/// Most candidate steps tried: each is at least twice the one before, so from the
/// first candidate (a tenth of the raw step) this reaches far past any range.
const MAX_CANDIDATES: usize = 64;

/// Returns ticks `first, first + step, …, last` with `first ≤ lo`, `last ≥ hi`,
/// `step` a round number (1, 2 or 5 × 10^k) no smaller than `min_step`, and at most
/// `max_ticks` of them (at least three, which any range fits: one step below zero,
/// zero and one above). A flat or reversed range is widened to one `min_step` above
/// `lo`.
pub fn nice_ticks(lo: f64, hi: f64, max_ticks: usize, min_step: f64) -> Vec<f64> {
    assert!(max_ticks >= 3, "three ticks fit any range");
    assert!(
        min_step > 0.0 && min_step.is_finite(),
        "a positive min_step"
    );
    assert!(lo.is_finite() && hi.is_finite(), "finite bounds");
    let hi = if hi > lo { hi } else { lo + min_step };
    let raw = ((hi - lo) / (max_ticks - 1) as f64).max(min_step);
    let mut exponent = raw.log10().floor() as i32 - 1;
    let mut fewest: Vec<f64> = Vec::new();
    for _ in 0..MAX_CANDIDATES / MANTISSAS.len() {
        for m in MANTISSAS {
            let step = m * 10f64.powi(exponent);
            if step < min_step * (1.0 - 1e-9) {
                continue;
            }
            let ticks = span(lo, hi, step, exponent);
            if ticks.len() <= max_ticks {
                return ticks;
            }
            if fewest.is_empty() || ticks.len() < fewest.len() {
                fewest = ticks;
            }
        }
        exponent += 1;
    }
    fewest
}

/// Lists the multiples of `step` from the last at or below `lo` to the first at or
/// above `hi`, rounded to the step's decimals so `0.1 × 3` prints as 0.3.
fn span(lo: f64, hi: f64, step: f64, exponent: i32) -> Vec<f64> {
    // A bound a rounding error past a multiple is taken as on it, not a step out.
    let near = |a: f64, b: f64| (a - b).abs() <= 1e-9 * step;
    let mut first = (lo / step).floor();
    if near((first + 1.0) * step, lo) {
        first += 1.0;
    }
    let mut last = (hi / step).ceil();
    if near((last - 1.0) * step, hi) {
        last -= 1.0;
    }
    let (first, last) = (first as i64, last as i64);
    let places = (-exponent).max(0);
    let scale = 10f64.powi(places);
    (first..=last)
        .map(|i| (i as f64 * step * scale).round() / scale)
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Whether `step` is 1, 2 or 5 × 10^k.
    fn round_step(step: f64) -> bool {
        let k = step.log10().floor();
        let m = step / 10f64.powf(k);
        MANTISSAS.iter().any(|r| (m - r).abs() < 1e-6) || (m - 10.0).abs() < 1e-6
    }

    #[test]
    fn a_small_money_range_gets_whole_distinct_ticks() {
        // Worked by hand: 0 to 1 minor unit with labels in whole minor units. The old
        // axis split 0..1.12 in four and printed "0, 0, 1, 1, 1".
        assert_eq!(nice_ticks(0.0, 1.0, 5, 1.0), [0.0, 1.0]);
        assert_eq!(nice_ticks(0.0, 3.0, 5, 1.0), [0.0, 1.0, 2.0, 3.0]);
    }

    #[test]
    fn hand_worked_ranges() {
        // 0 to 1 in at most 6 ticks: raw step 0.2, a round step already.
        assert_eq!(
            nice_ticks(0.0, 1.0, 6, 0.01),
            [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]
        );
        // −3,600 to 2,200 in at most 6: raw 1,160, so 2,000; from −4,000 to 4,000.
        assert_eq!(
            nice_ticks(-3600.0, 2200.0, 6, 1.0),
            [-4000.0, -2000.0, 0.0, 2000.0, 4000.0]
        );
        // 0.93 to 1 in at most 6, labels in whole percent: raw 0.014 → 0.02.
        assert_eq!(
            nice_ticks(0.93, 1.0, 6, 0.01),
            [0.92, 0.94, 0.96, 0.98, 1.0]
        );
        // A flat range is widened by one step.
        assert_eq!(nice_ticks(5.0, 5.0, 5, 1.0), [5.0, 6.0]);
    }

    proptest! {
        #[test]
        fn ticks_are_round_distinct_and_cover_the_range(
            lo in -1e7f64..1e7,
            width in 0f64..1e7,
            max_ticks in 3usize..9,
            min_exp in -3i32..3,
        ) {
            let min_step = 10f64.powi(min_exp);
            let hi = lo + width;
            let t = nice_ticks(lo, hi, max_ticks, min_step);
            prop_assert!(t.len() >= 2);
            prop_assert!(t[0] <= lo + 1e-9 * lo.abs().max(1.0));
            prop_assert!(*t.last().unwrap() >= hi - 1e-9 * hi.abs().max(1.0));
            // Far from zero a small step loses digits to the floats: snap it back.
            let raw = t[1] - t[0];
            let k = raw.log10().floor();
            let step = (raw / 10f64.powf(k) * 1e4).round() / 1e4 * 10f64.powf(k);
            let slack = 1e-9 * lo.abs().max(hi.abs()).max(1.0);
            prop_assert!(step >= min_step * (1.0 - 1e-9), "step {step} under {min_step}");
            prop_assert!(round_step(step), "step {step}");
            for w in t.windows(2) {
                prop_assert!(((w[1] - w[0]) - step).abs() <= slack + step * 1e-6, "{t:?}");
            }
            for v in &t {
                let off = (v / step - (v / step).round()).abs() * step;
                prop_assert!(off <= slack + step * 1e-6, "{v} is a multiple of {step}");
            }
            prop_assert!(t.len() <= max_ticks, "{t:?}");
            // Whole-unit labels of whole-unit steps never repeat.
            if min_step >= 1.0 {
                let labels: Vec<String> = t.iter().map(|v| format!("{v:.0}")).collect();
                let mut d = labels.clone();
                d.dedup();
                prop_assert_eq!(d, labels);
            }
        }
    }
}
