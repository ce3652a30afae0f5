//! `hardmax batch`: run many experiment files; skip those whose results are up to date; go on
//! past failures; print a summary; exit non-zero if any failed.

use std::path::{Path, PathBuf};

use clap::Args;

use crate::experiment::corners::load_run as load;
use crate::experiment::runner::{experiment_hash, folder_status};

#[derive(Debug, Args)]
pub struct BatchArgs {
    /// Experiment files and/or folders (every *.toml inside, in name order).
    #[arg(required = true)]
    pub paths: Vec<PathBuf>,
    /// Folder that receives one results folder per experiment (default: results).
    #[arg(long, default_value = "results")]
    pub out_root: PathBuf,
    /// Override a key in every experiment (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Re-run even experiments whose results are up to date.
    #[arg(long)]
    pub force: bool,
    /// No progress output (the summary table is still printed).
    #[arg(long, short)]
    pub quiet: bool,
    /// Skip the plots and HTML reports.
    #[arg(long)]
    pub no_report: bool,
}

fn collect(paths: &[PathBuf]) -> Result<Vec<PathBuf>, String> {
    let mut files = Vec::new();
    for p in paths {
        if p.is_dir() {
            let mut v: Vec<PathBuf> = std::fs::read_dir(p)
                .map_err(|e| format!("cannot list folder `{}`: {e}", p.display()))?
                .flatten()
                .map(|e| e.path())
                .filter(|f| f.extension().and_then(|x| x.to_str()) == Some("toml"))
                .collect();
            v.sort();
            files.extend(v);
        } else if p.exists() {
            files.push(p.clone());
        } else {
            return Err(format!("`{}` does not exist", p.display()));
        }
    }
    Ok(files)
}

enum Outcome {
    Ran(f64),
    UpToDate,
    Failed(String),
}

fn one(file: &Path, args: &BatchArgs) -> Outcome {
    let resolved = match load(file, &args.set) {
        Ok(r) => r,
        Err(e) => return Outcome::Failed(e.to_string()),
    };
    let out = args.out_root.join(&resolved.base.name);
    // The identity includes the content of every input file: an edited dataset is not up to date.
    let hash = match experiment_hash(&resolved) {
        Ok(h) => h,
        Err(e) => return Outcome::Failed(e.to_string()),
    };
    if !args.force && folder_status(&out, &hash) == Some(true) {
        return Outcome::UpToDate;
    }
    match super::run::execute(
        &resolved,
        &out,
        args.threads,
        args.force,
        args.quiet,
        args.no_report,
    ) {
        Ok((s, _)) => Outcome::Ran(s.elapsed_s),
        Err(e) => Outcome::Failed(format!("{e:#}")),
    }
}

pub fn run(args: BatchArgs) -> anyhow::Result<()> {
    let files = collect(&args.paths).map_err(anyhow::Error::msg)?;
    if files.is_empty() {
        anyhow::bail!("no experiment files (*.toml) found in the given paths");
    }
    let mut rows = Vec::new();
    for f in &files {
        let o = one(f, &args);
        if let Outcome::Failed(m) = &o {
            eprintln!("{}: failed: {m}", f.display());
        }
        rows.push((f.clone(), o));
    }
    println!("{:<48}  {:<10}  detail", "experiment", "status");
    let mut failed = 0;
    for (f, o) in &rows {
        let (status, detail) = match o {
            Outcome::Ran(s) => ("ran", format!("{s:.1} s")),
            Outcome::UpToDate => ("up to date", "skipped".to_string()),
            Outcome::Failed(m) => {
                failed += 1;
                ("FAILED", m.lines().next().unwrap_or("").to_string())
            }
        };
        println!("{:<48}  {:<10}  {}", f.display(), status, detail);
    }
    println!("{}", crate::CAUTION);
    if failed > 0 {
        anyhow::bail!("{failed} of {} experiments failed", rows.len());
    }
    Ok(())
}
