//! Command-line interface (edge layer). Each subcommand lives in its own file with its clap
//! arguments and a `run` function; `main.rs` only calls [`main_entry`].

use clap::{Parser, Subcommand};

pub mod baseline;
pub mod batch;
pub mod budget;
pub mod die;
pub mod fit;
pub mod merge;
pub mod netlist;
pub mod progress;
pub mod render;
pub mod resolve;
pub mod run;
pub mod size;
pub mod slurm;
pub mod stage;

/// hardmax: what accuracy will a population of analog WTA classifier chips deliver?
///
/// Architecture-stage estimates from compact models and generic parameters; final decisions
/// need the foundry's characterised models and your verification flow.
#[derive(Debug, Parser)]
#[command(name = "hardmax", version, about, long_about = None)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run one experiment file: Monte Carlo chip populations over its sweep; writes a results folder.
    Run(run::RunArgs),
    /// Run every experiment file in folders or lists; skip those already up to date.
    Batch(batch::BatchArgs),
    /// Print an experiment file with every default filled in, after overrides; check it.
    Resolve(resolve::ResolveArgs),
    /// Evaluate one competition stage on given inputs, or sweep one input (transfer curve).
    Stage(Box<stage::StageArgs>),
    /// Merge the shard folders of an experiment (`run --shard K/N`) into one results folder.
    Merge(merge::MergeArgs),
    /// Write (and with --submit, submit) a Slurm array job of shards plus a dependent merge job.
    SlurmScript(slurm::SlurmArgs),
    /// Re-render plots and the HTML report of an existing results folder from its CSV files.
    Render(render::RenderArgs),
    /// Error budget of one design point: what each nonideality costs, on the same dies.
    Budget(budget::BudgetArgs),
    /// Sizing search: the cheapest design meeting the yield target over the [search] ranges.
    Size(size::SizeArgs),
    /// Train the float classifier on a dataset; print the linfa baseline and ideal-argmax accuracy.
    Baseline(baseline::BaselineArgs),
    /// Write a SPICE netlist of a stage or of one sampled die, with hardmax's answers beside it.
    ExportNetlist(Box<netlist::ExportArgs>),
    /// Read a simulator's answers to an exported netlist (optionally run ngspice) and compare.
    CompareNetlist(netlist::CompareArgs),
    /// Fit NMOS EKV parameters to I-V sweeps (CSV); write a [process] block.
    FitDevice(fit::FitArgs),
    /// Fit the Pelgrom threshold constant A_VT to sweeps of many devices at several sizes.
    FitPelgrom(fit::PelgromArgs),
}

/// Parse the command line and run the chosen subcommand.
pub fn main_entry() -> anyhow::Result<()> {
    let cli = Cli::parse();
    match cli.command {
        Command::Run(a) => run::run(a),
        Command::Batch(a) => batch::run(a),
        Command::Resolve(a) => resolve::run(a),
        Command::Stage(a) => stage::run(*a),
        Command::Merge(a) => merge::run(a),
        Command::SlurmScript(a) => slurm::run(a),
        Command::Render(a) => render::run(a),
        Command::Baseline(a) => baseline::run(a),
        Command::ExportNetlist(a) => netlist::export(*a),
        Command::CompareNetlist(a) => netlist::compare_cmd(a),
        Command::FitDevice(a) => fit::fit_device(a),
        Command::FitPelgrom(a) => fit::fit_pelgrom_cmd(a),
        Command::Budget(a) => budget::run(a),
        Command::Size(a) => size::run(a),
    }
}
