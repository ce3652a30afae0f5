//! Population statistics: mean, standard deviation, percentiles, and the Wilson score interval.

/// Wilson score interval for a binomial proportion (E. B. Wilson, "Probable inference, the law of
/// succession, and statistical inference", JASA 22, 1927).
///
/// Returns `(lower, upper)` for `successes` out of `trials` at normal quantile `z` (1.96 for 95 %).
/// With zero trials the interval is the whole of [0, 1]. At the ends the formula gives exactly
/// 0 (no successes: `centre = half = z^2/(2n)/(1 + z^2/n)`) and exactly 1 (all successes); in
/// floating point `centre - half` would leave a rounding residue (1.7e-18 for 0 of 200), so
/// those ends are set to their exact values.
pub fn wilson_interval(successes: u64, trials: u64, z: f64) -> (f64, f64) {
    if trials == 0 {
        return (0.0, 1.0);
    }
    let successes = successes.min(trials);
    let n = trials as f64;
    let p = successes as f64 / n;
    let z2 = z * z;
    let denom = 1.0 + z2 / n;
    let centre = (p + z2 / (2.0 * n)) / denom;
    let half = z * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt() / denom;
    let lower = if successes == 0 {
        0.0
    } else {
        (centre - half).max(0.0)
    };
    let upper = if successes == trials {
        1.0
    } else {
        (centre + half).min(1.0)
    };
    (lower, upper)
}

/// Summary of a sample of values (e.g. per-chip accuracies at one sweep point).
#[derive(Clone, Debug, PartialEq)]
pub struct Summary {
    pub count: usize,
    pub mean: f64,
    /// Sample standard deviation (n - 1 in the denominator); 0 for fewer than two values.
    pub std: f64,
    pub p05: f64,
    pub p50: f64,
    pub p95: f64,
    pub min: f64,
    pub max: f64,
}

/// Percentile by linear interpolation between closest ranks (the "linear" method, type 7 of
/// R. J. Hyndman, Y. Fan, "Sample quantiles in statistical packages", The American Statistician
/// 50(4), 1996; the default of numpy.percentile). `sorted` must be ascending; an empty slice
/// gives NaN.
pub fn percentile_sorted(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * q.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = h.ceil() as usize;
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Summarise `values` (NaN values are ignored). Returns `None` when no finite value remains.
pub fn summarize(values: &[f64]) -> Option<Summary> {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| !x.is_nan()).collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let n = v.len();
    let mean = v.iter().sum::<f64>() / n as f64;
    let std = if n > 1 {
        (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt()
    } else {
        0.0
    };
    Some(Summary {
        count: n,
        mean,
        std,
        p05: percentile_sorted(&v, 0.05),
        p50: percentile_sorted(&v, 0.50),
        p95: percentile_sorted(&v, 0.95),
        min: v[0],
        max: v[n - 1],
    })
}

/// Exact counts of the distinct values of a sample: what a sweep point keeps of its dies'
/// accuracies. A die's accuracy is `correct / samples` over the point's test split, so a point
/// holds at most `samples + 1` distinct values whatever its number of dies: memory is bounded
/// by the test split, not by the population. The values are kept ascending in `f64::total_cmp`
/// order (the order [`summarize`] sorts in), so every order statistic, the percentiles
/// included, is exact, and [`ValueCounts::summary`] reproduces [`summarize`] bit for bit (the
/// same additions in the same order).
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(transparent)]
pub struct ValueCounts {
    /// `(value, count)`, ascending by `total_cmp`, counts above 0.
    counts: Vec<(f64, u64)>,
}

impl ValueCounts {
    /// Count one more value.
    pub fn add(&mut self, v: f64) {
        match self.counts.binary_search_by(|(x, _)| x.total_cmp(&v)) {
            Ok(i) => self.counts[i].1 += 1,
            Err(i) => self.counts.insert(i, (v, 1)),
        }
    }

    /// Add every count of `other`.
    pub fn merge(&mut self, other: &ValueCounts) {
        for &(v, c) in &other.counts {
            match self.counts.binary_search_by(|(x, _)| x.total_cmp(&v)) {
                Ok(i) => self.counts[i].1 += c,
                Err(i) => self.counts.insert(i, (v, c)),
            }
        }
    }

    /// The distinct values with their counts, ascending (`total_cmp` order).
    pub fn iter(&self) -> impl Iterator<Item = (f64, u64)> + '_ {
        self.counts.iter().copied()
    }

    /// Number of values counted (NaN included).
    pub fn total(&self) -> u64 {
        self.counts.iter().map(|&(_, c)| c).sum()
    }

    /// Number of distinct values (the memory the counts take, in entries).
    pub fn distinct(&self) -> usize {
        self.counts.len()
    }

    /// Number of values `>= threshold` (NaN never is).
    pub fn at_least(&self, threshold: f64) -> u64 {
        self.counts
            .iter()
            .filter(|&&(v, _)| v >= threshold)
            .map(|&(_, c)| c)
            .sum()
    }

    /// The values in ascending order, each repeated by its count, NaN left out.
    fn sorted(&self) -> impl Iterator<Item = f64> + Clone + '_ {
        self.counts
            .iter()
            .filter(|(v, _)| !v.is_nan())
            .flat_map(|&(v, c)| std::iter::repeat_n(v, c as usize))
    }

    /// The `k`-th value (0-based) of the ascending order, NaN left out.
    fn nth(&self, mut k: u64) -> f64 {
        for &(v, c) in self.counts.iter().filter(|(v, _)| !v.is_nan()) {
            if k < c {
                return v;
            }
            k -= c;
        }
        f64::NAN
    }

    /// [`percentile_sorted`] over the sorted values (NaN left out).
    fn percentile(&self, n: u64, q: f64) -> f64 {
        if n == 0 {
            return f64::NAN;
        }
        let h = (n - 1) as f64 * q.clamp(0.0, 1.0);
        let lo = h.floor() as u64;
        let hi = h.ceil() as u64;
        let (vlo, vhi) = (self.nth(lo), self.nth(hi));
        vlo + (h - lo as f64) * (vhi - vlo)
    }

    /// [`summarize`] of the counted values: the same figures, bit for bit.
    pub fn summary(&self) -> Option<Summary> {
        let n = self
            .counts
            .iter()
            .filter(|(v, _)| !v.is_nan())
            .map(|&(_, c)| c)
            .sum::<u64>();
        if n == 0 {
            return None;
        }
        let mean = self.sorted().sum::<f64>() / n as f64;
        let std = if n > 1 {
            (self.sorted().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt()
        } else {
            0.0
        };
        Some(Summary {
            count: n as usize,
            mean,
            std,
            p05: self.percentile(n, 0.05),
            p50: self.percentile(n, 0.50),
            p95: self.percentile(n, 0.95),
            min: self.nth(0),
            max: self.nth(n - 1),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    /// Wilson 1927 score interval; worked value 10 of 100 at z = 1.96 -> [0.0552, 0.1744]
    /// (the value quoted in the issue; it also follows from Wilson's formula by hand).
    #[test]
    fn wilson_worked_value() {
        let (lo, hi) = wilson_interval(10, 100, 1.96);
        assert_abs_diff_eq!(lo, 0.0552, epsilon = 5e-5);
        assert_abs_diff_eq!(hi, 0.1744, epsilon = 5e-5);
    }

    /// Edge cases of the Wilson interval: 0 and n successes stay inside [0, 1] and are not
    /// degenerate (unlike the Wald interval), per Wilson 1927. 0 of 10 at z = 1.96 gives
    /// upper = z^2/(n + z^2) = 0.2775 (closed form of the formula at p = 0).
    #[test]
    fn wilson_edges() {
        let (lo, hi) = wilson_interval(0, 10, 1.96);
        assert_abs_diff_eq!(lo, 0.0, epsilon = 1e-12);
        assert_abs_diff_eq!(
            hi,
            1.96f64.powi(2) / (10.0 + 1.96f64.powi(2)),
            epsilon = 1e-12
        );
        let (lo, hi) = wilson_interval(10, 10, 1.96);
        assert_abs_diff_eq!(hi, 1.0, epsilon = 1e-12);
        assert_abs_diff_eq!(lo, 10.0 / (10.0 + 1.96f64.powi(2)), epsilon = 1e-12);
        assert_eq!(wilson_interval(0, 0, 1.96), (0.0, 1.0));
    }

    /// The ends are exact, not a rounding residue away (Wilson 1927: at p = 0 the lower bound
    /// is `centre - half` with `centre = half`, i.e. 0; at p = 1 the upper bound is 1). Before
    /// the fix 0 of 200 gave 1.7e-18 and 10 of 10 gave 0.9999999999999999.
    #[test]
    fn wilson_ends_are_exact() {
        let z = 1.959963984540054;
        for n in [1u64, 10, 200, 263, 1000] {
            assert_eq!(wilson_interval(0, n, z).0, 0.0, "lower end, 0 of {n}");
            assert_eq!(wilson_interval(n, n, z).1, 1.0, "upper end, {n} of {n}");
        }
        assert_eq!(wilson_interval(0, 200, 1.96).0, 0.0);
        assert_eq!(wilson_interval(10, 10, 1.96).1, 1.0);
    }

    /// Worked values: Wilson's formula (JASA 22, 1927) evaluated independently (in Python) at
    /// z = 1.959964 (two-sided 95 %), to 4 decimals: the other end at 0 and n successes is
    /// z^2/(n + z^2) and n/(n + z^2); 8 of 10 -> [0.4902, 0.9433]; 81 of 263 -> [0.2553, 0.3662].
    #[test]
    fn wilson_worked_values_ends_and_middle() {
        let z = 1.959963984540054;
        let (lo, hi) = wilson_interval(0, 200, z);
        assert_eq!(lo, 0.0);
        assert_abs_diff_eq!(hi, z * z / (200.0 + z * z), epsilon = 1e-12);
        assert_abs_diff_eq!(hi, 0.018845, epsilon = 1e-6);
        let (lo, hi) = wilson_interval(10, 10, z);
        assert_abs_diff_eq!(lo, 10.0 / (10.0 + z * z), epsilon = 1e-12);
        assert_abs_diff_eq!(lo, 0.7225, epsilon = 5e-5);
        assert_eq!(hi, 1.0);
        let (lo, hi) = wilson_interval(8, 10, z);
        assert_abs_diff_eq!(lo, 0.4902, epsilon = 5e-5);
        assert_abs_diff_eq!(hi, 0.9433, epsilon = 5e-5);
        let (lo, hi) = wilson_interval(81, 263, z);
        assert_abs_diff_eq!(lo, 0.2553, epsilon = 5e-5);
        assert_abs_diff_eq!(hi, 0.3662, epsilon = 5e-5);
    }

    /// Type-7 percentiles agree with numpy.percentile's default (Hyndman & Fan 1996):
    /// numpy.percentile([1, 2, 3, 4], [5, 50, 95]) = [1.15, 2.5, 3.85].
    #[test]
    fn percentiles_match_type7() {
        let s = summarize(&[4.0, 1.0, 3.0, 2.0]).unwrap();
        assert_abs_diff_eq!(s.p05, 1.15, epsilon = 1e-12);
        assert_abs_diff_eq!(s.p50, 2.5, epsilon = 1e-12);
        assert_abs_diff_eq!(s.p95, 3.85, epsilon = 1e-12);
        assert_abs_diff_eq!(s.mean, 2.5, epsilon = 1e-12);
        // sample std of 1..4 = sqrt(5/3)
        assert_abs_diff_eq!(s.std, (5.0f64 / 3.0).sqrt(), epsilon = 1e-12);
        assert!(summarize(&[]).is_none());
    }

    fn bits(s: &Summary) -> [u64; 7] {
        [s.mean, s.std, s.p05, s.p50, s.p95, s.min, s.max].map(f64::to_bits)
    }

    proptest::proptest! {
        /// The counts give `summarize`'s figures bit for bit (the same sums in the same sorted
        /// order, the same type-7 interpolation) on accuracies `k / n` of random dies, the
        /// values a sweep point holds; `summarize` is the reference (mean, sample standard
        /// deviation, Hyndman & Fan 1996 type 7 percentiles).
        #[test]
        fn counts_reproduce_summarize_on_accuracies(
            n_test in 1u64..600,
            ks in proptest::collection::vec(0u64..=600, 1..400),
        ) {
            let v: Vec<f64> = ks.iter().map(|&k| (k % (n_test + 1)) as f64 / n_test as f64).collect();
            let mut c = ValueCounts::default();
            for &x in &v {
                c.add(x);
            }
            let (a, b) = (summarize(&v).unwrap(), c.summary().unwrap());
            proptest::prop_assert_eq!(a.count, b.count);
            proptest::prop_assert_eq!(bits(&a), bits(&b));
            proptest::prop_assert_eq!(c.total(), v.len() as u64);
            proptest::prop_assert!(c.distinct() as u64 <= n_test + 1);
            let t = 0.5;
            proptest::prop_assert_eq!(c.at_least(t), v.iter().filter(|&&x| x >= t).count() as u64);
        }

        /// Any finite values (with NaN left out like `summarize` does), and counts merged from
        /// two parts equal counts of the whole.
        #[test]
        fn counts_reproduce_summarize_on_any_values(
            v in proptest::collection::vec(proptest::prop_oneof![
                -1e3f64..1e3, proptest::strategy::Just(f64::NAN), proptest::strategy::Just(-0.0),
                proptest::strategy::Just(0.0)], 0..300),
            split in 0usize..300,
        ) {
            let mut whole = ValueCounts::default();
            let (mut p1, mut p2) = (ValueCounts::default(), ValueCounts::default());
            for (i, &x) in v.iter().enumerate() {
                whole.add(x);
                if i < split { p1.add(x) } else { p2.add(x) }
            }
            p1.merge(&p2);
            let key = |c: &ValueCounts| c.counts.iter().map(|&(v, k)| (v.to_bits(), k)).collect::<Vec<_>>();
            proptest::prop_assert_eq!(key(&p1), key(&whole));
            match (summarize(&v), whole.summary()) {
                (None, None) => {}
                (Some(a), Some(b)) => {
                    proptest::prop_assert_eq!(a.count, b.count);
                    proptest::prop_assert_eq!(bits(&a), bits(&b));
                }
                (a, b) => proptest::prop_assert!(false, "{:?} vs {:?}", a, b),
            }
        }
    }
}
