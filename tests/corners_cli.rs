//! `[corners]` in `hardmax run` and `batch`, end to end on iris (open dataset,
//! datasets/PROVENANCE.md) with small WTA transistors: one row per (point, corner), the typical
//! corner equal to a run without corners on the same dies, the all-corners verdict, resume and
//! batch keyed by the corners, an unknown corner key refused with its line. The fast/slow tail
//! current and the temperature logic per corner are checked in `src/experiment/corners.rs`;
//! the pass rule over corners in `crates/hardmax-report/src/corners.rs`.

use std::path::{Path, PathBuf};

use assert_cmd::Command;

const BASE: &str = "name = \"iris-corners\"\n[dataset]\nname = \"iris\"\n\
    [competition]\nsink = { w = \"0.3 um\", l = \"0.5 um\" }\noutput = { w = \"0.3 um\", l = \"0.5 um\" }\n\
    [population]\nchips = 24\n\
    [target]\naccuracy = 0.9\nyield = 0.5\n\
    [[sweep.axis]]\npath = \"competition.sink.w\"\nvalues = [\"0.3 um\", \"1 um\"]\n";

const CORNERS: &str = "[corners]\nvt0_sigma = \"15 mV\"\nbeta_sigma = 0.05\n\
    process = [\"tt\", \"ff\", \"ss\"]\ntemperature = [\"300 K\", \"350 K\"]\n";

fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
    let f = dir.join(name);
    std::fs::write(&f, text).unwrap();
    f
}

fn run(f: &Path, out: &Path, set: &[&str]) -> assert_cmd::assert::Assert {
    let mut c = Command::cargo_bin("hardmax").unwrap();
    c.args(["run", f.to_str().unwrap(), "--out", out.to_str().unwrap()])
        .args(["--threads", "2"]);
    for s in set {
        c.args(["--set", s]);
    }
    c.assert()
}

/// A CSV file as header and rows of cells.
fn csv(path: &Path) -> (Vec<String>, Vec<Vec<String>>) {
    let t = std::fs::read_to_string(path).unwrap();
    let mut lines = t.lines();
    let head = lines
        .next()
        .unwrap()
        .split(',')
        .map(str::to_string)
        .collect();
    let rows = lines
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect();
    (head, rows)
}

fn col(head: &[String], name: &str) -> usize {
    head.iter()
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("no column {name} in {head:?}"))
}

#[test]
fn one_row_per_point_and_corner_and_an_all_corners_verdict() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "c.toml", &format!("{BASE}{CORNERS}"));
    let out = d.path().join("out");
    let a = run(&f, &out, &[]).success();
    let stdout = String::from_utf8_lossy(&a.get_output().stdout).to_string();
    assert!(stdout.contains("at all 6 corners"), "{stdout}");
    assert!(
        stdout.contains("limiting corners: accuracy mean"),
        "{stdout}"
    );

    let (head, rows) = csv(&out.join("points.csv"));
    assert_eq!(&head[..3], ["point", "competition.sink.w", "corner"]);
    assert_eq!(rows.len(), 2 * 6);
    // point = sweep point x corners + corner; the corner column is the corner's index.
    for (i, r) in rows.iter().enumerate() {
        assert_eq!(r[0].parse::<usize>().unwrap(), i);
        assert_eq!(r[2].parse::<f64>().unwrap() as usize, i % 6);
    }
    let (chead, crows) = csv(&out.join("chips.csv"));
    assert_eq!(chead[2], "corner");
    assert_eq!(crows.len(), 2 * 6 * 24);

    // corners.csv: one row per design point; it passes only when every corner row passes.
    let (khead, krows) = csv(&out.join("corners.csv"));
    assert_eq!(krows.len(), 2);
    let pass = col(&head, "pass");
    for (dp, k) in krows.iter().enumerate() {
        assert_eq!(k[col(&khead, "corners_total")], "6");
        let all = rows[dp * 6..dp * 6 + 6].iter().all(|r| r[pass] == "1");
        assert_eq!(k[col(&khead, "pass_all")], if all { "1" } else { "0" });
        // The limiting corner of the mean accuracy holds the lowest mean of the six.
        let acc = col(&head, "acc_mean");
        let lowest = rows[dp * 6..dp * 6 + 6]
            .iter()
            .map(|r| r[acc].parse::<f64>().unwrap())
            .fold(f64::INFINITY, f64::min);
        let v: f64 = k[col(&khead, "acc_mean_min")].parse().unwrap();
        approx::assert_abs_diff_eq!(v, lowest, epsilon = 1e-12);
    }
    let m = std::fs::read_to_string(out.join("manifest.json")).unwrap();
    assert!(m.contains("\"ss / 350 K\""), "{m}");
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("id=\"corners-answer\""));
    assert!(html.contains("Design answer at all 6 corners"));
    assert!(html.contains("per-corner-table"));
    assert!(html.contains("id=\"caution\""));
    assert!(html.contains("architecture-stage estimates"));
}

/// At the typical corner with no supply or temperature change the dies and results are those
/// of the same experiment without [corners] (same seed): the corners are paired with the plain
/// run, with paired and with independent dies.
#[test]
fn typical_corner_equals_a_run_without_corners() {
    let d = tempfile::tempdir().unwrap();
    let with = write(
        d.path(),
        "with.toml",
        &format!(
            "{BASE}[corners]\nvt0_sigma = \"15 mV\"\nbeta_sigma = 0.05\nprocess = [\"tt\", \"ss\"]\n"
        ),
    );
    let without = write(d.path(), "without.toml", BASE);
    for pairing in ["paired", "independent"] {
        let set = format!("population.pairing={pairing}");
        let (a, b) = (
            d.path().join(format!("a-{pairing}")),
            d.path().join(format!("b-{pairing}")),
        );
        run(&with, &a, &[&set]).success();
        run(&without, &b, &[&set]).success();
        let (ha, ra) = csv(&a.join("chips.csv"));
        let (hb, rb) = csv(&b.join("chips.csv"));
        let (acc_a, acc_b) = (col(&ha, "accuracy"), col(&hb, "accuracy"));
        let tt: Vec<&Vec<String>> = ra
            .iter()
            .filter(|r| r[2].parse::<f64>().unwrap() == 0.0)
            .collect();
        assert_eq!(tt.len(), rb.len());
        let mut differs = false;
        for (x, y) in tt.iter().zip(&rb) {
            let (x, y): (f64, f64) = (x[acc_a].parse().unwrap(), y[acc_b].parse().unwrap());
            approx::assert_abs_diff_eq!(x, y, epsilon = 1e-12);
        }
        // The slow corner is a different operating point for the same dies.
        for (x, y) in ra
            .iter()
            .filter(|r| r[2].parse::<f64>().unwrap() == 1.0)
            .zip(&rb)
        {
            differs |=
                (x[acc_a].parse::<f64>().unwrap() - y[acc_b].parse::<f64>().unwrap()).abs() > 1e-9;
        }
        assert!(differs, "{pairing}: the ss corner changed no die");
    }
}

/// The corners are part of the result key: a rerun resumes every (point, corner); a changed
/// corner list is refused (not mixed with the old results); `batch` reruns it.
#[test]
fn resume_and_batch_are_keyed_by_the_corners() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "c.toml", &format!("{BASE}{CORNERS}"));
    let out = d.path().join("out");
    run(&f, &out, &["population.chips=6"]).success();
    let again = run(&f, &out, &["population.chips=6"]).success();
    let s = String::from_utf8_lossy(&again.get_output().stdout).to_string();
    assert!(s.contains("(0 run now, 12 resumed)"), "{s}");
    let changed = write(
        d.path(),
        "c.toml",
        &format!("{BASE}{}", CORNERS.replace("\"ss\"]", "\"ss\", \"sf\"]")),
    );
    let e = run(&changed, &out, &["population.chips=6"]).failure();
    let err = String::from_utf8_lossy(&e.get_output().stderr).to_string();
    assert!(err.contains("different experiment"), "{err}");

    let root = d.path().join("batch");
    let batch = |file: &Path| {
        Command::cargo_bin("hardmax")
            .unwrap()
            .args([
                "batch",
                file.to_str().unwrap(),
                "--out-root",
                root.to_str().unwrap(),
            ])
            .args([
                "--set",
                "population.chips=6",
                "--threads",
                "2",
                "--no-report",
                "-q",
            ])
            .assert()
    };
    let first = String::from_utf8_lossy(&batch(&f).success().get_output().stdout).to_string();
    assert!(first.contains(" ran "), "{first}");
    assert!(root.join("iris-corners").join("corners.csv").exists());
    let second = String::from_utf8_lossy(&batch(&f).success().get_output().stdout).to_string();
    assert!(second.contains("up to date"), "{second}");
    // Another temperature corner: not up to date, and not mixed into the old folder.
    write(
        d.path(),
        "c.toml",
        &format!("{BASE}{CORNERS}").replace("\"350 K\"", "\"340 K\""),
    );
    let third = batch(&f).failure();
    let err = String::from_utf8_lossy(&third.get_output().stderr).to_string();
    assert!(err.contains("different experiment"), "{err}");
}

#[test]
fn unknown_corner_key_is_refused_with_key_and_line() {
    let d = tempfile::tempdir().unwrap();
    let f = write(
        d.path(),
        "c.toml",
        &format!("{BASE}{CORNERS}supply = [\"1.8 V\"]\n"),
    );
    let line = format!("{BASE}{CORNERS}").lines().count() + 1;
    let e = run(&f, &d.path().join("out"), &[]).failure();
    let err = String::from_utf8_lossy(&e.get_output().stderr).to_string();
    assert!(err.contains("`corners.supply`"), "{err}");
    assert!(err.contains(&format!("(line {line})")), "{err}");
    assert!(err.contains("Corner keys: vt0_sigma"), "{err}");
    // A corner key on the command line is refused, not ignored.
    let f = write(d.path(), "ok.toml", &format!("{BASE}{CORNERS}"));
    let e = run(&f, &d.path().join("out2"), &["corners.sigmas=2"]).failure();
    let err = String::from_utf8_lossy(&e.get_output().stderr).to_string();
    assert!(err.contains("cannot be set on the command line"), "{err}");
}

/// Shards of a corner run merge into the single run's tables, corners.csv included (work units
/// run over (point, corner, chip)).
#[test]
fn shards_of_a_corner_run_merge_exactly() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "c.toml", &format!("{BASE}{CORNERS}"));
    let single = d.path().join("single");
    run(&f, &single, &["population.chips=5"]).success();
    let mut parts = Vec::new();
    for k in 1..=3 {
        let o = d.path().join(format!("shard-{k}"));
        let mut c = Command::cargo_bin("hardmax").unwrap();
        c.args(["run", f.to_str().unwrap(), "--out", o.to_str().unwrap()])
            .args(["--set", "population.chips=5", "--threads", "1", "-q"])
            .args(["--shard", &format!("{k}/3")])
            .assert()
            .success();
        parts.push(o);
    }
    let merged = d.path().join("merged");
    let mut c = Command::cargo_bin("hardmax").unwrap();
    c.args(["merge", "--out", merged.to_str().unwrap()]);
    for p in &parts {
        c.arg(p);
    }
    c.assert().success();
    for t in ["points.csv", "chips.csv", "corners.csv"] {
        assert_eq!(
            std::fs::read_to_string(single.join(t)).unwrap(),
            std::fs::read_to_string(merged.join(t)).unwrap(),
            "{t}"
        );
    }
}

/// `hardmax stage --results` rebuilds a die of a corner run at its corner (the folder's
/// experiment.toml keeps the [corners] table, so its point numbers are the run's).
#[test]
fn stage_reads_a_die_of_a_corner_run() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "c.toml", &format!("{BASE}{CORNERS}"));
    let out = d.path().join("out");
    run(
        &f,
        &out,
        &["population.chips=3", "population.pairing=independent"],
    )
    .success();
    let stage = |point: &str| -> serde_json::Value {
        let o = Command::cargo_bin("hardmax")
            .unwrap()
            .args(["stage", "--format", "json", "--results"])
            .arg(&out)
            .args(["--point", point, "--chip", "1", "--sample", "0"])
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        serde_json::from_slice(&o.stdout).unwrap()
    };
    // Point 9 = design point 1 at corner 3 (ff / 350 K); point 7 = the same die at tt / 350 K.
    let (ff, tt) = (stage("9"), stage("7"));
    let t = ff["parameters"]["temperature [K]"].as_f64().unwrap();
    approx::assert_abs_diff_eq!(t, 350.0, epsilon = 1e-9);
    let vt0 = |v: &serde_json::Value| {
        v["parameters"]["device.A_0 (sink).vt0 [V]"]
            .as_f64()
            .unwrap()
    };
    // The same die's sink threshold, shifted by 3 x 15 mV at the fast corner.
    approx::assert_abs_diff_eq!(vt0(&tt) - vt0(&ff), 0.045, epsilon = 1e-9);
}

/// `hardmax budget` and `hardmax resolve` number the points of a corner experiment as a run's
/// points.csv does ((design point, corner) pairs), so a budget at point P is the budget at that
/// corner, not silently at nominal conditions.
#[test]
fn budget_and_resolve_number_points_with_their_corner() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "c.toml", &format!("{BASE}{CORNERS}"));
    let o = Command::cargo_bin("hardmax")
        .unwrap()
        .args(["resolve", f.to_str().unwrap(), "--points"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = String::from_utf8_lossy(&o.stdout);
    // 2 design points x 3 process corners x 2 temperatures.
    assert!(text.contains("12 sweep point(s)"), "{text}");
    assert!(text.contains("# point 3: "), "{text}");
    let line = text.lines().find(|l| l.starts_with("# point 3: ")).unwrap();
    assert!(line.contains("corner = ff / 350 K"), "{line}");
    let o = Command::cargo_bin("hardmax")
        .unwrap()
        .args([
            "budget",
            f.to_str().unwrap(),
            "--point",
            "3",
            "--chips",
            "3",
        ])
        .args(["--threads", "2", "--out"])
        .arg(d.path().join("budget"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let head = String::from_utf8_lossy(&o.stdout);
    assert!(head.contains("corner = ff / 350 K"), "{head}");
    let csv = std::fs::read_to_string(d.path().join("budget").join("budget.csv")).unwrap();
    assert!(!csv.is_empty());
    // Beyond the (point, corner) pairs: refused with the count.
    Command::cargo_bin("hardmax")
        .unwrap()
        .args([
            "budget",
            f.to_str().unwrap(),
            "--point",
            "12",
            "--chips",
            "3",
        ])
        .args(["--out"])
        .arg(d.path().join("budget2"))
        .assert()
        .failure()
        .stderr(predicates::str::contains("12"));
}
