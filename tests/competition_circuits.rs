//! The k-winners WTA, the WTA cascade and ranking by repeated maximum through the binary, on the
//! open digits dataset (UCI optical digits, datasets/PROVENANCE.md): the comparison experiment
//! runs, records its text sweep axis and says top-k and padding in its descriptions; bad keys are
//! refused naming the key.

use std::path::Path;
use std::process::Command;

use assert_cmd::prelude::*;
use predicates::prelude::*;

fn hardmax() -> Command {
    Command::cargo_bin("hardmax").expect("binary built")
}

fn experiment() -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("experiments/digits-circuits.toml")
}

/// `experiments/digits-circuits.toml` with 2 dies: every circuit runs on the same dies; the
/// manifest carries the axis's texts and each point's description (top-2 for the k circuits,
/// and the report names the axis's texts.
#[test]
fn comparison_experiment_runs_with_text_axis() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("res");
    hardmax()
        .args(["run", "--out"])
        .arg(&out)
        .arg(experiment())
        .args(["--set", "population.chips=2"])
        .assert()
        .success()
        .stdout(predicate::str::contains("5 points (5 run now"));
    let m: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("manifest.json")).unwrap()).unwrap();
    let p = &m["sweep"]["parameters"][0];
    assert_eq!(p["path"], "competition.circuit");
    assert_eq!(
        p["labels"],
        serde_json::json!([
            "current_wta",
            "hysteretic_wta",
            "cascade",
            "k_winners",
            "repeated_max"
        ])
    );
    let comp = m["competition"].to_string();
    assert!(comp.contains("top-2 accuracy"), "{comp}");
    let points = std::fs::read_to_string(out.join("points.csv")).unwrap();
    assert_eq!(points.lines().count(), 6, "{points}");
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("<code>repeated_max</code>"));
}

/// A fan-in that does not divide the classes is padded and said so; fan-in below 2, k outside
/// 1..N-1 and a text axis value that is not a circuit are refused with their key.
#[test]
fn padding_notice_and_bad_keys() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("pad");
    let file = dir.path().join("pad.toml");
    std::fs::write(
        &file,
        "[dataset]\nname = \"digits\"\n[competition]\ncircuit = \"cascade\"\nfan_in = 4\n\
         [population]\nchips = 1\n",
    )
    .unwrap();
    hardmax()
        .args(["run", "--out"])
        .arg(&out)
        .arg(&file)
        .assert()
        .success();
    let m = std::fs::read_to_string(out.join("manifest.json")).unwrap();
    assert!(
        m.contains(
            "fan-in 4, 2 levels (4+4+2 then 3), padded: fan-in 4 does not divide the lines, \
             2 of 12 slots unused"
        ),
        "{m}"
    );
    hardmax()
        .args(["resolve"])
        .arg(experiment())
        .args(["--set", "competition.fan_in=1"])
        .assert()
        .failure()
        .stderr(predicate::str::contains("competition.fan_in"));
    hardmax()
        .args(["resolve"])
        .arg(experiment())
        .args(["--set", "competition.k=0"])
        .assert()
        .failure()
        .stderr(predicate::str::contains("competition.k"));
    // k = 10 with 10 classes: refused when the point is set up, naming k.
    hardmax()
        .args(["run", "--out"])
        .arg(dir.path().join("k10"))
        .arg(experiment())
        .args(["--set", "population.chips=1", "--set", "competition.k=10"])
        .assert()
        .failure()
        .stderr(predicate::str::contains("k"))
        .stderr(predicate::str::contains("N - 1"));
}
