//! The rendered report against the files it was made from: every number in report.html is
//! compared with the CSV/JSON cell it names (read here independently with the csv and
//! serde_json crates), every SVG is parsed as XML with quick-xml (a general-purpose reader) and
//! checked for axis labels. Data: the invented fixture in tests/data/results_fixture.

use std::collections::HashMap;
use std::fs;
use std::path::{Path, PathBuf};

use quick_xml::events::Event;
use quick_xml::Reader;

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/data/results_fixture")
        .join(name)
}

fn copy_of(name: &str) -> tempfile::TempDir {
    let tmp = tempfile::tempdir().unwrap();
    for e in fs::read_dir(fixture(name)).unwrap() {
        let p = e.unwrap().path();
        if p.is_file() {
            fs::copy(&p, tmp.path().join(p.file_name().unwrap())).unwrap();
        }
    }
    tmp
}

/// One element carrying traceability attributes, with its text.
#[derive(Debug, Default)]
struct Traced {
    attrs: HashMap<String, String>,
    text: String,
}

/// Parse the report as XML (it is written well-formed) and collect every element that has a
/// `data-src` attribute, with its text content.
fn traced_elements(html: &str) -> Vec<Traced> {
    let mut r = Reader::from_str(html);
    let mut out: Vec<Traced> = Vec::new();
    let mut open: Option<(usize, usize)> = None; // (index in out, depth)
    let mut depth = 0usize;
    loop {
        match r.read_event() {
            Ok(Event::Start(e)) => {
                depth += 1;
                let attrs: HashMap<String, String> = e
                    .attributes()
                    .map(|a| {
                        let a = a.unwrap();
                        (
                            String::from_utf8(a.key.as_ref().to_vec()).unwrap(),
                            a.unescape_value().unwrap().into_owned(),
                        )
                    })
                    .collect();
                if attrs.contains_key("data-src") {
                    out.push(Traced {
                        attrs,
                        text: String::new(),
                    });
                    open = Some((out.len() - 1, depth));
                }
            }
            Ok(Event::Text(t)) => {
                if let Some((i, _)) = open {
                    out[i].text.push_str(&t.unescape().unwrap());
                }
            }
            Ok(Event::End(_)) => {
                if let Some((_, d)) = open {
                    if d == depth {
                        open = None;
                    }
                }
                depth -= 1;
            }
            Ok(Event::Eof) => break,
            Ok(_) => {}
            Err(e) => panic!(
                "report.html is not well-formed at {}: {e}",
                r.buffer_position()
            ),
        }
    }
    out
}

/// points.csv as (point, column) -> raw cell, read with the csv crate.
fn points_cells(dir: &Path) -> (Vec<String>, HashMap<(u64, String), String>) {
    let mut rdr = csv::Reader::from_path(dir.join("points.csv")).unwrap();
    let header: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    let mut cells = HashMap::new();
    for rec in rdr.records() {
        let rec = rec.unwrap();
        let point: u64 = rec[0].parse().unwrap();
        for (h, v) in header.iter().zip(rec.iter()) {
            cells.insert((point, h.clone()), v.to_string());
        }
    }
    (header, cells)
}

/// A manifest value by a key path like `sweep.parameters[0].values[2]`.
fn json_at<'a>(v: &'a serde_json::Value, key: &str) -> &'a serde_json::Value {
    let mut cur = v;
    for part in key.split('.') {
        let (name, idx) = match part.split_once('[') {
            Some((n, rest)) => (n, Some(rest)),
            None => (part, None),
        };
        cur = &cur[name];
        if let Some(rest) = idx {
            for i in rest.split('[') {
                cur = &cur[i.trim_end_matches(']').parse::<usize>().unwrap()];
            }
        }
    }
    cur
}

/// Parse an SI-prefixed quantity "2.107 µs" with unit `unit` ("" = plain number).
fn parse_si(text: &str, unit: &str) -> f64 {
    let text = text.trim();
    if unit.is_empty() {
        return text.parse().unwrap();
    }
    let (m, rest) = text.split_once(' ').unwrap_or((text, ""));
    let prefix = rest
        .strip_suffix(unit)
        .unwrap_or_else(|| panic!("`{text}` lacks unit {unit}"));
    let scale = match prefix {
        "" => 1.0,
        "a" => 1e-18,
        "f" => 1e-15,
        "p" => 1e-12,
        "n" => 1e-9,
        "µ" => 1e-6,
        "m" => 1e-3,
        "k" => 1e3,
        "M" => 1e6,
        "G" => 1e9,
        "T" => 1e12,
        other => panic!("unknown prefix {other} in {text}"),
    };
    m.parse::<f64>().unwrap() * scale
}

fn parse_duration(text: &str) -> f64 {
    if let Some((m, s)) = text.split_once(" min ") {
        return m.parse::<f64>().unwrap() * 60.0 + s.trim_end_matches(" s").parse::<f64>().unwrap();
    }
    if let Some((h, m)) = text.split_once(" h ") {
        return h.parse::<f64>().unwrap() * 3600.0
            + m.trim_end_matches(" min").parse::<f64>().unwrap() * 60.0;
    }
    parse_si(text, "s")
}

fn close(a: f64, b: f64, rel: f64, abs: f64) -> bool {
    (a - b).abs() <= abs + rel * a.abs().max(b.abs())
}

/// Check every traced number of a rendered folder against its source file.
fn check_traceability(dir: &Path) -> usize {
    let html = fs::read_to_string(dir.join("report.html")).unwrap();
    let manifest: serde_json::Value =
        serde_json::from_str(&fs::read_to_string(dir.join("manifest.json")).unwrap()).unwrap();
    let units: HashMap<String, String> = manifest["sweep"]["parameters"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| {
            (
                p["path"].as_str().unwrap().to_string(),
                p["unit"].as_str().unwrap().to_string(),
            )
        })
        .collect();
    let (header, cells) = points_cells(dir);
    let traced = traced_elements(&html);
    let mut table_cells = std::collections::HashSet::new();
    let mut checked = 0;
    for t in &traced {
        let a = &t.attrs;
        let raw = match a["data-src"].as_str() {
            "points.csv" => {
                let point: u64 = a["data-point"].parse().unwrap();
                let col = a["data-col"].clone();
                table_cells.insert((point, col.clone()));
                cells
                    .get(&(point, col.clone()))
                    .unwrap_or_else(|| panic!("no points.csv cell ({point}, {col})"))
                    .clone()
            }
            "manifest.json" => {
                let v = json_at(&manifest, &a["data-key"]);
                assert!(!v.is_null(), "manifest has no {}", a["data-key"]);
                v.to_string()
            }
            other => panic!("unknown data-src {other}"),
        };
        if a.contains_key("data-empty") {
            assert!(raw.is_empty(), "{a:?} marked empty but the cell is `{raw}`");
            assert_eq!(t.text, "—");
            continue;
        }
        let value: f64 = a["data-value"].parse().unwrap();
        let source: f64 = raw.parse().unwrap();
        assert!(
            close(value, source, 1e-12, 0.0),
            "{a:?}: {value} vs cell {raw}"
        );
        // The text shown agrees with the value to the precision it is written with.
        let shown = t.text.trim();
        match a["data-kind"].as_str() {
            "percent" => {
                let p: f64 = shown.strip_suffix(" %").unwrap().parse().unwrap();
                assert!(
                    close(p / 100.0, value, 0.0, 0.0005 + 1e-12),
                    "{shown} vs {value}"
                );
            }
            "count" => assert_eq!(shown.parse::<f64>().unwrap(), value, "{a:?}"),
            "si" => {
                let col = a.get("data-col").cloned().unwrap_or_default();
                let unit = match col.as_str() {
                    "decision_time_mean_s" | "decision_time_s" => "s".to_string(),
                    "energy_mean_j" | "energy_per_decision_j" => "J".to_string(),
                    "supply_current_a" => "A".to_string(),
                    "power_w" => "W".to_string(),
                    c => units
                        .get(c)
                        .cloned()
                        .or_else(|| {
                            // Manifest sweep values: the parameter's own unit.
                            let key = a.get("data-key")?;
                            let i: usize = key
                                .strip_prefix("sweep.parameters[")?
                                .split(']')
                                .next()?
                                .parse()
                                .ok()?;
                            Some(
                                manifest["sweep"]["parameters"][i]["unit"]
                                    .as_str()?
                                    .to_string(),
                            )
                        })
                        .unwrap(),
                };
                let v = parse_si(shown, &unit);
                assert!(close(v, value, 5e-4, 0.0), "{shown} vs {value}");
            }
            "plain" => assert!(close(shown.parse().unwrap(), value, 5e-4, 0.0)),
            "duration" => assert!(close(parse_duration(shown), value, 5e-3, 0.5)),
            "date" => assert!(shown.ends_with("UTC")),
            k => panic!("unknown data-kind {k}"),
        }
        checked += 1;
    }
    // Every cell of points.csv is in the report (the per-point table).
    for (point, col) in cells.keys() {
        assert!(
            table_cells.contains(&(*point, col.clone())),
            "({point}, {col}) not shown"
        );
    }
    assert!(!header.is_empty());
    checked
}

#[test]
fn every_number_in_the_report_matches_its_source() {
    let d = copy_of("complete");
    let summary = hardmax::report::render(d.path()).unwrap();
    assert!(!summary.partial);
    let n = check_traceability(d.path());
    // 6 rows x 21 columns in the table alone.
    assert!(n >= 6 * 21, "only {n} traced numbers");
}

#[test]
fn partial_folder_renders_with_partial_mark() {
    let d = copy_of("partial");
    let summary = hardmax::report::render(d.path()).unwrap();
    assert!(summary.partial);
    assert_eq!((summary.points_rendered, summary.points_total), (4, 6));
    let html = fs::read_to_string(&summary.report).unwrap();
    assert!(html.contains(r#"id="partial-mark""#));
    assert!(html.contains(r#"class="pill partial""#));
    assert!(
        !html.contains(r#"id="point-4""#),
        "unfinished point must not be shown"
    );
    check_traceability(d.path());
}

#[test]
fn report_is_self_contained_and_carries_the_caution() {
    let d = copy_of("complete");
    let summary = hardmax::report::render(d.path()).unwrap();
    let html = fs::read_to_string(&summary.report).unwrap();
    assert!(!html.contains("<script"));
    assert!(!html.contains("<link"));
    assert!(!html.contains("@import") && !html.contains("url("));
    assert!(!html.contains("src=\"http") && !html.contains("href=\"http"));
    // The only http(s) text allowed is the SVG namespace name (not fetched).
    let stripped = html.replace("http://www.w3.org/2000/svg", "");
    assert!(!stripped.contains("http://") && !stripped.contains("https://"));
    assert!(html.contains(r#"id="caution""#));
    assert!(html.contains("not sign-off"));
    assert!(html.contains("characterised models, corner and Monte Carlo simulation"));
    assert!(html.contains("silicon measurement"));
    // Provenance from the manifest.
    for s in [
        "0f0f0f0f",
        "fixture-host",
        "hardmax run experiments/fixture-iris-bias-bits.toml",
    ] {
        assert!(html.contains(s), "missing {s}");
    }
    // One inline figure per written SVG.
    assert_eq!(html.matches("<figure").count(), summary.plots.len());
    // Rendering twice gives the same bytes (deterministic formatting).
    let again = hardmax::report::render(d.path()).unwrap();
    assert_eq!(fs::read_to_string(&again.report).unwrap(), html);
}

/// Parse an SVG with quick-xml; return every <text> content.
fn svg_texts(svg: &str) -> Vec<String> {
    let mut r = Reader::from_str(svg);
    let mut texts = Vec::new();
    let mut in_text = false;
    let mut root = None;
    let mut drawing = 0;
    loop {
        match r.read_event() {
            Ok(Event::Start(e)) => {
                let name = String::from_utf8(e.name().as_ref().to_vec()).unwrap();
                root.get_or_insert(name.clone());
                in_text = name == "text";
            }
            Ok(Event::Empty(e)) => {
                if matches!(
                    e.name().as_ref(),
                    b"rect" | b"polyline" | b"polygon" | b"circle" | b"line" | b"path"
                ) {
                    drawing += 1;
                }
            }
            Ok(Event::Text(t)) if in_text => texts.push(t.unescape().unwrap().trim().to_string()),
            Ok(Event::End(_)) => in_text = false,
            Ok(Event::Eof) => break,
            Ok(_) => {}
            Err(e) => panic!("SVG is not well-formed at {}: {e}", r.buffer_position()),
        }
    }
    assert_eq!(root.as_deref(), Some("svg"));
    assert!(drawing > 5, "SVG has almost no drawing elements");
    texts
}

#[test]
fn every_svg_parses_and_has_axis_labels() {
    let d = copy_of("complete");
    hardmax::report::add_transfer(
        d.path(),
        &fixture("transfer_wta.csv"),
        &hardmax::report::TransferMeta {
            x_label: "input current of output 0".into(),
            x_unit: "A".into(),
        },
    )
    .unwrap();
    let summary = hardmax::report::render(d.path()).unwrap();
    let expect: &[(&str, &[&str])] = &[
        (
            "accuracy_vs_competition-bias_current.svg",
            &[
                "competition.bias_current (A)",
                "test accuracy",
                "1 nA",
                "100 nA",
            ],
        ),
        (
            "accuracy_vs_weights-bits.svg",
            &["weights.bits", "test accuracy", "4", "6"],
        ),
        (
            "yield_vs_competition-bias_current.svg",
            &[
                "competition.bias_current (A)",
                "yield (chips meeting target)",
            ],
        ),
        (
            "yield_vs_weights-bits.svg",
            &["weights.bits", "yield (chips meeting target)"],
        ),
        ("chip_accuracy.svg", &["test accuracy of one chip", "chips"]),
        (
            "confusion.svg",
            &["predicted class (decision)", "true class", "ambiguous"],
        ),
        (
            "decision_time.svg",
            &["mean decision time of one chip (s)", "chips"],
        ),
        (
            "transfer_wta.svg",
            &["input current of output 0 (A)", "output share", "10 nA"],
        ),
    ];
    assert_eq!(summary.plots.len(), expect.len(), "{:?}", summary.plots);
    for (file, labels) in expect {
        let svg = fs::read_to_string(d.path().join("plots").join(file)).unwrap();
        let texts = svg_texts(&svg);
        for l in *labels {
            assert!(
                texts.iter().any(|t| t == l),
                "{file}: no text `{l}` in {texts:?}"
            );
        }
    }
}

#[test]
fn confusion_figure_shows_the_counts_of_confusion_csv() {
    // Default focus point = lowest acc_mean in points.csv (point 0 in the fixture).
    let d = copy_of("complete");
    let summary = hardmax::report::render(d.path()).unwrap();
    let (_, cells) = points_cells(d.path());
    let lowest = (0..6u64)
        .min_by(|a, b| {
            let x: f64 = cells[&(*a, "acc_mean".to_string())].parse().unwrap();
            let y: f64 = cells[&(*b, "acc_mean".to_string())].parse().unwrap();
            x.total_cmp(&y)
        })
        .unwrap();
    assert_eq!(summary.focus_point, Some(lowest));
    let mut rdr = csv::Reader::from_path(d.path().join("confusion.csv")).unwrap();
    let classes = [
        "setosa",
        "versicolor",
        "virginica",
        "ambiguous",
        "nonconverged",
    ];
    let mut m = [[0u64; 5]; 3];
    for rec in rdr.records() {
        let rec = rec.unwrap();
        if rec[0].parse::<u64>().unwrap() != lowest {
            continue;
        }
        let t = classes.iter().position(|c| *c == &rec[1]).unwrap();
        let p = classes.iter().position(|c| *c == &rec[2]).unwrap();
        m[t][p] += rec[3].parse::<u64>().unwrap();
    }
    let svg = fs::read_to_string(d.path().join("plots/confusion.svg")).unwrap();
    let texts = svg_texts(&svg);
    // Cell texts appear row by row after the header labels.
    let numbers: Vec<u64> = texts.iter().filter_map(|t| t.parse().ok()).collect();
    let expected: Vec<u64> = m.iter().flatten().copied().collect();
    assert_eq!(numbers, expected);
}

/// Keep only some columns (by name) and the rows whose `point` passes `keep`.
fn filter_csv(path: &Path, drop_cols: &[&str], keep: impl Fn(&str) -> bool) {
    let mut rdr = csv::Reader::from_path(path).unwrap();
    let header: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    let idx: Vec<usize> = (0..header.len())
        .filter(|&i| !drop_cols.contains(&header[i].as_str()))
        .collect();
    let mut out = csv::Writer::from_writer(Vec::new());
    out.write_record(idx.iter().map(|&i| header[i].as_str()))
        .unwrap();
    for rec in rdr.records() {
        let rec = rec.unwrap();
        if keep(&rec[0]) {
            out.write_record(idx.iter().map(|&i| &rec[i])).unwrap();
        }
    }
    fs::write(path, out.into_inner().unwrap()).unwrap();
}

#[test]
fn a_partial_run_with_no_finished_point_still_renders() {
    let d = copy_of("partial");
    for f in ["points.csv", "chips.csv", "confusion.csv"] {
        filter_csv(&d.path().join(f), &[], |_| false);
    }
    let p = d.path().join("manifest.json");
    let text = fs::read_to_string(&p)
        .unwrap()
        .replace("\"points_done\": 4", "\"points_done\": 0");
    fs::write(&p, text).unwrap();
    let s = hardmax::report::render(d.path()).unwrap();
    assert!(s.partial && s.plots.is_empty() && s.focus_point.is_none());
    let html = fs::read_to_string(&s.report).unwrap();
    assert!(html.contains(r#"id="partial-mark""#));
    assert!(html.contains("No sweep point has finished yet"));
    check_traceability(d.path());
}

#[test]
fn a_single_design_point_without_sweep_renders() {
    let d = copy_of("complete");
    let params = ["competition.bias_current", "weights.bits"];
    for f in ["points.csv", "chips.csv", "confusion.csv"] {
        filter_csv(&d.path().join(f), &params, |p| p == "0");
    }
    let p = d.path().join("manifest.json");
    let mut m: serde_json::Value = serde_json::from_str(&fs::read_to_string(&p).unwrap()).unwrap();
    m["sweep"]["parameters"] = serde_json::json!([]);
    m["points_total"] = 1.into();
    m["points_done"] = 1.into();
    fs::write(&p, serde_json::to_string(&m).unwrap()).unwrap();
    let s = hardmax::report::render(d.path()).unwrap();
    assert_eq!(s.focus_point, Some(0));
    // No parameter to plot against: the per-point figures only.
    let names: Vec<String> = s
        .plots
        .iter()
        .map(|p| p.file_name().unwrap().to_string_lossy().into_owned())
        .collect();
    assert_eq!(
        names,
        ["chip_accuracy.svg", "confusion.svg", "decision_time.svg"]
    );
    let html = fs::read_to_string(&s.report).unwrap();
    assert!(html.contains("a single design point (no sweep)"));
    check_traceability(d.path());
}

#[test]
fn zip_sweeps_draw_one_curve_and_grids_one_per_other_value() {
    let mut f = hardmax::report::ResultsFolder::read(&fixture("complete")).unwrap();
    let grid = hardmax::report::build_figures(&f, Some(0)).unwrap();
    let acc = &grid
        .iter()
        .find(|g| g.file == "accuracy_vs_competition-bias_current.svg")
        .unwrap()
        .svg;
    // Grid: one legend entry per value of weights.bits (4 and 6), read from points.csv.
    let texts = svg_texts(acc);
    assert!(texts.iter().any(|t| t == "bits = 4") && texts.iter().any(|t| t == "bits = 6"));
    f.manifest.sweep.mode = hardmax::report::SweepMode::Zip;
    let zip = hardmax::report::build_figures(&f, Some(0)).unwrap();
    let acc = &zip
        .iter()
        .find(|g| g.file == "accuracy_vs_competition-bias_current.svg")
        .unwrap()
        .svg;
    let texts = svg_texts(acc);
    assert!(!texts.iter().any(|t| t.starts_with("bits =")));
    assert!(texts.iter().any(|t| t == "mean over chips"));
    // A zip sweep draws one accuracy and one yield figure, not one duplicate per zipped key;
    // the caption names the other zipped parameter.
    let count = |figs: &[hardmax::report::Figure], prefix: &str| {
        figs.iter().filter(|g| g.file.starts_with(prefix)).count()
    };
    assert_eq!(count(&grid, "accuracy_vs_"), 2);
    assert_eq!(count(&zip, "accuracy_vs_"), 1);
    assert_eq!(count(&zip, "yield_vs_"), 1);
    let first = zip
        .iter()
        .find(|g| g.file.starts_with("accuracy_vs_"))
        .unwrap();
    assert!(first.caption.contains("step together"), "{}", first.caption);
}

/// The points table puts the yield columns right after the point number and the swept values,
/// so yield is visible without scrolling sideways; every cell still traces to its own column of
/// points.csv (checked by `check_traceability`).
#[test]
fn points_table_shows_yield_after_the_swept_values() {
    let d = copy_of("complete");
    let summary = hardmax::report::render(d.path()).unwrap();
    let html = fs::read_to_string(&summary.report).unwrap();
    let start = html.find(r#"<table id="points-table">"#).unwrap();
    let head = &html[start..start + html[start..].find("</thead>").unwrap()];
    let codes: Vec<&str> = head
        .split("<code>")
        .skip(1)
        .map(|c| &c[..c.find("</code>").unwrap()])
        .collect();
    let m: serde_json::Value =
        serde_json::from_str(&fs::read_to_string(d.path().join("manifest.json")).unwrap()).unwrap();
    let swept: Vec<&str> = m["sweep"]["parameters"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["path"].as_str().unwrap())
        .collect();
    let n = 1 + swept.len();
    assert_eq!(codes[0], "point");
    assert_eq!(&codes[1..n], &swept[..]);
    assert_eq!(
        &codes[n..n + 3],
        &["yield", "yield_lo", "yield_hi"],
        "{codes:?}"
    );
    check_traceability(d.path());
}

/// A run of the binary (iris, 30 chips, two WTA widths) writes the design columns and
/// differences.csv; its report names the point that answers the design question, and every
/// number of that answer traces back to its points.csv cell (the checks above).
#[test]
fn design_answer_of_a_real_run_is_traceable() {
    use assert_cmd::prelude::*;
    let dir = tempfile::tempdir().unwrap();
    let exp = dir.path().join("answer.toml");
    fs::write(
        &exp,
        r#"
[dataset]
name = "iris"
[population]
chips = 30
[target]
accuracy = 0.8
yield = 0.9
[[sweep.axis]]
path = "competition.sink.w"
values = ["1 um", "4 um"]
"#,
    )
    .unwrap();
    let out = dir.path().join("out");
    std::process::Command::cargo_bin("hardmax")
        .unwrap()
        .args(["run", "-q", "--threads", "2", "--out"])
        .arg(&out)
        .arg(&exp)
        .assert()
        .success();
    let (header, _) = points_cells(&out);
    for c in hardmax::answers::DESIGN_COLUMNS {
        assert!(header.iter().any(|h| h == c), "points.csv lacks {c}");
    }
    let diffs = fs::read_to_string(out.join("differences.csv")).unwrap();
    assert!(
        diffs.lines().nth(1).unwrap().contains("paired_t"),
        "{diffs}"
    );
    let html = fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains(r#"id="design-answer""#));
    assert!(html.contains("Wilson"));
    assert!(html.contains(r#"id="differences""#));
    assert!(html.contains(r#"id="yield-area""#));
    check_traceability(&out);
}
