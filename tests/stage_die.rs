//! `hardmax stage --results`: a die a run sampled, put on the bench. The check is against the
//! run itself (its `chips.csv`): replaying every test sample of one chip through
//! `hardmax stage` must give exactly the chip's recorded number of correct and of ambiguous
//! decisions, for the plain and the hysteretic current-mode WTA (whose state carries from one
//! test sample to the next). Data: the invented demo scenario (datasets/demo/README.md).

use std::path::{Path, PathBuf};
use std::process::Command;

use assert_cmd::prelude::*;

fn hardmax() -> Command {
    Command::cargo_bin("hardmax").expect("binary built")
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A small experiment on the invented demo data: two sweep points, 3 chips, no per-decision
/// noise (a die's static state is all `hardmax stage` rebuilds).
fn experiment(dir: &Path, circuit: &str) -> PathBuf {
    let data = root().join("datasets/demo/hive_buzz_demo.csv");
    let extra = match circuit {
        "hysteretic_wta" => "feedback = 0.05\n",
        "hysteretic_wta_transient" => "feedback = 0.05\nevaluation = \"transient\"\n",
        // Top-2 of the 3 classes; the unit current defaults to the bias current.
        "k_winners" | "repeated_max" => "k = 2\n",
        "cascade" => "fan_in = 2\n",
        _ => "",
    };
    let circuit = circuit.trim_end_matches("_transient");
    let text = format!(
        r#"# Invented demo scenario (datasets/demo/README.md), for a test.
name = "die-{circuit}"
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
{extra}[population]
chips = 3
seed = 7
[target]
accuracy = 0.8
[[sweep.axis]]
path = "competition.gain"
values = [30, 300]
"#,
        data.display()
    );
    let f = dir.join(format!("{circuit}-{}.toml", extra.len()));
    std::fs::write(&f, text).unwrap();
    f
}

fn run(file: &Path, out: &Path) {
    hardmax()
        .args(["run", "-q", "--no-report"])
        .arg(file)
        .arg("-o")
        .arg(out)
        .assert()
        .success();
}

/// (accuracy, ambiguous, samples) of chip `chip` at point `point` from chips.csv.
fn recorded(out: &Path, point: usize, chip: u64) -> (f64, u64, u64) {
    let mut r = csv::Reader::from_path(out.join("chips.csv")).unwrap();
    let h = r.headers().unwrap().clone();
    let col = |name: &str| h.iter().position(|c| c == name).unwrap();
    for rec in r.records() {
        let rec = rec.unwrap();
        if rec[col("point")].parse::<usize>().unwrap() == point
            && rec[col("chip")].parse::<u64>().unwrap() == chip
        {
            return (
                rec[col("accuracy")].parse().unwrap(),
                rec[col("ambiguous")].parse().unwrap(),
                rec[col("samples")].parse().unwrap(),
            );
        }
    }
    panic!("no row for point {point}, chip {chip}");
}

fn stage_json(out: &Path, point: usize, chip: u64, sample: u64) -> serde_json::Value {
    let o = hardmax()
        .args(["stage", "--format", "json", "--results"])
        .arg(out)
        .args(["--point", &point.to_string(), "--chip", &chip.to_string()])
        .args(["--sample", &sample.to_string()])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_slice(&o.stdout).unwrap()
}

/// Every test sample of one chip through `hardmax stage`: the counts must equal the run's.
fn reproduces(circuit: &str, point: usize, chip: u64) {
    let tmp = tempfile::tempdir().unwrap();
    let f = experiment(tmp.path(), circuit);
    let out = tmp.path().join("res");
    run(&f, &out);
    let (acc, ambiguous, samples) = recorded(&out, point, chip);
    let mut correct = 0u64;
    let mut amb = 0u64;
    for s in 0..samples {
        let v = stage_json(&out, point, chip, s);
        let d = &v["decision"];
        let truth = v["die"]["true_class"].as_u64().unwrap();
        // The class the run scores: top-k circuits (k_winners, repeated_max) score the true
        // class when it is among the k winners (model notes §4.4), others the winner.
        let scored = v["die"]["scored_class"].as_u64().unwrap();
        if circuit == "current_wta" || circuit == "hysteretic_wta" || circuit == "cascade" {
            assert_eq!(scored, d["winner"].as_u64().unwrap());
        }
        if d["ambiguous"].as_bool().unwrap() {
            amb += 1;
        } else if scored == truth {
            correct += 1;
        }
        if circuit == "hysteretic_wta" {
            assert_eq!(v["die"]["replayed_samples"].as_u64().unwrap(), s);
        }
    }
    assert_eq!(amb, ambiguous, "ambiguous decisions of chip {chip}");
    // The run's accuracy is correct / samples (pipeline::ChipOutcome::accuracy): the count must
    // be the same integer.
    assert_eq!(
        correct,
        (acc * samples as f64).round() as u64,
        "correct decisions of chip {chip} (recorded accuracy {acc})"
    );
}

#[test]
fn loaded_die_reproduces_the_run_current_wta() {
    reproduces("current_wta", 1, 2);
}

#[test]
fn loaded_die_reproduces_the_run_hysteretic_wta() {
    reproduces("hysteretic_wta", 0, 1);
}

#[test]
fn loaded_die_reproduces_the_run_k_winners() {
    reproduces("k_winners", 1, 2);
}

#[test]
fn loaded_die_reproduces_the_run_cascade() {
    reproduces("cascade", 1, 1);
}

#[test]
fn loaded_die_reproduces_the_run_repeated_max() {
    reproduces("repeated_max", 0, 2);
}

/// A hysteretic die in a transient run: `hardmax stage --transient` on test sample S starts
/// from the state its samples 0..S-1 left (each a transient from the previous end state, as the
/// chip loop), so every decision equals the run's: the same counts of correct and ambiguous
/// decisions as chips.csv.
#[test]
fn loaded_die_reproduces_the_transient_run_hysteretic_wta() {
    let tmp = tempfile::tempdir().unwrap();
    let f = experiment(tmp.path(), "hysteretic_wta_transient");
    let out = tmp.path().join("res");
    run(&f, &out);
    let (point, chip) = (1, 0);
    let (acc, ambiguous, samples) = recorded(&out, point, chip);
    let (mut correct, mut amb) = (0u64, 0u64);
    for s in 0..samples {
        let o = hardmax()
            .args(["stage", "--transient", "--format", "json", "--results"])
            .arg(&out)
            .args(["--point", &point.to_string(), "--chip", &chip.to_string()])
            .args(["--sample", &s.to_string()])
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        let t = &v["transient"];
        assert_eq!(t["replayed_samples"].as_u64().unwrap(), s);
        if s > 0 {
            assert_eq!(t["start"].as_str().unwrap(), "replayed state");
        }
        let truth = v["die"]["true_class"].as_u64().unwrap();
        if t["ambiguous"].as_bool().unwrap() {
            amb += 1;
        } else if t["winner"].as_u64() == Some(truth) {
            correct += 1;
        }
    }
    assert_eq!(amb, ambiguous, "ambiguous transient decisions");
    assert_eq!(
        correct,
        (acc * samples as f64).round() as u64,
        "accuracy {acc}"
    );
}

/// Bad input: a chip index beyond the population, a point beyond the sweep, a test sample
/// beyond the split, an offset for a transistor the stage does not have, a changed experiment
/// file (the die would be another one), design flags with a die.
#[test]
fn die_errors() {
    let tmp = tempfile::tempdir().unwrap();
    let f = experiment(tmp.path(), "current_wta");
    let out = tmp.path().join("res");
    run(&f, &out);
    let err = |extra: &[&str]| -> String {
        let o = hardmax()
            .args(["stage", "--results"])
            .arg(&out)
            .args(extra)
            .output()
            .unwrap();
        assert!(!o.status.success());
        String::from_utf8_lossy(&o.stderr).into_owned()
    };
    let e = err(&["--chip", "3", "--sample", "0"]);
    assert!(e.contains("--chip 3") && e.contains("3 chip(s)"), "{e}");
    let e = err(&["--chip", "0", "--point", "2", "--sample", "0"]);
    assert!(
        e.contains("--point 2") && e.contains("2 sweep point(s)"),
        "{e}"
    );
    let e = err(&["--chip", "0", "--sample", "100000"]);
    assert!(e.contains("--sample 100000"), "{e}");
    let e = err(&["--chip", "0", "--sample", "0", "--offset", "C_9:vt0=1mV"]);
    assert!(
        e.contains("no transistor `C_9`") && e.contains("A_0..A_2"),
        "{e}"
    );
    let e = err(&["--chip", "0", "--sample", "0", "--bias-current", "1nA"]);
    assert!(e.contains("--bias-current"), "{e}");
    let e = err(&["--chip", "0"]);
    assert!(e.contains("--sample"), "{e}");
    // A changed experiment file: refused, not silently another die.
    let toml = out.join("experiment.toml");
    let text = std::fs::read_to_string(&toml).unwrap();
    std::fs::write(&toml, text.replace("seed = 7", "seed = 8")).unwrap();
    let e = err(&["--chip", "0", "--sample", "0"]);
    assert!(e.contains("manifest records experiment"), "{e}");
}

/// Offsets on a loaded die move its operating point as a threshold shift should: raising one
/// sink's threshold by 10 mV lowers the current its cell takes in (weak inversion: the sink
/// needs a higher V_C, Pelgrom/EKV model notes §3), so the node voltage V_k rises.
#[test]
fn offset_on_a_die_moves_its_node() {
    let tmp = tempfile::tempdir().unwrap();
    let f = experiment(tmp.path(), "current_wta");
    let out = tmp.path().join("res");
    run(&f, &out);
    let node = |extra: &[&str]| -> f64 {
        let o = hardmax()
            .args(["stage", "--format", "json", "--results"])
            .arg(&out)
            .args(["--chip", "0", "--sample", "0"])
            .args(extra)
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
        v["node_voltages_v"][0]["value"].as_f64().unwrap()
    };
    let base = node(&[]);
    let shifted = node(&["--offset", "A_0:vt0=10mV"]);
    assert!(shifted > base, "{base} -> {shifted}");
}

/// The hysteretic WTA in `hardmax stage`: CSV rows with the closed-form width (model notes
/// §4.5), a sweep up and down whose switching points differ (hysteresis) and agree with that
/// width within the sweep step plus 3 % (the tolerance of the core test, which derives it),
/// and a stage-file offset for a device the stage does not have refused.
#[test]
fn hysteretic_stage_command() {
    let file = root().join("experiments/stages/hysteretic-two-class.toml");
    let o = hardmax()
        .args(["stage", "--format", "csv", "--stage"])
        .arg(&file)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = String::from_utf8_lossy(&o.stdout);
    let width: f64 = text
        .lines()
        .find(|l| l.starts_with("hysteresis,width_closed_form,"))
        .and_then(|l| l.split(',').nth(2))
        .and_then(|v| v.parse().ok())
        .expect("a width row");
    assert!(width > 0.0);
    assert!(text.contains("offset,B_1,"), "{text}");
    let o = hardmax()
        .args(["stage", "--stage"])
        .arg(&file)
        .args([
            "--sweep",
            "diff",
            "--from=-400pA",
            "--to",
            "400pA",
            "--points",
            "161",
        ])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let csv = String::from_utf8_lossy(&o.stdout);
    assert!(csv.lines().next().unwrap().ends_with(",direction"));
    assert_eq!(csv.lines().filter(|l| l.ends_with(",up")).count(), 161);
    assert_eq!(csv.lines().filter(|l| l.ends_with(",down")).count(), 161);
    let err = String::from_utf8_lossy(&o.stderr);
    let at = |dir: &str| -> f64 {
        let l = err
            .lines()
            .find(|l| l.starts_with(&format!("{dir} sweep:")))
            .unwrap_or_else(|| panic!("{err}"));
        let v = l.rsplit("x = ").next().unwrap();
        let pa: f64 = v.trim_end_matches(" pA").trim().parse().unwrap();
        pa * 1e-12
    };
    let measured = at("up") - at("down");
    let step = 800e-12 / 160.0;
    assert!(
        (measured.abs() - width).abs() <= step + 0.03 * width,
        "sweep {measured:e}, closed form {width:e}"
    );
    // Offsets for a transistor the stage does not have.
    let tmp = tempfile::tempdir().unwrap();
    let bad = tmp.path().join("bad.toml");
    let t = std::fs::read_to_string(&file).unwrap();
    std::fs::write(&bad, t.replace("B_1 = {", "B_7 = {")).unwrap();
    let o = hardmax()
        .args(["stage", "--stage"])
        .arg(&bad)
        .output()
        .unwrap();
    assert!(!o.status.success());
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(
        e.contains("no transistor `B_7`") && e.contains("P_0, P_1") && e.contains("Q_0, Q_1"),
        "{e}"
    );
}
