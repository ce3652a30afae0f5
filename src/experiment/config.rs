//! The experiment file: our own TOML schema, with physical quantities in SI (prefixes and units
//! accepted), defaults for everything but the dataset, and errors that name the key path, the
//! line, and the closest valid key.
//!
//! Loading is a pipeline with no side effects: text -> TOML tree -> command-line overrides ->
//! typed [`Experiment`] (unknown keys and wrong units rejected) -> semantic checks -> resolved
//! tree (every default filled in) -> sweep axes and points, each point re-checked. Nothing is
//! written anywhere before all of this has passed.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};
use toml::Value;

use super::quantity::{
    Capacitance, Current, FractionLength, Frequency, Length, Resistance, Temperature, Time,
    Transconductance, Voltage, VoltageLength, VoltagePerKelvin, VoltagePerLength, Q,
};
use super::sweep::{Axis, PointIndex, SweepError, SweepSpec};
use super::tree;
use crate::units::{quantity_from_toml, Dimension};

/// Errors in an experiment file. Every message names the file and the key path (and the line
/// when the key is in the file), and says what to write instead.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    #[error("cannot read experiment file `{path}`: {err}. Check the path")]
    Read { path: PathBuf, err: std::io::Error },
    #[error("`{path}` is not valid TOML: {message}")]
    Syntax { path: PathBuf, message: String },
    #[error("`{path}`{line}: key `{key}`: {message}{hint}")]
    Key {
        path: PathBuf,
        key: String,
        line: LineNo,
        message: String,
        hint: Hint,
    },
    #[error("command-line override `{text}`: {message}. Write it as key.path=value, e.g. competition.bias_current=\"50 nA\"")]
    Override { text: String, message: String },
    #[error("command line: `--set {text}`: key `{key}`: {message}")]
    OverrideValue {
        text: String,
        key: String,
        message: String,
    },
    #[error("`{path}`: sweep: {err}")]
    Sweep { path: PathBuf, err: SweepError },
    #[error("`{path}`: sweep point {point} ({settings}): {message}")]
    Point {
        path: PathBuf,
        point: usize,
        settings: String,
        message: String,
    },
}

/// " (line N)" or nothing.
#[derive(Debug, Clone, Copy, Default)]
pub struct LineNo(pub Option<usize>);
impl std::fmt::Display for LineNo {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.0 {
            Some(n) => write!(f, " (line {n})"),
            None => Ok(()),
        }
    }
}

/// "; did you mean `x`?" or nothing.
#[derive(Debug, Clone, Default)]
pub struct Hint(pub Option<String>);
impl std::fmt::Display for Hint {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match &self.0 {
            Some(s) => write!(f, "; did you mean `{s}`?"),
            None => Ok(()),
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Schema
// ---------------------------------------------------------------------------------------------

fn default_label() -> String {
    "label".into()
}
fn default_test_fraction() -> f64 {
    0.3
}
fn one() -> u64 {
    1
}

/// `[dataset]`: a shipped dataset by name, or a CSV file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DatasetCfg {
    /// A shipped dataset: "iris", "wine" or "digits".
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub name: Option<String>,
    /// A CSV file (relative paths are relative to the experiment file).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub file: Option<PathBuf>,
    #[serde(default = "default_label")]
    pub label_column: String,
    #[serde(default)]
    pub ignore_columns: Vec<String>,
    /// Share of samples held out for testing (stratified).
    #[serde(default = "default_test_fraction")]
    pub test_fraction: f64,
    /// Seed of the train/test split.
    #[serde(default = "one")]
    pub split_seed: u64,
    /// Run even when a class has too few samples to appear in the test split (accuracy then
    /// leaves it out; the run records a warning). Default: such a dataset is refused.
    #[serde(default)]
    pub allow_untested_classes: bool,
}

/// `[training]`: float multinomial logistic regression (linfa-logistic).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct TrainingCfg {
    /// L2 regularisation strength.
    pub l2: f64,
    pub max_iterations: u64,
    /// Train on standardised features (folded back into the [0, 1]-input weights).
    pub standardize: bool,
    /// Which trainer makes the read-out weights: `float` (linfa, the default) or
    /// `hardware_aware` (trained through this point's competition stage, element levels and
    /// injected nonidealities; `[training.hardware]`). Sweepable (a text axis), so that a sweep
    /// compares the two on the same dies.
    #[serde(skip_serializing_if = "TrainerKind::is_float")]
    pub trainer: TrainerKind,
    /// Options of the hardware-aware trainer (defaults when absent).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hardware: Option<HardwareTrainingCfg>,
}

/// `training.trainer`.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TrainerKind {
    /// linfa's multinomial logistic regression in floating point.
    #[default]
    Float,
    /// Trained through the point's own competition stage with injected chip nonidealities.
    HardwareAware,
}

impl TrainerKind {
    fn is_float(&self) -> bool {
        *self == TrainerKind::Float
    }
}

impl TrainingCfg {
    /// Whether the hardware-aware trainer makes this point's read-out.
    pub fn is_hardware_aware(&self) -> bool {
        self.trainer == TrainerKind::HardwareAware
    }
}

/// `[training.hardware]`: the hardware-aware trainer (DEVELOPERS.md model notes §6.2). An
/// injection strength left out is the design's own (element mismatch and programming error
/// from `[weights]`, the WTA's input-referred offset from its transistors' Pelgrom spreads).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct HardwareTrainingCfg {
    pub epochs: u32,
    pub learning_rate: f64,
    pub batch_size: u64,
    pub seed: u64,
    /// Relative sigma of each element's value injected per step.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub weight_mismatch: Option<f64>,
    /// Sigma of each element's programming error, as a fraction of the element range.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub programming_error: Option<f64>,
    /// Relative sigma of each competition line's input-referred offset.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub competition_offset: Option<f64>,
    /// Round the weights to the element's levels while training.
    pub quantise: bool,
    /// How training rounds to the levels: `nearest` (straight-through gradient, the default)
    /// or `stochastic` (DEVELOPERS.md model notes §6.2).
    #[serde(skip_serializing_if = "RoundingCfg::is_nearest")]
    pub rounding: RoundingCfg,
    /// Train the hidden stage together with the read-out, through its normaliser
    /// (DEVELOPERS.md model notes §6.2); false (the default) keeps the hidden layer fixed.
    #[serde(skip_serializing_if = "std::ops::Not::not")]
    pub train_hidden: bool,
}

/// `training.hardware.rounding`.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum RoundingCfg {
    #[default]
    Nearest,
    Stochastic,
}

impl RoundingCfg {
    fn is_nearest(&self) -> bool {
        *self == RoundingCfg::Nearest
    }
}

impl Default for HardwareTrainingCfg {
    fn default() -> Self {
        let d = crate::training::HardwareAwareOptions::default();
        Self {
            epochs: d.epochs,
            learning_rate: d.learning_rate,
            batch_size: d.batch_size as u64,
            seed: d.seed,
            weight_mismatch: None,
            programming_error: None,
            competition_offset: None,
            quantise: true,
            rounding: RoundingCfg::Nearest,
            train_hidden: false,
        }
    }
}

impl Default for TrainingCfg {
    fn default() -> Self {
        let d = crate::training::LogisticOptions::default();
        Self {
            l2: d.l2,
            max_iterations: d.max_iterations,
            standardize: d.standardize,
            trainer: TrainerKind::Float,
            hardware: None,
        }
    }
}

/// Overrides of one device type's process parameters (all optional; filled from the preset).
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DeviceCfg {
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub vt0: Option<Q<Voltage>>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub n: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mu_cox: Option<Q<Transconductance>>,
    /// Pelgrom A_VT of a matched pair ("5 mV um").
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub a_vt: Option<Q<VoltageLength>>,
    /// Pelgrom A_beta of a matched pair ("1 %um").
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub a_beta: Option<Q<FractionLength>>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub vt0_tempco: Option<Q<VoltagePerKelvin>>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub beta_temp_exponent: Option<f64>,
    /// Early voltage per channel length ("10 V/um"); sets the drain coupling.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub early_voltage_per_length: Option<Q<VoltagePerLength>>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub kf: Option<f64>,
}

/// `[process]`: a generic preset plus overrides.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ProcessCfg {
    pub preset: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub vdd: Option<Q<Voltage>>,
    /// Multiplies every Pelgrom constant (A_VT, A_beta) of both device types: 0 = no mismatch.
    pub mismatch_scale: f64,
    pub nmos: DeviceCfg,
    pub pmos: DeviceCfg,
}

impl Default for ProcessCfg {
    fn default() -> Self {
        Self {
            preset: "generic-180nm".into(),
            vdd: None,
            mismatch_scale: 1.0,
            nmos: DeviceCfg::default(),
            pmos: DeviceCfg::default(),
        }
    }
}

/// A transistor size.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SizeCfg {
    pub w: Q<Length>,
    pub l: Q<Length>,
}

impl SizeCfg {
    pub fn um(w: f64, l: f64) -> Self {
        Self {
            w: Q::new(w * 1e-6),
            l: Q::new(l * 1e-6),
        }
    }
}

/// `[input]`: the input DAC and the input lines.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct InputCfg {
    /// DAC resolution in bits; 0 = ideal (no quantisation).
    pub dac_bits: u32,
    /// Current of a full-scale input (x = 1) through a unit weight.
    pub full_scale_current: Q<Current>,
    /// Relative sigma of each input line's gain (chip draw).
    pub gain_mismatch: f64,
}

impl Default for InputCfg {
    fn default() -> Self {
        Self {
            dac_bits: 8,
            full_scale_current: Q::new(10e-9),
            gain_mismatch: 0.0,
        }
    }
}

/// Element type of a weight stage.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ElementKind {
    /// Linear programmable element (conductance or current weight).
    Linear,
    /// Subthreshold element, w = exp(kappa dV / U_T).
    Subthreshold,
}

/// Signed-weight encoding.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum EncodingKind {
    Shifted,
    Differential,
}

/// Relative or absolute error sigma.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SigmaKindCfg {
    Relative,
    Absolute,
}

/// `[weights]`: the trained weight matrix on analog elements.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct WeightsCfg {
    pub element: ElementKind,
    pub encoding: EncodingKind,
    /// Mirror transistors of the differential encoding.
    pub mirror: SizeCfg,
    /// Offset current per output line; absent = automatic (just enough to keep lines positive).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub offset_current: Option<Q<Current>>,
    /// Margin of the automatic offset (0.1 = 10 % above the worst negative output).
    pub offset_margin: f64,
    /// Relative sigma of each line's offset current (chip draw).
    pub offset_mismatch: f64,
    /// Fraction of the element range used by the largest weight, (0, 1].
    pub range_use: f64,
    /// Element range (weights are dimensionless current gains). Absent: 0..1 for linear,
    /// 1/16..1 for subthreshold.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub w_min: Option<f64>,
    pub w_max: f64,
    /// Programmable levels; 0 = continuous.
    pub levels: u32,
    /// Linear element: programming error sigma and its kind.
    pub programming_error: f64,
    pub programming_error_kind: SigmaKindCfg,
    /// Read noise sigma per decision (relative for subthreshold elements).
    pub read_noise: f64,
    pub read_noise_kind: SigmaKindCfg,
    /// Drift exponent nu of w(t) = w0 (t/t0)^-nu, its element-to-element sigma, and t0.
    pub drift_exponent: f64,
    pub drift_exponent_sigma: f64,
    pub drift_reference_time: Q<Time>,
    /// Fractions of elements stuck at w_min and at w_max.
    pub stuck_at_min: f64,
    pub stuck_at_max: f64,
    /// Subthreshold element: programming error of the stored voltage (sigma).
    pub programming_error_voltage: Q<Voltage>,
    /// Subthreshold element transistor.
    pub device: SizeCfg,
    /// Temperature at which subthreshold elements are programmed.
    pub program_temperature: Q<Temperature>,
    /// Program-and-verify compensates each element's own mismatch at the programming temperature.
    pub verify: bool,
}

impl Default for WeightsCfg {
    fn default() -> Self {
        Self {
            element: ElementKind::Linear,
            encoding: EncodingKind::Shifted,
            mirror: SizeCfg::um(4.0, 4.0),
            offset_current: None,
            offset_margin: 0.1,
            offset_mismatch: 0.0,
            range_use: 1.0,
            w_min: None,
            w_max: 1.0,
            levels: 16,
            programming_error: 0.0,
            programming_error_kind: SigmaKindCfg::Relative,
            read_noise: 0.0,
            read_noise_kind: SigmaKindCfg::Relative,
            drift_exponent: 0.0,
            drift_exponent_sigma: 0.0,
            drift_reference_time: Q::new(1.0),
            stuck_at_min: 0.0,
            stuck_at_max: 0.0,
            programming_error_voltage: Q::new(1e-3),
            device: SizeCfg::um(2.0, 2.0),
            program_temperature: Q::new(300.0),
            verify: false,
        }
    }
}

/// `[hidden]`: an optional hidden stage: a drawn weight layer whose output lines pass through a
/// soft competition (power-law normaliser, the weak-inversion behaviour of a current-mode WTA)
/// before the trained read-out layer. Both layers use the `[weights]` elements.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct HiddenCfg {
    /// Number of hidden lines; 0 = no hidden stage.
    pub units: u32,
    /// Normaliser exponent g (1 = linear normaliser, large = hard WTA).
    pub exponent: f64,
    /// Bias current of the hidden normaliser.
    pub bias_current: Q<Current>,
    /// Seed of the drawn hidden weights (the same for every chip).
    pub seed: u64,
    /// How chips evaluate the normaliser: `closed_form` (the weak-inversion law used for
    /// training), `current_wta` (full circuit with mismatch; gain kappa/sigma = `exponent`), or
    /// `diff_pair` (diode-fed differential pair: a linear normaliser, needs `exponent = 1`).
    /// Circuits use the `[competition]` transistor sizes and `hidden.bias_current`.
    pub circuit: HiddenCircuitKind,
    /// Given hidden weights instead of drawn ones: a CSV file (relative to the experiment file)
    /// without header, one row per hidden unit, one weight per input feature, the bias last.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub weights_file: Option<PathBuf>,
}

/// How chips evaluate the hidden normaliser.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum HiddenCircuitKind {
    ClosedForm,
    CurrentWta,
    DiffPair,
}

impl Default for HiddenCfg {
    fn default() -> Self {
        Self {
            units: 0,
            // 4: the current-mode WTA circuit follows its I^g law from about g = 2.5 with the
            // default sizes and bias (pipeline::check_hidden_wta refuses below); 2 did not.
            exponent: 4.0,
            bias_current: Q::new(100e-9),
            seed: 1,
            circuit: HiddenCircuitKind::ClosedForm,
            weights_file: None,
        }
    }
}

/// Which competition circuit decides.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum CircuitKind {
    /// Current-mode WTA (two transistors per cell, shared node).
    CurrentWta,
    /// Multi-input differential pair (voltage-mode soft WTA) fed through diode-connected devices.
    DiffPair,
    /// Current-mode WTA with hysteresis: `feedback` of each cell's output current mirrored back
    /// into its input (keys `feedback`, `mirror`).
    HystereticWta,
    /// Exact argmax of the weight-stage output currents (no competition circuit).
    Argmax,
    /// k-winners WTA: the current-mode WTA with each cell's output limited to
    /// `unit_current` and the bias at (k - 1/2) units; accuracy is top-k accuracy.
    KWinners,
    /// A tree of current-mode WTAs of `fan_in` lines each.
    Cascade,
    /// Ranking by repeated maximum: one current-mode WTA decides k times, each winner
    /// removed; accuracy is top-k accuracy.
    RepeatedMax,
}

/// How the decision is evaluated.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum EvaluationKind {
    /// Static (DC) operating point; noise as an input-referred draw over `noise_bandwidth`.
    Dc,
    /// Transient from a reset state with node capacitances; time and energy per decision.
    Transient,
}

/// `[competition]`: the WTA stage.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct CompetitionCfg {
    pub circuit: CircuitKind,
    /// Bias (tail) current of the competition stage.
    pub bias_current: Q<Current>,
    /// Current-mode WTA: the input (sink) transistor of each cell.
    pub sink: SizeCfg,
    /// Current-mode WTA: the output transistor of each cell; diff pair: the input transistors.
    pub output: SizeCfg,
    /// Competition gain kappa/sigma; when given, it sets the drain coupling of the stage's
    /// transistors (overriding the process's Early voltage).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub gain: Option<f64>,
    /// Voltage of the output nodes (drains of the output transistors); absent = supply.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub output_voltage: Option<Q<Voltage>>,
    /// Per-decision shot noise of the input currents over `noise_bandwidth`.
    pub noise: bool,
    /// Noise bandwidth; absent = each input node's single-pole equivalent noise bandwidth
    /// kappa I / (4 C U_T) with C = `node_capacitance`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub noise_bandwidth: Option<Q<Frequency>>,
    /// A decision is ambiguous when the winner's share is below this ...
    pub min_winner_share: f64,
    /// ... or the runner-up's share is above this.
    pub max_runner_up_share: f64,
    pub evaluation: EvaluationKind,
    /// Node capacitance of each input node (transient).
    pub node_capacitance: Q<Capacitance>,
    /// Capacitance of the common node (transient).
    pub common_capacitance: Q<Capacitance>,
    /// Time at which the decision is read (transient); absent = run until settled.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub read_time: Option<Q<Time>>,
    /// Transient with `noise`: the decision is taken once it has held this long (same winner,
    /// inside the decision rule); absent = 10 time scales C U_T / (kappa I_mean).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hold_time: Option<Q<Time>>,
    /// Diff pair fed through resistors instead of diode-connected devices: the resistance.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub input_resistance: Option<Q<Resistance>>,
    /// Diff pair with resistor inputs: the voltage at zero input current.
    pub resistor_reference: Q<Voltage>,
    /// Hysteretic WTA: the fraction of each cell's output current mirrored back into its
    /// input (required with `circuit = "hysteretic_wta"`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub feedback: Option<f64>,
    /// Hysteretic WTA: the feedback mirror's diode (PMOS; the feedback device has `feedback`
    /// times its width); absent = 2 um x 2 um.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mirror: Option<SizeCfg>,
    /// `k_winners` and `repeated_max`: the number of winners, 1 to classes - 1 (accuracy is
    /// then top-k accuracy).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub k: Option<u64>,
    /// `k_winners`: each cell's largest output current; absent = `bias_current`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unit_current: Option<Q<Current>>,
    /// `k_winners`: the PMOS output limiter of each cell; absent = the `output` size.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub limiter: Option<SizeCfg>,
    /// `cascade`: lines per group of the tree (at least 2; one that does not divide the
    /// classes leaves unused slots, reported).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fan_in: Option<u64>,
    /// `cascade`: the replica copying a group's winner to the next level; absent = `sink`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub copy: Option<SizeCfg>,
    /// `cascade`: the replica's drain voltage; absent = half the supply.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub copy_drain_voltage: Option<Q<Voltage>>,
}

impl Default for CompetitionCfg {
    fn default() -> Self {
        Self {
            circuit: CircuitKind::CurrentWta,
            bias_current: Q::new(100e-9),
            sink: SizeCfg::um(2.0, 2.0),
            output: SizeCfg::um(2.0, 2.0),
            gain: None,
            output_voltage: None,
            noise: false,
            noise_bandwidth: None,
            min_winner_share: crate::stages::competition::DecisionRule::default().min_winner_share,
            max_runner_up_share: crate::stages::competition::DecisionRule::default()
                .max_runner_up_share,
            evaluation: EvaluationKind::Dc,
            node_capacitance: Q::new(100e-15),
            common_capacitance: Q::new(200e-15),
            read_time: None,
            hold_time: None,
            input_resistance: None,
            feedback: None,
            mirror: None,
            resistor_reference: Q::new(0.4),
            k: None,
            unit_current: None,
            limiter: None,
            fan_in: None,
            copy: None,
            copy_drain_voltage: None,
        }
    }
}

/// `[conditions]`: what the chips see when they run.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ConditionsCfg {
    pub temperature: Q<Temperature>,
    pub time_since_programming: Q<Time>,
}

impl Default for ConditionsCfg {
    fn default() -> Self {
        Self {
            temperature: Q::new(300.0),
            time_since_programming: Q::new(0.0),
        }
    }
}

/// `[population]`: Monte Carlo chips.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct PopulationCfg {
    pub chips: u64,
    pub seed: u64,
    /// Whether chip c is the same die at every sweep point (`paired`, common random numbers)
    /// or a fresh die per point (`independent`).
    pub pairing: PairingKind,
}

impl Default for PopulationCfg {
    fn default() -> Self {
        Self {
            chips: 100,
            seed: 1,
            pairing: PairingKind::Paired,
        }
    }
}

/// `population.pairing`: how dies relate across sweep points.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum PairingKind {
    /// Die c draws the same standard normals at every point (differences are paired).
    Paired,
    /// Fresh dies at every point.
    Independent,
}

impl PairingKind {
    /// How sweep point `point`'s chip streams are keyed (the core's [`crate::pipeline::Dies`]).
    pub fn dies_at(self, point: usize) -> crate::pipeline::Dies {
        match self {
            PairingKind::Paired => crate::pipeline::Dies::Paired,
            PairingKind::Independent => crate::pipeline::Dies::Independent {
                point: point as u64,
            },
        }
    }
}

/// `[cost]`: the area and power model (DEVELOPERS.md, model notes §11).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct CostCfg {
    /// Layout area / gate area (routing, wells, guard rings); 2 is common practice, no source.
    pub layout_overhead: f64,
    /// Unit device of the input DAC (2^B - 1 per input line).
    pub dac_unit: SizeCfg,
    /// The device a linear weight element counts as.
    pub linear_element: SizeCfg,
    /// How long a DC decision keeps the circuit biased (energy = power x this time).
    pub read_out_time: Q<Time>,
}

impl Default for CostCfg {
    fn default() -> Self {
        Self {
            layout_overhead: 2.0,
            dac_unit: SizeCfg::um(1.0, 1.0),
            linear_element: SizeCfg::um(1.0, 1.0),
            read_out_time: Q::new(1e-6),
        }
    }
}

/// `[trim]`: a gain trim DAC per competition-stage input line, calibrated on every die before
/// the test split is evaluated (DEVELOPERS.md, model notes §11, *Trim*).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct TrimCfg {
    /// Trim the dies (false: the table is kept but the dies are untrimmed).
    pub enabled: bool,
    /// Bits of each line's DAC, 1 to 16.
    pub bits: u32,
    /// Span of the gain correction: gains from 1 - range/2 to 1 + range/2, range in (0, 2).
    pub range: f64,
    /// Unit device of the DAC (2^bits - 1 per trimmed line).
    pub unit: SizeCfg,
    /// The DAC's own full-scale error from its unit devices' area (Pelgrom).
    pub mismatch: bool,
    /// Die temperature during calibration (once, at test; the die then runs at
    /// `conditions.temperature`).
    pub temperature: Q<Temperature>,
    /// Pelgrom A_VT (pair) of the DAC's unit devices, e.g. "5 mV um": each bit's threshold
    /// error. Absent = 0 (not modelled; the results of files without it are unchanged).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub a_vt: Option<Q<VoltageLength>>,
    /// A DAC per competition-stage input line (absent = true).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lines: Option<bool>,
    /// A DAC per input column of the first weight stage, bias line included (absent = false).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub columns: Option<bool>,
    /// Training rows (the first N of the training split) whose mean input drives each column
    /// during the column calibration (absent = the whole training split).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub calibration_samples: Option<usize>,
}

impl Default for TrimCfg {
    fn default() -> Self {
        Self {
            enabled: true,
            bits: 6,
            range: 0.5,
            unit: SizeCfg::um(1.0, 1.0),
            mismatch: true,
            temperature: Q::new(300.0),
            a_vt: None,
            lines: None,
            columns: None,
            calibration_samples: None,
        }
    }
}

/// `[programming]`: program-and-verify of the weight elements (DEVELOPERS.md, model notes
/// §5.1): write, read back, correct until the read is within `tolerance` of the level or
/// `max_cycles` writes are spent. Absent = one-shot programming.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ProgrammingCfg {
    /// Program and verify (false: the table is kept but every element is written once).
    pub verify: bool,
    /// Accepted |read - level|, a fraction of the element's range w_max - w_min.
    pub tolerance: f64,
    /// Most writes per element, the first included (1 = one-shot with a verify read).
    pub max_cycles: u32,
    /// Sigma of one verify read, a fraction of the element's range.
    pub read_noise: f64,
    /// Time of one write-and-read cycle (programming time = cycles x this).
    pub cycle_time: Q<Time>,
}

impl Default for ProgrammingCfg {
    fn default() -> Self {
        Self {
            verify: true,
            tolerance: 0.01,
            max_cycles: 20,
            read_noise: 0.0,
            cycle_time: Q::new(1e-6),
        }
    }
}

/// `[target]`: the accuracy a chip must reach to count towards yield.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct TargetCfg {
    pub accuracy: f64,
    /// Confidence level of the yield interval (0.95 -> z = 1.96).
    pub confidence: f64,
    /// Yield target: a point passes when the low end of the Wilson interval of the share of
    /// chips reaching `accuracy` is at least this.
    #[serde(rename = "yield")]
    pub yield_target: f64,
}

impl Default for TargetCfg {
    fn default() -> Self {
        Self {
            accuracy: 0.9,
            confidence: 0.95,
            yield_target: 0.95,
        }
    }
}

/// `[cluster]`: settings of the job scripts `hardmax slurm-script` writes. Not part of the
/// experiment's identity (removed from the resolved experiment): changing them never changes
/// results. Command-line options take precedence.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct ClusterCfg {
    #[serde(skip_serializing_if = "Option::is_none")]
    pub partition: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub account: Option<String>,
    /// Slurm time format: minutes, "HH:MM:SS" or "D-HH:MM:SS".
    #[serde(skip_serializing_if = "Option::is_none")]
    pub time_limit: Option<String>,
    /// Memory per task, e.g. "4G".
    #[serde(skip_serializing_if = "Option::is_none")]
    pub memory: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cpus_per_task: Option<u64>,
    /// Number of shards (array tasks).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub shards: Option<u64>,
}

/// A whole experiment file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Experiment {
    /// Name (default: the file name without extension).
    #[serde(default)]
    pub name: String,
    #[serde(default)]
    pub description: String,
    pub dataset: DatasetCfg,
    #[serde(default)]
    pub training: TrainingCfg,
    #[serde(default)]
    pub process: ProcessCfg,
    #[serde(default)]
    pub input: InputCfg,
    #[serde(default)]
    pub weights: WeightsCfg,
    #[serde(default)]
    pub hidden: HiddenCfg,
    #[serde(default)]
    pub competition: CompetitionCfg,
    #[serde(default)]
    pub conditions: ConditionsCfg,
    #[serde(default)]
    pub population: PopulationCfg,
    #[serde(default)]
    pub target: TargetCfg,
    #[serde(default)]
    pub cost: CostCfg,
    /// `[trim]`: absent = no trim (and the resolved experiment, hence its hash, unchanged).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub trim: Option<TrimCfg>,
    /// `[programming]`: absent = one-shot programming (the resolved experiment unchanged).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub programming: Option<ProgrammingCfg>,
    #[serde(default)]
    pub sweep: SweepSpec,
    /// Batch-scheduler settings (taken out of the resolved experiment, see [`ClusterCfg`]).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cluster: Option<ClusterCfg>,
    /// `[search]`: what `hardmax size` searches (read by `experiment::sizing`); taken out of the
    /// resolved experiment like `[cluster]`, so it never changes the experiment hash.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub search: Option<toml::Table>,
    /// `[corners]`: the corners `hardmax size` checks every candidate at (read by
    /// `experiment::sizing`); taken out of the resolved experiment like `[search]`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub corners: Option<toml::Table>,
}

impl Experiment {
    /// An experiment with every optional key present (values are placeholders): the reference
    /// for which keys exist and what type and unit each has.
    pub fn schema_example() -> Experiment {
        let mut e = Experiment {
            name: "example".into(),
            description: String::new(),
            dataset: DatasetCfg {
                name: Some("iris".into()),
                file: Some("data.csv".into()),
                label_column: default_label(),
                ignore_columns: vec![],
                test_fraction: default_test_fraction(),
                split_seed: 1,
                allow_untested_classes: false,
            },
            training: TrainingCfg::default(),
            process: ProcessCfg::default(),
            input: InputCfg::default(),
            weights: WeightsCfg::default(),
            hidden: HiddenCfg::default(),
            competition: CompetitionCfg::default(),
            conditions: ConditionsCfg::default(),
            population: PopulationCfg::default(),
            target: TargetCfg::default(),
            cost: CostCfg::default(),
            trim: Some(TrimCfg {
                a_vt: Some(Q::new(5e-9)),
                lines: Some(true),
                columns: Some(false),
                calibration_samples: Some(100),
                ..TrimCfg::default()
            }),
            programming: Some(ProgrammingCfg::default()),
            sweep: SweepSpec::default(),
            cluster: None,
            search: None,
            corners: None,
        };
        e.process.vdd = Some(Q::new(1.8));
        for d in [&mut e.process.nmos, &mut e.process.pmos] {
            *d = DeviceCfg {
                vt0: Some(Q::new(0.4)),
                n: Some(1.3),
                mu_cox: Some(Q::new(1e-4)),
                a_vt: Some(Q::new(5e-9)),
                a_beta: Some(Q::new(1e-8)),
                vt0_tempco: Some(Q::new(-1e-3)),
                beta_temp_exponent: Some(-1.5),
                early_voltage_per_length: Some(Q::new(1e7)),
                kf: Some(1e-25),
            };
        }
        e.weights.offset_current = Some(Q::new(1e-9));
        e.training.trainer = TrainerKind::HardwareAware;
        e.training.hardware = Some(HardwareTrainingCfg {
            weight_mismatch: Some(0.01),
            programming_error: Some(0.01),
            competition_offset: Some(0.01),
            ..HardwareTrainingCfg::default()
        });
        e.weights.w_min = Some(0.0);
        e.competition.gain = Some(300.0);
        e.competition.output_voltage = Some(Q::new(1.8));
        e.competition.read_time = Some(Q::new(1e-6));
        e.competition.input_resistance = Some(Q::new(1e6));
        e.competition.noise_bandwidth = Some(Q::new(1e4));
        e
    }
}

// ---------------------------------------------------------------------------------------------
// Loading
// ---------------------------------------------------------------------------------------------

/// An experiment after loading: the typed base (no sweep applied), its resolved tree, the sweep
/// axes and points, and one typed experiment per sweep point.
#[derive(Clone, Debug)]
pub struct Resolved {
    pub file: PathBuf,
    pub base: Experiment,
    /// The resolved experiment as TOML (every default filled in, overrides applied).
    pub tree: Value,
    pub axes: Vec<Axis>,
    pub points: Vec<PointIndex>,
    /// The experiment at each sweep point.
    pub at_point: Vec<Experiment>,
    /// The `[cluster]` table (defaults when absent); not part of `tree`.
    pub cluster: ClusterCfg,
    /// Physically odd but legal settings (printed by the CLI, recorded in the manifest).
    pub warnings: Vec<String>,
    /// Sweep axes replaced by a `--set` of the same key (that key then has one value).
    pub replaced_axes: Vec<String>,
}

impl Resolved {
    /// The resolved experiment as TOML text (what `hardmax resolve` prints and what a results
    /// folder keeps).
    pub fn to_toml(&self) -> String {
        tidy_floats(&toml::to_string_pretty(&self.tree).unwrap_or_default())
    }

    /// "path = value unit, ..." of a sweep point, for messages.
    pub fn describe_point(&self, p: &PointIndex) -> String {
        describe_point(&self.axes, p)
    }
}

/// A float as written in TOML without a long run of zeros: the shortest digits that read back
/// to exactly this value, in exponent form for very small or large magnitudes (`1e-25`, not
/// `0.0000000000000000000000001`). Lossless (the identity hash hashes this text) and still a
/// TOML float.
fn tidy_float(r: f64) -> String {
    let s = if r != 0.0 && (r.abs() < 1e-4 || r.abs() >= 1e15) {
        format!("{r:e}")
    } else {
        format!("{r:?}")
    };
    if s.contains(['.', 'e', 'E']) || s.contains("inf") || s.contains("nan") {
        s
    } else {
        format!("{s}.0")
    }
}

/// Rewrite every float literal of a TOML text (outside strings and comments) with
/// [`tidy_float`]; integers, strings, keys and the rest are kept byte for byte.
fn tidy_floats(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for line in text.split_inclusive('\n') {
        let b: Vec<char> = line.chars().collect();
        let mut i = 0;
        // Keys and table headers come before `=`; only values are rewritten (a line of a
        // multi-line array starts with its value).
        let mut in_value = line
            .trim_start()
            .starts_with(|c: char| c.is_ascii_digit() || c == '-' || c == '+');
        let mut quote: Option<char> = None;
        while i < b.len() {
            let c = b[i];
            if let Some(q) = quote {
                out.push(c);
                if c == '\\' && q == '"' && i + 1 < b.len() {
                    out.push(b[i + 1]);
                    i += 2;
                    continue;
                }
                if c == q {
                    quote = None;
                }
                i += 1;
                continue;
            }
            match c {
                '"' | '\'' => {
                    quote = Some(c);
                    out.push(c);
                    i += 1;
                }
                '#' => {
                    out.extend(&b[i..]);
                    i = b.len();
                }
                '=' => {
                    in_value = true;
                    out.push(c);
                    i += 1;
                }
                _ if in_value
                    && (c.is_ascii_digit() || c == '-' || c == '+')
                    && (i == 0 || matches!(b[i - 1], ' ' | '[' | ',' | '=')) =>
                {
                    let start = i;
                    while i < b.len()
                        && (b[i].is_ascii_alphanumeric() || matches!(b[i], '.' | '-' | '+' | '_'))
                    {
                        i += 1;
                    }
                    let tok: String = b[start..i].iter().collect();
                    let is_float = tok.contains(['.', 'e', 'E'])
                        && !tok.contains(['_', ':', 'T'])
                        && !tok.starts_with("0x");
                    match tok.parse::<f64>() {
                        Ok(x) if is_float && x.is_finite() => out.push_str(&tidy_float(x)),
                        _ => out.push_str(&tok),
                    }
                }
                _ => {
                    out.push(c);
                    i += 1;
                }
            }
        }
    }
    out
}

fn describe_point(axes: &[Axis], p: &PointIndex) -> String {
    axes.iter()
        .zip(&p.value_index)
        .map(|(a, &i)| match a.labels.as_ref().and_then(|l| l.get(i)) {
            Some(l) => format!("{} = {l}", a.path),
            None => format!(
                "{} = {}",
                a.path,
                crate::units::format_si(a.values[i], &a.unit, 6)
            ),
        })
        .collect::<Vec<_>>()
        .join(", ")
}

/// Load, override, check and resolve an experiment file.
pub fn load(file: &Path, overrides: &[String]) -> Result<Resolved, ConfigError> {
    let text = std::fs::read_to_string(file).map_err(|err| ConfigError::Read {
        path: file.into(),
        err,
    })?;
    load_str(&text, file, overrides)
}

/// As [`load`], from text (`file` is used in messages and for relative dataset paths).
pub fn load_str(text: &str, file: &Path, overrides: &[String]) -> Result<Resolved, ConfigError> {
    let mut root: Value = toml::from_str(text).map_err(|e| ConfigError::Syntax {
        path: file.into(),
        message: e.to_string(),
    })?;
    let mut override_keys: Vec<(String, String)> = Vec::new();
    let mut replaced_axes = Vec::new();
    for o in overrides {
        let (k, v) = o.split_once('=').ok_or_else(|| ConfigError::Override {
            text: o.clone(),
            message: "no `=`".into(),
        })?;
        tree::set(&mut root, k.trim(), tree::parse_override_value(v)).map_err(|e| {
            ConfigError::Override {
                text: o.clone(),
                message: e.to_string(),
            }
        })?;
        override_keys.push((k.trim().to_string(), o.clone()));
        // `--set` on a swept key replaces that sweep axis: the key has the one given value.
        if let Some(Value::Array(axes)) = root
            .get_mut("sweep")
            .and_then(|s| s.as_table_mut())
            .and_then(|s| s.get_mut("axis"))
        {
            let before = axes.len();
            axes.retain(|a| a.get("path").and_then(Value::as_str) != Some(k.trim()));
            if axes.len() != before {
                replaced_axes.push(k.trim().to_string());
            }
        }
    }
    // An error about a key set on the command line names the command line, not the file.
    let from_cli = |e: ConfigError| -> ConfigError {
        match e {
            ConfigError::Key {
                key, message, hint, ..
            } => match override_keys
                .iter()
                .rev()
                .find(|(k, _)| key == *k || key.starts_with(&format!("{k}.")))
            {
                Some((_, text)) => ConfigError::OverrideValue {
                    text: text.clone(),
                    key,
                    message: format!("{message}{hint}"),
                },
                None => ConfigError::Key {
                    path: file.into(),
                    line: LineNo(line_of(text, &key)),
                    key,
                    message,
                    hint,
                },
            },
            other => other,
        }
    };
    let mut base = typed(&root, text, file).map_err(from_cli)?;
    if base.name.is_empty() {
        base.name = file
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "experiment".into());
    }
    fill_process_defaults(&mut base, text, file).map_err(from_cli)?;
    check(&base, text, file).map_err(from_cli)?;
    let cluster = base.cluster.take().unwrap_or_default();
    // `[search]` is read from the file by `hardmax size`; not part of the experiment.
    base.search = None;
    base.corners = None;
    check_cluster(&cluster, text, file).map_err(from_cli)?;
    let resolved_tree = Value::try_from(&base).map_err(|e| ConfigError::Syntax {
        path: file.into(),
        message: format!("internal: cannot serialise the resolved experiment: {e}"),
    })?;
    let axes = resolve_axes(&base, &resolved_tree, file)?;
    let points =
        super::sweep::points(&axes, base.sweep.combine).map_err(|err| ConfigError::Sweep {
            path: file.into(),
            err,
        })?;
    let mut at_point = Vec::with_capacity(points.len());
    let mut warnings_all: Vec<String> = Vec::new();
    let schema_tree =
        Value::try_from(Experiment::schema_example()).unwrap_or(Value::Boolean(false));
    for p in &points {
        let mut t = resolved_tree.clone();
        for (a, &i) in axes.iter().zip(&p.value_index) {
            // Paths were checked to exist in the resolved tree.
            let _ = tree::set(&mut t, &a.path, a.toml_value(i));
        }
        let point_err = |message: String| ConfigError::Point {
            path: file.into(),
            point: p.point,
            settings: describe_point(&axes, p),
            message,
        };
        let e: Experiment = serde_path_to_error::deserialize(t)
            .map_err(|e| point_err(format!("`{}`: {}", e.path(), e.inner())))?;
        check(&e, "", file).map_err(|e| point_err(e.to_string()))?;
        // The core's constructors decide what is valid; a refusal names the user's key.
        if let Err(mut r) = super::build::check_with_core(&e) {
            if let Some(v) = r.value {
                // The value as the designer writes it ("-1 ns"), unit from the key's schema.
                let unit = tree::get(&resolved_tree, &r.key)
                    .or_else(|| tree::get(&schema_tree, &r.key))
                    .and_then(|x| x.as_str().and_then(super::quantity::parse_resolved))
                    .map(|(_, d)| d.base_unit())
                    .unwrap_or("");
                let shown = if unit.is_empty() {
                    crate::units::short_number(v)
                } else {
                    crate::units::format_si(v, unit, 6)
                };
                r.message = format!("{shown} is {}", r.message);
            }
            let swept = axes
                .iter()
                .any(|a| r.key == a.path || a.path.starts_with(&format!("{}.", r.key)));
            return Err(if swept {
                point_err(format!("key `{}`: {}", r.key, r.message))
            } else {
                from_cli(ConfigError::Key {
                    path: file.into(),
                    line: LineNo(None),
                    key: r.key,
                    message: r.message,
                    hint: Hint(None),
                })
            });
        }
        for w in warnings(&e) {
            if !warnings_all.contains(&w) {
                warnings_all.push(w);
            }
        }
        at_point.push(e);
    }
    Ok(Resolved {
        file: file.into(),
        base,
        tree: resolved_tree,
        axes,
        points,
        at_point,
        cluster,
        warnings: warnings_all,
        replaced_axes,
    })
}

/// Checks of the `[cluster]` table, naming the key.
fn check_cluster(c: &ClusterCfg, text: &str, file: &Path) -> Result<(), ConfigError> {
    let bad = |key: &str, message: String| ConfigError::Key {
        path: file.into(),
        key: key.into(),
        line: LineNo(line_of(text, key)),
        message,
        hint: Hint(None),
    };
    if let Some(t) = &c.time_limit {
        super::slurm::check_time_limit(t).map_err(|m| bad("cluster.time_limit", m))?;
    }
    if let Some(m) = &c.memory {
        super::slurm::check_memory(m).map_err(|m| bad("cluster.memory", m))?;
    }
    for (key, v) in [
        ("cluster.cpus_per_task", c.cpus_per_task),
        ("cluster.shards", c.shards),
    ] {
        if v == Some(0) {
            return Err(bad(key, "0: use a whole number of at least 1".into()));
        }
    }
    for (key, v) in [
        ("cluster.partition", &c.partition),
        ("cluster.account", &c.account),
    ] {
        if let Some(v) = v {
            if v.is_empty()
                || v.chars()
                    .any(|ch| ch.is_whitespace() || ch == '\'' || ch == '"')
            {
                return Err(bad(
                    key,
                    format!("`{v}`: a name without spaces or quotes, as the cluster's administrators gave it"),
                ));
            }
        }
    }
    Ok(())
}

/// Typed deserialisation with key paths, line numbers and suggestions in errors.
fn typed(root: &Value, text: &str, file: &Path) -> Result<Experiment, ConfigError> {
    serde_path_to_error::deserialize::<_, Experiment>(root.clone()).map_err(|e| {
        let path = e.path().to_string();
        // The TOML layer appends "in `key`" (the key is named by our message already).
        let inner = e.inner().to_string();
        let inner = match inner.trim_end().rsplit_once("\nin `") {
            Some((head, _)) => head.trim_end().to_string(),
            None => inner.trim_end().to_string(),
        };
        // Rust type names mean nothing to a designer.
        let inner = inner
            .replace("expected u64", "expected a whole number, 0 or more")
            .replace("expected u32", "expected a whole number, 0 or more")
            .replace("expected f64", "expected a number")
            .replace("expected a boolean", "expected true or false");
        if let Some(field) = inner
            .strip_prefix("missing field `")
            .and_then(|r| r.split_once('`'))
            .map(|(f, _)| f.to_string())
        {
            let key = if path == "." || path.is_empty() {
                field.clone()
            } else {
                format!("{path}.{field}")
            };
            let message = if key == "dataset" {
                "the experiment needs a [dataset] section with `name` (a shipped dataset: iris, wine, digits) or `file` (a CSV file)".to_string()
            } else {
                format!("`{field}` is required here; add it")
            };
            return ConfigError::Key {
                path: file.into(),
                line: LineNo(line_of(text, &path)),
                key,
                message,
                hint: Hint(None),
            };
        }
        let (key, hint) = match unknown_field(&inner) {
            Some((field, expected)) => {
                let full = if path == "." || path.is_empty() {
                    field.clone()
                } else {
                    // serde_path_to_error reports the path of the table holding the field.
                    let parent = path.trim_end_matches(&format!(".{field}"));
                    if parent == field {
                        field.clone()
                    } else {
                        format!("{parent}.{field}")
                    }
                };
                let hint = tree::closest(&field, expected.iter().map(|s| s.as_str()))
                    .map(|s| s.to_string());
                (full, hint)
            }
            None => (path.clone(), None),
        };
        ConfigError::Key {
            path: file.into(),
            line: LineNo(line_of(text, &key)),
            key,
            message: inner,
            hint: Hint(hint),
        }
    })
}

/// Parse serde's "unknown field `x`, expected one of `a`, `b`" into ("x", ["a", "b"]).
fn unknown_field(msg: &str) -> Option<(String, Vec<String>)> {
    let rest = msg.strip_prefix("unknown field `")?;
    let (field, rest) = rest.split_once('`')?;
    let expected = rest
        .split('`')
        .skip(1)
        .step_by(2)
        .map(String::from)
        .collect();
    Some((field.to_string(), expected))
}

/// 1-based line of the key at dotted `path` in the original text, if it is written there.
pub fn line_of(text: &str, path: &str) -> Option<usize> {
    use toml_edit::{ImDocument, Item};
    if text.is_empty() {
        return None;
    }
    let doc = ImDocument::parse(text.to_string()).ok()?;
    let segs = tree::segments(path);
    let (last, init) = segs.split_last()?;
    enum Cur<'a> {
        T(&'a toml_edit::Table),
        I(&'a toml_edit::InlineTable),
    }
    let mut cur = Cur::T(doc.as_table());
    for s in init {
        let item = match cur {
            Cur::T(t) => t.get(s)?,
            Cur::I(t) => {
                let v = t.get(s)?;
                match v {
                    toml_edit::Value::InlineTable(it) => {
                        cur = Cur::I(it);
                        continue;
                    }
                    _ => return None,
                }
            }
        };
        cur = match item {
            Item::Table(t) => Cur::T(t),
            Item::Value(toml_edit::Value::InlineTable(t)) => Cur::I(t),
            Item::ArrayOfTables(_) => return None,
            _ => return None,
        };
    }
    let span = match cur {
        Cur::T(t) => t.key(last)?.span()?,
        Cur::I(t) => t.key(last)?.span()?,
    };
    Some(text[..span.start].matches('\n').count() + 1)
}

/// Fill the process overrides from the preset, so the resolved experiment shows every value.
fn fill_process_defaults(e: &mut Experiment, text: &str, file: &Path) -> Result<(), ConfigError> {
    let p = crate::device::presets::preset(&e.process.preset).map_err(|err| ConfigError::Key {
        path: file.into(),
        key: "process.preset".into(),
        line: LineNo(line_of(text, "process.preset")),
        message: err.to_string(),
        hint: Hint(
            tree::closest(
                &e.process.preset,
                crate::device::presets::preset_names().iter().copied(),
            )
            .map(String::from),
        ),
    })?;
    e.process.vdd.get_or_insert(Q::new(p.vdd));
    for (cfg, tech) in [
        (&mut e.process.nmos, &p.nmos),
        (&mut e.process.pmos, &p.pmos),
    ] {
        cfg.vt0.get_or_insert(Q::new(tech.vt0));
        cfg.n.get_or_insert(tech.n);
        cfg.mu_cox.get_or_insert(Q::new(tech.mu_cox));
        cfg.a_vt.get_or_insert(Q::new(tech.a_vt_pair));
        cfg.a_beta.get_or_insert(Q::new(tech.a_beta_pair));
        cfg.vt0_tempco.get_or_insert(Q::new(tech.vt0_tempco));
        cfg.beta_temp_exponent
            .get_or_insert(tech.beta_temp_exponent);
        cfg.kf.get_or_insert(tech.kf);
        if let crate::device::DrainCoupling::EarlyVoltagePerLength(v) = tech.drain_coupling {
            cfg.early_voltage_per_length.get_or_insert(Q::new(v));
        }
    }
    if e.weights.w_min.is_none() {
        e.weights.w_min = Some(match e.weights.element {
            ElementKind::Linear => 0.0,
            ElementKind::Subthreshold => 1.0 / 16.0,
        });
    }
    Ok(())
}

/// Physically odd but legal settings of one experiment, each naming the key: temperatures
/// outside about -60..200 degC, a supply above 5 V, a competition bias that puts the output
/// transistors deep in strong inversion (inversion coefficient above 100 with the whole bias in
/// one device; the WTA's exponential law holds in weak inversion, model notes §4.1).
/// Thresholds: common practice, no source.
pub fn warnings(e: &Experiment) -> Vec<String> {
    let mut out = Vec::new();
    let zc = crate::physics::ZERO_CELSIUS;
    let fmt_t = |t: f64| crate::units::format_si(t - zc, "degC", 4);
    for (key, t) in [
        ("conditions.temperature", e.conditions.temperature.si()),
        (
            "weights.program_temperature",
            e.weights.program_temperature.si(),
        ),
    ] {
        if key == "weights.program_temperature" && e.weights.element != ElementKind::Subthreshold {
            continue;
        }
        if !(zc - 60.0..=zc + 200.0).contains(&t) {
            out.push(format!(
                "{key} = {} ({}) is outside -60..200 degC, where silicon circuits usually work; check the unit",
                fmt_t(t),
                crate::units::format_si(t, "K", 5)
            ));
        }
    }
    if let Some(v) = e.process.vdd {
        if v.si() > 5.0 {
            out.push(format!(
                "process.vdd = {} is above 5 V, unusual for the generic processes; check the unit",
                crate::units::format_si(v.si(), "V", 4)
            ));
        }
    }
    if let Ok(p) = super::build::process(e) {
        let t = e.conditions.temperature.si();
        let ut = crate::physics::thermal_voltage(t);
        let is = |w: f64, l: f64| 2.0 * p.nmos.n * p.nmos.mu_cox * w / l * ut * ut;
        let c = &e.competition;
        let mut biases = vec![("competition.bias_current", c.bias_current.si())];
        if e.hidden.units > 0 && e.hidden.circuit != HiddenCircuitKind::ClosedForm {
            biases.push(("hidden.bias_current", e.hidden.bias_current.si()));
        }
        if c.circuit != CircuitKind::Argmax {
            for (key, i) in biases {
                let ic = i / is(c.output.w.si(), c.output.l.si());
                if ic > 100.0 {
                    out.push(format!(
                        "{key} = {} puts the output transistors deep in strong inversion (inversion coefficient {:.0} with the whole bias in one device); the competition's exponential law needs weak inversion",
                        crate::units::format_si(i, "A", 4),
                        ic
                    ));
                }
            }
        }
    }
    out
}

/// Semantic checks that serde cannot express; each names the key.
fn check(e: &Experiment, text: &str, file: &Path) -> Result<(), ConfigError> {
    let bad = |key: &str, message: String| ConfigError::Key {
        path: file.into(),
        key: key.into(),
        line: LineNo(line_of(text, key)),
        message,
        hint: Hint(None),
    };
    match (&e.dataset.name, &e.dataset.file) {
        (None, None) => {
            return Err(bad(
                "dataset",
                "give `name` (a shipped dataset: iris, wine, digits) or `file` (a CSV file)".into(),
            ))
        }
        (Some(_), Some(_)) => {
            return Err(bad(
                "dataset",
                "give either `name` or `file`, not both".into(),
            ))
        }
        (Some(n), None) if !crate::data::BUILTIN_DATASETS.contains(&n.as_str()) => {
            return Err(ConfigError::Key {
                path: file.into(),
                key: "dataset.name".into(),
                line: LineNo(line_of(text, "dataset.name")),
                message: format!(
                    "no shipped dataset `{n}`; the shipped ones are {}. For your own data use `file = \"path.csv\"`",
                    crate::data::BUILTIN_DATASETS.join(", ")
                ),
                hint: Hint(
                    tree::closest(n, crate::data::BUILTIN_DATASETS.iter().copied())
                        .map(String::from),
                ),
            })
        }
        _ => {}
    }
    let frac = |key: &str, v: f64, lo_open: bool, hi_open: bool| {
        let ok = v.is_finite()
            && if lo_open { v > 0.0 } else { v >= 0.0 }
            && if hi_open { v < 1.0 } else { v <= 1.0 };
        if ok {
            Ok(())
        } else {
            Err(bad(
                key,
                format!(
                    "{v} is out of range: expected a number in {}0, 1{}",
                    if lo_open { "(" } else { "[" },
                    if hi_open { ")" } else { "]" }
                ),
            ))
        }
    };
    frac("dataset.test_fraction", e.dataset.test_fraction, true, true)?;
    frac("target.accuracy", e.target.accuracy, false, false)?;
    frac("target.confidence", e.target.confidence, true, true)?;
    frac("target.yield", e.target.yield_target, true, true)?;
    if !(e.cost.layout_overhead.is_finite() && e.cost.layout_overhead >= 1.0) {
        return Err(bad(
            "cost.layout_overhead",
            format!(
                "{}: expected a factor of at least 1 (layout area over gate area; 2 is common practice)",
                e.cost.layout_overhead
            ),
        ));
    }
    frac(
        "competition.min_winner_share",
        e.competition.min_winner_share,
        false,
        false,
    )?;
    frac(
        "competition.max_runner_up_share",
        e.competition.max_runner_up_share,
        false,
        false,
    )?;
    frac("weights.stuck_at_min", e.weights.stuck_at_min, false, false)?;
    frac("weights.stuck_at_max", e.weights.stuck_at_max, false, false)?;
    frac("weights.range_use", e.weights.range_use, true, false)?;
    if e.population.chips == 0 {
        return Err(bad(
            "population.chips",
            "0 chips: a population needs at least 1 chip (100 to 1000 is typical)".into(),
        ));
    }
    if e.population.chips > 10_000_000 {
        return Err(bad(
            "population.chips",
            format!(
                "{} chips is beyond what hardmax runs (at most 10 000 000)",
                e.population.chips
            ),
        ));
    }
    if e.input.dac_bits > 24 {
        return Err(bad(
            "input.dac_bits",
            format!("{} bits: use 0 (ideal) to 24", e.input.dac_bits),
        ));
    }
    if e.weights.levels == 1 {
        return Err(bad(
            "weights.levels",
            "1 level cannot hold a weight: use 0 (continuous) or at least 2".into(),
        ));
    }
    if let Some(g) = e.competition.gain {
        if !(g.is_finite() && g > 0.0) {
            return Err(bad(
                "competition.gain",
                format!(
                    "{g}: the gain kappa/sigma must be a positive number (hundreds are typical)"
                ),
            ));
        }
    }
    // Weight sigmas, drift, offsets and the time since programming are the core's to check
    // (`check_with_core`); these two have no core constructor (the trainer's penalty and the
    // edge's scaling of the process's Pelgrom constants).
    for (key, v) in [
        ("training.l2", e.training.l2),
        ("process.mismatch_scale", e.process.mismatch_scale),
    ] {
        if !(v.is_finite() && v >= 0.0) {
            return Err(bad(
                key,
                format!(
                    "{}: expected a finite value >= 0",
                    crate::units::short_number(v)
                ),
            ));
        }
    }
    for (key, v) in [
        (
            "competition.node_capacitance",
            e.competition.node_capacitance.si(),
        ),
        (
            "competition.common_capacitance",
            e.competition.common_capacitance.si(),
        ),
        ("weights.device.w", e.weights.device.w.si()),
        ("weights.device.l", e.weights.device.l.si()),
        ("weights.mirror.w", e.weights.mirror.w.si()),
        ("weights.mirror.l", e.weights.mirror.l.si()),
        ("cost.dac_unit.w", e.cost.dac_unit.w.si()),
        ("cost.dac_unit.l", e.cost.dac_unit.l.si()),
        ("cost.linear_element.w", e.cost.linear_element.w.si()),
        ("cost.linear_element.l", e.cost.linear_element.l.si()),
        ("cost.read_out_time", e.cost.read_out_time.si()),
        (
            "weights.drift_reference_time",
            e.weights.drift_reference_time.si(),
        ),
    ] {
        if !(v.is_finite() && v > 0.0) {
            return Err(bad(
                key,
                format!(
                    "{}: expected a finite value > 0",
                    crate::units::short_number(v)
                ),
            ));
        }
    }
    if e.hidden.units > 4096 {
        return Err(bad(
            "hidden.units",
            format!("{} hidden lines: use 0 (none) to 4096", e.hidden.units),
        ));
    }
    if !(e.hidden.exponent.is_finite() && e.hidden.exponent > 0.0) {
        return Err(bad(
            "hidden.exponent",
            format!("{}: the normaliser exponent must be > 0", e.hidden.exponent),
        ));
    }
    // The closed-form normaliser has no core constructor that checks its bias.
    if !(e.hidden.bias_current.si().is_finite() && e.hidden.bias_current.si() > 0.0) {
        return Err(bad(
            "hidden.bias_current",
            format!(
                "{} is out of range: must be finite and > 0",
                crate::units::format_si(e.hidden.bias_current.si(), "A", 6)
            ),
        ));
    }
    if e.competition.circuit == CircuitKind::HystereticWta {
        if e.competition.feedback.is_none() {
            return Err(bad(
                "competition.circuit",
                "\"hysteretic_wta\" needs `competition.feedback`, the fraction of each cell's output current mirrored back into its input (e.g. 0.1)".into(),
            ));
        }
    } else if !e.sweep.axis.iter().any(|a| a.path == "competition.circuit") {
        // Refused unless the experiment compares circuits (a sweep over
        // `competition.circuit`): then they apply to the hysteretic points only.
        for (key, set) in [
            ("competition.feedback", e.competition.feedback.is_some()),
            ("competition.mirror", e.competition.mirror.is_some()),
        ] {
            if set {
                return Err(bad(
                    key,
                    "applies to circuit = \"hysteretic_wta\" only; remove it, set competition.circuit = \"hysteretic_wta\", or sweep competition.circuit".into(),
                ));
            }
        }
    }
    if e.hidden.circuit == HiddenCircuitKind::DiffPair && e.hidden.exponent != 1.0 {
        return Err(bad(
            "hidden.exponent",
            format!(
                "{}: a diode-fed differential pair is a linear normaliser; set exponent = 1 (or use circuit = \"current_wta\")",
                e.hidden.exponent
            ),
        ));
    }
    if e.training.max_iterations == 0 {
        return Err(bad(
            "training.max_iterations",
            "0 iterations cannot train; use e.g. 300".into(),
        ));
    }
    Ok(())
}

/// Resolve the sweep axes against the resolved tree: the path must exist and hold a number
/// or a quantity; its unit comes from the resolved value.
fn resolve_axes(e: &Experiment, resolved: &Value, file: &Path) -> Result<Vec<Axis>, ConfigError> {
    // Optional keys absent from the resolved tree are still sweepable: their type and unit come
    // from an example with every optional key present.
    let schema = Value::try_from(Experiment::schema_example()).unwrap_or(Value::Boolean(false));
    let mut leaves = tree::leaf_paths(resolved);
    leaves.extend(tree::leaf_paths(&schema));
    leaves.sort();
    leaves.dedup();
    let mut axes = Vec::new();
    for spec in &e.sweep.axis {
        let sweep_err = |message: String| ConfigError::Sweep {
            path: file.into(),
            err: SweepError::Value {
                path: spec.path.clone(),
                message,
            },
        };
        if spec.path.starts_with("sweep") {
            return Err(sweep_err("the sweep cannot sweep itself".into()));
        }
        let current = tree::get(resolved, &spec.path).or_else(|| tree::get(&schema, &spec.path));
        let Some(current) = current else {
            let hint = tree::closest(&spec.path, leaves.iter().map(|s| s.as_str()))
                .map(|s| format!("; did you mean `{s}`?"))
                .unwrap_or_default();
            return Err(sweep_err(format!(
                "no such parameter in the experiment{hint} (`hardmax resolve FILE` lists every key)"
            )));
        };
        let (unit, integer, dims): (String, bool, Vec<Dimension>) = match current {
            Value::Integer(_) => (String::new(), true, vec![]),
            Value::Float(_) => (String::new(), false, vec![]),
            Value::String(s) => match super::quantity::parse_resolved(s) {
                Some((_, d)) => (
                    d.base_unit().to_string(),
                    false,
                    Dimension::ALL
                        .iter()
                        .copied()
                        .filter(|x| x.base_unit() == d.base_unit())
                        .collect(),
                ),
                None => {
                    // A text parameter: every value must be text; the axis runs over their
                    // indices and each point sets its text (checked by the schema).
                    let texts: Option<Vec<String>> = spec
                        .values
                        .as_ref()
                        .and_then(|vs| vs.iter().map(|v| v.as_str().map(str::to_string)).collect());
                    match texts {
                        Some(t) if !t.is_empty() && spec.from.is_none() => {
                            let mut seen = std::collections::HashSet::new();
                            if let Some(d) = t.iter().find(|x| !seen.insert(x.as_str())) {
                                return Err(sweep_err(format!("the value {d:?} appears twice")));
                            }
                            axes.push(Axis {
                                path: spec.path.clone(),
                                unit: String::new(),
                                spacing: Default::default(),
                                integer: true,
                                values: (0..t.len()).map(|i| i as f64).collect(),
                                labels: Some(t),
                                boolean: false,
                            });
                            continue;
                        }
                        _ => {
                            return Err(sweep_err(format!(
                                "the parameter holds text ({s:?}), not a number: sweep it with a list of texts (`values = [\"a\", \"b\"]`); ranges and numbers are for numeric parameters only (only numeric parameters take them)"
                            )))
                        }
                    }
                }
            },
            Value::Boolean(_) => {
                // A switch (e.g. `trim.enabled`): the axis runs over the given booleans, each
                // point sets its value; labelled "false" / "true".
                let flags: Option<Vec<bool>> = spec
                    .values
                    .as_ref()
                    .and_then(|vs| vs.iter().map(Value::as_bool).collect());
                match flags {
                    Some(f) if !f.is_empty() && spec.from.is_none() => {
                        if f.len() > 2 || (f.len() == 2 && f[0] == f[1]) {
                            return Err(sweep_err(
                                "a switch takes each of false and true at most once".into(),
                            ));
                        }
                        axes.push(Axis {
                            path: spec.path.clone(),
                            unit: String::new(),
                            spacing: Default::default(),
                            integer: true,
                            values: (0..f.len()).map(|i| i as f64).collect(),
                            labels: Some(f.iter().map(|b| b.to_string()).collect()),
                            boolean: true,
                        });
                        continue;
                    }
                    _ => {
                        return Err(sweep_err(
                            "the parameter is a switch: sweep it with a list of booleans \
                             (`values = [false, true]`)"
                                .into(),
                        ))
                    }
                }
            }
            other => {
                return Err(sweep_err(format!(
                    "the parameter is a {}, not a number; only numeric parameters can be swept",
                    other.type_str()
                )))
            }
        };
        let parse = |v: &Value| -> Result<f64, String> {
            if dims.is_empty() {
                return match v {
                    Value::Integer(i) => Ok(*i as f64),
                    Value::Float(f) => Ok(*f),
                    other => Err(format!("expected a plain number, got {other}")),
                };
            }
            let mut first_err = None;
            for d in &dims {
                match quantity_from_toml(v, *d) {
                    Ok(x) => return Ok(x),
                    Err(e) => {
                        first_err.get_or_insert(e.to_string());
                    }
                }
            }
            Err(first_err.unwrap_or_default())
        };
        let axis = spec
            .resolve(&unit, integer, &parse)
            .map_err(|err| ConfigError::Sweep {
                path: file.into(),
                err,
            })?;
        axes.push(axis);
    }
    Ok(axes)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn load_text(t: &str) -> Result<Resolved, ConfigError> {
        load_str(t, Path::new("exp.toml"), &[])
    }

    #[test]
    fn minimal_file_resolves_with_defaults() {
        let r = load_text("[dataset]\nname = \"iris\"\n").unwrap();
        assert_eq!(r.base.name, "exp");
        assert_eq!(r.points.len(), 1);
        let text = r.to_toml();
        assert!(text.contains("bias_current"), "{text}");
        assert!(text.contains("a_vt"), "{text}");
        // The resolved text loads back to the same experiment.
        let again = load_text(&text).unwrap();
        assert_eq!(again.base, r.base);
    }

    #[test]
    fn unknown_key_names_path_line_and_suggestion() {
        let e = load_text("[dataset]\nname = \"iris\"\n[competition]\nbias_curent = \"1 nA\"\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("competition.bias_curent"), "{e}");
        assert!(e.contains("line 4"), "{e}");
        assert!(e.contains("did you mean `bias_current`"), "{e}");
    }

    #[test]
    fn wrong_unit_names_key() {
        let e = load_text("[dataset]\nname = \"iris\"\n[competition]\nbias_current = \"10 nV\"\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("competition.bias_current"), "{e}");
        assert!(e.contains("10 nV"), "{e}");
    }

    #[test]
    fn sweep_with_units_and_override() {
        let r = load_str(
            "[dataset]\nname = \"iris\"\n[[sweep.axis]]\npath = \"competition.bias_current\"\nfrom = \"1 nA\"\nto = \"1 uA\"\npoints = 4\nspacing = \"log\"\n",
            Path::new("e.toml"),
            &["population.chips=7".into()],
        )
        .unwrap();
        assert_eq!(r.points.len(), 4);
        assert_eq!(r.base.population.chips, 7);
        assert_eq!(r.axes[0].unit, "A");
        assert!((r.at_point[1].competition.bias_current.si() - 1e-8).abs() < 1e-20);
    }

    #[test]
    fn bad_sweeps_are_refused() {
        let unknown = load_text(
            "[dataset]\nname = \"iris\"\n[[sweep.axis]]\npath = \"competition.bias_curent\"\nvalues = [1]\n",
        )
        .unwrap_err()
        .to_string();
        assert!(
            unknown.contains("did you mean `competition.bias_current`"),
            "{unknown}"
        );
        let text = load_text(
            "[dataset]\nname = \"iris\"\n[[sweep.axis]]\npath = \"process.preset\"\nvalues = [1]\n",
        )
        .unwrap_err()
        .to_string();
        assert!(text.contains("only numeric parameters"), "{text}");
        let empty = load_text(
            "[dataset]\nname = \"iris\"\n[[sweep.axis]]\npath = \"competition.gain\"\nvalues = []\n",
        )
        .unwrap_err()
        .to_string();
        // competition.gain is absent by default, so it is unknown in the resolved tree.
        assert!(empty.contains("competition.gain"), "{empty}");
    }

    /// The core's refusals come back under the user's key (the core says `read_time`,
    /// `bias current`, `programming_error_v`; the user wrote the keys below).
    #[test]
    fn core_refusals_name_the_user_key() {
        let base = load_text("[dataset]\nname = \"iris\"\n").unwrap().base;
        let mut e = base.clone();
        e.competition.evaluation = EvaluationKind::Transient;
        e.competition.read_time = Some(Q::new(-1e-9));
        let r = super::super::build::check_with_core(&e).unwrap_err();
        assert_eq!(r.key, "competition.read_time");
        let mut e = base.clone();
        e.competition.evaluation = EvaluationKind::Transient;
        e.competition.noise = true;
        e.competition.hold_time = Some(Q::new(0.0));
        let r = super::super::build::check_with_core(&e).unwrap_err();
        assert_eq!(r.key, "competition.hold_time");
        let mut e = base.clone();
        e.competition.bias_current = Q::new(-1e-9);
        let r = super::super::build::check_with_core(&e).unwrap_err();
        assert_eq!(r.key, "competition.bias_current");
        let mut e = base.clone();
        e.weights.element = ElementKind::Subthreshold;
        // w_min 0 (the linear default) is refused first for a subthreshold element, so:
        let r = super::super::build::check_with_core(&e).unwrap_err();
        assert_eq!(r.key, "weights.w_min");
        e.weights.w_min = Some(1.0 / 16.0);
        e.weights.programming_error_voltage = Q::new(-1e-3);
        let r = super::super::build::check_with_core(&e).unwrap_err();
        assert_eq!(r.key, "weights.programming_error_voltage");
        assert!(super::super::build::check_with_core(&base).is_ok());
    }

    /// Weight sigmas, drift and the time since programming are checked once, by the core's
    /// validators; the refusal names the user's key and shows a quantity with its unit.
    #[test]
    fn weight_and_drift_refusals_come_from_the_core_with_units() {
        for (extra, key) in [
            ("[weights]\nread_noise = -0.01\n", "weights.read_noise"),
            (
                "[weights]\nprogramming_error = -0.01\n",
                "weights.programming_error",
            ),
            (
                "[weights]\ndrift_exponent = -0.1\n",
                "weights.drift_exponent",
            ),
            (
                "[weights]\ndrift_exponent_sigma = -0.1\n",
                "weights.drift_exponent_sigma",
            ),
            (
                "[weights]\noffset_mismatch = -0.1\n",
                "weights.offset_mismatch",
            ),
            ("[input]\ngain_mismatch = -0.1\n", "input.gain_mismatch"),
        ] {
            let e = load_text(&format!("[dataset]\nname = \"iris\"\n{extra}"))
                .unwrap_err()
                .to_string();
            assert!(e.contains(key), "{e}");
            assert!(e.contains(">= 0"), "{e}");
        }
        let e = load_text(
            "[dataset]\nname = \"iris\"\n[weights]\nelement = \"subthreshold\"\nw_min = 0.0625\n\
             programming_error_voltage = \"-1 mV\"\n",
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("weights.programming_error_voltage"), "{e}");
        assert!(e.contains("-1 mV"), "{e}");
        assert!(!e.contains("-0.001"), "{e}");
        let e = load_text(
            "[dataset]\nname = \"iris\"\n[conditions]\ntime_since_programming = \"-1 s\"\n",
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("conditions.time_since_programming"), "{e}");
        assert!(e.contains("-1 s"), "{e}");
    }

    /// Resolved floats print in their shortest exact form (exponent form for tiny and huge
    /// magnitudes) and stay floats that read back to the same value.
    #[test]
    fn resolved_floats_without_noise() {
        assert_eq!(tidy_float(1e-25), "1e-25");
        assert_eq!(tidy_float(0.25), "0.25");
        assert_eq!(tidy_float(2e16), "2e16");
        assert_eq!(tidy_float(1.0), "1.0");
        assert_eq!(tidy_float(300.15), "300.15");
        let t = tidy_floats(
            "a = 0.0000000000000000000000001\nb = [0.000001, 2]\nc = \"0.0000000000000000000000001\"\nd = 7\n",
        );
        assert_eq!(
            t,
            "a = 1e-25\nb = [1e-6, 2]\nc = \"0.0000000000000000000000001\"\nd = 7\n"
        );
        assert_eq!(
            tidy_floats("v = [\n    0.00001,\n    2,\n]\n"),
            "v = [\n    1e-5,\n    2,\n]\n"
        );
        let r = load_text("[dataset]\nname = \"iris\"\n").unwrap();
        let text = r.to_toml();
        assert!(text.contains("kf = 1e-25"), "{text}");
        // Reads back to the same experiment.
        let back: Value = toml::from_str(&text).unwrap();
        assert_eq!(back, r.tree);
    }

    #[test]
    fn zero_chips_and_missing_dataset() {
        let e = load_text("[dataset]\nname = \"iris\"\n[population]\nchips = 0\n")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("population.chips") && e.contains("line 4"),
            "{e}"
        );
        let e = load_text("[dataset]\nname = \"irsi\"\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("did you mean `iris`"), "{e}");
    }

    /// A yield target outside (0, 1), a layout overhead below 1 (negative included), an unknown
    /// pairing: errors naming the key (and its line).
    #[test]
    fn design_answer_keys_are_checked() {
        for (text, key) in [
            ("[target]\nyield = 1.0\n", "target.yield"),
            ("[target]\nyield = 0\n", "target.yield"),
            ("[target]\nconfidence = 1.5\n", "target.confidence"),
            ("[cost]\nlayout_overhead = -2\n", "cost.layout_overhead"),
            ("[cost]\nread_out_time = \"0 s\"\n", "cost.read_out_time"),
        ] {
            let e = load_text(&format!("[dataset]\nname = \"iris\"\n{text}"))
                .unwrap_err()
                .to_string();
            assert!(e.contains(key) && e.contains("line 4"), "{key}: {e}");
        }
        let e = load_text("[dataset]\nname = \"iris\"\n[population]\npairing = \"same\"\n")
            .unwrap_err()
            .to_string();
        assert!(e.contains("pairing"), "{e}");
        let r = load_text("[dataset]\nname = \"iris\"\n").unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(r.base.population.pairing, PairingKind::Paired);
        assert!(r.to_toml().contains("pairing = \"paired\""));
        assert!(r.to_toml().contains("yield = 0.95"));
    }

    /// Trim bits of 0 or above 16 and a negative range: refused by the core
    /// (`TrimDesign::validate`), named by the user's key and line. No `[trim]`: nothing of it
    /// in the resolved experiment (so the hash of every existing experiment is unchanged).
    #[test]
    fn trim_keys_are_checked() {
        for (text, key) in [
            (
                "[trim]
bits = 0
",
                "trim.bits",
            ),
            (
                "[trim]
bits = 17
",
                "trim.bits",
            ),
            (
                "[trim]
range = -0.5
",
                "trim.range",
            ),
        ] {
            let e = load_text(&format!(
                "[dataset]\nname = \"iris\"\n[competition]\ncircuit = \"current_wta\"\n{text}"
            ))
            .unwrap_err()
            .to_string();
            assert!(e.contains(key) && e.contains("line 6"), "{key}: {e}");
        }
        let r = load_text("[dataset]\nname = \"iris\"\n").unwrap_or_else(|e| panic!("{e}"));
        assert!(!r.to_toml().contains("trim"), "{}", r.to_toml());
        let r = load_text("[dataset]\nname = \"iris\"\n[trim]\nbits = 16\n")
            .unwrap_or_else(|e| panic!("{e}"));
        assert!(r.to_toml().contains("bits = 16"), "{}", r.to_toml());
    }
}
