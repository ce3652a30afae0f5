//! Job scripts for Slurm: one array job whose tasks run the shards of an experiment, and one
//! merge job that runs after every task succeeded (`--dependency=afterok`). Only the text of
//! the scripts lives here (pure functions); writing and submitting them is the CLI's.
//!
//! Layout under the chosen folder ROOT:
//! `ROOT/shards/shard-K-of-N/` (one per task), `ROOT/merged/` (the merged results and report),
//! `ROOT/slurm/array.sbatch`, `ROOT/slurm/merge.sbatch`, `ROOT/slurm/logs/` (one log per task).
//! Nothing cluster-specific is built in: partition, account, time limit and memory appear only
//! when given (options or the experiment's `[cluster]` table).

use std::path::{Path, PathBuf};

use super::shard::ShardSpec;

/// Everything the two scripts need.
#[derive(Clone, Debug)]
pub struct Scripts {
    /// Experiment name (job names).
    pub name: String,
    /// The hardmax binary the tasks run (absolute).
    pub hardmax: PathBuf,
    /// The experiment file (absolute).
    pub file: PathBuf,
    /// `--set` overrides, passed on to every task.
    pub overrides: Vec<String>,
    pub shards: u64,
    /// Output root (absolute).
    pub root: PathBuf,
    pub partition: Option<String>,
    pub account: Option<String>,
    /// Slurm time format, e.g. "2:00:00" or "1-00:00:00".
    pub time_limit: Option<String>,
    /// Slurm memory per node, e.g. "4G".
    pub memory: Option<String>,
    pub cpus_per_task: u64,
}

/// Quote a word for a POSIX shell (single quotes; a single quote becomes '\'').
pub fn sh_quote(s: &str) -> String {
    if !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || "/._-+=:,@%".contains(c))
    {
        return s.to_string();
    }
    format!("'{}'", s.replace('\'', "'\\''"))
}

fn path_q(p: &Path) -> String {
    sh_quote(&p.to_string_lossy())
}

impl Scripts {
    pub fn shards_dir(&self) -> PathBuf {
        self.root.join("shards")
    }
    pub fn merged_dir(&self) -> PathBuf {
        self.root.join("merged")
    }
    pub fn script_dir(&self) -> PathBuf {
        self.root.join("slurm")
    }
    pub fn log_dir(&self) -> PathBuf {
        self.script_dir().join("logs")
    }

    fn header(&self, job: &str, log: &Path, cpus: u64) -> String {
        let mut h = String::from("#!/bin/bash\n");
        // Job names without spaces or quotes.
        let jobname: String = format!("hardmax-{}-{job}", self.name)
            .chars()
            .map(|c| {
                if c.is_ascii_alphanumeric() || "-_.".contains(c) {
                    c
                } else {
                    '_'
                }
            })
            .collect();
        h += &format!("#SBATCH --job-name={jobname}\n");
        h += &format!("#SBATCH --output={}\n", log.display());
        h += "#SBATCH --ntasks=1\n";
        h += &format!("#SBATCH --cpus-per-task={cpus}\n");
        for (opt, v) in [
            ("partition", &self.partition),
            ("account", &self.account),
            ("time", &self.time_limit),
            ("mem", &self.memory),
        ] {
            if let Some(v) = v {
                h += &format!("#SBATCH --{opt}={v}\n");
            }
        }
        h
    }

    fn common_args(&self) -> String {
        let mut a = path_q(&self.file);
        for o in &self.overrides {
            a += &format!(" --set {}", sh_quote(o));
        }
        a
    }

    /// Width of the shard numbers in folder names (as [`ShardSpec::folder_name`]).
    fn width(&self) -> usize {
        ShardSpec {
            index: 1,
            count: self.shards,
        }
        .folder_name()
        .trim_start_matches("shard-")
        .split('-')
        .next()
        .map_or(3, str::len)
    }

    /// The array job: task i (0-based, SLURM_ARRAY_TASK_ID) runs shard i+1 of N with the CPUs
    /// Slurm gave it. Rerunning a task resumes its shard folder.
    pub fn array_script(&self) -> String {
        let mut s = self.header(
            "shards",
            &self.log_dir().join("shard-%a.log"),
            self.cpus_per_task,
        );
        s += &format!("#SBATCH --array=0-{}\n", self.shards - 1);
        s += &format!(
            r#"
# hardmax shards of `{name}`: task i runs shard i+1 of {n}; rerun one task with
#   sbatch --array=I {script}
# (a shard that was stopped resumes from its last finished point).
set -euo pipefail
k=$(( SLURM_ARRAY_TASK_ID + 1 ))
printf -v folder 'shard-%0{w}d-of-%0{w}d' "$k" {n}
exec {hardmax} run {args} \
  --shard "$k/{n}" \
  --threads "${{SLURM_CPUS_PER_TASK:-1}}" \
  --out {shards}/"$folder"
"#,
            name = self.name,
            n = self.shards,
            w = self.width(),
            script = path_q(&self.script_dir().join("array.sbatch")),
            hardmax = path_q(&self.hardmax),
            args = self.common_args(),
            shards = path_q(&self.shards_dir()),
        );
        s
    }

    /// The merge job: every shard folder into `ROOT/merged`, then the report.
    pub fn merge_script(&self) -> String {
        let mut s = self.header("merge", &self.log_dir().join("merge.log"), 1);
        s += &format!(
            r#"
# Merge the {n} shards of `{name}` (submitted with --dependency=afterok:<array job>).
set -euo pipefail
shopt -s nullglob
exec {hardmax} merge --out {merged} {shards}/shard-*-of-*
"#,
            name = self.name,
            n = self.shards,
            hardmax = path_q(&self.hardmax),
            merged = path_q(&self.merged_dir()),
            shards = path_q(&self.shards_dir()),
        );
        s
    }
}

/// Check a Slurm time limit: minutes, MM:SS, HH:MM:SS, D-HH, D-HH:MM or D-HH:MM:SS (whole
/// numbers), or "infinite"/"unlimited". Format from the sbatch manual (`--time`).
pub fn check_time_limit(s: &str) -> Result<(), String> {
    let t = s.trim();
    if matches!(t, "infinite" | "unlimited" | "UNLIMITED" | "INFINITE") {
        return Ok(());
    }
    let bad = || {
        format!(
            "`{s}` is not a Slurm time limit: write minutes (\"90\"), \"HH:MM:SS\" (\"2:00:00\") or \"D-HH:MM:SS\" (\"1-12:00:00\")"
        )
    };
    let (days, rest) = match t.split_once('-') {
        Some((d, r)) => (Some(d), r),
        None => (None, t),
    };
    let num = |x: &str| !x.is_empty() && x.len() <= 6 && x.chars().all(|c| c.is_ascii_digit());
    if let Some(d) = days {
        if !num(d) {
            return Err(bad());
        }
    }
    let parts: Vec<&str> = rest.split(':').collect();
    if !(1..=3).contains(&parts.len()) || !parts.iter().all(|p| num(p)) {
        return Err(bad());
    }
    Ok(())
}

/// Check a Slurm memory size: a whole number with an optional K, M, G or T suffix (megabytes
/// without one). Format from the sbatch manual (`--mem`).
pub fn check_memory(s: &str) -> Result<(), String> {
    let t = s.trim();
    let digits = t.trim_end_matches(['K', 'M', 'G', 'T', 'k', 'm', 'g', 't']);
    let suffix_len = t.len() - digits.len();
    if digits.is_empty()
        || suffix_len > 1
        || !digits.chars().all(|c| c.is_ascii_digit())
        || digits.trim_start_matches('0').is_empty()
    {
        return Err(format!(
            "`{s}` is not a Slurm memory size: write a whole number with K, M, G or T, e.g. \"4G\" (megabytes without a suffix)"
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scripts() -> Scripts {
        Scripts {
            name: "digits gain".into(),
            hardmax: "/opt/hardmax/bin/hardmax".into(),
            file: "/home/a/exp's.toml".into(),
            overrides: vec!["population.chips=30".into()],
            shards: 12,
            root: "/scratch/run".into(),
            partition: Some("short".into()),
            account: None,
            time_limit: Some("1:00:00".into()),
            memory: None,
            cpus_per_task: 4,
        }
    }

    #[test]
    fn array_script_has_array_threads_and_shard() {
        let s = scripts().array_script();
        assert!(s.starts_with("#!/bin/bash\n"));
        assert!(s.contains("#SBATCH --array=0-11\n"), "{s}");
        assert!(s.contains("#SBATCH --cpus-per-task=4\n"));
        assert!(s.contains("#SBATCH --partition=short\n"));
        assert!(s.contains("#SBATCH --time=1:00:00\n"));
        assert!(!s.contains("--account") && !s.contains("--mem"), "{s}");
        assert!(s.contains(r#"--threads "${SLURM_CPUS_PER_TASK:-1}""#));
        assert!(s.contains("k=$(( SLURM_ARRAY_TASK_ID + 1 ))"));
        assert!(s.contains(r#"--shard "$k/12""#));
        assert!(
            s.contains("'/home/a/exp'\\''s.toml' --set population.chips=30"),
            "{s}"
        );
        assert!(s.contains("--job-name=hardmax-digits_gain-shards"));
        // The folder pattern matches ShardSpec::folder_name.
        assert!(s.contains("'shard-%03d-of-%03d'"));
    }

    /// bash formats the folder name exactly as `ShardSpec::folder_name` does.
    #[test]
    fn folder_pattern_agrees_with_bash() {
        let Ok(out) = std::process::Command::new("bash")
            .args(["-c", "printf 'shard-%03d-of-%03d' 7 12"])
            .output()
        else {
            eprintln!("bash not available: folder pattern not checked");
            return;
        };
        assert_eq!(
            String::from_utf8_lossy(&out.stdout),
            ShardSpec {
                index: 7,
                count: 12
            }
            .folder_name()
        );
    }

    #[test]
    fn merge_script_merges_all_shard_folders() {
        let s = scripts().merge_script();
        assert!(s.contains("#SBATCH --cpus-per-task=1\n"));
        assert!(s.contains(
            "exec /opt/hardmax/bin/hardmax merge --out /scratch/run/merged /scratch/run/shards/shard-*-of-*"
        ));
        assert!(!s.contains("--array"));
    }

    #[test]
    fn quoting() {
        assert_eq!(sh_quote("abc/d.e"), "abc/d.e");
        assert_eq!(sh_quote("a b"), "'a b'");
        assert_eq!(sh_quote("it's"), "'it'\\''s'");
        assert_eq!(sh_quote(""), "''");
    }

    /// Formats from the sbatch manual (--time, --mem).
    #[test]
    fn time_and_memory_formats() {
        for ok in [
            "90",
            "30:00",
            "2:00:00",
            "1-12",
            "1-12:30",
            "1-12:30:00",
            "infinite",
        ] {
            assert!(check_time_limit(ok).is_ok(), "{ok}");
        }
        for bad in ["", "2h", "1:2:3:4", "-1", "1-", "a:00"] {
            assert!(check_time_limit(bad).is_err(), "{bad}");
        }
        for ok in ["4G", "500", "16000M", "1T"] {
            assert!(check_memory(ok).is_ok(), "{ok}");
        }
        for bad in ["", "4 GB", "G", "0", "4GG", "-1G"] {
            assert!(check_memory(bad).is_err(), "{bad}");
        }
    }
}
