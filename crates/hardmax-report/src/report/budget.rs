//! The error budget of one design point as files: the table (`budget.csv`), the bar figure
//! (SVG), the self-contained report section (`budget.html`) and the stdout table.
//!
//! Everything here works on in-memory data and returns text; the caller writes the files with
//! `io::write_atomic`. Column meanings: DEVELOPERS.md, "Error budget folder".

use plotters::prelude::*;

use super::error::ReportError;
use super::format::esc;
use crate::paired::PairedInterval;

/// What a budget row is.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ItemKind {
    /// A reference variant (exact-arithmetic ideal, quantised ideal): no cost.
    Reference,
    /// Quantisation of weights and DAC: exact ideal minus quantised ideal.
    Quantisation,
    /// One nonideality: cost alone on (vs the quantised ideal) and gain of leaving it out.
    Single,
    /// Every nonideality of one stage on together (vs the quantised ideal).
    Stage,
    /// Every nonideality on: the total analog loss (vs the quantised ideal).
    AllOn,
    /// All-on loss minus the sum of the single losses.
    Interaction,
}

impl ItemKind {
    pub fn key(self) -> &'static str {
        match self {
            ItemKind::Reference => "reference",
            ItemKind::Quantisation => "quantisation",
            ItemKind::Single => "single",
            ItemKind::Stage => "stage",
            ItemKind::AllOn => "all_on",
            ItemKind::Interaction => "interaction",
        }
    }
}

/// One row of the budget.
#[derive(Clone, Debug, PartialEq)]
pub struct BudgetItem {
    pub key: String,
    pub kind: ItemKind,
    /// Stage group (weights, hidden, competition) or empty.
    pub stage: String,
    pub description: String,
    /// Rank among the single nonidealities by accuracy cost (1 = largest).
    pub rank: Option<usize>,
    /// Mean accuracy and yield of the variant this row measures (NaN for the interaction).
    pub accuracy_mean: f64,
    pub yield_: f64,
    /// Accuracy cost (a share, 0.01 = one point) with its paired interval.
    pub acc_cost: Option<PairedInterval>,
    /// Yield cost with its paired interval (point value only for the interaction).
    pub yield_cost: Option<PairedInterval>,
    /// Gain from leaving this nonideality out of the all-on design (single rows).
    pub loo_acc_gain: Option<PairedInterval>,
    pub loo_yield_gain: Option<PairedInterval>,
}

/// A whole budget and its context.
#[derive(Clone, Debug, PartialEq)]
pub struct BudgetTable {
    pub experiment: String,
    /// Sweep point index and its settings ("path = value, ...").
    pub point: usize,
    pub settings: String,
    pub dies: usize,
    pub samples: usize,
    pub target_accuracy: f64,
    pub confidence: f64,
    pub seed: u64,
    pub command: String,
    pub items: Vec<BudgetItem>,
}

const COLUMNS: [&str; 20] = [
    "rank",
    "item",
    "kind",
    "stage",
    "description",
    "accuracy_mean",
    "yield",
    "accuracy_cost",
    "accuracy_cost_lo",
    "accuracy_cost_hi",
    "yield_cost",
    "yield_cost_lo",
    "yield_cost_hi",
    "leave_one_out_accuracy_gain",
    "leave_one_out_accuracy_gain_lo",
    "leave_one_out_accuracy_gain_hi",
    "leave_one_out_yield_gain",
    "leave_one_out_yield_gain_lo",
    "leave_one_out_yield_gain_hi",
    "dies",
];

fn num(v: f64) -> String {
    if v.is_finite() {
        format!("{v}")
    } else {
        String::new()
    }
}

fn cells(ci: &Option<PairedInterval>, with_limits: bool) -> [String; 3] {
    match ci {
        Some(c) if with_limits => [num(c.estimate), num(c.lo), num(c.hi)],
        Some(c) => [num(c.estimate), String::new(), String::new()],
        None => [String::new(), String::new(), String::new()],
    }
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// `budget.csv`: one row per item, in table order (single rows ranked).
pub fn budget_csv(t: &BudgetTable) -> String {
    let mut out = COLUMNS.join(",");
    out.push('\n');
    for it in &t.items {
        let interaction = it.kind == ItemKind::Interaction;
        let mut row = vec![
            it.rank.map(|r| r.to_string()).unwrap_or_default(),
            csv_field(&it.key),
            it.kind.key().to_string(),
            it.stage.clone(),
            csv_field(&it.description),
            num(it.accuracy_mean),
            num(it.yield_),
        ];
        row.extend(cells(&it.acc_cost, true));
        row.extend(cells(&it.yield_cost, !interaction));
        row.extend(cells(&it.loo_acc_gain, true));
        row.extend(cells(&it.loo_yield_gain, true));
        row.push(t.dies.to_string());
        out.push_str(&row.join(","));
        out.push('\n');
    }
    out
}

fn pts(v: f64) -> String {
    if v.is_finite() {
        format!("{:+.2}", 100.0 * v)
    } else {
        "-".into()
    }
}

fn ci_text(ci: &Option<PairedInterval>) -> String {
    match ci {
        Some(c) if c.lo.is_finite() && c.hi.is_finite() => {
            format!("{} [{}, {}]", pts(c.estimate), pts(c.lo), pts(c.hi))
        }
        Some(c) => pts(c.estimate),
        None => "-".into(),
    }
}

/// The block to spend on, in one sentence: the single nonideality with the largest accuracy
/// cost (rank 1), its stage, its cost alone and the gain of removing it from the full design;
/// or a statement that no single nonideality costs measurably.
pub fn recommendation(t: &BudgetTable) -> String {
    let top = t
        .items
        .iter()
        .filter(|i| i.kind == ItemKind::Single)
        .min_by_key(|i| i.rank.unwrap_or(usize::MAX));
    match top {
        Some(i) => {
            let cost = i.acc_cost.map(|c| c.estimate).unwrap_or(f64::NAN);
            let lo = i.acc_cost.map(|c| c.lo).unwrap_or(f64::NAN);
            let gain = i.loo_acc_gain.map(|c| c.estimate).unwrap_or(f64::NAN);
            let gain_lo = i.loo_acc_gain.map(|c| c.lo).unwrap_or(f64::NAN);
            if lo > 0.0 && gain_lo > 0.0 {
                format!(
                    "Spend on the {} stage first: {} costs {:.2} points of accuracy alone (95 % interval above zero), and removing it from the full design recovers {:.2} points.",
                    i.stage,
                    i.description,
                    100.0 * cost,
                    100.0 * gain
                )
            } else if lo > 0.0 {
                format!(
                    "Spend on the {} stage first, but not on it alone: {} costs {:.2} points of accuracy alone (95 % interval above zero), yet removing only it from the full design recovers {:.2} points (interval not above zero), so the next items of the table limit this design too.",
                    i.stage,
                    i.description,
                    100.0 * cost,
                    100.0 * gain
                )
            } else {
                format!(
                    "No single nonideality costs measurably at this point ({} dies; the largest, {}, costs {:.2} points with an interval that includes zero): spend on none of them before adding dies.",
                    t.dies,
                    i.description,
                    100.0 * cost
                )
            }
        }
        None => "No nonideality is switched on at this point.".into(),
    }
}

/// The stdout table: accuracy and yield costs in percentage points with their intervals.
pub fn stdout_table(t: &BudgetTable) -> String {
    let mut s = format!(
        "error budget of `{}`, point {} ({}), {} paired dies, {} test samples, target {:.1} %\n",
        t.experiment,
        t.point,
        if t.settings.is_empty() {
            "no sweep"
        } else {
            &t.settings
        },
        t.dies,
        t.samples,
        100.0 * t.target_accuracy
    );
    s.push_str(&format!(
        "{:>4}  {:<22} {:<12} {:>8} {:>7}  {:<26} {:<26} {:<26}\n",
        "rank",
        "item",
        "stage",
        "acc %",
        "yield",
        "acc cost, pts [95 %]",
        "yield cost, pts [95 %]",
        "leave-one-out gain, pts"
    ));
    for it in &t.items {
        s.push_str(&format!(
            "{:>4}  {:<22} {:<12} {:>8} {:>7}  {:<26} {:<26} {:<26}\n",
            it.rank.map(|r| r.to_string()).unwrap_or_default(),
            it.key,
            it.stage,
            if it.accuracy_mean.is_finite() {
                format!("{:.2}", 100.0 * it.accuracy_mean)
            } else {
                "-".into()
            },
            if it.yield_.is_finite() {
                format!("{:.3}", it.yield_)
            } else {
                "-".into()
            },
            ci_text(&it.acc_cost),
            ci_text(&it.yield_cost),
            ci_text(&it.loo_acc_gain),
        ));
    }
    s
}

// Same hues as the report's palette (plots.rs).
const TEAL: RGBColor = RGBColor(27, 111, 122);
const AMBER: RGBColor = RGBColor(201, 122, 30);
const PLUM: RGBColor = RGBColor(122, 59, 105);
const INK: RGBColor = RGBColor(34, 40, 49);
const GRID: RGBColor = RGBColor(214, 219, 226);

/// The bar figure: accuracy cost of each nonideality alone (teal) and the gain of leaving it
/// out (amber), with their paired 95 % intervals as whiskers; quantisation, each stage, the
/// interaction and the all-on loss below (plum). Percentage points.
pub fn budget_svg(t: &BudgetTable) -> Result<String, ReportError> {
    let mut rows: Vec<(&BudgetItem, Option<PairedInterval>, Option<PairedInterval>)> = Vec::new();
    let mut singles: Vec<&BudgetItem> = t
        .items
        .iter()
        .filter(|i| i.kind == ItemKind::Single)
        .collect();
    singles.sort_by_key(|i| i.rank.unwrap_or(usize::MAX));
    for i in singles {
        rows.push((i, i.acc_cost, i.loo_acc_gain));
    }
    for i in t.items.iter().filter(|i| {
        matches!(
            i.kind,
            ItemKind::Quantisation | ItemKind::Stage | ItemKind::Interaction | ItemKind::AllOn
        )
    }) {
        rows.push((i, i.acc_cost, None));
    }
    let mut vals: Vec<f64> = vec![0.0];
    for (_, a, b) in &rows {
        for c in [a, b].into_iter().flatten() {
            vals.extend([c.estimate, c.lo, c.hi].iter().filter(|v| v.is_finite()));
        }
    }
    let lo = vals.iter().copied().fold(f64::INFINITY, f64::min) * 100.0;
    let hi = vals.iter().copied().fold(f64::NEG_INFINITY, f64::max) * 100.0;
    let pad = ((hi - lo) * 0.08).max(0.05);
    let (x0, x1) = (lo.min(0.0) - pad, hi.max(0.0) + pad);
    let n = rows.len().max(1);
    let height = (90 + 34 * n) as u32;
    let labels: Vec<String> = rows
        .iter()
        .map(|(i, _, _)| match i.kind {
            ItemKind::Single => i.key.clone(),
            ItemKind::Stage => format!("{} stage", i.stage),
            ItemKind::AllOn => "all on (total)".into(),
            _ => i.key.clone(),
        })
        .collect();
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, (820, height)).into_drawing_area();
        let e = |e: &dyn std::fmt::Display| ReportError::Plot {
            plot: "error budget".into(),
            message: e.to_string(),
        };
        root.fill(&WHITE).map_err(|x| e(&x))?;
        let mut chart = ChartBuilder::on(&root)
            .caption(
                format!(
                    "error budget, point {}: accuracy cost (points), {} paired dies",
                    t.point, t.dies
                ),
                ("sans-serif", 17).into_font().color(&INK),
            )
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(190)
            .build_cartesian_2d(x0..x1, 0f64..n as f64)
            .map_err(|x| e(&x))?;
        chart
            .configure_mesh()
            .disable_y_mesh()
            .light_line_style(GRID)
            .bold_line_style(GRID)
            .x_desc("accuracy lost (percentage points); amber: gained by leaving it out")
            .y_labels(n * 2 + 1)
            .y_label_formatter(&|y| {
                let k = (n as f64 - y - 0.5).round();
                if ((n as f64 - y - 0.5) - k).abs() < 1e-6 && k >= 0.0 {
                    labels.get(k as usize).cloned().unwrap_or_default()
                } else {
                    String::new()
                }
            })
            .label_style(("sans-serif", 12).into_font().color(&INK))
            .draw()
            .map_err(|x| e(&x))?;
        for (k, (item, a, b)) in rows.iter().enumerate() {
            let yc = n as f64 - k as f64 - 0.5;
            let bars: Vec<(Option<PairedInterval>, RGBColor, f64)> = match item.kind {
                ItemKind::Single => vec![(*a, TEAL, 0.17), (*b, AMBER, -0.17)],
                _ => vec![(*a, PLUM, 0.0)],
            };
            for (ci, col, off) in bars {
                let Some(c) = ci else { continue };
                if !c.estimate.is_finite() {
                    continue;
                }
                let y = yc + off;
                let h = 0.15;
                chart
                    .draw_series(std::iter::once(Rectangle::new(
                        [(0.0, y - h), (100.0 * c.estimate, y + h)],
                        col.filled(),
                    )))
                    .map_err(|x| e(&x))?;
                if c.lo.is_finite() && c.hi.is_finite() && c.hi > c.lo {
                    let w = INK.stroke_width(1);
                    chart
                        .draw_series(std::iter::once(PathElement::new(
                            vec![(100.0 * c.lo, y), (100.0 * c.hi, y)],
                            w,
                        )))
                        .map_err(|x| e(&x))?;
                    for v in [c.lo, c.hi] {
                        chart
                            .draw_series(std::iter::once(PathElement::new(
                                vec![(100.0 * v, y - 0.08), (100.0 * v, y + 0.08)],
                                w,
                            )))
                            .map_err(|x| e(&x))?;
                    }
                }
            }
        }
        chart
            .draw_series(std::iter::once(PathElement::new(
                vec![(0.0, 0.0), (0.0, n as f64)],
                INK.stroke_width(1),
            )))
            .map_err(|x| e(&x))?;
        root.present().map_err(|x| e(&x))?;
    }
    Ok(buf)
}

/// The report section as a self-contained HTML page: the one-sentence answer, the figure
/// (inline SVG), the table with every interval, how the intervals are made, and `caution`.
pub fn budget_html(t: &BudgetTable, svg: &str, caution: &str) -> String {
    let mut h = String::new();
    h.push_str(
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">",
    );
    h.push_str(&format!(
        "<title>hardmax error budget: {}</title><style>{}</style></head><body><main>",
        esc(&t.experiment),
        CSS
    ));
    h.push_str(&format!(
        "<section id=\"error-budget\"><h1>Error budget: {}, point {}</h1>",
        esc(&t.experiment),
        t.point
    ));
    h.push_str(&format!(
        "<p class=\"answer\">{}</p>",
        esc(&recommendation(t))
    ));
    h.push_str(&format!(
        "<p>{} paired dies (the same dies in every variant), {} test samples, target accuracy {:.1} %, seed {}. Settings: {}.</p>",
        t.dies,
        t.samples,
        100.0 * t.target_accuracy,
        t.seed,
        esc(if t.settings.is_empty() { "no sweep" } else { &t.settings })
    ));
    h.push_str(&format!("<figure>{svg}</figure>"));
    h.push_str(
        "<table><thead><tr><th>rank</th><th>item</th><th>stage</th><th>what</th>\
         <th>accuracy %</th><th>yield</th><th>accuracy cost, points [95 %]</th>\
         <th>yield cost, points [95 %]</th><th>leave-one-out gain, points [95 %]</th></tr></thead><tbody>",
    );
    for it in &t.items {
        h.push_str(&format!(
            "<tr class=\"{}\"><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            it.kind.key(),
            it.rank.map(|r| r.to_string()).unwrap_or_default(),
            esc(&it.key),
            esc(&it.stage),
            esc(&it.description),
            if it.accuracy_mean.is_finite() { format!("{:.2}", 100.0 * it.accuracy_mean) } else { "-".into() },
            if it.yield_.is_finite() { format!("{:.3}", it.yield_) } else { "-".into() },
            esc(&ci_text(&it.acc_cost)),
            esc(&ci_text(&it.yield_cost)),
            esc(&ci_text(&it.loo_acc_gain)),
        ));
    }
    h.push_str("</tbody></table>");
    h.push_str(&format!(
        "<h2>How to read it</h2><p>Costs are against the quantised ideal (weights on their levels, \
         input DAC quantised, every analog nonideality off); quantisation is the exact-arithmetic \
         ideal minus the quantised ideal. A nonideality's cost is its loss alone on; its \
         leave-one-out gain is what switching it off recovers from the all-on design. Interaction = \
         all-on loss minus the sum of the single losses. Accuracy intervals: t interval on the \
         per-die differences (Student 1908). Yield intervals: Newcombe's method 10 for paired \
         proportions (Statistics in Medicine 17, 1998). {:.0} % confidence.</p>",
        100.0 * t.confidence
    ));
    h.push_str(&format!(
        "<p class=\"caution\">{}</p><p class=\"cmd\">Made by: <code>{}</code></p>",
        esc(caution),
        esc(&t.command)
    ));
    h.push_str("</section></main></body></html>\n");
    h
}

pub(crate) const CSS: &str = r#"
body { margin: 0; background: #fbfaf7; color: #222831;
       font: 15px/1.5 system-ui, -apple-system, "Segoe UI", sans-serif; }
main { max-width: 1100px; margin: 0 auto; padding: 24px; }
h1 { font-size: 22px; } h2 { font-size: 17px; margin-top: 28px; }
.answer { font-size: 17px; border-left: 4px solid #1b6f7a; padding: 6px 12px; background: #fff; }
figure { margin: 16px 0; background: #fff; border: 1px solid #d6dbe2; }
figure svg { max-width: 100%; height: auto; }
table { border-collapse: collapse; width: 100%; background: #fff; font-size: 13px; }
th, td { border: 1px solid #d6dbe2; padding: 4px 6px; text-align: left; }
tr.single td { background: #fff; } tr.reference td, tr.all_on td { background: #f1f4f7; }
.caution { color: #8a4b08; border: 1px solid #e3c9a6; background: #fff8ee; padding: 8px 12px; }
code { font-size: 13px; }
"#;

#[cfg(test)]
mod tests {
    use super::*;

    fn item(key: &str, kind: ItemKind, cost: f64, rank: Option<usize>) -> BudgetItem {
        let ci = PairedInterval {
            estimate: cost,
            lo: cost - 0.01,
            hi: cost + 0.01,
            n: 50,
        };
        BudgetItem {
            key: key.into(),
            kind,
            stage: "competition".into(),
            description: format!("{key} described"),
            rank,
            accuracy_mean: 0.9,
            yield_: 0.8,
            acc_cost: Some(ci),
            yield_cost: Some(ci),
            loo_acc_gain: (kind == ItemKind::Single).then_some(ci),
            loo_yield_gain: (kind == ItemKind::Single).then_some(ci),
        }
    }

    fn table() -> BudgetTable {
        BudgetTable {
            experiment: "invented <demo>".into(),
            point: 0,
            settings: String::new(),
            dies: 50,
            samples: 100,
            target_accuracy: 0.9,
            confidence: 0.95,
            seed: 1,
            command: "hardmax budget x.toml".into(),
            items: vec![
                item("b", ItemKind::Single, 0.02, Some(2)),
                item("a", ItemKind::Single, 0.05, Some(1)),
                item("interaction", ItemKind::Interaction, 0.001, None),
            ],
        }
    }

    /// The files carry every row, the columns documented in DEVELOPERS.md, escaped text, and the
    /// sentence names the rank-1 item.
    #[test]
    fn csv_svg_html_and_sentence() {
        let t = table();
        let csv = budget_csv(&t);
        let mut lines = csv.lines();
        assert_eq!(lines.next().unwrap().split(',').count(), COLUMNS.len());
        assert_eq!(csv.lines().count(), 4);
        for l in csv.lines() {
            assert_eq!(l.split(',').count(), COLUMNS.len(), "{l}");
        }
        let s = recommendation(&t);
        assert!(
            s.contains("a described") && s.contains("competition"),
            "{s}"
        );
        let svg = budget_svg(&t).unwrap();
        assert!(svg.starts_with("<svg") || svg.contains("<svg"));
        let html = budget_html(&t, &svg, "CAUTION TEXT");
        assert!(html.contains("invented &lt;demo&gt;") && html.contains("CAUTION TEXT"));
        assert!(!html.contains("<script"));
        assert!(stdout_table(&t).contains("a described") || stdout_table(&t).contains(" a "));
    }
}
