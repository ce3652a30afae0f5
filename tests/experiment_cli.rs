//! The experiment runner through the binary: reproducibility across thread counts, resume after
//! a kill, batch runs, and every bad-input case of an experiment file (messages checked).

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

use assert_cmd::prelude::*;
use predicates::prelude::*;

fn hardmax() -> Command {
    Command::cargo_bin("hardmax").expect("binary built")
}

fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).expect("write experiment");
    p
}

const SMALL: &str = r#"
description = "iris, two bias currents (test)"
[dataset]
name = "iris"
[population]
chips = 24
seed = 5
[[sweep.axis]]
path = "competition.bias_current"
values = ["20 nA", "200 nA"]
"#;

fn read(p: &Path) -> Vec<u8> {
    std::fs::read(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

/// Same seed, 1 thread and 2 threads: byte-identical tables.
#[test]
fn thread_count_does_not_change_results() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(dir.path(), "small.toml", SMALL);
    for (t, out) in [("1", "a"), ("2", "b")] {
        hardmax()
            .args(["run", "--quiet", "--no-report", "--threads", t, "--out"])
            .arg(dir.path().join(out))
            .arg(&exp)
            .assert()
            .success();
    }
    for f in [
        "points.csv",
        "chips.csv",
        "confusion.csv",
        "experiment.toml",
    ] {
        assert!(
            read(&dir.path().join("a").join(f)) == read(&dir.path().join("b").join(f)),
            "{f} differs between 1 and 2 threads"
        );
    }
    // And the tables are not trivial: 2 points x 24 chips.
    let chips = String::from_utf8(read(&dir.path().join("a/chips.csv"))).unwrap();
    assert_eq!(chips.lines().count(), 1 + 2 * 24);
}

/// Kill a run part-way (SIGKILL), resume it, and compare with an uninterrupted run.
#[test]
fn killed_run_resumes_to_identical_files() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "resume.toml",
        r#"
[dataset]
name = "digits"
[population]
chips = 12
[[sweep.axis]]
path = "competition.gain"
values = [50, 100, 200, 400, 800, 1600]
"#,
    );
    let full = dir.path().join("full");
    hardmax()
        .args(["run", "--quiet", "--no-report", "--out"])
        .arg(&full)
        .arg(&exp)
        .assert()
        .success();

    let cut = dir.path().join("cut");
    let mut killed_mid_run = false;
    for _attempt in 0..3 {
        let _ = std::fs::remove_dir_all(&cut);
        let mut child = hardmax()
            .args(["run", "--quiet", "--no-report", "--threads", "1", "--out"])
            .arg(&cut)
            .arg(&exp)
            .spawn()
            .unwrap();
        let t0 = Instant::now();
        loop {
            let done = std::fs::read_dir(cut.join("points"))
                .map(|d| d.count())
                .unwrap_or(0);
            if done >= 1 || t0.elapsed() > Duration::from_secs(120) {
                break;
            }
            std::thread::sleep(Duration::from_millis(5));
        }
        let still_running = child.try_wait().unwrap().is_none();
        let _ = child.kill();
        let _ = child.wait();
        let done = std::fs::read_dir(cut.join("points"))
            .map(|d| d.count())
            .unwrap_or(0);
        if still_running && done < 6 {
            killed_mid_run = true;
            break;
        }
    }
    assert!(killed_mid_run, "could not interrupt the run part-way");
    let manifest = String::from_utf8(read(&cut.join("manifest.json"))).unwrap();
    assert!(manifest.contains("\"partial\""), "{manifest}");
    hardmax()
        .args(["run", "--no-report", "--out"])
        .arg(&cut)
        .arg(&exp)
        .assert()
        .success()
        .stdout(predicate::str::contains("resumed"));
    for f in ["points.csv", "chips.csv", "confusion.csv"] {
        assert!(
            read(&full.join(f)) == read(&cut.join(f)),
            "{f} differs after resume:\n{}\n---\n{}",
            String::from_utf8_lossy(&read(&full.join(f))),
            String::from_utf8_lossy(&read(&cut.join(f)))
        );
    }
    let manifest = String::from_utf8(read(&cut.join("manifest.json"))).unwrap();
    assert!(manifest.contains("\"complete\""), "{manifest}");
}

/// Batch: runs what is new, skips what is up to date, goes on past a failure, exits non-zero.
#[test]
fn batch_skips_up_to_date_and_reports_failures() {
    let dir = tempfile::tempdir().unwrap();
    let exps = dir.path().join("exps");
    std::fs::create_dir_all(&exps).unwrap();
    write(&exps, "a_good.toml", SMALL);
    write(
        &exps,
        "b_bad.toml",
        "[dataset]\nname = \"iris\"\n[population]\nchips = 0\n",
    );
    let root = dir.path().join("results");
    let run = || {
        let mut c = hardmax();
        c.args(["batch", "--quiet", "--no-report", "--out-root"])
            .arg(&root)
            .arg(&exps);
        c
    };
    run()
        .assert()
        .failure()
        .stdout(predicate::str::contains("ran").and(predicate::str::contains("FAILED")))
        .stderr(predicate::str::contains("1 of 2 experiments failed"));
    assert!(root.join("a_good/points.csv").exists());
    run()
        .assert()
        .failure()
        .stdout(predicate::str::contains("up to date"));
}

fn expect_error(dir: &Path, text: &str, needles: &[&str]) {
    let exp = write(dir, "bad.toml", text);
    let out = dir.join("out-bad");
    let assert = hardmax()
        .args(["run", "--quiet", "--no-report", "--out"])
        .arg(&out)
        .arg(&exp)
        .assert()
        .failure();
    let stderr = String::from_utf8_lossy(&assert.get_output().stderr).to_string();
    for n in needles {
        assert!(stderr.contains(n), "expected {n:?} in:\n{stderr}");
    }
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert!(!out.exists(), "a failing run created its output folder");
}

#[test]
fn bad_experiment_files_get_clear_errors() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // Unknown key, with the closest valid key suggested and the line.
    expect_error(
        d,
        "[dataset]\nname = \"iris\"\n[competition]\nbias_curent = \"10 nA\"\n",
        &[
            "competition.bias_curent",
            "line 4",
            "did you mean `bias_current`",
        ],
    );
    // A value with the wrong unit.
    expect_error(
        d,
        "[dataset]\nname = \"iris\"\n[competition]\nbias_current = \"10 nV\"\n",
        &["competition.bias_current", "10 nV", "current"],
    );
    // A sweep over a non-numeric path.
    expect_error(
        d,
        "[dataset]\nname = \"iris\"\n[[sweep.axis]]\npath = \"process.preset\"\nvalues = [1, 2]\n",
        &["process.preset", "only numeric parameters"],
    );
    // A sweep over an unknown path.
    expect_error(
        d,
        "[dataset]\nname = \"iris\"\n[[sweep.axis]]\npath = \"competition.bias_curent\"\nvalues = [1e-9]\n",
        &["competition.bias_curent", "did you mean `competition.bias_current`"],
    );
    // An empty sweep list.
    expect_error(
        d,
        "[dataset]\nname = \"iris\"\n[[sweep.axis]]\npath = \"competition.bias_current\"\nvalues = []\n",
        &["competition.bias_current", "empty"],
    );
    // Zero chips.
    expect_error(
        d,
        "[dataset]\nname = \"iris\"\n[population]\nchips = 0\n",
        &["population.chips", "at least 1 chip"],
    );
    // A dataset that does not exist (shipped name, then a file).
    expect_error(
        d,
        "[dataset]\nname = \"irsi\"\n",
        &["dataset.name", "did you mean `iris`"],
    );
    expect_error(
        d,
        "[dataset]\nfile = \"no-such-file.csv\"\n",
        &["no-such-file.csv"],
    );
    // Not TOML at all.
    expect_error(d, "[dataset\nname = 1\n", &["not valid TOML"]);
}

#[test]
fn unwritable_output_and_foreign_folders_are_refused_without_damage() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(dir.path(), "small.toml", SMALL);
    // Output "folder" that is a file: cannot be created.
    let file = dir.path().join("a-file");
    std::fs::write(&file, "keep me").unwrap();
    hardmax()
        .args(["run", "--quiet", "--no-report", "--out"])
        .arg(file.join("sub"))
        .arg(&exp)
        .assert()
        .failure()
        .stderr(predicate::str::contains("cannot be created or written"));
    assert_eq!(std::fs::read_to_string(&file).unwrap(), "keep me");
    // A folder holding someone else's files.
    let foreign = dir.path().join("mine");
    std::fs::create_dir_all(&foreign).unwrap();
    std::fs::write(foreign.join("notes.txt"), "keep").unwrap();
    hardmax()
        .args(["run", "--quiet", "--no-report", "--out"])
        .arg(&foreign)
        .arg(&exp)
        .assert()
        .failure()
        .stderr(predicate::str::contains("not a hardmax results folder"));
    assert_eq!(
        std::fs::read_to_string(foreign.join("notes.txt")).unwrap(),
        "keep"
    );
    // Results of another experiment are not overwritten by a different one.
    let out = dir.path().join("res");
    hardmax()
        .args(["run", "--quiet", "--no-report", "--out"])
        .arg(&out)
        .arg(&exp)
        .assert()
        .success();
    let before = read(&out.join("points.csv"));
    hardmax()
        .args([
            "run",
            "--quiet",
            "--no-report",
            "--set",
            "population.chips=3",
            "--out",
        ])
        .arg(&out)
        .arg(&exp)
        .assert()
        .failure()
        .stderr(predicate::str::contains("different experiment"));
    assert_eq!(read(&out.join("points.csv")), before);
}

#[test]
fn resolve_prints_every_default_and_overrides() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(dir.path(), "small.toml", SMALL);
    hardmax()
        .args(["resolve", "--points", "--set", "population.chips=7"])
        .arg(&exp)
        .assert()
        .success()
        .stdout(
            predicate::str::contains("chips = 7")
                .and(predicate::str::contains("a_vt"))
                .and(predicate::str::contains(
                    "# point 1: competition.bias_current = 200 nA",
                )),
        );
}

fn column(csv: &Path, name: &str) -> Vec<String> {
    let text = std::fs::read_to_string(csv).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let k = header.iter().position(|h| *h == name).unwrap();
    lines
        .map(|l| l.split(',').nth(k).unwrap_or("").to_string())
        .collect()
}

/// The transient evaluation settles to the DC operating point (DEVELOPERS.md model notes section 4.3: the
/// transient's final state equals the DC solution), so with noise off its decisions, and hence
/// the accuracy table, equal the DC run's; it also reports decision time and energy. Read out
/// far before the decision time, decisions are ambiguous (time-limited decisions).
#[test]
fn transient_runs_match_dc_and_report_time_and_energy() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "tr.toml",
        "[dataset]\nname = \"iris\"\n[competition]\nevaluation = \"transient\"\n[population]\nchips = 6\n",
    );
    let run = |out: &str, extra: &[&str]| {
        hardmax()
            .args(["run", "--quiet", "--out"])
            .arg(dir.path().join(out))
            .args(extra)
            .arg(&exp)
            .assert()
            .success();
        dir.path().join(out).join("points.csv")
    };
    let tr = run("tr", &[]);
    let dc = run("dc", &["--set", "competition.evaluation=dc"]);
    assert_eq!(column(&tr, "acc_mean"), column(&dc, "acc_mean"));
    let t: f64 = column(&tr, "decision_time_mean_s")[0].parse().unwrap();
    let e: f64 = column(&tr, "energy_mean_j")[0].parse().unwrap();
    assert!(t > 0.0 && t < 1e-3, "decision time {t}");
    assert!(e > 0.0 && e < 1e-9, "energy {e}");
    assert_eq!(column(&dc, "decision_time_mean_s")[0], "");
    // The report shows the decision-time figure for a transient run.
    assert!(dir.path().join("tr/report.html").exists());
    let early = run("early", &["--set", "competition.read_time=\"1 ns\""]);
    let amb: f64 = column(&early, "ambiguous_frac")[0].parse().unwrap();
    assert!(amb > 0.5, "ambiguous share at a 1 ns read-out: {amb}");
}

/// A given hidden layer (CSV: one row per unit, weights then bias) is used instead of a drawn
/// one; a malformed file is refused with its line and column, before anything is written.
#[test]
fn given_hidden_layer_is_used_and_checked() {
    let dir = tempfile::tempdir().unwrap();
    // Invented weights for the 4 iris features, 3 hidden units.
    std::fs::write(
        dir.path().join("hidden.csv"),
        "1,0,0,0,0\n0,0,1,0,0\n0,0,0,1,0.1\n",
    )
    .unwrap();
    let exp = write(
        dir.path(),
        "given.toml",
        "[dataset]\nname = \"iris\"\n[hidden]\nunits = 3\nweights_file = \"hidden.csv\"\n\
         [competition]\ncircuit = \"argmax\"\n[population]\nchips = 3\n",
    );
    hardmax()
        .args(["run", "--quiet", "--no-report", "--out"])
        .arg(dir.path().join("ok"))
        .arg(&exp)
        .assert()
        .success();
    let ideal: f64 = column(&dir.path().join("ok/points.csv"), "ideal_acc")[0]
        .parse()
        .unwrap();
    // Petal length and width carry most of iris's class information (Fisher 1936): a read-out
    // on these hidden lines classifies far above chance (1/3).
    assert!(ideal > 0.6, "ideal accuracy {ideal}");
    std::fs::write(dir.path().join("hidden.csv"), "1,0,0,0,0\n0,zero,1,0,0\n").unwrap();
    hardmax()
        .args(["run", "--quiet", "--no-report", "--out"])
        .arg(dir.path().join("bad"))
        .arg(&exp)
        .assert()
        .failure()
        .stderr(predicate::str::contains("line 2, column 2"));
    assert!(!dir.path().join("bad").exists());
}
