//! `hardmax size`: the cheapest design meeting the yield target, searched over the dimensions
//! of the experiment file's `[search]` table, verified on a fresh population.

use std::path::PathBuf;

use anyhow::Context;
use clap::Args;

use crate::experiment::sizing::{run_size, SizeOptions};
use crate::io::write_atomic;
use hardmax_report::report::sizing::{answer_text, front_csv, search_csv, sizing_html, sizing_svg};

#[derive(Debug, Args)]
pub struct SizeArgs {
    /// Experiment file (TOML) with a [search] table.
    pub file: PathBuf,
    /// Output folder (default: results/<experiment name>/size).
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Override a key of the experiment, e.g. --set population.chips=100 (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Worker threads (default: all cores). Results do not depend on it.
    #[arg(long)]
    pub threads: Option<usize>,
    /// Print nothing but errors.
    #[arg(long, short)]
    pub quiet: bool,
}

pub fn run(args: SizeArgs) -> anyhow::Result<()> {
    let opts = SizeOptions {
        overrides: args.set.clone(),
        threads: args.threads,
        command: std::env::args().collect::<Vec<_>>().join(" "),
    };
    let s = run_size(&args.file, &opts)
        .with_context(|| format!("sizing search of `{}`", args.file.display()))?;
    let r = &s.report;
    let out = args
        .out
        .clone()
        .unwrap_or_else(|| PathBuf::from("results").join(&r.experiment).join("size"));
    std::fs::create_dir_all(&out)
        .with_context(|| format!("creating the output folder {} (--out)", out.display()))?;
    let svg = sizing_svg(r)?;
    let mut answer = answer_text(r, crate::CAUTION);
    if let Some(note) = &s.programming_note {
        answer.push_str(note);
    }
    let files = [
        ("search.csv", search_csv(r)),
        ("front.csv", front_csv(r)),
        ("size.svg", svg.clone()),
        ("size.html", sizing_html(r, &svg, crate::CAUTION)),
        ("answer.txt", answer.clone()),
    ];
    for (name, text) in &files {
        let p = out.join(name);
        write_atomic(&p, text.as_bytes()).with_context(|| format!("writing {}", p.display()))?;
    }
    if !args.quiet {
        print!("{answer}");
        println!("files in {}", out.display());
    }
    Ok(())
}
