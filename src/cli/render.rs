//! `hardmax render DIR`: re-draw the plots and the HTML report of an existing results folder
//! from its CSV files and manifest (no simulation), e.g. after upgrading hardmax.

use std::path::PathBuf;

use anyhow::Context;
use clap::Args;

use crate::report::{self, RenderOptions, TransferMeta};

/// Re-render `plots/*.svg` and `report.html` of a results folder from its CSV files.
///
/// The report gives architecture-stage estimates, not sign-off.
#[derive(Debug, Args)]
pub struct RenderArgs {
    /// Results folder written by `hardmax run` (holds manifest.json, points.csv, ...).
    pub dir: PathBuf,

    /// Sweep point for the per-chip histogram, confusion matrix and decision-time figure
    /// [default: the finished point with the lowest mean accuracy].
    #[arg(long, value_name = "N")]
    pub point: Option<u64>,

    /// Stage transfer curve CSV (`x, out_0.., share_0..`, from `hardmax stage ... --sweep`) to
    /// store in the folder (`transfer/NAME.csv`) and plot with every later render.
    #[arg(long, value_name = "CSV", requires = "x_label")]
    pub transfer: Option<PathBuf>,

    /// What the transfer curve's x column is, e.g. "input current of output 0".
    #[arg(long, value_name = "TEXT", requires = "transfer")]
    pub x_label: Option<String>,

    /// SI unit of the transfer curve's x column (e.g. A or V) for the tick labels.
    #[arg(long, value_name = "UNIT", requires = "transfer", default_value = "")]
    pub x_unit: String,
}

pub fn run(args: RenderArgs) -> anyhow::Result<()> {
    if let (Some(csv), Some(label)) = (&args.transfer, &args.x_label) {
        let meta = TransferMeta {
            x_label: label.clone(),
            x_unit: args.x_unit.clone(),
        };
        let stored = report::add_transfer(&args.dir, csv, &meta)
            .with_context(|| format!("cannot add the transfer curve `{}`", csv.display()))?;
        println!("stored transfer curve: {}", stored.display());
    }
    let summary = report::render_with(&args.dir, &RenderOptions { point: args.point })
        .with_context(|| format!("cannot render the results folder `{}`", args.dir.display()))?;
    for p in &summary.plots {
        println!("wrote {}", p.display());
    }
    println!("wrote {}", summary.report.display());
    if summary.partial {
        println!(
            "note: partial run: {} of {} sweep points finished; the report shows those and says so",
            summary.points_rendered, summary.points_total
        );
    }
    println!("{}", crate::CAUTION);
    Ok(())
}

/// Render the plots and report of a results folder (used by `run` and `batch` at the end).
pub fn render_folder(dir: &std::path::Path) -> anyhow::Result<PathBuf> {
    let summary = report::render(dir)
        .with_context(|| format!("cannot render the results folder `{}`", dir.display()))?;
    Ok(summary.report)
}
