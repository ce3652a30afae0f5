//! `hardmax export-netlist` and `hardmax compare-netlist`: the round trip with the designer's
//! circuit simulator (edge layer: files and the ngspice run; the netlist text, the result
//! parsing and the comparison are in [`crate::netlist`]).
//!
//! An export writes `NAME.cir` (the SPICE3 deck) and `NAME.hardmax.json` (the export record:
//! where the die came from, the node names, the decision rule and hardmax's own answer for every
//! sample), so a comparison needs nothing else. Formats: DEVELOPERS.md, "Netlist export".

use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::Command;

use anyhow::{bail, Context};
use clap::Args;
use serde::{Deserialize, Serialize};

use crate::experiment::build::{build_point, prepare_data};
// Corner-aware: with a `[corners]` table, point P is (design point, corner) as in a run's points.csv.
use crate::experiment::corners::load_run as load;
use crate::experiment::runner::experiment_hash;
use crate::io::write_atomic;
use crate::netlist::{
    build, compare, parse_results_csv, solve_samples, DeviceForm, Die, NetlistOptions,
    SampleComparison, SampleSolution, SimResults,
};
use crate::stages::competition::{CompetitionStage, DecisionRule};
use crate::units::format_si;

/// Format name and version of the export record.
pub const RECORD_FORMAT: &str = "hardmax-netlist-export";
pub const RECORD_VERSION: u32 = 1;

#[derive(Debug, Args)]
#[command(after_help = crate::CAUTION)]
pub struct ExportArgs {
    /// A stage file (as for `hardmax stage`): export its nominal stage.
    #[arg(long, value_name = "FILE", conflicts_with = "results")]
    pub stage: Option<PathBuf>,
    /// Input currents of one sample, e.g. "10nA,12nA,9nA" (repeat for more samples; the first
    /// replaces the stage file's `inputs`). Stage files only.
    #[arg(long, value_name = "LIST", requires = "stage")]
    pub inputs: Vec<String>,
    /// A results folder of `hardmax run`: export one sampled die of it.
    #[arg(long, value_name = "DIR", requires = "chip")]
    pub results: Option<PathBuf>,
    /// Sweep point of the die (results folder).
    #[arg(long, default_value_t = 0)]
    pub point: usize,
    /// Chip index of the die within its sweep point (results folder).
    #[arg(long)]
    pub chip: Option<u64>,
    /// Test samples whose weight-stage currents feed the stage, e.g. "0,5,17" or "0-9".
    #[arg(long, value_name = "LIST", default_value = "0-4")]
    pub samples: String,
    /// Folder the experiment's relative dataset paths are taken from (results folder).
    #[arg(long, value_name = "DIR", default_value = ".")]
    pub data_dir: PathBuf,
    /// Write transistors as instances of this model (e.g. nch) from --model-file instead of
    /// hardmax's behavioural EKV equations.
    #[arg(long, value_name = "NAME", requires = "model_file")]
    pub model: Option<String>,
    /// The designer's model file, written into an `.include` line as given.
    #[arg(long, value_name = "FILE", requires = "model")]
    pub model_file: Option<String>,
    /// A plain deck (ends with `.op`) without the ngspice `.control` block that writes the raw file.
    #[arg(long)]
    pub plain: bool,
    /// The netlist to write (NAME.cir); the export record goes to NAME.hardmax.json beside it.
    #[arg(long, short, value_name = "FILE")]
    pub out: PathBuf,
}

#[derive(Debug, Args)]
#[command(after_help = crate::CAUTION)]
pub struct CompareArgs {
    /// The export record (NAME.hardmax.json) written by `hardmax export-netlist`.
    pub record: PathBuf,
    /// Run `ngspice -b` on the exported netlist first (it writes NAME.raw beside it).
    #[arg(long)]
    pub run_ngspice: bool,
    /// The simulator's answers: an ngspice ASCII raw file, or a CSV (`.csv`; columns in
    /// DEVELOPERS.md). Default: the raw file the exported netlist writes.
    #[arg(long, value_name = "FILE")]
    pub sim_output: Option<PathBuf>,
    /// The comparison CSV to write (default: NAME.comparison.csv beside the record).
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
}

/// Where the exported die came from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum ExportSource {
    StageFile {
        file: String,
    },
    Results {
        folder: String,
        seed: u64,
        point: usize,
        chip: u64,
    },
}

/// One exported sample.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RecordSample {
    pub test_sample: Option<usize>,
    pub true_class: Option<usize>,
    pub ideal_class: Option<usize>,
    pub hardmax: SampleSolution,
}

/// The export record (`NAME.hardmax.json`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ExportRecord {
    pub format: String,
    pub format_version: u32,
    pub tool_version: String,
    /// The netlist's file name (beside the record).
    pub netlist: String,
    /// The raw file the netlist's ngspice block writes (beside the netlist), if any.
    pub raw: Option<String>,
    pub source: ExportSource,
    pub stage: String,
    pub n: usize,
    /// Stage node names as in the netlist's subcircuit ports, hardmax's node order.
    pub nodes: Vec<String>,
    pub temperature_k: f64,
    pub device_form: DeviceForm,
    pub rule: DecisionRule,
    pub samples: Vec<RecordSample>,
}

/// Parse "0,5,17" or "0-9" or a mix.
fn parse_list(text: &str) -> anyhow::Result<Vec<usize>> {
    let mut out = Vec::new();
    for part in text.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        match part.split_once('-') {
            Some((a, b)) => {
                let (a, b): (usize, usize) = (a.trim().parse()?, b.trim().parse()?);
                if b < a {
                    bail!("--samples: range `{part}` runs backwards");
                }
                out.extend(a..=b);
            }
            None => out.push(
                part.parse()
                    .with_context(|| format!("--samples: `{part}` is not an index"))?,
            ),
        }
    }
    if out.is_empty() {
        bail!("--samples: no sample chosen; give e.g. \"0,5,17\" or \"0-9\"");
    }
    Ok(out)
}

fn record_path(cir: &Path) -> PathBuf {
    cir.with_extension("hardmax.json")
}

pub fn export(args: ExportArgs) -> anyhow::Result<()> {
    let stem = args
        .out
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "die".into());
    let mut trim_lines = String::new();
    let (chip, temperature, samples, rule, source, notes, meta) = match (&args.stage, &args.results)
    {
        (Some(file), None) => {
            let (chip, t, samples, rule) = super::stage::stage_file_chip(file, &args.inputs)?;
            let meta = vec![(None, None, None); samples.len()];
            let src = ExportSource::StageFile {
                file: file.display().to_string(),
            };
            (chip, t, samples, rule, src, Vec::new(), meta)
        }
        (None, Some(dir)) => {
            let chip_index = args.chip.unwrap_or(0);
            let wanted = parse_list(&args.samples)?;
            let exp_file = dir.join("experiment.toml");
            let resolved = load(&exp_file, &[])
                .with_context(|| format!("reading the results folder `{}`", dir.display()))?;
            if let Ok(h) = std::fs::read_to_string(dir.join("experiment.hash")) {
                // The identity covers the input files' contents too: a changed dataset is
                // refused here as well.
                // Relative input paths are taken from --data-dir, as for the run itself.
                let mut at_data_dir = resolved.clone();
                at_data_dir.file = args.data_dir.join("experiment.toml");
                let now = experiment_hash(&at_data_dir).with_context(|| {
                    format!(
                        "checking the inputs of the results folder `{}`",
                        dir.display()
                    )
                })?;
                if h.trim() != now {
                    bail!(
                        "{}: the folder's experiment.hash does not match its experiment.toml \
                             (written by another hardmax version?): rerun the experiment first",
                        dir.display()
                    );
                }
            }
            let e = resolved.at_point.get(args.point).with_context(|| {
                format!(
                    "--point {}: the experiment has {} sweep point(s)",
                    args.point,
                    resolved.at_point.len()
                )
            })?;
            let chips = resolved.base.population.chips;
            if chip_index >= chips {
                bail!("--chip {chip_index}: the population has {chips} chip(s) per point");
            }
            let prep = prepare_data(e, &args.data_dir)?;
            let setup = build_point(e, &prep)?;
            let seed = resolved.base.population.seed;
            let die = crate::pipeline::sample_die(
                &setup,
                &prep,
                seed,
                resolved.base.population.pairing.dies_at(args.point),
                chip_index,
                &wanted,
            )?;
            let notes = die
                .test_indices
                .iter()
                .zip(&die.truth)
                .map(|(i, t)| {
                    format!(
                        "test sample {i}, true class {}",
                        prep.class_names.get(*t).cloned().unwrap_or_default()
                    )
                })
                .collect();
            let meta = die
                .test_indices
                .iter()
                .zip(die.truth.iter().zip(&die.ideal))
                .map(|(&i, (&t, &d))| (Some(i), Some(t), Some(d)))
                .collect();
            let src = ExportSource::Results {
                folder: dir.display().to_string(),
                seed,
                point: args.point,
                chip: chip_index,
            };
            trim_lines = die.trim.as_ref().map(trim_comment).unwrap_or_default();
            (
                die.chip,
                die.temperature,
                die.inputs,
                setup.design.decision,
                src,
                notes,
                meta,
            )
        }
        _ => bail!("give either --stage FILE or --results DIR --chip C"),
    };
    let form = match (&args.model, &args.model_file) {
        (Some(m), Some(f)) => DeviceForm::ModelCard {
            include: f.clone(),
            model: m.clone(),
        },
        _ => DeviceForm::Behavioural,
    };
    let raw = (!args.plain).then(|| format!("{stem}.raw"));
    let die = Die { chip, temperature };
    let opts = NetlistOptions {
        title: format!("hardmax die export {stem}"),
        form: form.clone(),
        ngspice_raw: raw.clone(),
        sample_notes: notes,
    };
    let mut net = build(&die, &samples, &opts)?;
    if !trim_lines.is_empty() {
        // After the title line (a SPICE deck's first line is its title).
        let at = net.text.find('\n').map_or(net.text.len(), |i| i + 1);
        net.text.insert_str(at, &trim_lines);
    }
    let circuit = die.chip.at(temperature)?;
    let ours = solve_samples(&circuit, &samples, &rule);
    if matches!(
        die.chip,
        crate::stages::competition::CompetitionChip::KWinners(_)
    ) {
        net.text = with_nodesets(&net, &ours);
    }
    let record = ExportRecord {
        format: RECORD_FORMAT.into(),
        format_version: RECORD_VERSION,
        tool_version: env!("CARGO_PKG_VERSION").into(),
        netlist: args
            .out
            .file_name()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default(),
        raw,
        source,
        stage: circuit.stage_name().into(),
        n: net.n,
        nodes: net.nodes.clone(),
        temperature_k: temperature,
        device_form: form,
        rule,
        samples: ours
            .into_iter()
            .zip(meta)
            .map(|(h, (ts, tc, ic))| RecordSample {
                test_sample: ts,
                true_class: tc,
                ideal_class: ic,
                hardmax: h,
            })
            .collect(),
    };
    if let Some(parent) = args.out.parent().filter(|p| !p.as_os_str().is_empty()) {
        std::fs::create_dir_all(parent)
            .with_context(|| format!("creating `{}`", parent.display()))?;
    }
    write_atomic(&args.out, net.text.as_bytes())?;
    let rec = record_path(&args.out);
    write_atomic(&rec, serde_json::to_string_pretty(&record)?.as_bytes())?;
    println!(
        "netlist: {} ({} sample(s), {} class lines, {})",
        args.out.display(),
        net.samples,
        net.n,
        match &record.device_form {
            DeviceForm::Behavioural => "behavioural EKV".to_string(),
            DeviceForm::ModelCard { model, .. } => format!("model {model}"),
        }
    );
    println!("record:  {}", rec.display());
    for (s, r) in record.samples.iter().enumerate() {
        if let Some(f) = &r.hardmax.failure {
            println!("sample {s}: hardmax's solve failed: {f}");
        }
    }
    Ok(())
}

/// The deck with one `.nodeset` line per sample before `.op`: hardmax's node voltages rounded
/// to 1 mV, a start for the simulator's Newton solve, not its answer (it must still converge on
/// its own). A k-winners die needs it: from zero, ngspice's gmin stepping drives the winners'
/// line nodes past the supply, where the input sources' compliance factor has no solution
/// (DEVELOPERS.md, "Netlist export", k-winners WTA). A sample whose solve failed gets none.
fn with_nodesets(net: &crate::netlist::Netlist, ours: &[SampleSolution]) -> String {
    let mut text = String::with_capacity(net.text.len() + 64 * ours.len());
    for line in net.text.lines() {
        if line == ".op" {
            for (s, o) in ours.iter().enumerate() {
                if o.node_voltages.len() != net.nodes.len() {
                    continue;
                }
                let set: Vec<String> = net
                    .nodes
                    .iter()
                    .zip(&o.node_voltages)
                    .map(|(nd, v)| format!("v(s{s}_{nd})={v:.3}"))
                    .collect();
                let _ = writeln!(text, ".nodeset {}", set.join(" "));
            }
        }
        text.push_str(line);
        text.push('\n');
    }
    text
}

/// Table and CSV of a comparison.
fn render(record: &ExportRecord, rows: &[SampleComparison]) -> (String, String, String) {
    let mut table = String::new();
    let mut csv = String::from(
        "sample,test_sample,true_class,hardmax_winner,hardmax_ambiguous,sim_winner,sim_ambiguous,agree,max_share_diff,max_node_diff_v,worst_node\n",
    );
    writeln!(
        table,
        "{:>6} {:>6} {:>7} {:>9} {:>9} {:>6} {:>12} {:>12} {:>6}",
        "sample",
        "test",
        "truth",
        "hardmax",
        "simulator",
        "agree",
        "share diff",
        "node diff",
        "node"
    )
    .unwrap();
    let fmt_w = |w: Option<usize>, amb: bool| match w {
        None => "failed".to_string(),
        Some(w) => format!("{w}{}", if amb { "?" } else { "" }),
    };
    let opt = |x: Option<usize>| x.map(|v| v.to_string()).unwrap_or_default();
    for (r, s) in rows.iter().zip(&record.samples) {
        writeln!(
            table,
            "{:>6} {:>6} {:>7} {:>9} {:>9} {:>6} {:>12.3e} {:>12.3e} {:>6}",
            r.sample,
            opt(s.test_sample),
            opt(s.true_class),
            fmt_w(r.hardmax_winner, r.hardmax_ambiguous),
            fmt_w(Some(r.sim_winner), r.sim_ambiguous),
            if r.agree { "yes" } else { "NO" },
            r.max_share_diff,
            r.max_node_diff,
            r.worst_node
        )
        .unwrap();
        writeln!(
            csv,
            "{},{},{},{},{},{},{},{},{:e},{:e},{}",
            r.sample,
            opt(s.test_sample),
            opt(s.true_class),
            opt(r.hardmax_winner),
            r.hardmax_ambiguous,
            r.sim_winner,
            r.sim_ambiguous,
            r.agree,
            r.max_share_diff,
            r.max_node_diff,
            r.worst_node
        )
        .unwrap();
    }
    let agree = rows.iter().filter(|r| r.agree).count();
    let worst_v = rows.iter().map(|r| r.max_node_diff).fold(0.0, f64::max);
    let worst_s = rows.iter().map(|r| r.max_share_diff).fold(0.0, f64::max);
    let summary = format!(
        "decisions agree on {agree} of {} sample(s); largest node-voltage difference {}; \
         largest share difference {worst_s:.3e}",
        rows.len(),
        format_si(worst_v, "V", 3)
    );
    let mut md = String::new();
    writeln!(md, "## Simulator comparison: {}", record.netlist).unwrap();
    writeln!(md).unwrap();
    writeln!(
        md,
        "Die: {}; stage: {}, {} class lines, {} K; devices: {}.",
        match &record.source {
            ExportSource::StageFile { file } => format!("nominal stage of `{file}`"),
            ExportSource::Results {
                folder,
                seed,
                point,
                chip,
            } => format!("`{folder}` seed {seed}, point {point}, chip {chip}"),
        },
        record.stage,
        record.n,
        record.temperature_k,
        match &record.device_form {
            DeviceForm::Behavioural => "behavioural EKV (hardmax's equations)".to_string(),
            DeviceForm::ModelCard { model, include } => format!("model `{model}` from `{include}`"),
        }
    )
    .unwrap();
    writeln!(md).unwrap();
    writeln!(md, "{summary}.").unwrap();
    writeln!(md).unwrap();
    writeln!(md, "```").unwrap();
    md.push_str(&table);
    writeln!(md, "```").unwrap();
    writeln!(md).unwrap();
    writeln!(md, "{}", crate::CAUTION).unwrap();
    table.push_str(&summary);
    table.push('\n');
    (table, csv, md)
}

/// Run `ngspice -b` on `cir` in its own folder.
fn run_ngspice(cir: &Path) -> anyhow::Result<()> {
    let dir = cir
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = cir.file_name().context("netlist path has no file name")?;
    let out = Command::new("ngspice")
        .arg("-b")
        .arg(name)
        .current_dir(dir)
        .output()
        .context("could not start `ngspice`: is it installed and on PATH?")?;
    if !out.status.success() {
        bail!(
            "ngspice failed on `{}`:\n{}{}",
            cir.display(),
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        );
    }
    Ok(())
}

pub fn compare_cmd(args: CompareArgs) -> anyhow::Result<()> {
    let text = std::fs::read_to_string(&args.record)
        .with_context(|| format!("reading `{}`", args.record.display()))?;
    let record: ExportRecord = serde_json::from_str(&text).with_context(|| {
        format!(
            "`{}` is not an export record of `hardmax export-netlist`",
            args.record.display()
        )
    })?;
    if record.format != RECORD_FORMAT || record.format_version != RECORD_VERSION {
        bail!(
            "`{}`: format {} version {}, expected {RECORD_FORMAT} version {RECORD_VERSION}",
            args.record.display(),
            record.format,
            record.format_version
        );
    }
    let dir = args
        .record
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_default();
    let cir = dir.join(&record.netlist);
    if args.run_ngspice {
        if record.raw.is_none() {
            bail!("the netlist was exported with --plain (no ngspice block); export it again without --plain");
        }
        run_ngspice(&cir)?;
    }
    let sim_file = match (&args.sim_output, &record.raw) {
        (Some(f), _) => f.clone(),
        (None, Some(r)) => dir.join(r),
        (None, None) => bail!("give --sim-output FILE (the netlist was exported with --plain)"),
    };
    let sim_text = std::fs::read_to_string(&sim_file).with_context(|| {
        format!(
            "reading the simulator output `{}` (run the netlist, or pass --run-ngspice)",
            sim_file.display()
        )
    })?;
    let name = sim_file.display().to_string();
    let samples = record.samples.len();
    let sim = if sim_file
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("csv"))
    {
        parse_results_csv(&sim_text, &name, record.n, &record.nodes, samples)?
    } else {
        SimResults::from_raw(&sim_text, &name, record.n, &record.nodes, samples)?
    };
    let ours: Vec<SampleSolution> = record.samples.iter().map(|s| s.hardmax.clone()).collect();
    let rows = compare(&ours, &sim, &record.nodes, &record.rule);
    let (table, csv, md) = render(&record, &rows);
    print!("{table}");
    let out = args.out.clone().unwrap_or_else(|| {
        let stem = record.netlist.trim_end_matches(".cir");
        dir.join(format!("{stem}.comparison.csv"))
    });
    write_atomic(&out, csv.as_bytes())?;
    let md_path = out.with_extension("md");
    write_atomic(&md_path, md.as_bytes())?;
    println!("comparison: {} and {}", out.display(), md_path.display());
    if let ExportSource::Results { folder, .. } = &record.source {
        let spice = Path::new(folder).join("spice");
        if Path::new(folder).is_dir() {
            std::fs::create_dir_all(&spice)?;
            let stem = record.netlist.trim_end_matches(".cir");
            write_atomic(
                &spice.join(format!("{stem}.comparison.csv")),
                csv.as_bytes(),
            )?;
            write_atomic(&spice.join(format!("{stem}.comparison.md")), md.as_bytes())?;
            println!("results folder section: {}", spice.display());
        }
    }
    Ok(())
}

/// Comment lines naming a trimmed die's gains: the input sources already carry the line gains
/// (each competition input current times its line's gain) and the weight stage the column
/// gains, so the netlist is the trimmed die.
fn trim_comment(t: &crate::pipeline::DieTrim) -> String {
    let list = |g: &[f64]| {
        g.iter()
            .map(|x| format!("{x:.9}"))
            .collect::<Vec<_>>()
            .join(" ")
    };
    let mut s =
        String::from("* trimmed die ([trim]): the input currents below already include the trim\n");
    if !t.line_gains.is_empty() {
        s.push_str(&format!(
            "* trim line gains (competition line 0..): {}\n",
            list(&t.line_gains)
        ));
    }
    if !t.column_gains.is_empty() {
        s.push_str(&format!(
            "* trim column gains (input column 0.., bias line last): {}\n",
            list(&t.column_gains)
        ));
    }
    s
}
