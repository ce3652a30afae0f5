//! No silent wrong result, through the binary: input files are part of a results folder's
//! identity, dimensioned keys need units, a class missing from the test split is refused,
//! invalid transient options are refused at load, `--set` on a swept key replaces the axis,
//! killed runs leave folders the same command resumes, Ctrl-C says what was kept, and messages
//! carry no internal names or float noise.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use assert_cmd::prelude::*;
use predicates::prelude::*;

fn hardmax() -> Command {
    Command::cargo_bin("hardmax").expect("binary built")
}

fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).expect("write file");
    p
}

/// An invented three-class dataset (two features), `per_class` samples per class; class `c`
/// sits around (c, 2c) so a linear classifier separates it.
fn csv(per_class: &[usize]) -> String {
    let mut s = String::from("x,y,label\n");
    for (c, &n) in per_class.iter().enumerate() {
        for i in 0..n {
            let d = i as f64 * 0.01;
            s.push_str(&format!("{},{},k{c}\n", c as f64 + d, 2.0 * c as f64 - d));
        }
    }
    s
}

const CSV_EXPERIMENT: &str = r#"
[dataset]
file = "data.csv"
[population]
chips = 4
"#;

fn run_in(exp: &Path, out: &Path) -> assert_cmd::assert::Assert {
    hardmax()
        .args(["run", "--quiet", "--no-report", "--out"])
        .arg(out)
        .arg(exp)
        .assert()
}

/// Item: stale results after an input file changes. Run, edit the CSV, rerun: refused, naming
/// the file; `batch` does not call it up to date; `--fresh` starts over.
#[test]
fn edited_dataset_is_not_resumed() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "data.csv", &csv(&[10, 10, 10]));
    let exp = write(dir.path(), "e.toml", CSV_EXPERIMENT);
    let out = dir.path().join("out");
    run_in(&exp, &out).success();
    let manifest = std::fs::read_to_string(out.join("manifest.json")).unwrap();
    assert!(manifest.contains("\"inputs\""), "{manifest}");
    assert!(manifest.contains("data.csv"), "{manifest}");
    assert!(manifest.contains("\"sha256\""), "{manifest}");
    // Unchanged: resumes.
    run_in(&exp, &out).success();
    // Edited (one value): refused, naming the file.
    write(
        dir.path(),
        "data.csv",
        &csv(&[10, 10, 10]).replacen("0,0,k0", "0.5,0,k0", 1),
    );
    run_in(&exp, &out)
        .failure()
        .stderr(predicate::str::contains("data.csv"))
        .stderr(predicate::str::contains("different version"));
    // batch: not up to date (it tries to run and is refused the same way).
    let root = dir.path().join("root");
    let exps = dir.path().join("exps");
    std::fs::create_dir_all(&exps).unwrap();
    write(&exps, "data.csv", &csv(&[10, 10, 10]));
    let bexp = write(&exps, "b.toml", CSV_EXPERIMENT);
    hardmax()
        .args(["batch", "--quiet", "--no-report", "--out-root"])
        .arg(&root)
        .arg(&bexp)
        .assert()
        .success();
    hardmax()
        .args(["batch", "--quiet", "--no-report", "--out-root"])
        .arg(&root)
        .arg(&bexp)
        .assert()
        .success()
        .stdout(predicate::str::contains("up to date"));
    write(&exps, "data.csv", &csv(&[10, 10, 11]));
    hardmax()
        .args(["batch", "--quiet", "--no-report", "--out-root"])
        .arg(&root)
        .arg(&bexp)
        .assert()
        .failure()
        .stdout(predicate::str::contains("up to date").not())
        .stderr(predicate::str::contains("data.csv"));
    // --fresh starts over with the new file.
    hardmax()
        .args(["run", "--quiet", "--no-report", "--fresh", "--out"])
        .arg(&out)
        .arg(&exp)
        .assert()
        .success();
}

/// Item: a plain number for a dimensioned key is refused (experiment file, `--set`, stage file,
/// stage flags); dimensionless keys keep plain numbers.
#[test]
fn dimensioned_keys_need_units_everywhere() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "t.toml",
        "[dataset]\nname = \"iris\"\n[conditions]\ntemperature = 27\n",
    );
    hardmax()
        .arg("resolve")
        .arg(&exp)
        .assert()
        .failure()
        .stderr(predicate::str::contains(
            "key `conditions.temperature`: 27 has no unit: write \"27 degC\" or \"300.15 K\"",
        ))
        .stderr(predicate::str::contains("line 4"));
    let ok = write(dir.path(), "ok.toml", "[dataset]\nname = \"iris\"\n");
    hardmax()
        .arg("resolve")
        .arg(&ok)
        .args(["--set", "competition.bias_current=1e-7"])
        .assert()
        .failure()
        .stderr(predicate::str::contains(
            "command line: `--set competition.bias_current=1e-7`",
        ))
        .stderr(predicate::str::contains("1e-7 has no unit"))
        .stderr(predicate::str::contains("\"100 nA\""))
        .stderr(predicate::str::contains("ok.toml").not());
    // Dimensionless keys: plain numbers are fine.
    hardmax()
        .arg("resolve")
        .arg(&ok)
        .args(["--set", "process.mismatch_scale=0.5"])
        .assert()
        .success();
    let stage = write(
        dir.path(),
        "s.toml",
        "inputs = [\"10 nA\", \"12 nA\"]\ntemperature = 300\n",
    );
    hardmax()
        .args(["stage", "--stage"])
        .arg(&stage)
        .assert()
        .failure()
        .stderr(predicate::str::contains("300 has no unit"));
    hardmax()
        .args(["stage", "--inputs", "10nA,12nA", "--bias", "1e-7"])
        .assert()
        .failure()
        .stderr(predicate::str::contains("--bias"))
        .stderr(predicate::str::contains("has no unit"));
}

/// Item: physically odd but legal values are warned about, printed and recorded in the manifest.
#[test]
fn odd_values_warn_and_are_recorded() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "w.toml",
        "[dataset]\nname = \"iris\"\n[population]\nchips = 2\n[conditions]\ntemperature = \"250 degC\"\n[process]\nvdd = \"6 V\"\n[competition]\nbias_current = \"1 mA\"\n",
    );
    let out = dir.path().join("out");
    hardmax()
        .args(["run", "--out"])
        .arg(&out)
        .arg(&exp)
        .assert()
        .success()
        .stderr(predicate::str::contains(
            "warning: conditions.temperature = 250 degC",
        ))
        // Core messages name core quantities, not a config key the user does not have.
        .stderr(predicate::str::contains("bias.current").not());
    // The report shows them near its header, before any number.
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    let at = html
        .find("id=\"warnings\"")
        .expect("warnings block in the report");
    assert!(at < html.find("id=\"headline\"").unwrap_or(usize::MAX));
    assert!(
        html.contains("process.vdd = 6 V"),
        "report lacks the supply warning"
    );
    let m: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("manifest.json")).unwrap()).unwrap();
    let w: Vec<String> = m["warnings"]
        .as_array()
        .expect("warnings list")
        .iter()
        .map(|x| x.as_str().unwrap_or("").to_string())
        .collect();
    assert!(
        w.iter().any(|x| x.contains("outside -60..200 degC")),
        "{w:?}"
    );
    assert!(w.iter().any(|x| x.contains("process.vdd = 6 V")), "{w:?}");
    assert!(w.iter().any(|x| x.contains("strong inversion")), "{w:?}");
    // A plain run has none.
    let plain = write(dir.path(), "p.toml", "[dataset]\nname = \"iris\"\n");
    hardmax()
        .arg("resolve")
        .arg(&plain)
        .assert()
        .success()
        .stdout(predicate::str::contains("warning").not());
}

/// Item: a class with too few samples to reach the test split is refused, naming the class,
/// its count and the fix; with `dataset.allow_untested_classes = true` it is a recorded warning.
#[test]
fn class_missing_from_test_split() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "data.csv", &csv(&[10, 10, 1]));
    let exp = write(dir.path(), "e.toml", CSV_EXPERIMENT);
    run_in(&exp, &dir.path().join("a"))
        .failure()
        .stderr(predicate::str::contains("class `k2` has 1 sample(s)"))
        .stderr(predicate::str::contains("raise the test fraction"))
        .stderr(predicate::str::contains("allow_untested_classes"));
    let allowed = write(
        dir.path(),
        "allowed.toml",
        &CSV_EXPERIMENT.replace(
            "file = \"data.csv\"",
            "file = \"data.csv\"\nallow_untested_classes = true",
        ),
    );
    let out = dir.path().join("b");
    run_in(&allowed, &out).success();
    let manifest = std::fs::read_to_string(out.join("manifest.json")).unwrap();
    assert!(
        manifest.contains("class `k2` (1 sample(s)) has no sample in the test split"),
        "{manifest}"
    );
}

/// Item: invalid transient options are refused when the experiment loads, naming the key.
#[test]
fn invalid_transient_options_fail_resolve() {
    let dir = tempfile::tempdir().unwrap();
    for (text, key, shown) in [
        ("read_time = \"-1 ns\"", "competition.read_time", "-1 ns"),
        ("read_time = \"0 s\"", "competition.read_time", "0 s"),
        (
            "node_capacitance = \"-1 fF\"",
            "competition.node_capacitance",
            "-1",
        ),
        (
            "bias_current = \"-10 nA\"",
            "competition.bias_current",
            "-10 nA",
        ),
    ] {
        let exp = write(
            dir.path(),
            "tr.toml",
            &format!(
                "[dataset]\nname = \"iris\"\n[competition]\nevaluation = \"transient\"\n{text}\n"
            ),
        );
        hardmax()
            .arg("resolve")
            .arg(&exp)
            .assert()
            .failure()
            .stderr(predicate::str::contains(format!("key `{key}`")))
            .stderr(predicate::str::contains(shown))
            .stderr(predicate::str::contains("bias.current").not())
            .stderr(predicate::str::contains("0.0000").not());
    }
}

/// Item: `--set` on a swept key replaces that axis with the one value (shown by
/// `resolve --points`), and a run has a single point.
#[test]
fn set_on_swept_key_replaces_the_axis() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "s.toml",
        "[dataset]\nname = \"iris\"\n[population]\nchips = 2\n[[sweep.axis]]\npath = \"competition.gain\"\nvalues = [10, 100, 1000]\n[[sweep.axis]]\npath = \"competition.bias_current\"\nvalues = [\"10 nA\", \"100 nA\"]\n",
    );
    hardmax()
        .arg("resolve")
        .arg(&exp)
        .args(["--points", "--set", "competition.gain=300"])
        .assert()
        .success()
        .stdout(predicate::str::contains(
            "replaces the sweep axis `competition.gain`",
        ))
        .stdout(predicate::str::contains("2 sweep point(s)"))
        .stdout(predicate::str::contains("gain = 300.0"))
        .stdout(predicate::str::contains(
            "# point 1: competition.bias_current = 100 nA",
        ));
    let out = dir.path().join("o");
    hardmax()
        .args([
            "run",
            "--quiet",
            "--no-report",
            "--set",
            "competition.gain=300",
            "--out",
        ])
        .arg(&out)
        .arg(&exp)
        .assert()
        .success();
    let points = std::fs::read_to_string(out.join("points.csv")).unwrap();
    assert_eq!(points.lines().count(), 3, "{points}");
    assert!(!points
        .lines()
        .next()
        .unwrap_or("")
        .contains("competition.gain"));
}

/// Item: a run killed during its very first write leaves a folder the same command starts
/// over in; stale temporary files of gone writers are removed when a run starts there.
#[test]
fn killed_first_write_and_stale_temps() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "k.toml",
        "[dataset]\nname = \"iris\"\n[population]\nchips = 2\n",
    );
    let out = dir.path().join("out");
    std::fs::create_dir_all(out.join("points")).unwrap();
    // What a kill between creating the folder and renaming the stamp leaves behind.
    write(&out, ".experiment.hash.99999999.tmp", "0f");
    run_in(&exp, &out).success();
    assert!(!out.join(".experiment.hash.99999999.tmp").exists());
    std::fs::create_dir_all(out.join("plots")).unwrap();
    let a = write(&out, ".points.csv.99999999.tmp", "x");
    let b = write(&out.join("plots"), ".accuracy.svg.99999999.tmp", "x");
    run_in(&exp, &out).success();
    assert!(!a.exists() && !b.exists());
}

/// Item: Ctrl-C (SIGINT) during a run keeps the finished points, says how many and that the
/// same command resumes; the same command then finishes the run.
#[cfg(unix)]
#[test]
fn sigint_keeps_points_and_says_how_to_resume() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "c.toml",
        "[dataset]\nname = \"digits\"\n[population]\nchips = 40\n[[sweep.axis]]\npath = \"competition.gain\"\nvalues = [50, 100, 200, 400, 800, 1600, 3200, 6400]\n",
    );
    let out = dir.path().join("out");
    // The test hook holds the run after its first saved point until the signal arrives, so the
    // signal certainly lands mid-run (no race with a fast machine finishing all 8 points).
    let child = hardmax()
        .args(["run", "--no-report", "--threads", "1", "--out"])
        .arg(&out)
        .arg(&exp)
        .env("HARDMAX_TEST_HOLD_AFTER_POINT", "300")
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let t0 = Instant::now();
    while std::fs::read_dir(out.join("points"))
        .map(|d| d.count())
        .unwrap_or(0)
        < 1
        && t0.elapsed() < Duration::from_secs(300)
    {
        std::thread::sleep(Duration::from_millis(10));
    }
    let status = Command::new("kill")
        .args(["-INT", &child.id().to_string()])
        .status()
        .unwrap();
    assert!(status.success());
    let output = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&output.stderr);
    let kept = std::fs::read_dir(out.join("points")).unwrap().count();
    // The signal landed while the run was held after its first point: exactly that one is kept.
    assert_eq!(kept, 1, "{stderr}");
    assert_eq!(output.status.code(), Some(130), "{stderr}");
    assert!(
        stderr.contains(&format!(
            "interrupted: {kept} of 8 sweep points are finished and kept"
        )),
        "{stderr}"
    );
    assert!(
        stderr.contains("run the same command again to resume"),
        "{stderr}"
    );
    hardmax()
        .args(["run", "--no-report", "--threads", "1", "--out"])
        .arg(&out)
        .arg(&exp)
        .assert()
        .success()
        .stdout(predicate::str::contains(format!("{kept} resumed")));
}

/// Item: messages without internal names or float noise.
#[test]
fn messages_name_user_words() {
    let dir = tempfile::tempdir().unwrap();
    let no_dataset = write(dir.path(), "n.toml", "name = \"x\"\n");
    hardmax()
        .arg("resolve")
        .arg(&no_dataset)
        .assert()
        .failure()
        .stderr(predicate::str::contains(
            "key `dataset`: the experiment needs a [dataset] section",
        ))
        .stderr(predicate::str::contains("missing field").not());
    let neg = write(
        dir.path(),
        "u.toml",
        "[dataset]\nname = \"iris\"\n[population]\nchips = -1\n",
    );
    hardmax()
        .arg("resolve")
        .arg(&neg)
        .assert()
        .failure()
        .stderr(predicate::str::contains("expected a whole number"))
        .stderr(predicate::str::contains("u64").not());
    let ok = write(dir.path(), "ok.toml", "[dataset]\nname = \"iris\"\n");
    hardmax()
        .arg("resolve")
        .arg(&ok)
        .args(["--set", "competition.bias_current=10 na"])
        .assert()
        .failure()
        .stderr(predicate::str::contains("did you mean \"nA\"?"))
        .stderr(predicate::str::contains("command line: `--set"));
}

/// Item: one vocabulary across file formats: stage files spell keys and values as experiment
/// files do (`current_wta`, `bias_current`, `node_capacitance`); the old spellings get an error
/// that gives the new one.
#[test]
fn stage_files_use_the_experiment_vocabulary() {
    let dir = tempfile::tempdir().unwrap();
    let good = write(
        dir.path(),
        "g.toml",
        "circuit = \"current_wta\"\ninputs = [\"10 nA\", \"12 nA\"]\nbias_current = \"40 nA\"\nnode_capacitance = \"50 fF\"\n",
    );
    hardmax()
        .args(["stage", "--stage"])
        .arg(&good)
        .assert()
        .success()
        .stdout(predicate::str::contains("bias_current"))
        .stdout(predicate::str::contains("EarlyVoltagePerLength").not());
    for (old, new) in [
        ("circuit = \"current-wta\"", "\"current_wta\""),
        ("bias = \"40 nA\"", "`bias_current`"),
        ("input_capacitance = \"50 fF\"", "`node_capacitance`"),
    ] {
        let f = write(
            dir.path(),
            "o.toml",
            &format!("inputs = [\"10 nA\", \"12 nA\"]\n{old}\n"),
        );
        hardmax()
            .args(["stage", "--stage"])
            .arg(&f)
            .assert()
            .failure()
            .stderr(predicate::str::contains(new))
            .stderr(predicate::str::contains("experiment files"));
    }
}

/// Item: a CSV separated by `;` or tabs gets a hint about the separator; a gain of 0 on the
/// stage command says so in the user's words (no `inf`, no eta).
#[test]
fn separator_hint_and_zero_gain() {
    let dir = tempfile::tempdir().unwrap();
    for (name, sep) in [("semi.csv", ";"), ("tab.csv", "\t")] {
        write(dir.path(), name, &csv(&[10, 10, 10]).replace(',', sep));
        let exp = write(
            dir.path(),
            "e.toml",
            &format!("[dataset]\nfile = \"{name}\"\n"),
        );
        run_in(&exp, &dir.path().join("o"))
            .failure()
            .stderr(predicate::str::contains("no label column"))
            .stderr(predicate::str::contains(
                "write the file with `,` between values",
            ));
    }
    hardmax()
        .args(["stage", "--inputs", "10nA,12nA", "--gain", "0"])
        .assert()
        .failure()
        .stderr(predicate::str::contains("gain = inf").not())
        .stderr(predicate::str::contains("must be a positive number"));
}

/// Item: sweep points are described without rounding a designer's value away ("-40 degC" is
/// 233.15 K, not "233.2 K").
#[test]
fn points_keep_their_digits() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "t.toml",
        "[dataset]\nname = \"iris\"\n[[sweep.axis]]\npath = \"conditions.temperature\"\nvalues = [\"-40 degC\", \"27 degC\"]\n",
    );
    hardmax()
        .args(["resolve", "--points"])
        .arg(&exp)
        .assert()
        .success()
        .stdout(predicate::str::contains(
            "# point 0: conditions.temperature = 233.15 K",
        ))
        .stdout(predicate::str::contains("300.15 K"));
}

/// Item: `resolve --points` without a sweep says so instead of an empty `# point 0:` line, and
/// resolved dimensionless floats print without a long run of zeros (`kf = 1e-25`).
#[test]
fn resolve_without_sweep_and_tiny_floats() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(dir.path(), "t.toml", "[dataset]\nname = \"iris\"\n");
    let out = hardmax()
        .args(["resolve", "--points"])
        .arg(&exp)
        .assert()
        .success()
        .get_output()
        .stdout
        .clone();
    let text = String::from_utf8_lossy(&out);
    assert!(
        text.contains("# point 0: the experiment as resolved above (no sweep axis)"),
        "{text}"
    );
    assert!(
        !text.lines().any(|l| l.trim_end() == "# point 0:"),
        "{text}"
    );
    assert!(text.contains("kf = 1e-25"), "{text}");
    assert!(!text.contains("0.0000000"), "{text}");
}

/// Item: the report header (the manifest's competition description) shows a swept size as its
/// range over the sweep, not sweep point 0's value as if it were the design.
#[test]
fn swept_size_shows_as_range_in_the_header() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "w.toml",
        "[dataset]\nname = \"iris\"\n[population]\nchips = 2\n[[sweep.axis]]\npath = \"competition.sink.w\"\nvalues = [\"1 um\", \"8 um\"]\n",
    );
    let out = dir.path().join("out");
    hardmax()
        .args(["run", "--quiet", "--out"])
        .arg(&out)
        .arg(&exp)
        .assert()
        .success();
    let m: serde_json::Value =
        serde_json::from_slice(&std::fs::read(out.join("manifest.json")).unwrap()).unwrap();
    let c = m["competition"].as_str().unwrap();
    assert!(c.contains("sink 1 µm ... 8 µm (swept)"), "{c}");
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("sink 1 µm ... 8 µm (swept)"), "report header");
}
