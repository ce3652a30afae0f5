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
    s.push_str(&yield_area_figure(folder, &cands));
    s.push_str(&differences_table(folder));
    s
}

/// An inline SVG: the yield low end of every point against its layout area, with the yield
/// target as a dashed line (passing points filled). Nothing when fewer than two points have an
/// area.
fn yield_area_figure(folder: &ResultsFolder, cands: &[Candidate]) -> String {
    let pts: Vec<(u64, f64, f64, f64)> = cands
        .iter()
        .filter_map(|c| {
            let row = folder.point(c.point)?;
            let area = c.area_m2.filter(|a| a.is_finite() && *a > 0.0)? * 1e12;
            let lo = row.yield_lo?;
            Some((c.point, area, lo, lo - c.margin))
        })
        .collect();
    if pts.len() < 2 {
        return String::new();
    }
    let (w, h, l, r, t, b) = (640.0, 300.0, 70.0, 20.0, 20.0, 50.0);
    let amin = pts.iter().map(|p| p.1).fold(f64::INFINITY, f64::min);
    let amax = pts.iter().map(|p| p.1).fold(f64::NEG_INFINITY, f64::max);
    let span = if amax > amin {
        amax - amin
    } else {
        amax.abs().max(1.0)
    };
    let (x0, x1) = (amin - 0.05 * span, amax + 0.05 * span);
    let x = |a: f64| l + (a - x0) / (x1 - x0) * (w - l - r);
    let y = |v: f64| t + (1.0 - v.clamp(0.0, 1.0)) * (h - t - b);
    let mut s = format!(
        r##"<figure id="yield-area"><div class="plot"><svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" height="{h}"><rect x="{l}" y="{t}" width="{}" height="{}" fill="none" stroke="#888"/>"##,
        w - l - r,
        h - t - b
    );
    for v in [0.0, 0.25, 0.5, 0.75, 1.0] {
        let _ = write!(
            s,
            r##"<text x="{}" y="{}" font-size="11" text-anchor="end">{:.0} %</text>"##,
            l - 6.0,
            y(v) + 4.0,
            100.0 * v
        );
    }
    for a in [x0 + 0.05 * span, x1 - 0.05 * span] {
        let _ = write!(
            s,
            r##"<text x="{}" y="{}" font-size="11" text-anchor="middle">{:.0}</text>"##,
            x(a),
            h - b + 16.0,
            a
        );
    }
    if let Some(target) = pts.first().map(|p| p.3) {
        let _ = write!(
            s,
            r##"<line x1="{l}" x2="{}" y1="{y}" y2="{y}" stroke="#c97a1e" stroke-dasharray="6 4"/><text x="{}" y="{}" font-size="11" text-anchor="start" fill="#8a4b08">yield target</text>"##,
            w - r,
            l + 4.0,
            y(target) - 4.0,
            y = y(target)
        );
    }
    for (point, a, lo, target) in &pts {
        let fill = if lo >= target { "#1b6f7a" } else { "#ffffff" };
        let _ = write!(
            s,
            r##"<circle cx="{:.2}" cy="{:.2}" r="5" fill="{fill}" stroke="#1b6f7a" stroke-width="2"/><text x="{:.2}" y="{:.2}" font-size="10">{point}</text>"##,
            x(*a),
            y(*lo),
            x(*a) + 7.0,
            y(*lo) - 6.0
        );
    }
    let _ = write!(
        s,
        r##"<text x="{}" y="{}" font-size="12" text-anchor="middle">layout area (µm²)</text><text x="16" y="{}" font-size="12" text-anchor="middle" transform="rotate(-90 16 {})">yield, Wilson low end</text></svg></div><figcaption><b>Cost against yield.</b> Each sweep point (labelled by its index) at its layout area and the low end of its yield interval; filled points pass the yield target (dashed). Values: <code>area_m2</code> and <code>yield_lo</code> in <code>points.csv</code>.</figcaption></figure>"##,
        l + (w - l - r) / 2.0,
        h - 12.0,
        t + (h - t - b) / 2.0,
        t + (h - t - b) / 2.0
    );
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
