//! A sizing search as files: the search trace (`search.csv`), the trade-off front
//! (`front.csv`), the figure (`size.svg`: the yield curve of one dimension, or the area against
//! current front of several), the self-contained report section (`size.html`) and the answer
//! (`answer.txt`, also printed). Everything returns text; the caller writes the files with
//! `io::write_atomic`. Column meanings: DEVELOPERS.md, "Sizing folder".

use plotters::prelude::*;

use super::error::ReportError;
use super::format::esc;
use crate::units::format_si;
use hardmax_core::pipeline::sizing::Status;

const TEAL: RGBColor = RGBColor(27, 111, 122);
const AMBER: RGBColor = RGBColor(201, 122, 30);
const PLUM: RGBColor = RGBColor(122, 59, 105);
const INK: RGBColor = RGBColor(34, 40, 49);
const GRID: RGBColor = RGBColor(214, 219, 226);

/// One searched dimension.
#[derive(Clone, Debug, PartialEq)]
pub struct SizingDimension {
    pub name: String,
    /// Experiment key paths set to the dimension's value.
    pub paths: Vec<String>,
    /// SI base unit ("m", "A"; empty for a number).
    pub unit: String,
    pub lo: f64,
    pub hi: f64,
}

/// One evaluated candidate (a row of `search.csv`).
#[derive(Clone, Debug, PartialEq)]
pub struct SizingRow {
    /// `bracket`, `bisect` or `verify`.
    pub role: String,
    /// One value per dimension, SI base units.
    pub values: Vec<f64>,
    pub seed: u64,
    pub dies: u64,
    /// Dies reaching the target accuracy.
    pub reached: u64,
    pub yield_: f64,
    pub yield_lo: f64,
    pub yield_hi: f64,
    pub pass: bool,
    pub margin: f64,
    pub acc_mean: f64,
    pub acc_p05: f64,
    pub area_m2: f64,
    pub competition_area_m2: f64,
    pub supply_current_a: f64,
    pub power_w: f64,
    /// The minimised cost (its unit follows `SizingReport::cost_name`).
    pub cost: f64,
    pub elapsed_s: f64,
    /// With corners: the corner with the lowest yield lower bound (whose numbers this row
    /// shows), the one with the lowest mean accuracy, the one with the highest supply current.
    pub limiting_yield: String,
    pub limiting_accuracy: String,
    pub limiting_current: String,
}

/// A finished search, ready to write.
#[derive(Clone, Debug)]
pub struct SizingReport {
    pub experiment: String,
    pub dims: Vec<SizingDimension>,
    /// What is minimised: `area`, `competition_area`, `current`, `power` or `weighted`.
    pub cost_name: String,
    pub cost_text: String,
    pub method: String,
    pub resolution: f64,
    pub target_accuracy: f64,
    pub yield_target: f64,
    pub confidence: f64,
    pub ideal_acc: f64,
    pub test_samples: usize,
    pub rows: Vec<SizingRow>,
    /// Rows on the (area, current) front of passing search candidates.
    pub front: Vec<usize>,
    /// The search's answer (before verification), if the target was met.
    pub answer_row: Option<usize>,
    /// The design to build (last passing verification, else the unverified answer).
    pub final_row: Option<usize>,
    /// When not met: the row with the largest margin, and the dimensions to widen.
    pub best_row: Option<usize>,
    pub widen: Vec<usize>,
    pub status: Status,
    /// Names of the corners every candidate was evaluated at (empty: nominal only).
    pub corners: Vec<String>,
    pub command: String,
    pub elapsed_s: f64,
}

fn num(v: f64) -> String {
    if v.is_finite() {
        format!("{v}")
    } else {
        String::new()
    }
}

fn si(v: f64, unit: &str) -> String {
    if unit.is_empty() {
        format!("{v:.4}")
    } else {
        format_si(v, unit, 4)
    }
}

/// An area in µm² (a prefix on m² would scale the metre, not the square metre).
fn area_text(v: f64) -> String {
    let um2 = v * 1e12;
    if um2.is_finite() && um2 >= 100.0 {
        format!("{um2:.0} µm²")
    } else {
        format!("{um2:.4} µm²")
    }
}

fn values_text(r: &SizingReport, values: &[f64]) -> String {
    r.dims
        .iter()
        .zip(values)
        .map(|(d, v)| format!("{} = {}", d.name, si(*v, &d.unit)))
        .collect::<Vec<_>>()
        .join(", ")
}

fn status_key(s: Status) -> &'static str {
    match s {
        Status::Verified => "verified",
        Status::VerifiedAfterStepUp => "verified_after_step_up",
        Status::FailedVerification => "failed_verification",
        Status::NotMet => "not_met",
    }
}

/// `search.csv`: one row per evaluated candidate, in evaluation order.
pub fn search_csv(r: &SizingReport) -> String {
    let mut s = String::from("step,role");
    for d in &r.dims {
        s.push_str(&format!(",{}", d.name));
    }
    s.push_str(
        ",seed,dies,reached,yield,yield_lo,yield_hi,pass,margin,acc_mean,acc_p05,area_m2,\
         competition_area_m2,supply_current_a,power_w,cost,elapsed_s,limiting_corner_yield,\
         limiting_corner_accuracy,limiting_corner_current\n",
    );
    for (k, row) in r.rows.iter().enumerate() {
        s.push_str(&format!("{k},{}", row.role));
        for v in &row.values {
            s.push_str(&format!(",{}", num(*v)));
        }
        s.push_str(&format!(
            ",{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{},{}\n",
            row.seed,
            row.dies,
            row.reached,
            num(row.yield_),
            num(row.yield_lo),
            num(row.yield_hi),
            u8::from(row.pass),
            num(row.margin),
            num(row.acc_mean),
            num(row.acc_p05),
            num(row.area_m2),
            num(row.competition_area_m2),
            num(row.supply_current_a),
            num(row.power_w),
            num(row.cost),
            num(row.elapsed_s),
            row.limiting_yield,
            row.limiting_accuracy,
            row.limiting_current,
        ));
    }
    s
}

/// `front.csv`: the passing search candidates on the (area, current) front, by area.
pub fn front_csv(r: &SizingReport) -> String {
    let mut s = String::from("step");
    for d in &r.dims {
        s.push_str(&format!(",{}", d.name));
    }
    s.push_str(",area_m2,supply_current_a,yield_lo,cost\n");
    for &k in &r.front {
        let row = &r.rows[k];
        s.push_str(&k.to_string());
        for v in &row.values {
            s.push_str(&format!(",{}", num(*v)));
        }
        s.push_str(&format!(
            ",{},{},{},{}\n",
            num(row.area_m2),
            num(row.supply_current_a),
            num(row.yield_lo),
            num(row.cost)
        ));
    }
    s
}

/// The one-paragraph answer: what passes, at what cost, verified or not (always said), or
/// which range to widen and how close the best candidate came.
pub fn headline(r: &SizingReport) -> String {
    let corners = if r.corners.is_empty() {
        String::new()
    } else {
        format!(
            " at every corner ({}; a candidate passes only when it passes at each)",
            r.corners.join(", ")
        )
    };
    let target = format!(
        "{:.1} % accuracy at {:.1} % yield ({:.0} % confidence, Wilson lower bound){corners}",
        100.0 * r.target_accuracy,
        100.0 * r.yield_target,
        100.0 * r.confidence
    );
    let describe = |k: usize| {
        let row = &r.rows[k];
        let lim = if row.limiting_yield.is_empty() {
            String::new()
        } else {
            format!(
                "; limiting corner: {} for yield, {} for accuracy, {} for current",
                row.limiting_yield, row.limiting_accuracy, row.limiting_current
            )
        };
        format!(
            "{} (area {}, competition-stage gate area {}, supply current {}; yield {:.3}, \
             interval [{:.3}, {:.3}] over {} dies, seed {}{lim})",
            values_text(r, &row.values),
            area_text(row.area_m2),
            area_text(row.competition_area_m2),
            format_si(row.supply_current_a, "A", 4),
            row.yield_,
            row.yield_lo,
            row.yield_hi,
            row.dies,
            row.seed
        )
    };
    match r.status {
        Status::NotMet => {
            let best = r.best_row.map(|k| {
                let row = &r.rows[k];
                format!(
                    "The best candidate, {}, reaches a yield lower bound of {:.3}, {:.3} short.",
                    values_text(r, &row.values),
                    row.yield_lo,
                    -row.margin
                )
            });
            let widen: Vec<String> = r
                .widen
                .iter()
                .filter_map(|&d| r.dims.get(d))
                .map(|d| format!("`{}` above {}", d.name, si(d.hi, &d.unit)))
                .collect();
            format!(
                "NOT MET: no candidate inside the given ranges meets {target}; nothing is \
                 extrapolated. {} {}",
                best.unwrap_or_default(),
                if widen.is_empty() {
                    "Widen the ranges (the best candidate is not at the top of any range: the \
                     pass curve is not monotone here, or another part of the design limits it)."
                        .to_string()
                } else {
                    format!("Widen {}.", widen.join(" and "))
                }
            )
        }
        Status::Verified | Status::VerifiedAfterStepUp | Status::FailedVerification => {
            let ans = r.answer_row.map(describe).unwrap_or_default();
            let fin = r.final_row.map(describe).unwrap_or_default();
            match r.status {
                Status::Verified => format!(
                    "The cheapest design meeting {target} is {ans}. Verified on a fresh \
                     population: {fin}."
                ),
                Status::VerifiedAfterStepUp => format!(
                    "The search answer {ans} met {target} on the search population but FAILED \
                     its verification on a fresh population; stepped up, {fin} passes: build \
                     this one."
                ),
                _ => format!(
                    "FAILED VERIFICATION: the search answer {ans} met {target} on the search \
                     population but the fresh population's verification failed, also after \
                     stepping up inside the ranges (last: {fin}). This design is NOT verified; \
                     widen the ranges or use more dies."
                ),
            }
        }
    }
}

/// Plain-text answer for stdout and `answer.txt`.
pub fn answer_text(r: &SizingReport, caution: &str) -> String {
    let mut s = format!(
        "sizing search of `{}`: minimise {} subject to the target\n",
        r.experiment, r.cost_text
    );
    for d in &r.dims {
        s.push_str(&format!(
            "  {}: {} .. {} (log scale) setting {}\n",
            d.name,
            si(d.lo, &d.unit),
            si(d.hi, &d.unit),
            d.paths.join(", ")
        ));
    }
    s.push_str(&format!("  status: {}\n", status_key(r.status)));
    s.push_str(&headline(r));
    s.push('\n');
    s.push_str(&format!(
        "{} candidates evaluated in {:.1} s. Method: {}.\n{}\n",
        r.rows.len(),
        r.elapsed_s,
        r.method,
        caution
    ));
    s
}

fn plot_err(plot: &str) -> impl Fn(&dyn std::fmt::Display) -> ReportError + '_ {
    move |e| ReportError::Plot {
        plot: plot.into(),
        message: e.to_string(),
    }
}

/// The figure: one dimension, the yield (dots) and its interval against the dimension (log
/// axis), the yield target (line), the answer marked; several dimensions, area against current
/// of every search candidate (grey: failing, teal: passing), the front (plum line) and the
/// answer (amber).
pub fn sizing_svg(r: &SizingReport) -> Result<String, ReportError> {
    let mut buf = String::new();
    let search_rows: Vec<&SizingRow> = r.rows.iter().filter(|x| x.role != "verify").collect();
    {
        let root = SVGBackend::with_string(&mut buf, (820, 480)).into_drawing_area();
        if r.dims.len() == 1 {
            let e = plot_err("sizing curve");
            root.fill(&WHITE).map_err(|x| e(&x))?;
            let d = &r.dims[0];
            let scale = if d.unit == "m" { 1e6 } else { 1.0 };
            let unit = if d.unit == "m" {
                "µm"
            } else {
                d.unit.as_str()
            };
            let (x0, x1) = (d.lo * scale / 1.15, d.hi * scale * 1.15);
            let mut chart = ChartBuilder::on(&root)
                .caption(
                    format!("sizing search: yield against {}", d.name),
                    ("sans-serif", 17).into_font().color(&INK),
                )
                .margin(12)
                .x_label_area_size(44)
                .y_label_area_size(56)
                .build_cartesian_2d((x0..x1).log_scale(), 0f64..1.02)
                .map_err(|x| e(&x))?;
            chart
                .configure_mesh()
                .light_line_style(WHITE)
                .bold_line_style(GRID)
                .x_desc(format!("{} ({unit}, log scale)", d.name))
                .y_desc("yield (share of dies reaching the target accuracy)")
                .label_style(("sans-serif", 12).into_font().color(&INK))
                .draw()
                .map_err(|x| e(&x))?;
            chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(x0, r.yield_target), (x1, r.yield_target)],
                    AMBER.stroke_width(2),
                )))
                .map_err(|x| e(&x))?;
            let mut pts: Vec<&SizingRow> = search_rows.clone();
            pts.sort_by(|a, b| a.values[0].total_cmp(&b.values[0]));
            chart
                .draw_series(std::iter::once(PathElement::new(
                    pts.iter()
                        .map(|p| (p.values[0] * scale, p.yield_))
                        .collect::<Vec<_>>(),
                    TEAL.stroke_width(1),
                )))
                .map_err(|x| e(&x))?;
            for p in r.rows.iter() {
                let x = p.values[0] * scale;
                let col = if p.role == "verify" { PLUM } else { TEAL };
                chart
                    .draw_series(std::iter::once(PathElement::new(
                        vec![(x, p.yield_lo), (x, p.yield_hi)],
                        col.stroke_width(1),
                    )))
                    .map_err(|x| e(&x))?;
                let style = if p.pass {
                    col.filled()
                } else {
                    col.stroke_width(2)
                };
                chart
                    .draw_series(std::iter::once(Circle::new((x, p.yield_), 4, style)))
                    .map_err(|x| e(&x))?;
            }
        } else {
            let e = plot_err("sizing front");
            root.fill(&WHITE).map_err(|x| e(&x))?;
            let xs: Vec<f64> = search_rows.iter().map(|p| p.area_m2 * 1e12).collect();
            let ys: Vec<f64> = search_rows
                .iter()
                .map(|p| p.supply_current_a * 1e6)
                .collect();
            let span = |v: &[f64]| {
                let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
                let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                if lo.is_finite() && hi > lo {
                    (lo - 0.05 * (hi - lo), hi + 0.05 * (hi - lo))
                } else if lo.is_finite() {
                    (lo * 0.9, lo * 1.1 + 1e-9)
                } else {
                    (0.0, 1.0)
                }
            };
            let (x0, x1) = span(&xs);
            let (y0, y1) = span(&ys);
            let mut chart = ChartBuilder::on(&root)
                .caption(
                    "sizing search: layout area against supply current",
                    ("sans-serif", 17).into_font().color(&INK),
                )
                .margin(12)
                .x_label_area_size(44)
                .y_label_area_size(64)
                .build_cartesian_2d(x0..x1, y0..y1)
                .map_err(|x| e(&x))?;
            chart
                .configure_mesh()
                .light_line_style(GRID)
                .bold_line_style(GRID)
                .x_desc("layout area (µm²)")
                .y_desc("supply current (µA)")
                .label_style(("sans-serif", 12).into_font().color(&INK))
                .draw()
                .map_err(|x| e(&x))?;
            for p in &search_rows {
                let style = if p.pass {
                    TEAL.filled()
                } else {
                    GRID.stroke_width(2)
                };
                chart
                    .draw_series(std::iter::once(Circle::new(
                        (p.area_m2 * 1e12, p.supply_current_a * 1e6),
                        3,
                        style,
                    )))
                    .map_err(|x| e(&x))?;
            }
            chart
                .draw_series(std::iter::once(PathElement::new(
                    r.front
                        .iter()
                        .map(|&k| (r.rows[k].area_m2 * 1e12, r.rows[k].supply_current_a * 1e6))
                        .collect::<Vec<_>>(),
                    PLUM.stroke_width(2),
                )))
                .map_err(|x| e(&x))?;
            if let Some(k) = r.final_row {
                let p = &r.rows[k];
                chart
                    .draw_series(std::iter::once(Circle::new(
                        (p.area_m2 * 1e12, p.supply_current_a * 1e6),
                        6,
                        AMBER.filled(),
                    )))
                    .map_err(|x| e(&x))?;
            }
        }
        root.present().map_err(|x| plot_err("sizing")(&x))?;
    }
    Ok(buf)
}

/// The report section as a self-contained HTML page, in the style of `budget.html`.
pub fn sizing_html(r: &SizingReport, svg: &str, caution: &str) -> String {
    let mut h = String::new();
    h.push_str(
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">",
    );
    h.push_str(&format!(
        "<title>hardmax sizing search: {}</title><style>{}</style></head><body><main>",
        esc(&r.experiment),
        super::budget::CSS
    ));
    h.push_str(&format!(
        "<section id=\"sizing-search\"><h1>Sizing search: {}</h1>",
        esc(&r.experiment)
    ));
    h.push_str(&format!("<p class=\"answer\">{}</p>", esc(&headline(r))));
    h.push_str(&format!(
        "<p>Minimised: {}. Ideal classifier (exact arithmetic) on the test split: {:.2} % over \
         {} samples. Method: {}; resolution {:.1} %.</p>",
        esc(&r.cost_text),
        100.0 * r.ideal_acc,
        r.test_samples,
        esc(&r.method),
        100.0 * r.resolution
    ));
    h.push_str(&format!("<figure>{svg}</figure>"));
    h.push_str("<table><thead><tr><th>step</th><th>role</th>");
    for d in &r.dims {
        h.push_str(&format!("<th>{}</th>", esc(&d.name)));
    }
    h.push_str(
        "<th>seed</th><th>dies reaching</th><th>yield [interval]</th><th>pass</th>\
         <th>mean accuracy %</th><th>area</th><th>supply current</th></tr></thead><tbody>",
    );
    for (k, row) in r.rows.iter().enumerate() {
        let class = if Some(k) == r.final_row {
            "all_on"
        } else {
            "single"
        };
        h.push_str(&format!(
            "<tr class=\"{class}\"><td>{k}</td><td>{}</td>",
            esc(&row.role)
        ));
        for (d, v) in r.dims.iter().zip(&row.values) {
            h.push_str(&format!("<td>{}</td>", esc(&si(*v, &d.unit))));
        }
        h.push_str(&format!(
            "<td>{}</td><td>{} / {}</td><td>{:.3} [{:.3}, {:.3}]</td><td>{}</td><td>{:.2}</td><td>{}</td><td>{}</td></tr>",
            row.seed,
            row.reached,
            row.dies,
            row.yield_,
            row.yield_lo,
            row.yield_hi,
            if row.pass { "yes" } else { "no" },
            100.0 * row.acc_mean,
            esc(&area_text(row.area_m2)),
            esc(&format_si(row.supply_current_a, "A", 4)),
        ));
    }
    h.push_str("</tbody></table>");
    h.push_str(&format!(
        "<h2>How to read it</h2><p>A candidate passes when the low end of the two-sided Wilson \
         score interval (Wilson 1927) of the share of dies reaching {:.1} % accuracy, at {:.0} % \
         confidence, is at least the yield target {:.1} %. Search steps use the same dies at \
         every candidate (paired dies), so the yield curve is monotone over that population; \
         verification steps use a fresh population (another seed). Nothing outside the ranges \
         is evaluated.</p>",
        100.0 * r.target_accuracy,
        100.0 * r.confidence,
        100.0 * r.yield_target
    ));
    h.push_str(&format!(
        "<p class=\"caution\">{}</p><p class=\"cmd\">Made by: <code>{}</code></p>",
        esc(caution),
        esc(&r.command)
    ));
    h.push_str("</section></main></body></html>\n");
    h
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(role: &str, w: f64, pass: bool, seed: u64) -> SizingRow {
        SizingRow {
            role: role.into(),
            values: vec![w],
            seed,
            dies: 200,
            reached: if pass { 198 } else { 150 },
            yield_: if pass { 0.99 } else { 0.75 },
            yield_lo: if pass { 0.964 } else { 0.69 },
            yield_hi: 0.99,
            pass,
            margin: if pass { 0.014 } else { -0.26 },
            acc_mean: 0.93,
            acc_p05: 0.9,
            area_m2: 1e-9,
            competition_area_m2: 1e-10,
            supply_current_a: 2e-6,
            power_w: 3.6e-6,
            cost: 1e-9,
            elapsed_s: 1.0,
            limiting_yield: String::new(),
            limiting_accuracy: String::new(),
            limiting_current: String::new(),
        }
    }

    fn report(status: Status) -> SizingReport {
        SizingReport {
            experiment: "x".into(),
            dims: vec![SizingDimension {
                name: "wta_w".into(),
                paths: vec!["competition.sink.w".into()],
                unit: "m".into(),
                lo: 1e-6,
                hi: 64e-6,
            }],
            cost_name: "area".into(),
            cost_text: "layout area".into(),
            method: "m".into(),
            resolution: 0.05,
            target_accuracy: 0.9,
            yield_target: 0.95,
            confidence: 0.95,
            ideal_acc: 0.97,
            test_samples: 540,
            rows: vec![
                row("bracket", 64e-6, true, 1),
                row("bracket", 1e-6, false, 1),
                row("verify", 64e-6, false, 2),
            ],
            front: vec![0],
            answer_row: Some(0),
            final_row: Some(if status == Status::Verified { 0 } else { 2 }),
            best_row: Some(1),
            widen: vec![0],
            status,
            corners: vec![],
            command: "hardmax size x.toml".into(),
            elapsed_s: 3.0,
        }
    }

    /// A design that failed its verification is never presented without saying so.
    #[test]
    fn headline_says_when_verification_failed_or_the_target_is_not_met() {
        let h = headline(&report(Status::FailedVerification));
        assert!(
            h.contains("FAILED VERIFICATION") && h.contains("NOT verified"),
            "{h}"
        );
        let h = headline(&report(Status::VerifiedAfterStepUp));
        assert!(h.contains("FAILED its verification"), "{h}");
        let h = headline(&report(Status::NotMet));
        assert!(
            h.starts_with("NOT MET") && h.contains("`wta_w` above 64 µm"),
            "{h}"
        );
        let h = headline(&report(Status::Verified));
        assert!(h.contains("Verified on a fresh population"), "{h}");
    }

    #[test]
    fn csv_svg_and_html() {
        let r = report(Status::Verified);
        let csv = search_csv(&r);
        assert_eq!(csv.lines().count(), 4);
        assert!(csv.starts_with("step,role,wta_w,seed,dies,reached,yield,"));
        assert_eq!(front_csv(&r).lines().count(), 2);
        let svg = sizing_svg(&r).unwrap();
        assert!(svg.contains("<svg"));
        let html = sizing_html(&r, &svg, "CAUTION TEXT");
        assert!(html.contains("CAUTION TEXT") && html.contains("sizing-search"));
        let mut r2 = r.clone();
        r2.dims.push(r2.dims[0].clone());
        for row in &mut r2.rows {
            row.values.push(2e-6);
        }
        assert!(sizing_svg(&r2).unwrap().contains("<svg"));
    }
}
