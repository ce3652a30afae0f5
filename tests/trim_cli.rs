//! `[trim]` end to end: `hardmax run` on iris (open dataset, datasets/PROVENANCE.md) with small
//! WTA transistors, the same dies untrimmed and trimmed, and the bad inputs the issue names
//! (trim bits of 0 or above 16, a negative range). The trim's own checks against the
//! mismatch-free accuracy are in `crates/hardmax-core/src/pipeline/trim.rs`.

use std::path::Path;

use assert_cmd::Command;

fn write(dir: &Path) -> std::path::PathBuf {
    let f = dir.join("iris-trim.toml");
    std::fs::write(
        &f,
        "name = \"iris-trim\"\n[dataset]\nname = \"iris\"\n\
         [competition]\nsink = { w = \"0.3 um\", l = \"0.5 um\" }\noutput = { w = \"0.3 um\", l = \"0.5 um\" }\n\
         [population]\nchips = 30\n\
         [trim]\nbits = 8\nrange = 0.8\nmismatch = false\n",
    )
    .unwrap();
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

/// Mean accuracy of the first point of a results folder (`points.csv`, column by name).
fn acc_mean(out: &Path) -> f64 {
    let t = std::fs::read_to_string(out.join("points.csv")).unwrap();
    let mut lines = t.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    let row: Vec<&str> = lines.next().unwrap().split(',').collect();
    let i = head.iter().position(|h| *h == "acc_mean").unwrap();
    row[i].parse().unwrap()
}

#[test]
fn trimmed_dies_beat_the_same_dies_untrimmed() {
    // Rule of thumb (common practice, no source): nulling each line's mismatch with an 8-bit
    // trim raises the mean accuracy of dies limited by competition mismatch.
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path());
    let off = d.path().join("off");
    let on = d.path().join("on");
    run(&f, &off, &["trim.enabled=false"]).success();
    run(&f, &on, &[]).success();
    let (a, b) = (acc_mean(&off), acc_mean(&on));
    assert!(b > a + 0.02, "untrimmed {a}, trimmed {b}");
}

#[test]
fn bad_trim_settings_name_their_key() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path());
    for (set, key) in [
        ("trim.bits=0", "trim.bits"),
        ("trim.bits=17", "trim.bits"),
        ("trim.range=-0.5", "trim.range"),
    ] {
        let a = run(&f, &d.path().join("bad"), &[set]).failure();
        let err = String::from_utf8_lossy(&a.get_output().stderr).to_string();
        assert!(
            err.contains(key) && err.contains("out of range"),
            "{set}: {err}"
        );
    }
}

/// The chip rows of `chips.csv` from the `chip` column on (the point and axis columns left
/// out, so a swept run and a run without a sweep compare), for point `point`.
fn chip_rows(out: &Path, point: &str) -> Vec<String> {
    let t = std::fs::read_to_string(out.join("chips.csv")).unwrap();
    let mut lines = t.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    let chip = head.iter().position(|h| *h == "chip").unwrap();
    lines
        .filter(|l| l.split(',').next() == Some(point))
        .map(|l| l.split(',').skip(chip).collect::<Vec<_>>().join(","))
        .collect()
}

const PLAIN: &str = "name = \"iris-plain\"\n[dataset]\nname = \"iris\"\n\
     [competition]\nsink = { w = \"0.3 um\", l = \"0.5 um\" }\noutput = { w = \"0.3 um\", l = \"0.5 um\" }\n\
     [population]\nchips = 16\n";

#[test]
fn the_sweeps_untrimmed_point_is_the_run_without_trim() {
    // Paired dies (DESIGN.md §11): the point with trim.enabled = false must give, die for die,
    // exactly the per-chip results of the same experiment without [trim] (the trim draws from
    // streams of its own). Also a bits axis: every point is trimmed, the untrimmed run differs.
    let d = tempfile::tempdir().unwrap();
    let plain = d.path().join("plain.toml");
    std::fs::write(&plain, PLAIN).unwrap();
    let swept = d.path().join("swept.toml");
    std::fs::write(
        &swept,
        format!(
            "{PLAIN}[trim]\nbits = 8\nrange = 0.8\na_vt = \"5 mV um\"\n\
             [[sweep.axis]]\npath = \"trim.enabled\"\nvalues = [false, true]\n"
        ),
    )
    .unwrap();
    let (a, b) = (d.path().join("a"), d.path().join("b"));
    run(&plain, &a, &[]).success();
    run(&swept, &b, &[]).success();
    let base = chip_rows(&a, "0");
    assert_eq!(base.len(), 16);
    assert_eq!(chip_rows(&b, "0"), base);
    assert_ne!(chip_rows(&b, "1"), base, "the trimmed point must differ");
    let points = std::fs::read_to_string(b.join("points.csv")).unwrap();
    assert!(points.starts_with("point,trim.enabled,"), "{points}");
    // The report names the before/after comparison.
    let html = std::fs::read_to_string(b.join("report.html")).unwrap();
    assert!(html.contains("Before and after trim"), "no trim section");
}

#[test]
fn a_switch_axis_takes_booleans_only() {
    let d = tempfile::tempdir().unwrap();
    let f = d.path().join("bad.toml");
    std::fs::write(
        &f,
        format!("{PLAIN}[trim]\n[[sweep.axis]]\npath = \"trim.enabled\"\nvalues = [0, 1]\n"),
    )
    .unwrap();
    let a = run(&f, &d.path().join("o"), &[]).failure();
    let err = String::from_utf8_lossy(&a.get_output().stderr).to_string();
    assert!(
        err.contains("trim.enabled") && err.contains("booleans"),
        "{err}"
    );
}

#[test]
fn bad_new_trim_settings_name_their_key() {
    // Negative threshold mismatch, a calibration subset larger than the training split (iris:
    // 150 rows, 70 % for training = 105), nothing to trim.
    let d = tempfile::tempdir().unwrap();
    let f = d.path().join("t.toml");
    std::fs::write(
        &f,
        format!("{PLAIN}[trim]\nbits = 6\nrange = 0.8\ncolumns = true\n"),
    )
    .unwrap();
    for (set, key, what) in [
        ("trim.a_vt=\"-5 mV um\"", "trim.a_vt", "out of range"),
        (
            "trim.calibration_samples=100000",
            "trim.calibration_samples",
            "training split",
        ),
        (
            "trim.calibration_samples=0",
            "trim.calibration_samples",
            "training split",
        ),
        ("trim.lines=false", "trim.columns", ""),
    ] {
        let mut c = Command::cargo_bin("hardmax").unwrap();
        c.args(["run", f.to_str().unwrap(), "--out"])
            .arg(d.path().join("bad"))
            .args(["--threads", "2", "--set", set]);
        if set == "trim.lines=false" {
            // Column trim alone is valid (argmax needs no line DACs).
            c.args(["--set", "competition.circuit=\"argmax\""])
                .assert()
                .success();
            continue;
        }
        let a = c.assert().failure();
        let err = String::from_utf8_lossy(&a.get_output().stderr).to_string();
        assert!(err.contains(key) && err.contains(what), "{set}: {err}");
    }
    let a = run(
        &f,
        &d.path().join("bad2"),
        &["trim.lines=false", "trim.columns=false"],
    )
    .failure();
    let err = String::from_utf8_lossy(&a.get_output().stderr).to_string();
    assert!(err.contains("trim.lines"), "{err}");
}

#[test]
fn budget_and_netlist_export_honour_the_trim() {
    // `hardmax budget` trims every variant's dies and adds the row `trim` (all on, trim off);
    // `hardmax export-netlist` exports the trimmed die: its line gains in comment lines and in
    // the input currents (a ratio against the untrimmed die's, which must equal those gains).
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path());
    let out = d.path().join("budget");
    Command::cargo_bin("hardmax")
        .unwrap()
        .args([
            "budget",
            f.to_str().unwrap(),
            "--chips",
            "6",
            "--threads",
            "2",
        ])
        .arg("--out")
        .arg(&out)
        .assert()
        .success();
    let csv = std::fs::read_to_string(out.join("budget.csv")).unwrap();
    assert!(csv.lines().any(|l| l.contains(",trim,")), "{csv}");
    // Netlists of chip 1 of a trimmed and of an untrimmed run (same die).
    let (on, off) = (d.path().join("on"), d.path().join("off"));
    run(&f, &on, &["population.chips=3"]).success();
    run(&f, &off, &["population.chips=3", "trim.enabled=false"]).success();
    let export = |dir: &Path, name: &str| -> String {
        let cir = d.path().join(name);
        Command::cargo_bin("hardmax")
            .unwrap()
            .args(["export-netlist", "--results"])
            .arg(dir)
            .args(["--chip", "1", "--samples", "0", "--out"])
            .arg(&cir)
            .assert()
            .success();
        std::fs::read_to_string(cir).unwrap()
    };
    let (a, b) = (export(&on, "on.cir"), export(&off, "off.cir"));
    let gains: Vec<f64> = a
        .lines()
        .find_map(|l| l.strip_prefix("* trim line gains (competition line 0..): "))
        .expect("trim comment")
        .split(' ')
        .map(|x| x.parse().unwrap())
        .collect();
    assert!(!b.contains("trim line gains"));
    // The input current sources of sample 0 (`I_S0_k 0 node DC value`), in line order.
    let currents = |t: &str| -> Vec<f64> {
        t.lines()
            .filter(|l| l.starts_with("I_S0_"))
            .filter_map(|l| l.split_whitespace().nth(4)?.parse().ok())
            .collect()
    };
    let (ia, ib) = (currents(&a), currents(&b));
    assert_eq!(ia.len(), gains.len(), "{a}");
    for ((x, y), g) in ia.iter().zip(&ib).zip(&gains) {
        assert!((x / y / g - 1.0).abs() < 1e-6, "{x} / {y} vs gain {g}");
    }
}
