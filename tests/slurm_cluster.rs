//! A real single-node Slurm (Debian packages slurmctld, slurmd, slurm-client, munge): start a
//! private cluster on localhost (tests/slurm/start.sh), submit a small experiment as a 4-shard
//! job array plus the dependent merge job through `hardmax slurm-script --submit`, wait, and
//! compare the merged tables with a local run byte for byte. The daemons are shut down
//! (tests/slurm/stop.sh: scontrol shutdown, munged --stop) even when the test fails.
//!
//! Without Slurm (or without root, which slurmd needs) the test says so and passes; under CI
//! (HARDMAX_CI set) it must run.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

const SMALL: &str = r#"
description = "iris, two bias currents (Slurm test)"
[dataset]
name = "iris"
[population]
chips = 9
seed = 3
[[sweep.axis]]
path = "competition.bias_current"
values = ["20 nA", "200 nA"]
"#;

fn scripts() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/slurm")
}

/// Why Slurm cannot run here, or None when it can.
fn unavailable() -> Option<String> {
    for cmd in [
        "slurmctld",
        "slurmd",
        "sbatch",
        "scontrol",
        "sinfo",
        "munged",
    ] {
        let found = Command::new("sh")
            .args(["-c", &format!("command -v {cmd}")])
            .output()
            .map(|o| o.status.success())
            .unwrap_or(false);
        if !found {
            return Some(format!("`{cmd}` is not on PATH"));
        }
    }
    let uid = Command::new("id").arg("-u").output().ok()?;
    if String::from_utf8_lossy(&uid.stdout).trim() != "0" {
        return Some("not running as root (slurmd needs root)".into());
    }
    None
}

/// Stops the private cluster when dropped (also on a failed assertion).
struct Cluster {
    dir: PathBuf,
}

impl Drop for Cluster {
    fn drop(&mut self) {
        let _ = Command::new("timeout")
            .arg("60")
            .arg(scripts().join("stop.sh"))
            .arg(&self.dir)
            .status();
    }
}

fn read(p: &Path) -> Vec<u8> {
    std::fs::read(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

/// The job's state from `scontrol show job ID` (e.g. PENDING, RUNNING, COMPLETED).
fn job_state(conf: &Path, id: u64) -> String {
    let out = Command::new("timeout")
        .args(["20", "scontrol", "show", "job", &id.to_string()])
        .env("SLURM_CONF", conf)
        .output()
        .expect("scontrol runs");
    let text = String::from_utf8_lossy(&out.stdout);
    text.split_whitespace()
        .find_map(|w| w.strip_prefix("JobState="))
        .unwrap_or("UNKNOWN")
        .to_string()
}

fn id_after(text: &str, prefix: &str) -> u64 {
    text.lines()
        .find_map(|l| l.strip_prefix(prefix))
        .and_then(|r| r.split_whitespace().next())
        .and_then(|n| n.parse().ok())
        .unwrap_or_else(|| panic!("no `{prefix}` line in:\n{text}"))
}

#[test]
fn slurm_array_and_merge_equal_local_run() {
    if let Some(why) = unavailable() {
        assert!(
            std::env::var_os("HARDMAX_CI").is_none(),
            "Slurm is not usable ({why}) but HARDMAX_CI is set: CI must run the Slurm test (.ci/run installs slurmctld, slurmd, slurm-client, munge)"
        );
        eprintln!("Slurm test skipped: {why}");
        return;
    }
    // Under /tmp: the munge user must reach the key and socket folder.
    let tmp = tempfile::Builder::new()
        .prefix("hardmax-slurm")
        .tempdir_in("/tmp")
        .unwrap();
    let cdir = tmp.path().join("cluster");
    let cluster = Cluster { dir: cdir.clone() };
    let started = Command::new("timeout")
        .arg("120")
        .arg(scripts().join("start.sh"))
        .arg(&cluster.dir)
        .output()
        .expect("start.sh runs");
    assert!(
        started.status.success(),
        "start.sh failed: {}{}",
        String::from_utf8_lossy(&started.stdout),
        String::from_utf8_lossy(&started.stderr)
    );
    let conf = cdir.join("slurm.conf");

    let exp = tmp.path().join("small.toml");
    std::fs::write(&exp, SMALL).unwrap();
    let local = tmp.path().join("local");
    assert_cmd::Command::cargo_bin("hardmax")
        .unwrap()
        .timeout(Duration::from_secs(300))
        .args(["run", "--quiet", "--no-report", "--out"])
        .arg(&local)
        .arg(&exp)
        .assert()
        .success();

    let root = tmp.path().join("farm");
    // Bounded: sbatch waits for slurmctld.
    let out = Command::new("timeout")
        .arg("120")
        .arg(assert_cmd::cargo::cargo_bin("hardmax"))
        .env("SLURM_CONF", &conf)
        .args([
            "slurm-script",
            "--shards",
            "4",
            "--cpus-per-task",
            "1",
            "--submit",
            "--out",
        ])
        .arg(&root)
        .arg(&exp)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout).to_string();
    assert!(
        out.status.success(),
        "slurm-script --submit failed:\n{stdout}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let array = id_after(&stdout, "submitted array job ");
    let merge = id_after(&stdout, "submitted merge job ");

    // Wait (at most 5 minutes) for the merge job to end.
    let t0 = Instant::now();
    let state = loop {
        let s = job_state(&conf, merge);
        if !matches!(
            s.as_str(),
            "PENDING" | "RUNNING" | "CONFIGURING" | "COMPLETING"
        ) {
            break s;
        }
        assert!(
            t0.elapsed() < Duration::from_secs(300),
            "merge job {merge} still {s} after 300 s; logs in {}",
            root.join("slurm/logs").display()
        );
        std::thread::sleep(Duration::from_millis(500));
    };
    let logs = root.join("slurm/logs");
    let log_text = |name: &str| String::from_utf8_lossy(&read(&logs.join(name))).to_string();
    assert_eq!(
        state,
        "COMPLETED",
        "merge job {merge} ended {state} (array job {array}); merge log:\n{}",
        std::fs::read_to_string(logs.join("merge.log")).unwrap_or_default()
    );
    // Each task logged plain progress lines naming its shard.
    for i in 0..4 {
        let t = log_text(&format!("shard-{i}.log"));
        assert!(
            t.contains(&format!("shard {}/4", i + 1)) && !t.contains('\r'),
            "task {i} log:\n{t}"
        );
    }
    let merged = root.join("merged");
    for f in [
        "points.csv",
        "chips.csv",
        "confusion.csv",
        "experiment.toml",
    ] {
        assert!(
            read(&local.join(f)) == read(&merged.join(f)),
            "{f}: the Slurm-merged table differs from the local run"
        );
    }
    assert!(merged.join("report.html").exists());
    drop(cluster);
}
