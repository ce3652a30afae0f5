//! `hardmax stage`: evaluate one competition stage (a nominal chip, no mismatch) on given input
//! currents and print everything a designer needs to compare it with a circuit simulator solving
//! the same equations: every parameter actually used, node voltages, output currents, shares,
//! the small-signal gain, the decision and the solver report. `--sweep` writes a transfer curve
//! (CSV `x, out_0.., share_0..`, the format fixed in DEVELOPERS.md); `--transient` integrates the
//! node capacitances (current-mode WTA) for decision time and energy.
//!
//! Parameters come from a stage file (`--stage FILE`, TOML, schema below) and from flags;
//! a flag overrides the file. Quantities take SI prefixes and units ("10 nA", "2 um").
//!
//! Stage file keys (all optional), spelled as in experiment files: `circuit` ("current_wta" |
//! "diff_pair" | "hysteretic_wta" | "k_winners" | "cascade" | "repeated_max"), `k`,
//! `unit_current`, `[limiter]`, `fan_in`, `[copy]`, `copy_drain_voltage`, `step_time`, `preset`, `temperature`, `inputs` (array), `bias_current`, `supply`,
//! `output_voltage`, one of `gain` / `eta` / `early_voltage`, `node_capacitance`,
//! `common_capacitance`, `read_time`,
//! `[sink]` and `[output]` with `w`, `l`; `[nmos]` with `vt0`, `n`, one of `mu_cox` / `is`;
//! `[decision]` with `min_winner_share`, `max_runner_up_share`. Unknown keys are errors.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use anyhow::{anyhow, bail, Context};
use clap::{Args, ValueEnum};
use serde_json::json;

use crate::device::MosMismatch;
use crate::device::{preset, DrainCoupling, Ekv, Polarity, Transistor};
use crate::io::write_atomic;
use crate::physics::thermal_voltage;
use crate::scale::Scale;
use crate::stages::competition::analysis::{
    closed_form_gain, drain_coupling_for_gain, numerical_gain, ClosedFormGain, SweepError,
    SweepQuantity, TransferSweep,
};
use crate::stages::competition::hysteretic;
use crate::stages::competition::transient::{
    simulate, simulate_from, InitialState, NoiseOptions, TransientOptions, TransientWorkspace,
};
use crate::stages::competition::{
    CompetitionChip, CompetitionCircuit, CompetitionStage, CurrentSource, DecisionRule,
    DiffPairChip, DiffPairDesign, DiffPairInput, HysteresisChip, HysteresisDesign, StageSolution,
    Workspace, WtaChip, WtaDesign,
};
use crate::units::{format_si, parse_quantity, quantity_from_toml, Dimension};

#[path = "stage_composite.rs"]
mod composite;

/// Which competition circuit.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum CircuitArg {
    /// Current-mode WTA (two transistors per cell, one common node).
    CurrentWta,
    /// Multi-input differential pair fed through diode-connected NMOS (sink size).
    DiffPair,
    /// Current-mode WTA with hysteresis: a fraction (--feedback) of each cell's output current
    /// mirrored back into its input.
    HystereticWta,
    /// k-winners WTA: each cell's output limited to --unit-current, the bias at (k - 1/2) units.
    KWinners,
    /// Tree of small current-mode WTAs of --fan-in lines, each group's winner copied upward.
    Cascade,
    /// Ranking by repeated maximum: one current-mode WTA decides --k times, each winner removed.
    RepeatedMax,
}

/// Output format.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum Format {
    Table,
    Json,
    Csv,
}

/// Start of the transient.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum InitialArg {
    /// Every node at 0 V, inputs switched on at t = 0.
    Ground,
    /// The DC state of the mean input on every line.
    CommonMode,
}

#[derive(Debug, Args)]
#[command(after_help = crate::CAUTION)]
pub struct StageArgs {
    /// Stage file (TOML) with the parameters; flags override it.
    #[arg(long, value_name = "FILE")]
    pub stage: Option<PathBuf>,
    /// Competition circuit [default: current-wta] (stage files write "current_wta").
    #[arg(long, value_enum)]
    pub circuit: Option<CircuitArg>,
    /// Input currents, comma separated, e.g. "10nA,12nA,9nA" (at least 2).
    #[arg(long, value_name = "LIST", allow_hyphen_values = true)]
    pub inputs: Option<String>,
    /// Bias (tail) current [default: 100 nA].
    #[arg(
        long = "bias-current",
        alias = "bias",
        value_name = "CURRENT",
        allow_hyphen_values = true
    )]
    pub bias: Option<String>,
    /// Temperature [default: 300 K].
    #[arg(long, value_name = "T", allow_hyphen_values = true)]
    pub temperature: Option<String>,
    /// Process preset (generic-350nm, generic-180nm, generic-65nm) [default: generic-180nm].
    #[arg(long, value_name = "NAME")]
    pub preset: Option<String>,
    /// Competition gain kappa/sigma: sets the drain coupling eta = 1/gain of the stage's devices.
    #[arg(long, allow_hyphen_values = true)]
    pub gain: Option<f64>,
    /// Drain coupling eta of the stage's devices.
    #[arg(long, allow_hyphen_values = true)]
    pub eta: Option<f64>,
    /// Early voltage of the stage's devices (sigma = U_T / V_A).
    #[arg(long, value_name = "VOLTAGE", allow_hyphen_values = true)]
    pub early_voltage: Option<String>,
    /// Sink (WTA) or input-diode (diff pair) width [default: 2 um].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub sink_w: Option<String>,
    /// Sink or input-diode length [default: 2 um].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub sink_l: Option<String>,
    /// Output (WTA) or pair (diff pair) transistor width [default: 2 um].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub output_w: Option<String>,
    /// Output or pair transistor length [default: 2 um].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub output_l: Option<String>,
    /// NMOS threshold V_T0 at the process's nominal temperature.
    #[arg(long, value_name = "VOLTAGE", allow_hyphen_values = true)]
    pub vt0: Option<String>,
    /// NMOS slope factor n.
    #[arg(long, allow_hyphen_values = true)]
    pub n: Option<f64>,
    /// NMOS mu C_ox, e.g. "300 uA/V^2".
    #[arg(long, value_name = "A/V^2", allow_hyphen_values = true)]
    pub mu_cox: Option<String>,
    /// Specific current I_S of the sink at the nominal temperature (sets mu C_ox instead).
    #[arg(long = "is", value_name = "CURRENT", allow_hyphen_values = true)]
    pub specific_current: Option<String>,
    /// Supply V_dd [default: the preset's].
    #[arg(long, value_name = "VOLTAGE", allow_hyphen_values = true)]
    pub supply: Option<String>,
    /// Voltage of the output drains [default: the supply].
    #[arg(long, value_name = "VOLTAGE", allow_hyphen_values = true)]
    pub output_voltage: Option<String>,
    /// Capacitance of each input node [default: 50 fF].
    #[arg(
        long = "node-capacitance",
        alias = "input-capacitance",
        value_name = "CAP",
        allow_hyphen_values = true
    )]
    pub input_capacitance: Option<String>,
    /// Capacitance of the common node [default: 200 fF].
    #[arg(long, value_name = "CAP", allow_hyphen_values = true)]
    pub common_capacitance: Option<String>,
    /// Ambiguous when the winner's share is below this [default: 0.6].
    #[arg(long, allow_hyphen_values = true)]
    pub min_winner_share: Option<f64>,
    /// Ambiguous when the runner-up's share is above this [default: 0.3].
    #[arg(long, allow_hyphen_values = true)]
    pub max_runner_up_share: Option<f64>,
    /// Output format.
    #[arg(long, value_enum, default_value = "table")]
    pub format: Format,
    /// Sweep mode: "diff" (x = I_0 - I_1 around their mean) or "input:K" (x = I_K).
    #[arg(long, value_name = "WHAT")]
    pub sweep: Option<String>,
    /// First sweep value (a current).
    #[arg(
        long,
        value_name = "CURRENT",
        allow_hyphen_values = true,
        requires = "sweep"
    )]
    pub from: Option<String>,
    /// Last sweep value (a current).
    #[arg(
        long,
        value_name = "CURRENT",
        allow_hyphen_values = true,
        requires = "sweep"
    )]
    pub to: Option<String>,
    /// Number of sweep points (at least 2).
    #[arg(long, default_value_t = 41)]
    pub points: usize,
    /// Spacing of the sweep points (log needs from and to of the same sign, not zero).
    #[arg(long, default_value = "linear", value_parser = scale_arg())]
    pub scale: Scale,
    /// Write the sweep CSV here (default: standard output).
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
    /// Run the transient (every circuit but the differential pair): decision time and energy
    /// (a cascade's per level, a ranking's per round).
    #[arg(long, conflicts_with = "sweep")]
    pub transient: bool,
    /// Read the decision at this time (transient); default: run until settled.
    #[arg(long, value_name = "TIME", allow_hyphen_values = true)]
    pub read_time: Option<String>,
    /// Start of the transient.
    #[arg(long, value_enum, default_value = "ground")]
    pub initial: InitialArg,
    /// Write the transient waveform CSV (t, V_0.., V_C, out_0..) here.
    #[arg(long, value_name = "FILE", requires = "transient")]
    pub waveform: Option<PathBuf>,
    /// Integrate shot noise in the transient (SDE).
    #[arg(long, requires = "transient")]
    pub noise: bool,
    /// Seed of the noise stream.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Hysteretic WTA: fraction of each cell's output current mirrored back into its input
    /// [default: 0.1].
    #[arg(long, allow_hyphen_values = true)]
    pub feedback: Option<f64>,
    /// Hysteretic WTA: width of the feedback mirror's diode (PMOS) [default: 2 um].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub mirror_w: Option<String>,
    /// Hysteretic WTA: length of the feedback mirror's devices [default: 2 um].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub mirror_l: Option<String>,
    /// k-winners and repeated-max: the number of winners, 1 to N - 1 [default: 1].
    #[arg(long)]
    pub k: Option<usize>,
    /// k-winners: each cell's largest output current [default: the bias current].
    #[arg(long, value_name = "CURRENT", allow_hyphen_values = true)]
    pub unit_current: Option<String>,
    /// k-winners: width of each cell's PMOS output limiter [default: the output width].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub limiter_w: Option<String>,
    /// k-winners: length of the limiter [default: the output length].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub limiter_l: Option<String>,
    /// Cascade: lines per group of the tree (at least 2) [default: 2].
    #[arg(long)]
    pub fan_in: Option<usize>,
    /// Cascade: width of the replica copying a group's winner upward [default: the sink width].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub copy_w: Option<String>,
    /// Cascade: length of the replica [default: the sink length].
    #[arg(long, value_name = "LENGTH", allow_hyphen_values = true)]
    pub copy_l: Option<String>,
    /// Cascade: the replica's drain voltage [default: half the supply].
    #[arg(long, value_name = "VOLTAGE", allow_hyphen_values = true)]
    pub copy_drain_voltage: Option<String>,
    /// Repeated max at DC: the time each round is counted as taking [default: 1 us].
    #[arg(long, value_name = "TIME", allow_hyphen_values = true)]
    pub step_time: Option<String>,
    /// One transistor's deviation from nominal, e.g. "A_0:vt0=2mV,beta=-0.01" (threshold shift,
    /// relative current-factor deviation); repeat for more. Names as in the device table:
    /// A_k, B_k (WTA), D_k, M_k (diff pair), P_k, Q_k (hysteretic WTA's mirror), L_k
    /// (k-winners' limiter), bias, tail; a cascade's devices carry their group, LlGg.A_k,
    /// LlGg.B_k, LlGg.bias, LlGg.R (the replica).
    #[arg(
        long = "offset",
        value_name = "DEVICE:vt0=V,beta=REL",
        allow_hyphen_values = true
    )]
    pub offsets: Vec<String>,
    /// A results folder of `hardmax run`: load one die it sampled (--point, --chip), with its
    /// exact devices; --sample feeds it a test sample's weight-stage currents.
    #[arg(long, value_name = "DIR", requires = "chip", conflicts_with = "stage")]
    pub results: Option<PathBuf>,
    /// Sweep point of the die (with --results).
    #[arg(long, default_value_t = 0, requires = "results")]
    pub point: usize,
    /// Chip index of the die within its sweep point (with --results).
    #[arg(long, requires = "results")]
    pub chip: Option<u64>,
    /// Test sample whose weight-stage output currents (of this die, noiseless) are the inputs
    /// (with --results; a hysteretic die first replays the samples before it, in order).
    #[arg(long, requires = "results")]
    pub sample: Option<usize>,
    /// Folder the experiment's relative dataset paths are taken from (with --results).
    #[arg(long, value_name = "DIR", default_value = ".")]
    pub data_dir: PathBuf,
}

/// One transistor's explicit deviation (`--offset` or the stage file's `[offsets]`).
#[derive(Clone, Debug, PartialEq)]
struct Offset {
    device: String,
    dvt0: Option<f64>,
    dbeta: Option<f64>,
    /// Where it was given (for messages).
    source: String,
}

/// Every parameter of the stage, after file and flags (SI units).
#[derive(Clone, Debug)]
struct Spec {
    circuit: CircuitArg,
    preset: String,
    temperature: f64,
    inputs: Vec<f64>,
    bias: f64,
    supply: Option<f64>,
    output_voltage: Option<f64>,
    coupling: Option<(&'static str, DrainCoupling)>,
    sink: (f64, f64),
    output: (f64, f64),
    vt0: Option<f64>,
    n: Option<f64>,
    mu_cox: Option<f64>,
    specific_current: Option<f64>,
    input_capacitance: f64,
    common_capacitance: f64,
    rule: DecisionRule,
    read_time: Option<f64>,
    feedback: f64,
    mirror: (f64, f64),
    offsets: Vec<Offset>,
    k: usize,
    unit_current: Option<f64>,
    limiter: Option<(f64, f64)>,
    fan_in: usize,
    copy: Option<(f64, f64)>,
    copy_drain_voltage: Option<f64>,
    step_time: f64,
}

impl Default for Spec {
    fn default() -> Self {
        Spec {
            circuit: CircuitArg::CurrentWta,
            preset: "generic-180nm".into(),
            temperature: 300.0,
            inputs: Vec::new(),
            bias: 100e-9,
            supply: None,
            output_voltage: None,
            coupling: None,
            sink: (2e-6, 2e-6),
            output: (2e-6, 2e-6),
            vt0: None,
            n: None,
            mu_cox: None,
            specific_current: None,
            input_capacitance: 50e-15,
            common_capacitance: 200e-15,
            rule: DecisionRule::default(),
            read_time: None,
            feedback: 0.1,
            mirror: (2e-6, 2e-6),
            offsets: Vec::new(),
            k: 1,
            unit_current: None,
            limiter: None,
            fan_in: 2,
            copy: None,
            copy_drain_voltage: None,
            step_time: 1e-6,
        }
    }
}

/// Parse `--offset "A_0:vt0=2mV,beta=0.01"`.
fn parse_offset(text: &str) -> anyhow::Result<Offset> {
    let (device, rest) = text.split_once(':').ok_or_else(|| {
        anyhow!("--offset {text:?}: write DEVICE:vt0=VOLTAGE,beta=RELATIVE, e.g. \"A_0:vt0=2mV,beta=0.01\"")
    })?;
    let mut o = Offset {
        device: device.trim().to_string(),
        dvt0: None,
        dbeta: None,
        source: format!("--offset {text:?}"),
    };
    for part in rest.split(',') {
        let (k, v) = part.split_once('=').ok_or_else(|| {
            anyhow!("--offset {text:?}: `{part}` is not KEY=VALUE (keys vt0, beta)")
        })?;
        match k.trim() {
            "vt0" => o.dvt0 = Some(flag("offset", v.trim(), Dimension::Voltage)?),
            "beta" => o.dbeta = Some(flag("offset", v.trim(), Dimension::Dimensionless)?),
            other => bail!("--offset {text:?}: unknown key `{other}`; keys: vt0 (threshold shift, V), beta (relative current-factor deviation)"),
        }
    }
    Ok(o)
}

/// The deviations of every transistor of a chip, by name, in device-table order.
fn mismatch_slots(chip: &mut CompetitionChip) -> Vec<(String, &mut MosMismatch)> {
    fn wta_slots<'a>(c: &'a mut WtaChip, v: &mut Vec<(String, &'a mut MosMismatch)>) {
        let bias_is_transistor = c.design.bias.is_transistor();
        for (k, m) in c.sink.iter_mut().enumerate() {
            v.push((format!("A_{k}"), m));
        }
        for (k, m) in c.output.iter_mut().enumerate() {
            v.push((format!("B_{k}"), m));
        }
        if bias_is_transistor {
            v.push(("bias".to_string(), &mut c.bias));
        }
    }
    let mut v = Vec::new();
    match chip {
        CompetitionChip::Wta(c) => wta_slots(c, &mut v),
        CompetitionChip::Hysteretic(h) => {
            wta_slots(&mut h.wta, &mut v);
            for (k, m) in h.mirror_in.iter_mut().enumerate() {
                v.push((format!("P_{k}"), m));
            }
            for (k, m) in h.mirror_out.iter_mut().enumerate() {
                v.push((format!("Q_{k}"), m));
            }
        }
        CompetitionChip::KWinners(c) => {
            wta_slots(&mut c.cells, &mut v);
            for (k, m) in c.limiter.iter_mut().enumerate() {
                v.push((format!("L_{k}"), m));
            }
        }
        CompetitionChip::Ranking(c) => wta_slots(&mut c.cells, &mut v),
        CompetitionChip::Cascade(c) => {
            for (l, row) in c.groups.iter_mut().enumerate() {
                for (g, group) in row.iter_mut().enumerate() {
                    let at = v.len();
                    if let Some(cells) = &mut group.cells {
                        wta_slots(cells, &mut v);
                    }
                    for (name, _) in &mut v[at..] {
                        *name = format!("L{l}G{g}.{name}");
                    }
                    if let Some(m) = &mut group.copy {
                        v.push((format!("L{l}G{g}.R"), m));
                    }
                }
            }
        }
        CompetitionChip::DiffPair(c) => {
            if matches!(c.design.input, DiffPairInput::Diode { .. }) {
                for (k, m) in c.diodes.iter_mut().enumerate() {
                    v.push((format!("D_{k}"), m));
                }
            }
            for (k, m) in c.pair.iter_mut().enumerate() {
                v.push((format!("M_{k}"), m));
            }
            if c.design.tail.is_transistor() {
                v.push(("tail".to_string(), &mut c.tail));
            }
        }
    }
    v
}

/// Set the explicit deviations on a chip (they replace its own for the named devices); a name
/// the stage does not have is an error listing what it has.
fn apply_offsets(chip: &mut CompetitionChip, offsets: &[Offset]) -> anyhow::Result<()> {
    if offsets.is_empty() {
        return Ok(());
    }
    let mut slots = mismatch_slots(chip);
    for o in offsets {
        let Some((_, m)) = slots.iter_mut().find(|(name, _)| *name == o.device) else {
            let names: Vec<&str> = slots.iter().map(|(n, _)| n.as_str()).collect();
            let listed = summarise_names(&names);
            bail!(
                "{}: this stage has no transistor `{}`; it has {listed}",
                o.source,
                o.device
            );
        };
        if let Some(v) = o.dvt0 {
            if !v.is_finite() {
                bail!("{}: vt0 must be a finite voltage", o.source);
            }
            m.dvt0 = v;
        }
        if let Some(b) = o.dbeta {
            if !(b.is_finite() && b > -1.0) {
                bail!(
                    "{}: beta = {b} must be a relative deviation above -1 (beta -> beta (1 + dbeta))",
                    o.source
                );
            }
            m.dbeta_rel = b;
        }
    }
    Ok(())
}

/// "A_0..A_2, B_0..B_2, bias" from the full list of names.
fn summarise_names(names: &[&str]) -> String {
    let mut groups: Vec<(String, Vec<&str>)> = Vec::new();
    for n in names {
        let prefix = n
            .split_once('_')
            .map_or(n.to_string(), |(p, _)| p.to_string());
        match groups.last_mut() {
            Some((p, v)) if *p == prefix && n.contains('_') => v.push(n),
            _ => groups.push((prefix, vec![n])),
        }
    }
    groups
        .iter()
        .map(|(_, v)| {
            if v.len() > 2 {
                format!("{}..{}", v[0], v[v.len() - 1])
            } else {
                v.join(", ")
            }
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// A drain coupling in a designer's words ("Early voltage per length 10 V/um", "eta = 0.0067"),
/// not the type's internal spelling.
/// `--scale`: the names of [`Scale`] (listed in the help), parsed into it.
fn scale_arg() -> impl clap::builder::TypedValueParser<Value = Scale> {
    use clap::builder::TypedValueParser;
    clap::builder::PossibleValuesParser::new(Scale::ALL.map(Scale::name))
        .map(|s| s.parse::<Scale>().unwrap_or_default())
}

fn describe_coupling(dc: &DrainCoupling) -> String {
    use crate::units::short_number;
    match *dc {
        DrainCoupling::Eta(x) => format!("eta = {}", short_number(x)),
        DrainCoupling::Sigma(x) => format!("sigma = {}", short_number(x)),
        DrainCoupling::EarlyVoltage(v) => format!("Early voltage {}", format_si(v, "V", 4)),
        DrainCoupling::EarlyVoltagePerLength(v) => {
            format!("Early voltage per length {} V/um", short_number(v * 1e-6))
        }
    }
}

fn flag(name: &str, text: &str, dim: Dimension) -> anyhow::Result<f64> {
    parse_quantity(text, dim).map_err(|e| anyhow!("--{name}: {e}"))
}

fn parse_inputs(what: &str, items: &[String]) -> anyhow::Result<Vec<f64>> {
    let mut v = Vec::with_capacity(items.len());
    for (i, t) in items.iter().enumerate() {
        let x = parse_quantity(t, Dimension::Current).map_err(|e| anyhow!("{what}[{i}]: {e}"))?;
        if x < 0.0 {
            bail!("{what}[{i}] = {t:?} is negative; input currents must be >= 0");
        }
        v.push(x);
    }
    if v.len() < 2 {
        bail!(
            "{what}: a competition needs at least 2 inputs, got {}; give e.g. --inputs \"10nA,12nA,9nA\"",
            v.len()
        );
    }
    Ok(v)
}

fn set_coupling(
    spec: &mut Spec,
    key: &'static str,
    dc: DrainCoupling,
    source: &str,
) -> anyhow::Result<()> {
    if let (DrainCoupling::Eta(eta), "gain") = (dc, key) {
        if !(eta.is_finite() && eta > 0.0) {
            bail!("{source}: gain = {}: the competition gain kappa/sigma must be a positive number (hundreds are typical)", crate::units::short_number(1.0 / eta));
        }
    }
    if let Some((prev, _)) = spec.coupling {
        if prev != key {
            bail!("{source}: give only one of gain, eta and early_voltage (`{prev}` is already set, then `{key}`)");
        }
    }
    spec.coupling = Some((key, dc));
    Ok(())
}

/// Read a stage file into `spec`.
fn read_file(path: &Path, spec: &mut Spec) -> anyhow::Result<()> {
    let text = std::fs::read_to_string(path)
        .with_context(|| format!("cannot read stage file {}", path.display()))?;
    let root: toml::Table = text
        .parse()
        .map_err(|e| anyhow!("stage file {}: {e}", path.display()))?;
    let file = path.display().to_string();
    let q = |key: &str, v: &toml::Value, dim| -> anyhow::Result<f64> {
        quantity_from_toml(v, dim).map_err(|e| anyhow!("stage file {file}: key `{key}`: {e}"))
    };
    let num =
        |key: &str, v: &toml::Value| -> anyhow::Result<f64> { q(key, v, Dimension::Dimensionless) };
    let string = |key: &str, v: &toml::Value| -> anyhow::Result<String> {
        v.as_str()
            .map(str::to_string)
            .ok_or_else(|| anyhow!("stage file {file}: key `{key}` must be a string"))
    };
    let count = |key: &str, v: &toml::Value| -> anyhow::Result<usize> {
        v.as_integer()
            .and_then(|i| usize::try_from(i).ok())
            .ok_or_else(|| anyhow!("stage file {file}: key `{key}` must be a whole number >= 0"))
    };
    let size = |key: &str, v: &toml::Value, into: &mut (f64, f64)| -> anyhow::Result<()> {
        let t = v
            .as_table()
            .ok_or_else(|| anyhow!("stage file {file}: `{key}` must be a table with w, l"))?;
        for (k, x) in t {
            match k.as_str() {
                "w" => into.0 = q(&format!("{key}.w"), x, Dimension::Length)?,
                "l" => into.1 = q(&format!("{key}.l"), x, Dimension::Length)?,
                _ => bail!("stage file {file}: unknown key `{key}.{k}`; known keys: w, l"),
            }
        }
        Ok(())
    };
    for (key, v) in &root {
        match key.as_str() {
            "circuit" => {
                let s = string(key, v)?;
                spec.circuit = match s.as_str() {
                    "current_wta" => CircuitArg::CurrentWta,
                    "diff_pair" => CircuitArg::DiffPair,
                    "hysteretic_wta" => CircuitArg::HystereticWta,
                    "k_winners" => CircuitArg::KWinners,
                    "cascade" => CircuitArg::Cascade,
                    "repeated_max" => CircuitArg::RepeatedMax,
                    "current-wta" | "diff-pair" | "hysteretic-wta" | "k-winners" | "repeated-max" => bail!(
                        "stage file {file}: key `circuit` = {s:?}: write {:?}, the spelling experiment files use",
                        s.replace('-', "_")
                    ),
                    _ => bail!("stage file {file}: key `circuit` = {s:?}; valid: current_wta, diff_pair, hysteretic_wta, k_winners, cascade, repeated_max"),
                };
            }
            "preset" => spec.preset = string(key, v)?,
            "temperature" => spec.temperature = q(key, v, Dimension::Temperature)?,
            "inputs" => {
                let arr = v
                    .as_array()
                    .ok_or_else(|| anyhow!("stage file {file}: key `inputs` must be an array of currents, e.g. [\"10 nA\", \"12 nA\"]"))?;
                let mut items = Vec::new();
                for (i, x) in arr.iter().enumerate() {
                    let val = q(&format!("inputs[{i}]"), x, Dimension::Current)?;
                    items.push(format!("{val:e} A"));
                }
                spec.inputs = parse_inputs(&format!("stage file {file}: key `inputs`"), &items)?;
            }
            "bias_current" => spec.bias = q(key, v, Dimension::Current)?,
            // Old stage-file spellings: say the one spelling both file kinds use.
            "bias" | "input_capacitance" => bail!(
                "stage file {file}: key `{key}` is now spelled `{}`, as in experiment files",
                if key == "bias" { "bias_current" } else { "node_capacitance" }
            ),
            "supply" => spec.supply = Some(q(key, v, Dimension::Voltage)?),
            "output_voltage" => spec.output_voltage = Some(q(key, v, Dimension::Voltage)?),
            "gain" => {
                let g = num(key, v)?;
                set_coupling(spec, "gain", drain_coupling_for_gain(g), &file)?;
            }
            "eta" => {
                let e = num(key, v)?;
                set_coupling(spec, "eta", DrainCoupling::Eta(e), &file)?;
            }
            "early_voltage" => {
                let va = q(key, v, Dimension::Voltage)?;
                set_coupling(spec, "early_voltage", DrainCoupling::EarlyVoltage(va), &file)?;
            }
            "node_capacitance" => spec.input_capacitance = q(key, v, Dimension::Capacitance)?,
            "common_capacitance" => spec.common_capacitance = q(key, v, Dimension::Capacitance)?,
            "read_time" => spec.read_time = Some(q(key, v, Dimension::Time)?),
            "sink" => size("sink", v, &mut spec.sink)?,
            "mirror" => size("mirror", v, &mut spec.mirror)?,
            "feedback" => spec.feedback = num(key, v)?,
            "k" => spec.k = count(key, v)?,
            "fan_in" => spec.fan_in = count(key, v)?,
            "unit_current" => spec.unit_current = Some(q(key, v, Dimension::Current)?),
            "copy_drain_voltage" => {
                spec.copy_drain_voltage = Some(q(key, v, Dimension::Voltage)?)
            }
            "step_time" => spec.step_time = q(key, v, Dimension::Time)?,
            "limiter" => {
                let mut t = spec.limiter.unwrap_or(spec.output);
                size("limiter", v, &mut t)?;
                spec.limiter = Some(t);
            }
            "copy" => {
                let mut t = spec.copy.unwrap_or(spec.sink);
                size("copy", v, &mut t)?;
                spec.copy = Some(t);
            }
            "offsets" => {
                let t = v.as_table().ok_or_else(|| {
                    anyhow!("stage file {file}: `offsets` must be a table, e.g. A_0 = {{ vt0 = \"2 mV\", beta = 0.01 }}")
                })?;
                for (dev, x) in t {
                    let entry = x.as_table().ok_or_else(|| {
                        anyhow!("stage file {file}: `offsets.{dev}` must be a table with vt0 and/or beta")
                    })?;
                    let mut o = Offset {
                        device: dev.clone(),
                        dvt0: None,
                        dbeta: None,
                        source: format!("stage file {file}: `offsets.{dev}`"),
                    };
                    for (k, y) in entry {
                        let path = format!("offsets.{dev}.{k}");
                        match k.as_str() {
                            "vt0" => o.dvt0 = Some(q(&path, y, Dimension::Voltage)?),
                            "beta" => o.dbeta = Some(num(&path, y)?),
                            _ => bail!("stage file {file}: unknown key `{path}`; known keys: vt0, beta"),
                        }
                    }
                    spec.offsets.push(o);
                }
            }
            "output" => size("output", v, &mut spec.output)?,
            "nmos" => {
                let t = v
                    .as_table()
                    .ok_or_else(|| anyhow!("stage file {file}: `nmos` must be a table"))?;
                for (k, x) in t {
                    let path = format!("nmos.{k}");
                    match k.as_str() {
                        "vt0" => spec.vt0 = Some(q(&path, x, Dimension::Voltage)?),
                        "n" => spec.n = Some(num(&path, x)?),
                        "mu_cox" => spec.mu_cox = Some(q(&path, x, Dimension::Transconductance)?),
                        "is" => spec.specific_current = Some(q(&path, x, Dimension::Current)?),
                        _ => bail!("stage file {file}: unknown key `{path}`; known keys: vt0, n, mu_cox, is"),
                    }
                }
            }
            "decision" => {
                let t = v
                    .as_table()
                    .ok_or_else(|| anyhow!("stage file {file}: `decision` must be a table"))?;
                for (k, x) in t {
                    let path = format!("decision.{k}");
                    match k.as_str() {
                        "min_winner_share" => spec.rule.min_winner_share = num(&path, x)?,
                        "max_runner_up_share" => spec.rule.max_runner_up_share = num(&path, x)?,
                        _ => bail!("stage file {file}: unknown key `{path}`; known keys: min_winner_share, max_runner_up_share"),
                    }
                }
            }
            _ => bail!(
                "stage file {file}: unknown key `{key}`; known keys: circuit, preset, temperature, inputs, bias_current, supply, output_voltage, gain, eta, early_voltage, node_capacitance, common_capacitance, read_time, feedback, k, unit_current, fan_in, copy_drain_voltage, step_time, [sink], [output], [mirror], [limiter], [copy], [nmos], [decision], [offsets]"
            ),
        }
    }
    Ok(())
}

/// The spec of a die loaded from a results folder: its design's values (what the report
/// shows), its temperature and decision rule, the chosen sample's inputs.
fn spec_from_die(die: &super::die::LoadedDie) -> Spec {
    let mut spec = Spec {
        preset: die.process.name.clone(),
        temperature: die.temperature,
        rule: die.rule,
        inputs: die.inputs.last().cloned().unwrap_or_default(),
        ..Spec::default()
    };
    let size = |t: &Transistor| (t.w, t.l);
    let bias = |b: &CurrentSource| match b {
        CurrentSource::Ideal { current } => *current,
        CurrentSource::Transistor { .. } => f64::NAN,
    };
    let wta = |spec: &mut Spec, d: &WtaDesign| {
        spec.sink = size(&d.sink);
        spec.output = size(&d.output);
        spec.bias = bias(&d.bias);
        spec.supply = Some(d.supply);
        spec.output_voltage = Some(d.output_voltage);
        spec.coupling = d.drain_coupling.map(|c| ("the experiment's gain", c));
        spec.input_capacitance = d.input_capacitance;
        spec.common_capacitance = d.common_capacitance;
    };
    match &die.chip {
        CompetitionChip::Wta(c) => {
            spec.circuit = CircuitArg::CurrentWta;
            wta(&mut spec, &c.design);
        }
        CompetitionChip::Hysteretic(h) => {
            spec.circuit = CircuitArg::HystereticWta;
            wta(&mut spec, &h.design.wta);
            spec.feedback = h.design.feedback;
            spec.mirror = size(&h.design.mirror);
        }
        CompetitionChip::KWinners(c) => {
            spec.circuit = CircuitArg::KWinners;
            wta(&mut spec, &c.design.wta);
            spec.k = c.design.k;
            spec.unit_current = Some(c.design.unit_current);
            spec.limiter = Some(size(&c.design.limiter));
        }
        CompetitionChip::Cascade(c) => {
            spec.circuit = CircuitArg::Cascade;
            wta(&mut spec, &c.design.cell);
            spec.fan_in = c.design.fan_in;
            spec.copy = Some(size(&c.design.copy));
            spec.copy_drain_voltage = Some(c.design.copy_drain_voltage);
        }
        CompetitionChip::Ranking(c) => {
            spec.circuit = CircuitArg::RepeatedMax;
            wta(&mut spec, &c.design.wta);
            spec.k = c.design.k;
            spec.step_time = c.design.step_time;
        }
        CompetitionChip::DiffPair(c) => {
            let d = &c.design;
            spec.circuit = CircuitArg::DiffPair;
            if let DiffPairInput::Diode { device } = &d.input {
                spec.sink = size(device);
            }
            spec.output = size(&d.pair);
            spec.bias = bias(&d.tail);
            spec.supply = Some(d.supply);
            spec.output_voltage = Some(d.output_voltage);
            spec.coupling = d.drain_coupling.map(|c| ("the experiment's gain", c));
            spec.input_capacitance = d.input_capacitance;
            spec.common_capacitance = d.source_capacitance;
        }
    }
    spec
}

/// Flags that would change a loaded die's design (refused with --results).
fn design_flags(args: &StageArgs) -> Vec<&'static str> {
    let mut v = Vec::new();
    for (name, set) in [
        ("--circuit", args.circuit.is_some()),
        ("--bias-current", args.bias.is_some()),
        ("--temperature", args.temperature.is_some()),
        ("--preset", args.preset.is_some()),
        ("--gain", args.gain.is_some()),
        ("--eta", args.eta.is_some()),
        ("--early-voltage", args.early_voltage.is_some()),
        ("--sink-w", args.sink_w.is_some()),
        ("--sink-l", args.sink_l.is_some()),
        ("--output-w", args.output_w.is_some()),
        ("--output-l", args.output_l.is_some()),
        ("--vt0", args.vt0.is_some()),
        ("--n", args.n.is_some()),
        ("--mu-cox", args.mu_cox.is_some()),
        ("--is", args.specific_current.is_some()),
        ("--supply", args.supply.is_some()),
        ("--output-voltage", args.output_voltage.is_some()),
        ("--node-capacitance", args.input_capacitance.is_some()),
        ("--common-capacitance", args.common_capacitance.is_some()),
        ("--feedback", args.feedback.is_some()),
        ("--mirror-w", args.mirror_w.is_some()),
        ("--mirror-l", args.mirror_l.is_some()),
        ("--k", args.k.is_some()),
        ("--unit-current", args.unit_current.is_some()),
        ("--limiter-w", args.limiter_w.is_some()),
        ("--limiter-l", args.limiter_l.is_some()),
        ("--fan-in", args.fan_in.is_some()),
        ("--copy-w", args.copy_w.is_some()),
        ("--copy-l", args.copy_l.is_some()),
        ("--copy-drain-voltage", args.copy_drain_voltage.is_some()),
        ("--step-time", args.step_time.is_some()),
    ] {
        if set {
            v.push(name);
        }
    }
    v
}

fn resolve(args: &StageArgs) -> anyhow::Result<Spec> {
    resolve_with(args, None)
}

fn resolve_with(args: &StageArgs, die: Option<&super::die::LoadedDie>) -> anyhow::Result<Spec> {
    let mut spec = Spec::default();
    if let Some(p) = &args.stage {
        read_file(p, &mut spec)?;
    }
    if let Some(d) = die {
        let bad = design_flags(args);
        if !bad.is_empty() {
            bail!(
                "--results loads the die's own design from the folder; {} would change it. \
                 Change single devices with --offset DEVICE:vt0=V,beta=REL instead",
                bad.join(", ")
            );
        }
        spec = spec_from_die(d);
    }
    for o in &args.offsets {
        spec.offsets.push(parse_offset(o)?);
    }
    if let Some(f) = args.feedback {
        spec.feedback = f;
    }
    if let Some(c) = args.circuit {
        spec.circuit = c;
    }
    if let Some(p) = &args.preset {
        spec.preset = p.clone();
    }
    if let Some(t) = &args.inputs {
        let items: Vec<String> = t.split(',').map(|s| s.trim().to_string()).collect();
        spec.inputs = parse_inputs("--inputs", &items)?;
    }
    if spec.inputs.is_empty() {
        if die.is_some() {
            bail!("no inputs for the die: give --sample S (a test sample whose weight-stage currents feed it) or --inputs \"10nA,12nA,9nA\"");
        }
        bail!("no inputs: give --inputs \"10nA,12nA,9nA\" or `inputs` in the stage file");
    }
    let opt = |name: &str, v: &Option<String>, dim| -> anyhow::Result<Option<f64>> {
        v.as_deref().map(|t| flag(name, t, dim)).transpose()
    };
    if let Some(x) = opt("bias-current", &args.bias, Dimension::Current)? {
        spec.bias = x;
    }
    if let Some(x) = opt("temperature", &args.temperature, Dimension::Temperature)? {
        spec.temperature = x;
    }
    if let Some(g) = args.gain {
        set_coupling(&mut spec, "gain", drain_coupling_for_gain(g), "flags")?;
    }
    if let Some(e) = args.eta {
        set_coupling(&mut spec, "eta", DrainCoupling::Eta(e), "flags")?;
    }
    if let Some(va) = opt("early-voltage", &args.early_voltage, Dimension::Voltage)? {
        set_coupling(
            &mut spec,
            "early_voltage",
            DrainCoupling::EarlyVoltage(va),
            "flags",
        )?;
    }
    for (name, v, into) in [
        ("sink-w", &args.sink_w, &mut spec.sink.0),
        ("sink-l", &args.sink_l, &mut spec.sink.1),
        ("output-w", &args.output_w, &mut spec.output.0),
        ("output-l", &args.output_l, &mut spec.output.1),
        ("mirror-w", &args.mirror_w, &mut spec.mirror.0),
        ("mirror-l", &args.mirror_l, &mut spec.mirror.1),
    ] {
        if let Some(x) = opt(name, v, Dimension::Length)? {
            *into = x;
        }
    }
    for (name, v, which) in [
        ("limiter-w", &args.limiter_w, 0),
        ("limiter-l", &args.limiter_l, 1),
    ] {
        if let Some(x) = opt(name, v, Dimension::Length)? {
            let mut t = spec.limiter.unwrap_or(spec.output);
            if which == 0 {
                t.0 = x
            } else {
                t.1 = x
            }
            spec.limiter = Some(t);
        }
    }
    for (name, v, which) in [("copy-w", &args.copy_w, 0), ("copy-l", &args.copy_l, 1)] {
        if let Some(x) = opt(name, v, Dimension::Length)? {
            let mut t = spec.copy.unwrap_or(spec.sink);
            if which == 0 {
                t.0 = x
            } else {
                t.1 = x
            }
            spec.copy = Some(t);
        }
    }
    if let Some(k) = args.k {
        spec.k = k;
    }
    if let Some(f) = args.fan_in {
        spec.fan_in = f;
    }
    if let Some(x) = opt("unit-current", &args.unit_current, Dimension::Current)? {
        spec.unit_current = Some(x);
    }
    if let Some(x) = opt(
        "copy-drain-voltage",
        &args.copy_drain_voltage,
        Dimension::Voltage,
    )? {
        spec.copy_drain_voltage = Some(x);
    }
    if let Some(x) = opt("step-time", &args.step_time, Dimension::Time)? {
        spec.step_time = x;
    }
    if let Some(x) = opt("vt0", &args.vt0, Dimension::Voltage)? {
        spec.vt0 = Some(x);
    }
    if let Some(n) = args.n {
        spec.n = Some(n);
    }
    if let Some(x) = opt("mu-cox", &args.mu_cox, Dimension::Transconductance)? {
        spec.mu_cox = Some(x);
        spec.specific_current = None;
    }
    if let Some(x) = opt("is", &args.specific_current, Dimension::Current)? {
        spec.specific_current = Some(x);
        spec.mu_cox = None;
    }
    if spec.mu_cox.is_some() && spec.specific_current.is_some() {
        bail!("give only one of mu_cox and is (the specific current sets mu C_ox)");
    }
    if let Some(x) = opt("supply", &args.supply, Dimension::Voltage)? {
        spec.supply = Some(x);
    }
    if let Some(x) = opt("output-voltage", &args.output_voltage, Dimension::Voltage)? {
        spec.output_voltage = Some(x);
    }
    if let Some(x) = opt(
        "node-capacitance",
        &args.input_capacitance,
        Dimension::Capacitance,
    )? {
        spec.input_capacitance = x;
    }
    if let Some(x) = opt(
        "common-capacitance",
        &args.common_capacitance,
        Dimension::Capacitance,
    )? {
        spec.common_capacitance = x;
    }
    if let Some(x) = args.min_winner_share {
        spec.rule.min_winner_share = x;
    }
    if let Some(x) = args.max_runner_up_share {
        spec.rule.max_runner_up_share = x;
    }
    for (name, v) in [
        ("min-winner-share", spec.rule.min_winner_share),
        ("max-runner-up-share", spec.rule.max_runner_up_share),
    ] {
        if !(0.0..=1.0).contains(&v) {
            bail!("--{name} = {v} must be a share in [0, 1]");
        }
    }
    if let Some(x) = opt("read-time", &args.read_time, Dimension::Time)? {
        spec.read_time = Some(x);
    }
    if die.is_none() && !(spec.bias.is_finite() && spec.bias > 0.0) {
        bail!("bias = {:e} A must be > 0", spec.bias);
    }
    if let (Some(d), false) = (die, args.inputs.is_some()) {
        if d.inputs.is_empty() {
            bail!("no inputs for the die: give --sample S or --inputs");
        }
    }
    Ok(spec)
}

/// Build the process and the nominal chip.
fn build_chip(spec: &Spec) -> anyhow::Result<(CompetitionChip, crate::device::Process)> {
    let mut process = preset(&spec.preset).map_err(|e| anyhow!("--preset: {e}"))?;
    if let Some(v) = spec.vt0 {
        process.nmos.vt0 = v;
    }
    if let Some(n) = spec.n {
        process.nmos.n = n;
    }
    if let Some(m) = spec.mu_cox {
        process.nmos.mu_cox = m;
    }
    if let Some(is) = spec.specific_current {
        // I_S = 2 n mu C_ox (W/L) U_T^2 of the sink at the nominal temperature.
        let ut = thermal_voltage(process.t_nom);
        process.nmos.mu_cox = is / (2.0 * process.nmos.n * spec.sink.0 / spec.sink.1 * ut * ut);
    }
    if let Some(s) = spec.supply {
        process.vdd = s;
    }
    process
        .validate()
        .map_err(|e| anyhow!("process parameters: {e}"))?;
    let nmos = |(w, l): (f64, f64), name: &str| -> anyhow::Result<Transistor> {
        let t = Transistor {
            polarity: Polarity::Nmos,
            w,
            l,
        };
        t.validate().map_err(|e| anyhow!("{name}: {e}"))?;
        Ok(t)
    };
    let sink = nmos(spec.sink, "sink (--sink-w/--sink-l)")?;
    let output = nmos(spec.output, "output (--output-w/--output-l)")?;
    if let Some((key, dc)) = spec.coupling {
        dc.validate(key).map_err(|e| anyhow!("{e}"))?;
    }
    let n = spec.inputs.len();
    let stage = match spec.circuit {
        CircuitArg::CurrentWta => {
            let mut d = WtaDesign::new(
                n,
                process.clone(),
                sink,
                output,
                CurrentSource::Ideal { current: spec.bias },
            );
            d.output_voltage = spec.output_voltage.unwrap_or(d.supply);
            d.drain_coupling = spec.coupling.map(|(_, c)| c);
            d.input_capacitance = spec.input_capacitance;
            d.common_capacitance = spec.common_capacitance;
            CompetitionChip::Wta(WtaChip::nominal(d)?)
        }
        CircuitArg::HystereticWta => {
            let mut d = WtaDesign::new(
                n,
                process.clone(),
                sink,
                output,
                CurrentSource::Ideal { current: spec.bias },
            );
            d.output_voltage = spec.output_voltage.unwrap_or(d.supply);
            d.drain_coupling = spec.coupling.map(|(_, c)| c);
            d.input_capacitance = spec.input_capacitance;
            d.common_capacitance = spec.common_capacitance;
            let mirror = Transistor {
                polarity: Polarity::Pmos,
                w: spec.mirror.0,
                l: spec.mirror.1,
            };
            mirror
                .validate()
                .map_err(|e| anyhow!("mirror (--mirror-w/--mirror-l): {e}"))?;
            CompetitionChip::Hysteretic(HysteresisChip::nominal(HysteresisDesign {
                wta: d,
                feedback: spec.feedback,
                mirror,
            })?)
        }
        CircuitArg::KWinners | CircuitArg::Cascade | CircuitArg::RepeatedMax => {
            let mut d = WtaDesign::new(
                n,
                process.clone(),
                sink,
                output,
                CurrentSource::Ideal { current: spec.bias },
            );
            d.output_voltage = spec.output_voltage.unwrap_or(d.supply);
            d.drain_coupling = spec.coupling.map(|(_, c)| c);
            d.input_capacitance = spec.input_capacitance;
            d.common_capacitance = spec.common_capacitance;
            composite_chip(spec, d)?
        }
        CircuitArg::DiffPair => {
            let mut d = DiffPairDesign::new(
                n,
                process.clone(),
                output,
                CurrentSource::Ideal { current: spec.bias },
                DiffPairInput::Diode { device: sink },
            );
            d.output_voltage = spec.output_voltage.unwrap_or(d.supply);
            d.drain_coupling = spec.coupling.map(|(_, c)| c);
            d.input_capacitance = spec.input_capacitance;
            d.source_capacitance = spec.common_capacitance;
            CompetitionChip::DiffPair(DiffPairChip::nominal(d)?)
        }
    };
    Ok((stage, process))
}

/// The nominal k-winners, cascade or ranking chip around the WTA design `d` (the experiment
/// file's defaults: unit current = the bias current, limiter = the output size, replica = the
/// sink size at half the supply).
fn composite_chip(spec: &Spec, d: WtaDesign) -> anyhow::Result<CompetitionChip> {
    use crate::stages::competition::cascade::{
        CascadeChip, CascadeDesign, RankingChip, RankingDesign,
    };
    use crate::stages::competition::kwta::{KWinnersChip, KWinnersDesign};
    let sized = |(w, l): (f64, f64), polarity, what: &str| -> anyhow::Result<Transistor> {
        let t = Transistor { polarity, w, l };
        t.validate().map_err(|e| anyhow!("{what}: {e}"))?;
        Ok(t)
    };
    Ok(match spec.circuit {
        CircuitArg::KWinners => {
            let limiter = sized(
                spec.limiter.unwrap_or(spec.output),
                Polarity::Pmos,
                "limiter (--limiter-w/--limiter-l)",
            )?;
            let unit = spec.unit_current.unwrap_or(spec.bias);
            let design = KWinnersDesign::new(d, spec.k, unit, limiter);
            CompetitionChip::KWinners(
                KWinnersChip::nominal(design)
                    .map_err(|e| anyhow!("k-winners (--k, --unit-current): {e}"))?,
            )
        }
        CircuitArg::Cascade => {
            let copy = sized(
                spec.copy.unwrap_or(spec.sink),
                Polarity::Nmos,
                "replica (--copy-w/--copy-l)",
            )?;
            let mut design = CascadeDesign::new(d.n, spec.fan_in, d, copy);
            if let Some(v) = spec.copy_drain_voltage {
                design.copy_drain_voltage = v;
            }
            CompetitionChip::Cascade(
                CascadeChip::nominal(design)
                    .map_err(|e| anyhow!("cascade (--fan-in, --copy-drain-voltage): {e}"))?,
            )
        }
        _ => {
            let design = RankingDesign {
                wta: d,
                k: spec.k,
                step_time: spec.step_time,
            };
            CompetitionChip::Ranking(
                RankingChip::sample(design, |_| MosMismatch::default())
                    .map_err(|e| anyhow!("repeated max (--k, --step-time): {e}"))?,
            )
        }
    })
}

/// Build the process and the circuit at the stage's temperature: the spec's nominal chip, or
/// a loaded die; then the explicit per-device offsets.
fn build(
    spec: &Spec,
    die: Option<&super::die::LoadedDie>,
) -> anyhow::Result<(CompetitionCircuit, crate::device::Process, CompetitionChip)> {
    let (mut chip, process) = match die {
        Some(d) => (d.chip.clone(), d.process.clone()),
        None => build_chip(spec)?,
    };
    apply_offsets(&mut chip, &spec.offsets)?;
    Ok((chip.at(spec.temperature)?, process, chip))
}

/// A stage file (with optional input lists overriding its `inputs`, one per sample) as a nominal
/// chip: the chip, its temperature (K), the inputs of every sample, and the decision rule.
pub(crate) fn stage_file_chip(
    file: &Path,
    inputs: &[String],
) -> anyhow::Result<(CompetitionChip, f64, Vec<Vec<f64>>, DecisionRule)> {
    #[derive(clap::Parser)]
    struct Wrap {
        #[command(flatten)]
        a: StageArgs,
    }
    use clap::Parser as _;
    let mut argv: Vec<std::ffi::OsString> = vec!["stage".into(), "--stage".into(), file.into()];
    if let Some(first) = inputs.first() {
        argv.push("--inputs".into());
        argv.push(first.into());
    }
    let args = Wrap::try_parse_from(argv)?.a;
    let spec = resolve(&args)?;
    let mut samples = vec![spec.inputs.clone()];
    for (k, t) in inputs.iter().enumerate().skip(1) {
        let items: Vec<String> = t.split(',').map(|s| s.trim().to_string()).collect();
        let x = parse_inputs(&format!("--inputs (sample {k})"), &items)?;
        if x.len() != spec.inputs.len() {
            bail!(
                "--inputs (sample {k}) has {} values; the first sample has {}: every sample needs one per class line",
                x.len(),
                spec.inputs.len()
            );
        }
        samples.push(x);
    }
    let (mut chip, _) = build_chip(&spec)?;
    apply_offsets(&mut chip, &spec.offsets)?;
    Ok((chip, spec.temperature, samples, spec.rule))
}

/// Every transistor of the stage with its role.
fn devices(stage: &CompetitionCircuit, n: usize) -> Vec<(String, Ekv)> {
    let mut v = Vec::new();
    match stage {
        CompetitionCircuit::Wta(c) => {
            for k in 0..n {
                if let Some(d) = c.sink(k) {
                    v.push((format!("A_{k} (sink)"), *d));
                }
            }
            for k in 0..n {
                if let Some(d) = c.output(k) {
                    v.push((format!("B_{k} (output)"), *d));
                }
            }
            if let CurrentSource::Transistor { device, .. } = c.bias() {
                v.push(("bias".into(), *device));
            }
        }
        CompetitionCircuit::Hysteretic(h) => {
            v = devices(&CompetitionCircuit::Wta(h.wta.clone()), n);
        }
        CompetitionCircuit::KWinners(c) => {
            v = devices(&CompetitionCircuit::Wta(c.cells().clone()), n);
        }
        CompetitionCircuit::Ranking(c) => {
            v = devices(&CompetitionCircuit::Wta(c.full().clone()), n);
        }
        // A tree's devices are listed per group in the level table; offsets name them LlGg.*.
        CompetitionCircuit::Cascade(_) => {}
        CompetitionCircuit::DiffPair(c) => {
            for k in 0..n {
                if let Some(d) = c.diode(k) {
                    v.push((format!("D_{k} (input diode)"), *d));
                }
            }
            for k in 0..n {
                if let Some(d) = c.pair(k) {
                    v.push((format!("M_{k} (pair)"), *d));
                }
            }
        }
    }
    v
}

pub fn run(args: StageArgs) -> anyhow::Result<()> {
    let die = match &args.results {
        Some(dir) => {
            // A hysteretic die's state at sample S is the one its earlier samples left: load
            // them all and replay them in order (as the chip loop does).
            let wanted: Vec<usize> = match args.sample {
                Some(s) => (0..=s).collect(),
                None => Vec::new(),
            };
            let chip = args.chip.unwrap_or(0);
            Some(super::die::load_die(
                dir,
                args.point,
                chip,
                &wanted,
                &args.data_dir,
            )?)
        }
        None => None,
    };
    let spec = resolve_with(&args, die.as_ref())?;
    let (stage, process, chip) = build(&spec, die.as_ref())?;
    if let Some(what) = &args.sweep {
        return sweep(&args, &spec, &stage, &chip, what);
    }
    if args.transient {
        return transient(&args, &spec, &stage, &process, &chip, die.as_ref());
    }
    let st = &stage;
    let mut ws = Workspace::new();
    let mut sol = StageSolution::for_stage(st);
    let mut replayed = 0usize;
    if let (Some(d), CompetitionCircuit::Hysteretic(_), None) = (&die, st, &args.inputs) {
        for x in d.inputs.iter().take(d.inputs.len().saturating_sub(1)) {
            // A failed earlier decision leaves the state as it was, as in the chip loop.
            let _ = st.solve(x, &mut ws, &mut sol);
            replayed += 1;
        }
    }
    st.solve(&spec.inputs, &mut ws, &mut sol)?;
    let gain = numerical_gain(st, &spec.inputs)?;
    let extra = composite::dc_extra(&spec, &chip, st, &sol)?;
    let decision = extra
        .as_ref()
        .map_or_else(|| sol.decide(&spec.rule), |e| e.decision);
    let truth = die
        .as_ref()
        .filter(|_| args.sample.is_some() && args.inputs.is_none())
        .and_then(|d| d.truth.last().copied());
    // The class the run scores for this sample (top-k circuits: the truth when it is among the
    // winners), as `pipeline::evaluate_chip` does.
    let scored = truth.map(|t| extra.as_ref().map_or(decision.winner, |e| (e.scored)(t)));
    let report = Report::new(&spec, &stage, &process);
    let warnings = feedback_warning(st, &spec.inputs);
    let mut results: Vec<Row> = Vec::new();
    for i in 0..st.node_count() {
        results.push(Row::new(
            "node",
            &st.node_name(i),
            sol.node_voltages[i],
            "V",
        ));
    }
    for (k, (&o, &s)) in sol.outputs.iter().zip(&sol.shares).enumerate() {
        results.push(Row::new("output", &format!("out_{k}"), o, "A"));
        results.push(Row::new("share", &format!("share_{k}"), s, ""));
    }
    let ClosedFormGain {
        value: g_cf,
        derivation: g_note,
    } = closed_form_gain(&stage);
    if let Some(g) = gain {
        results.push(Row::new("gain", "numerical", g, ""));
    }
    results.push(Row::new("gain", "closed_form", g_cf, ""));
    let hysteresis = hysteresis_closed_form(st, &spec.inputs);
    if let Some((up, down)) = hysteresis {
        results.push(Row::new("hysteresis", "width_closed_form", up - down, "A"));
        results.push(Row::new("hysteresis", "switch_up_closed_form", up, "A"));
        results.push(Row::new("hysteresis", "switch_down_closed_form", down, "A"));
    }
    if let Some(d) = &die {
        results.push(Row::text("die", "results", &d.folder.display().to_string()));
        results.push(Row::new("die", "seed", d.seed as f64, ""));
        results.push(Row::new("die", "point", args.point as f64, "index"));
        results.push(Row::new(
            "die",
            "chip",
            args.chip.unwrap_or(0) as f64,
            "index",
        ));
        if let (Some(s), None) = (args.sample, &args.inputs) {
            results.push(Row::new("die", "test_sample", s as f64, "index"));
            if let Some(t) = d.truth.last() {
                results.push(Row::new("die", "true_class", *t as f64, "index"));
            }
            results.push(Row::new("die", "replayed_samples", replayed as f64, ""));
            if let Some(c) = scored {
                results.push(Row::new("die", "scored_class", c as f64, "index"));
            }
        }
    }
    if let Some(e) = &extra {
        results.extend(e.rows.iter().map(|r| Row {
            section: r.section.clone(),
            name: r.name.clone(),
            value: r.value.clone(),
            unit: r.unit.clone(),
        }));
    }
    for w in &warnings {
        results.push(Row::text("warning", "feedback", w));
    }
    results.push(Row::new(
        "decision",
        "winner",
        decision.winner as f64,
        "index",
    ));
    results.push(Row::new(
        "decision",
        "winner_share",
        decision.winner_share,
        "",
    ));
    results.push(Row::new(
        "decision",
        "runner_up",
        decision.runner_up as f64,
        "index",
    ));
    results.push(Row::new(
        "decision",
        "runner_up_share",
        decision.runner_up_share,
        "",
    ));
    results.push(Row::new(
        "decision",
        "ambiguous",
        f64::from(u8::from(decision.ambiguous)),
        "bool",
    ));
    results.push(Row::new(
        "solver",
        "iterations",
        sol.info.iterations as f64,
        "",
    ));
    results.push(Row::new(
        "solver",
        "relative_kcl_residual",
        sol.info.residual,
        "",
    ));
    let method = format!("{:?}", sol.info.method).to_lowercase();
    match args.format {
        Format::Json => {
            let mut v = json!({
                "parameters": report.json(),
                "node_voltages_v": (0..st.node_count()).map(|i| json!({"node": st.node_name(i), "value": sol.node_voltages[i]})).collect::<Vec<_>>(),
                "outputs_a": sol.outputs,
                "shares": sol.shares,
                "gain": {"numerical": gain, "closed_form": g_cf, "closed_form_is": g_note,
                          "numerical_is": "d ln(out_a/out_b) / d ln(in_a/in_b) between the two largest inputs"},
                "hysteresis": hysteresis.map(|(up, down)| json!({
                    "width_closed_form_a": up - down, "switch_up_closed_form_a": up,
                    "switch_down_closed_form_a": down,
                    "is": "x = I_a - I_b of the two largest inputs around their mean, weak-inversion closed form (DEVELOPERS.md model notes §4.5)"})),
                "die": die.as_ref().map(|d| json!({
                    "results": d.folder.display().to_string(), "seed": d.seed,
                    "point": args.point, "chip": args.chip.unwrap_or(0),
                    "test_sample": if args.inputs.is_none() { args.sample } else { None },
                    "true_class": if args.inputs.is_none() { d.truth.last().copied() } else { None },
                    "replayed_samples": replayed, "scored_class": scored})),
                "warnings": warnings,
                "decision": {"winner": decision.winner, "winner_share": decision.winner_share,
                             "runner_up": decision.runner_up, "runner_up_share": decision.runner_up_share,
                             "ambiguous": decision.ambiguous},
                "solver": {"method": method, "iterations": sol.info.iterations,
                           "relative_kcl_residual": sol.info.residual, "converged": sol.info.converged},
                "caution": crate::CAUTION,
            });
            if let Some((key, j)) = extra.as_ref().and_then(|e| e.json.clone()) {
                v[key] = j;
            }
            println!("{}", serde_json::to_string_pretty(&v)?);
        }
        Format::Csv => {
            results.push(Row::text("note", "caution", crate::CAUTION));
            print!("{}", rows_csv(report.rows.iter().chain(&results)));
        }
        Format::Table => {
            let mut s = report.table();
            let _ = writeln!(
                s,
                "\nOperating point (DC, {method}, {} iterations, relative KCL residual {:.2e})",
                sol.info.iterations, sol.info.residual
            );
            let _ = writeln!(
                s,
                "  {:<6} {:>12} {:>12} {:>12} {:>9}",
                "line", "input", "V_k", "output", "share"
            );
            // A tree's nodes are its groups' (named LlGg.*), not one per line.
            let per_line = !matches!(st, CompetitionCircuit::Cascade(_));
            for k in 0..st.n() {
                let _ = writeln!(
                    s,
                    "  {:<6} {:>12} {:>12} {:>12} {:>9.5}",
                    k,
                    format_si(spec.inputs[k], "A", 4),
                    if per_line {
                        format_si(sol.node_voltages[k], "V", 6)
                    } else {
                        String::new()
                    },
                    format_si(sol.outputs[k], "A", 5),
                    sol.shares[k]
                );
            }
            for i in (if per_line { st.n() } else { 0 })..st.node_count() {
                let _ = writeln!(
                    s,
                    "  {:<6} {:>12} {:>12}",
                    st.node_name(i),
                    "",
                    format_si(sol.node_voltages[i], "V", 6)
                );
            }
            let _ = writeln!(s, "\nGain");
            match gain {
                Some(g) => {
                    let _ = writeln!(s, "  numerical   {g:.2}  (d ln(out_a/out_b) / d ln(in_a/in_b), two largest inputs)");
                }
                None => {
                    let _ = writeln!(s, "  numerical   n/a (the two largest inputs must be > 0)");
                }
            }
            let _ = writeln!(s, "  closed form {g_cf:.2}  ({g_note}; it holds for small input differences with every transistor saturated)");
            if let Some((up, down)) = hysteresis {
                let _ = writeln!(
                    s,
                    "\nHysteresis (closed form, weak inversion, two largest inputs around their mean; model notes §4.5)\n  width {}  (switches up at x = {}, down at x = {}; x = I_a - I_b)",
                    format_si(up - down, "A", 4),
                    format_si(up, "A", 4),
                    format_si(down, "A", 4)
                );
            }
            if let Some(d) = &die {
                let _ = writeln!(
                    s,
                    "\nDie: chip {} of sweep point {} of {} (seed {}){}",
                    args.chip.unwrap_or(0),
                    args.point,
                    d.folder.display(),
                    d.seed,
                    match (args.sample, &args.inputs) {
                        (Some(t), None) => format!(
                            "; inputs = test sample {t} (true class {}){}",
                            d.truth
                                .last()
                                .and_then(|c| d.class_names.get(*c))
                                .cloned()
                                .unwrap_or_default(),
                            if replayed > 0 {
                                format!(", state after replaying samples 0..{}", replayed - 1)
                            } else {
                                String::new()
                            }
                        ),
                        _ => String::new(),
                    }
                );
            }
            if let Some(e) = &extra {
                s.push_str(&e.table);
            }
            for w in &warnings {
                let _ = writeln!(s, "\nWARNING: {w}");
            }
            let _ = writeln!(
                s,
                "\nDecision{}: winner {} (share {:.4}), runner-up {} (share {:.4}){}",
                match st {
                    CompetitionCircuit::KWinners(c) => format!(
                        " for place {} of the set (shares of what the {} larger leave)",
                        c.k(),
                        c.k() - 1
                    ),
                    CompetitionCircuit::Ranking(_) => " of the last round".to_string(),
                    _ => String::new(),
                },
                decision.winner,
                decision.winner_share,
                decision.runner_up,
                decision.runner_up_share,
                if decision.ambiguous {
                    "  AMBIGUOUS under the rule"
                } else {
                    ""
                }
            );
            let _ = writeln!(s, "\n{}", crate::CAUTION);
            print!("{s}");
        }
    }
    Ok(())
}

/// The hysteretic WTA's closed-form switching points `(up, down)` of x = I_a - I_b for its two
/// largest inputs around their mean (model notes §4.5); `None` for other stages.
fn hysteresis_closed_form(stage: &CompetitionCircuit, inputs: &[f64]) -> Option<(f64, f64)> {
    let CompetitionCircuit::Hysteretic(h) = stage else {
        return None;
    };
    let mut sorted = inputs.to_vec();
    sorted.sort_by(|a, b| b.total_cmp(a));
    let mean = 0.5 * (sorted.first()? + sorted.get(1)?);
    let bias = h.wta.bias().current_at(h.wta.supply);
    let alpha = h.feedback.iter().sum::<f64>() / h.feedback.len().max(1) as f64;
    let g = h.gain(0)?;
    Some(hysteretic::hysteresis_width_closed_form(
        mean, bias, alpha, g,
    ))
}

/// A hysteretic WTA whose feedback current dwarfs its inputs: the warning text (none for other
/// circuits or a sane ratio). See [`crate::experiment::runner::feedback_warning`].
fn feedback_warning(stage: &CompetitionCircuit, inputs: &[f64]) -> Vec<String> {
    let CompetitionCircuit::Hysteretic(h) = stage else {
        return Vec::new();
    };
    let mut sorted = inputs.to_vec();
    sorted.sort_by(|a, b| b.total_cmp(a));
    let mean =
        0.5 * (sorted.first().copied().unwrap_or(0.0) + sorted.get(1).copied().unwrap_or(0.0));
    let bias = h.wta.bias().current_at(h.wta.supply);
    let alpha = h.feedback.iter().sum::<f64>() / h.feedback.len().max(1) as f64;
    crate::experiment::runner::feedback_warning(
        alpha,
        bias,
        mean,
        "the mean of the two largest inputs",
    )
    .into_iter()
    .collect()
}

/// One value of the output (CSV row: section, name, value, unit).
struct Row {
    section: String,
    name: String,
    value: String,
    unit: String,
}

impl Row {
    fn new(section: &str, name: &str, value: f64, unit: &str) -> Row {
        Row {
            section: section.into(),
            name: name.into(),
            // Counts and flags as integers; quantities in shortest round-trip scientific form.
            value: if value.fract() == 0.0 && value.abs() < 1e15 {
                format!("{value}")
            } else {
                format!("{value:e}")
            },
            unit: unit.into(),
        }
    }
    fn text(section: &str, name: &str, value: &str) -> Row {
        Row {
            section: section.into(),
            name: name.into(),
            value: value.into(),
            unit: String::new(),
        }
    }
}

fn rows_csv<'a>(rows: impl Iterator<Item = &'a Row>) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    let _ = w.write_record(["section", "name", "value", "unit"]);
    for r in rows {
        let _ = w.write_record([&r.section, &r.name, &r.value, &r.unit]);
    }
    String::from_utf8(w.into_inner().unwrap_or_default()).unwrap_or_default()
}

/// The parameters actually used.
struct Report {
    rows: Vec<Row>,
    devices: Vec<(String, Ekv)>,
    lines: Vec<(String, String)>,
}

impl Report {
    fn new(spec: &Spec, stage: &CompetitionCircuit, process: &crate::device::Process) -> Report {
        let n = spec.inputs.len();
        let devs = devices(stage, n);
        let mut rows = Vec::new();
        let mut lines = Vec::new();
        let circuit = match spec.circuit {
            CircuitArg::CurrentWta => "current-wta",
            CircuitArg::DiffPair => "diff-pair",
            CircuitArg::HystereticWta => "hysteretic-wta",
            CircuitArg::KWinners => "k-winners",
            CircuitArg::Cascade => "cascade",
            CircuitArg::RepeatedMax => "repeated-max",
        };
        rows.push(Row::text("parameter", "circuit", circuit));
        rows.push(Row::text("parameter", "preset", &spec.preset));
        lines.push(("circuit".into(), circuit.to_string()));
        lines.push((
            "process".into(),
            format!("{} ({})", spec.preset, crate::device::presets::PRESET_NOTE),
        ));
        let (supply, vout) = match stage {
            CompetitionCircuit::Wta(c) => (c.supply, c.output_voltage),
            CompetitionCircuit::DiffPair(c) => (c.supply, c.output_voltage),
            CompetitionCircuit::Hysteretic(c) => (c.wta.supply, c.wta.output_voltage),
            CompetitionCircuit::KWinners(c) => (c.cells().supply, c.cells().output_voltage),
            CompetitionCircuit::Ranking(c) => (c.full().supply, c.full().output_voltage),
            CompetitionCircuit::Cascade(_) => {
                (process.vdd, spec.output_voltage.unwrap_or(process.vdd))
            }
        };
        let ut = thermal_voltage(spec.temperature);
        let coupling = match spec.coupling {
            None => format!(
                "process value: {}",
                describe_coupling(&process.nmos.drain_coupling)
            ),
            Some((key, dc)) => format!("from {key}: {}", describe_coupling(&dc)),
        };
        let scalar = [
            ("temperature", spec.temperature, "K"),
            ("thermal_voltage", ut, "V"),
            ("supply", supply, "V"),
            ("output_voltage", vout, "V"),
            ("bias_current", spec.bias, "A"),
            ("node_capacitance", spec.input_capacitance, "F"),
            ("common_capacitance", spec.common_capacitance, "F"),
            ("sink.w", spec.sink.0, "m"),
            ("sink.l", spec.sink.1, "m"),
            ("output.w", spec.output.0, "m"),
            ("output.l", spec.output.1, "m"),
            ("nmos.mu_cox", process.nmos.mu_cox, "A/V^2"),
            ("min_winner_share", spec.rule.min_winner_share, ""),
            ("max_runner_up_share", spec.rule.max_runner_up_share, ""),
        ];
        for (k, v, u) in scalar {
            rows.push(Row::new("parameter", k, v, u));
            let shown = if u.is_empty() {
                format!("{v}")
            } else {
                format_si(v, u, 5)
            };
            lines.push((k.to_string(), shown));
        }
        rows.push(Row::text("parameter", "drain_coupling", &coupling));
        lines.push(("drain coupling".into(), coupling));
        for (i, x) in spec.inputs.iter().enumerate() {
            rows.push(Row::new("input", &format!("in_{i}"), *x, "A"));
        }
        if let CompetitionCircuit::Hysteretic(h) = stage {
            rows.push(Row::new("parameter", "feedback", spec.feedback, ""));
            rows.push(Row::new("parameter", "mirror.w", spec.mirror.0, "m"));
            rows.push(Row::new("parameter", "mirror.l", spec.mirror.1, "m"));
            lines.push(("feedback".into(), format!("{}", spec.feedback)));
            lines.push((
                "mirror (PMOS)".into(),
                format!(
                    "{} x {} (feedback device {} x {})",
                    format_si(spec.mirror.0, "m", 4),
                    format_si(spec.mirror.1, "m", 4),
                    format_si(spec.mirror.0 * spec.feedback, "m", 4),
                    format_si(spec.mirror.1, "m", 4)
                ),
            ));
            for (k, a) in h.feedback.iter().enumerate() {
                rows.push(Row::new(
                    "device",
                    &format!("P_{k}/Q_{k}.feedback_gain"),
                    *a,
                    "",
                ));
                lines.push((
                    format!("feedback gain {k}"),
                    format!("{a:.6} (P_{k}, Q_{k})"),
                ));
            }
        }
        let mut add = |k: &str, v: f64, u: &str| {
            rows.push(Row::new("parameter", k, v, u));
            lines.push((
                k.to_string(),
                if u.is_empty() {
                    format!("{v}")
                } else {
                    format_si(v, u, 5)
                },
            ));
        };
        match stage {
            CompetitionCircuit::KWinners(c) => {
                let unit = spec.unit_current.unwrap_or(spec.bias);
                add("k", spec.k as f64, "");
                add("unit_current", unit, "A");
                add(
                    "common_bias",
                    c.cells().bias().current_at(c.cells().supply),
                    "A",
                );
                let lim = spec.limiter.unwrap_or(spec.output);
                add("limiter.w", lim.0, "m");
                add("limiter.l", lim.1, "m");
                for k in 0..n {
                    if let Some(l) = c.limit(k) {
                        rows.push(Row::new("device", &format!("L_{k}.limit"), l, "A"));
                        lines.push((format!("limit L_{k}"), format_si(l, "A", 5)));
                    }
                }
            }
            CompetitionCircuit::Cascade(c) => {
                let copy = spec.copy.unwrap_or(spec.sink);
                add("fan_in", spec.fan_in as f64, "");
                add("depth", c.depth() as f64, "");
                add("copy.w", copy.0, "m");
                add("copy.l", copy.1, "m");
                add(
                    "copy_drain_voltage",
                    spec.copy_drain_voltage.unwrap_or(0.5 * supply),
                    "V",
                );
            }
            CompetitionCircuit::Ranking(_) => {
                add("k", spec.k as f64, "");
                add("step_time", spec.step_time, "s");
            }
            _ => {}
        }
        for o in &spec.offsets {
            let text = format!(
                "vt0 {}, beta {}",
                o.dvt0.map_or("as sampled".into(), |v| format_si(v, "V", 4)),
                o.dbeta.map_or("as sampled".into(), |b| format!("{b:+}"))
            );
            rows.push(Row::text("offset", &o.device, &text));
            lines.push((format!("offset {}", o.device), text));
        }
        for (name, d) in &devs {
            for (k, v, u) in [
                ("vt0", d.vt0, "V"),
                ("n", d.n, ""),
                ("beta", d.beta, "A/V^2"),
                ("is", d.specific_current(), "A"),
                ("eta", d.eta, ""),
                ("sigma", d.sigma(), ""),
            ] {
                rows.push(Row::new("device", &format!("{name}.{k}"), v, u));
            }
        }
        Report {
            rows,
            devices: devs,
            lines,
        }
    }

    fn table(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(s, "Parameters used");
        for (k, v) in &self.lines {
            let _ = writeln!(s, "  {k:<20} {v}");
        }
        if self.devices.is_empty() {
            // A cascade: its devices belong to groups (see the level table).
            let _ = writeln!(
                s,
                "\n  devices per group of the tree: LlGg.A_k, LlGg.B_k, LlGg.bias, LlGg.R (replica), for --offset"
            );
            return s;
        }
        let _ = writeln!(
            s,
            "\n  {:<18} {:>10} {:>7} {:>13} {:>11} {:>10} {:>10}",
            "device", "V_T0", "n", "beta", "I_S", "eta", "sigma"
        );
        for (name, d) in &self.devices {
            let _ = writeln!(
                s,
                "  {:<18} {:>10} {:>7.4} {:>13} {:>11} {:>10.4e} {:>10.4e}",
                name,
                format_si(d.vt0, "V", 5),
                d.n,
                format_si(d.beta, "A/V²", 4),
                format_si(d.specific_current(), "A", 4),
                d.eta,
                d.sigma()
            );
        }
        s
    }

    fn json(&self) -> serde_json::Value {
        let mut m = serde_json::Map::new();
        for r in &self.rows {
            let v = r
                .value
                .parse::<f64>()
                .ok()
                .and_then(|x| serde_json::Number::from_f64(x).map(serde_json::Value::Number))
                .unwrap_or_else(|| serde_json::Value::String(r.value.clone()));
            let key = if r.section == "parameter" {
                r.name.clone()
            } else {
                format!("{}.{}", r.section, r.name)
            };
            let key = if r.unit.is_empty() {
                key
            } else {
                format!("{key} [{}]", r.unit)
            };
            m.insert(key, v);
        }
        serde_json::Value::Object(m)
    }
}

fn sweep(
    args: &StageArgs,
    spec: &Spec,
    stage: &CompetitionCircuit,
    chip: &CompetitionChip,
    what: &str,
) -> anyhow::Result<()> {
    let n = spec.inputs.len();
    let quantity = if what == "diff" {
        SweepQuantity::Difference
    } else if let Some(k) = what.strip_prefix("input:") {
        let k: usize = k
            .trim()
            .parse()
            .map_err(|_| anyhow!("--sweep {what:?}: write input:K with K an input index"))?;
        SweepQuantity::Input(k)
    } else {
        bail!("--sweep {what:?}: write \"diff\" (x = I_0 - I_1) or \"input:K\" (x = I_K)");
    };
    if let SweepQuantity::Input(k) = quantity {
        if k >= n {
            bail!(
                "--sweep {what:?}: input index {k} is out of range (there are {n} inputs, 0 to {})",
                n - 1
            );
        }
    }
    let from = flag(
        "from",
        args.from
            .as_deref()
            .ok_or_else(|| anyhow!("--sweep needs --from and --to (currents)"))?,
        Dimension::Current,
    )?;
    let to = flag(
        "to",
        args.to
            .as_deref()
            .ok_or_else(|| anyhow!("--sweep needs --from and --to (currents)"))?,
        Dimension::Current,
    )?;
    let plan = TransferSweep {
        quantity,
        from,
        to,
        points: args.points,
        spacing: args.scale,
    };
    match plan.check(n) {
        Err(SweepError::TooFewPoints(p)) => bail!("--points = {p} must be at least 2"),
        Err(SweepError::LogEnds { from, to }) => bail!("--scale log needs --from and --to of the same sign and not zero (got {from:e} A, {to:e} A)"),
        Err(e) => bail!("--sweep {what:?}: {e}"),
        Ok(()) => {}
    }
    let described = match quantity {
        SweepQuantity::Difference => {
            "x = I_0 - I_1 in A (I_0, I_1 = their given mean +/- x/2; other inputs as given)"
                .to_string()
        }
        SweepQuantity::Input(index) => format!("x = I_{index} in A (other inputs as given)"),
    };
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header = vec!["x".to_string()];
    header.extend((0..n).map(|k| format!("out_{k}")));
    header.extend((0..n).map(|k| format!("share_{k}")));
    // A circuit that holds state is swept up, then down (the state carried along): one more
    // column says which way.
    let both_ways = matches!(stage, CompetitionCircuit::Hysteretic(_));
    if both_ways {
        header.push("direction".into());
    }
    // Repeated max: each round's winner at the point (the out/share columns are round 0's).
    let rounds = match stage {
        CompetitionCircuit::Ranking(c) => c.k(),
        _ => 0,
    };
    header.extend((0..rounds).map(|j| format!("round_{j}")));
    w.write_record(&header)?;
    let mut round_error = None;
    let mut write_error = None;
    // Winner before each point, and where it changed: (up, x) per change.
    let mut last_winner: Option<usize> = None;
    let mut switches: Vec<(bool, f64, usize, usize)> = Vec::new();
    let mut prev_x = f64::NAN;
    let mut each = |up: bool, x: f64, sol: &StageSolution| {
        let mut rec = vec![format!("{x:e}")];
        rec.extend(sol.outputs.iter().map(|v| format!("{v:e}")));
        rec.extend(sol.shares.iter().map(|v| format!("{v:e}")));
        if both_ways {
            rec.push(if up { "up" } else { "down" }.into());
        }
        if rounds > 0 {
            let mut x_in = spec.inputs.clone();
            match quantity {
                SweepQuantity::Difference => {
                    let m = 0.5 * (spec.inputs[0] + spec.inputs[1]);
                    x_in[0] = m + 0.5 * x;
                    x_in[1] = m - 0.5 * x;
                }
                SweepQuantity::Input(k) => x_in[k] = x,
            }
            match composite::ranking_order(chip, spec.temperature, &x_in, &spec.rule) {
                Ok(Some(order)) => rec.extend(order.iter().map(|o| o.to_string())),
                Ok(None) => {}
                Err(e) => {
                    round_error.get_or_insert(e);
                }
            }
        }
        if let Err(e) = w.write_record(&rec) {
            write_error.get_or_insert(e);
        }
        let winner = sol.decide(&spec.rule).winner;
        if let Some(l) = last_winner {
            if l != winner {
                switches.push((up, 0.5 * (prev_x + x), l, winner));
            }
        }
        last_winner = Some(winner);
        prev_x = x;
    };
    let run = if both_ways {
        let mut ws = Workspace::new();
        plan.run_with(stage, &spec.inputs, &mut ws, false, |x, sol| {
            each(true, x, sol)
        })
        .and_then(|()| {
            plan.run_with(stage, &spec.inputs, &mut ws, true, |x, sol| {
                each(false, x, sol)
            })
        })
    } else {
        plan.run(stage, &spec.inputs, |x, sol| each(true, x, sol))
    };
    let switches_text: Vec<String> = switches
        .iter()
        .map(|(up, x, from, to)| {
            format!(
                "{} sweep: winner {from} -> {to} at x = {}",
                if *up { "up" } else { "down" },
                format_si(*x, "A", 4)
            )
        })
        .collect();
    match run {
        Ok(()) => {}
        Err(SweepError::NegativeInput { x, mean, .. }) => match quantity {
            SweepQuantity::Difference => bail!("--sweep diff: x = {x:e} A would make an input negative (I_0 and I_1 have mean {mean:e} A); keep |x| <= {:e} A with --from/--to", 2.0 * mean),
            SweepQuantity::Input(index) => bail!("--sweep input:{index}: x = {x:e} A is negative; input currents must be >= 0 (--from/--to)"),
        },
        Err(SweepError::Solve { point, x, source }) => {
            return Err(anyhow::Error::new(*source)
                .context(format!("sweep point {point} (x = {x:e} A)")))
        }
        Err(e) => bail!("--sweep {what:?}: {e}"),
    }
    if let Some(e) = write_error {
        return Err(e.into());
    }
    if let Some(e) = round_error {
        return Err(e.context("repeated max: ranking a sweep point"));
    }
    let bytes = w.into_inner().map_err(|e| anyhow!("{e}"))?;
    let mut notes = Vec::new();
    if both_ways {
        notes.push("swept up, then down, the circuit's state carried from point to point (column `direction`)".to_string());
        notes.extend(switches_text);
        let up = switches.iter().find(|s| s.0).map(|s| s.1);
        let down = switches.iter().find(|s| !s.0).map(|s| s.1);
        if let (Some(u), Some(d)) = (up, down) {
            notes.push(format!(
                "hysteresis width (sweep) {} (each switching point within half a sweep step)",
                format_si((u - d).abs(), "A", 4)
            ));
        }
        if let (SweepQuantity::Difference, Some((u, d))) =
            (quantity, hysteresis_closed_form(stage, &spec.inputs[..2]))
        {
            // x here is I_0 - I_1: the closed form's x = I_a - I_b up to its sign.
            notes.push(format!(
                "hysteresis width (closed form, weak inversion, model notes §4.5) {}",
                format_si(u - d, "A", 4)
            ));
        }
    }
    match &args.out {
        Some(p) => {
            write_atomic(p, &bytes)?;
            println!(
                "wrote {} points to {}; {described}",
                if both_ways {
                    2 * args.points
                } else {
                    args.points
                },
                p.display()
            );
            for t in &notes {
                println!("{t}");
            }
            println!("{}", crate::CAUTION);
        }
        None => {
            // The CSV goes to stdout; what is said about it (quantity, caution) to stderr.
            eprintln!("{described}");
            for t in &notes {
                eprintln!("{t}");
            }
            print!("{}", String::from_utf8_lossy(&bytes));
            eprintln!("{}", crate::CAUTION);
        }
    }
    Ok(())
}

fn transient(
    args: &StageArgs,
    spec: &Spec,
    stage: &CompetitionCircuit,
    process: &crate::device::Process,
    chip: &CompetitionChip,
    die: Option<&super::die::LoadedDie>,
) -> anyhow::Result<()> {
    if matches!(stage, CompetitionCircuit::DiffPair(_)) {
        bail!("--transient is available for the circuits built from the current-mode WTA only (not --circuit diff-pair)");
    }
    let opts = TransientOptions {
        initial: match args.initial {
            InitialArg::Ground => InitialState::Ground,
            InitialArg::CommonMode => InitialState::CommonMode,
        },
        rule: spec.rule,
        read_time: spec.read_time,
        record_waveform: args.waveform.is_some(),
        ..Default::default()
    };
    if matches!(
        stage,
        CompetitionCircuit::Cascade(_) | CompetitionCircuit::Ranking(_)
    ) {
        if args.waveform.is_some() {
            bail!("--waveform is written for one shared-node circuit; a cascade's levels and a ranking's rounds are several runs (their times are in the report)");
        }
        let nopts = NoiseOptions::default();
        let report = Report::new(spec, stage, process);
        composite::transient(
            args.format,
            spec,
            chip,
            stage,
            &opts,
            args.noise.then_some((&nopts, args.seed)),
            &report,
        )?;
        return Ok(());
    }
    let mut ws = TransientWorkspace::new();
    let nopts = NoiseOptions::default();
    let mut rng = crate::rng::stream(args.seed, &[crate::rng::domain::SAMPLE_NOISE]);
    let noise = args
        .noise
        .then_some((&nopts, &mut rng as &mut dyn rand::RngCore));
    // A hysteretic die's state at test sample S is what its earlier samples left: replay them
    // in order, each a transient from the previous one's end state (the first from the
    // experiment's start), as the chip loop of a transient run does; a failed run leaves the
    // state as it was.
    let mut start: Option<Vec<f64>> = None;
    let mut replayed = 0usize;
    if let (Some(d), CompetitionCircuit::Hysteretic(c), None) = (die, stage, &args.inputs) {
        let ropts = TransientOptions {
            record_waveform: false,
            ..opts
        };
        let mut rws = TransientWorkspace::new();
        for x in d.inputs.iter().take(d.inputs.len().saturating_sub(1)) {
            let r = match &start {
                Some(v) => simulate_from(c, x, v, &ropts, None, &mut rws),
                None => simulate(c, x, &ropts, None, &mut rws),
            };
            if r.is_ok() {
                start = Some(rws.solution().node_voltages.clone());
            }
            replayed += 1;
        }
    }
    let s = match stage {
        CompetitionCircuit::Wta(c) => simulate(c, &spec.inputs, &opts, noise, &mut ws)?,
        CompetitionCircuit::Hysteretic(c) => match &start {
            Some(v) => simulate_from(c, &spec.inputs, v, &opts, noise, &mut ws)?,
            None => simulate(c, &spec.inputs, &opts, noise, &mut ws)?,
        },
        CompetitionCircuit::KWinners(c) => simulate(c, &spec.inputs, &opts, noise, &mut ws)?,
        CompetitionCircuit::DiffPair(_)
        | CompetitionCircuit::Cascade(_)
        | CompetitionCircuit::Ranking(_) => {
            bail!("internal: this circuit's transient is not a shared-node run")
        }
    };
    let sol = ws.solution();
    let n = spec.inputs.len();
    if let Some(p) = &args.waveform {
        let mut w = csv::Writer::from_writer(Vec::new());
        let mut header = vec!["t".to_string()];
        header.extend((0..n).map(|k| format!("V_{k}")));
        header.push("V_C".into());
        header.extend((0..n).map(|k| format!("out_{k}")));
        w.write_record(&header)?;
        for pt in ws.waveform() {
            let mut rec = vec![format!("{:e}", pt.time)];
            rec.extend(pt.voltages.iter().map(|v| format!("{v:e}")));
            rec.extend(pt.outputs.iter().map(|v| format!("{v:e}")));
            w.write_record(&rec)?;
        }
        write_atomic(p, &w.into_inner().map_err(|e| anyhow!("{e}"))?)?;
    }
    let report = Report::new(spec, stage, process);
    let opt = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v:e}"));
    let mut rows = vec![
        Row::text("transient", "decision_time", &opt(s.decision_time)),
        Row::text(
            "transient",
            "energy_to_decision",
            &opt(s.energy_to_decision),
        ),
        Row::new("transient", "energy", s.energy, "J"),
        Row::new("transient", "end_time", s.end_time, "s"),
        Row::new("transient", "time_scale", s.time_scale, "s"),
        Row::text(
            "transient",
            "decision_time_in_scales",
            &opt(s.decision_time_in_scales()),
        ),
        Row::new(
            "transient",
            "settled",
            f64::from(u8::from(s.settled)),
            "bool",
        ),
        Row::new("transient", "held", f64::from(u8::from(s.held)), "bool"),
        Row::new("transient", "steps", s.steps as f64, ""),
        Row::new("transient", "rejected_steps", s.rejected_steps as f64, ""),
        Row::new("transient", "final_residual", s.final_residual, ""),
    ];
    rows[0].unit = "s".into();
    rows[1].unit = "J".into();
    if let Some(d) = s.decision {
        rows.push(Row::new("transient", "winner", d.winner as f64, "index"));
    }
    if let Some(d) = s.decision_at_read {
        rows.push(Row::new(
            "transient",
            "winner_at_read",
            d.winner as f64,
            "index",
        ));
        rows.push(Row::new(
            "transient",
            "ambiguous_at_read",
            f64::from(u8::from(d.ambiguous)),
            "bool",
        ));
    }
    for k in 0..n {
        rows.push(Row::new("final", &format!("out_{k}"), sol.outputs[k], "A"));
    }
    if die.is_some() && matches!(stage, CompetitionCircuit::Hysteretic(_)) {
        rows.push(Row::new(
            "transient",
            "replayed_samples",
            replayed as f64,
            "",
        ));
    }
    // k winners: the set at the end of the run, judged by the rule for the k-th place.
    let top = match stage {
        CompetitionCircuit::KWinners(c) => Some(spec.rule.decide_top_k(&sol.shares, c.k())),
        _ => None,
    };
    if let Some(t) = &top {
        let order = composite::by_share(&sol.shares);
        for (place, &line) in order.iter().take(t.k).enumerate() {
            rows.push(Row::new(
                "k_winners",
                &format!("place_{place}.line"),
                line as f64,
                "index",
            ));
            rows.push(Row::new(
                "k_winners",
                &format!("place_{place}.output"),
                sol.outputs[line],
                "A",
            ));
        }
        rows.push(Row::new(
            "k_winners",
            "ambiguous",
            f64::from(u8::from(t.decision.ambiguous)),
            "bool",
        ));
    }
    match args.format {
        Format::Csv => {
            rows.push(Row::text("note", "caution", crate::CAUTION));
            print!("{}", rows_csv(report.rows.iter().chain(&rows)))
        }
        Format::Json => {
            let v = json!({
                "parameters": report.json(),
                "transient": {
                    "initial": format!("{:?}", opts.initial).to_lowercase(),
                    "decision_time_s": s.decision_time,
                    "energy_to_decision_j": s.energy_to_decision,
                    "energy_j": s.energy,
                    "end_time_s": s.end_time,
                    "settled": s.settled,
                    "held": s.held,
                    "time_scale_s": s.time_scale,
                    "decision_time_in_scales": s.decision_time_in_scales(),
                    "winner": s.decision.map(|d| d.winner),
                    "ambiguous": s.decision.is_none_or(|d| d.ambiguous),
                    "read_time_s": spec.read_time,
                    "winner_at_read": s.decision_at_read.map(|d| d.winner),
                    "ambiguous_at_read": s.decision_at_read.map(|d| d.ambiguous),
                    "steps": s.steps, "rejected_steps": s.rejected_steps,
                    "final_residual": s.final_residual,
                    "final_outputs_a": sol.outputs,
                    "final_node_voltages_v": sol.node_voltages,
                    "noise": args.noise,
                    "start": if start.is_some() { "replayed state" } else { "initial" },
                    "replayed_samples": replayed,
                    "k_winners": top.as_ref().map(|t| json!({
                        "k": t.k,
                        "winners": composite::by_share(&sol.shares).into_iter().take(t.k).collect::<Vec<_>>(),
                        "ambiguous": t.decision.ambiguous})),
                },
                "die": die.map(|d| json!({
                    "results": d.folder.display().to_string(), "seed": d.seed,
                    "point": args.point, "chip": args.chip.unwrap_or(0),
                    "test_sample": if args.inputs.is_none() { args.sample } else { None },
                    "true_class": if args.inputs.is_none() { d.truth.last().copied() } else { None }})),
                "caution": crate::CAUTION,
            });
            println!("{}", serde_json::to_string_pretty(&v)?);
        }
        Format::Table => {
            let mut t = report.table();
            let _ = writeln!(
                t,
                "\nTransient ({} start{}; backward Euler, {} steps, {} rejected)",
                match (start.is_some(), args.initial) {
                    (true, _) => "replayed-state",
                    (false, InitialArg::Ground) => "every node at 0 V",
                    (false, InitialArg::CommonMode) => "common-mode DC",
                },
                if args.noise { ", shot noise" } else { "" },
                s.steps,
                s.rejected_steps
            );
            match (s.decision_time, s.decision) {
                (Some(td), Some(d)) => {
                    let _ = writeln!(
                        t,
                        "  decision time        {}  (winner {}; {:.3} x C_in U_T/(kappa I_mean) = {})",
                        format_si(td, "s", 4),
                        d.winner,
                        td / s.time_scale,
                        format_si(s.time_scale, "s", 4)
                    );
                }
                _ => {
                    let _ = writeln!(
                        t,
                        "  decision time        none (no decision held to the end of the run)"
                    );
                }
            }
            if let Some(e) = s.energy_to_decision {
                let _ = writeln!(
                    t,
                    "  energy per decision  {}  (V_dd x (inputs + output currents) over the decision time)",
                    format_si(e, "J", 4)
                );
            }
            let _ = writeln!(
                t,
                "  run                  {} to {} ({})",
                format_si(s.energy, "J", 4),
                format_si(s.end_time, "s", 4),
                if s.settled {
                    "settled"
                } else if s.held {
                    "decision held for the hold time"
                } else if spec.read_time.is_some() {
                    "ended at the read-out time"
                } else {
                    "not settled by t_max"
                }
            );
            if let Some(d) = s.decision_at_read {
                let _ = writeln!(
                    t,
                    "  read at {}       winner {} (share {:.4}){}",
                    format_si(spec.read_time.unwrap_or(0.0), "s", 3),
                    d.winner,
                    d.winner_share,
                    if d.ambiguous { "  AMBIGUOUS" } else { "" }
                );
            }
            if let Some(p) = &args.waveform {
                let _ = writeln!(t, "  waveform written to {}", p.display());
            }
            if replayed > 0 {
                let _ = writeln!(
                    t,
                    "  start                the die's state after replaying test samples 0..{} (each a transient from the previous end state)",
                    replayed - 1
                );
            }
            if let Some(tk) = &top {
                let w: Vec<usize> = composite::by_share(&sol.shares)
                    .into_iter()
                    .take(tk.k)
                    .collect();
                let _ = writeln!(
                    t,
                    "  k winners at the end {:?}{}",
                    w,
                    if tk.decision.ambiguous {
                        "  AMBIGUOUS"
                    } else {
                        ""
                    }
                );
            }
            let _ = writeln!(t, "\n{}", crate::CAUTION);
            print!("{t}");
        }
    }
    Ok(())
}
