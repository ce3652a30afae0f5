//! `hardmax run`: one experiment file -> one results folder.

use std::path::{Path, PathBuf};

use anyhow::Context;
use clap::Args;

use super::progress::Progress;
use crate::experiment::config::{load, Resolved};
use crate::experiment::runner::{run as run_experiment, RunOptions, RunSummary};

#[derive(Debug, Args)]
pub struct RunArgs {
    /// Experiment file (TOML).
    pub file: PathBuf,
    /// Results folder (default: results/<experiment name>).
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Override a key of the experiment, e.g. --set population.chips=50 (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Worker threads (default: all cores). Results do not depend on it.
    #[arg(long)]
    pub threads: Option<usize>,
    /// Replace the results of a different experiment found in the output folder.
    #[arg(long)]
    pub fresh: bool,
    /// No progress output.
    #[arg(long, short)]
    pub quiet: bool,
    /// Skip the plots and HTML report.
    #[arg(long)]
    pub no_report: bool,
}

pub fn run(args: RunArgs) -> anyhow::Result<()> {
    let resolved = load(&args.file, &args.set)?;
    let out = args
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from("results").join(&resolved.base.name));
    let (summary, report) = execute(
        &resolved,
        &out,
        args.threads,
        args.fresh,
        args.quiet,
        args.no_report,
    )
    .with_context(|| format!("running `{}`", args.file.display()))?;
    if !args.quiet {
        print_summary(&summary, &resolved.axes);
        println!("results: {}", out.display());
        if let Some(r) = report {
            println!("report:  {}", r.display());
        }
        println!("{}", crate::CAUTION);
    }
    Ok(())
}

/// Run a resolved experiment into `out` with progress on stderr, then render its report unless
/// `no_report`. Shared by `run` and `batch`.
pub fn execute(
    resolved: &Resolved,
    out: &Path,
    threads: Option<usize>,
    fresh: bool,
    quiet: bool,
    no_report: bool,
) -> anyhow::Result<(RunSummary, Option<PathBuf>)> {
    let opts = RunOptions {
        out: out.to_path_buf(),
        threads,
        fresh,
        command: std::env::args().collect::<Vec<_>>().join(" "),
    };
    let progress = Progress::new(quiet, &resolved.base.name);
    let summary = run_experiment(resolved, &opts, &progress);
    progress.finish();
    let summary = summary?;
    let report = if no_report {
        None
    } else {
        Some(super::render::render_folder(out)?)
    };
    Ok((summary, report))
}

/// A short table of the points of a run on stdout: the swept values (with units), yield first,
/// then accuracy.
pub fn print_summary(s: &RunSummary, axes: &[crate::experiment::sweep::Axis]) {
    let names: Vec<String> = axes
        .iter()
        .map(|a| a.path.rsplit('.').next().unwrap_or(&a.path).to_string())
        .collect();
    let cell = |a: &crate::experiment::sweep::Axis, v: f64| -> String {
        if a.unit.is_empty() {
            format!("{v}")
        } else {
            crate::units::format_si(v, &a.unit, 4)
        }
    };
    let widths: Vec<usize> = axes
        .iter()
        .zip(&names)
        .enumerate()
        .map(|(i, (a, n))| {
            s.records
                .iter()
                .filter_map(|r| r.params.get(i))
                .map(|&v| cell(a, v).chars().count())
                .max()
                .unwrap_or(0)
                .max(n.chars().count())
        })
        .collect();
    let mut head = format!("{:>5}", "point");
    for (n, w) in names.iter().zip(&widths) {
        head += &format!("  {n:>w$}");
    }
    println!(
        "{head}  {:>6}  {:>16}  {:>9}  {:>9}  {:>9}  {:>9}  {:>6}",
        "yield", "yield 95% CI", "acc mean", "acc p05", "ideal", "baseline", "failed"
    );
    for r in &s.records {
        let m = r.summary();
        let mut line = format!("{:>5}", r.point);
        for ((a, w), v) in axes.iter().zip(&widths).zip(&r.params) {
            line += &format!("  {:>w$}", cell(a, *v));
        }
        println!(
            "{line}  {:>6.3}  [{:>6.3}, {:>6.3}]  {:>9.4}  {:>9.4}  {:>9.4}  {:>9.4}  {:>6}",
            m.yield_,
            m.yield_lo,
            m.yield_hi,
            m.acc_mean,
            m.acc_p05,
            r.ideal_acc,
            r.baseline_acc,
            m.nonconverged
        );
    }
    println!(
        "{} points ({} run now, {} resumed) in {:.1} s",
        s.points_total, s.points_run, s.points_resumed, s.elapsed_s
    );
}
