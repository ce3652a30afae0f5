//! The report's answer for a run with corners: a design point passes only when it passes at
//! every corner; per design point the limiting corner of each metric, and a per-corner table.
//! Rules: [`crate::corners`]. Every number links to its `points.csv` cell (the row of the
//! design point at that corner).

use std::fmt::Write as _;

use super::{esc, num, NumberKind, ResultsFolder, Src};
use crate::corners::{combine, headline, AllCorners, CornerResult, Limit, CORNER_AXIS};
use crate::report::render::short_name;

/// The corner names when the folder holds a corner run (its last sweep parameter).
pub(super) fn corner_labels(folder: &ResultsFolder) -> Option<&[String]> {
    folder
        .manifest
        .sweep
        .parameters
        .last()
        .filter(|p| p.path == CORNER_AXIS)
        .and_then(|p| p.labels.as_deref())
}

fn cell(folder: &ResultsFolder, point: u64, col: &str) -> Option<f64> {
    let i = folder.points.columns.iter().position(|c| c == col)?;
    folder.point(point)?.cells.get(i).copied().flatten()
}

/// The design points of the folder over their corners.
pub(super) fn all_corners(folder: &ResultsFolder, labels: &[String]) -> Vec<AllCorners> {
    let k = labels.len().max(1) as u64;
    let mut groups: Vec<(u64, Vec<f64>, Vec<CornerResult>)> = Vec::new();
    for r in &folder.points.rows {
        let dp = r.point / k;
        let corner = labels
            .get((r.point % k) as usize)
            .cloned()
            .unwrap_or_default();
        let res = CornerResult {
            corner,
            acc_mean: r.acc_mean.unwrap_or(f64::NAN),
            acc_p05: r.acc_p05.unwrap_or(f64::NAN),
            yield_lo: r.yield_lo.unwrap_or(f64::NAN),
            margin: cell(folder, r.point, "yield_margin"),
            area_m2: cell(folder, r.point, "area_m2"),
            current_a: cell(folder, r.point, "supply_current_a"),
        };
        match groups.iter_mut().find(|g| g.0 == dp) {
            Some(g) => g.2.push(res),
            None => {
                let mut params = r.params.clone();
                params.pop();
                groups.push((dp, params, vec![res]));
            }
        }
    }
    groups
        .into_iter()
        .filter_map(|(p, params, r)| combine(p, params, labels.len(), &r))
        .collect()
}

fn settings(folder: &ResultsFolder, r: &AllCorners) -> String {
    folder
        .manifest
        .sweep
        .parameters
        .iter()
        .zip(&r.params)
        .map(|(p, v)| {
            format!(
                "{} = {}",
                short_name(&p.path),
                super::fmt_kind(*v, &NumberKind::Si(p.unit.clone()))
            )
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// The `points.csv` row of design point `dp` at corner `name`.
fn row_of(labels: &[String], dp: u64, name: &str) -> u64 {
    let j = labels.iter().position(|l| l == name).unwrap_or(0) as u64;
    dp * labels.len() as u64 + j
}

fn limit_cell(
    labels: &[String],
    dp: u64,
    l: &Limit,
    col: &'static str,
    kind: NumberKind,
) -> String {
    format!(
        "{} <span class=\"small\">({})</span>",
        num(
            Some(l.value),
            &kind,
            Src::Point {
                point: row_of(labels, dp, &l.corner),
                col,
            }
        ),
        esc(&l.corner)
    )
}

/// The corner block of the headline section.
pub(super) fn corners_answer(folder: &ResultsFolder, labels: &[String]) -> String {
    let rows = all_corners(folder, labels);
    let n = labels.len();
    let mut s = String::from(r#"<div class="card" id="corners-answer">"#);
    let head = headline(&rows, |r| settings(folder, r))
        .unwrap_or_else(|| format!("no design point has finished at all {n} corners yet"));
    let _ = write!(
        s,
        r#"<h3>Design answer at all {n} corners</h3><p class="verdict" id="verdict">{}</p><p class="small">Every design point was evaluated at each of the {n} corners ({}) on the same dies (paired: each die keeps its mismatch draws; a corner shifts every die globally). A point passes only when it passes at every corner (common practice, no source): the low end of the Wilson interval of its yield must reach the target at each. The limiting corner of a metric is the one with the worst value: lowest mean accuracy, lowest 5th percentile, lowest yield low end, highest supply current. Also in <code>corners.csv</code>.</p>"#,
        esc(&head),
        esc(&labels.join("; "))
    );
    s.push_str(
        r#"<table class="points" id="corners-table"><thead><tr><th>design point</th><th>settings</th><th>passes at all corners</th><th>mean accuracy (limiting corner)</th><th>5th percentile (limiting corner)</th><th>yield low end (limiting corner)</th><th>supply current (highest)</th></tr></thead><tbody>"#,
    );
    for r in &rows {
        let pass = match r.pass {
            Some(true) => "yes".to_string(),
            Some(false) => format!(
                "no (at {})",
                esc(r.margin.as_ref().map_or("", |m| m.corner.as_str()))
            ),
            None if r.done < r.total => format!("{} of {} corners finished", r.done, r.total),
            None => "no target".into(),
        };
        let _ = write!(
            s,
            "<tr><td>{}</td><td>{}</td><td>{pass}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            r.point,
            esc(&settings(folder, r)),
            limit_cell(labels, r.point, &r.acc_mean, "acc_mean", NumberKind::Percent),
            limit_cell(labels, r.point, &r.acc_p05, "acc_p05", NumberKind::Percent),
            limit_cell(labels, r.point, &r.yield_lo, "yield_lo", NumberKind::Percent),
            r.current.as_ref().map_or("—".into(), |c| limit_cell(
                labels,
                r.point,
                c,
                "supply_current_a",
                NumberKind::Si("A".into())
            )),
        );
    }
    s.push_str("</tbody></table>");
    // Per corner: mean accuracy and yield low end of every design point.
    s.push_str(r#"<table class="points" id="per-corner-table"><thead><tr><th>corner</th>"#);
    for r in &rows {
        let _ = write!(
            s,
            "<th>point {} ({}): mean accuracy / yield low end</th>",
            r.point,
            esc(&settings(folder, r))
        );
    }
    s.push_str("</tr></thead><tbody>");
    for (j, name) in labels.iter().enumerate() {
        let _ = write!(s, "<tr><td>{}</td>", esc(name));
        for r in &rows {
            let p = r.point * n as u64 + j as u64;
            let row = folder.point(p);
            let _ = write!(
                s,
                "<td>{} / {}</td>",
                num(
                    row.and_then(|x| x.acc_mean),
                    &NumberKind::Percent,
                    Src::Point {
                        point: p,
                        col: "acc_mean"
                    }
                ),
                num(
                    row.and_then(|x| x.yield_lo),
                    &NumberKind::Percent,
                    Src::Point {
                        point: p,
                        col: "yield_lo"
                    }
                ),
            );
        }
        s.push_str("</tr>");
    }
    s.push_str("</tbody></table></div>");
    s
}
