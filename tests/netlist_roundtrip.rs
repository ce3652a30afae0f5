//! Round trip with an independent circuit simulator, ngspice: sampled dies of a results folder
//! are exported as SPICE netlists (`hardmax export-netlist`), solved by ngspice, and read back
//! (`hardmax compare-netlist`). With the behavioural EKV form ngspice solves the same model
//! equations (C. Enz, F. Krummenacher, E. Vittoz, Analog Integrated Circuits and Signal
//! Processing 8, 1995) with its own Newton solver, so node voltages must agree within 1 µV (the
//! tolerance of the stage cross-check in `competition_spice.rs`) for every exported sample.
//!
//! Without ngspice the live parts skip with a message, unless HARDMAX_CI is set (then they must
//! run). The data are the invented demo scenario of `experiments/quickstart.toml`.

use std::path::{Path, PathBuf};
use std::process::Command;

use assert_cmd::prelude::*;

/// Agreement required between our node voltages and ngspice's, V (as competition_spice.rs).
const TOLERANCE_V: f64 = 1e-6;

fn hardmax() -> Command {
    Command::cargo_bin("hardmax").expect("binary built")
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn ngspice_available() -> bool {
    let ok = Command::new("ngspice")
        .arg("--version")
        .output()
        .map(|o| o.status.success())
        .unwrap_or(false);
    if !ok {
        assert!(
            std::env::var_os("HARDMAX_CI").is_none(),
            "ngspice is not installed but HARDMAX_CI is set: CI must run the netlist round trip"
        );
        eprintln!("ngspice not on PATH: live netlist round trip skipped");
    }
    ok
}

/// A small population of the quickstart experiment (5 chips per point).
fn results(dir: &Path) -> PathBuf {
    let out = dir.join("qs");
    hardmax()
        .current_dir(root())
        .args(["run", "experiments/quickstart.toml", "-q", "--set"])
        .arg("population.chips=5")
        .arg("-o")
        .arg(&out)
        .assert()
        .success();
    out
}

fn export(results: &Path, point: usize, chip: u64, samples: &str, out: &Path, extra: &[&str]) {
    hardmax()
        .args(["export-netlist", "--results"])
        .arg(results)
        .args(["--point", &point.to_string(), "--chip", &chip.to_string()])
        .args(["--samples", samples, "--data-dir"])
        .arg(root().join("experiments"))
        .args(extra)
        .arg("-o")
        .arg(out)
        .assert()
        .success();
}

fn csv_rows(p: &Path) -> Vec<Vec<String>> {
    std::fs::read_to_string(p)
        .unwrap()
        .lines()
        .skip(1)
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect()
}

/// Three dies at three sweep points, ten test samples each: ngspice's operating points agree with
/// hardmax within 1 µV at every node, and every decision agrees.
#[test]
fn exported_dies_agree_with_ngspice() {
    if !ngspice_available() {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let res = results(tmp.path());
    for (point, chip) in [(0usize, 0u64), (7, 2), (14, 4)] {
        let cir = tmp.path().join(format!("die-p{point}-c{chip}.cir"));
        export(&res, point, chip, "0-9", &cir, &[]);
        hardmax()
            .arg("compare-netlist")
            .arg(cir.with_extension("hardmax.json"))
            .arg("--run-ngspice")
            .assert()
            .success();
        let rows = csv_rows(&cir.with_extension("comparison.csv"));
        assert_eq!(rows.len(), 10);
        for r in &rows {
            let dv: f64 = r[9].parse().unwrap();
            assert!(
                dv <= TOLERANCE_V,
                "point {point} chip {chip} sample {}: {dv} V",
                r[0]
            );
            assert_eq!(r[7], "true", "point {point} chip {chip} sample {}", r[0]);
        }
        // The section for the report lands in the results folder.
        assert!(res
            .join("spice")
            .join(format!("die-p{point}-c{chip}.comparison.md"))
            .exists());
    }
}

/// The die is rebuilt exactly from (seed, point, chip): hardmax's decisions on the exported die,
/// over the whole test split, give the accuracy the run recorded for that chip in chips.csv
/// (no per-decision noise in this experiment). A check of our own reconstruction, no outside
/// source needed beyond the run itself.
#[test]
fn exported_die_is_the_run_die() {
    let tmp = tempfile::tempdir().unwrap();
    let res = results(tmp.path());
    let (point, chip) = (7usize, 3u64);
    let cir = tmp.path().join("all.cir");
    export(&res, point, chip, "0-107", &cir, &["--plain"]);
    let rec: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(cir.with_extension("hardmax.json")).unwrap())
            .unwrap();
    let samples = rec["samples"].as_array().unwrap();
    assert_eq!(samples.len(), 108);
    let correct = samples
        .iter()
        .filter(|s| {
            s["hardmax"]["failure"].is_null()
                && !s["hardmax"]["ambiguous"].as_bool().unwrap()
                && s["hardmax"]["winner"] == s["true_class"]
        })
        .count();
    let chips = std::fs::read_to_string(res.join("chips.csv")).unwrap();
    let row: Vec<&str> = chips
        .lines()
        .map(|l| l.split(',').collect::<Vec<_>>())
        .find(|f| f[0] == point.to_string() && f[3] == chip.to_string())
        .unwrap();
    let acc: f64 = row[4].parse().unwrap();
    approx::assert_relative_eq!(correct as f64 / 108.0, acc, max_relative = 1e-12);
    // A plain deck has no ngspice block.
    let text = std::fs::read_to_string(&cir).unwrap();
    assert!(text.contains(".op") && !text.contains(".control"));
}

/// The general CSV path, and a simulator output with fewer samples than exported: the error
/// names the file and the line.
#[test]
fn csv_results_and_sample_count_errors() {
    let tmp = tempfile::tempdir().unwrap();
    let stage = tmp.path().join("s.toml");
    std::fs::write(
        &stage,
        "circuit = \"current_wta\"\ninputs = [\"10 nA\", \"12 nA\", \"9 nA\"]\nbias_current = \"20 nA\"\n",
    )
    .unwrap();
    let cir = tmp.path().join("s.cir");
    hardmax()
        .args(["export-netlist", "--stage"])
        .arg(&stage)
        .args([
            "--inputs",
            "10nA,12nA,9nA",
            "--inputs",
            "5nA,4nA,4.5nA",
            "-o",
        ])
        .arg(&cir)
        .assert()
        .success();
    let rec: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(cir.with_extension("hardmax.json")).unwrap())
            .unwrap();
    // A CSV written from hardmax's own answers compares with zero difference.
    let mut csv = String::from("sample,v(n0),v(n1),v(n2),v(nc),i(o0),i(o1),i(o2)\n");
    for (s, x) in rec["samples"].as_array().unwrap().iter().enumerate() {
        let h = &x["hardmax"];
        let v: Vec<String> = h["node_voltages"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.to_string())
            .collect();
        let o: Vec<String> = h["outputs"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.to_string())
            .collect();
        csv.push_str(&format!("{s},{},{}\n", v.join(","), o.join(",")));
    }
    let good = tmp.path().join("sim.csv");
    std::fs::write(&good, &csv).unwrap();
    hardmax()
        .arg("compare-netlist")
        .arg(cir.with_extension("hardmax.json"))
        .arg("--sim-output")
        .arg(&good)
        .assert()
        .success();
    let rows = csv_rows(&cir.with_extension("comparison.csv"));
    assert!(rows
        .iter()
        .all(|r| r[9].parse::<f64>().unwrap() <= 1e-15 && r[7] == "true"));
    // One sample fewer than exported.
    let short: String = csv.lines().take(2).map(|l| format!("{l}\n")).collect();
    let bad = tmp.path().join("short.csv");
    std::fs::write(&bad, short).unwrap();
    let out = hardmax()
        .arg("compare-netlist")
        .arg(cir.with_extension("hardmax.json"))
        .arg("--sim-output")
        .arg(&bad)
        .output()
        .unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("short.csv:2:") && err.contains("1 sample(s) but 2 were exported"),
        "{err}"
    );
}
