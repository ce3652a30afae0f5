//! A k-winners die picked from an experiment's results folder, exported by `hardmax
//! export-netlist` and solved by an independent circuit simulator, ngspice (`hardmax
//! compare-netlist --run-ngspice`). The behavioural form carries the model's own equations (EKV
//! drain current, C. Enz, F. Krummenacher, E. Vittoz, Analog Integrated Circuits and Signal
//! Processing 8, 1995; the k-winners line and limiter equations of DEVELOPERS.md §4.5), so
//! ngspice's own Newton solve must land within 1 µV of hardmax's node voltages (the tolerance of
//! `kwta_spice.rs` and `netlist_roundtrip.rs`). The export adds `.nodeset` lines (hardmax's
//! answer rounded to 1 mV) as `kwta_spice.rs` does. Without ngspice the live part skips with a
//! message, unless HARDMAX_CI is set. Data: the invented demo scenario
//! (datasets/demo/README.md).

use std::path::{Path, PathBuf};
use std::process::Command;

use assert_cmd::prelude::*;

mod spice_support;
use spice_support::ngspice_available;

const TOLERANCE_V: f64 = 1e-6;

fn hardmax() -> Command {
    Command::cargo_bin("hardmax").expect("binary built")
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A small run of `circuit` on the invented demo data (3 classes), 3 chips, one point.
fn run(dir: &Path, circuit: &str, extra: &str) -> PathBuf {
    let data = root().join("datasets/demo/hive_buzz_demo.csv");
    let text = format!(
        r#"# Invented demo scenario (datasets/demo/README.md), for a test.
name = "export-{circuit}"
[dataset]
file = "{}"
test_fraction = 0.1
[process]
preset = "generic-180nm"
[input]
dac_bits = 6
full_scale_current = "5 nA"
[weights]
element = "linear"
levels = 16
programming_error = 0.02
[competition]
circuit = "{circuit}"
bias_current = "5 nA"
gain = 300
{extra}
[population]
chips = 3
seed = 11
[target]
accuracy = 0.8
"#,
        data.display()
    );
    let f = dir.join(format!("{circuit}.toml"));
    std::fs::write(&f, text).unwrap();
    let out = dir.join(format!("res-{circuit}"));
    hardmax()
        .args(["run", "-q", "--no-report"])
        .arg(&f)
        .arg("-o")
        .arg(&out)
        .assert()
        .success();
    out
}

/// Two dies of a k = 2 (of 3) k-winners run, five test samples each: ngspice's node voltages
/// within 1 µV of hardmax's at every node, every decision the same, and the deck is the
/// k-winners one (limiter function, `.nodeset` start).
#[test]
fn exported_k_winners_die_agrees_with_ngspice() {
    let tmp = tempfile::tempdir().unwrap();
    let res = run(tmp.path(), "k_winners", "k = 2");
    for chip in [0u64, 2] {
        let cir = tmp.path().join(format!("kw-c{chip}.cir"));
        hardmax()
            .args(["export-netlist", "--results"])
            .arg(&res)
            .args(["--chip", &chip.to_string(), "--samples", "0-4", "-o"])
            .arg(&cir)
            .assert()
            .success();
        let text = std::fs::read_to_string(&cir).unwrap();
        assert!(text.contains(".func klim("), "not a k-winners deck");
        assert_eq!(text.matches(".nodeset ").count(), 5);
        let rec: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(cir.with_extension("hardmax.json")).unwrap(),
        )
        .unwrap();
        assert_eq!(rec["stage"], "k-winners WTA");
        if !ngspice_available("k-winners export cross-check") {
            return;
        }
        hardmax()
            .arg("compare-netlist")
            .arg(cir.with_extension("hardmax.json"))
            .arg("--run-ngspice")
            .assert()
            .success();
        let rows: Vec<Vec<String>> = std::fs::read_to_string(cir.with_extension("comparison.csv"))
            .unwrap()
            .lines()
            .skip(1)
            .map(|l| l.split(',').map(str::to_string).collect())
            .collect();
        assert_eq!(rows.len(), 5);
        for r in &rows {
            let dv: f64 = r[9].parse().unwrap();
            assert!(dv <= TOLERANCE_V, "chip {chip} sample {}: {dv} V", r[0]);
            assert_eq!(r[7], "true", "chip {chip} sample {}", r[0]);
        }
    }
}

/// A cascade die has no netlist form yet: the export says so (and which circuits it has)
/// instead of writing a wrong deck.
#[test]
fn cascade_export_is_refused_with_a_reason() {
    let tmp = tempfile::tempdir().unwrap();
    let res = run(tmp.path(), "cascade", "fan_in = 2");
    let o = hardmax()
        .args(["export-netlist", "--results"])
        .arg(&res)
        .args(["--chip", "0", "--samples", "0", "-o"])
        .arg(tmp.path().join("c.cir"))
        .output()
        .unwrap();
    assert!(!o.status.success());
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(
        e.contains("WTA cascade has no netlist export") && e.contains("k_winners"),
        "{e}"
    );
}
