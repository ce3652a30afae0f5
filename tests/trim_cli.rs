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
