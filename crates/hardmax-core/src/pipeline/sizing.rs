//! Sizing search (pure): the smallest value of one design dimension that passes a monotone
//! pass predicate (log-scale bracket + bisection), a coarse log grid with bisection along the
//! pass boundary for several dimensions, the trade-off front of two costs, and the step-up rule
//! of a verification that failed. No I/O, no random draws: the caller's evaluator runs the
//! population and says whether a candidate passes (model notes §11).
//!
//! Why bisection holds: with paired dies (common random numbers) die c draws the same standard
//! normals at every candidate, scaled by the candidate's sizes (dV_T = z A_VT / sqrt(2 W L)), so
//! a die's accuracy is (nearly) monotone in an area-like dimension and so is the share of dies
//! reaching the target, and so is its Wilson lower bound. The search assumes monotonicity and
//! says so; the verification run on a fresh population checks the answer.

/// Errors of a search specification; each names the dimension.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SizingError {
    #[error("dimension `{name}`: the range {lo} .. {hi} is empty or inverted; give from < to, both above 0 (a log scale)")]
    BadRange { name: String, lo: f64, hi: f64 },
    #[error("the resolution {0} must be above 0 and below 1 (the relative width of the final bracket, e.g. 0.05)")]
    BadResolution(f64),
    #[error("a grid needs at least 2 values per dimension, got {0}")]
    BadGrid(usize),
    #[error("no dimension to search; give at least one")]
    NoDimension,
}

/// A closed range of one dimension, searched on a log scale.
#[derive(Debug, Clone, PartialEq)]
pub struct LogRange {
    pub name: String,
    pub lo: f64,
    pub hi: f64,
}

impl LogRange {
    /// Refuses an empty, inverted or non-positive range (the one place of validation).
    pub fn new(name: &str, lo: f64, hi: f64) -> Result<Self, SizingError> {
        if !(lo.is_finite() && hi.is_finite() && lo > 0.0 && hi > lo) {
            return Err(SizingError::BadRange {
                name: name.into(),
                lo,
                hi,
            });
        }
        Ok(Self {
            name: name.into(),
            lo,
            hi,
        })
    }

    /// `k` values spaced evenly on a log scale from `lo` to `hi` (both included).
    pub fn grid(&self, k: usize) -> Result<Vec<f64>, SizingError> {
        if k < 2 {
            return Err(SizingError::BadGrid(k));
        }
        let (a, b) = (self.lo.ln(), self.hi.ln());
        Ok((0..k)
            .map(|i| {
                if i + 1 == k {
                    self.hi
                } else {
                    (a + (b - a) * i as f64 / (k - 1) as f64).exp()
                }
            })
            .collect())
    }
}

/// What the evaluator says of one candidate.
pub trait Verdict {
    /// The candidate meets the target.
    fn passes(&self) -> bool;
    /// How far it is from passing (positive = passes by this much): yield lower bound minus
    /// yield target.
    fn margin(&self) -> f64;
}

/// The outcome of a one-dimensional search.
#[derive(Debug, Clone, PartialEq)]
pub enum Bisection {
    /// The smallest passing value found: `value` passes, `below` (the largest failing value
    /// seen, or `None` when `lo` itself passes) fails; `value / below <= 1 + resolution`.
    Found { value: f64, below: Option<f64> },
    /// Even the top of the range fails: never extrapolate; `best` is the value with the largest
    /// margin seen (normally `hi`) and `margin` that margin (negative).
    NotMet { best: f64, margin: f64 },
}

/// Smallest value in `range` whose candidate passes, assuming the pass predicate is monotone
/// (fails below some value, passes above). Bracket: the top of the range (must pass, else
/// [`Bisection::NotMet`]), then the bottom (passes: the answer is the bottom); bisection at the
/// geometric mean until `hi / lo <= 1 + resolution`. Every evaluation goes through `eval`, in
/// order; the caller records the trace. An evaluator error stops the search.
pub fn bisect_log<V: Verdict, E>(
    range: &LogRange,
    resolution: f64,
    mut eval: impl FnMut(f64) -> Result<V, E>,
) -> Result<Result<Bisection, SizingError>, E> {
    if !(resolution > 0.0 && resolution < 1.0) {
        return Ok(Err(SizingError::BadResolution(resolution)));
    }
    let top = eval(range.hi)?;
    if !top.passes() {
        return Ok(Ok(Bisection::NotMet {
            best: range.hi,
            margin: top.margin(),
        }));
    }
    let bottom = eval(range.lo)?;
    if bottom.passes() {
        return Ok(Ok(Bisection::Found {
            value: range.lo,
            below: None,
        }));
    }
    let (mut lo, mut hi) = (range.lo, range.hi);
    while hi / lo > 1.0 + resolution {
        let mid = (lo * hi).sqrt();
        if eval(mid)?.passes() {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    Ok(Ok(Bisection::Found {
        value: hi,
        below: Some(lo),
    }))
}

/// Number of evaluations [`bisect_log`] makes at most (both ends plus the bisections).
pub fn bisection_steps(range: &LogRange, resolution: f64) -> usize {
    let ratio = (range.hi / range.lo).ln();
    let target = (1.0 + resolution).ln();
    let mut n = 0;
    let mut r = ratio;
    while r > target {
        r /= 2.0;
        n += 1;
    }
    2 + n
}

/// Indices of the points on the lower-left front of two costs (both minimised): a point is on
/// the front when no other point is at most as costly in both and cheaper in one. Sorted by the
/// first cost; duplicates keep their first index.
pub fn pareto_front(points: &[(f64, f64)]) -> Vec<usize> {
    let mut idx: Vec<usize> = (0..points.len())
        .filter(|&i| points[i].0.is_finite() && points[i].1.is_finite())
        .collect();
    idx.sort_by(|&a, &b| {
        points[a]
            .0
            .total_cmp(&points[b].0)
            .then(points[a].1.total_cmp(&points[b].1))
            .then(a.cmp(&b))
    });
    let mut front = Vec::new();
    let mut best_second = f64::INFINITY;
    for i in idx {
        if points[i].1 < best_second {
            best_second = points[i].1;
            front.push(i);
        }
    }
    front
}

/// The next candidate after a failed verification: every dimension stepped up by `factor`
/// (above 1), capped at its range's top. `None` when every dimension is already at its top
/// (nothing left to widen to inside the ranges).
pub fn step_up(values: &[f64], ranges: &[LogRange], factor: f64) -> Option<Vec<f64>> {
    if values.iter().zip(ranges).all(|(v, r)| *v >= r.hi) {
        return None;
    }
    Some(
        values
            .iter()
            .zip(ranges)
            .map(|(v, r)| (v * factor).min(r.hi))
            .collect(),
    )
}

/// Lower bound of the two-sided Wilson score interval (E. B. Wilson, JASA 22, 1927) for
/// `successes` of `trials` at normal quantile `z`; the best a perfect population of `trials`
/// dies can show is `wilson_lower(trials, trials, z) = n / (n + z^2)`.
pub fn wilson_lower(successes: u64, trials: u64, z: f64) -> f64 {
    if trials == 0 || successes == 0 {
        return 0.0;
    }
    let n = trials as f64;
    let p = successes.min(trials) as f64 / n;
    let z2 = z * z;
    let centre = (p + z2 / (2.0 * n)) / (1.0 + z2 / n);
    let half = z * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt() / (1.0 + z2 / n);
    (centre - half).max(0.0)
}

/// What the search minimises and draws on the front: the evaluator's costs of a candidate.
pub trait Candidate: Verdict {
    /// The stated cost to minimise (area, current, or a weighted sum).
    fn cost(&self) -> f64;
    /// The two costs of the trade-off front: (layout area m^2, supply current A).
    fn front_costs(&self) -> (f64, f64);
}

/// Why a candidate was evaluated.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Role {
    /// An end of the range (the bracket).
    Bracket,
    /// A bisection step.
    Bisect,
    /// Verification on a fresh population (another seed).
    Verify,
}

impl Role {
    pub fn key(self) -> &'static str {
        match self {
            Role::Bracket => "bracket",
            Role::Bisect => "bisect",
            Role::Verify => "verify",
        }
    }
}

/// One evaluated candidate.
#[derive(Debug, Clone)]
pub struct Step<V> {
    pub role: Role,
    /// One value per dimension, in SI base units.
    pub values: Vec<f64>,
    /// Population seed the candidate was evaluated with.
    pub seed: u64,
    pub verdict: V,
}

/// Settings of a search.
#[derive(Debug, Clone, PartialEq)]
pub struct SearchOptions {
    /// Relative width of the final bracket of the first dimension (0.05: within 5 %).
    pub resolution: f64,
    /// Values per further dimension on its log grid (several dimensions only).
    pub grid: usize,
    /// Seed of the search population (paired dies: the same dies at every candidate).
    pub seed: u64,
    /// Seed of the verification population (must differ from `seed`).
    pub verify_seed: u64,
    /// How many times a failed verification may step the answer up before giving up.
    pub verify_steps: usize,
    /// Factor of each step up (above 1).
    pub step_factor: f64,
}

/// The search's answer before verification.
#[derive(Debug, Clone, PartialEq)]
pub enum Answer {
    /// The cheapest passing candidate (index into the trace).
    Met { step: usize },
    /// Nothing passed inside the ranges: the candidate with the largest margin, and the
    /// dimensions that were at the top of their range there (the ones to widen).
    NotMet { best_step: usize, widen: Vec<usize> },
}

/// What the verification run found.
#[derive(Debug, Clone, PartialEq)]
pub struct Verification {
    /// The last verification candidate passed.
    pub passed: bool,
    /// Trace indices of the verification candidates, in order.
    pub steps: Vec<usize>,
    /// The verification stopped because every dimension reached its top.
    pub exhausted: bool,
}

/// How the search ended, as the headline must say it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Status {
    /// The answer passed on the search population and on the fresh one.
    Verified,
    /// The search answer failed verification; a stepped-up design passed (the answer moves).
    VerifiedAfterStepUp,
    /// The answer failed its verification run and no step up inside the ranges passed.
    FailedVerification,
    /// The target is not met inside the ranges.
    NotMet,
}

/// A finished search.
#[derive(Debug, Clone)]
pub struct SearchResult<V> {
    pub trace: Vec<Step<V>>,
    pub answer: Answer,
    pub verification: Option<Verification>,
    /// Trace indices of the passing search candidates on the (area, current) front.
    pub front: Vec<usize>,
}

impl<V> SearchResult<V> {
    pub fn status(&self) -> Status {
        match (&self.answer, &self.verification) {
            (Answer::NotMet { .. }, _) => Status::NotMet,
            (Answer::Met { .. }, Some(v)) if v.passed && v.steps.len() == 1 => Status::Verified,
            (Answer::Met { .. }, Some(v)) if v.passed => Status::VerifiedAfterStepUp,
            (Answer::Met { .. }, _) => Status::FailedVerification,
        }
    }

    /// The design to build: the last passing verification candidate, else the search answer
    /// (whose status then says it failed verification), else none.
    pub fn final_step(&self) -> Option<usize> {
        match (&self.answer, &self.verification) {
            (Answer::Met { .. }, Some(v)) if v.passed => v.steps.last().copied(),
            (Answer::Met { step }, _) => Some(*step),
            _ => None,
        }
    }
}

/// Method of [`search`], for reports.
pub const METHOD_ONE: &str = "log-scale bracket (both ends of the range) then bisection at the geometric mean until the bracket is within the resolution, on the same dies at every step";
/// Method of [`search`] with several dimensions, for reports.
pub const METHOD_SEVERAL: &str = "coarse log grid over every dimension but the first; along the first, bisection to the pass boundary for each grid combination (same dies at every step); the answer is the cheapest passing candidate evaluated; the front is the passing candidates no other passing one beats in both area and current";

/// Minimise the candidates' cost subject to passing, then verify on a fresh population.
/// One dimension: [`bisect_log`] over `ranges[0]`. Several: for each combination of the other
/// dimensions' log grids, [`bisect_log`] along the first ([`METHOD_SEVERAL`]). Never evaluates
/// outside the ranges. Verification: the answer at `verify_seed`; on failure every dimension
/// steps up by `step_factor` (capped at its top) and is verified again, at most `verify_steps`
/// times.
pub fn search<V: Candidate + Clone, E>(
    ranges: &[LogRange],
    opts: &SearchOptions,
    mut eval: impl FnMut(&[f64], u64, Role) -> Result<V, E>,
) -> Result<Result<SearchResult<V>, SizingError>, E> {
    let Some(first) = ranges.first() else {
        return Ok(Err(SizingError::NoDimension));
    };
    if !(opts.resolution > 0.0 && opts.resolution < 1.0) {
        return Ok(Err(SizingError::BadResolution(opts.resolution)));
    }
    let mut combos: Vec<Vec<f64>> = vec![vec![]];
    for r in &ranges[1..] {
        let g = match r.grid(opts.grid) {
            Ok(g) => g,
            Err(e) => return Ok(Err(e)),
        };
        combos = combos
            .iter()
            .flat_map(|c| {
                g.iter().map(move |v| {
                    let mut c = c.clone();
                    c.push(*v);
                    c
                })
            })
            .collect();
    }
    let mut trace: Vec<Step<V>> = Vec::new();
    for combo in &combos {
        let mut n = 0usize;
        let r = bisect_log(first, opts.resolution, |x| {
            let mut values = vec![x];
            values.extend_from_slice(combo);
            let role = if n < 2 { Role::Bracket } else { Role::Bisect };
            n += 1;
            let v = eval(&values, opts.seed, role)?;
            trace.push(Step {
                role,
                values,
                seed: opts.seed,
                verdict: v.clone(),
            });
            Ok(v)
        })?;
        if let Err(e) = r {
            return Ok(Err(e));
        }
    }
    let passing: Vec<usize> = (0..trace.len())
        .filter(|&i| trace[i].verdict.passes())
        .collect();
    let pts: Vec<(f64, f64)> = passing
        .iter()
        .map(|&i| trace[i].verdict.front_costs())
        .collect();
    let front: Vec<usize> = pareto_front(&pts).into_iter().map(|k| passing[k]).collect();
    let best = passing.iter().copied().min_by(|&a, &b| {
        trace[a]
            .verdict
            .cost()
            .total_cmp(&trace[b].verdict.cost())
            .then(a.cmp(&b))
    });
    let Some(best) = best else {
        let best_step = (0..trace.len())
            .max_by(|&a, &b| {
                trace[a]
                    .verdict
                    .margin()
                    .total_cmp(&trace[b].verdict.margin())
                    .then(b.cmp(&a))
            })
            .unwrap_or(0);
        let widen = trace
            .get(best_step)
            .map(|s| {
                (0..ranges.len())
                    .filter(|&d| s.values[d] >= ranges[d].hi)
                    .collect()
            })
            .unwrap_or_default();
        return Ok(Ok(SearchResult {
            trace,
            answer: Answer::NotMet { best_step, widen },
            verification: None,
            front,
        }));
    };
    // Verification on a fresh population, stepping up while it fails.
    let mut values = trace[best].values.clone();
    let mut steps = Vec::new();
    let mut exhausted = false;
    let passed = loop {
        let v = eval(&values, opts.verify_seed, Role::Verify)?;
        let ok = v.passes();
        trace.push(Step {
            role: Role::Verify,
            values: values.clone(),
            seed: opts.verify_seed,
            verdict: v,
        });
        steps.push(trace.len() - 1);
        if ok {
            break true;
        }
        if steps.len() > opts.verify_steps {
            break false;
        }
        match step_up(&values, ranges, opts.step_factor) {
            Some(next) => values = next,
            None => {
                exhausted = true;
                break false;
            }
        }
    };
    Ok(Ok(SearchResult {
        trace,
        answer: Answer::Met { step: best },
        verification: Some(Verification {
            passed,
            steps,
            exhausted,
        }),
        front,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;
    use statrs::distribution::{ContinuousCDF, Normal};

    #[derive(Debug, Clone, Copy)]
    struct V {
        pass: bool,
        margin: f64,
    }
    impl Verdict for V {
        fn passes(&self) -> bool {
            self.pass
        }
        fn margin(&self) -> f64 {
            self.margin
        }
    }

    #[test]
    fn ranges_refuse_empty_inverted_and_non_positive() {
        assert!(LogRange::new("w", 1.0, 1.0).is_err());
        assert!(LogRange::new("w", 2.0, 1.0).is_err());
        assert!(LogRange::new("w", 0.0, 1.0).is_err());
        assert!(LogRange::new("w", f64::NAN, 1.0).is_err());
        let r = LogRange::new("w", 1.0, 64.0).unwrap();
        let g = r.grid(7).unwrap();
        // Log-spaced: 1, 2, 4, ..., 64 (powers of two: exact on a log scale).
        for (k, v) in g.iter().enumerate() {
            approx::assert_relative_eq!(*v, 2f64.powi(k as i32), max_relative = 1e-12);
        }
        assert!(r.grid(1).is_err());
    }

    #[test]
    fn bisection_finds_a_threshold_to_the_resolution() {
        let r = LogRange::new("w", 1e-6, 64e-6).unwrap();
        let threshold = 7.3e-6;
        let mut calls = 0;
        let out = bisect_log(&r, 0.02, |x| {
            calls += 1;
            Ok::<_, ()>(V {
                pass: x >= threshold,
                margin: x - threshold,
            })
        })
        .unwrap()
        .unwrap();
        match out {
            Bisection::Found { value, below } => {
                let below = below.unwrap();
                assert!(value >= threshold && below < threshold);
                assert!(value / below <= 1.02);
            }
            other => panic!("{other:?}"),
        }
        assert!(calls <= bisection_steps(&r, 0.02));
    }

    #[test]
    fn bisection_never_extrapolates() {
        let r = LogRange::new("w", 1.0, 8.0).unwrap();
        let out = bisect_log(&r, 0.05, |x| {
            Ok::<_, ()>(V {
                pass: x >= 100.0,
                margin: -0.1 / x,
            })
        })
        .unwrap()
        .unwrap();
        assert_eq!(
            out,
            Bisection::NotMet {
                best: 8.0,
                margin: -0.1 / 8.0
            }
        );
        // Bottom passes: the answer is the bottom, with no failing value below it.
        let out = bisect_log(&r, 0.05, |_| {
            Ok::<_, ()>(V {
                pass: true,
                margin: 0.1,
            })
        })
        .unwrap()
        .unwrap();
        assert_eq!(
            out,
            Bisection::Found {
                value: 1.0,
                below: None
            }
        );
        assert!(bisect_log(&r, 0.0, |_| Ok::<_, ()>(V {
            pass: true,
            margin: 0.0
        }))
        .unwrap()
        .is_err());
    }

    #[test]
    fn front_keeps_the_non_dominated_points() {
        let p = [
            (1.0, 5.0),
            (2.0, 3.0),
            (2.5, 4.0),
            (3.0, 1.0),
            (4.0, 1.0),
            (0.5, 9.0),
        ];
        assert_eq!(pareto_front(&p), vec![5, 0, 1, 3]);
    }

    #[test]
    fn step_up_stops_at_the_ranges() {
        let r = [LogRange::new("a", 1.0, 4.0).unwrap()];
        assert_eq!(step_up(&[3.0], &r, 2.0), Some(vec![4.0]));
        assert_eq!(step_up(&[4.0], &r, 2.0), None);
    }

    /// The analytic sizing problem of model notes §11: two classes N(+mu, s^2), N(-mu, s^2)
    /// decided by sign after a per-die input-referred offset d = z A / sqrt(W L) (M. Pelgrom et
    /// al., IEEE JSSC 24, 1989). A die's error 0.5 [Phi((-mu - d)/s) + Phi((-mu + d)/s)] grows
    /// with |d|; it meets the accuracy target when |d| <= d*, so the yield is
    /// 2 Phi(d* sqrt(WL) / A) - 1 and the area meeting yield Y is
    /// WL* = (A Phi^-1((1 + Y)/2) / d*)^2 (normal CDF and quantile from statrs).
    /// The search, with the conservative Wilson rule on a Monte Carlo population of paired dies,
    /// must return an area inside the population's interval of the answer: between the smallest
    /// area whose Wilson upper bound reaches Y and the smallest whose lower bound does, and that
    /// interval must hold WL*.
    #[test]
    fn search_matches_the_analytic_area_within_the_monte_carlo_interval() {
        use rand::SeedableRng;
        use rand_distr::{Distribution, StandardNormal};
        let phi = Normal::standard();
        let (mu, s, a) = (1.0, 0.8, 5e-9); // a: A in V m (input-referred), mu and s in V
        let target_acc = 0.85;
        let yield_target = 0.9;
        let z_conf = phi.inverse_cdf(0.975); // 95 % two-sided
        let err = |d: f64| 0.5 * (phi.cdf((-mu - d) / s) + phi.cdf((-mu + d) / s));
        // d*: error(d*) = 1 - target, by bisection on |d| (err is increasing in |d|).
        let (mut lo, mut hi) = (0.0, 10.0);
        for _ in 0..200 {
            let m = 0.5 * (lo + hi);
            if err(m) > 1.0 - target_acc {
                hi = m
            } else {
                lo = m
            }
        }
        let d_star = 0.5 * (lo + hi);
        let area_star = (a * phi.inverse_cdf(0.5 + 0.5 * yield_target) / d_star).powi(2);

        let dies = 2000;
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let z: Vec<f64> = (0..dies).map(|_| StandardNormal.sample(&mut rng)).collect();
        let count = |area: f64| -> u64 {
            let sd = a / area.sqrt();
            z.iter()
                .filter(|&&zi| 1.0 - err(zi * sd) >= target_acc)
                .count() as u64
        };
        let range = LogRange::new("wl", area_star / 30.0, area_star * 30.0).unwrap();
        let verdict = |area: f64, upper: bool| {
            let k = count(area);
            let bound = if upper {
                1.0 - wilson_lower(dies - k, dies, z_conf)
            } else {
                wilson_lower(k, dies, z_conf)
            };
            V {
                pass: bound >= yield_target,
                margin: bound - yield_target,
            }
        };
        let find = |upper: bool| match bisect_log(&range, 0.002, |x| Ok::<_, ()>(verdict(x, upper)))
            .unwrap()
            .unwrap()
        {
            Bisection::Found { value, .. } => value,
            other => panic!("{other:?}"),
        };
        let answer = find(false);
        let optimistic = find(true);
        assert!(
            optimistic <= area_star * 1.002 && area_star <= answer * 1.002,
            "analytic {area_star:e} outside the Monte Carlo interval {optimistic:e} .. {answer:e}"
        );
        // The conservative answer is not far above: within a factor 1.5 for 2000 dies.
        assert!(answer < 1.5 * area_star, "{answer:e} vs {area_star:e}");
    }

    #[test]
    fn wilson_lower_matches_the_report_formula() {
        // 200 of 200 at z = 1.96: n / (n + z^2) (E. B. Wilson, JASA 22, 1927).
        approx::assert_relative_eq!(
            wilson_lower(200, 200, 1.96),
            200.0 / (200.0 + 1.96 * 1.96),
            max_relative = 1e-12
        );
        assert_eq!(wilson_lower(0, 10, 1.96), 0.0);
    }

    #[derive(Debug, Clone, Copy)]
    struct C {
        pass: bool,
        margin: f64,
        area: f64,
        current: f64,
    }
    impl Verdict for C {
        fn passes(&self) -> bool {
            self.pass
        }
        fn margin(&self) -> f64 {
            self.margin
        }
    }
    impl Candidate for C {
        fn cost(&self) -> f64 {
            self.area
        }
        fn front_costs(&self) -> (f64, f64) {
            (self.area, self.current)
        }
    }

    fn opts() -> SearchOptions {
        SearchOptions {
            resolution: 0.05,
            grid: 4,
            seed: 1,
            verify_seed: 2,
            verify_steps: 3,
            step_factor: 1.25,
        }
    }

    /// The search never hands back a design that failed its own verification without saying
    /// so: a verification population that needs more than the range gives ends
    /// FailedVerification, and a stepped-up pass moves the answer and says so.
    #[test]
    fn a_failed_verification_is_never_silent() {
        let r = [LogRange::new("w", 1.0, 64.0).unwrap()];
        // The search population passes from 5; the verification population needs 100.
        let res = search(&r, &opts(), |v, seed, _| {
            let need = if seed == 1 { 5.0 } else { 100.0 };
            Ok::<_, ()>(C {
                pass: v[0] >= need,
                margin: v[0] - need,
                area: v[0],
                current: 1.0,
            })
        })
        .unwrap()
        .unwrap();
        assert_eq!(res.status(), Status::FailedVerification);
        let ver = res.verification.as_ref().unwrap();
        assert!(!ver.passed);
        assert!(ver.steps.len() <= opts().verify_steps + 1);
        // Every verification step is in the trace with its seed.
        assert!(ver.steps.iter().all(|&i| res.trace[i].seed == 2));
        // The verification population needs a little more: a step up passes, answer moves.
        let res = search(&r, &opts(), |v, seed, _| {
            let need = if seed == 1 { 5.0 } else { 6.0 };
            Ok::<_, ()>(C {
                pass: v[0] >= need,
                margin: v[0] - need,
                area: v[0],
                current: 1.0,
            })
        })
        .unwrap()
        .unwrap();
        assert_eq!(res.status(), Status::VerifiedAfterStepUp);
        let f = res.final_step().unwrap();
        assert!(res.trace[f].values[0] >= 6.0 && res.trace[f].verdict.pass);
    }

    /// Two dimensions trading against each other (pass when a * b >= 16, area = a + b,
    /// current = b): the cheapest passing design is near a = b = 4 (AM-GM), and the front
    /// holds only passing candidates that no other beats in both costs.
    #[test]
    fn two_dimensions_minimise_the_cost_on_the_boundary() {
        let r = [
            LogRange::new("a", 1.0, 64.0).unwrap(),
            LogRange::new("b", 1.0, 64.0).unwrap(),
        ];
        let mut o = opts();
        o.grid = 7; // b on 1, 2, 4, ..., 64
        let res = search(&r, &o, |v, _, _| {
            Ok::<_, ()>(C {
                pass: v[0] * v[1] >= 16.0,
                margin: v[0] * v[1] - 16.0,
                area: v[0] + v[1],
                current: v[1],
            })
        })
        .unwrap()
        .unwrap();
        assert_eq!(res.status(), Status::Verified);
        let Answer::Met { step } = res.answer else {
            panic!()
        };
        let best = &res.trace[step];
        approx::assert_relative_eq!(best.values[1], 4.0, max_relative = 1e-9);
        assert!(best.values[0] >= 4.0 && best.values[0] <= 4.0 * 1.05);
        for &i in &res.front {
            assert!(res.trace[i].verdict.pass);
            let (a, c) = res.trace[i].verdict.front_costs();
            assert!(!res.front.iter().any(|&j| {
                let (a2, c2) = res.trace[j].verdict.front_costs();
                a2 <= a && c2 <= c && (a2 < a || c2 < c)
            }));
        }
    }

    #[test]
    fn nothing_passing_names_the_range_to_widen() {
        let r = [
            LogRange::new("a", 1.0, 8.0).unwrap(),
            LogRange::new("b", 1.0, 8.0).unwrap(),
        ];
        let res = search(&r, &opts(), |v, _, _| {
            Ok::<_, ()>(C {
                pass: false,
                margin: v[0] * v[1] - 1000.0,
                area: 1.0,
                current: 1.0,
            })
        })
        .unwrap()
        .unwrap();
        assert_eq!(res.status(), Status::NotMet);
        assert_eq!(
            res.answer,
            Answer::NotMet {
                best_step: res
                    .trace
                    .iter()
                    .position(|s| s.values == vec![8.0, 8.0])
                    .unwrap(),
                widen: vec![0, 1]
            }
        );
        assert!(res
            .trace
            .iter()
            .all(|s| s.values[0] <= 8.0 && s.values[1] <= 8.0));
        assert!(res.final_step().is_none());
    }
}
