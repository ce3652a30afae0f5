//! Rendering a results folder: build the figures from its tables, write `plots/*.svg` and
//! `report.html` (both with [`crate::io::write_atomic`]).

use std::fs;
use std::path::{Path, PathBuf};

use super::error::ReportError;
use super::folder::{
    PointRow, Predicted, ResultsFolder, SweepMode, SweepParameter, TransferCurve, TransferMeta,
};
use super::format::fmt_quantity;
use super::html;
use super::plots::{
    self, AccuracyCurve, AccuracyHistogram, AccuracyPlot, AccuracyPoint, ConfusionMatrix,
    DecisionTimeHistogram, ParamAxis, TransferPlot, YieldCurve, YieldPlot, YieldPoint,
};
use crate::io::write_atomic;

/// Choices for a render.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct RenderOptions {
    /// Sweep point shown in the per-chip histogram, the decision-time histogram and the
    /// confusion matrix. `None`: the finished point with the lowest mean accuracy (the one that
    /// limits the design; on a tie the later point), see [`default_focus_point`].
    pub point: Option<u64>,
}

/// What a render wrote.
#[derive(Debug, Clone, PartialEq)]
pub struct RenderSummary {
    /// `DIR/report.html`.
    pub report: PathBuf,
    /// Every SVG written, in report order.
    pub plots: Vec<PathBuf>,
    /// Whether the folder holds a partial run.
    pub partial: bool,
    /// Finished sweep points shown.
    pub points_rendered: usize,
    /// Sweep points of the whole experiment (from the manifest).
    pub points_total: u64,
    /// Sweep point of the per-point figures, if any point finished.
    pub focus_point: Option<u64>,
}

/// One figure of the report.
#[derive(Debug, Clone, PartialEq)]
pub struct Figure {
    /// File name under `plots/`.
    pub file: String,
    /// HTML id of the figure.
    pub id: String,
    pub caption: String,
    pub svg: String,
}

/// Render `dir` with default options: see [`render_with`].
pub fn render(dir: &Path) -> Result<RenderSummary, ReportError> {
    render_with(dir, &RenderOptions::default())
}

/// Read the results folder `dir`, write every figure to `dir/plots/*.svg` and the
/// self-contained report to `dir/report.html`. Re-running it replaces those files only; the
/// CSV files and the manifest are never written.
pub fn render_with(dir: &Path, opts: &RenderOptions) -> Result<RenderSummary, ReportError> {
    let folder = ResultsFolder::read(dir)?;
    let focus = match opts.point {
        Some(p) => {
            if folder.point(p).is_none() {
                let available = folder
                    .points
                    .rows
                    .iter()
                    .map(|r| r.point.to_string())
                    .collect::<Vec<_>>()
                    .join(", ");
                return Err(ReportError::UnknownPoint {
                    point: p,
                    available: if available.is_empty() {
                        "none yet".into()
                    } else {
                        available
                    },
                });
            }
            Some(p)
        }
        None => default_focus_point(&folder.points.rows),
    };
    let figures = build_figures(&folder, focus)?;
    let html = html::report_html(&folder, &figures, focus);

    let plots_dir = dir.join("plots");
    fs::create_dir_all(&plots_dir).map_err(|source| ReportError::CreateDir {
        path: plots_dir.clone(),
        source,
    })?;
    let mut plots = Vec::with_capacity(figures.len());
    for f in &figures {
        let path = plots_dir.join(&f.file);
        write_atomic(&path, f.svg.as_bytes())?;
        plots.push(path);
    }
    let report = dir.join("report.html");
    write_atomic(&report, html.as_bytes())?;
    Ok(RenderSummary {
        report,
        plots,
        partial: folder.is_partial(),
        points_rendered: folder.points.rows.len(),
        points_total: folder.manifest.points_total,
        focus_point: focus,
    })
}

/// Store a stage transfer curve in a results folder (`transfer/NAME.csv` plus `NAME.json` with
/// its axis label), so every later render shows it. The CSV is checked first. Returns the path
/// of the stored CSV.
pub fn add_transfer(dir: &Path, csv: &Path, meta: &TransferMeta) -> Result<PathBuf, ReportError> {
    if !dir.is_dir() {
        return Err(ReportError::NotAFolder {
            path: dir.to_path_buf(),
        });
    }
    let text = fs::read_to_string(csv).map_err(|source| {
        if source.kind() == std::io::ErrorKind::NotFound {
            ReportError::MissingFile {
                path: csv.to_path_buf(),
                what: "the stage transfer curve given with --transfer",
            }
        } else {
            ReportError::Read {
                path: csv.to_path_buf(),
                source,
            }
        }
    })?;
    TransferCurve::parse(&text, csv)?;
    let stem = csv
        .file_stem()
        .map(|s| slug(&s.to_string_lossy()))
        .unwrap_or_else(|| "transfer".into());
    let tdir = dir.join("transfer");
    fs::create_dir_all(&tdir).map_err(|source| ReportError::CreateDir {
        path: tdir.clone(),
        source,
    })?;
    let target = tdir.join(format!("{stem}.csv"));
    write_atomic(&target, text.as_bytes())?;
    let json = serde_json::to_string_pretty(meta).unwrap_or_else(|_| "{}".into());
    write_atomic(&tdir.join(format!("{stem}.json")), json.as_bytes())?;
    Ok(target)
}

/// The default focus point: the finished point with the lowest mean accuracy (on a tie, the
/// later point); points without a mean count last. `None` if no point finished.
pub fn default_focus_point(rows: &[PointRow]) -> Option<u64> {
    rows.iter()
        .min_by(|a, b| {
            let ka = a.acc_mean.unwrap_or(f64::INFINITY);
            let kb = b.acc_mean.unwrap_or(f64::INFINITY);
            ka.total_cmp(&kb).then(b.point.cmp(&a.point))
        })
        .map(|r| r.point)
}

/// File-name-safe form of a parameter path or name.
pub fn slug(s: &str) -> String {
    let out: String = s
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '_' || c == '-' {
                c
            } else {
                '-'
            }
        })
        .collect();
    if out.is_empty() {
        "x".into()
    } else {
        out
    }
}

/// Short name of a parameter path for legends: its last segment.
pub fn short_name(path: &str) -> &str {
    path.rsplit('.').next().unwrap_or(path)
}

/// The points of each curve group against sweep parameter `i`: `point` builds one from the
/// parameter's value and the row; a row without a needed value is left out.
fn group_points<P>(
    groups: &[(String, Vec<&PointRow>)],
    i: usize,
    point: impl Fn(f64, &PointRow) -> Option<P>,
) -> Vec<(String, Vec<P>)> {
    groups
        .iter()
        .map(|(label, rows)| {
            let points = rows
                .iter()
                .filter_map(|r| point(*r.params.get(i)?, r))
                .collect();
            (label.clone(), points)
        })
        .collect()
}

/// Rows grouped into curves for a plot against parameter `i`: one curve per combination of
/// the other parameters (grid), a single curve for zip sweeps and one-parameter sweeps.
fn curves_for(folder: &ResultsFolder, i: usize) -> Vec<(String, Vec<&PointRow>)> {
    let params = &folder.manifest.sweep.parameters;
    let rows = &folder.points.rows;
    if folder.manifest.sweep.mode == SweepMode::Zip || params.len() <= 1 {
        return vec![(String::new(), rows.iter().collect())];
    }
    let mut groups: Vec<(Vec<u64>, String, Vec<&PointRow>)> = Vec::new();
    for r in rows {
        let key: Vec<u64> = r
            .params
            .iter()
            .enumerate()
            .filter(|(j, _)| *j != i)
            .map(|(_, v)| v.to_bits())
            .collect();
        if let Some(g) = groups.iter_mut().find(|g| g.0 == key) {
            g.2.push(r);
        } else {
            let label = params
                .iter()
                .zip(&r.params)
                .enumerate()
                .filter(|(j, _)| *j != i)
                .map(|(_, (p, v))| format!("{} = {}", short_name(&p.path), param_value(p, *v, 3)))
                .collect::<Vec<_>>()
                .join(", ");
            groups.push((key, label, vec![r]));
        }
    }
    // Order curves by the values of the other parameters.
    groups.sort_by(|a, b| {
        let va = a.2.first().map(|r| &r.params);
        let vb = b.2.first().map(|r| &r.params);
        match (va, vb) {
            (Some(x), Some(y)) => x
                .iter()
                .zip(y.iter())
                .enumerate()
                .filter(|(j, _)| *j != i)
                .map(|(_, (p, q))| p.total_cmp(q))
                .find(|o| o.is_ne())
                .unwrap_or(std::cmp::Ordering::Equal),
            _ => std::cmp::Ordering::Equal,
        }
    });
    groups.into_iter().map(|(_, l, r)| (l, r)).collect()
}

/// Words for a sweep point's parameter values ("bias_current = 10 nA, bits = 6").
pub fn point_label(folder: &ResultsFolder, row: &PointRow) -> String {
    describe_point(folder, row, |p, v| {
        format!("{} = {}", short_name(&p.path), param_value(p, v, 4))
    })
}

/// A swept parameter's value in words: a text axis's value by its text (its index otherwise
/// appears), a number with its unit to `digits` significant digits.
fn param_value(p: &SweepParameter, v: f64, digits: usize) -> String {
    match p.labels.as_ref().and_then(|l| l.get(v as usize)) {
        Some(text) if v >= 0.0 && v.fract() == 0.0 => text.clone(),
        _ => fmt_quantity(v, &p.unit, digits),
    }
}

/// A sweep point's parameter values joined by ", ", each written by `item`; a sweep without
/// parameters has one design point.
pub(super) fn describe_point(
    folder: &ResultsFolder,
    row: &PointRow,
    item: impl Fn(&SweepParameter, f64) -> String,
) -> String {
    let params = &folder.manifest.sweep.parameters;
    if params.is_empty() {
        return "the single design point".into();
    }
    params
        .iter()
        .zip(&row.params)
        .map(|(p, v)| item(p, *v))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Build every figure of the report (no I/O but a second streamed read of `chips.csv` for the
/// decision-time histogram of a transient run).
pub fn build_figures(
    folder: &ResultsFolder,
    focus: Option<u64>,
) -> Result<Vec<Figure>, ReportError> {
    let m = &folder.manifest;
    let rows = &folder.points.rows;
    let mut figs = Vec::new();
    let partial_note = if folder.is_partial() {
        " (partial run)"
    } else {
        ""
    };

    if !rows.is_empty() {
        // A zip sweep steps its parameters together: one set of figures, against the first
        // parameter (the others are named in the caption), not one duplicate per zipped key.
        let zip = m.sweep.mode == SweepMode::Zip && m.sweep.parameters.len() > 1;
        let zipped_note = if zip {
            format!(
                " The zipped parameters {} step together with it (one figure for the zip).",
                m.sweep
                    .parameters
                    .iter()
                    .skip(1)
                    .map(|p| p.path.as_str())
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        } else {
            String::new()
        };
        let drawn = if zip { 1 } else { m.sweep.parameters.len() };
        for (i, p) in m.sweep.parameters.iter().enumerate().take(drawn) {
            let xs: Vec<f64> = rows
                .iter()
                .filter_map(|r| r.params.get(i).copied())
                .collect();
            let axis = ParamAxis {
                label: p.path.clone(),
                unit: p.unit.clone(),
                log: plots::use_log_axis(&xs, Some(p.scale)),
            };
            let groups = curves_for(folder, i);
            let curves = group_points(&groups, i, |x, r| {
                Some(AccuracyPoint {
                    x,
                    mean: r.acc_mean?,
                    p05: r.acc_p05,
                    p95: r.acc_p95,
                    ideal: r.ideal_acc,
                    baseline: r.baseline_acc,
                    target: r.target,
                })
            })
            .into_iter()
            .map(|(label, points)| AccuracyCurve { label, points })
            .collect();
            let name = short_name(&p.path);
            let acc = AccuracyPlot {
                title: format!("Accuracy vs {name}{partial_note}"),
                axis: axis.clone(),
                curves,
            };
            let pslug = slug(&p.path);
            figs.push(Figure {
                file: format!("accuracy_vs_{pslug}.svg"),
                id: format!("fig-accuracy-{pslug}"),
                caption: format!(
                    "Test accuracy of the chip population against {}: line = mean over chips, \
                     band = 5th to 95th percentile of chips, dashed = ideal argmax, dotted = \
                     linfa float baseline, red = accuracy target (one reference line per curve \
                     where its value differs between curves).{}{zipped_note}",
                    p.path,
                    if groups.len() > 1 {
                        " One curve per value of the other swept parameters."
                    } else {
                        ""
                    }
                ),
                svg: plots::accuracy_vs_param(&acc)?,
            });
            let ycurves = group_points(&groups, i, |x, r| {
                Some(YieldPoint {
                    x,
                    yield_frac: r.yield_frac?,
                    lo: r.yield_lo,
                    hi: r.yield_hi,
                })
            })
            .into_iter()
            .map(|(label, points)| YieldCurve { label, points })
            .collect();
            let yp = YieldPlot {
                title: format!("Yield vs {name}{partial_note}"),
                axis,
                curves: ycurves,
            };
            figs.push(Figure {
                file: format!("yield_vs_{pslug}.svg"),
                id: format!("fig-yield-{pslug}"),
                caption: format!(
                    "Yield (share of chips whose accuracy meets the target) against {}, with \
                     Wilson score interval error bars.{zipped_note}",
                    p.path
                ),
                svg: plots::yield_vs_param(&yp)?,
            });
        }
    }

    if let Some(row) = focus.and_then(|p| folder.point(p)) {
        let label = point_label(folder, row);
        let chips = folder.chips_of(row.point).cloned().unwrap_or_default();
        let h = AccuracyHistogram {
            title: format!("Per-chip accuracy at point {} ({label})", row.point),
            accuracies: chips.accuracies.clone(),
            samples: Some(row.samples),
            target: row.target,
            ideal: row.ideal_acc,
        };
        figs.push(Figure {
            file: "chip_accuracy.svg".into(),
            id: "fig-chip-accuracy".into(),
            caption: format!(
                "Distribution of test accuracy over the chips of sweep point {} ({label}); \
                 red = target, dashed = ideal argmax.",
                row.point
            ),
            svg: plots::accuracy_histogram(&h)?,
        });

        let classes = folder.manifest.dataset.classes.clone();
        let n = classes.len();
        let mut cm = ConfusionMatrix::zeros(
            &format!("Decisions at point {} ({label})", row.point),
            classes,
        );
        for c in folder.confusion_of(row.point) {
            let col = match c.predicted {
                Predicted::Class(k) => k,
                Predicted::Ambiguous => n,
                Predicted::NonConverged => n + 1,
            };
            if let Some(cell) = cm.counts.get_mut(c.true_class).and_then(|r| r.get_mut(col)) {
                *cell += c.count;
            }
        }
        figs.push(Figure {
            file: "confusion.svg".into(),
            id: "fig-confusion".into(),
            caption: format!(
                "Confusion matrix of sweep point {} summed over its chips: rows are true \
                 classes, columns the decision; ambiguous and non-converged decisions have \
                 their own columns and are never counted as correct.",
                row.point
            ),
            svg: plots::confusion_heatmap(&cm)?,
        });

        if m.transient && chips.timed > 0 {
            // A second pass over chips.csv bins the times between the extremes the first found.
            let mut d = DecisionTimeHistogram::new(
                format!("Decision time at point {} ({label})", row.point),
                chips.time_min_s,
                chips.time_max_s,
            );
            folder.for_each_decision_time(row.point, |t| d.add(t))?;
            figs.push(Figure {
                file: "decision_time.svg".into(),
                id: "fig-decision-time".into(),
                caption: format!(
                    "Distribution of the chips' mean decision time at sweep point {} \
                     (transient evaluation).",
                    row.point
                ),
                svg: plots::decision_time_histogram(&d)?,
            });
        }
    }

    for t in &folder.transfers {
        let tp = TransferPlot {
            title: format!("Competition transfer curve: {}", t.name),
            curve: &t.curve,
            x_label: t.meta.x_label.clone(),
            x_unit: t.meta.x_unit.clone(),
        };
        let s = slug(&t.name);
        // `transfer/NAME.csv` -> `plots/transfer_NAME.svg` (no doubled prefix).
        let file = if s.starts_with("transfer") {
            format!("{s}.svg")
        } else {
            format!("transfer_{s}.svg")
        };
        figs.push(Figure {
            file,
            id: format!("fig-transfer-{s}"),
            caption: format!(
                "Output share of each competitor against {} (transfer curve `transfer/{}.csv`).",
                t.meta.x_label, t.name
            ),
            svg: plots::transfer_curve(&tp)?,
        });
    }
    Ok(figs)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn slugs_are_file_safe() {
        assert_eq!(slug("competition.bias_current"), "competition-bias_current");
        assert_eq!(slug("a/b c"), "a-b-c");
        assert_eq!(short_name("competition.bias_current"), "bias_current");
    }
}
