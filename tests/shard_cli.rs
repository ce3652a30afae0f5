//! Shards and merge through the binary. The reference for every merged folder is a
//! single-machine `hardmax run` of the same experiment (the unsharded code path): the merged
//! tables must equal its bytes, whatever the number of shards and the merge order. Then every
//! refusal of `merge` and every bad shard selector, and the scripts of `slurm-script`.

use std::path::{Path, PathBuf};
use std::process::Command;

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

fn read(p: &Path) -> Vec<u8> {
    std::fs::read(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

/// 2 points x 11 chips = 22 work units: not divisible by 2, 3 or 7, so shards cut points.
const SMALL: &str = r#"
description = "iris, two bias currents (shard test)"
[dataset]
name = "iris"
[population]
chips = 11
seed = 7
[[sweep.axis]]
path = "competition.bias_current"
values = ["20 nA", "200 nA"]
"#;

const TABLES: [&str; 4] = [
    "points.csv",
    "chips.csv",
    "confusion.csv",
    "experiment.toml",
];

fn run_single(exp: &Path, out: &Path) {
    hardmax()
        .args(["run", "--quiet", "--no-report", "--threads", "2", "--out"])
        .arg(out)
        .arg(exp)
        .assert()
        .success();
}

fn run_shard(exp: &Path, out: &Path, shard: &str, extra: &[&str]) {
    hardmax()
        .args([
            "run",
            "--quiet",
            "--threads",
            "1",
            "--shard",
            shard,
            "--out",
        ])
        .arg(out)
        .args(extra)
        .arg(exp)
        .assert()
        .success();
}

fn merge(out: &Path, shards: &[PathBuf]) -> assert_cmd::assert::Assert {
    hardmax()
        .args(["merge", "--quiet", "--no-report", "--out"])
        .arg(out)
        .args(shards)
        .assert()
}

/// Point records without their elapsed time (the only field that is not a result).
fn records(dir: &Path) -> Vec<serde_json::Value> {
    let mut files: Vec<PathBuf> = std::fs::read_dir(dir.join("points"))
        .unwrap()
        .flatten()
        .map(|e| e.path())
        .collect();
    files.sort();
    files
        .iter()
        .map(|f| {
            let mut v: serde_json::Value = serde_json::from_slice(&read(f)).unwrap();
            v.as_object_mut().unwrap().remove("elapsed_s");
            v
        })
        .collect()
}

fn assert_same_as_single(single: &Path, merged: &Path) {
    for f in TABLES {
        assert!(
            read(&single.join(f)) == read(&merged.join(f)),
            "{f} of `{}` differs from the single run",
            merged.display()
        );
    }
    assert_eq!(records(single), records(merged), "point records differ");
}

/// Shards 1..n merged equal a single run byte for byte (n = 1, 2, 3, 7; 22 units), and the
/// merge order does not change a byte (tables and point records).
#[test]
fn merged_shards_equal_single_run_in_any_order() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(dir.path(), "small.toml", SMALL);
    let single = dir.path().join("single");
    run_single(&exp, &single);
    let chips = String::from_utf8(read(&single.join("chips.csv"))).unwrap();
    assert_eq!(chips.lines().count(), 1 + 2 * 11);
    for n in [1usize, 2, 3, 7] {
        let shards: Vec<PathBuf> = (1..=n)
            .map(|k| dir.path().join(format!("n{n}/shard{k}")))
            .collect();
        for (k, s) in shards.iter().enumerate() {
            run_shard(&exp, s, &format!("{}/{n}", k + 1), &[]);
            // A shard writes no tables of its own.
            assert!(!s.join("points.csv").exists());
        }
        let forward = dir.path().join(format!("n{n}/merged-forward"));
        merge(&forward, &shards).success();
        assert_same_as_single(&single, &forward);
        // Reversed, and rotated by one.
        let mut reversed = shards.clone();
        reversed.reverse();
        let mut rotated = shards.clone();
        rotated.rotate_left(1);
        for (name, order) in [("reversed", reversed), ("rotated", rotated)] {
            let out = dir.path().join(format!("n{n}/merged-{name}"));
            merge(&out, &order).success();
            for f in TABLES {
                assert!(read(&forward.join(f)) == read(&out.join(f)), "{f}, {name}");
            }
            for p in std::fs::read_dir(forward.join("points")).unwrap().flatten() {
                let other = out.join("points").join(p.file_name());
                assert!(
                    read(&p.path()) == read(&other),
                    "record {:?}",
                    p.file_name()
                );
            }
        }
    }
}

/// The merged folder renders like a run's, and `render` reads it.
#[test]
fn merged_folder_renders() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(dir.path(), "small.toml", SMALL);
    let shards: Vec<PathBuf> = (1..=2).map(|k| dir.path().join(format!("s{k}"))).collect();
    for (k, s) in shards.iter().enumerate() {
        run_shard(&exp, s, &format!("{}/2", k + 1), &[]);
    }
    let out = dir.path().join("merged");
    hardmax()
        .args(["merge", "--out"])
        .arg(&out)
        .args(&shards)
        .assert()
        .success()
        .stdout(predicate::str::contains("merged 2 shards: 2 sweep points"));
    assert!(out.join("report.html").exists());
    let m: serde_json::Value = serde_json::from_slice(&read(&out.join("manifest.json"))).unwrap();
    assert_eq!(m["status"], "complete");
    assert!(m.get("shard").is_none());
    assert_eq!(m["merged_from"].as_array().unwrap().len(), 2);
    hardmax().arg("render").arg(&out).assert().success();
}

/// A shard stopped part-way (a point record lost, manifest partial, as a killed run leaves
/// it) is refused by merge, then resumes with the same command and merges exactly.
#[test]
fn partial_shard_is_refused_then_resumes() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(dir.path(), "small.toml", SMALL);
    let single = dir.path().join("single");
    run_single(&exp, &single);
    let shards: Vec<PathBuf> = (1..=3).map(|k| dir.path().join(format!("s{k}"))).collect();
    for (k, s) in shards.iter().enumerate() {
        run_shard(&exp, s, &format!("{}/3", k + 1), &[]);
    }
    // Shard 2 of 3 covers units 7..14: chips 7..10 of point 0 and 0..2 of point 1.
    let rec = shards[1].join("points/point-000001.json");
    assert!(rec.exists());
    std::fs::remove_file(&rec).unwrap();
    let mpath = shards[1].join("manifest.json");
    let text = String::from_utf8(read(&mpath)).unwrap();
    std::fs::write(
        &mpath,
        text.replace("\"status\": \"complete\"", "\"status\": \"partial\""),
    )
    .unwrap();
    merge(&dir.path().join("m1"), &shards)
        .failure()
        .stderr(predicate::str::contains("shard 2/3").and(predicate::str::contains("unfinished")))
        .stderr(predicate::str::contains("rerun shard(s) 2/3"));
    // Same command again: resumes (one point run now, one resumed).
    hardmax()
        .args(["run", "--threads", "1", "--shard", "2/3", "--out"])
        .arg(&shards[1])
        .arg(&exp)
        .assert()
        .success()
        .stdout(predicate::str::contains("(1 run now, 1 resumed)"));
    let out = dir.path().join("m2");
    merge(&out, &shards).success();
    assert_same_as_single(&single, &out);
}

fn three_shards(dir: &Path, exp: &Path, tag: &str) -> Vec<PathBuf> {
    let shards: Vec<PathBuf> = (1..=3).map(|k| dir.join(format!("{tag}{k}"))).collect();
    for (k, s) in shards.iter().enumerate() {
        run_shard(exp, s, &format!("{}/3", k + 1), &[]);
    }
    shards
}

#[test]
fn merge_refuses_missing_duplicate_and_foreign_shards() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(dir.path(), "small.toml", SMALL);
    let shards = three_shards(dir.path(), &exp, "s");
    let out = dir.path().join("out");

    // Missing: named, with the shard to rerun.
    merge(&out, &[shards[0].clone(), shards[2].clone()])
        .failure()
        .stderr(predicate::str::contains("missing shard(s) 2 of 3"))
        .stderr(predicate::str::contains("rerun shard(s) 2/3"));
    // Duplicate: a copy of shard 3 given as well.
    let copy = dir.path().join("copy3");
    copy_dir(&shards[2], &copy);
    let mut dup = shards.clone();
    dup.push(copy.clone());
    merge(&out, &dup)
        .failure()
        .stderr(predicate::str::contains("shard 3/3 given 2 times"))
        .stderr(predicate::str::contains("copy3"));
    // Another experiment (another seed): refused, naming the folders.
    let other = write(
        dir.path(),
        "other.toml",
        &SMALL.replace("seed = 7", "seed = 8"),
    );
    run_shard(&other, &dir.path().join("o2"), "2/3", &[]);
    merge(
        &out,
        &[shards[0].clone(), dir.path().join("o2"), shards[2].clone()],
    )
    .failure()
    .stderr(predicate::str::contains("different experiments"))
    .stderr(predicate::str::contains("o2"));
    // Another split of the same experiment (shards of 2 with shards of 3).
    run_shard(&exp, &dir.path().join("half2"), "2/2", &[]);
    merge(&out, &[shards[0].clone(), dir.path().join("half2")])
        .failure()
        .stderr(predicate::str::contains("different experiments"));
    // Another results format version.
    let old = dir.path().join("old1");
    copy_dir(&shards[0], &old);
    let mpath = old.join("manifest.json");
    let text = String::from_utf8(read(&mpath)).unwrap();
    std::fs::write(
        &mpath,
        text.replace("\"format_version\": 1", "\"format_version\": 99"),
    )
    .unwrap();
    merge(&out, &[old, shards[1].clone(), shards[2].clone()])
        .failure()
        .stderr(predicate::str::contains("format version 99"))
        .stderr(predicate::str::contains("reads version 1"));
    // A whole results folder is not a shard.
    let single = dir.path().join("single");
    run_single(&exp, &single);
    merge(&out, &[single])
        .failure()
        .stderr(predicate::str::contains("not a shard folder"));
    // Nothing was written by the refused merges.
    assert!(!out.exists());
}

/// Invented two-class data (made-up fruit sizes, for this test only).
fn invented_csv(bump: f64) -> String {
    let mut s = String::from("width_mm,weight_g,label\n");
    for i in 0..40 {
        let class = i % 2;
        let w = 60.0 + (i % 10) as f64 + 8.0 * class as f64 + if i == 0 { bump } else { 0.0 };
        let g = 130.0 + ((i * 7) % 20) as f64 + 40.0 * class as f64;
        s += &format!("{w},{g},{}\n", if class == 0 { "pear" } else { "apple" });
    }
    s
}

/// Shards run on copies of a dataset file that differ are refused (same experiment text).
#[test]
fn merge_refuses_shards_of_different_input_files() {
    let dir = tempfile::tempdir().unwrap();
    let csv = write(dir.path(), "fruit.csv", &invented_csv(0.0));
    let exp = write(
        dir.path(),
        "fruit.toml",
        r#"
[dataset]
file = "fruit.csv"
[population]
chips = 5
"#,
    );
    run_shard(&exp, &dir.path().join("a1"), "1/2", &[]);
    std::fs::write(&csv, invented_csv(0.5)).unwrap();
    run_shard(&exp, &dir.path().join("a2"), "2/2", &[]);
    merge(
        &dir.path().join("out"),
        &[dir.path().join("a1"), dir.path().join("a2")],
    )
    .failure()
    .stderr(predicate::str::contains(
        "different experiments or input files",
    ));
}

#[test]
fn bad_shard_selectors_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(dir.path(), "small.toml", SMALL);
    for (sel, msg) in [
        ("0/3", "outside 1..3"),
        ("4/3", "outside 1..3"),
        ("3", "expected K/N"),
        ("1/0", "at least 1"),
        ("x/3", "not a whole number"),
    ] {
        hardmax()
            .args(["run", "--shard", sel, "--out"])
            .arg(dir.path().join("x"))
            .arg(&exp)
            .assert()
            .failure()
            .stderr(predicate::str::contains(msg));
    }
    // 2 points x 11 chips = 22 units: 23 shards is too many.
    hardmax()
        .args(["run", "--shard", "1/23", "--out"])
        .arg(dir.path().join("y"))
        .arg(&exp)
        .assert()
        .failure()
        .stderr(predicate::str::contains(
            "23 shards is more than the 22 work units",
        ));
    assert!(!dir.path().join("y").exists());
    // A shard folder never resumes as another shard.
    run_shard(&exp, &dir.path().join("z"), "1/2", &[]);
    hardmax()
        .args(["run", "--shard", "2/2", "--out"])
        .arg(dir.path().join("z"))
        .arg(&exp)
        .assert()
        .failure()
        .stderr(predicate::str::contains("different experiment"));
}

fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap().flatten() {
        let t = to.join(e.file_name());
        if e.path().is_dir() {
            copy_dir(&e.path(), &t);
        } else {
            std::fs::copy(e.path(), t).unwrap();
        }
    }
}

/// `slurm-script` writes both scripts with settings from `[cluster]`, options winning; bad
/// cluster keys are refused with the key named.
#[test]
fn slurm_script_writes_array_and_merge_jobs() {
    let dir = tempfile::tempdir().unwrap();
    let exp = write(
        dir.path(),
        "small.toml",
        &format!(
            "{SMALL}\n[cluster]\npartition = \"short\"\ntime_limit = \"0:30:00\"\nshards = 3\ncpus_per_task = 2\n"
        ),
    );
    let root = dir.path().join("cluster");
    hardmax()
        .args(["slurm-script", "--account", "lab7", "--out"])
        .arg(&root)
        .arg(&exp)
        .assert()
        .success()
        .stdout(predicate::str::contains("array.sbatch"));
    let a = String::from_utf8(read(&root.join("slurm/array.sbatch"))).unwrap();
    for want in [
        "#SBATCH --array=0-2\n",
        "#SBATCH --partition=short\n",
        "#SBATCH --account=lab7\n",
        "#SBATCH --time=0:30:00\n",
        "#SBATCH --cpus-per-task=2\n",
        "--shard \"$k/3\"",
    ] {
        assert!(a.contains(want), "{want} not in\n{a}");
    }
    let m = String::from_utf8(read(&root.join("slurm/merge.sbatch"))).unwrap();
    assert!(m.contains(" merge --out "), "{m}");
    // The [cluster] table does not change the experiment's identity: same hash with and
    // without it (a shard of either merges with the other).
    // (Same file name: the experiment name defaults to it.)
    std::fs::create_dir_all(dir.path().join("plain")).unwrap();
    let plain = write(&dir.path().join("plain"), "small.toml", SMALL);
    run_shard(&exp, &dir.path().join("c1"), "1/2", &[]);
    run_shard(&plain, &dir.path().join("c2"), "2/2", &[]);
    merge(
        &dir.path().join("cm"),
        &[dir.path().join("c1"), dir.path().join("c2")],
    )
    .success();

    for (extra, msg) in [
        ("[cluster]\npartitoin = \"x\"\n", "did you mean `partition`"),
        ("[cluster]\ntime_limit = \"2h\"\n", "cluster.time_limit"),
        ("[cluster]\nmemory = \"4 GB\"\n", "cluster.memory"),
        ("[cluster]\nshards = 0\n", "cluster.shards"),
    ] {
        let bad = write(dir.path(), "bad.toml", &format!("{SMALL}\n{extra}"));
        hardmax()
            .args(["slurm-script", "--out"])
            .arg(dir.path().join("b"))
            .arg(&bad)
            .assert()
            .failure()
            .stderr(predicate::str::contains(msg));
    }
    hardmax()
        .args(["slurm-script", "--time-limit", "soon", "--out"])
        .arg(dir.path().join("b"))
        .arg(&exp)
        .assert()
        .failure()
        .stderr(predicate::str::contains("not a Slurm time limit"));
    hardmax()
        .args(["slurm-script", "--shards", "50", "--out"])
        .arg(dir.path().join("b"))
        .arg(&exp)
        .assert()
        .failure()
        .stderr(predicate::str::contains("more than the 22 work units"));
}

/// A shard killed part-way (SIGKILL, as a scheduler's time limit ends a task) resumes when the
/// same command runs again, and the merge equals an uninterrupted single run.
#[test]
fn killed_shard_resumes_and_merges_exactly() {
    use std::time::{Duration, Instant};
    let dir = tempfile::tempdir().unwrap();
    // 6 points x 12 chips = 72 units; shard 1/2 holds points 0, 1, 2.
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
    let single = dir.path().join("single");
    run_single(&exp, &single);
    let cut = dir.path().join("s1");
    let shard_cmd = || {
        let mut c = hardmax();
        c.args([
            "run",
            "--quiet",
            "--threads",
            "1",
            "--shard",
            "1/2",
            "--out",
        ])
        .arg(&cut)
        .arg(&exp);
        c
    };
    let mut killed_mid_run = false;
    for _attempt in 0..3 {
        let _ = std::fs::remove_dir_all(&cut);
        let mut child = shard_cmd().spawn().unwrap();
        let t0 = Instant::now();
        let count = || {
            std::fs::read_dir(cut.join("points"))
                .map(|d| d.count())
                .unwrap_or(0)
        };
        while count() < 1 && t0.elapsed() < Duration::from_secs(120) {
            std::thread::sleep(Duration::from_millis(5));
        }
        let still_running = child.try_wait().unwrap().is_none();
        let _ = child.kill();
        let _ = child.wait();
        if still_running && count() < 3 {
            killed_mid_run = true;
            break;
        }
    }
    assert!(killed_mid_run, "could not interrupt the shard part-way");
    let m = String::from_utf8(read(&cut.join("manifest.json"))).unwrap();
    assert!(m.contains("\"partial\""), "{m}");
    let s2 = dir.path().join("s2");
    run_shard(&exp, &s2, "2/2", &[]);
    merge(&dir.path().join("early"), &[cut.clone(), s2.clone()])
        .failure()
        .stderr(predicate::str::contains("rerun shard(s) 1/2"));
    shard_cmd().assert().success();
    let out = dir.path().join("merged");
    merge(&out, &[s2, cut]).success();
    assert_same_as_single(&single, &out);
}
