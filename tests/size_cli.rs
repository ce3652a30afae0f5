//! `hardmax size`: the command end to end on a small invented-target iris search, its files,
//! and every bad input the issue names (empty or inverted range, a target the ideal classifier
//! cannot meet, too few dies for the yield, an unknown key). The search logic itself is checked
//! against the analytic Pelgrom answer (normal quantile from statrs) in
//! `crates/hardmax-core/src/pipeline/sizing.rs`.

use std::path::Path;

use assert_cmd::Command;

/// An iris experiment (open dataset, datasets/PROVENANCE.md) with a [search] table; `extra`
/// is appended to the `[search]` dimension table.
fn write(dir: &Path, target: &str, chips: u64, from: &str, to: &str) -> std::path::PathBuf {
    let f = dir.join("iris-size.toml");
    std::fs::write(
        &f,
        format!(
            "name = \"iris-size\"\n[dataset]\nname = \"iris\"\n\
             [competition]\nsink = {{ w = \"1 um\", l = \"1 um\" }}\noutput = {{ w = \"1 um\", l = \"1 um\" }}\n\
             [population]\nchips = {chips}\n\
             [target]\n{target}\n\
             [search]\ncost = \"competition_area\"\nresolution = 0.2\n\
             [[search.dimension]]\nname = \"wta_w\"\npaths = [\"competition.sink.w\", \"competition.output.w\"]\n\
             from = \"{from}\"\nto = \"{to}\"\n"
        ),
    )
    .unwrap();
    f
}

fn size(f: &Path, out: &Path) -> assert_cmd::assert::Assert {
    Command::cargo_bin("hardmax")
        .unwrap()
        .args(["size", f.to_str().unwrap(), "--out", out.to_str().unwrap()])
        .args(["--threads", "2"])
        .assert()
}

#[test]
fn search_writes_its_answer_trace_figure_and_report() {
    let d = tempfile::tempdir().unwrap();
    let f = write(
        d.path(),
        "accuracy = 0.8\nyield = 0.8",
        40,
        "0.1 um",
        "20 um",
    );
    let out = d.path().join("out");
    let a = size(&f, &out).success();
    let stdout = String::from_utf8(a.get_output().stdout.clone()).unwrap();
    assert!(stdout.contains("status: "), "{stdout}");
    assert!(stdout.contains(hardmax::CAUTION), "{stdout}");
    for name in [
        "search.csv",
        "front.csv",
        "size.svg",
        "size.html",
        "answer.txt",
    ] {
        assert!(out.join(name).is_file(), "{name}");
    }
    let html = std::fs::read_to_string(out.join("size.html")).unwrap();
    assert!(html.contains("<svg") && html.contains("sizing-search"));
    let trace = std::fs::read_to_string(out.join("search.csv")).unwrap();
    let rows: Vec<Vec<&str>> = trace
        .lines()
        .skip(1)
        .map(|l| l.split(',').collect())
        .collect();
    // Never extrapolate: every candidate inside 0.1 um .. 20 um.
    for r in &rows {
        let w: f64 = r[2].parse().unwrap();
        assert!(
            (0.1e-6 * (1.0 - 1e-12)..=20e-6 * (1.0 + 1e-12)).contains(&w),
            "{w}"
        );
    }
    // Search steps share seed 1 (paired dies); verification uses another seed.
    assert!(rows
        .iter()
        .filter(|r| r[1] != "verify")
        .all(|r| r[3] == "1"));
    let verify: Vec<&Vec<&str>> = rows.iter().filter(|r| r[1] == "verify").collect();
    if !verify.is_empty() {
        assert!(verify.iter().all(|r| r[3] == "2"));
        // A verification that did not pass is said in the answer.
        if verify.last().unwrap()[9] == "0" {
            assert!(stdout.contains("FAILED VERIFICATION"), "{stdout}");
        }
    } else {
        assert!(stdout.contains("NOT MET"), "{stdout}");
    }
}

#[test]
fn inverted_range_is_refused() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "accuracy = 0.8\nyield = 0.8", 40, "8 um", "2 um");
    let a = size(&f, &d.path().join("o")).failure();
    let err = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    assert!(
        err.contains("empty or inverted") && err.contains("wta_w"),
        "{err}"
    );
    let f = write(d.path(), "accuracy = 0.8\nyield = 0.8", 40, "2 um", "2 um");
    let a = size(&f, &d.path().join("o")).failure();
    let err = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    assert!(err.contains("empty or inverted"), "{err}");
}

#[test]
fn a_target_the_ideal_classifier_misses_is_refused_before_searching() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "accuracy = 1.0\nyield = 0.8", 40, "1 um", "8 um");
    let out = d.path().join("o");
    let a = size(&f, &out).failure();
    let err = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    assert!(
        err.contains("ideal classifier") && err.contains("target.accuracy"),
        "{err}"
    );
    assert!(!out.join("search.csv").exists());
}

#[test]
fn too_few_dies_for_the_yield_is_refused() {
    // 10 of 10 dies: Wilson lower bound 10 / (10 + 1.96^2) = 0.72 < 0.95 (Wilson 1927).
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "accuracy = 0.8\nyield = 0.95", 10, "1 um", "8 um");
    let a = size(&f, &d.path().join("o")).failure();
    let err = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    // n / (n + z^2) >= 0.95 first holds at n = 73 for z = 1.959964.
    assert!(err.contains("population.chips to at least 73"), "{err}");
}

#[test]
fn unknown_key_and_missing_search_are_refused() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "accuracy = 0.8\nyield = 0.8", 40, "1 um", "8 um");
    let text = std::fs::read_to_string(&f)
        .unwrap()
        .replace("competition.sink.w", "competition.snk.w");
    std::fs::write(&f, text).unwrap();
    let a = size(&f, &d.path().join("o")).failure();
    let err = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    assert!(
        err.contains("competition.snk.w") && err.contains("not a key"),
        "{err}"
    );
    let g = d.path().join("plain.toml");
    std::fs::write(&g, "[dataset]\nname = \"iris\"\n").unwrap();
    let a = size(&g, &d.path().join("o")).failure();
    let err = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    assert!(err.contains("no [search] table"), "{err}");
}

/// Corners from the file: tt, ff, ss as stated sigma shifts.
const CORNERS: &str = "[corners]\nvt0_sigma = \"15 mV\"\nbeta_sigma = 0.05\nsigmas = 3\n\
                       process = [\"tt\", \"ff\", \"ss\", \"fs\", \"sf\"]\n";

/// The fast corner gives more drain current at the same gate voltage than typical, the slow
/// corner less, for NMOS and PMOS, and the cross corners move each polarity its own way
/// (common practice, no source).
#[test]
fn fast_corner_gives_more_current_and_slow_less() {
    use hardmax::device::{MosMismatch, Polarity, Transistor};
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "accuracy = 0.8\nyield = 0.8", 40, "1 um", "8 um");
    let text = format!("{}{CORNERS}", std::fs::read_to_string(&f).unwrap());
    std::fs::write(&f, &text).unwrap();
    let resolved = hardmax::experiment::config::load_str(&text, &f, &[]).unwrap();
    let corners = hardmax::experiment::sizing::parse_corners(&text, &f, &resolved).unwrap();
    let names: Vec<&str> = corners.iter().map(|c| c.name.as_str()).collect();
    assert_eq!(names, ["tt", "ff", "ss", "fs", "sf"]);
    let current = |name: &str, pol: Polarity| {
        let c = corners.iter().find(|c| c.name == name).unwrap();
        let r = hardmax::experiment::config::load_str(&text, &f, &c.overrides).unwrap();
        let p = hardmax::experiment::build::process(&r.at_point[0]).unwrap();
        let t = Transistor {
            polarity: pol,
            w: 2e-6,
            l: 1e-6,
        };
        // Gate 0.6 V, drain 1 V, source 0, 300 K; the magnitude (a PMOS with these terminal
        // values conducts in reverse in hardmax's sign convention, DEVELOPERS.md).
        p.ekv(&t, 300.0, MosMismatch::default())
            .id(0.6, 1.0, 0.0)
            .abs()
    };
    for pol in [Polarity::Nmos, Polarity::Pmos] {
        let (tt, ff, ss) = (current("tt", pol), current("ff", pol), current("ss", pol));
        assert!(ff > tt && tt > ss && ss > 1e-12, "{pol:?}: {ff} {tt} {ss}");
    }
    assert!(current("fs", Polarity::Nmos) > current("tt", Polarity::Nmos));
    assert!(current("fs", Polarity::Pmos) < current("tt", Polarity::Pmos));
    assert!(current("sf", Polarity::Nmos) < current("tt", Polarity::Nmos));
}

#[test]
fn unknown_corner_parameter_and_corner_name_are_refused() {
    let d = tempfile::tempdir().unwrap();
    let f = write(d.path(), "accuracy = 0.8\nyield = 0.8", 40, "1 um", "8 um");
    let base = std::fs::read_to_string(&f).unwrap();
    std::fs::write(&f, format!("{base}{CORNERS}vt_shift = \"1 mV\"\n")).unwrap();
    let a = size(&f, &d.path().join("o")).failure();
    let err = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    assert!(err.contains("corners") && err.contains("vt_shift"), "{err}");
    std::fs::write(&f, format!("{base}{}", CORNERS.replace("\"sf\"", "\"xf\""))).unwrap();
    let a = size(&f, &d.path().join("o")).failure();
    let err = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    assert!(err.contains("`xf` is not a process corner"), "{err}");
    // A process corner without stated sigmas is refused (no assumed default).
    std::fs::write(&f, format!("{base}[corners]\nprocess = [\"tt\", \"ff\"]\n")).unwrap();
    let a = size(&f, &d.path().join("o")).failure();
    let err = String::from_utf8(a.get_output().stderr.clone()).unwrap();
    assert!(err.contains("corners.vt0_sigma"), "{err}");
}

#[test]
fn search_at_corners_names_them_in_the_headline() {
    let d = tempfile::tempdir().unwrap();
    let f = write(
        d.path(),
        "accuracy = 0.8\nyield = 0.8",
        40,
        "0.1 um",
        "20 um",
    );
    let base = std::fs::read_to_string(&f).unwrap();
    std::fs::write(
        &f,
        format!("{base}{CORNERS}vdd = [\"1.62 V\", \"1.98 V\"]\n"),
    )
    .unwrap();
    let out = d.path().join("o");
    let a = size(&f, &out).success();
    let stdout = String::from_utf8(a.get_output().stdout.clone()).unwrap();
    let trace = std::fs::read_to_string(out.join("search.csv")).unwrap();
    assert!(trace
        .lines()
        .next()
        .unwrap()
        .ends_with("limiting_corner_current"));
    if !stdout.contains("NOT MET") {
        assert!(stdout.contains("at every corner (tt / 1.62 V"), "{stdout}");
        assert!(stdout.contains("limiting corner"), "{stdout}");
    }
}
