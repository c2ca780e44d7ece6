//! Mean and sample standard deviation, computed so that large values with a
//! small spread (a count of 10,000,000 give or take one) keep their digits.
//!
//! The method is the corrected two-pass algorithm: a first pass finds the
//! mean with compensated (Neumaier) summation; a second pass sums the
//! deviations `dᵢ = xᵢ − m` and their squares, and the variance is
//! `(Σdᵢ² − (Σdᵢ)²/n) / (n − 1)`. The subtracted term is zero in exact
//! arithmetic and cancels, to first order, the rounding left in `m`; the sum
//! of deviations also refines the mean itself. The textbook one-pass formula
//! `Σx² − (Σx)²/n` loses every digit on such data; the tests show it.
//! Pure arithmetic; no I/O.

use serde::Serialize;

/// Largest magnitude accepted for one value: squares of deviations stay far
/// from overflow however many values there are.
pub const MAX_ABS_VALUE: f64 = 1e100;

/// Why a list of values has no summary.
#[derive(Debug, Clone, Copy, PartialEq, thiserror::Error)]
pub enum StatsError {
    #[error("no values to summarise")]
    Empty,
    #[error("value {index} is not a finite number")]
    NotFinite { index: usize },
    #[error("value {index} ({value}) is beyond ±{MAX_ABS_VALUE:e}")]
    OutOfRange { index: usize, value: f64 },
}

/// The size, mean and sample variance of a list of values.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Summary {
    /// Number of values.
    pub n: usize,
    /// Arithmetic mean.
    pub mean: f64,
    /// Sum of squared deviations from the mean.
    pub sum_sq_dev: f64,
    /// Sample variance (divisor `n − 1`); `None` for a single value.
    pub variance: Option<f64>,
}

impl Summary {
    /// Returns the sample standard deviation; `None` for a single value.
    pub fn std_dev(&self) -> Option<f64> {
        self.variance.map(f64::sqrt)
    }
}

/// Summarises `values`: size, mean, sum of squared deviations and sample variance.
pub fn summarize(values: &[f64]) -> Result<Summary, StatsError> {
    if values.is_empty() {
        return Err(StatsError::Empty);
    }
    for (index, &value) in values.iter().enumerate() {
        if !value.is_finite() {
            return Err(StatsError::NotFinite { index });
        }
        if value.abs() > MAX_ABS_VALUE {
            return Err(StatsError::OutOfRange { index, value });
        }
    }
    let n = values.len() as f64;
    let mut sum = Compensated::default();
    values.iter().for_each(|&x| sum.add(x));
    let first_mean = sum.total() / n;

    let mut dev = Compensated::default();
    let mut dev_sq = Compensated::default();
    for &x in values {
        let d = x - first_mean;
        dev.add(d);
        dev_sq.add(d * d);
    }
    let dev_sum = dev.total();
    let mean = first_mean + dev_sum / n;
    // Rounding can leave a tiny negative where the spread is zero.
    let sum_sq_dev = (dev_sq.total() - dev_sum * dev_sum / n).max(0.0);
    let variance = (values.len() > 1).then(|| sum_sq_dev / (n - 1.0));
    Ok(Summary {
        n: values.len(),
        mean,
        sum_sq_dev,
        variance,
    })
}

/// Returns the mean of `values`.
pub fn mean(values: &[f64]) -> Result<f64, StatsError> {
    summarize(values).map(|s| s.mean)
}

/// Returns the sample standard deviation of `values`; `None` for a single value.
pub fn std_dev(values: &[f64]) -> Result<Option<f64>, StatsError> {
    summarize(values).map(|s| s.std_dev())
}

/// A running sum that carries the low-order bits each addition drops
/// (Neumaier's variant of Kahan summation).
#[derive(Debug, Default, Clone, Copy)]
struct Compensated {
    sum: f64,
    carry: f64,
}

impl Compensated {
    fn add(&mut self, x: f64) {
        let t = self.sum + x;
        if self.sum.abs() >= x.abs() {
            self.carry += (self.sum - t) + x;
        } else {
            self.carry += (x - t) + self.sum;
        }
        self.sum = t;
    }

    fn total(self) -> f64 {
        self.sum + self.carry
    }
}

#[cfg(test)]
mod tests {
    //! Checks against NIST Statistical Reference Datasets (StRD), Univariate
    //! Summary Statistics (https://www.itl.nist.gov/div898/strd/univ/), which
    //! certify the sample mean and sample standard deviation of each set.
    //!
    //! The certified values are those of the decimal data. A binary double
    //! holds each datum only to half a unit in its last place, so no program
    //! reading the data as `f64` can do better than that representation bound
    //! (large for NumAcc3 and NumAcc4, whose 0.1 spread sits on 10⁶ and 10⁷).
    //! Each set is therefore checked twice:
    //! 1. against the certified values, within the representation bound plus
    //!    a few units in the 15th digit;
    //! 2. against the exact mean and standard deviation of the values as
    //!    stored, found with integer arithmetic, to 4e-15 relative, which is
    //!    the full precision a double carries (a couple of roundings).

    use super::*;
    use proptest::prelude::*;

    /// The NIST StRD certified values of one data set.
    struct Certified {
        name: &'static str,
        mean: f64,
        std_dev: f64,
    }

    /// Reads a fixture: `#` lines are comments, every other line one value.
    fn fixture(text: &str) -> Vec<f64> {
        text.lines()
            .filter(|l| !l.starts_with('#') && !l.trim().is_empty())
            .map(|l| l.trim().parse().expect("fixtures hold numbers"))
            .collect()
    }

    /// Builds NumAcc2, 3 or 4: one `centre`, then 500 pairs of `centre − 0.1`
    /// and `centre + 0.1`, each pair read as decimal text like the published file.
    fn num_acc(centre: &str, low: &str, high: &str) -> Vec<f64> {
        let parse = |t: &str| t.parse::<f64>().expect("literal decimal");
        let mut v = vec![parse(centre)];
        for _ in 0..500 {
            v.push(parse(low));
            v.push(parse(high));
        }
        v
    }

    /// Splits a finite double into an odd integer mantissa and a power of two.
    fn decode(x: f64) -> (i128, i32) {
        if x == 0.0 {
            return (0, 0);
        }
        let bits = x.to_bits();
        let sign = if bits >> 63 == 1 { -1 } else { 1 };
        let biased = ((bits >> 52) & 0x7ff) as i32;
        let fraction = (bits & ((1u64 << 52) - 1)) as i128;
        let (mut m, mut e) = if biased == 0 {
            (fraction, -1074)
        } else {
            (fraction | (1i128 << 52), biased - 1075)
        };
        let tz = m.trailing_zeros();
        m >>= tz;
        e += tz as i32;
        (sign * m, e)
    }

    /// Returns the exact mean and sample standard deviation of the stored
    /// doubles, each rounded once or twice: every value is an integer times a
    /// common power of two, so the sums are exact in i128.
    fn exact(values: &[f64]) -> (f64, f64) {
        let parts: Vec<(i128, i32)> = values.iter().map(|&x| decode(x)).collect();
        let e_min = parts
            .iter()
            .filter(|p| p.0 != 0)
            .map(|p| p.1)
            .min()
            .expect("some value is not zero");
        let k: Vec<i128> = parts
            .iter()
            .map(|&(m, e)| {
                let shift = u32::try_from(e - e_min).expect("e_min is the least");
                assert!(shift < 64, "test data span too many binades");
                m.checked_mul(1i128 << shift).expect("fits i128")
            })
            .collect();
        let n = values.len() as i128;
        let origin = k[0];
        let (mut s1, mut s2) = (0i128, 0i128);
        for &ki in &k {
            let d = ki - origin;
            s1 = s1.checked_add(d).expect("fits i128");
            s2 = s2
                .checked_add(d.checked_mul(d).expect("fits i128"))
                .expect("fits i128");
        }
        // n·SS = n·Σd² − (Σd)², an exact integer.
        let n_ss = n
            .checked_mul(s2)
            .and_then(|a| a.checked_sub(s1 * s1))
            .expect("fits i128");
        let scale = 2f64.powi(e_min);
        let mean = (origin as f64 + s1 as f64 / n as f64) * scale;
        let var = n_ss as f64 / (n * (n - 1)) as f64 * scale * scale;
        (mean, var.sqrt())
    }

    /// Returns the largest half-unit-in-the-last-place over `values`: how far
    /// any stored double may sit from the decimal datum it was read from.
    fn half_ulp(values: &[f64]) -> f64 {
        values
            .iter()
            .map(|&x| {
                let x = x.abs();
                (f64::from_bits(x.to_bits() + 1) - x) / 2.0
            })
            .fold(0.0, f64::max)
    }

    /// Checks `values` against the certified values and against the exact
    /// statistics of the stored doubles.
    fn check(values: &[f64], cert: &Certified) {
        let s = summarize(values).unwrap();
        let sd = s.std_dev().unwrap();
        let n = values.len() as f64;
        let repr = half_ulp(values);
        // Moving each datum by at most `repr` moves the mean by at most
        // `repr` and the standard deviation by at most ‖δ‖₂/√(n−1).
        let mean_tol = repr + 4e-15 * cert.mean.abs();
        let sd_tol = repr * (n / (n - 1.0)).sqrt() + 4e-15 * cert.std_dev;
        assert!(
            (s.mean - cert.mean).abs() <= mean_tol,
            "{}: mean {} vs certified {} (tolerance {mean_tol:e})",
            cert.name,
            s.mean,
            cert.mean
        );
        assert!(
            (sd - cert.std_dev).abs() <= sd_tol,
            "{}: sd {} vs certified {} (tolerance {sd_tol:e})",
            cert.name,
            sd,
            cert.std_dev
        );
        let (exact_mean, exact_sd) = exact(values);
        let rel = |a: f64, b: f64| ((a - b) / b).abs();
        assert!(
            rel(s.mean, exact_mean) <= 4e-15,
            "{}: mean {} vs exact {exact_mean}",
            cert.name,
            s.mean
        );
        assert!(
            rel(sd, exact_sd) <= 4e-15,
            "{}: sd {sd} vs exact {exact_sd}",
            cert.name
        );
    }

    #[test]
    fn num_acc_1_is_exact() {
        // NIST StRD Univariate, NumAcc1: the three values 10000001, 10000003,
        // 10000002; certified mean 10000002, sd 1 (both exact).
        let v = [10000001.0, 10000003.0, 10000002.0];
        let s = summarize(&v).unwrap();
        assert_eq!(s.mean, 10000002.0);
        assert_eq!(s.std_dev(), Some(1.0));
        let cert = Certified {
            name: "NumAcc1",
            mean: 10000002.0,
            std_dev: 1.0,
        };
        check(&v, &cert);
    }

    #[test]
    fn num_acc_2_matches_the_certified_values() {
        // NIST StRD Univariate, NumAcc2: 1.2, then 500 pairs of 1.1 and 1.3;
        // certified mean 1.2, sd 0.1 (both exact), 1001 values.
        let v = num_acc("1.2", "1.1", "1.3");
        assert_eq!(v.len(), 1001);
        let cert = Certified {
            name: "NumAcc2",
            mean: 1.2,
            std_dev: 0.1,
        };
        check(&v, &cert);
    }

    #[test]
    fn num_acc_3_matches_the_certified_values() {
        // NIST StRD Univariate, NumAcc3: 1000000.2, then 500 pairs of
        // 1000000.1 and 1000000.3; certified mean 1000000.2, sd 0.1 (exact).
        let v = num_acc("1000000.2", "1000000.1", "1000000.3");
        let cert = Certified {
            name: "NumAcc3",
            mean: 1000000.2,
            std_dev: 0.1,
        };
        check(&v, &cert);
    }

    #[test]
    fn num_acc_4_matches_the_certified_values() {
        // NIST StRD Univariate, NumAcc4 (difficulty "higher"): 10000000.2,
        // then 500 pairs of 10000000.1 and 10000000.3; certified mean
        // 10000000.2, sd 0.1 (exact).
        let v = num_acc("10000000.2", "10000000.1", "10000000.3");
        let cert = Certified {
            name: "NumAcc4",
            mean: 10000000.2,
            std_dev: 0.1,
        };
        check(&v, &cert);
    }

    #[test]
    fn the_one_pass_textbook_formula_fails_num_acc_4() {
        // Shows the NumAcc4 check has teeth: Σx² − (Σx)²/n on NIST StRD
        // NumAcc4 misses the certified sd 0.1 by far more than the tolerance
        // `check` allows (about 1e-9), while `summarize` stays within it.
        let v = num_acc("10000000.2", "10000000.1", "10000000.3");
        let n = v.len() as f64;
        let sum: f64 = v.iter().sum();
        let sum_sq: f64 = v.iter().map(|x| x * x).sum();
        let naive_var = ((sum_sq - sum * sum / n) / (n - 1.0)).max(0.0);
        assert!(
            (naive_var.sqrt() - 0.1).abs() > 1e-6,
            "{}",
            naive_var.sqrt()
        );
        let sd = std_dev(&v).unwrap().unwrap();
        assert!((sd - 0.1).abs() < 1e-8, "{sd}");
    }

    #[test]
    fn michelso_matches_the_certified_values() {
        // NIST StRD Univariate, Michelso (fixture names its source):
        // certified mean 299.852400000000, sd 0.0790105478190518.
        let v = fixture(include_str!("testdata/Michelso.dat"));
        assert_eq!(v.len(), 100);
        let cert = Certified {
            name: "Michelso",
            mean: 299.852400000000,
            std_dev: 0.0790105478190518,
        };
        check(&v, &cert);
    }

    #[test]
    fn mavro_matches_the_certified_values() {
        // NIST StRD Univariate, Mavro (fixture names its source):
        // certified mean 2.00185600000000, sd 0.000429123454003053.
        let v = fixture(include_str!("testdata/Mavro.dat"));
        assert_eq!(v.len(), 50);
        let cert = Certified {
            name: "Mavro",
            mean: 2.00185600000000,
            std_dev: 0.000429123454003053,
        };
        check(&v, &cert);
    }

    #[test]
    fn lew_matches_the_certified_values() {
        // NIST StRD Univariate, Lew (fixture names its source): integers, so
        // stored exactly; certified mean -177.435000000000, sd 277.332168044316.
        let v = fixture(include_str!("testdata/Lew.dat"));
        assert_eq!(v.len(), 200);
        let cert = Certified {
            name: "Lew",
            mean: -177.435000000000,
            std_dev: 277.332168044316,
        };
        check(&v, &cert);
    }

    #[test]
    fn bad_input_is_refused_with_its_position() {
        assert_eq!(summarize(&[]), Err(StatsError::Empty));
        assert_eq!(
            summarize(&[1.0, f64::NAN]),
            Err(StatsError::NotFinite { index: 1 })
        );
        assert_eq!(
            summarize(&[2.0, 1.0, -1e101]),
            Err(StatsError::OutOfRange {
                index: 2,
                value: -1e101
            })
        );
        let one = summarize(&[7.5]).unwrap();
        assert_eq!((one.mean, one.variance, one.std_dev()), (7.5, None, None));
    }

    proptest! {
        #[test]
        fn agrees_with_exact_arithmetic_on_large_offsets(
            offset in -1e9f64..1e9,
            spread in proptest::collection::vec(-1000i32..1000, 2..200),
        ) {
            // Values k/8 + offset, rounded once to double on entry; the
            // reference is computed exactly from the stored doubles.
            let v: Vec<f64> = spread.iter().map(|&k| offset + k as f64 / 8.0).collect();
            prop_assume!(v.iter().any(|&x| x != v[0]));
            let s = summarize(&v).unwrap();
            let (mean, sd) = exact(&v);
            prop_assert!(((s.mean - mean) / mean).abs() <= 4e-15 || (s.mean - mean).abs() <= 1e-300);
            let got = s.std_dev().unwrap();
            prop_assert!(((got - sd) / sd).abs() <= 1e-13, "{} vs {}", got, sd);
        }
    }
}
