//! Hardware-aware training from the command line: bad options refused under the user's key and
//! line; a sweep over the trainer on the same dies writes which trainer made each point's
//! weights; the float points are unchanged by the hardware-aware ones.

use assert_cmd::Command;

fn write(dir: &std::path::Path, text: &str) -> std::path::PathBuf {
    let p = dir.join("exp.toml");
    std::fs::write(&p, text).unwrap();
    p
}

const BASE: &str = "[dataset]\nname = \"wine\"\n[competition]\nsink = { w = \"1 um\", l = \"2 um\" }\n[population]\nchips = 20\n";

fn refused(extra: &str) -> String {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), &format!("{BASE}{extra}"));
    let out = Command::cargo_bin("hardmax")
        .unwrap()
        .args(["run", f.to_str().unwrap(), "--out"])
        .arg(d.path().join("out"))
        .output()
        .unwrap();
    assert!(!out.status.success());
    String::from_utf8_lossy(&out.stderr).to_string()
}

/// Negative injection strengths, a learning rate of 0 and a switch other than 0/1 are refused
/// with the key and its line (bad input; the core's constructor decides, the config layer
/// names the key).
#[test]
fn bad_options_name_key_and_line() {
    let e = refused(
        "[training]\ntrainer = \"hardware_aware\"\n[training.hardware]\nweight_mismatch = -0.1\n",
    );
    assert!(e.contains("training.hardware.weight_mismatch"), "{e}");
    assert!(e.contains("line 10"), "{e}");
    let e = refused(
        "[training]\ntrainer = \"hardware_aware\"\n[training.hardware]\nlearning_rate = 0.0\n",
    );
    assert!(e.contains("training.hardware.learning_rate"), "{e}");
    assert!(e.contains("line 10"), "{e}");
    let e =
        refused("[training]\ntrainer = \"hardware_aware\"\n[training.hardware]\ncompetition_offset = -1.0\n");
    assert!(e.contains("training.hardware.competition_offset"), "{e}");
    let e = refused("[training]\ntrainer = \"analog\"\n");
    assert!(e.contains("training.trainer"), "{e}");
    let e = refused(
        "[training]\ntrainer = \"hardware_aware\"\n[weights]\nencoding = \"differential\"\n",
    );
    assert!(e.contains("shifted"), "{e}");
    // A used range below half a level step: every element rounds to the same level, so the
    // float weights' sign pattern (which class line gets more current) cannot be expressed.
    let e = refused(
        "[training]\ntrainer = \"hardware_aware\"\n[weights]\nlevels = 4\nrange_use = 0.1\n",
    );
    assert!(e.contains("weights.range_use"), "{e}");
    assert!(e.contains("sign"), "{e}");
    let e = refused(
        "[training]\ntrainer = \"hardware_aware\"\n[training.hardware]\nrounding = \"upwards\"\n",
    );
    assert!(e.contains("rounding"), "{e}");
}

/// A sweep over the trainer on paired dies: the manifest says which trainer made each point's
/// weights, the hardware-aware point reports its convergence, and the float point equals a run
/// with the float trainer alone (the hardware-aware point leaves it untouched).
#[test]
fn trainer_sweep_on_the_same_dies() {
    let d = tempfile::tempdir().unwrap();
    let f = write(
        d.path(),
        &format!(
            "{BASE}[sweep]\n[[sweep.axis]]\npath = \"training.trainer\"\nvalues = [\"float\", \"hardware_aware\"]\n"
        ),
    );
    let out = d.path().join("out");
    Command::cargo_bin("hardmax")
        .unwrap()
        .args(["run", f.to_str().unwrap(), "--no-report", "--out"])
        .arg(&out)
        .assert()
        .success();
    let m: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("manifest.json")).unwrap()).unwrap();
    assert_eq!(
        m["trainer"]["per_point"],
        serde_json::json!(["float", "hardware_aware"])
    );
    assert_eq!(m["trainer"]["hardware_aware"][0]["point"], 1);
    assert!(m["trainer"]["hardware_aware"][0]["converged"].is_boolean());
    let why = m["trainer"]["hardware_aware"][0]["termination"]
        .as_str()
        .unwrap();
    assert!(["plateau", "epoch_limit"].contains(&why), "{why}");
    assert!(m["trainer"]["hardware_aware"][0]["window_decrease"].is_number());
    let points = std::fs::read_to_string(out.join("points.csv")).unwrap();
    assert!(points.starts_with("point,training.trainer,"), "{points}");
    assert_eq!(
        std::fs::read_to_string(out.join("differences.csv"))
            .unwrap()
            .lines()
            .count(),
        2
    );

    let f2 = write(d.path(), BASE);
    let out2 = d.path().join("out2");
    Command::cargo_bin("hardmax")
        .unwrap()
        .args(["run", f2.to_str().unwrap(), "--no-report", "--out"])
        .arg(&out2)
        .assert()
        .success();
    let chips = std::fs::read_to_string(out.join("chips.csv")).unwrap();
    let alone = std::fs::read_to_string(out2.join("chips.csv")).unwrap();
    // Same dies, same float weights: point 0's per-chip accuracies equal the float-only run's.
    let acc = |t: &str, point_col: bool| -> Vec<String> {
        let header: Vec<&str> = t.lines().next().unwrap().split(',').collect();
        let a = header.iter().position(|h| *h == "accuracy").unwrap();
        t.lines()
            .skip(1)
            .filter(|l| {
                !point_col || l.split(',').nth(1) == Some("0.0") || l.split(',').nth(1) == Some("0")
            })
            .map(|l| l.split(',').nth(a).unwrap().to_string())
            .collect()
    };
    assert_eq!(acc(&chips, true), acc(&alone, false));
    let m2 = std::fs::read_to_string(out2.join("manifest.json")).unwrap();
    assert!(
        !m2.contains("\"trainer\""),
        "a float-only run keeps its manifest"
    );
}

/// A design with a hidden stage: the hidden layer is fixed (drawn from its seed), so the
/// hardware-aware trainer retrains the read-out on the hidden shares; the run completes, the
/// manifest records that training, and the float point (same dies) is unchanged by it.
#[test]
fn hidden_stage_readout_is_retrained() {
    let d = tempfile::tempdir().unwrap();
    let f = write(
        d.path(),
        "[dataset]\nname = \"iris\"\n[hidden]\nunits = 12\n[weights]\nlevels = 0\n\
         [competition]\nsink = { w = \"2 um\", l = \"2 um\" }\n[population]\nchips = 10\n\
         [sweep]\n[[sweep.axis]]\npath = \"training.trainer\"\nvalues = [\"float\", \"hardware_aware\"]\n",
    );
    let out = d.path().join("out");
    Command::cargo_bin("hardmax")
        .unwrap()
        .args(["run", f.to_str().unwrap(), "--no-report", "--out"])
        .arg(&out)
        .assert()
        .success();
    let m: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("manifest.json")).unwrap()).unwrap();
    assert_eq!(m["trainer"]["hardware_aware"][0]["point"], 1);
    assert_eq!(m["trainer"]["hardware_aware"][0]["epochs"], 60);
    let points = std::fs::read_to_string(out.join("points.csv")).unwrap();
    assert_eq!(points.lines().count(), 3, "{points}");
}

/// `training.hardware.train_hidden = true` trains the hidden stage with the read-out: run
/// against the same design without it (same seed and dies; iris, 12 hidden lines, continuous
/// elements, so both trainings minimise the same objective function), the manifest's trainer
/// record says the hidden stage was trained, and the joint run's final objective (no
/// injection, over the training split) is not above the read-out-only one (the read-out-only
/// weights are a point of the joint search space, and both start from the same weights). A
/// design with no hidden stage is refused under the key.
#[test]
fn train_hidden_is_recorded_and_not_worse_than_readout_only() {
    let d = tempfile::tempdir().unwrap();
    let run = |name: &str, extra: &str| {
        let f = d.path().join(format!("{name}.toml"));
        std::fs::write(
            &f,
            format!(
                "[dataset]\nname = \"iris\"\n[hidden]\nunits = 12\n[weights]\nlevels = 0\n\
                 [competition]\nsink = {{ w = \"2 um\", l = \"2 um\" }}\n[population]\nchips = 10\n\
                 [training]\ntrainer = \"hardware_aware\"\n{extra}"
            ),
        )
        .unwrap();
        let out = d.path().join(name);
        Command::cargo_bin("hardmax")
            .unwrap()
            .args(["run", f.to_str().unwrap(), "--no-report", "--out"])
            .arg(&out)
            .assert()
            .success();
        let m: serde_json::Value =
            serde_json::from_slice(&std::fs::read(out.join("manifest.json")).unwrap()).unwrap();
        m["trainer"]["hardware_aware"][0].clone()
    };
    let fixed = run("fixed", "");
    let joint = run("joint", "[training.hardware]\ntrain_hidden = true\n");
    assert!(fixed.get("hidden_trained").is_none(), "{fixed}");
    assert_eq!(joint["hidden_trained"], true, "{joint}");
    let (f, j) = (
        fixed["objective"].as_f64().unwrap(),
        joint["objective"].as_f64().unwrap(),
    );
    assert!(j <= f, "joint {j} vs read-out only {f}");

    let e = refused(
        "[training]\ntrainer = \"hardware_aware\"\n[training.hardware]\ntrain_hidden = true\n",
    );
    assert!(e.contains("training.hardware.train_hidden"), "{e}");
}
