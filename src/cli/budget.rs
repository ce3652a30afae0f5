//! `hardmax budget`: the error budget of one design point (which nonideality costs what).

use std::path::PathBuf;

use anyhow::Context;
use clap::Args;

use crate::experiment::budget::{dies_csv, run_budget, BudgetOptions};
// Corner-aware: with a `[corners]` table, point P is (design point, corner) as in a run's points.csv.
use crate::experiment::corners::load_run as load;
use crate::io::write_atomic;
use hardmax_report::report::budget::{budget_csv, budget_html, budget_svg, stdout_table};

#[derive(Debug, Args)]
pub struct BudgetArgs {
    /// Experiment file (TOML).
    pub file: PathBuf,
    /// Sweep point to budget (0 = the first, as numbered in points.csv).
    #[arg(long, default_value_t = 0)]
    pub point: usize,
    /// Paired dies (default: the experiment's population.chips).
    #[arg(long)]
    pub chips: Option<u64>,
    /// Output folder (default: results/<experiment name>/budget-point-<N>).
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Override a key of the experiment, e.g. --set population.chips=50 (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Worker threads (default: all cores). Results do not depend on it.
    #[arg(long)]
    pub threads: Option<usize>,
    /// Print nothing but errors.
    #[arg(long, short)]
    pub quiet: bool,
}

pub fn run(args: BudgetArgs) -> anyhow::Result<()> {
    let resolved = load(&args.file, &args.set)?;
    let opts = BudgetOptions {
        point: args.point,
        chips: args.chips,
        threads: args.threads,
        command: std::env::args().collect::<Vec<_>>().join(" "),
    };
    let b = run_budget(&resolved, &opts)
        .with_context(|| format!("budget of `{}`", args.file.display()))?;
    let out = args.out.clone().unwrap_or_else(|| {
        PathBuf::from("results")
            .join(&resolved.base.name)
            .join(format!("budget-point-{}", args.point))
    });
    std::fs::create_dir_all(&out)
        .with_context(|| format!("creating the output folder {} (--out)", out.display()))?;
    let svg = budget_svg(&b.table)?;
    let files = [
        ("budget.csv", budget_csv(&b.table)),
        ("budget-dies.csv", dies_csv(&b)),
        ("budget.svg", svg.clone()),
        ("budget.html", budget_html(&b.table, &svg, crate::CAUTION)),
    ];
    for (name, text) in &files {
        let p = out.join(name);
        write_atomic(&p, text.as_bytes()).with_context(|| format!("writing {}", p.display()))?;
    }
    if !args.quiet {
        print!("{}", stdout_table(&b.table));
        println!(
            "{}",
            hardmax_report::report::budget::recommendation(&b.table)
        );
        println!(
            "{} variants x {} dies in {:.1} s; files in {}",
            b.variant_names.len(),
            b.table.dies,
            b.elapsed_s,
            out.display()
        );
        println!("{}", crate::CAUTION);
    }
    Ok(())
}
