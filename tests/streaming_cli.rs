//! Streaming populations through the binary: chips.csv is streamed to disk as the chips finish,
//! in chip order whatever the thread count. The reference is the same run on one thread (no
//! reordering at all): a run on two threads, whose chips finish out of order, must write the
//! same bytes. The chips of a point are several batches of the runner's reorder buffer, the
//! last one partial.

use std::path::Path;
use std::process::Command;

use assert_cmd::prelude::*;

fn run(exp: &Path, out: &Path, threads: &str) {
    Command::cargo_bin("hardmax")
        .expect("binary built")
        .args(["run", "--quiet", "--no-report", "--threads", threads])
        .args(["--set", "population.chips=300", "--out"])
        .arg(out)
        .arg(exp)
        .assert()
        .success();
}

fn read(p: &Path) -> Vec<u8> {
    std::fs::read(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

#[test]
fn chips_csv_is_the_same_on_one_and_two_threads() {
    let exp = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/streaming-demo.toml");
    let dir = tempfile::tempdir().unwrap();
    let (one, two) = (dir.path().join("one"), dir.path().join("two"));
    run(&exp, &one, "1");
    run(&exp, &two, "2");
    let chips = read(&one.join("chips.csv"));
    assert_eq!(chips, read(&two.join("chips.csv")), "chips.csv differs");
    for table in ["points.csv", "confusion.csv", "differences.csv"] {
        assert_eq!(read(&one.join(table)), read(&two.join(table)), "{table}");
    }
    // 2 points x 300 chips, in point then chip order.
    let text = String::from_utf8(chips).unwrap();
    let rows: Vec<(u64, u64)> = text
        .lines()
        .skip(1)
        .map(|l| {
            let c: Vec<&str> = l.split(',').collect();
            (c[0].parse().unwrap(), c[2].parse().unwrap())
        })
        .collect();
    let expected: Vec<(u64, u64)> = (0..2).flat_map(|p| (0..300).map(move |c| (p, c))).collect();
    assert_eq!(rows, expected);
    // chips.csv is the header and the points' chip files; no temporary file is left.
    let mut body = Vec::new();
    for p in 0..2 {
        body.extend(read(&two.join(format!("chips/point-{p:06}.csv"))));
    }
    assert!(text.as_bytes().ends_with(&body));
    for d in [two.clone(), two.join("points"), two.join("chips")] {
        for e in std::fs::read_dir(&d).unwrap().flatten() {
            let name = e.file_name().to_string_lossy().into_owned();
            assert!(!name.ends_with(".tmp"), "left behind: {name}");
        }
    }
}
