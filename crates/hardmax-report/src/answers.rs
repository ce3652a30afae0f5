//! Design answers kept in the results folder: whether a point meets the yield target, what it
//! costs (area, current, power, energy), and paired differences between sweep points.
//!
//! - **Pass rule** (conservative): a point passes when the low end of the two-sided Wilson
//!   score interval (E. B. Wilson, JASA 22, 1927) of the share of chips reaching the accuracy
//!   target, at the stated confidence, is at least the yield target (`yield_lo >= yield`). The
//!   low end of a two-sided interval at confidence c is a one-sided bound at (1 + c) / 2.
//! - **Paired differences** between adjacent sweep points (`differences.csv`): with paired
//!   dies, d_c = acc(point b, die c) - acc(point a, die c); mean, sample standard deviation and a
//!   Student t interval mean ± t_{n-1} s / sqrt(n) (any statistics handbook). With independent
//!   dies the interval is Welch's (unequal variances, Welch-Satterthwaite degrees of freedom).
//!   `independent_dies` says how many dies per point two independent populations would need for
//!   the same precision: n (var_a + var_b) / var(d).

use serde::{Deserialize, Serialize};

use crate::results::{fmt, PointRecord, PointSummary};

/// What a point costs (SI units), recorded with the point.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PointCost {
    /// Sum of W L over every device.
    pub gate_area_m2: f64,
    /// Gate area x layout overhead.
    pub area_m2: f64,
    /// Static supply current (biases + weight-stage currents at the test set's mean input).
    pub supply_current_a: f64,
    /// Supply current x supply voltage.
    pub power_w: f64,
    /// Read-out time of a DC evaluation, s (the transient's mean decision time is used instead
    /// when there is one).
    pub read_out_time_s: f64,
}

/// Columns appended to `points.csv` after the population statistics.
pub const DESIGN_COLUMNS: [&str; 9] = [
    "yield_target",
    "pass",
    "yield_margin",
    "gate_area_m2",
    "area_m2",
    "supply_current_a",
    "power_w",
    "decision_time_s",
    "energy_per_decision_j",
];

/// Does a point pass? `Some(yield_lo - target)` is its margin (pass when >= 0).
pub fn yield_margin(rec: &PointRecord, s: &PointSummary) -> Option<f64> {
    rec.yield_target.map(|t| s.yield_lo - t)
}

/// The decision time a point's energy uses: the transient's mean, else the read-out time.
pub fn decision_time(rec: &PointRecord, s: &PointSummary) -> Option<f64> {
    s.decision_time_mean_s
        .or_else(|| rec.cost.as_ref().map(|c| c.read_out_time_s))
}

/// The `points.csv` cells of [`DESIGN_COLUMNS`] for one point (empty = not recorded).
pub fn design_cells(rec: &PointRecord, s: &PointSummary) -> Vec<String> {
    let margin = yield_margin(rec, s);
    let opt = |v: Option<f64>| v.map(fmt).unwrap_or_default();
    let c = rec.cost.as_ref();
    let t = decision_time(rec, s);
    vec![
        opt(rec.yield_target),
        margin
            .map(|m| if m >= 0.0 { "1" } else { "0" }.to_string())
            .unwrap_or_default(),
        opt(margin),
        opt(c.map(|c| c.gate_area_m2)),
        opt(c.map(|c| c.area_m2)),
        opt(c.map(|c| c.supply_current_a)),
        opt(c.map(|c| c.power_w)),
        opt(c.and(t)),
        opt(c.and_then(|c| t.map(|t| c.power_w * t))),
    ]
}

/// A sweep point as a candidate design: its pass margin and cost.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Candidate {
    pub point: u64,
    /// `yield_lo - yield_target` (passes when >= 0).
    pub margin: f64,
    pub area_m2: Option<f64>,
    pub current_a: Option<f64>,
}

/// The answer to "which point do I build?": the cheapest passing point (smallest layout area,
/// then smallest supply current), or, when none passes, the nearest (largest margin, then
/// cheapest).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Choice {
    pub point: u64,
    pub passes: bool,
}

/// Pick the point to name in a headline (none without candidates).
pub fn choose(candidates: &[Candidate]) -> Option<Choice> {
    let key = |v: Option<f64>| v.filter(|x| x.is_finite()).unwrap_or(f64::INFINITY);
    let cheaper = |a: &Candidate, b: &Candidate| {
        key(a.area_m2)
            .total_cmp(&key(b.area_m2))
            .then(key(a.current_a).total_cmp(&key(b.current_a)))
            .then(a.point.cmp(&b.point))
    };
    let valid = candidates.iter().filter(|c| c.margin.is_finite());
    let passing = valid
        .clone()
        .filter(|c| c.margin >= 0.0)
        .min_by(|a, b| cheaper(a, b));
    if let Some(c) = passing {
        return Some(Choice {
            point: c.point,
            passes: true,
        });
    }
    valid
        .max_by(|a, b| a.margin.total_cmp(&b.margin).then(cheaper(b, a)))
        .map(|c| Choice {
            point: c.point,
            passes: false,
        })
}

/// Candidates from point records.
pub fn candidates(records: &[PointRecord]) -> Vec<Candidate> {
    records
        .iter()
        .filter_map(|r| {
            let s = r.summary();
            yield_margin(r, &s).map(|margin| Candidate {
                point: r.point as u64,
                margin,
                area_m2: r.cost.as_ref().map(|c| c.area_m2),
                current_a: r.cost.as_ref().map(|c| c.supply_current_a),
            })
        })
        .collect()
}

/// Student t quantile at the normal quantile `z` (same probability) with `df` degrees of
/// freedom: the Cornish-Fisher expansion of Abramowitz & Stegun 26.7.5 (four terms; within
/// 1e-3 of the tables for df >= 5, our check in the tests).
pub fn t_quantile_from_z(z: f64, df: f64) -> f64 {
    if !(df.is_finite() && df > 0.0) {
        return f64::NAN;
    }
    let z2 = z * z;
    let g1 = (z2 + 1.0) * z / 4.0;
    let g2 = ((5.0 * z2 + 16.0) * z2 + 3.0) * z / 96.0;
    let g3 = (((3.0 * z2 + 19.0) * z2 + 17.0) * z2 - 15.0) * z / 384.0;
    let g4 = ((((79.0 * z2 + 776.0) * z2 + 1482.0) * z2 - 1920.0) * z2 - 945.0) * z / 92160.0;
    z + g1 / df + g2 / df.powi(2) + g3 / df.powi(3) + g4 / df.powi(4)
}

/// One difference between two sweep points.
#[derive(Clone, Debug, PartialEq)]
pub struct Difference {
    pub from_point: usize,
    pub to_point: usize,
    /// Dies in the difference (paired: dies present at both points).
    pub dies: usize,
    /// Mean accuracy at `to_point` minus mean accuracy at `from_point`.
    pub mean: f64,
    /// Standard error of `mean`.
    pub std_error: f64,
    pub lo: f64,
    pub hi: f64,
    /// `paired_t` or `welch`.
    pub method: &'static str,
    /// Sample variances of the per-die accuracies at the two points.
    pub var_from: f64,
    pub var_to: f64,
    /// Sample variance of the per-die differences (paired only).
    pub var_diff: Option<f64>,
    /// Dies per point two independent populations need for the same standard error.
    pub independent_dies: Option<f64>,
}

/// The accuracies of a point's dies in chip order, read one at a time (from the point's chip
/// file: a point keeps no per-die values in memory). An `Err` item says why reading stopped.
pub type AccuracyStream<'a> = Box<dyn Iterator<Item = Result<f64, String>> + 'a>;

/// Where [`difference`] reads a point's accuracies from, in chip order; called once per pass.
pub type AccuracySource<'a> = dyn Fn(&PointRecord) -> AccuracyStream<'a> + 'a;

/// `Iterator::sum` of `f` over the first `n` values of `stream` (the same additions in the same
/// order as summing a slice), or why the stream did not deliver `n` values.
fn stream_sum(stream: AccuracyStream<'_>, n: usize, f: impl Fn(f64) -> f64) -> Result<f64, String> {
    let mut err = None;
    let mut k = 0usize;
    let s = stream
        .take(n)
        .map_while(|r| match r {
            Ok(x) => {
                k += 1;
                Some(f(x))
            }
            Err(e) => {
                err = Some(e);
                None
            }
        })
        .sum::<f64>();
    match err {
        Some(e) => Err(e),
        None if k < n => Err(format!("{k} accuracies where {n} were expected")),
        None => Ok(s),
    }
}

/// Mean and sample variance (two passes: the mean, then the squared deviations, each summed in
/// stream order) of the first `n` values of the stream `open` makes.
fn mean_var<'s>(open: &dyn Fn() -> AccuracyStream<'s>, n: usize) -> Result<(f64, f64), String> {
    let nf = n as f64;
    let m = stream_sum(open(), n, |x| x)? / nf;
    let var = if n > 1 {
        stream_sum(open(), n, |x| (x - m).powi(2))? / (nf - 1.0)
    } else {
        f64::NAN
    };
    Ok((m, var))
}

/// The difference of point `b` minus point `a` (per-die accuracies, read in chip order from
/// `accs`), paired by die index when `paired`, at normal quantile `z` (the interval's
/// confidence). `Ok(None)`: fewer than two dies. Memory does not depend on the number of dies:
/// every statistic is a sequential sum over the streams (two passes for a variance).
pub fn difference<'s>(
    a: &PointRecord,
    b: &PointRecord,
    paired: bool,
    z: f64,
    accs: &AccuracySource<'s>,
) -> Result<Option<Difference>, String> {
    let (n_a, n_b) = (a.stats.chips(), b.stats.chips());
    if n_a < 2 || n_b < 2 {
        return Ok(None);
    }
    let (ma, va) = mean_var(&|| accs(a), n_a)?;
    let (mb, vb) = mean_var(&|| accs(b), n_b)?;
    if paired {
        // Die c of b against die c of a: both records hold contiguous chips, so the common dies
        // are one range, in chip order in both streams.
        let (ra, rb) = (a.chip_range(), b.chip_range());
        let (lo, hi) = (ra.start.max(rb.start), ra.end.min(rb.end));
        let common = hi.saturating_sub(lo) as usize;
        if common < 2 {
            return Ok(None);
        }
        let diffs = || -> AccuracyStream<'s> {
            let sa = accs(a).skip((lo - ra.start) as usize);
            let sb = accs(b).skip((lo - rb.start) as usize);
            Box::new(sb.zip(sa).map(|(xb, xa)| Ok(xb? - xa?)))
        };
        let n = common as f64;
        let (md, vd) = mean_var(&diffs, common)?;
        let se = (vd / n).sqrt();
        let t = t_quantile_from_z(z, n - 1.0);
        Ok(Some(Difference {
            from_point: a.point,
            to_point: b.point,
            dies: common,
            mean: md,
            std_error: se,
            lo: md - t * se,
            hi: md + t * se,
            method: "paired_t",
            var_from: va,
            var_to: vb,
            var_diff: Some(vd),
            independent_dies: (vd > 0.0).then(|| n * (va + vb) / vd),
        }))
    } else {
        let (na, nb) = (n_a as f64, n_b as f64);
        let (sa, sb) = (va / na, vb / nb);
        let se = (sa + sb).sqrt();
        // Welch-Satterthwaite degrees of freedom.
        let df = (sa + sb).powi(2) / (sa * sa / (na - 1.0) + sb * sb / (nb - 1.0));
        let t = if df.is_finite() {
            t_quantile_from_z(z, df)
        } else {
            z
        };
        let m = mb - ma;
        Ok(Some(Difference {
            from_point: a.point,
            to_point: b.point,
            dies: n_a.min(n_b),
            mean: m,
            std_error: se,
            lo: m - t * se,
            hi: m + t * se,
            method: "welch",
            var_from: va,
            var_to: vb,
            var_diff: None,
            independent_dies: None,
        }))
    }
}

/// Columns of `differences.csv`.
pub const DIFFERENCE_COLUMNS: [&str; 12] = [
    "from_point",
    "to_point",
    "dies",
    "acc_diff_mean",
    "acc_diff_se",
    "acc_diff_lo",
    "acc_diff_hi",
    "method",
    "acc_var_from",
    "acc_var_to",
    "acc_diff_var",
    "independent_dies",
];

/// Differences between adjacent finished sweep points, in point order, their accuracies read
/// from `accs`.
pub fn differences(
    records: &[PointRecord],
    accs: &AccuracySource<'_>,
) -> Result<Vec<Difference>, String> {
    let mut out = Vec::new();
    for w in records.windows(2) {
        if let [a, b] = w {
            out.extend(difference(a, b, b.paired, b.z, accs)?);
        }
    }
    Ok(out)
}

/// The `differences.csv` table of `diffs` (from [`differences`]).
pub fn differences_csv(diffs: &[Difference]) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let _ = w.write_record(DIFFERENCE_COLUMNS);
    let opt = |v: Option<f64>| v.map(fmt).unwrap_or_default();
    for d in diffs {
        let _ = w.write_record([
            d.from_point.to_string(),
            d.to_point.to_string(),
            d.dies.to_string(),
            fmt(d.mean),
            fmt(d.std_error),
            fmt(d.lo),
            fmt(d.hi),
            d.method.to_string(),
            fmt(d.var_from),
            fmt(d.var_to),
            opt(d.var_diff),
            opt(d.independent_dies),
        ]);
    }
    w.into_inner().unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::results::ChipRow;
    use approx::assert_relative_eq;

    fn rec(point: usize, accs: &[f64], paired: bool) -> PointRecord {
        PointRecord {
            point,
            params: vec![point as f64],
            first_chip: 0,
            stats: crate::results::ChipStats::of(
                &accs
                    .iter()
                    .enumerate()
                    .map(|(i, &a)| ChipRow {
                        chip: i as u64,
                        accuracy: a,
                        agreement: a,
                        ambiguous: 0,
                        nonconverged: 0,
                        samples: 100,
                        decision_time_mean_s: None,
                        programming: None,
                        energy_mean_j: None,
                        failed: Default::default(),
                    })
                    .collect::<Vec<_>>(),
            ),
            confusion: vec![],
            ideal_acc: 0.95,
            baseline_acc: 0.95,
            target: 0.9,
            z: 1.959_964,
            elapsed_s: 0.0,
            first_failure: None,
            yield_target: Some(0.5),
            cost: None,
            paired,
        }
    }

    /// An accuracy source over per-point values held in memory (point p: `values[p]`).
    fn in_memory<'a>(values: &'a [&'a [f64]]) -> impl Fn(&PointRecord) -> AccuracyStream<'a> {
        move |r: &PointRecord| -> AccuracyStream<'a> {
            Box::new(values[r.point].iter().map(|&x| Ok(x)))
        }
    }

    /// Streaming over a source gives, bit for bit, the two-pass statistics of the values held
    /// in one slice (textbook mean and sample variance, in chip order), paired and Welch; a
    /// short stream or a read error is reported, not folded in.
    #[test]
    fn streamed_difference_equals_the_in_memory_formulas() {
        let va: Vec<f64> = (0..997u64)
            .map(|i| ((i * 7919) % 541) as f64 / 540.0)
            .collect();
        let vb: Vec<f64> = (0..997u64)
            .map(|i| ((i * 104_729) % 541) as f64 / 540.0)
            .collect();
        let mv = |v: &[f64]| {
            let n = v.len() as f64;
            let m = v.iter().sum::<f64>() / n;
            (
                m,
                v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0),
            )
        };
        let d: Vec<f64> = vb.iter().zip(&va).map(|(b, a)| b - a).collect();
        let (a, b) = (rec(0, &va, true), rec(1, &vb, true));
        let both = [&va[..], &vb[..]];
        let src = in_memory(&both);
        let got = difference(&a, &b, true, 1.959_964, &src).unwrap().unwrap();
        let (md, vd) = mv(&d);
        assert_eq!(got.mean.to_bits(), md.to_bits());
        assert_eq!(got.var_diff.unwrap().to_bits(), vd.to_bits());
        assert_eq!(got.var_from.to_bits(), mv(&va).1.to_bits());
        assert_eq!(got.var_to.to_bits(), mv(&vb).1.to_bits());
        let w = difference(&a, &b, false, 1.959_964, &src).unwrap().unwrap();
        assert_eq!(w.mean.to_bits(), (mv(&vb).0 - mv(&va).0).to_bits());
        // Part of a point (a shard's record starting at chip 3): only common dies pair up.
        let mut b2 = rec(1, &vb[3..], true);
        b2.first_chip = 3;
        let part = [&va[..], &vb[3..]];
        let src2 = in_memory(&part);
        let got = difference(&a, &b2, true, 1.959_964, &src2)
            .unwrap()
            .unwrap();
        assert_eq!(got.dies, 994);
        assert_eq!(got.mean.to_bits(), mv(&d[3..]).0.to_bits());
        let cut = [&va[..10], &vb[..]];
        let short = in_memory(&cut);
        assert!(difference(&a, &b, true, 1.959_964, &short).is_err());
        let broken = |_: &PointRecord| -> AccuracyStream<'static> {
            Box::new(std::iter::once(Err("unreadable".to_string())))
        };
        assert_eq!(
            difference(&a, &b, true, 1.959_964, &broken).unwrap_err(),
            "unreadable"
        );
    }

    /// Student t quantiles (Abramowitz & Stegun Table 26.10; any statistics handbook):
    /// t_{0.975} = 2.571 (5 df), 2.228 (10), 2.042 (30), 1.972 (199, from memory to 3 digits).
    #[test]
    fn t_quantiles_match_tables() {
        for (df, want) in [(5.0, 2.571), (10.0, 2.228), (30.0, 2.042), (199.0, 1.972)] {
            let t = t_quantile_from_z(1.959_964, df);
            assert!((t - want).abs() < 2e-3, "df {df}: {t} vs {want}");
        }
    }

    /// Hand calculation: dies (0.90, 0.80, 0.70) then (0.85, 0.80, 0.60): differences
    /// (-0.05, 0, -0.10), mean -0.05, s^2 = 0.0025, se = sqrt(0.0025/3) = 0.028868; t_{0.975, 2}
    /// = 4.303 (tables; the 4-term expansion gives 4.17 at 2 df, so only the centre and the
    /// standard error are pinned here, and the interval is checked to hold the mean).
    #[test]
    fn paired_difference_by_hand() {
        let a = rec(0, &[0.90, 0.80, 0.70], true);
        let b = rec(1, &[0.85, 0.80, 0.60], true);
        let values: [&[f64]; 2] = [&[0.90, 0.80, 0.70], &[0.85, 0.80, 0.60]];
        let accs = in_memory(&values);
        let d = difference(&a, &b, true, 1.959_964, &accs)
            .unwrap()
            .unwrap_or_else(|| panic!("no difference"));
        assert_relative_eq!(d.mean, -0.05, epsilon = 1e-12);
        assert_relative_eq!(d.std_error, (0.0025f64 / 3.0).sqrt(), epsilon = 1e-12);
        assert!(d.lo < d.mean && d.mean < d.hi);
        // var(a) = 0.01, var(b) = (0.01 + 0.0025 + 0.0225) / 2 = 0.0175: independent dies for
        // the same precision 3 (0.01 + 0.0175) / 0.0025 = 33.
        assert_relative_eq!(d.independent_dies.unwrap_or(0.0), 33.0, max_relative = 1e-9);
        let w = difference(&a, &b, false, 1.959_964, &accs)
            .unwrap()
            .unwrap_or_else(|| panic!("no difference"));
        assert_eq!(w.method, "welch");
        assert_relative_eq!(w.mean, -0.05, epsilon = 1e-12);
        assert_relative_eq!(
            w.std_error,
            ((0.01 + 0.0175f64) / 3.0).sqrt(),
            max_relative = 1e-9
        );
    }

    /// The cheapest passing point by area, then current; none passing: the nearest.
    #[test]
    fn choice_is_cheapest_passing_or_nearest() {
        let c = |point, margin, area, current| Candidate {
            point,
            margin,
            area_m2: Some(area),
            current_a: Some(current),
        };
        let all = [
            c(0, -0.2, 1.0, 1.0),
            c(1, 0.01, 4.0, 1.0),
            c(2, 0.05, 3.0, 2.0),
            c(3, 0.02, 3.0, 1.0),
        ];
        assert_eq!(
            choose(&all),
            Some(Choice {
                point: 3,
                passes: true
            })
        );
        let none = [c(0, -0.2, 1.0, 1.0), c(1, -0.05, 4.0, 1.0)];
        assert_eq!(
            choose(&none),
            Some(Choice {
                point: 1,
                passes: false
            })
        );
        assert_eq!(choose(&[]), None);
    }

    /// Pass rule: the Wilson low end against the yield target (Wilson 1927). 10 of 10 chips at
    /// z = 1.96 gives a low end of 0.7225 (the published interval for p = 1, n = 10): passes a
    /// 0.7 target with margin 0.0225, fails 0.75.
    #[test]
    fn pass_uses_the_wilson_low_end() {
        let mut r = rec(0, &[0.95; 10], true);
        r.yield_target = Some(0.7);
        let s = r.summary();
        let m = yield_margin(&r, &s).unwrap_or(f64::NAN);
        assert!((m - 0.0225).abs() < 5e-4, "{m}");
        assert_eq!(design_cells(&r, &s)[1], "1");
        r.yield_target = Some(0.75);
        let s = r.summary();
        assert_eq!(design_cells(&r, &s)[1], "0");
    }
}
