//! The self-contained HTML report: inline CSS and inline SVG, no scripts, no external fonts or
//! files. The document is also well-formed XML, so tests can parse it with an XML reader.
//!
//! Traceability: every number taken from the results folder is an element carrying
//! `data-src` (`points.csv` or `manifest.json`), the cell (`data-point` + `data-col`, or
//! `data-key`), `data-kind` (how the text is formatted: `percent`, `si`, `count`, `plain`,
//! `duration`, `date`) and `data-value`: the exact value in Rust's shortest round-trip form, so
//! it parses back to the same `f64` the CSV held. Empty cells carry `data-empty="1"` instead.

use std::fmt::Write as _;

mod answer;
mod corners;
mod trim;

use super::folder::{PointRow, ResultsFolder, RunStatus, SweepMode};
use super::format::{esc, fmt_duration, fmt_kind, fmt_unix_utc, raw_value, NumberKind};
use super::render::{describe_point, point_label, short_name, Figure};

/// The caution every report carries: the one constant (DEVELOPERS.md model notes section 8).
pub use hardmax_core::CAUTION;

const CSS: &str = r#"
:root { --ink: #222831; --muted: #5b6573; --line: #d6dbe2; --teal: #1b6f7a; --amber: #c97a1e;
        --paper: #fbfaf7; --card: #ffffff; --warn: #8a4b08; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font: 15px/1.5 system-ui, -apple-system, "Segoe UI", sans-serif; }
header.top { background: var(--ink); color: #f3f1ea; padding: 22px 32px 18px;
             border-bottom: 6px solid var(--teal); }
header.top .kicker { font-size: 12px; letter-spacing: .14em; text-transform: uppercase;
                     color: #b9c4cf; }
header.top h1 { margin: 4px 0 6px; font-size: 26px; font-weight: 650; }
header.top .sub { color: #d5dbe1; font-size: 14px; }
.pill { display: inline-block; padding: 1px 10px; border-radius: 999px; font-size: 12px;
        font-weight: 600; margin-left: 8px; vertical-align: middle; }
.pill.complete { background: #d9efe9; color: #0f4f47; }
.pill.partial { background: #fbe3c4; color: var(--warn); }
main { max-width: 1120px; margin: 0 auto; padding: 8px 32px 32px; }
section { margin-top: 30px; }
h2 { font-size: 19px; margin: 0 0 12px; padding-bottom: 4px;
     border-bottom: 2px solid var(--line); }
h2 .n { color: var(--teal); margin-right: 8px; }
.partial-banner { margin-top: 20px; padding: 12px 16px; border-left: 6px solid var(--amber);
                  background: #fff4e3; color: var(--warn); font-weight: 600; }
.cards { display: grid; grid-template-columns: repeat(auto-fit, minmax(300px, 1fr)); gap: 14px; }
.card { background: var(--card); border: 1px solid var(--line); border-radius: 6px;
        padding: 12px 16px; }
.card h3 { margin: 0 0 2px; font-size: 14px; text-transform: uppercase; letter-spacing: .06em;
           color: var(--muted); }
.card .where { font-size: 13px; color: var(--muted); margin-bottom: 8px; }
.card .big { font-size: 28px; font-weight: 650; color: var(--teal); }
.card dl { display: grid; grid-template-columns: max-content 1fr; gap: 2px 12px; margin: 6px 0 0; }
.card dt { color: var(--muted); }
.card dd { margin: 0; }
.verdict { font-size: 13px; margin-top: 6px; }
.verdict.ok { color: #0f5f46; }
.verdict.short { color: #a1262f; }
figure { margin: 0 0 22px; background: var(--card); border: 1px solid var(--line);
         border-radius: 6px; padding: 10px; }
figure .plot svg { display: block; width: 100%; height: auto; max-width: 900px; margin: 0 auto; }
figcaption { font-size: 13px; color: var(--muted); padding: 6px 6px 0; }
figcaption b { color: var(--ink); }
.tablewrap { overflow-x: auto; border: 1px solid var(--line); border-radius: 6px;
             background: var(--card); }
table { border-collapse: collapse; font-size: 13px; width: 100%; }
th, td { padding: 5px 9px; border-bottom: 1px solid var(--line); white-space: nowrap; }
th { background: #eef1f4; text-align: right; vertical-align: bottom; font-weight: 600; }
th code { display: block; font-weight: 400; color: var(--muted); font-size: 11px; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
tr.focus td { background: #eef7f6; }
td.na, span.na { color: #9aa3ad; }
dl.prov { display: grid; grid-template-columns: max-content 1fr; gap: 4px 18px; margin: 0; }
dl.prov dt { color: var(--muted); }
dl.prov dd { margin: 0; overflow-wrap: anywhere; }
code { font-family: ui-monospace, "SFMono-Regular", Menlo, monospace; font-size: 0.92em; }
footer.caution { margin: 36px auto 0; max-width: 1120px; padding: 16px 32px 28px; }
footer.caution div { border: 2px solid var(--amber); border-radius: 6px; background: #fffaf0;
                     padding: 12px 16px; }
footer.caution strong { color: var(--warn); }
.small { font-size: 13px; color: var(--muted); }
"#;

/// Where a number comes from.
#[derive(Debug, Clone, Copy)]
enum Src<'a> {
    Point { point: u64, col: &'a str },
    Manifest(&'a str),
}

fn kind_name(kind: &NumberKind) -> &'static str {
    match kind {
        NumberKind::Percent => "percent",
        NumberKind::Si(_) => "si",
        NumberKind::Count => "count",
        NumberKind::Plain => "plain",
    }
}

fn src_attrs(src: Src) -> String {
    match src {
        Src::Point { point, col } => format!(
            r#" data-src="points.csv" data-point="{point}" data-col="{}""#,
            esc(col)
        ),
        Src::Manifest(key) => format!(r#" data-src="manifest.json" data-key="{}""#, esc(key)),
    }
}

/// A traceable number as an element `tag` with our data attributes.
fn num_el(tag: &str, class: &str, v: Option<f64>, kind: &NumberKind, src: Src) -> String {
    let attrs = src_attrs(src);
    match v {
        Some(v) => format!(
            r#"<{tag} class="num {class}"{attrs} data-kind="{}" data-value="{}">{}</{tag}>"#,
            kind_name(kind),
            raw_value(v),
            esc(&fmt_kind(v, kind))
        ),
        None => format!(r#"<{tag} class="num na {class}"{attrs} data-empty="1">—</{tag}>"#),
    }
}

fn num(v: Option<f64>, kind: &NumberKind, src: Src) -> String {
    num_el("span", "", v, kind, src)
}

/// A traceable integer from the manifest.
fn manifest_int(v: u64, key: &str) -> String {
    manifest_num("count", key, &v.to_string(), &v.to_string())
}

/// A traceable manifest value: `raw` is the exact value, `shown` its HTML text.
fn manifest_num(kind: &str, key: &str, raw: &str, shown: &str) -> String {
    format!(
        r#"<span class="num"{} data-kind="{kind}" data-value="{raw}">{shown}</span>"#,
        src_attrs(Src::Manifest(key))
    )
}

/// How a points.csv column is written, and its heading.
fn column_kind(folder: &ResultsFolder, col: &str) -> (NumberKind, String) {
    if let Some(p) = folder
        .manifest
        .sweep
        .parameters
        .iter()
        .find(|p| p.path == col)
    {
        let title = if p.unit.is_empty() {
            short_name(&p.path).to_string()
        } else {
            format!("{} ({})", short_name(&p.path), p.unit)
        };
        return (NumberKind::Si(p.unit.clone()), title);
    }
    let pct = NumberKind::Percent;
    let (kind, title) = match col {
        "point" => (NumberKind::Count, "point"),
        "chips" => (NumberKind::Count, "chips"),
        "samples" => (NumberKind::Count, "test samples"),
        "acc_mean" => (pct, "mean accuracy"),
        "acc_std" => (pct, "accuracy std. dev."),
        "acc_p05" => (pct, "accuracy 5th pct."),
        "acc_p50" => (pct, "median accuracy"),
        "acc_p95" => (pct, "accuracy 95th pct."),
        "ideal_acc" => (pct, "ideal argmax"),
        "baseline_acc" => (pct, "linfa baseline"),
        "target" => (pct, "target"),
        "yield" => (pct, "yield"),
        "yield_lo" => (pct, "yield, low end"),
        "yield_hi" => (pct, "yield, high end"),
        "agreement_mean" => (pct, "agreement with ideal"),
        "ambiguous_frac" => (pct, "ambiguous decisions"),
        "nonconverged" => (NumberKind::Count, "non-converged"),
        "decision_time_mean_s" => (NumberKind::Si("s".into()), "mean decision time"),
        "energy_mean_j" => (NumberKind::Si("J".into()), "mean energy / decision"),
        c => answer::column_kind(c).unwrap_or((NumberKind::Plain, col)),
    };
    (kind, title.to_string())
}

/// A point's parameter values as traceable numbers ("bias_current = 10 nA, bits = 6").
fn point_params_html(folder: &ResultsFolder, row: &PointRow) -> String {
    describe_point(folder, row, |p, v| {
        format!(
            "<code>{}</code> = {}",
            esc(short_name(&p.path)),
            num(
                Some(v),
                &NumberKind::Si(p.unit.clone()),
                Src::Point {
                    point: row.point,
                    col: &p.path
                }
            )
        )
    })
}

fn headline_card(folder: &ResultsFolder, title: &str, row: &PointRow) -> String {
    let pt = |col: &'static str| Src::Point {
        point: row.point,
        col,
    };
    let pct = NumberKind::Percent;
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<div class="card"><h3>{}</h3><div class="where">point {} · {}</div>"#,
        esc(title),
        row.point,
        point_params_html(folder, row)
    );
    let _ = write!(
        s,
        r#"<div class="big">{}</div><div class="small">mean test accuracy over {} chips; 5th–95th percentile {} – {}</div>"#,
        num(row.acc_mean, &pct, pt("acc_mean")),
        num(Some(row.chips as f64), &NumberKind::Count, pt("chips")),
        num(row.acc_p05, &pct, pt("acc_p05")),
        num(row.acc_p95, &pct, pt("acc_p95")),
    );
    let _ = write!(
        s,
        "<dl><dt>yield</dt><dd>{} (Wilson interval {} – {})</dd>\
         <dt>target accuracy</dt><dd>{}</dd>\
         <dt>ideal argmax</dt><dd>{}</dd>\
         <dt>linfa baseline</dt><dd>{}</dd>\
         <dt>ambiguous decisions</dt><dd>{}</dd></dl>",
        num(row.yield_frac, &pct, pt("yield")),
        num(row.yield_lo, &pct, pt("yield_lo")),
        num(row.yield_hi, &pct, pt("yield_hi")),
        num(row.target, &pct, pt("target")),
        num(row.ideal_acc, &pct, pt("ideal_acc")),
        num(row.baseline_acc, &pct, pt("baseline_acc")),
        num(row.ambiguous_frac, &pct, pt("ambiguous_frac")),
    );
    if let (Some(m), Some(t)) = (row.acc_mean, row.target) {
        let (class, words) = if m >= t {
            ("ok", "The mean accuracy meets the target.")
        } else {
            ("short", "The mean accuracy falls short of the target.")
        };
        let _ = write!(s, r#"<div class="verdict {class}">{words}</div>"#);
    }
    s.push_str("</div>");
    s
}

fn experiment_words(folder: &ResultsFolder) -> String {
    let m = &folder.manifest;
    let mut s = String::new();
    if !m.description.trim().is_empty() {
        let _ = write!(s, "<p>{}</p>", esc(m.description.trim()));
    }
    let sweep = if m.sweep.parameters.is_empty() {
        "a single design point (no sweep)".to_string()
    } else {
        let mut parts = Vec::new();
        for (i, p) in m.sweep.parameters.iter().enumerate() {
            let (lo_i, hi_i) = extreme_indices(&p.values);
            let kind = NumberKind::Si(p.unit.clone());
            let lo_key = format!("sweep.parameters[{i}].values[{lo_i}]");
            let hi_key = format!("sweep.parameters[{i}].values[{hi_i}]");
            let range = if let Some(labels) = &p.labels {
                // A text axis: its values are indices of these texts (tables and plots show
                // the index).
                format!(
                    "over {} texts, shown by index: {}",
                    labels.len(),
                    labels
                        .iter()
                        .enumerate()
                        .map(|(j, l)| format!("{j} = <code>{}</code>", esc(l)))
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            } else if p.values.len() == 1 {
                format!(
                    "at {}",
                    num(p.values.get(lo_i).copied(), &kind, Src::Manifest(&lo_key))
                )
            } else {
                format!(
                    "over {} values from {} to {}",
                    p.values.len(),
                    num(p.values.get(lo_i).copied(), &kind, Src::Manifest(&lo_key)),
                    num(p.values.get(hi_i).copied(), &kind, Src::Manifest(&hi_key)),
                )
            };
            let scale = match p.scale {
                super::folder::Scale::Log => "log",
                super::folder::Scale::Linear => "linear",
            };
            parts.push(format!(
                "<code>{}</code> {range} ({scale} scale)",
                esc(&p.path)
            ));
        }
        let how = match m.sweep.mode {
            SweepMode::Grid if m.sweep.parameters.len() > 1 => ", in every combination (grid)",
            SweepMode::Zip if m.sweep.parameters.len() > 1 => ", stepped together (zip)",
            _ => "",
        };
        format!("{}{how}", parts.join("; "))
    };
    let ds = &m.dataset;
    let _ = write!(
        s,
        "<p>The run simulated {} chips at each of {} sweep points, sweeping {sweep}. Each chip \
         is one sampled instance of the design (its own mismatch and programming draws), \
         evaluated on the test split of the <b>{}</b> dataset ({} classes, {} features; {} \
         training and {} test samples).</p>",
        manifest_int(m.chips_per_point, "chips_per_point"),
        manifest_int(m.points_total, "points_total"),
        esc(&ds.name),
        ds.classes.len(),
        manifest_int(ds.features, "dataset.features"),
        manifest_int(ds.train_samples, "dataset.train_samples"),
        manifest_int(ds.test_samples, "dataset.test_samples"),
    );
    let _ = write!(
        s,
        "<p>Competition stage: {}. A chip passes when its test accuracy reaches the target of {}; \
         <em>yield</em> is the share of chips that pass, shown with its Wilson score interval \
         (E. B. Wilson, JASA 22, 1927). Decisions were evaluated {}. Ambiguous and \
         non-converged decisions are counted on their own and never as correct.</p>",
        esc(&m.competition),
        num(
            Some(m.target_accuracy),
            &NumberKind::Percent,
            Src::Manifest("target_accuracy")
        ),
        if m.transient {
            "with the transient (time-domain) model, so decision times and energies are reported"
        } else {
            "at the DC operating point (no transient), so no decision times are reported"
        },
    );
    s
}

/// Indices of the smallest and largest value.
fn extreme_indices(v: &[f64]) -> (usize, usize) {
    let mut lo = 0;
    let mut hi = 0;
    for (i, x) in v.iter().enumerate() {
        if v.get(lo).is_some_and(|l| x < l) {
            lo = i;
        }
        if v.get(hi).is_some_and(|h| x > h) {
            hi = i;
        }
    }
    (lo, hi)
}

fn headline(folder: &ResultsFolder) -> String {
    let rows = &folder.points.rows;
    let with_mean: Vec<&PointRow> = rows.iter().filter(|r| r.acc_mean.is_some()).collect();
    let key = |r: &&PointRow| r.acc_mean.unwrap_or(f64::NAN);
    let best = with_mean
        .iter()
        .copied()
        .max_by(|a, b| key(a).total_cmp(&key(b)).then(b.point.cmp(&a.point)));
    let worst = with_mean
        .iter()
        .copied()
        .min_by(|a, b| key(a).total_cmp(&key(b)).then(b.point.cmp(&a.point)));
    let mut s = String::from(r#"<div class="cards">"#);
    match (best, worst) {
        (Some(b), Some(w)) if b.point == w.point => {
            s.push_str(&headline_card(folder, "The finished point", b));
        }
        (Some(b), Some(w)) => {
            s.push_str(&headline_card(
                folder,
                "Best point (highest mean accuracy)",
                b,
            ));
            s.push_str(&headline_card(
                folder,
                "Worst point (lowest mean accuracy)",
                w,
            ));
        }
        _ => s.push_str("<p>No sweep point has finished yet, so there are no numbers to show.</p>"),
    }
    s.push_str("</div>");
    // Decisions that are neither right nor wrong: never hidden.
    let amb = rows
        .iter()
        .filter(|r| r.ambiguous_frac.is_some())
        .max_by(|a, b| {
            a.ambiguous_frac
                .unwrap_or(0.0)
                .total_cmp(&b.ambiguous_frac.unwrap_or(0.0))
        });
    let nc = rows
        .iter()
        .filter(|r| r.nonconverged.is_some())
        .max_by(|a, b| {
            a.nonconverged
                .unwrap_or(0.0)
                .total_cmp(&b.nonconverged.unwrap_or(0.0))
        });
    if amb.is_some() || nc.is_some() {
        s.push_str(r#"<p class="small">"#);
        if let Some(r) = amb {
            let _ = write!(
                s,
                "Largest share of ambiguous decisions: {} at point {}. ",
                num(
                    r.ambiguous_frac,
                    &NumberKind::Percent,
                    Src::Point {
                        point: r.point,
                        col: "ambiguous_frac"
                    }
                ),
                r.point
            );
        }
        if let Some(r) = nc {
            let _ = write!(
                s,
                "Most non-converged decisions at one point: {} at point {}.",
                num(
                    r.nonconverged,
                    &NumberKind::Count,
                    Src::Point {
                        point: r.point,
                        col: "nonconverged"
                    }
                ),
                r.point
            );
        }
        // Failed decisions by kind, summed over every point (folders that record them).
        let mut by_kind = [0.0f64; 4];
        let mut known = false;
        for r in rows {
            if let Some(f) = r.failed {
                known = true;
                for (t, v) in by_kind.iter_mut().zip(f) {
                    *t += v;
                }
            }
        }
        if known {
            let names = [
                "not converged",
                "out of supply compliance",
                "weight stage",
                "noise",
            ];
            let parts: Vec<String> = names
                .iter()
                .zip(by_kind)
                .map(|(n, v)| format!("{n} {v}"))
                .collect();
            let _ = write!(
                s,
                " Failed decisions by kind, all points: {}.",
                esc(&parts.join(", "))
            );
        }
        s.push_str("</p>");
    }
    s
}

/// The order of the points table's columns: the point number and the swept values first, then
/// the yield columns (so yield is visible without scrolling sideways), then the rest in the
/// order of `points.csv`.
fn points_column_order(cols: &[String], swept: &[&str]) -> Vec<usize> {
    let is_lead = |c: &str| c == "point" || swept.contains(&c);
    let is_yield = |c: &str| c.starts_with("yield");
    let mut order: Vec<usize> = (0..cols.len()).filter(|&i| is_lead(&cols[i])).collect();
    order.extend((0..cols.len()).filter(|&i| !is_lead(&cols[i]) && is_yield(&cols[i])));
    order.extend((0..cols.len()).filter(|&i| !is_lead(&cols[i]) && !is_yield(&cols[i])));
    order
}

fn points_table(folder: &ResultsFolder, focus: Option<u64>) -> String {
    let all_cols = &folder.points.columns;
    let swept: Vec<&str> = folder
        .manifest
        .sweep
        .parameters
        .iter()
        .map(|p| p.path.as_str())
        .collect();
    let order = points_column_order(all_cols, &swept);
    let cols: Vec<&String> = order.iter().map(|&i| &all_cols[i]).collect();
    let kinds: Vec<(NumberKind, String)> = cols.iter().map(|c| column_kind(folder, c)).collect();
    let mut s = String::from(r#"<div class="tablewrap"><table id="points-table"><thead><tr>"#);
    for (c, (_, title)) in cols.iter().zip(&kinds) {
        let _ = write!(s, "<th>{}<code>{}</code></th>", esc(title), esc(c));
    }
    s.push_str("</tr></thead><tbody>");
    for r in &folder.points.rows {
        let class = if Some(r.point) == focus {
            r#" class="focus""#
        } else {
            ""
        };
        let _ = write!(s, r#"<tr{class} id="point-{}">"#, r.point);
        let cells = order.iter().map(|&i| r.cells.get(i).copied().flatten());
        for ((c, (kind, _)), v) in cols.iter().zip(&kinds).zip(cells) {
            s.push_str(&num_el(
                "td",
                "",
                v,
                kind,
                Src::Point {
                    point: r.point,
                    col: c,
                },
            ));
        }
        s.push_str("</tr>");
    }
    s.push_str("</tbody></table></div>");
    if folder.points.rows.is_empty() {
        s.push_str(r#"<p class="small">No rows yet.</p>"#);
    }
    s
}

fn provenance(folder: &ResultsFolder) -> String {
    let m = &folder.manifest;
    let mut s = String::from(r#"<dl class="prov">"#);
    let mut item = |k: &str, v: String| {
        let _ = write!(s, "<dt>{}</dt><dd>{v}</dd>", esc(k));
    };
    item(
        "experiment",
        format!("<code>{}</code>", esc(&m.experiment_name)),
    );
    item("written by", format!("hardmax {}", esc(&m.tool_version)));
    item(
        "rendered by",
        format!("hardmax {}", esc(env!("CARGO_PKG_VERSION"))),
    );
    item(
        "results format",
        format!(
            "<code>{}</code> version {}",
            esc(&m.format),
            manifest_int(m.format_version, "format_version")
        ),
    );
    item(
        "status",
        format!(
            "{} ({} of {} sweep points done)",
            status_word(m.status),
            manifest_int(m.points_done, "points_done"),
            manifest_int(m.points_total, "points_total")
        ),
    );
    item("master seed", manifest_int(m.seed, "seed"));
    if let Some(p) = &m.programming {
        item(
            "weight programming",
            esc(&format!(
                "program-and-verify: accepted within {} of the element range, at most {} \
                 write-read cycles per element, verify read noise {} of the range, {:e} s per \
                 cycle (swept values: see the sweep); cost per point in the program_* columns",
                p.tolerance, p.max_cycles, p.read_noise, p.cycle_time_s
            )),
        );
    }
    item("command", format!("<code>{}</code>", esc(&m.command)));
    item(
        "host",
        format!(
            "{} · {} / {} · {} CPUs · {} threads used",
            esc(&m.host.hostname),
            esc(&m.host.os),
            esc(&m.host.arch),
            manifest_int(m.host.cpus, "host.cpus"),
            manifest_int(m.threads, "threads"),
        ),
    );
    item(
        "started",
        manifest_num(
            "date",
            "started_unix_s",
            &raw_value(m.started_unix_s as f64),
            &esc(&fmt_unix_utc(m.started_unix_s as f64)),
        ),
    );
    item(
        "elapsed",
        manifest_num(
            "duration",
            "elapsed_s",
            &raw_value(m.elapsed_s),
            &esc(&fmt_duration(m.elapsed_s)),
        ),
    );
    item(
        "experiment hash",
        format!("<code>{}</code>", esc(&m.experiment_hash)),
    );
    item(
        "files",
        "<code>manifest.json</code>, <code>experiment.toml</code>, <code>points.csv</code>, \
         <code>chips.csv</code>, <code>confusion.csv</code>, <code>plots/*.svg</code> \
         (every number above is in these files)"
            .to_string(),
    );
    s.push_str("</dl>");
    s
}

fn status_word(s: RunStatus) -> &'static str {
    match s {
        RunStatus::Complete => "complete",
        RunStatus::Partial => "partial",
    }
}

/// The whole report as one self-contained HTML document.
pub fn report_html(folder: &ResultsFolder, figures: &[Figure], focus: Option<u64>) -> String {
    let m = &folder.manifest;
    let partial = folder.is_partial();
    let mut s =
        String::with_capacity(64 * 1024 + figures.iter().map(|f| f.svg.len()).sum::<usize>());
    let _ = write!(
        s,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"/>\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"/>\
         <meta name=\"generator\" content=\"hardmax {}\"/>\
         <title>hardmax results: {}</title><style>{CSS}</style></head><body>",
        esc(env!("CARGO_PKG_VERSION")),
        esc(&m.experiment_name)
    );
    let status = status_word(if partial {
        RunStatus::Partial
    } else {
        m.status
    });
    let _ = write!(
        s,
        r#"<header class="top"><div class="kicker">hardmax · chip-population results</div><h1>{}<span class="pill {status}" id="run-status">{status}</span></h1><div class="sub">dataset {} · {} · seed {}</div></header><main>"#,
        esc(&m.experiment_name),
        esc(&m.dataset.name),
        esc(&m.competition),
        manifest_int(m.seed, "seed")
    );
    if !m.warnings.is_empty() {
        // Shown before any number: a designer reads them before trusting a figure.
        s.push_str(r#"<div class="partial-banner" id="warnings"><strong>Warnings.</strong><ul>"#);
        for w in &m.warnings {
            let _ = write!(s, "<li>{}</li>", esc(w));
        }
        s.push_str("</ul></div>");
    }
    if partial {
        let _ = write!(
            s,
            r#"<div class="partial-banner" id="partial-mark">Partial results: {} of {} sweep points finished when this folder was written. Everything below shows the finished points only; resume the run to complete it.</div>"#,
            manifest_int(m.points_done, "points_done"),
            manifest_int(m.points_total, "points_total"),
        );
    }

    let _ = write!(
        s,
        r#"<section id="experiment"><h2><span class="n">1</span>The experiment</h2>{}</section>"#,
        experiment_words(folder)
    );
    let _ = write!(
        s,
        r#"<section id="headline"><h2><span class="n">2</span>Headline numbers</h2>{}{}{}</section>"#,
        match corners::corner_labels(folder) {
            // A design point passes only at every corner: the plain answer would name one
            // (point, corner) pair.
            Some(labels) => corners::corners_answer(folder, labels),
            None => answer::design_answer(folder),
        },
        trim::trim_section(folder),
        headline(folder)
    );

    s.push_str(r#"<section id="figures"><h2><span class="n">3</span>Figures</h2>"#);
    if let Some(row) = focus.and_then(|p| folder.point(p)) {
        let default_note = if focus == super::render::default_focus_point(&folder.points.rows) {
            "the finished point with the lowest mean accuracy, the one that limits the design"
        } else {
            "chosen when rendering"
        };
        let _ = write!(
            s,
            r#"<p class="small">The per-chip histogram, the confusion matrix and the decision-time histogram show sweep point {} ({}), {default_note}. Show another point with <code>hardmax render DIR --point N</code>.</p>"#,
            row.point,
            esc(&point_label(folder, row))
        );
    }
    if figures.is_empty() {
        s.push_str("<p>No figures: no sweep point has finished yet.</p>");
    }
    for (i, f) in figures.iter().enumerate() {
        let _ = write!(
            s,
            r#"<figure id="{}"><div class="plot">{}</div><figcaption><b>Figure {}.</b> {} <span class="small">(<code>plots/{}</code>)</span></figcaption></figure>"#,
            esc(&f.id),
            f.svg.trim(),
            i + 1,
            esc(&f.caption),
            esc(&f.file)
        );
    }
    s.push_str("</section>");

    let _ = write!(
        s,
        r#"<section id="points"><h2><span class="n">4</span>Every sweep point</h2><p class="small">One row per finished sweep point, every column of <code>points.csv</code>; shares in per cent, quantities with SI prefixes. The highlighted row is the point of the per-point figures.</p>{}</section>"#,
        points_table(folder, focus)
    );
    let _ = write!(
        s,
        r#"<section id="provenance"><h2><span class="n">5</span>Provenance</h2>{}</section>"#,
        provenance(folder)
    );
    let _ = write!(
        s,
        r#"</main><footer class="caution" id="caution"><div><strong>Caution.</strong> {}</div></footer></body></html>"#,
        esc(CAUTION)
    );
    s.push('\n');
    s
}
