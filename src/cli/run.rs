//! `hardmax run`: one experiment file -> one results folder.

use std::path::{Path, PathBuf};

use anyhow::Context;
use clap::Args;

use super::progress::Progress;
use crate::experiment::config::Resolved;
use crate::experiment::corners::load_run as load;
use crate::experiment::runner::{run as run_experiment, RunOptions, RunSummary};
use crate::experiment::shard::ShardSpec;
use hardmax_report::corners::CORNER_AXIS;

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
    /// Run only shard K of N (1-based, e.g. 2/4) of the (sweep point, chip) work; the folder
    /// holds a part for `hardmax merge` (default: results/<name>-shards/shard-K-of-N). No
    /// tables or report until merged.
    #[arg(long, value_name = "K/N")]
    pub shard: Option<ShardSpec>,
}

pub fn run(args: RunArgs) -> anyhow::Result<()> {
    let resolved = load(&args.file, &args.set)?;
    let out = args.out.clone().unwrap_or_else(|| match args.shard {
        None => PathBuf::from("results").join(&resolved.base.name),
        Some(s) => PathBuf::from("results")
            .join(format!("{}-shards", resolved.base.name))
            .join(s.folder_name()),
    });
    let (summary, report) = execute_with(
        &resolved,
        &out,
        &Choices {
            threads: args.threads,
            fresh: args.fresh,
            quiet: args.quiet,
            no_report: args.no_report || args.shard.is_some(),
            shard: args.shard,
        },
    )
    .with_context(|| format!("running `{}`", args.file.display()))?;
    if !args.quiet {
        match args.shard {
            None => print_summary(&summary, &resolved.axes),
            Some(s) => println!(
                "shard {s}: {} of its sweep points finished ({} run now, {} resumed) in {:.1} s; merge all {} shards with `hardmax merge --out DIR SHARD_FOLDERS...`",
                summary.records.len(),
                summary.points_run,
                summary.points_resumed,
                summary.elapsed_s,
                s.count
            ),
        }
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
    execute_with(
        resolved,
        out,
        &Choices {
            threads,
            fresh,
            quiet,
            no_report,
            shard: None,
        },
    )
}

/// The choices of one run beyond the experiment and the folder.
pub struct Choices {
    pub threads: Option<usize>,
    pub fresh: bool,
    pub quiet: bool,
    pub no_report: bool,
    pub shard: Option<ShardSpec>,
}

/// [`execute`] with a shard.
pub fn execute_with(
    resolved: &Resolved,
    out: &Path,
    c: &Choices,
) -> anyhow::Result<(RunSummary, Option<PathBuf>)> {
    let (threads, fresh, quiet, no_report) = (c.threads, c.fresh, c.quiet, c.no_report);
    let opts = RunOptions {
        out: out.to_path_buf(),
        threads,
        fresh,
        command: std::env::args().collect::<Vec<_>>().join(" "),
        shard: c.shard,
    };
    let prefix = match c.shard {
        None => resolved.base.name.clone(),
        Some(s) => format!("{} shard {s}", resolved.base.name),
    };
    super::progress::catch_interrupt();
    let progress = Progress::new(quiet, &prefix);
    let summary = run_experiment(resolved, &opts, &progress);
    progress.finish();
    if let Err(e @ crate::experiment::runner::RunError::Stopped { .. }) = &summary {
        // Ctrl-C: say what was kept and how to resume, and end like an interrupted program.
        eprintln!(
            "{}: {e} (results in `{}`)",
            resolved.base.name,
            out.display()
        );
        std::process::exit(130);
    }
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
    let columns: Vec<AxisColumn> = axes
        .iter()
        .map(|a| (a.path.clone(), a.unit.clone(), a.labels.clone()))
        .collect();
    print_table(&s.records, &columns);
    println!(
        "{} points ({} run now, {} resumed) in {:.1} s",
        s.points_total, s.points_run, s.points_resumed, s.elapsed_s
    );
    match axes.last().filter(|a| a.path == CORNER_AXIS) {
        // With corners a design point passes only at every corner: the plain verdict would
        // name one (point, corner) pair.
        Some(corner) => print_corners(s, axes, corner.labels.as_deref().unwrap_or_default()),
        None => {
            if let Some(line) = verdict_line(&s.records) {
                println!("{line}");
            }
        }
    }
}

/// The design points over all their corners: one line each (pass at every corner, the limiting
/// corner of each metric), then the headline "... at all N corners".
fn print_corners(s: &RunSummary, axes: &[crate::experiment::sweep::Axis], labels: &[String]) {
    use hardmax_report::corners::{from_records, headline, limits_text};
    let rows = from_records(&s.records, labels);
    let describe = |r: &hardmax_report::corners::AllCorners| {
        axes.iter()
            .zip(&r.params)
            .map(|(a, v)| {
                let name = a.path.rsplit('.').next().unwrap_or(&a.path);
                match a.labels.as_ref().and_then(|l| l.get(*v as usize)) {
                    Some(t) => format!("{name} = {t}"),
                    None if a.unit.is_empty() => format!("{name} = {v}"),
                    None => format!("{name} = {}", crate::units::format_si(*v, &a.unit, 4)),
                }
            })
            .collect::<Vec<_>>()
            .join(", ")
    };
    println!("over all {} corners (point = design point):", labels.len());
    for r in &rows {
        let verdict = match r.pass {
            Some(true) => "passes at every corner".to_string(),
            Some(false) => format!(
                "fails (at {})",
                r.margin.as_ref().map_or("?", |m| m.corner.as_str())
            ),
            None if r.done < r.total => format!("{} of {} corners finished", r.done, r.total),
            None => "no yield target".to_string(),
        };
        let settings = describe(r);
        println!(
            "{:>5}  {}{}{verdict}; {}",
            r.point,
            settings,
            if settings.is_empty() { "" } else { ": " },
            limits_text(r)
        );
    }
    if let Some(h) = headline(&rows, describe) {
        println!("{h}");
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

/// A swept parameter as a table column: key path, base SI unit, and a text axis's texts.
pub type AxisColumn = (String, String, Option<Vec<String>>);

/// One line per point: the swept values (with units), yield first, then accuracy and failures.
/// `axes` are the swept parameters in sweep order.
pub fn print_table(records: &[crate::experiment::results::PointRecord], axes: &[AxisColumn]) {
    let names: Vec<String> = axes
        .iter()
        .map(|(path, _, _)| path.rsplit('.').next().unwrap_or(path).to_string())
        .collect();
    let cell = |(_, unit, labels): &AxisColumn, v: f64| -> String {
        // A text axis (e.g. the circuit): its value's text, not its index.
        if let Some(text) = labels.as_ref().and_then(|l| l.get(v as usize)) {
            text.clone()
        } else if unit.is_empty() {
            format!("{v}")
        } else {
            crate::units::format_si(v, unit, 4)
        }
    };
    let widths: Vec<usize> = axes
        .iter()
        .zip(&names)
        .enumerate()
        .map(|(i, (a, n))| {
            records
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
        "{head}  {:>6}  {:>16}  {:>4}  {:>9}  {:>9}  {:>9}  {:>9}  {:>6}  {:>11}  {:>10}  {:>10}  {:>10}",
        "yield",
        "yield 95% CI",
        "pass",
        "acc mean",
        "acc p05",
        "ideal",
        "baseline",
        "failed",
        "area",
        "current",
        "power",
        "energy"
    );
    let si = |v: Option<f64>, unit: &str| {
        v.map_or_else(|| "-".into(), |v| crate::units::format_si(v, unit, 3))
    };
    for r in records {
        let m = r.summary();
        let margin = crate::answers::yield_margin(r, &m);
        let c = r.cost.as_ref();
        let t = crate::answers::decision_time(r, &m);
        let mut line = format!("{:>5}", r.point);
        for ((a, w), v) in axes.iter().zip(&widths).zip(&r.params) {
            line += &format!("  {:>w$}", cell(a, *v));
        }
        println!(
            "{line}  {:>6.3}  [{:>6.3}, {:>6.3}]  {:>4}  {:>9.4}  {:>9.4}  {:>9.4}  {:>9.4}  {:>6}  {:>11}  {:>10}  {:>10}  {:>10}",
            m.yield_,
            m.yield_lo,
            m.yield_hi,
            margin.map_or("-", |x| if x >= 0.0 { "yes" } else { "no" }),
            m.acc_mean,
            m.acc_p05,
            r.ideal_acc,
            r.baseline_acc,
            m.nonconverged,
            c.map_or_else(|| "-".into(), |c| format!("{:.0} um2", c.area_m2 * 1e12)),
            si(c.map(|c| c.supply_current_a), "A"),
            si(c.map(|c| c.power_w), "W"),
            si(c.and_then(|c| t.map(|t| c.power_w * t)), "J"),
        );
    }
}
