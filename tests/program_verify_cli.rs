//! `[programming]` (program-and-verify of the weight elements) end to end: `hardmax run` on
//! wine (open dataset, datasets/PROVENANCE.md) with a large one-shot programming error; the
//! same dies programmed once and programmed-and-verified; the bad inputs named by their key.
//! The procedure's own checks (tolerance reached, geometric cycle count against erf from
//! statrs, cycle limit 1 = one-shot) are in `crates/hardmax-core/src/stages/weights/verify.rs`.

use std::path::Path;

use assert_cmd::Command;

fn write(dir: &Path, file: &str, programming: &str) -> std::path::PathBuf {
    let f = dir.join(file);
    std::fs::write(
        &f,
        format!(
            "name = \"wine-pv\"\n[dataset]\nname = \"wine\"\n\
             [weights]\nlevels = 16\nprogramming_error = 0.4\n\
             [population]\nchips = 24\n{programming}"
        ),
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

/// Column `name` of a CSV file: every data row's cell.
fn column(file: &Path, name: &str) -> Vec<String> {
    let t = std::fs::read_to_string(file).unwrap();
    let mut lines = t.lines();
    let head: Vec<&str> = lines.next().unwrap().split(',').collect();
    let i = head
        .iter()
        .position(|h| *h == name)
        .unwrap_or_else(|| panic!("no column {name} in {}", file.display()));
    lines
        .map(|l| l.split(',').nth(i).unwrap().to_string())
        .collect()
}

fn mean(v: &[String]) -> f64 {
    v.iter().map(|s| s.parse::<f64>().unwrap()).sum::<f64>() / v.len() as f64
}

const TABLE: &str = "[programming]\ntolerance = 0.01\nmax_cycles = 50\nread_noise = 0.001\n\
                     cycle_time = \"2 us\"\n";

#[test]
fn verify_off_or_one_cycle_is_one_shot_and_verify_helps() {
    let d = tempfile::tempdir().unwrap();
    let plain = write(d.path(), "plain.toml", "");
    let f = write(d.path(), "pv.toml", TABLE);
    let (none, off, one, on) = (
        d.path().join("none"),
        d.path().join("off"),
        d.path().join("one"),
        d.path().join("on"),
    );
    run(&plain, &none, &[]).success();
    run(&f, &off, &["programming.verify=false"]).success();
    run(&f, &one, &["programming.max_cycles=1"]).success();
    run(&f, &on, &[]).success();
    // Switched off: the tables are the one-shot run's, byte for byte, and the manifest has no
    // programming entry.
    for t in ["points.csv", "chips.csv", "confusion.csv"] {
        assert_eq!(
            std::fs::read(none.join(t)).unwrap(),
            std::fs::read(off.join(t)).unwrap(),
            "{t}"
        );
    }
    let m = std::fs::read_to_string(off.join("manifest.json")).unwrap();
    assert!(!m.contains("program_and_verify"), "{m}");
    // A cycle limit of 1 is one-shot programming exactly: the same accuracy on every die.
    assert_eq!(
        column(&none.join("chips.csv"), "accuracy"),
        column(&one.join("chips.csv"), "accuracy")
    );
    assert_eq!(
        column(&one.join("chips.csv"), "program_cycles"),
        column(&one.join("chips.csv"), "program_elements")
    );
    // Verified: more cycles than elements, fewer than the limit allows, and a better mean
    // accuracy on the same dies (rule of thumb: a 40 % programming error costs accuracy that a
    // 1 % verify tolerance wins back; common practice, no source).
    let elements: Vec<u64> = column(&on.join("chips.csv"), "program_elements")
        .iter()
        .map(|s| s.parse().unwrap())
        .collect();
    let cycles: Vec<u64> = column(&on.join("chips.csv"), "program_cycles")
        .iter()
        .map(|s| s.parse().unwrap())
        .collect();
    for (e, c) in elements.iter().zip(&cycles) {
        assert!(*c > *e && *c <= 50 * e, "{e} elements, {c} cycles");
    }
    let per = mean(&column(
        &on.join("points.csv"),
        "program_cycles_per_element",
    ));
    assert!(per > 1.0 && per < 50.0, "{per}");
    // Programming time = cycles x 2 us.
    let t = mean(&column(&on.join("points.csv"), "program_time_mean_s"));
    let c_mean = cycles.iter().sum::<u64>() as f64 / cycles.len() as f64;
    assert!(
        (t - 2e-6 * c_mean).abs() <= 1e-12 * t.max(1e-30) + 1e-15,
        "{t}"
    );
    let (a1, a2) = (
        mean(&column(&none.join("chips.csv"), "accuracy")),
        mean(&column(&on.join("chips.csv"), "accuracy")),
    );
    assert!(a2 > a1 + 0.01, "one-shot {a1}, verified {a2}");
    let m = std::fs::read_to_string(on.join("manifest.json")).unwrap();
    assert!(
        m.contains("program_and_verify") && m.contains("\"max_cycles\": 50"),
        "{m}"
    );
    let html = std::fs::read_to_string(on.join("report.html")).unwrap();
    assert!(html.contains("program-and-verify: accepted within 0.01"));
    let html = std::fs::read_to_string(none.join("report.html")).unwrap();
    assert!(!html.contains("program-and-verify"));
}

#[test]
fn bad_programming_settings_name_their_key() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "pv.toml", TABLE);
    for (set, key) in [
        ("programming.tolerance=0", "programming.tolerance"),
        ("programming.max_cycles=0", "programming.max_cycles"),
        ("programming.max_cycles=10001", "programming.max_cycles"),
        ("programming.read_noise=-0.1", "programming.read_noise"),
        ("programming.cycle_time=-1us", "programming.cycle_time"),
    ] {
        let a = run(&f, &d.path().join("bad"), &[set]).failure();
        let err = String::from_utf8_lossy(&a.get_output().stderr).to_string();
        assert!(err.contains(key), "{set}: {err}");
    }
    // A bad value in the file: the key and its line.
    let f = write(d.path(), "bad.toml", "[programming]\ntolerance = -0.01\n");
    let a = run(&f, &d.path().join("bad"), &[]).failure();
    let err = String::from_utf8_lossy(&a.get_output().stderr).to_string();
    assert!(
        err.contains("programming.tolerance") && err.contains("line 10"),
        "{err}"
    );
    // A subthreshold element is refused (its own verify option exists).
    let a = run(
        &f,
        &d.path().join("bad"),
        &["weights.element=subthreshold", "programming.tolerance=0.01"],
    )
    .failure();
    let err = String::from_utf8_lossy(&a.get_output().stderr).to_string();
    assert!(err.contains("weights.element"), "{err}");
}
