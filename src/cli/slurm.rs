//! `hardmax slurm-script`: write a Slurm array job (one task per shard) and a merge job that
//! depends on it, and submit both with sbatch when asked.

use std::path::{Path, PathBuf};
use std::process::Command;

use anyhow::{bail, Context};
use clap::Args;

use crate::experiment::corners::load_run as load;
use crate::experiment::shard::{Plan, ShardSpec};
use crate::experiment::slurm::{check_memory, check_time_limit, Scripts};
use crate::io::write_atomic;

#[derive(Debug, Args)]
pub struct SlurmArgs {
    /// Experiment file (TOML).
    pub file: PathBuf,
    /// Folder for the job scripts, logs, shard folders and the merged results
    /// (default: results/<name>-cluster).
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Override a key of the experiment in every task (repeatable), as for `run`.
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Number of shards = array tasks [default: cluster.shards of the experiment, else 4].
    #[arg(long)]
    pub shards: Option<u64>,
    /// Slurm partition [default: cluster.partition, else the cluster's default].
    #[arg(long)]
    pub partition: Option<String>,
    /// Slurm account [default: cluster.account, else none].
    #[arg(long)]
    pub account: Option<String>,
    /// Time limit per task, Slurm format (e.g. 2:00:00) [default: cluster.time_limit].
    #[arg(long = "time-limit", value_parser = parse_time)]
    pub time_limit: Option<String>,
    /// Memory per task, e.g. 4G [default: cluster.memory].
    #[arg(long, value_parser = parse_memory)]
    pub memory: Option<String>,
    /// CPUs per task; each task runs that many threads [default: cluster.cpus_per_task, else 1].
    #[arg(long)]
    pub cpus_per_task: Option<u64>,
    /// Submit the two jobs with sbatch (the merge job with --dependency=afterok on the array).
    #[arg(long)]
    pub submit: bool,
}

fn parse_time(s: &str) -> Result<String, String> {
    check_time_limit(s).map(|_| s.trim().to_string())
}

fn parse_memory(s: &str) -> Result<String, String> {
    check_memory(s).map(|_| s.trim().to_string())
}

fn absolute(p: &Path) -> anyhow::Result<PathBuf> {
    if p.is_absolute() {
        Ok(p.to_path_buf())
    } else {
        Ok(std::env::current_dir()
            .context("cannot read the current folder")?
            .join(p))
    }
}

/// Run `sbatch --parsable ARGS...` and return the job id it printed.
fn sbatch(args: &[String]) -> anyhow::Result<u64> {
    let out = Command::new("sbatch")
        .arg("--parsable")
        .args(args)
        .output()
        .context(
            "cannot start sbatch: is Slurm's client (package slurm-client) installed and on PATH?",
        )?;
    if !out.status.success() {
        bail!(
            "sbatch {} failed: {}",
            args.join(" "),
            String::from_utf8_lossy(&out.stderr).trim()
        );
    }
    let text = String::from_utf8_lossy(&out.stdout);
    // --parsable prints "id" or "id;cluster".
    text.trim()
        .split(';')
        .next()
        .and_then(|s| s.trim().parse().ok())
        .with_context(|| format!("sbatch printed no job id: `{}`", text.trim()))
}

pub fn run(args: SlurmArgs) -> anyhow::Result<()> {
    let resolved = load(&args.file, &args.set)?;
    let c = &resolved.cluster;
    let shards = args.shards.or(c.shards).unwrap_or(4);
    if shards == 0 {
        bail!("--shards 0: use at least 1 shard");
    }
    // Refuses more shards than work units before anything is written.
    Plan::new(
        &resolved,
        Some(ShardSpec {
            index: 1,
            count: shards,
        }),
    )?;
    let cpus = args.cpus_per_task.or(c.cpus_per_task).unwrap_or(1);
    if cpus == 0 {
        bail!("--cpus-per-task 0: use at least 1");
    }
    let root = absolute(&args.out.clone().unwrap_or_else(|| {
        PathBuf::from("results").join(format!("{}-cluster", resolved.base.name))
    }))?;
    let file = std::fs::canonicalize(&args.file)
        .with_context(|| format!("cannot find `{}`", args.file.display()))?;
    let hardmax = std::env::current_exe().context("cannot find the hardmax binary itself")?;
    let scripts = Scripts {
        name: resolved.base.name.clone(),
        hardmax,
        file,
        overrides: args.set.clone(),
        shards,
        root,
        partition: args.partition.clone().or(c.partition.clone()),
        account: args.account.clone().or(c.account.clone()),
        time_limit: args.time_limit.clone().or(c.time_limit.clone()),
        memory: args.memory.clone().or(c.memory.clone()),
        cpus_per_task: cpus,
    };
    for d in [scripts.log_dir(), scripts.shards_dir()] {
        std::fs::create_dir_all(&d)
            .with_context(|| format!("cannot create the folder `{}`", d.display()))?;
    }
    let array = scripts.script_dir().join("array.sbatch");
    let merge = scripts.script_dir().join("merge.sbatch");
    write_atomic(&array, scripts.array_script().as_bytes())?;
    write_atomic(&merge, scripts.merge_script().as_bytes())?;
    println!("wrote {}", array.display());
    println!("wrote {}", merge.display());
    if !args.submit {
        println!("submit with:");
        println!("  id=$(sbatch --parsable {})", array.display());
        println!(
            "  sbatch --dependency=afterok:${{id%%;*}} {}",
            merge.display()
        );
        println!("or run `hardmax slurm-script ... --submit`");
        return Ok(());
    }
    let array_id = sbatch(&[array.display().to_string()])?;
    println!("submitted array job {array_id} ({shards} tasks)");
    let merge_id = sbatch(&[
        format!("--dependency=afterok:{array_id}"),
        merge.display().to_string(),
    ])?;
    println!("submitted merge job {merge_id} (after array job {array_id})");
    println!("logs: {}", scripts.log_dir().display());
    println!("merged results: {}", scripts.merged_dir().display());
    Ok(())
}
