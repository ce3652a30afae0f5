//! `hardmax render` through the binary (assert_cmd), on copies of the invented fixture in
//! tests/data/results_fixture.

use std::fs;
use std::path::{Path, PathBuf};

use assert_cmd::Command;
use predicates::prelude::*;

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

#[test]
fn render_writes_report_and_plots_and_says_where() {
    let d = copy_of("complete");
    Command::cargo_bin("hardmax")
        .unwrap()
        .arg("render")
        .arg(d.path())
        .assert()
        .success()
        .stdout(predicate::str::contains("report.html"))
        .stdout(predicate::str::contains(
            "plots/accuracy_vs_competition-bias_current.svg",
        ))
        .stdout(predicate::str::contains("not sign-off"));
    assert!(d.path().join("report.html").is_file());
    assert!(d.path().join("plots/confusion.svg").is_file());
}

#[test]
fn render_with_transfer_curve_and_point() {
    let d = copy_of("complete");
    Command::cargo_bin("hardmax")
        .unwrap()
        .args([
            "render",
            "--point",
            "3",
            "--x-unit",
            "A",
            "--x-label",
            "input current of output 0",
        ])
        .arg("--transfer")
        .arg(fixture("transfer_wta.csv"))
        .arg(d.path())
        .assert()
        .success()
        .stdout(predicate::str::contains("transfer_wta.svg"));
    let html = fs::read_to_string(d.path().join("report.html")).unwrap();
    assert!(html.contains("input current of output 0"));
    assert!(html.contains(r#"<tr class="focus" id="point-3">"#));
    // The stored curve stays: a plain re-render still draws it.
    fs::remove_file(d.path().join("plots/transfer_wta.svg")).unwrap();
    Command::cargo_bin("hardmax")
        .unwrap()
        .arg("render")
        .arg(d.path())
        .assert()
        .success();
    assert!(d.path().join("plots/transfer_wta.svg").is_file());
}

#[test]
fn render_of_partial_folder_says_so() {
    let d = copy_of("partial");
    Command::cargo_bin("hardmax")
        .unwrap()
        .arg("render")
        .arg(d.path())
        .assert()
        .success()
        .stdout(predicate::str::contains("partial run: 4 of 6"));
}

#[test]
fn render_errors_name_the_problem() {
    let d = copy_of("complete");
    fs::remove_file(d.path().join("points.csv")).unwrap();
    Command::cargo_bin("hardmax")
        .unwrap()
        .arg("render")
        .arg(d.path())
        .assert()
        .failure()
        .stderr(predicate::str::contains("points.csv"));

    let d = copy_of("complete");
    Command::cargo_bin("hardmax")
        .unwrap()
        .args(["render", "--point", "42"])
        .arg(d.path())
        .assert()
        .failure()
        .stderr(predicate::str::contains("sweep point 42"));

    // --transfer needs --x-label (clap).
    Command::cargo_bin("hardmax")
        .unwrap()
        .arg("render")
        .arg(d.path())
        .arg("--transfer")
        .arg(fixture("transfer_wta.csv"))
        .assert()
        .failure()
        .stderr(predicate::str::contains("--x-label"));
}
