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
        print_summary(&summary);
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

/// A short table of the points of a run on stdout, then the design answer: the cheapest point
/// that meets the yield target (or the nearest one).
pub fn print_summary(s: &RunSummary) {
    use crate::units::format_si;
    println!(
        "{:>5}  {:>9}  {:>9}  {:>9}  {:>9}  {:>9}  {:>17}  {:>6}  {:>4}  {:>11}  {:>10}  {:>10}  {:>10}",
        "point",
        "ideal",
        "baseline",
        "acc mean",
        "acc p05",
        "yield",
        "yield 95% CI",
        "failed",
        "pass",
        "area",
        "current",
        "power",
        "energy"
    );
    let si = |v: Option<f64>, unit: &str| v.map_or_else(|| "-".into(), |v| format_si(v, unit, 3));
    for r in &s.records {
        let m = r.summary();
        let margin = crate::answers::yield_margin(r, &m);
        let c = r.cost.as_ref();
        let t = crate::answers::decision_time(r, &m);
        println!(
            "{:>5}  {:>9.4}  {:>9.4}  {:>9.4}  {:>9.4}  {:>9.3}  [{:>6.3}, {:>6.3}]  {:>6}  {:>4}  {:>11}  {:>10}  {:>10}  {:>10}",
            r.point,
            r.ideal_acc,
            r.baseline_acc,
            m.acc_mean,
            m.acc_p05,
            m.yield_,
            m.yield_lo,
            m.yield_hi,
            m.nonconverged,
            margin.map_or("-", |x| if x >= 0.0 { "yes" } else { "no" }),
            c.map_or_else(|| "-".into(), |c| format!("{:.0} um2", c.area_m2 * 1e12)),
            si(c.map(|c| c.supply_current_a), "A"),
            si(c.map(|c| c.power_w), "W"),
            si(c.and_then(|c| t.map(|t| c.power_w * t)), "J"),
        );
    }
    println!(
        "{} points ({} run now, {} resumed) in {:.1} s",
        s.points_total, s.points_run, s.points_resumed, s.elapsed_s
    );
    if let Some(line) = verdict_line(&s.records) {
        println!("{line}");
    }
}

/// One sentence answering the design question from the finished points.
pub fn verdict_line(records: &[crate::experiment::results::PointRecord]) -> Option<String> {
    let choice = crate::answers::choose(&crate::answers::candidates(records))?;
    let r = records.iter().find(|r| r.point as u64 == choice.point)?;
    let m = r.summary();
    let margin = crate::answers::yield_margin(r, &m)?;
    let cost = r.cost.as_ref().map_or_else(String::new, |c| {
        format!(
            ", {:.0} um2 layout area, {} supply current",
            c.area_m2 * 1e12,
            crate::units::format_si(c.supply_current_a, "A", 3)
        )
    });
    let target = r.yield_target.unwrap_or(f64::NAN);
    Some(if choice.passes {
        format!(
            "cheapest passing point: {} (yield low end {:.3} >= target {:.3}, margin {:+.3}{cost})",
            r.point, m.yield_lo, target, margin
        )
    } else {
        format!(
            "no point passes: nearest is point {} (yield low end {:.3} < target {:.3}, short by {:.3}; {:.1} % of chips reach {:.1} % accuracy{cost})",
            r.point,
            m.yield_lo,
            target,
            -margin,
            100.0 * m.yield_,
            100.0 * r.target
        )
    })
}
