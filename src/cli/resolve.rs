//! `hardmax resolve`: check an experiment file and print it with every default filled in.

use std::path::PathBuf;

use clap::Args;

// Corner-aware: with a `[corners]` table, point P is (design point, corner) as in a run's points.csv.
use crate::experiment::corners::load_run as load;

#[derive(Debug, Args)]
pub struct ResolveArgs {
    /// Experiment file (TOML).
    pub file: PathBuf,
    /// Override a key, as for `hardmax run` (repeatable).
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Also list every sweep point.
    #[arg(long)]
    pub points: bool,
}

pub fn run(args: ResolveArgs) -> anyhow::Result<()> {
    let r = load(&args.file, &args.set)?;
    println!(
        "# resolved experiment `{}` (hardmax {})",
        r.base.name,
        env!("CARGO_PKG_VERSION")
    );
    println!(
        "# quantities with SI prefixes (each reads back exactly); {} sweep point(s)",
        r.points.len()
    );
    for a in &r.replaced_axes {
        println!("# --set {a}=... replaces the sweep axis `{a}` (one value)");
    }
    for w in &r.warnings {
        println!("# warning: {w}");
        eprintln!("warning: {w}");
    }
    print!("{}", r.to_toml());
    if args.points {
        println!();
        if r.axes.is_empty() {
            println!("# point 0: the experiment as resolved above (no sweep axis)");
        } else {
            for p in &r.points {
                println!("# point {}: {}", p.point, r.describe_point(p));
            }
        }
    }
    Ok(())
}
