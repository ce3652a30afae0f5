//! Paired statistics: differences measured on the same dies (common random numbers).
//!
//! - [`paired_t_interval`]: the t interval on per-die differences of a continuous quantity
//!   (mean difference ± t(n-1, 1 - alpha/2) s / sqrt(n); Student, Biometrika 6, 1908; any
//!   statistics handbook). Pairing removes the between-die variance both members share.
//! - [`newcombe_paired`]: the interval for the difference of two proportions measured on the
//!   same units (e.g. the yield of two variants over the same dies), method 10 of
//!   R. G. Newcombe, "Improved confidence intervals for the difference between binomial
//!   proportions based on paired data", Statistics in Medicine 17, 2635-2650 (1998): Wilson
//!   score limits of each proportion combined with the phi correlation of the 2 x 2 table.

use statrs::distribution::{ContinuousCDF, Normal, StudentsT};

use crate::stats::wilson_interval;

/// A paired interval: point estimate and (lower, upper) limits.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PairedInterval {
    /// Point estimate (mean difference, or difference of proportions).
    pub estimate: f64,
    pub lo: f64,
    pub hi: f64,
    /// Number of pairs.
    pub n: usize,
}

impl PairedInterval {
    /// Half the width (for "estimate ± half" displays of symmetric intervals).
    pub fn half_width(&self) -> f64 {
        0.5 * (self.hi - self.lo)
    }
}

/// Two-sided standard normal quantile for `confidence` (0.95 -> 1.959964).
pub fn normal_quantile(confidence: f64) -> f64 {
    let c = confidence.clamp(1e-12, 1.0 - 1e-12);
    Normal::standard().inverse_cdf(0.5 + 0.5 * c)
}

/// t interval on the paired differences `d` (NaN entries are ignored) at `confidence`
/// (e.g. 0.95). With one pair or none, the interval is the estimate alone (lo = hi), or NaN for
/// no pair; with zero spread the interval has zero width.
pub fn paired_t_interval(d: &[f64], confidence: f64) -> PairedInterval {
    let v: Vec<f64> = d.iter().copied().filter(|x| !x.is_nan()).collect();
    let n = v.len();
    if n == 0 {
        return PairedInterval {
            estimate: f64::NAN,
            lo: f64::NAN,
            hi: f64::NAN,
            n,
        };
    }
    let mean = v.iter().sum::<f64>() / n as f64;
    if n == 1 {
        return PairedInterval {
            estimate: mean,
            lo: mean,
            hi: mean,
            n,
        };
    }
    let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1) as f64;
    let c = confidence.clamp(1e-12, 1.0 - 1e-12);
    let t = StudentsT::new(0.0, 1.0, (n - 1) as f64)
        .map(|s| s.inverse_cdf(0.5 + 0.5 * c))
        .unwrap_or(f64::NAN);
    let half = t * (var / n as f64).sqrt();
    PairedInterval {
        estimate: mean,
        lo: mean - half,
        hi: mean + half,
        n,
    }
}

/// Newcombe's method 10 for the difference p1 - p2 of two proportions measured on the same
/// units. The 2 x 2 table: `both` units succeed in both, `only1` in the first only, `only2` in
/// the second only, `neither` in neither. `z` is the normal quantile (1.96 for 95 %).
///
/// With p1 = (both + only1)/n, p2 = (both + only2)/n, Wilson limits (l1, u1), (l2, u2), and
/// phi = (both neither - only1 only2) / sqrt((both+only1)(only2+neither)(both+only2)(only1+neither))
/// (0 when a margin is empty):
/// lower = theta - sqrt((p1-l1)^2 - 2 phi (p1-l1)(u2-p2) + (u2-p2)^2),
/// upper = theta + sqrt((u1-p1)^2 - 2 phi (u1-p1)(p2-l2) + (p2-l2)^2).
pub fn newcombe_paired(both: u64, only1: u64, only2: u64, neither: u64, z: f64) -> PairedInterval {
    let n = both + only1 + only2 + neither;
    if n == 0 {
        return PairedInterval {
            estimate: f64::NAN,
            lo: -1.0,
            hi: 1.0,
            n: 0,
        };
    }
    let nf = n as f64;
    let (s1, s2) = (both + only1, both + only2);
    let p1 = s1 as f64 / nf;
    let p2 = s2 as f64 / nf;
    let (l1, u1) = wilson_interval(s1, n, z);
    let (l2, u2) = wilson_interval(s2, n, z);
    let (a, b, c, d) = (both as f64, only1 as f64, only2 as f64, neither as f64);
    let denom = ((a + b) * (c + d) * (a + c) * (b + d)).sqrt();
    let phi = if denom > 0.0 {
        (a * d - b * c) / denom
    } else {
        0.0
    };
    let theta = p1 - p2;
    let dl = ((p1 - l1).powi(2) - 2.0 * phi * (p1 - l1) * (u2 - p2) + (u2 - p2).powi(2))
        .max(0.0)
        .sqrt();
    let du = ((u1 - p1).powi(2) - 2.0 * phi * (u1 - p1) * (p2 - l2) + (p2 - l2).powi(2))
        .max(0.0)
        .sqrt();
    PairedInterval {
        estimate: theta,
        lo: (theta - dl).max(-1.0),
        hi: (theta + du).min(1.0),
        n: n as usize,
    }
}

/// [`newcombe_paired`] from two per-unit pass/fail lists of equal length (`first[i]` and
/// `second[i]` are the same unit); the difference is share(first) - share(second).
pub fn newcombe_from_pairs(first: &[bool], second: &[bool], z: f64) -> PairedInterval {
    let (mut a, mut b, mut c, mut d) = (0, 0, 0, 0);
    for (&x, &y) in first.iter().zip(second) {
        match (x, y) {
            (true, true) => a += 1,
            (true, false) => b += 1,
            (false, true) => c += 1,
            (false, false) => d += 1,
        }
    }
    newcombe_paired(a, b, c, d, z)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// t quantiles from a standard table (any statistics handbook): t(0.975, 9) = 2.262,
    /// t(0.975, 199) = 1.972; the interval is mean ± t s / sqrt(n).
    #[test]
    fn t_interval_matches_the_handbook_formula() {
        // Differences 1..=10: mean 5.5, s = 3.02765 (hand calculation).
        let d: Vec<f64> = (1..=10).map(f64::from).collect();
        let ci = paired_t_interval(&d, 0.95);
        assert_relative_eq!(ci.estimate, 5.5, epsilon = 1e-12);
        let s = (82.5f64 / 9.0).sqrt();
        assert_relative_eq!(
            ci.half_width(),
            2.262 * s / 10f64.sqrt(),
            max_relative = 1e-3
        );
        let one = paired_t_interval(&[2.0; 200], 0.95);
        assert_eq!((one.lo, one.hi), (2.0, 2.0));
        let alt: Vec<f64> = (0..200)
            .map(|i| if i % 2 == 0 { 1.0 } else { -1.0 })
            .collect();
        let ci = paired_t_interval(&alt, 0.95);
        // s = sqrt(200/199), half width 1.972 s / sqrt(200) (table value t(0.975, 199)).
        assert_relative_eq!(
            ci.half_width(),
            1.972 * (200.0f64 / 199.0).sqrt() / 200f64.sqrt(),
            max_relative = 1e-3
        );
        assert_relative_eq!(normal_quantile(0.95), 1.959964, epsilon = 1e-6);
    }

    /// Newcombe (1998) method 10, checked against the formula written out by hand for one table
    /// (Wilson limits from E. B. Wilson, JASA 22, 1927), and its properties: it contains the
    /// point estimate, stays in [-1, 1], is zero-centred and symmetric for a symmetric table,
    /// and is narrower when the pairs are positively correlated (phi > 0) than the same margins
    /// without correlation.
    #[test]
    fn newcombe_method_ten() {
        let z = 1.959964;
        let (a, b, c, d) = (40u64, 8u64, 2u64, 50u64);
        let ci = newcombe_paired(a, b, c, d, z);
        let n = 100.0;
        let (p1, p2) = (0.48, 0.42);
        let w = |p: f64| {
            let centre = (p + z * z / (2.0 * n)) / (1.0 + z * z / n);
            let half = z * (p * (1.0 - p) / n + z * z / (4.0 * n * n)).sqrt() / (1.0 + z * z / n);
            (centre - half, centre + half)
        };
        let ((l1, u1), (l2, u2)) = (w(p1), w(p2));
        let phi = (40.0 * 50.0 - 8.0 * 2.0) / (48.0f64 * 52.0 * 42.0 * 58.0).sqrt();
        let lo = 0.06
            - ((p1 - l1).powi(2) - 2.0 * phi * (p1 - l1) * (u2 - p2) + (u2 - p2).powi(2)).sqrt();
        let hi = 0.06
            + ((u1 - p1).powi(2) - 2.0 * phi * (u1 - p1) * (p2 - l2) + (p2 - l2).powi(2)).sqrt();
        assert_relative_eq!(ci.estimate, 0.06, epsilon = 1e-12);
        assert_relative_eq!(ci.lo, lo, epsilon = 1e-12);
        assert_relative_eq!(ci.hi, hi, epsilon = 1e-12);
        assert!(ci.lo < 0.06 && 0.06 < ci.hi);
        // Same margins, about no correlation (phi slightly below 0): a wider interval.
        let indep = newcombe_paired(20, 28, 22, 30, z);
        assert!(indep.hi - indep.lo > ci.hi - ci.lo);
        let sym = newcombe_paired(30, 5, 5, 60, z);
        assert_relative_eq!(sym.estimate, 0.0);
        assert_relative_eq!(sym.lo, -sym.hi, epsilon = 1e-12);
        let all = newcombe_from_pairs(&[true; 50], &[false; 50], z);
        assert!(all.hi <= 1.0 && all.lo > 0.8, "{all:?}");
    }

    /// Coverage: over many simulated paired samples with known p1, p2 and correlation, the
    /// 95 % interval covers the true difference in about 95 % of samples (Newcombe 1998 reports
    /// coverage close to nominal for method 10; a band of 0.92-0.985 is common practice, no
    /// source, for 2000 replicates).
    #[test]
    fn newcombe_covers_about_ninety_five_percent() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        // Cell probabilities of (both, only1, only2, neither); p1 = 0.85, p2 = 0.75.
        let probs = [0.7, 0.15, 0.05, 0.1];
        let truth = 0.85 - 0.75;
        let mut covered = 0;
        let reps = 2000;
        for _ in 0..reps {
            let mut cells = [0u64; 4];
            for _ in 0..200 {
                let u: f64 = rng.gen();
                let mut acc = 0.0;
                let mut k = 3;
                for (i, p) in probs.iter().enumerate() {
                    acc += p;
                    if u < acc {
                        k = i;
                        break;
                    }
                }
                cells[k] += 1;
            }
            let ci = newcombe_paired(cells[0], cells[1], cells[2], cells[3], 1.959964);
            if ci.lo <= truth && truth <= ci.hi {
                covered += 1;
            }
        }
        let cov = covered as f64 / reps as f64;
        assert!((0.92..=0.985).contains(&cov), "coverage {cov}");
    }
}
