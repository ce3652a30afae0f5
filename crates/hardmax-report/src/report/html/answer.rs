//! The report's design answer: does a point meet the yield target, which is the cheapest one
//! that does (or what blocks the target), what it costs, and the paired differences between
//! sweep points (`differences.csv`). Rules: [`crate::answers`].

use std::fmt::Write as _;

use super::{esc, num, NumberKind, PointRow, ResultsFolder, Src};
use crate::answers::{choose, Candidate};

/// How the columns this section adds to `points.csv` are written, and their headings.
pub(super) fn column_kind(col: &str) -> Option<(NumberKind, &'static str)> {
    let si = |u: &str| NumberKind::Si(u.into());
    Some(match col {
        "yield_target" => (NumberKind::Percent, "yield target"),
        "pass" => (NumberKind::Count, "passes (1 = yes)"),
        "yield_margin" => (NumberKind::Percent, "yield margin (low end − target)"),
        "gate_area_m2" => (NumberKind::Plain, "gate area (m²)"),
        "area_m2" => (NumberKind::Plain, "layout area (m²)"),
        "supply_current_a" => (si("A"), "supply current"),
        "power_w" => (si("W"), "power"),
        "decision_time_s" => (si("s"), "decision time (energy)"),
        "energy_per_decision_j" => (si("J"), "energy / decision"),
        _ => return None,
    })
}

fn cell(folder: &ResultsFolder, row: &PointRow, col: &str) -> Option<f64> {
    let i = folder.points.columns.iter().position(|c| c == col)?;
    row.cells.get(i).copied().flatten()
}

fn traced(folder: &ResultsFolder, row: &PointRow, col: &str) -> String {
    let kind = column_kind(col)
        .map(|(k, _)| k)
        .unwrap_or(NumberKind::Percent);
    num(
        cell(folder, row, col),
        &kind,
        Src::Point {
            point: row.point,
            col,
        },
    )
}

fn pct(row: &PointRow, col: &'static str, v: Option<f64>) -> String {
    num(
        v,
        &NumberKind::Percent,
        Src::Point {
            point: row.point,
            col,
        },
    )
}

/// The design-answer block (empty when the folder records no yield target).
pub(super) fn design_answer(folder: &ResultsFolder) -> String {
    let rows = &folder.points.rows;
    let cands: Vec<Candidate> = rows
        .iter()
        .filter_map(|r| {
            Some(Candidate {
                point: r.point,
                margin: cell(folder, r, "yield_margin")?,
                area_m2: cell(folder, r, "area_m2"),
                current_a: cell(folder, r, "supply_current_a"),
            })
        })
        .collect();
    let Some(choice) = choose(&cands) else {
        return String::new();
    };
    let Some(row) = folder.point(choice.point) else {
        return String::new();
    };
    let mut s = String::from(r#"<div class="card" id="design-answer">"#);
    let settings = super::point_params_html(folder, row);
    let rule = "A point passes when the low end of the Wilson score interval (Wilson 1927) of \
                the share of chips reaching the accuracy target, at the stated confidence, is \
                at least the yield target: the conservative rule.";
    if choice.passes {
        let _ = write!(
            s,
            r#"<h3>Design answer</h3><p class="verdict ok" id="verdict">Point {} ({settings}) is the cheapest point that meets the target: {} of chips reach {} accuracy with a yield low end of {} against a target of {} (margin {}). Layout area {} m² (gate area {} m²), supply current {}, power {}, energy per decision {}.</p>"#,
            row.point,
            pct(row, "yield", row.yield_frac),
            pct(row, "target", row.target),
            pct(row, "yield_lo", row.yield_lo),
            traced(folder, row, "yield_target"),
            traced(folder, row, "yield_margin"),
            traced(folder, row, "area_m2"),
            traced(folder, row, "gate_area_m2"),
            traced(folder, row, "supply_current_a"),
            traced(folder, row, "power_w"),
            traced(folder, row, "energy_per_decision_j"),
        );
    } else {
        let _ = write!(
            s,
            r#"<h3>Design answer</h3><p class="verdict short" id="verdict">No point meets the target. The nearest is point {} ({settings}): {} of chips reach {} accuracy, a yield low end of {} against a target of {}, short by {} (margin). Its 5th-percentile chip reaches {}; its mean accuracy is {} (ideal argmax {}). Layout area {} m², supply current {}, power {}.</p>"#,
            row.point,
            pct(row, "yield", row.yield_frac),
            pct(row, "target", row.target),
            pct(row, "yield_lo", row.yield_lo),
            traced(folder, row, "yield_target"),
            traced(folder, row, "yield_margin"),
            pct(row, "acc_p05", row.acc_p05),
            pct(row, "acc_mean", row.acc_mean),
            pct(row, "ideal_acc", row.ideal_acc),
            traced(folder, row, "area_m2"),
            traced(folder, row, "supply_current_a"),
            traced(folder, row, "power_w"),
        );
    }
    let _ = write!(
        s,
        r#"<p class="small">{} Passing points are ranked by layout area, then supply current. Area = sum of W L over every device × the layout overhead; current = biases + weight-stage currents at the test set's mean input; energy = power × decision time (the transient's mean, or the stated read-out time in DC evaluation). Every number is in <code>points.csv</code>.</p></div>"#,
        esc(rule)
    );
    s.push_str(&differences_table(folder));
    s
}

/// The paired differences between adjacent sweep points, from `differences.csv` (absent in
/// folders written before it existed: nothing is shown).
fn differences_table(folder: &ResultsFolder) -> String {
    let Ok(text) = std::fs::read_to_string(folder.dir.join("differences.csv")) else {
        return String::new();
    };
    let mut r = csv::Reader::from_reader(text.as_bytes());
    let header: Vec<String> = match r.headers() {
        Ok(h) => h.iter().map(String::from).collect(),
        Err(_) => return String::new(),
    };
    let rows: Vec<Vec<String>> = r
        .records()
        .flatten()
        .map(|rec| rec.iter().map(String::from).collect())
        .collect();
    if rows.is_empty() {
        return String::new();
    }
    let col = |row: &[String], name: &str| -> String {
        header
            .iter()
            .position(|h| h == name)
            .and_then(|i| row.get(i).cloned())
            .unwrap_or_default()
    };
    let p = |v: String| -> String {
        v.parse::<f64>()
            .map(|x| format!("{:+.2} pp", 100.0 * x))
            .unwrap_or_else(|_| "—".into())
    };
    let mut s = String::from(
        r#"<div class="tablewrap" id="differences"><table><thead><tr><th>from point</th><th>to point</th><th>dies</th><th>accuracy change (percentage points)</th><th>interval</th><th>method</th><th>independent dies for the same precision</th></tr></thead><tbody>"#,
    );
    for row in &rows {
        let _ = write!(
            s,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>[{}, {}]</td><td>{}</td><td>{}</td></tr>",
            esc(&col(row, "from_point")),
            esc(&col(row, "to_point")),
            esc(&col(row, "dies")),
            esc(&p(col(row, "acc_diff_mean"))),
            esc(&p(col(row, "acc_diff_lo"))),
            esc(&p(col(row, "acc_diff_hi"))),
            esc(&col(row, "method")),
            esc(&col(row, "independent_dies")
                .parse::<f64>()
                .map(|x| format!("{x:.0}"))
                .unwrap_or_else(|_| "—".into())),
        );
    }
    s.push_str(
        r#"</tbody></table></div><p class="small">Mean accuracy change from one sweep point to the next (<code>differences.csv</code>). With paired dies (the default) each die is the same die at every point, and the interval is a Student t interval on the per-die differences; with independent dies it is Welch's interval. The last column is how many dies per point two independent populations would need for the same precision.</p>"#,
    );
    s
}
