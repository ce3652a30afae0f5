//! From a checked experiment (edge types, with units) to the core's design types (plain SI):
//! the process with overrides, the weight stage, the competition stage, the conditions.

use std::path::Path;

use ndarray::{Array1, Array2};

use super::config::{
    CircuitKind, CompetitionCfg, ElementKind, EncodingKind, EvaluationKind, Experiment,
    HiddenCircuitKind, SigmaKindCfg, SizeCfg,
};
use crate::data::{load_csv, CsvOptions, DataError, Dataset};
use crate::device::presets::preset;
use crate::device::DeviceError;
use crate::device::{DrainCoupling, Polarity, Process, Transistor};
use crate::pipeline::PipelineError;
use crate::pipeline::{
    prepare, ClassifierDesign, CompetitionDesign, HiddenSpec, PointSetup, Prepared,
    TransientEvaluation,
};
use crate::stages::competition::diffpair::{DiffPairDesign, DiffPairInput};
use crate::stages::competition::hysteretic::HysteresisDesign;
use crate::stages::competition::noise::{InputShotNoise, NoiseBandwidth};
use crate::stages::competition::transient::{NoiseOptions, TransientOptions};
use crate::stages::competition::wta::WtaDesign;
use crate::stages::competition::CurrentSource;
use crate::stages::competition::DecisionRule;
use crate::stages::weights::verify::{VerifyError, MAX_VERIFY_CYCLES};
use crate::stages::weights::{
    Conditions, DriftSpec, ElementDesign, ErrorSpec, HiddenNonlinearity, InputDesign,
    LinearElement, OffsetSetting, SigmaKind, SignedEncoding, SubthresholdElement,
    WeightStageDesign,
};
use crate::training::LogisticOptions;

/// Errors while turning a checked experiment into core designs; each names the section.
#[derive(Debug, thiserror::Error)]
pub enum BuildError {
    #[error("dataset: {0}")]
    Dataset(#[from] DataError),
    #[error("dataset: give `name` (iris, wine, digits) or `file` (a CSV file)")]
    NoDataset,
    #[error("process: {0}")]
    Process(#[from] DeviceError),
    #[error(transparent)]
    Pipeline(#[from] PipelineError),
    #[error("hidden.weights_file `{path}`: {message}")]
    HiddenWeights { path: String, message: String },
    /// A core refusal of the point that one experiment key decides.
    #[error("`{key}`: {source}")]
    Keyed {
        key: &'static str,
        source: Box<PipelineError>,
    },
}

/// Read a hidden layer: CSV without header, one row per unit, the weights then the bias.
pub fn load_hidden_weights(path: &Path) -> Result<(Array2<f64>, Array1<f64>), BuildError> {
    let bad = |message: String| BuildError::HiddenWeights {
        path: path.display().to_string(),
        message,
    };
    let text = std::fs::read_to_string(path).map_err(|e| {
        bad(format!(
            "cannot read it ({e}); check the path (relative to the experiment file)"
        ))
    })?;
    let mut rows: Vec<Vec<f64>> = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        let row = line
            .split(',')
            .enumerate()
            .map(|(j, cell)| {
                let v: f64 = cell.trim().parse().map_err(|_| {
                    bad(format!(
                        "line {}, column {}: `{}` is not a number",
                        i + 1,
                        j + 1,
                        cell.trim()
                    ))
                })?;
                if v.is_finite() {
                    Ok(v)
                } else {
                    Err(bad(format!(
                        "line {}, column {}: {v} is not finite",
                        i + 1,
                        j + 1
                    )))
                }
            })
            .collect::<Result<Vec<f64>, _>>()?;
        if let Some(first) = rows.first() {
            if first.len() != row.len() {
                return Err(bad(format!(
                    "line {} has {} values but the first row has {}; every row needs the same count",
                    i + 1,
                    row.len(),
                    first.len()
                )));
            }
        }
        rows.push(row);
    }
    let cols = rows.first().map_or(0, Vec::len);
    if rows.is_empty() || cols < 2 {
        return Err(bad(
            "no rows, or fewer than two values per row (weights and a bias)".into(),
        ));
    }
    let w = Array2::from_shape_fn((rows.len(), cols - 1), |(r, c)| rows[r][c]);
    let b = Array1::from_iter(rows.iter().map(|r| r[cols - 1]));
    Ok((w, b))
}

/// Load the dataset of an experiment (relative CSV paths are relative to the experiment file).
pub fn load_dataset(e: &Experiment, base_dir: &Path) -> Result<Dataset, BuildError> {
    match (&e.dataset.name, &e.dataset.file) {
        (Some(name), _) => Ok(Dataset::builtin(name)?),
        (None, Some(file)) => {
            let path = if file.is_absolute() {
                file.clone()
            } else {
                base_dir.join(file)
            };
            let opts = CsvOptions {
                label_column: e.dataset.label_column.clone(),
                ignore_columns: e.dataset.ignore_columns.clone(),
            };
            Ok(load_csv(&path, &opts)?)
        }
        (None, None) => Err(BuildError::NoDataset),
    }
}

/// Load, split and train: the circuit-independent part of a point (with hardware-aware
/// training, the read-out retrained through the point's design).
pub fn prepare_data(e: &Experiment, base_dir: &Path) -> Result<Prepared, BuildError> {
    prepare_data_trained(e, base_dir).map(|(p, _)| p)
}

/// [`prepare_data`], with the hardware-aware trainer's result when it made the weights.
pub fn prepare_data_trained(
    e: &Experiment,
    base_dir: &Path,
) -> Result<(Prepared, Option<crate::training::HardwareTrained>), BuildError> {
    let ds = load_dataset(e, base_dir)?;
    let trainer = LogisticOptions {
        l2: e.training.l2,
        max_iterations: e.training.max_iterations,
        standardize: e.training.standardize,
        ..LogisticOptions::default()
    };
    let given = match (&e.hidden.weights_file, e.hidden.units > 0) {
        (Some(f), true) => Some(load_hidden_weights(&if f.is_absolute() {
            f.clone()
        } else {
            base_dir.join(f)
        })?),
        _ => None,
    };
    let hidden = (e.hidden.units > 0).then(|| HiddenSpec {
        given,
        units: e.hidden.units as usize,
        nonlinearity: HiddenNonlinearity::PowerLawNormaliser {
            exponent: e.hidden.exponent,
            bias_current_a: e.hidden.bias_current.si(),
        },
        seed: e.hidden.seed,
        stage: weight_stage(e),
        readout: LogisticOptions {
            range_floor: Some(0.05),
            ..trainer.clone()
        },
    });
    if e.training.is_hardware_aware() {
        return prepare_hardware_aware(e, &ds, &trainer, hidden.as_ref())
            .map(|(p, t)| (p, Some(t)));
    }
    prepare(
        &ds,
        e.dataset.test_fraction,
        e.dataset.split_seed,
        e.dataset.allow_untested_classes,
        &trainer,
        hidden.as_ref(),
    )
    .map(|p| (p, None))
    .map_err(BuildError::from)
}

/// The hardware-aware trainer's settings of an experiment (`[training.hardware]`).
pub fn hardware_training(e: &Experiment) -> crate::pipeline::hwtrain::HardwareTraining {
    let h = e.training.hardware.clone().unwrap_or_default();
    crate::pipeline::hwtrain::HardwareTraining {
        options: crate::training::HardwareAwareOptions {
            epochs: h.epochs,
            learning_rate: h.learning_rate,
            batch_size: usize::try_from(h.batch_size).unwrap_or(usize::MAX),
            seed: h.seed,
            l2: e.training.l2,
            ..Default::default()
        },
        weight_mismatch: h.weight_mismatch,
        programming_error: h.programming_error,
        competition_offset: h.competition_offset,
        quantise: h.quantise,
        rounding: match h.rounding {
            crate::experiment::config::RoundingCfg::Nearest => crate::training::Rounding::Nearest,
            crate::experiment::config::RoundingCfg::Stochastic => {
                crate::training::Rounding::Stochastic
            }
        },
        train_hidden: h.train_hidden,
    }
}

/// The hardware-aware trainer for an experiment point and the number of classes.
fn hardware_trainer(
    e: &Experiment,
    n_classes: usize,
) -> Result<crate::training::HardwareAwareTrainer, BuildError> {
    let d = design(e, n_classes)?;
    crate::pipeline::hwtrain::trainer_for(
        &d.weights,
        &d.competition,
        &d.process,
        d.conditions.temperature_k,
        &hardware_training(e),
    )
    .map_err(|err| hardware_keyed(err, "training.trainer"))
}

/// A hardware-aware training refusal keyed by the option it names (`fallback` otherwise).
fn hardware_keyed(err: PipelineError, fallback: &'static str) -> BuildError {
    let key = match &err {
        PipelineError::Training(crate::training::TrainingError::InvalidOption { key, .. }) => {
            match *key {
                "epochs" => "training.hardware.epochs",
                "learning_rate" => "training.hardware.learning_rate",
                "batch_size" => "training.hardware.batch_size",
                "weight_mismatch" => "training.hardware.weight_mismatch",
                "programming_error" => "training.hardware.programming_error",
                "competition_offset" => "training.hardware.competition_offset",
                "l2" => "training.l2",
                "range_use" => "weights.range_use",
                "hidden.exponent" => "hidden.exponent",
                "levels" => "weights.levels",
                _ => fallback,
            }
        }
        _ => fallback,
    };
    BuildError::Keyed {
        key,
        source: Box::new(err),
    }
}

/// Float training (the baseline), then the read-out retrained through this point's design
/// (after the fixed hidden stage, when there is one). Returns the prepared classifier and the
/// hardware-aware trainer's result.
pub fn prepare_hardware_aware(
    e: &Experiment,
    ds: &crate::data::Dataset,
    float: &LogisticOptions,
    hidden: Option<&HiddenSpec>,
) -> Result<(Prepared, crate::training::HardwareTrained), BuildError> {
    let trainer = hardware_trainer(e, ds.n_classes())?;
    let hw = hardware_training(e);
    let result = match (hw.train_hidden, hidden) {
        (false, _) => crate::pipeline::hwtrain::prepare_hardware_aware(
            ds,
            e.dataset.test_fraction,
            e.dataset.split_seed,
            e.dataset.allow_untested_classes,
            float,
            &trainer,
            hidden,
        ),
        (true, None) => Err(PipelineError::Unsupported {
            what: "training.hardware.train_hidden = true needs a hidden stage (hidden.units > \
                   0): set it to false, or add a hidden stage",
        }),
        (true, Some(spec)) => {
            let d = design(e, ds.n_classes())?;
            let hs = crate::pipeline::hwtrain::hidden_model_for(
                spec,
                &d.competition,
                &d.process,
                d.conditions.temperature_k,
                &hw,
            )
            .map_err(|err| hardware_keyed(err, "training.hardware.train_hidden"))?;
            crate::pipeline::hwtrain::prepare_hardware_aware_joint(
                ds,
                e.dataset.test_fraction,
                e.dataset.split_seed,
                e.dataset.allow_untested_classes,
                float,
                &trainer,
                hidden,
                &hs,
            )
        }
    };
    result.map_err(|err| match err {
        err @ PipelineError::Training(_) => hardware_keyed(err, "training.hardware"),
        err @ PipelineError::Unsupported { .. } if hw.train_hidden => {
            hardware_keyed(err, "training.hardware.train_hidden")
        }
        err @ PipelineError::Unsupported { .. } => hardware_keyed(err, "training.trainer"),
        other => other.into(),
    })
}

fn transistor(s: &SizeCfg) -> Transistor {
    Transistor {
        polarity: Polarity::Nmos,
        w: s.w.si(),
        l: s.l.si(),
    }
}

/// The process of an experiment: the preset with every override applied.
pub fn process(e: &Experiment) -> Result<Process, BuildError> {
    let mut p = preset(&e.process.preset)?;
    if let Some(v) = e.process.vdd {
        p.vdd = v.si();
    }
    for (cfg, tech) in [
        (&e.process.nmos, &mut p.nmos),
        (&e.process.pmos, &mut p.pmos),
    ] {
        if let Some(v) = cfg.vt0 {
            tech.vt0 = v.si();
        }
        if let Some(v) = cfg.n {
            tech.n = v;
        }
        if let Some(v) = cfg.mu_cox {
            tech.mu_cox = v.si();
        }
        if let Some(v) = cfg.a_vt {
            tech.a_vt_pair = v.si();
        }
        if let Some(v) = cfg.a_beta {
            tech.a_beta_pair = v.si();
        }
        if let Some(v) = cfg.vt0_tempco {
            tech.vt0_tempco = v.si();
        }
        if let Some(v) = cfg.beta_temp_exponent {
            tech.beta_temp_exponent = v;
        }
        if let Some(v) = cfg.early_voltage_per_length {
            tech.drain_coupling = DrainCoupling::EarlyVoltagePerLength(v.si());
        }
        if let Some(v) = cfg.kf {
            tech.kf = v;
        }
        tech.a_vt_pair *= e.process.mismatch_scale;
        tech.a_beta_pair *= e.process.mismatch_scale;
    }
    p.validate()?;
    Ok(p)
}

fn sigma(kind: SigmaKindCfg, sigma: f64) -> ErrorSpec {
    ErrorSpec {
        sigma,
        kind: match kind {
            SigmaKindCfg::Relative => SigmaKind::Relative,
            SigmaKindCfg::Absolute => SigmaKind::Absolute,
        },
    }
}

/// The weight stage of an experiment.
pub fn weight_stage(e: &Experiment) -> WeightStageDesign {
    let w = &e.weights;
    let levels = (w.levels >= 2).then_some(w.levels);
    let w_min = w.w_min.unwrap_or(0.0);
    let element = match w.element {
        ElementKind::Linear => ElementDesign::Linear(LinearElement {
            w_min,
            w_max: w.w_max,
            levels,
            programming_error: sigma(w.programming_error_kind, w.programming_error),
            read_noise: sigma(w.read_noise_kind, w.read_noise),
            drift: DriftSpec {
                nu: w.drift_exponent,
                nu_sigma: w.drift_exponent_sigma,
                t0_s: w.drift_reference_time.si(),
            },
            stuck_at_min_fraction: w.stuck_at_min,
            stuck_at_max_fraction: w.stuck_at_max,
        }),
        ElementKind::Subthreshold => ElementDesign::Subthreshold(SubthresholdElement {
            w_min,
            w_max: w.w_max,
            levels,
            programming_error_v: w.programming_error_voltage.si(),
            device: transistor(&w.device),
            program_temperature_k: w.program_temperature.si(),
            verify_compensates_mismatch: w.verify,
            read_noise_rel: w.read_noise,
        }),
    };
    WeightStageDesign {
        input: InputDesign {
            dac_bits: (e.input.dac_bits > 0).then_some(e.input.dac_bits),
            full_scale_current_a: e.input.full_scale_current.si(),
            gain_sigma_rel: e.input.gain_mismatch,
        },
        element,
        encoding: match w.encoding {
            EncodingKind::Shifted => SignedEncoding::Shifted,
            EncodingKind::Differential => SignedEncoding::Differential {
                mirror: transistor(&w.mirror),
            },
        },
        offset: match w.offset_current {
            Some(i) => OffsetSetting::Fixed { current_a: i.si() },
            None => OffsetSetting::Auto {
                margin: w.offset_margin,
            },
        },
        offset_sigma_rel: w.offset_mismatch,
        range_use: w.range_use,
    }
}

/// The drain coupling that gives a competition gain `g` (one conversion, in the core). For the
/// differential pair the same key sets the same drain coupling of its transistors (its
/// competition gain is set by the input conversion instead: a diode gives a plain normaliser, a
/// resistor a softmax).
pub use crate::stages::competition::analysis::drain_coupling_for_gain;

/// A competition circuit of `n` lines with the `[competition]` sizes, capacitances and output
/// voltage, the given bias (tail) current and, if given, gain.
fn circuit(
    kind: CircuitKind,
    n: usize,
    process: &Process,
    c: &CompetitionCfg,
    bias: f64,
    gain: Option<f64>,
) -> CompetitionDesign {
    match kind {
        CircuitKind::Argmax => CompetitionDesign::Argmax,
        CircuitKind::DiffPair => {
            let input = match c.input_resistance {
                Some(r) => DiffPairInput::Resistor {
                    resistance: r.si(),
                    reference: c.resistor_reference.si(),
                },
                None => DiffPairInput::Diode {
                    device: transistor(&c.sink),
                },
            };
            let mut w = DiffPairDesign::new(
                n,
                process.clone(),
                transistor(&c.output),
                CurrentSource::Ideal { current: bias },
                input,
            );
            if let Some(v) = c.output_voltage {
                w.output_voltage = v.si();
            }
            w.drain_coupling = gain.map(drain_coupling_for_gain);
            w.input_capacitance = c.node_capacitance.si();
            w.source_capacitance = c.common_capacitance.si();
            CompetitionDesign::DiffPair(Box::new(w))
        }
        CircuitKind::HystereticWta => {
            // The current-mode WTA of the same keys, with the feedback mirror added.
            match circuit(CircuitKind::CurrentWta, n, process, c, bias, gain) {
                CompetitionDesign::CurrentWta(w) => {
                    let mirror = c.mirror.unwrap_or(SizeCfg::um(2.0, 2.0));
                    CompetitionDesign::Hysteretic(Box::new(HysteresisDesign {
                        wta: *w,
                        feedback: c.feedback.unwrap_or(0.0),
                        mirror: Transistor {
                            polarity: Polarity::Pmos,
                            w: mirror.w.si(),
                            l: mirror.l.si(),
                        },
                    }))
                }
                other => other,
            }
        }
        CircuitKind::KWinners | CircuitKind::Cascade | CircuitKind::RepeatedMax => {
            let CompetitionDesign::CurrentWta(w) =
                circuit(CircuitKind::CurrentWta, n, process, c, bias, gain)
            else {
                unreachable!("a current_wta design is a CurrentWta")
            };
            let k = c.k.unwrap_or(0) as usize;
            match kind {
                CircuitKind::KWinners => {
                    let unit = c.unit_current.map_or(bias, |u| u.si());
                    let mut limiter = transistor(&c.limiter.unwrap_or(c.output));
                    limiter.polarity = crate::device::Polarity::Pmos;
                    CompetitionDesign::KWinners(Box::new(
                        crate::stages::competition::kwta::KWinnersDesign::new(*w, k, unit, limiter),
                    ))
                }
                CircuitKind::Cascade => {
                    let mut d = crate::stages::competition::cascade::CascadeDesign::new(
                        n,
                        c.fan_in.unwrap_or(0) as usize,
                        *w,
                        transistor(&c.copy.unwrap_or(c.sink)),
                    );
                    if let Some(v) = c.copy_drain_voltage {
                        d.copy_drain_voltage = v.si();
                    }
                    CompetitionDesign::Cascade(Box::new(d))
                }
                _ => CompetitionDesign::Ranking(Box::new(
                    crate::stages::competition::cascade::RankingDesign {
                        wta: *w,
                        k,
                        // Set from `cost.read_out_time` by `design`.
                        step_time: 1e-6,
                    },
                )),
            }
        }
        CircuitKind::CurrentWta => {
            let mut w = WtaDesign::new(
                n,
                process.clone(),
                transistor(&c.sink),
                transistor(&c.output),
                CurrentSource::Ideal { current: bias },
            );
            if let Some(v) = c.output_voltage {
                w.output_voltage = v.si();
            }
            w.drain_coupling = gain.map(drain_coupling_for_gain);
            w.input_capacitance = c.node_capacitance.si();
            w.common_capacitance = c.common_capacitance.si();
            CompetitionDesign::CurrentWta(Box::new(w))
        }
    }
}

/// The full design of one point.
pub fn design(e: &Experiment, n_classes: usize) -> Result<ClassifierDesign, BuildError> {
    let process = process(e)?;
    let c = &e.competition;
    let mut competition = circuit(
        c.circuit,
        n_classes,
        &process,
        c,
        c.bias_current.si(),
        c.gain,
    );
    // Ranking at DC: each step is counted as one read-out time (the stated per-step model).
    if let CompetitionDesign::Ranking(r) = &mut competition {
        r.step_time = e.cost.read_out_time.si();
    }
    let hidden_circuit = match e.hidden.circuit {
        _ if e.hidden.units == 0 => None,
        HiddenCircuitKind::ClosedForm => None,
        HiddenCircuitKind::CurrentWta => Some(circuit(
            CircuitKind::CurrentWta,
            e.hidden.units as usize,
            &process,
            c,
            e.hidden.bias_current.si(),
            Some(e.hidden.exponent),
        )),
        HiddenCircuitKind::DiffPair => Some(circuit(
            CircuitKind::DiffPair,
            e.hidden.units as usize,
            &process,
            c,
            e.hidden.bias_current.si(),
            None,
        )),
    };
    let input_noise = c.noise.then(|| match c.noise_bandwidth {
        Some(b) => InputShotNoise {
            bandwidth: NoiseBandwidth::Fixed(b.si()),
            temperature: e.conditions.temperature.si(),
        },
        None => competition.static_noise(
            &process,
            c.node_capacitance.si(),
            e.conditions.temperature.si(),
        ),
    });
    let transient = (c.evaluation == EvaluationKind::Transient).then(|| TransientEvaluation {
        options: TransientOptions {
            rule: DecisionRule {
                min_winner_share: c.min_winner_share,
                max_runner_up_share: c.max_runner_up_share,
            },
            read_time: c.read_time.map(|t| t.si()),
            hold_time: c.hold_time.map(|t| t.si()),
            ..TransientOptions::default()
        },
        noise: c.noise.then_some(NoiseOptions {
            input_shot: true,
            device_shot: true,
            ..NoiseOptions::default()
        }),
    });
    Ok(ClassifierDesign {
        process,
        transient,
        hidden_circuit,
        weights: weight_stage(e),
        competition,
        decision: DecisionRule {
            min_winner_share: c.min_winner_share,
            max_runner_up_share: c.max_runner_up_share,
        },
        input_noise,
        conditions: Conditions {
            temperature_k: e.conditions.temperature.si(),
            time_since_programming_s: e.conditions.time_since_programming.si(),
        },
    })
}

/// A core constructor's refusal, mapped to the experiment key that set the value.
#[derive(Clone, Debug, PartialEq)]
pub struct CoreRefusal {
    /// The user's key (`competition.read_time`), or a section when no single key applies.
    pub key: String,
    /// The value refused (SI base units), when the core names one.
    pub value: Option<f64>,
    /// What is wrong, in the core's words about the quantity, without the core's own names.
    pub message: String,
}

/// The experiment key of a core competition-stage parameter (`prefix` = `competition` or
/// `hidden`).
fn competition_key(prefix: &str, parameter: &str) -> String {
    let k = match parameter {
        "bias current" | "tail current" => "bias_current",
        "input_capacitance" | "noise.capacitance" => "node_capacitance",
        "common_capacitance" | "source_capacitance" => "common_capacitance",
        "drain_coupling" => "gain",
        "noise.bandwidth" => "noise_bandwidth",
        "pair.w" => "output.w",
        "pair.l" => "output.l",
        "input.device.w" => "sink.w",
        "input.device.l" => "sink.l",
        "input.resistance" => "input_resistance",
        "rule.min_winner_share" => "min_winner_share",
        "rule.max_runner_up_share" => "max_runner_up_share",
        other => other,
    };
    match (prefix, k) {
        // The hidden normaliser takes its sizes and capacitances from [competition].
        ("hidden", "bias_current") => "hidden.bias_current".into(),
        ("hidden", "gain") => "hidden.exponent".into(),
        ("hidden", _) => format!("competition.{k}"),
        (p, k) => format!("{p}.{k}"),
    }
}

fn refusal(key: String, value: f64, reason: &str) -> CoreRefusal {
    CoreRefusal {
        key,
        value: Some(value),
        message: format!("out of range: {reason}"),
    }
}

fn competition_refusal(
    prefix: &str,
    e: crate::stages::competition::CompetitionError,
) -> CoreRefusal {
    use crate::stages::competition::CompetitionError as C;
    match e {
        C::InvalidParameter {
            parameter,
            value,
            reason,
            ..
        } => refusal(competition_key(prefix, parameter), value, reason),
        other => CoreRefusal {
            key: prefix.into(),
            value: None,
            message: other.to_string(),
        },
    }
}

/// Check an experiment with the core's own constructors and validators (the one place where
/// ranges are defined): the process, the weight stage, the conditions, the competition stage,
/// the hidden normaliser circuit, the noise and the transient options. A refusal names the
/// experiment key that set the value.
pub fn check_with_core(e: &Experiment) -> Result<(), CoreRefusal> {
    use crate::stages::weights::WeightStageError as W;
    let p = process(e).map_err(|err| match err {
        BuildError::Process(DeviceError::OutOfRange {
            parameter,
            value,
            accepted,
        }) => {
            let key = match parameter.split_once('.') {
                Some((dev @ ("nmos" | "pmos"), rest)) => format!(
                    "process.{dev}.{}",
                    match rest {
                        "a_vt_pair" => "a_vt",
                        "a_beta_pair" => "a_beta",
                        "drain_coupling" => "early_voltage_per_length",
                        r => r,
                    }
                ),
                _ => parameter.clone(),
            };
            refusal(key, value, accepted)
        }
        other => CoreRefusal {
            key: "process".into(),
            value: None,
            message: other.to_string(),
        },
    })?;
    // The weight stage's core names, by suffix, to the user's keys; an unknown name maps to the
    // section rather than to a guessed key.
    let weight_key = |name: &str| -> String {
        const MAP: [(&str, &str); 20] = [
            ("full_scale_current_a", "input.full_scale_current"),
            ("gain_sigma_rel", "input.gain_mismatch"),
            ("dac_bits", "input.dac_bits"),
            ("read_noise.sigma", "weights.read_noise"),
            ("read_noise_rel", "weights.read_noise"),
            ("programming_error.sigma", "weights.programming_error"),
            ("programming_error_v", "weights.programming_error_voltage"),
            ("drift.nu_sigma", "weights.drift_exponent_sigma"),
            ("drift.nu", "weights.drift_exponent"),
            ("drift.t0_s", "weights.drift_reference_time"),
            ("offset.auto.margin", "weights.offset_margin"),
            ("offset.fixed.current_a", "weights.offset_current"),
            ("offset_sigma_rel", "weights.offset_mismatch"),
            ("stuck_at_min_fraction", "weights.stuck_at_min"),
            ("stuck_at_max_fraction", "weights.stuck_at_max"),
            ("program_temperature_k", "weights.program_temperature"),
            ("w_min", "weights.w_min"),
            ("w_max", "weights.w_max"),
            ("levels", "weights.levels"),
            ("range_use", "weights.range_use"),
        ];
        if let Some((_, key)) = MAP.iter().find(|(suffix, _)| name.ends_with(suffix)) {
            return (*key).into();
        }
        for part in ["device.w", "device.l", "mirror.w", "mirror.l"] {
            if name.ends_with(part) {
                return format!("weights.{part}");
            }
        }
        "weights".into()
    };
    weight_stage(e).validate().map_err(|err| match err {
        W::InvalidParameter {
            name,
            value,
            accepted,
        } => match value.parse::<f64>() {
            // A plain number: the config layer shows it with the key's unit.
            Ok(v) => refusal(weight_key(&name), v, accepted),
            // Already a quantity with its unit ("-1 mV").
            Err(_) => CoreRefusal {
                key: weight_key(&name),
                value: None,
                message: format!("{value} is out of range: {accepted}"),
            },
        },
        other => CoreRefusal {
            key: "weights".into(),
            value: None,
            message: other.to_string(),
        },
    })?;
    // Checked with the fewest classes the design allows (k winners need k + 1 lines); the
    // dataset's class count is checked against k when a point is set up.
    let lines = 2.max(e.competition.k.unwrap_or(0) as usize + 1);
    let d = design(e, lines).map_err(|err| CoreRefusal {
        key: "competition".into(),
        value: None,
        message: err.to_string(),
    })?;
    d.conditions.validate().map_err(|err| match err {
        W::InvalidCondition {
            name,
            value,
            accepted,
        } => refusal(
            match name {
                "temperature_k" => "conditions.temperature".into(),
                _ => "conditions.time_since_programming".into(),
            },
            value,
            accepted,
        ),
        other => CoreRefusal {
            key: "conditions".into(),
            value: None,
            message: other.to_string(),
        },
    })?;
    let stage_check = |prefix: &str, c: &CompetitionDesign| -> Result<(), CoreRefusal> {
        match c {
            CompetitionDesign::CurrentWta(w) => w.validate(),
            CompetitionDesign::DiffPair(w) => w.validate(),
            CompetitionDesign::Hysteretic(w) => w.validate(),
            CompetitionDesign::Argmax => Ok(()),
            CompetitionDesign::KWinners(w) => w.validate(),
            CompetitionDesign::Cascade(w) => w.validate(),
            CompetitionDesign::Ranking(w) => w.validate(),
        }
        .map_err(|err| competition_refusal(prefix, err))
    };
    stage_check("competition", &d.competition)?;
    if e.training.is_hardware_aware() {
        hardware_trainer(e, 2).map_err(|err| match err {
            BuildError::Keyed { key, source } => {
                CoreRefusal {
                    key: key.into(),
                    value: None,
                    message: match *source {
                        PipelineError::Training(
                            crate::training::TrainingError::InvalidOption { value, hint, .. },
                        ) => format!("{value} is out of range: {hint}"),
                        other => other.to_string(),
                    },
                }
            }
            other => CoreRefusal {
                key: "training".into(),
                value: None,
                message: other.to_string(),
            },
        })?;
    }
    if let Some(h) = &d.hidden_circuit {
        stage_check("hidden", h)?;
    }
    if let Some(n) = &d.input_noise {
        n.validate()
            .map_err(|err| competition_refusal("competition", err))?;
    }
    if let Some(t) = &d.transient {
        t.options
            .validate(t.noise.as_ref())
            .map_err(|err| match err {
                crate::stages::competition::transient::TransientError::InvalidOption {
                    option,
                    value,
                    reason,
                } => refusal(competition_key("competition", option), value, reason),
                other => CoreRefusal {
                    key: "competition".into(),
                    value: None,
                    message: other.to_string(),
                },
            })?;
    }
    if let Some(t) = trim_design(e) {
        t.validate().map_err(|err| match err {
            crate::pipeline::trim::TrimError::Bits { bits } => refusal(
                trim_key(&err).into(),
                bits as f64,
                "a trim DAC has 1 to 16 bits",
            ),
            crate::pipeline::trim::TrimError::Range { range } => refusal(
                trim_key(&err).into(),
                range,
                "the gain span lies in (0, 2): gains from 1 - range/2 to 1 + range/2",
            ),
            crate::pipeline::trim::TrimError::AVt { a_vt } => refusal(
                trim_key(&err).into(),
                a_vt,
                "the DAC units' A_VT is 0 (off) or positive, e.g. \"5 mV um\"",
            ),
            _ => CoreRefusal {
                key: trim_key(&err).into(),
                value: None,
                message: err.to_string(),
            },
        })?;
    }
    if let Some(v) = program_verify(e) {
        v.validate()
            .and_then(|()| v.check_element(&e_element(e)))
            .map_err(|err| {
                let key = verify_key(&err);
                match err {
                    VerifyError::Tolerance { value } => refusal(
                        key.into(),
                        value,
                        "a fraction of the element's range above 0",
                    ),
                    VerifyError::MaxCycles { value } => refusal(
                        key.into(),
                        f64::from(value),
                        &format!("a whole number of writes from 1 to {MAX_VERIFY_CYCLES}"),
                    ),
                    VerifyError::ReadNoise { value } => {
                        refusal(key.into(), value, "a fraction of the element's range, >= 0")
                    }
                    _ => CoreRefusal {
                        key: key.into(),
                        value: None,
                        message: err.to_string(),
                    },
                }
            })?;
    }
    let _ = p;
    Ok(())
}

/// The element design of an experiment's weight stage (for the program-and-verify check).
fn e_element(e: &Experiment) -> crate::stages::weights::ElementDesign {
    weight_stage(e).element
}

/// The program-and-verify settings of an experiment (`[programming]` present with
/// `verify = true`).
pub fn program_verify(e: &Experiment) -> Option<crate::stages::weights::ProgramVerify> {
    e.programming
        .as_ref()
        .filter(|p| p.verify)
        .map(|p| crate::stages::weights::ProgramVerify {
            tolerance: p.tolerance,
            max_cycles: p.max_cycles,
            read_noise: p.read_noise,
            cycle_time_s: p.cycle_time.si(),
        })
}

/// The user's key of a program-and-verify refusal.
fn verify_key(e: &VerifyError) -> &'static str {
    match e {
        VerifyError::Tolerance { .. } => "programming.tolerance",
        VerifyError::MaxCycles { .. } => "programming.max_cycles",
        VerifyError::ReadNoise { .. } => "programming.read_noise",
        VerifyError::CycleTime { .. } => "programming.cycle_time",
        VerifyError::Element => "weights.element",
    }
}

/// Build a point's setup (weights mapped) from its experiment and prepared classifier.
pub fn build_point(e: &Experiment, prep: &Prepared) -> Result<PointSetup, BuildError> {
    let d = design(e, prep.class_names.len())?;
    let s = PointSetup::new(d, prep).map_err(|err| match err {
        err @ PipelineError::HiddenReadoutLevels { .. } => BuildError::Keyed {
            key: "weights.levels",
            source: Box::new(err),
        },
        err @ PipelineError::HiddenWtaOutOfSaturation { .. } => BuildError::Keyed {
            key: "hidden.exponent",
            source: Box::new(err),
        },
        other => other.into(),
    })?;
    let s = match program_verify(e) {
        Some(v) => s.with_program_verify(v).map_err(|err| match &err {
            PipelineError::Verify(v) => BuildError::Keyed {
                key: verify_key(v),
                source: Box::new(err),
            },
            _ => BuildError::from(err),
        })?,
        None => s,
    };
    match trim_design(e) {
        Some(t) => s.with_trim(t, prep).map_err(|err| match &err {
            PipelineError::Trim(t) => BuildError::Keyed {
                key: trim_key(t),
                source: Box::new(err),
            },
            _ => err.into(),
        }),
        None => Ok(s),
    }
}

/// The trim design of an experiment (`[trim]` present and enabled).
pub fn trim_design(e: &Experiment) -> Option<crate::pipeline::trim::TrimDesign> {
    e.trim
        .as_ref()
        .filter(|t| t.enabled)
        .map(|t| crate::pipeline::trim::TrimDesign {
            bits: t.bits,
            range: t.range,
            unit_area_m2: t.unit.w.si() * t.unit.l.si(),
            mismatch: t.mismatch,
            calibration_temperature_k: t.temperature.si(),
            a_vt_pair: t.a_vt.map_or(0.0, |a| a.si()),
            lines: t.lines.unwrap_or(true),
            columns: t.columns.unwrap_or(false),
            calibration_samples: t.calibration_samples,
        })
}

/// The user's key of a trim refusal.
fn trim_key(e: &crate::pipeline::trim::TrimError) -> &'static str {
    use crate::pipeline::trim::TrimError as T;
    match e {
        T::Bits { .. } => "trim.bits",
        T::Range { .. } => "trim.range",
        T::UnitArea { .. } => "trim.unit",
        T::NoCircuit | T::Circuit { .. } => "competition.circuit",
        T::Temperature { .. } => "trim.temperature",
        T::Lines { .. } | T::Level { .. } => "trim",
        T::AVt { .. } => "trim.a_vt",
        T::Nothing => "trim.lines",
        T::CalibrationSamples { .. } | T::CalibrationEmpty => "trim.calibration_samples",
    }
}

/// The cost model settings of an experiment (`[cost]`; the weight element's own size for a
/// linear element comes from `cost.linear_element`).
pub fn cost_settings(e: &Experiment) -> crate::pipeline::cost::CostSettings {
    crate::pipeline::cost::CostSettings {
        layout_overhead: e.cost.layout_overhead,
        dac_unit: transistor(&e.cost.dac_unit),
        linear_element: transistor(&e.cost.linear_element),
        read_out_time_s: e.cost.read_out_time.si(),
    }
}
