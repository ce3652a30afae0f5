//! Hardware-aware training of a design point's read-out (DEVELOPERS.md model notes §6.2): the
//! float (linfa) model is trained first and gives the baseline; its weights start the
//! hardware-aware trainer, which trains through this design's competition stage (its gain), its
//! element (range, levels) and injected draws of its nonidealities. The result replaces the
//! prepared classifier's weights and ideal argmax; the float baseline stays the reference.

use ndarray::{s, Array1, Array2};

use super::{prepare, CompetitionDesign, PipelineError, Prepared};
use crate::data::{Dataset, MinMaxScaler};
use crate::device::mismatch::{device_sigma_beta_rel, device_sigma_vt0};
use crate::physics::thermal_voltage;
use crate::stages::weights::{ElementDesign, SigmaKind, SignedEncoding, WeightStageDesign};
use crate::training::{
    accuracy, ElementModel, HardwareAwareOptions, HardwareAwareTrainer, HardwareTrained,
    HiddenStageModel, Injection, LevelSpacing, LinearClassifier, Rounding, SoftCompetition,
    Trainer,
};

/// The hardware-aware trainer's settings: its options, and each injection strength given
/// (`Some`) or taken from the design (`None`, [`design_injection`]).
#[derive(Debug, Clone, PartialEq)]
pub struct HardwareTraining {
    /// Optimiser options (`injection` is filled from the fields below).
    pub options: HardwareAwareOptions,
    pub weight_mismatch: Option<f64>,
    pub programming_error: Option<f64>,
    pub competition_offset: Option<f64>,
    /// Round to the element's levels in the forward pass.
    pub quantise: bool,
    /// How the forward pass rounds (nearest with a straight-through gradient, or stochastic).
    pub rounding: Rounding,
    /// Train the hidden stage (when there is one) together with the read-out, through its
    /// normaliser ([`prepare_hardware_aware_joint`]); false keeps it fixed.
    pub train_hidden: bool,
}

/// The strengths of the design's own nonidealities, as the trainer injects them:
/// - element mismatch (relative): a linear element's relative programming error; a
///   subthreshold element's `sqrt((kappa sqrt(sigma_VT^2 + sigma_prog^2) / U_T)^2 +
///   sigma_beta^2)` with its device's own Pelgrom spreads (model notes §3, §5), only the
///   programming error when program-and-verify compensates the mismatch;
/// - programming error (additive, in units of the element range): a linear element's absolute
///   programming error;
/// - competition offset (relative, input-referred): a WTA sink's own threshold and current
///   factor spread, `sqrt((kappa sigma_VT / U_T)^2 + sigma_beta^2)`, plus the output
///   transistor's divided by the gain g (model notes §4.1).
pub fn design_injection(
    weights: &WeightStageDesign,
    competition: &CompetitionDesign,
    process: &crate::device::Process,
    temperature_k: f64,
) -> (f64, f64, f64) {
    let ut = thermal_voltage(temperature_k);
    let (mismatch, programming) = match &weights.element {
        ElementDesign::Linear(e) => match e.programming_error.kind {
            SigmaKind::Relative => (e.programming_error.sigma, 0.0),
            SigmaKind::Absolute => (0.0, e.programming_error.sigma / (e.w_max - e.w_min)),
        },
        ElementDesign::Subthreshold(e) => {
            let tech = process.tech(e.device.polarity);
            let kappa = 1.0 / tech.n;
            let ut0 = thermal_voltage(e.program_temperature_k);
            let (vt, beta) = if e.verify_compensates_mismatch {
                (0.0, 0.0)
            } else {
                (
                    device_sigma_vt0(tech, &e.device),
                    device_sigma_beta_rel(tech, &e.device),
                )
            };
            let v = (vt * vt + e.programming_error_v * e.programming_error_v).sqrt();
            (((kappa * v / ut0).powi(2) + beta * beta).sqrt(), 0.0)
        }
    };
    let offset = match competition {
        CompetitionDesign::CurrentWta(w) => {
            let tech = &w.process.nmos;
            let kappa = 1.0 / tech.n;
            let g = wta_gain(w);
            let one = |t: &crate::device::Transistor| {
                let vt = device_sigma_vt0(tech, t);
                let b = device_sigma_beta_rel(tech, t);
                (kappa * vt / ut).powi(2) + b * b
            };
            (one(&w.sink) + one(&w.output) / (g * g)).sqrt()
        }
        _ => 0.0,
    };
    (mismatch, programming, offset)
}

/// The current-mode WTA's weak-inversion gain g = kappa / sigma (model notes §4.1).
pub fn wta_gain(w: &crate::stages::competition::wta::WtaDesign) -> f64 {
    (1.0 / w.process.nmos.n) / w.sink_sigma()
}

/// The trainer for a design: the WTA's gain and the element as the shifted encoding places
/// targets on it. Other competition stages and the differential encoding are refused.
pub fn trainer_for(
    weights: &WeightStageDesign,
    competition: &CompetitionDesign,
    process: &crate::device::Process,
    temperature_k: f64,
    spec: &HardwareTraining,
) -> Result<HardwareAwareTrainer, PipelineError> {
    let CompetitionDesign::CurrentWta(w) = competition else {
        return Err(PipelineError::Unsupported {
            what: "hardware-aware training trains through the current-mode WTA's closed form: \
                   use competition.circuit = \"current_wta\", or training.trainer = \"float\"",
        });
    };
    if !matches!(weights.encoding, SignedEncoding::Shifted) {
        return Err(PipelineError::Unsupported {
            what: "hardware-aware training places weights with the shifted encoding: use \
                   weights.encoding = \"shifted\", or training.trainer = \"float\"",
        });
    }
    let element = match &weights.element {
        ElementDesign::Linear(e) => ElementModel {
            w_min: e.w_min,
            w_max: e.w_max,
            range_use: weights.range_use,
            levels: e.levels,
            spacing: LevelSpacing::Linear,
        },
        ElementDesign::Subthreshold(e) => ElementModel {
            w_min: e.w_min,
            w_max: e.w_max,
            range_use: weights.range_use,
            levels: e.levels,
            spacing: LevelSpacing::Logarithmic,
        },
    };
    let (m, p, o) = design_injection(weights, competition, process, temperature_k);
    let mut options = spec.options.clone();
    options.injection = Injection {
        weight_mismatch: spec.weight_mismatch.unwrap_or(m),
        programming_error: spec.programming_error.unwrap_or(p),
        competition_offset: spec.competition_offset.unwrap_or(o),
        quantise: spec.quantise,
        rounding: spec.rounding,
    };
    Ok(HardwareAwareTrainer::new(
        options,
        SoftCompetition::PowerLaw { gain: wta_gain(w) },
        Some(element),
    )?)
}

/// Retrain `prep`'s read-out through the design (see the module docs). `dataset`,
/// `test_fraction` and `split_seed` must be those `prep` was made from (the training split is
/// drawn again, identically).
///
/// With a hidden stage the hidden layer stays as it is: the pipeline's hidden layer is fixed
/// (drawn from its seed or given from a file, never trained, by either trainer), so the read-out
/// is the only trainable layer. It is retrained on the ideal hidden shares of the training split
/// (the inputs the float read-out was trained on), through this design's competition stage and
/// read-out elements; the hidden stage's own mismatch is not injected.
pub fn retrain(
    prep: &Prepared,
    dataset: &Dataset,
    test_fraction: f64,
    split_seed: u64,
    trainer: &HardwareAwareTrainer,
) -> Result<(Prepared, HardwareTrained), PipelineError> {
    let hidden = match (&prep.hidden, prep.layers.len()) {
        (None, 1) => None,
        (Some(spec), 2) => Some(spec),
        _ => {
            return Err(PipelineError::Unsupported {
                what: "hardware-aware training covers the read-out stage, after at most one \
                       hidden stage: use training.trainer = \"float\"",
            })
        }
    };
    let (train, _, _) =
        crate::data::stratified_split_allowing_untested(dataset, test_fraction, split_seed)?;
    let scaler = MinMaxScaler::fit(train.x.view())?;
    let mut u = scaler.transform(train.x.view())?;
    if let Some(spec) = hidden {
        let (w1, b1) = &prep.layers[0];
        u = super::hidden_features(spec, w1, b1, &u)?;
    }
    let (w0, b0) = prep.layers.last().expect("one or two layers");
    let f = w0.ncols();
    let mut a0 = Array2::zeros((w0.nrows(), f + 1));
    a0.slice_mut(s![.., ..f]).assign(w0);
    a0.column_mut(f).assign(b0);
    let trained = trainer.train(u.view(), &train.y, prep.class_names.len(), Some(a0.view()))?;
    let readout = (trained.weights.clone(), trained.bias.clone());
    let mut out = prep.clone();
    out.layers = match hidden {
        None => vec![readout],
        Some(_) => vec![prep.layers[0].clone(), readout],
    };
    let ideal_pred = match hidden {
        None => LinearClassifier::new(trained.weights.clone(), trained.bias.clone())?
            .predict(prep.test_u.view())?,
        Some(spec) => chain_ideal_predictions(spec, &out.layers, prep)?,
    };
    out.ideal_acc = accuracy(&ideal_pred, &out.test_y);
    out.ideal_pred = ideal_pred;
    Ok((out, trained))
}

/// Split, train the float model (the baseline; with a hidden stage, its read-out on the hidden
/// shares), then retrain the read-out through the design.
pub fn prepare_hardware_aware(
    dataset: &Dataset,
    test_fraction: f64,
    split_seed: u64,
    allow_untested_classes: bool,
    float_trainer: &dyn Trainer,
    trainer: &HardwareAwareTrainer,
    hidden: Option<&super::HiddenSpec>,
) -> Result<(Prepared, HardwareTrained), PipelineError> {
    let prep = prepare(
        dataset,
        test_fraction,
        split_seed,
        allow_untested_classes,
        float_trainer,
        hidden,
    )?;
    retrain(&prep, dataset, test_fraction, split_seed, trainer)
}

/// The hidden stage as the joint trainer sees it: its element under the shifted encoding, its
/// normaliser's exponent, and its elements' injected strengths (given in `spec`, else the
/// hidden stage design's own, [`design_injection`]).
pub fn hidden_model_for(
    hidden: &super::HiddenSpec,
    competition: &CompetitionDesign,
    process: &crate::device::Process,
    temperature_k: f64,
    spec: &HardwareTraining,
) -> Result<HiddenStageModel, PipelineError> {
    let stage = &hidden.stage;
    if !matches!(stage.encoding, SignedEncoding::Shifted) {
        return Err(PipelineError::Unsupported {
            what: "training the hidden stage places its weights with the shifted encoding: use \
                   weights.encoding = \"shifted\", or training.hardware.train_hidden = false",
        });
    }
    let element = match &stage.element {
        ElementDesign::Linear(e) => ElementModel {
            w_min: e.w_min,
            w_max: e.w_max,
            range_use: stage.range_use,
            levels: e.levels,
            spacing: LevelSpacing::Linear,
        },
        ElementDesign::Subthreshold(e) => ElementModel {
            w_min: e.w_min,
            w_max: e.w_max,
            range_use: stage.range_use,
            levels: e.levels,
            spacing: LevelSpacing::Logarithmic,
        },
    };
    let super::HiddenNonlinearity::PowerLawNormaliser { exponent, .. } = hidden.nonlinearity;
    let (m, p, _) = design_injection(stage, competition, process, temperature_k);
    let model = HiddenStageModel {
        element,
        gain: exponent,
        weight_mismatch: spec.weight_mismatch.unwrap_or(m),
        programming_error: spec.programming_error.unwrap_or(p),
    };
    model.validate()?;
    Ok(model)
}

/// Retrain `prep`'s hidden stage and read-out together through the design (model notes §6.2),
/// starting from the fixed hidden layer and the float read-out. The trained hidden layer
/// replaces the fixed one exactly as a hidden layer given from a file would (the same chain
/// mapping, range and levels); a hidden layer whose levels cannot hold its signs is refused
/// (`range_use`). `dataset`, `test_fraction` and `split_seed` must be those `prep` was made
/// from.
pub fn retrain_joint(
    prep: &Prepared,
    dataset: &Dataset,
    test_fraction: f64,
    split_seed: u64,
    trainer: &HardwareAwareTrainer,
    hs: &HiddenStageModel,
) -> Result<(Prepared, HardwareTrained), PipelineError> {
    let (Some(spec), 2) = (&prep.hidden, prep.layers.len()) else {
        return Err(PipelineError::Unsupported {
            what: "training.hardware.train_hidden = true needs a hidden stage (hidden.units > \
                   0): set it to false, or add a hidden stage",
        });
    };
    let (train, _, _) =
        crate::data::stratified_split_allowing_untested(dataset, test_fraction, split_seed)?;
    let scaler = MinMaxScaler::fit(train.x.view())?;
    let u = scaler.transform(train.x.view())?;
    let augmented = |(w, b): &(Array2<f64>, ndarray::Array1<f64>)| {
        let f = w.ncols();
        let mut a = Array2::zeros((w.nrows(), f + 1));
        a.slice_mut(s![.., ..f]).assign(w);
        a.column_mut(f).assign(b);
        a
    };
    let a1 = augmented(&prep.layers[0]);
    let a0 = augmented(&prep.layers[1]);
    let joint = trainer.train_joint(
        hs,
        u.view(),
        &train.y,
        prep.class_names.len(),
        a1.view(),
        a0.view(),
    )?;
    // The trained hidden matrix must keep its signs on the levels, as the read-out must.
    let mut t1 = Array2::zeros(a1.raw_dim());
    let f = joint.hidden_weights.ncols();
    t1.slice_mut(s![.., ..f]).assign(&joint.hidden_weights);
    t1.column_mut(f).assign(&joint.hidden_bias);
    HardwareAwareTrainer::new(
        trainer.options().clone(),
        SoftCompetition::PowerLaw { gain: hs.gain },
        Some(hs.element.clone()),
    )?
    .check_expressible(t1.view())?;
    let mut out = prep.clone();
    out.layers = vec![
        (joint.hidden_weights.clone(), joint.hidden_bias.clone()),
        (joint.readout.weights.clone(), joint.readout.bias.clone()),
    ];
    let pred = chain_ideal_predictions(spec, &out.layers, prep)?;
    out.ideal_acc = accuracy(&pred, &out.test_y);
    out.ideal_pred = pred;
    Ok((out, joint.readout))
}

/// [`prepare_hardware_aware`] with the hidden stage trained together with the read-out
/// ([`retrain_joint`]).
#[allow(clippy::too_many_arguments)]
pub fn prepare_hardware_aware_joint(
    dataset: &Dataset,
    test_fraction: f64,
    split_seed: u64,
    allow_untested_classes: bool,
    float_trainer: &dyn Trainer,
    trainer: &HardwareAwareTrainer,
    hidden: Option<&super::HiddenSpec>,
    hs: &HiddenStageModel,
) -> Result<(Prepared, HardwareTrained), PipelineError> {
    let prep = prepare(
        dataset,
        test_fraction,
        split_seed,
        allow_untested_classes,
        float_trainer,
        hidden,
    )?;
    retrain_joint(&prep, dataset, test_fraction, split_seed, trainer, hs)
}

/// Ideal argmax on the test split of the whole mapped chain (hidden stage and read-out with
/// `layers`), as `prepare_hidden` makes it.
fn chain_ideal_predictions(
    spec: &super::HiddenSpec,
    layers: &[(Array2<f64>, Array1<f64>)],
    prep: &Prepared,
) -> Result<Vec<usize>, PipelineError> {
    let chain = super::chain_design(&spec.stage, 2, Some(spec))
        .map(
            &layers
                .iter()
                .map(|(w, b)| (w.view(), b.view()))
                .collect::<Vec<_>>(),
        )?
        .ideal();
    let mut scratch = chain.scratch();
    let mut o = vec![0.0; prep.class_names.len()];
    let mut pred = Vec::with_capacity(prep.test_u.nrows());
    for row in prep.test_u.outer_iter() {
        chain.forward_noiseless(&row.to_vec(), &mut scratch, &mut o)?;
        pred.push(crate::training::argmax(&o).ok_or(PipelineError::NonFinite {
            what: "an ideal output of the hidden chain",
        })?);
    }
    Ok(pred)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stages::weights::HiddenNonlinearity;
    use crate::training::LogisticOptions;

    /// The joint trainer's hidden forward pass (its closed form of the normaliser, shares
    /// `I_k^g / sum_j I_j^g`, Lazzaro et al. 1989, model notes §4) is the pipeline's ideal
    /// hidden chain: with nothing rounded or drawn, the joint objective at the fixed hidden
    /// layer equals the read-out objective on the shares the mapped chain and
    /// `HiddenNonlinearity::normalise_in_place` give (iris, 6 hidden lines; relative 1e-9,
    /// rounding only; the input DAC is off because the trainer does not model it).
    #[test]
    fn joint_forward_is_the_pipelines_hidden_chain() {
        let ds = Dataset::builtin("iris").unwrap();
        let mut stage = WeightStageDesign::default();
        stage.input.dac_bits = None;
        let ElementDesign::Linear(lin) = &stage.element else {
            unreachable!("the default element is linear")
        };
        let element = ElementModel {
            w_min: lin.w_min,
            w_max: lin.w_max,
            range_use: stage.range_use,
            levels: None,
            spacing: LevelSpacing::Linear,
        };
        let spec = super::super::HiddenSpec {
            units: 6,
            nonlinearity: HiddenNonlinearity::PowerLawNormaliser {
                exponent: 3.0,
                bias_current_a: 1e-7,
            },
            seed: 4,
            stage,
            readout: LogisticOptions::default(),
            given: None,
        };
        let prep = prepare(&ds, 0.3, 1, false, &LogisticOptions::default(), Some(&spec)).unwrap();
        let (train, _, _) = crate::data::stratified_split_allowing_untested(&ds, 0.3, 1).unwrap();
        let u = MinMaxScaler::fit(train.x.view())
            .unwrap()
            .transform(train.x.view())
            .unwrap();
        let (w1, b1) = &prep.layers[0];
        let h = super::super::hidden_features(&spec, w1, b1, &u).unwrap();
        let aug = |(w, b): &(Array2<f64>, ndarray::Array1<f64>)| {
            let mut a = Array2::zeros((w.nrows(), w.ncols() + 1));
            a.slice_mut(s![.., ..w.ncols()]).assign(w);
            a.column_mut(w.ncols()).assign(b);
            a
        };
        let trainer = HardwareAwareTrainer::new(
            HardwareAwareOptions::default(),
            SoftCompetition::PowerLaw { gain: 5.0 },
            Some(element.clone()),
        )
        .unwrap();
        let hs = HiddenStageModel {
            element,
            gain: 3.0,
            weight_mismatch: 0.0,
            programming_error: 0.0,
        };
        let (a1, a0) = (aug(&prep.layers[0]), aug(&prep.layers[1]));
        let joint = trainer.joint_objective(&hs, a1.view(), a0.view(), u.view(), &train.y);
        let readout = trainer.objective(a0.view(), h.view(), &train.y);
        approx::assert_relative_eq!(joint, readout, max_relative = 1e-9);
    }
}
