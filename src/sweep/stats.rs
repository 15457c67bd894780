//! Intervals for the figures of a sweep's groups.
//!
//! - Rates (suspect, flip): Wilson's score interval (Wilson 1927, "Probable inference, the law
//!   of succession, and statistical inference", JASA), 95 %.
//! - A group's rate against the other groups': Newcombe's hybrid score interval for the
//!   difference of two independent proportions (Newcombe 1998, "Interval estimation for the
//!   difference between independent proportions", Statistics in Medicine, method 10), built from
//!   the two Wilson intervals.
//! - The same rate in two sweeps of the same images (paired): Newcombe's hybrid score interval
//!   for paired proportions (Newcombe 1998, "Improved confidence intervals for the difference
//!   between binomial proportions based on paired data", Statistics in Medicine 17:2635–2650,
//!   method 10), the two Wilson intervals combined with the correlation φ of the 2×2 table.
//! - Mean mark share, and its difference from the other groups': the percentile bootstrap
//!   (Efron; common practice), 2,000 seeded resamples.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

/// z for a two-sided 95 % interval.
const Z95: f64 = 1.959_963_984_540_054;

/// A figure with its 95 % interval.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Interval {
    pub estimate: f64,
    pub low: f64,
    pub high: f64,
}

/// Wilson's score interval for `k` of `n`; `None` when n = 0.
pub fn wilson(k: usize, n: usize) -> Option<Interval> {
    if n == 0 {
        return None;
    }
    let (n_, p) = (n as f64, k as f64 / n as f64);
    let z2 = Z95 * Z95;
    let denom = 1.0 + z2 / n_;
    let centre = (p + z2 / (2.0 * n_)) / denom;
    let half = Z95 / denom * (p * (1.0 - p) / n_ + z2 / (4.0 * n_ * n_)).sqrt();
    Some(Interval { estimate: p, low: (centre - half).max(0.0), high: (centre + half).min(1.0) })
}

/// Newcombe's hybrid score interval for p₁ − p₂ (k₁ of n₁ against k₂ of n₂).
pub fn newcombe(k1: usize, n1: usize, k2: usize, n2: usize) -> Option<Interval> {
    let (a, b) = (wilson(k1, n1)?, wilson(k2, n2)?);
    let d = a.estimate - b.estimate;
    let low = d - ((a.estimate - a.low).powi(2) + (b.high - b.estimate).powi(2)).sqrt();
    let high = d + ((a.high - a.estimate).powi(2) + (b.estimate - b.low).powi(2)).sqrt();
    Some(Interval { estimate: d, low, high })
}

/// A paired 2×2 table: the same images judged twice (first and second).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Paired {
    /// Yes both times.
    pub both: usize,
    /// Yes the second time only.
    pub second_only: usize,
    /// Yes the first time only.
    pub first_only: usize,
    /// No both times.
    pub neither: usize,
}

/// Newcombe's hybrid score interval (method 10, no continuity correction) for the second
/// rate minus the first, over the same images; `None` for no images. Unlike a bootstrap of
/// the per-image differences it never has zero width from a handful of images that all moved
/// the same way.
pub fn newcombe_paired(t: Paired) -> Option<Interval> {
    let (a, b, c, d) = (t.both as f64, t.second_only as f64, t.first_only as f64, t.neither as f64);
    let n = t.both + t.second_only + t.first_only + t.neither;
    let (s, f) = (wilson(t.both + t.second_only, n)?, wilson(t.both + t.first_only, n)?);
    let margins = (a + b) * (c + d) * (a + c) * (b + d);
    // φ is taken as 0 when a margin is empty (the paper's rule).
    let phi = if margins > 0.0 { (a * d - b * c) / margins.sqrt() } else { 0.0 };
    let diff = s.estimate - f.estimate;
    let (ds_lo, ds_hi, df_lo, df_hi) = (s.estimate - s.low, s.high - s.estimate, f.estimate - f.low, f.high - f.estimate);
    let low = diff - (ds_lo * ds_lo - 2.0 * phi * ds_lo * df_hi + df_hi * df_hi).max(0.0).sqrt();
    let high = diff + (ds_hi * ds_hi - 2.0 * phi * ds_hi * df_lo + df_lo * df_lo).max(0.0).sqrt();
    Some(Interval { estimate: diff, low: low.max(-1.0), high: high.min(1.0) })
}

const RESAMPLES: usize = 2000;

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn percentiles(mut v: Vec<f64>) -> (f64, f64) {
    v.sort_by(f64::total_cmp);
    let at = |q: f64| v[((q * (v.len() - 1) as f64).round() as usize).min(v.len() - 1)];
    (at(0.025), at(0.975))
}

fn resample_mean(v: &[f64], rng: &mut ChaCha8Rng) -> f64 {
    (0..v.len()).map(|_| v[rng.random_range(0..v.len())]).sum::<f64>() / v.len() as f64
}

/// The mean of `v` with a percentile-bootstrap 95 % interval (seeded); `None` for no values.
pub fn bootstrap_mean(v: &[f64], seed: u64) -> Option<Interval> {
    if v.is_empty() {
        return None;
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let (low, high) = percentiles((0..RESAMPLES).map(|_| resample_mean(v, &mut rng)).collect());
    Some(Interval { estimate: mean(v), low, high })
}

/// mean(a) − mean(b) with a percentile-bootstrap 95 % interval, each group resampled on its own.
pub fn bootstrap_difference(a: &[f64], b: &[f64], seed: u64) -> Option<Interval> {
    if a.is_empty() || b.is_empty() {
        return None;
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let (low, high) = percentiles((0..RESAMPLES).map(|_| resample_mean(a, &mut rng) - resample_mean(b, &mut rng)).collect());
    Some(Interval { estimate: mean(a) - mean(b), low, high })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wilson_by_hand() {
        // 5 of 10: p = 0.5, z² = 3.8415, centre 0.5, half-width 1.9600/1.3841 · √(0.025 + 0.0096)
        // = 0.2634 → 0.2366 .. 0.7634 (worked here from Wilson's formula).
        let w = wilson(5, 10).unwrap();
        assert!((w.low - 0.23659).abs() < 1e-4 && (w.high - 0.76341).abs() < 1e-4, "{w:?}");
        // 0 of 10 keeps a positive upper bound: z²/(n + z²) = 0.2775.
        let w = wilson(0, 10).unwrap();
        assert!(w.low == 0.0 && (w.high - 0.27753).abs() < 1e-4, "{w:?}");
        assert!(wilson(0, 0).is_none());
    }

    #[test]
    fn newcombe_on_his_worked_example() {
        // Newcombe (1998), example (a): 56/70 against 48/80, difference 0.2000 with a method-10
        // interval of 0.0524 to 0.3339 (recalled from memory of the paper's table, and worked by
        // hand here from the two Wilson intervals 0.6918–0.8770 and 0.4904–0.7004).
        let d = newcombe(56, 70, 48, 80).unwrap();
        assert!((d.estimate - 0.2).abs() < 1e-9);
        assert!((d.low - 0.0524).abs() < 5e-4 && (d.high - 0.3339).abs() < 5e-4, "{d:?}");
    }

    #[test]
    fn newcombe_paired_on_his_worked_examples() {
        // Newcombe (1998), "Improved confidence intervals for the difference between binomial
        // proportions based on paired data", Statistics in Medicine 17:2635–2650, Table II,
        // method 10 (values recalled from memory of the paper's table; they agree with the
        // formula worked here to four places):
        // (a) 36 both, 12 first-only-yes, 2 second-only-yes, 0 neither: difference 0.2000,
        //     interval 0.0569 to 0.3404;
        // (b) 263, 15, 3, 251: 0.0226, interval 0.0071 to 0.0380.
        // The paper's p₁ is our second sweep: its "b" (yes under 1, no under 2) is second_only.
        let t = |both, second_only, first_only, neither| Paired { both, second_only, first_only, neither };
        let d = newcombe_paired(t(36, 12, 2, 0)).unwrap();
        assert!((d.estimate - 0.2).abs() < 1e-9, "{d:?}");
        assert!((d.low - 0.0569).abs() < 1e-4 && (d.high - 0.3404).abs() < 1e-4, "{d:?}");
        let d = newcombe_paired(t(263, 15, 3, 251)).unwrap();
        assert!((d.estimate - 12.0 / 532.0).abs() < 1e-9, "{d:?}");
        assert!((d.low - 0.0071).abs() < 1e-4 && (d.high - 0.0380).abs() < 1e-4, "{d:?}");
        // Fagerland, Lydersen, Laake (2014), "Recommended tests and confidence intervals for
        // paired binomial proportions", Statistics in Medicine 33:2850–2875, the airway
        // hyper-responsiveness example (1, 1, 7, 12 with their first/second the other way
        // round): Newcombe's hybrid score interval −0.502 to −0.036 (from memory).
        let d = newcombe_paired(t(1, 1, 7, 12)).unwrap();
        assert!((d.low + 0.502).abs() < 1e-3 && (d.high + 0.036).abs() < 1e-3, "{d:?}");
        // Six images that all stopped being suspect: −1, never a zero-width interval.
        let d = newcombe_paired(t(0, 0, 6, 0)).unwrap();
        assert!(d.estimate == -1.0 && d.low == -1.0 && d.high > -0.6, "{d:?}");
        assert!(newcombe_paired(t(0, 0, 0, 0)).is_none());
    }

    #[test]
    fn bootstrap_brackets_the_mean_and_repeats_with_its_seed() {
        let v: Vec<f64> = (0..50).map(|i| (i % 7) as f64 / 10.0).collect();
        let a = bootstrap_mean(&v, 3).unwrap();
        assert!(a.low < a.estimate && a.estimate < a.high);
        assert_eq!(a, bootstrap_mean(&v, 3).unwrap(), "seeded: the same interval every time");
        let same = bootstrap_difference(&v, &v, 4).unwrap();
        assert!(same.estimate == 0.0 && same.low < 0.0 && same.high > 0.0);
    }
}
