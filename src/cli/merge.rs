//! `hardmax merge`: shard folders (from `hardmax run --shard K/N`, in any order) -> one results
//! folder with the tables of a single-machine run, then the report.

use std::path::PathBuf;

use anyhow::Context;
use clap::Args;

use crate::experiment::shard::merge;

#[derive(Debug, Args)]
pub struct MergeArgs {
    /// Shard folders written by `hardmax run --shard K/N` (every shard 1..N exactly once).
    #[arg(required = true, value_name = "SHARD_FOLDER")]
    pub shards: Vec<PathBuf>,
    /// The merged results folder.
    #[arg(long, short)]
    pub out: PathBuf,
    /// Replace the results of a different experiment found in the output folder.
    #[arg(long)]
    pub fresh: bool,
    /// Skip the plots and HTML report.
    #[arg(long)]
    pub no_report: bool,
    /// Print only errors.
    #[arg(long, short)]
    pub quiet: bool,
}

pub fn run(args: MergeArgs) -> anyhow::Result<()> {
    let command = std::env::args().collect::<Vec<_>>().join(" ");
    let summary = merge(&args.out, &args.shards, args.fresh, &command).with_context(|| {
        format!(
            "merging {} shard folder(s) into `{}`",
            args.shards.len(),
            args.out.display()
        )
    })?;
    let report = if args.no_report {
        None
    } else {
        Some(super::render::render_folder(&args.out)?)
    };
    if !args.quiet {
        println!(
            "merged {} shards: {} sweep points",
            summary.shards, summary.points
        );
        // The swept parameters, as the merged folder's manifest names them.
        let axes: Vec<super::run::AxisColumn> =
            crate::format::Manifest::read(&args.out.join("manifest.json"))
                .map(|m| {
                    m.sweep
                        .parameters
                        .into_iter()
                        .map(|p| (p.path, p.unit, p.labels))
                        .collect()
                })
                .unwrap_or_default();
        super::run::print_table(&summary.records, &axes);
        println!("results: {}", args.out.display());
        if let Some(r) = report {
            println!("report:  {}", r.display());
        }
        println!("{}", crate::CAUTION);
    }
    Ok(())
}
