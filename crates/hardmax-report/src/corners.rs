//! Global corners in results: a run with `[corners]` evaluates every sweep point at every corner
//! on the same dies. The corner is the last sweep axis of the results folder (path
//! [`CORNER_AXIS`], a text axis: values are the corner indices, `labels` their names), and the
//! point number runs over (sweep point, corner) pairs: `point = sweep_point x corners + corner`.
//!
//! A design point passes only when it passes at every corner (DESIGN.md section 11; common
//! practice, no source). Its limiting corner of each metric is the corner with the worst value:
//! lowest mean accuracy, lowest 5th percentile, lowest yield lower bound, highest supply
//! current. The same rule names the limiting corners of `hardmax size` (`combine_corners`).

use crate::answers::{choose, yield_margin, Candidate};
use crate::results::{fmt, PointRecord};

/// Path of the corner axis in a results folder's sweep parameters.
pub const CORNER_AXIS: &str = "corner";

/// A metric's worst value over the corners and the corner where it is.
#[derive(Clone, Debug, PartialEq)]
pub struct Limit {
    pub corner: String,
    pub value: f64,
}

/// The item with the lowest `value` (the first on ties; NaN counts as highest).
pub fn lowest<T>(
    items: &[T],
    name: impl Fn(&T) -> &str,
    value: impl Fn(&T) -> f64,
) -> Option<Limit> {
    items
        .iter()
        .min_by(|a, b| value(a).total_cmp(&value(b)))
        .map(|t| Limit {
            corner: name(t).to_string(),
            value: value(t),
        })
}

/// The item with the highest `value` (the first on ties).
pub fn highest<T>(
    items: &[T],
    name: impl Fn(&T) -> &str,
    value: impl Fn(&T) -> f64,
) -> Option<Limit> {
    lowest(items, name, |t| -value(t)).map(|l| Limit {
        value: -l.value,
        ..l
    })
}

/// One design point's result at one corner.
#[derive(Clone, Debug, PartialEq)]
pub struct CornerResult {
    pub corner: String,
    pub acc_mean: f64,
    pub acc_p05: f64,
    pub yield_lo: f64,
    /// `yield_lo - yield target`; None without a target.
    pub margin: Option<f64>,
    pub area_m2: Option<f64>,
    pub current_a: Option<f64>,
}

/// A design point over all its corners.
#[derive(Clone, Debug, PartialEq)]
pub struct AllCorners {
    /// The sweep point (without the corner).
    pub point: u64,
    /// Its swept values without the corner.
    pub params: Vec<f64>,
    /// Corners finished / corners in the run.
    pub done: usize,
    pub total: usize,
    /// Passes at every corner (None: no yield target, or not every corner finished).
    pub pass: Option<bool>,
    /// The lowest margin over the corners (the pass decision), with its corner.
    pub margin: Option<Limit>,
    pub acc_mean: Limit,
    pub acc_p05: Limit,
    pub yield_lo: Limit,
    pub current: Option<Limit>,
    /// Layout area (the same at every corner; the largest is kept).
    pub area_m2: Option<f64>,
}

/// Combine one design point's corner results (none empty).
pub fn combine(
    point: u64,
    params: Vec<f64>,
    total: usize,
    r: &[CornerResult],
) -> Option<AllCorners> {
    let margins: Vec<(String, f64)> = r
        .iter()
        .filter_map(|c| c.margin.map(|m| (c.corner.clone(), m)))
        .collect();
    let margin = if margins.len() == r.len() {
        lowest(&margins, |m| m.0.as_str(), |m| m.1)
    } else {
        None
    };
    let currents: Vec<(String, f64)> = r
        .iter()
        .filter_map(|c| c.current_a.map(|i| (c.corner.clone(), i)))
        .collect();
    Some(AllCorners {
        point,
        params,
        done: r.len(),
        total,
        pass: margin
            .as_ref()
            .filter(|_| r.len() == total)
            .map(|m| m.value >= 0.0),
        margin,
        acc_mean: lowest(r, |c| c.corner.as_str(), |c| c.acc_mean)?,
        acc_p05: lowest(r, |c| c.corner.as_str(), |c| c.acc_p05)?,
        yield_lo: lowest(r, |c| c.corner.as_str(), |c| c.yield_lo)?,
        current: highest(&currents, |m| m.0.as_str(), |m| m.1),
        area_m2: r
            .iter()
            .filter_map(|c| c.area_m2)
            .fold(None, |a: Option<f64>, x| Some(a.map_or(x, |a| a.max(x)))),
    })
}

/// Group (point, params, result) triples of a corner run by design point: `point / corners`
/// is the design point, the last parameter (the corner index) is dropped. Sorted by point.
pub fn group(
    items: impl IntoIterator<Item = (u64, Vec<f64>, CornerResult)>,
    corners: usize,
) -> Vec<AllCorners> {
    let k = corners.max(1) as u64;
    let mut groups: Vec<(u64, Vec<f64>, Vec<CornerResult>)> = Vec::new();
    for (point, mut params, r) in items {
        let sp = point / k;
        params.pop();
        match groups.iter_mut().find(|g| g.0 == sp) {
            Some(g) => g.2.push(r),
            None => groups.push((sp, params, vec![r])),
        }
    }
    groups.sort_by_key(|g| g.0);
    groups
        .into_iter()
        .filter_map(|(p, params, r)| combine(p, params, corners, &r))
        .collect()
}

/// The corner results of point records (`labels`: the corner names in index order).
pub fn from_records(records: &[PointRecord], labels: &[String]) -> Vec<AllCorners> {
    let k = labels.len();
    group(
        records.iter().map(|r| {
            let s = r.summary();
            let name = labels
                .get(r.point % k.max(1))
                .cloned()
                .unwrap_or_else(|| format!("{}", r.point % k.max(1)));
            (
                r.point as u64,
                r.params.clone(),
                CornerResult {
                    corner: name,
                    acc_mean: s.acc_mean,
                    acc_p05: s.acc_p05,
                    yield_lo: s.yield_lo,
                    margin: yield_margin(r, &s),
                    area_m2: r.cost.as_ref().map(|c| c.area_m2),
                    current_a: r.cost.as_ref().map(|c| c.supply_current_a),
                },
            )
        }),
        k,
    )
}

/// Columns of `corners.csv` after `point` and the swept parameters.
pub const CORNER_COLUMNS: &[&str] = &[
    "corners_done",
    "corners_total",
    "pass_all",
    "margin_min",
    "margin_corner",
    "acc_mean_min",
    "acc_mean_corner",
    "acc_p05_min",
    "acc_p05_corner",
    "yield_lo_min",
    "yield_corner",
    "supply_current_max_a",
    "current_corner",
    "area_m2",
];

fn csv_text(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// `corners.csv`: one row per design point over all its corners. `axis_paths` are the swept
/// parameters without the corner.
pub fn corners_csv(rows: &[AllCorners], axis_paths: &[String]) -> Vec<u8> {
    let mut out = String::from("point");
    for p in axis_paths {
        out.push(',');
        out.push_str(p);
    }
    for c in CORNER_COLUMNS {
        out.push(',');
        out.push_str(c);
    }
    out.push('\n');
    let limit = |l: &Option<Limit>| match l {
        Some(l) => format!("{},{}", fmt(l.value), csv_text(&l.corner)),
        None => ",".into(),
    };
    for r in rows {
        out.push_str(&r.point.to_string());
        for v in &r.params {
            out.push(',');
            out.push_str(&fmt(*v));
        }
        out.push_str(&format!(
            ",{},{},{},{},{},{},{},{},{}\n",
            r.done,
            r.total,
            r.pass.map_or(String::new(), |p| u8::from(p).to_string()),
            limit(&r.margin),
            limit(&Some(r.acc_mean.clone())),
            limit(&Some(r.acc_p05.clone())),
            limit(&Some(r.yield_lo.clone())),
            limit(&r.current),
            r.area_m2.map(fmt).unwrap_or_default(),
        ));
    }
    out.into_bytes()
}

/// The design point to name over all corners: the cheapest passing at every corner (largest
/// area, then current, over its corners), else the nearest (largest lowest margin).
pub fn choose_all(rows: &[AllCorners]) -> Option<(&AllCorners, bool)> {
    let cands: Vec<Candidate> = rows
        .iter()
        .filter(|r| r.done == r.total)
        .filter_map(|r| {
            Some(Candidate {
                point: r.point,
                margin: r.margin.as_ref()?.value,
                area_m2: r.area_m2,
                current_a: r.current.as_ref().map(|c| c.value),
            })
        })
        .collect();
    let c = choose(&cands)?;
    rows.iter()
        .find(|r| r.point == c.point)
        .map(|r| (r, c.passes))
}

/// "accuracy mean ff / 400 K (0.912), 5th percentile ..., yield ..., current ...": the
/// limiting corner of each metric.
pub fn limits_text(r: &AllCorners) -> String {
    let mut s = format!(
        "limiting corners: accuracy mean {} ({:.4}), 5th percentile {} ({:.4}), yield {} (low end {:.3})",
        r.acc_mean.corner, r.acc_mean.value, r.acc_p05.corner, r.acc_p05.value, r.yield_lo.corner,
        r.yield_lo.value
    );
    if let Some(c) = &r.current {
        s += &format!(
            ", current {} ({})",
            c.corner,
            crate::units::format_si(c.value, "A", 3)
        );
    }
    s
}

/// The headline over all corners (None when no design point finished at every corner).
/// `describe` writes a design point's swept values.
pub fn headline(rows: &[AllCorners], describe: impl Fn(&AllCorners) -> String) -> Option<String> {
    let total = rows.first()?.total;
    let Some((r, passes)) = choose_all(rows) else {
        // No yield target: name the worst corners of the point with the lowest accuracy.
        let r = rows
            .iter()
            .filter(|r| r.done == r.total)
            .min_by(|a, b| a.acc_mean.value.total_cmp(&b.acc_mean.value))?;
        return Some(format!(
            "at all {total} corners, point {} ({}): {}",
            r.point,
            describe(r),
            limits_text(r)
        ));
    };
    let m = r.margin.as_ref()?;
    let settings = describe(r);
    let settings = if settings.is_empty() {
        String::new()
    } else {
        format!(" ({settings})")
    };
    Some(if passes {
        format!(
            "cheapest point passing at all {total} corners: point {}{settings}, yield low end {:.3} at its limiting corner {} (margin {:+.3}); {}",
            r.point,
            r.yield_lo.value,
            m.corner,
            m.value,
            limits_text(r)
        )
    } else {
        format!(
            "no point passes at all {total} corners: nearest is point {}{settings}, short by {:.3} at corner {}; {}",
            r.point,
            -m.value,
            m.corner,
            limits_text(r)
        )
    })
}

/// Write `corners.csv` into the results folder `root` from the point records of a corner run
/// (`axis_paths` with the corner axis last, `labels` the corner names).
pub fn write_corners_table(
    root: &std::path::Path,
    records: &[PointRecord],
    axis_paths: &[String],
    labels: &[String],
) -> Result<(), crate::io::AtomicWriteError> {
    let rows = from_records(records, labels);
    let paths = &axis_paths[..axis_paths.len().saturating_sub(1)];
    crate::io::write_atomic(&root.join("corners.csv"), &corners_csv(&rows, paths))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn res(corner: &str, margin: f64, acc: f64, current: f64) -> CornerResult {
        CornerResult {
            corner: corner.into(),
            acc_mean: acc,
            acc_p05: acc - 0.05,
            yield_lo: 0.9 + margin,
            margin: Some(margin),
            area_m2: Some(1e-9),
            current_a: Some(current),
        }
    }

    /// A design point failing at one corner fails overall, though it passes at the others
    /// (DESIGN.md section 11: pass only at every corner; common practice, no source); each
    /// metric names its own limiting corner.
    #[test]
    fn one_failing_corner_fails_the_point() {
        let r = [
            res("tt", 0.03, 0.95, 1e-6),
            res("ss", -0.02, 0.94, 0.7e-6),
            res("ff", 0.01, 0.93, 1.4e-6),
        ];
        let a = combine(0, vec![], 3, &r).unwrap();
        assert_eq!(a.pass, Some(false));
        assert_eq!(a.margin.as_ref().unwrap().corner, "ss");
        assert_eq!(a.acc_mean.corner, "ff");
        assert_eq!(a.yield_lo.corner, "ss");
        assert_eq!(a.current.as_ref().unwrap().corner, "ff");
        approx::assert_relative_eq!(a.current.as_ref().unwrap().value, 1.4e-6);
        let ok = [res("tt", 0.03, 0.95, 1e-6), res("ss", 0.0, 0.94, 0.7e-6)];
        assert_eq!(combine(0, vec![], 2, &ok).unwrap().pass, Some(true));
        // A point not finished at every corner has no verdict.
        assert_eq!(combine(0, vec![], 3, &ok).unwrap().pass, None);
    }

    /// Grouping by design point: point = sweep point x corners + corner; the corner column is
    /// dropped from the design point's values; the cheapest passing point is chosen over the
    /// corners only.
    #[test]
    fn groups_and_chooses_over_corners() {
        let items = vec![
            (0, vec![1.0, 0.0], res("tt", 0.02, 0.95, 1e-6)),
            (1, vec![1.0, 1.0], res("ss", -0.01, 0.93, 1e-6)),
            (2, vec![2.0, 0.0], res("tt", 0.05, 0.97, 2e-6)),
            (3, vec![2.0, 1.0], res("ss", 0.01, 0.95, 2e-6)),
        ];
        let g = group(items, 2);
        assert_eq!(g.len(), 2);
        assert_eq!(g[0].params, vec![1.0]);
        assert_eq!(g[0].pass, Some(false));
        assert_eq!(g[1].pass, Some(true));
        let (r, passes) = choose_all(&g).unwrap();
        assert!(passes);
        assert_eq!(r.point, 1);
        let h = headline(&g, |_| "x".into()).unwrap();
        assert!(h.contains("at all 2 corners"), "{h}");
        let csv = String::from_utf8(corners_csv(&g, &["a".into()])).unwrap();
        assert!(csv.starts_with("point,a,corners_done"), "{csv}");
        assert_eq!(csv.lines().count(), 3);
    }
}
