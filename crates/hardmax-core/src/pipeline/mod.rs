//! The classifier on a chip: trained weights mapped onto a weight stage feeding a competition
//! stage; one chip's forward pass over a test split; per-chip metrics.
//!
//! Numerical core: no I/O, no printing. Every random draw comes from keyed streams (see
//! [`Dies`]): with paired dies (the default) the keys leave out the sweep point, so die `c` is
//! the same physical die at every point; with independent dies the point index is part of every
//! key.
//! - chip (static) draws: `rng::stream(seed, [CHIP, (point,) chip, block])`, one stream per
//!   block (weight stage `k`, competition stage, hidden circuit), each drawn in a fixed order
//!   and count whatever the swept values (standard normals scaled by the point's sigmas);
//! - per-decision noise: `rng::stream(seed, [SAMPLE_NOISE, (point,) chip, sample, source])`,
//!   one stream per test sample and noise source (read noise, input noise, transient noise), so
//!   a source's draws for a sample never shift when another source or another sample draws
//!   more or fewer numbers (a transient's step count depends on swept values).
//!
//! So a chip's outcome depends only on (seed, point if independent, chip), never on thread
//! scheduling.

pub mod budget;
pub mod cost;
pub mod hwtrain;
pub mod sizing;
pub mod trim;

use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};

pub use budget::ChipToggles;

use crate::data::{Dataset, MinMaxScaler};
use crate::device::mismatch::sample_mismatch;
use crate::device::Process;
use crate::rng::{domain, stream};
use crate::stages::competition::dc::{solve_batch, BatchWorkspace};
use crate::stages::competition::diffpair::{DiffPairChip, DiffPairDesign};
use crate::stages::competition::hysteretic::{HysteresisChip, HysteresisDesign};
use crate::stages::competition::noise::InputShotNoise;
use crate::stages::competition::transient::{
    simulate, simulate_from, NoiseOptions, TransientError, TransientOptions, TransientWorkspace,
};
use crate::stages::competition::wta::{WtaChip, WtaDesign};
use crate::stages::competition::{
    CompetitionChip, CompetitionError, CompetitionStage, DecisionRule, StageSolution, Workspace,
};
use crate::stages::weights::{
    random_hidden_weights, ChainChip, ChainDesign, ChainScratch, Conditions, EffectiveChain,
    HiddenNonlinearity, MappedChain, WeightStageDesign,
};
use crate::training::{accuracy, Trainer};

/// Errors while preparing a classifier or a design point; each says what to change.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    #[error(transparent)]
    Data(#[from] crate::data::DataError),
    #[error(transparent)]
    Training(#[from] crate::training::TrainingError),
    #[error("weight stage: {0}")]
    Weights(#[from] crate::stages::weights::WeightStageError),
    #[error("competition stage: {0}")]
    Competition(#[from] CompetitionError),
    #[error("trim: {0}")]
    Trim(#[from] trim::TrimError),
    #[error("program-and-verify: {0}")]
    Verify(#[from] crate::stages::weights::VerifyError),
    #[error("{what} is not a finite number; check the dataset and the weight-stage settings")]
    NonFinite { what: &'static str },
    #[error("{what}")]
    Unsupported { what: &'static str },
    #[error("{what}; give one row per hidden unit with one weight per feature and the bias last")]
    Shape { what: String },
    /// A read-out trained on soft hidden shares can need finer weights than the elements'
    /// levels hold: a perfect chip (targets rounded to the levels, nothing else) then keeps
    /// less than half of the exact weights' margin over chance. Refused, never run as a result.
    #[error("hidden stage read-out: with {levels} element levels, a perfect chip (every element target rounded to its level, no other error) classifies {acc_levels:.3} of the test split against {acc_ideal:.3} with exact weights and {chance:.3} by chance (the largest class): less than half of the exact weights' margin over chance is left, so every chip would sit near chance. The read-out trained on the hidden shares needs finer weights: {}", match needed { Some(n) => format!("use at least {n} element levels, or continuous elements (no levels)"), None => "no level count up to 65536 is enough: use continuous elements (no levels) or no hidden stage".to_string() })]
    HiddenReadoutLevels {
        levels: u32,
        acc_levels: f64,
        acc_ideal: f64,
        chance: f64,
        needed: Option<u32>,
    },
    /// The hidden normaliser built as a current-mode WTA cannot follow the power law the
    /// read-out was trained on at this gain: its sink transistors leave saturation.
    #[error("hidden normaliser (current-mode WTA): at gain g = {gain} the winning cell's sink transistor leaves saturation (drain voltage {vk_min:.4} V, below 4 U_T = {four_ut:.4} V), so the circuit does not follow the I^g law the read-out is trained on (its shares depart from it by a total-variation distance of {departure:.2}); {}", if g_min.is_finite() { format!("the circuit works for g >= {g_min} with these sizes, bias and supply: use a gain in that range, or the closed-form normaliser") } else { "no gain up to 10000 works with these sizes, bias and supply: use the closed-form normaliser or change the hidden bias".to_string() })]
    HiddenWtaOutOfSaturation {
        gain: f64,
        departure: f64,
        vk_min: f64,
        four_ut: f64,
        g_min: f64,
    },
}

/// The dataset split, trained float model, and reference accuracies: everything about the
/// classifier that does not depend on the circuit.
#[derive(Debug, Clone)]
pub struct Prepared {
    pub dataset_name: String,
    pub class_names: Vec<String>,
    pub n_features: usize,
    pub n_train: usize,
    /// Test inputs min-max scaled to [0, 1] (clipped) with the training split's scaler.
    pub test_u: Array2<f64>,
    pub test_y: Vec<usize>,
    /// Float weights and biases of every layer, in chain order: one layer (classes x features,
    /// acting on [0, 1] inputs) without a hidden stage; with one, the drawn hidden layer
    /// (units x features) then the trained read-out (classes x units, acting on hidden shares).
    pub layers: Vec<(Array2<f64>, Array1<f64>)>,
    /// The hidden stage, when the classifier has one.
    pub hidden: Option<HiddenSpec>,
    /// Ideal argmax of the mapped weights, per test sample.
    pub ideal_pred: Vec<usize>,
    /// The linfa model's own predictions, per test sample.
    pub baseline_pred: Vec<usize>,
    pub ideal_acc: f64,
    pub baseline_acc: f64,
    /// Classes with no sample in the test split (only when the caller allowed it): accuracy
    /// leaves them out, and whoever reports it must say so.
    pub untested_classes: Vec<crate::data::UntestedClass>,
    /// Mean scaled input of the training split (one value per feature; the trim calibration's
    /// level, never the test split). Empty when not known.
    pub train_mean_u: Vec<f64>,
    /// Training inputs min-max scaled like `test_u` (the column trim's calibration subset is
    /// its first rows). Empty when not known.
    pub train_u: Array2<f64>,
}

/// A hidden stage: a drawn weight layer and a soft competition (normaliser) between the input
/// and the trained read-out layer.
#[derive(Debug, Clone, PartialEq)]
pub struct HiddenSpec {
    /// Number of hidden lines.
    pub units: usize,
    /// The normaliser between the two weight stages.
    pub nonlinearity: HiddenNonlinearity,
    /// Seed of the drawn hidden weights (part of the design: the same for every chip).
    pub seed: u64,
    /// The analog stage that carries the hidden layer (its mapping shapes the hidden shares).
    pub stage: WeightStageDesign,
    /// Trainer of the read-out layer on the hidden shares (which already lie in [0, 1]).
    pub readout: crate::training::LogisticOptions,
    /// Given hidden weights (units x features) and biases; `None` draws them.
    pub given: Option<(Array2<f64>, Array1<f64>)>,
}

/// The chain of `layers` stages built from one stage design. Stages after the first take the
/// previous normaliser's output currents directly (analog lines: no input DAC, no line gain
/// error of a DAC).
pub fn chain_design(
    stage: &WeightStageDesign,
    layers: usize,
    hidden: Option<&HiddenSpec>,
) -> ChainDesign {
    let mut later = stage.clone();
    later.input.dac_bits = None;
    later.input.gain_sigma_rel = 0.0;
    let mut stages = vec![stage.clone()];
    stages.extend(std::iter::repeat_n(later, layers.saturating_sub(1)));
    ChainDesign {
        stages,
        hidden: hidden.iter().map(|h| h.nonlinearity).collect(),
    }
}

/// Hidden shares of every row of `u` through the ideal hidden stage.
fn hidden_features(
    spec: &HiddenSpec,
    w1: &Array2<f64>,
    b1: &Array1<f64>,
    u: &Array2<f64>,
) -> Result<Array2<f64>, PipelineError> {
    let head = ChainDesign {
        stages: vec![spec.stage.clone()],
        hidden: vec![],
    }
    .map(&[(w1.view(), b1.view())])?
    .ideal();
    let mut out = Array2::zeros((u.nrows(), spec.units));
    let mut scratch = head.scratch();
    let mut buf = vec![0.0; spec.units];
    for (row, mut o) in u.outer_iter().zip(out.outer_iter_mut()) {
        head.forward_noiseless(&row.to_vec(), &mut scratch, &mut buf)?;
        spec.nonlinearity.normalise_in_place(&mut buf);
        o.assign(&ndarray::ArrayView1::from(&buf[..]));
    }
    Ok(out)
}

/// Split, train and evaluate the references. With a hidden stage, the hidden layer is drawn
/// from `rng::stream(spec.seed, [DESIGN, 0])` and the read-out is trained (with
/// `spec.readout`, not `trainer`) on the hidden shares the ideal hidden stage produces.
///
/// A class with no sample in the test split is an error unless `allow_untested_classes`; then
/// it is listed in [`Prepared::untested_classes`].
pub fn prepare(
    dataset: &Dataset,
    test_fraction: f64,
    split_seed: u64,
    allow_untested_classes: bool,
    trainer: &dyn Trainer,
    hidden: Option<&HiddenSpec>,
) -> Result<Prepared, PipelineError> {
    let (train, test, untested) =
        crate::data::stratified_split_allowing_untested(dataset, test_fraction, split_seed)?;
    if !allow_untested_classes {
        if let Some(m) = untested.first() {
            return Err(m.clone().into_error(dataset, test_fraction).into());
        }
    }
    let mut p = prepare_split(dataset, &train, &test, trainer, hidden)?;
    p.untested_classes = untested;
    Ok(p)
}

fn prepare_split(
    dataset: &Dataset,
    train: &Dataset,
    test: &Dataset,
    trainer: &dyn Trainer,
    hidden: Option<&HiddenSpec>,
) -> Result<Prepared, PipelineError> {
    if let Some(spec) = hidden {
        return prepare_hidden(dataset, train, test, spec);
    }
    let model = trainer.train(train)?;
    let test_u = model.scale(test.x.view())?;
    let ideal_pred = model.predict_ideal(test.x.view())?;
    let baseline_pred = model.predict_baseline(test.x.view())?;
    let mut p = Prepared::assemble(
        dataset,
        train,
        test,
        test_u,
        vec![(model.linear.weights.clone(), model.linear.bias.clone())],
        None,
        [ideal_pred, baseline_pred],
    );
    p.train_u = model.scale(train.x.view())?;
    p.train_mean_u = cost::mean_input(&p.train_u);
    Ok(p)
}

impl Prepared {
    /// Assemble a prepared classifier from its dataset, the split, the scaled test inputs, the
    /// layers, the hidden stage (if any) and the `[ideal, baseline]` test-split predictions.
    fn assemble(
        dataset: &Dataset,
        train: &Dataset,
        test: &Dataset,
        test_u: Array2<f64>,
        layers: Vec<(Array2<f64>, Array1<f64>)>,
        hidden: Option<&HiddenSpec>,
        [ideal_pred, baseline_pred]: [Vec<usize>; 2],
    ) -> Prepared {
        Prepared {
            dataset_name: dataset.name.clone(),
            class_names: dataset.class_names.clone(),
            n_features: dataset.n_features(),
            n_train: train.n_samples(),
            ideal_acc: accuracy(&ideal_pred, &test.y),
            baseline_acc: accuracy(&baseline_pred, &test.y),
            test_u,
            test_y: test.y.clone(),
            layers,
            hidden: hidden.cloned(),
            ideal_pred,
            baseline_pred,
            untested_classes: Vec::new(),
            train_mean_u: Vec::new(),
            train_u: Array2::zeros((0, 0)),
        }
    }
}

fn prepare_hidden(
    dataset: &Dataset,
    train: &Dataset,
    test: &Dataset,
    spec: &HiddenSpec,
) -> Result<Prepared, PipelineError> {
    let scaler = MinMaxScaler::fit(train.x.view())?;
    let u_train = scaler.transform(train.x.view())?;
    let test_u = scaler.transform(test.x.view())?;
    let mut rng = stream(spec.seed, &[domain::DESIGN, 0]);
    let (w1, b1) = match &spec.given {
        Some((w, b)) => {
            if w.ncols() != dataset.n_features() || w.nrows() != spec.units || b.len() != w.nrows()
            {
                return Err(PipelineError::Shape {
                    what: format!(
                        "the given hidden layer is {} x {} with {} biases, but the dataset has {} features and hidden.units = {}",
                        w.nrows(),
                        w.ncols(),
                        b.len(),
                        dataset.n_features(),
                        spec.units
                    ),
                });
            }
            (w.clone(), b.clone())
        }
        None => random_hidden_weights(&mut rng, spec.units, dataset.n_features()),
    };
    let h_train = hidden_features(spec, &w1, &b1, &u_train)?;
    let h_test = hidden_features(spec, &w1, &b1, &test_u)?;
    let names: Vec<String> = (0..spec.units).map(|k| format!("hidden_{k}")).collect();
    let hidden_train = Dataset::new(
        format!("{}-hidden", dataset.name),
        names.clone(),
        dataset.class_names.clone(),
        h_train,
        train.y.clone(),
    )?;
    let model = spec.readout.train(&hidden_train)?;
    // The read-out acts on min-max-scaled hidden shares (with a floor on each range, see
    // `LogisticOptions::range_floor`); fold that map into its weights so the
    // chip's second stage takes the shares directly: W' = W / range, b' = b - W min / range.
    let (min, max) = (&model.scaler.min, &model.scaler.max);
    let range = max - min;
    let w2 = &model.linear.weights;
    let mut w2f = w2.clone();
    let mut b2f = model.linear.bias.clone();
    for (j, r) in range.iter().enumerate() {
        let mut col = w2f.column_mut(j);
        if *r > 0.0 {
            col.mapv_inplace(|w| w / r);
        } else {
            col.fill(0.0);
        }
    }
    for (c, mut b) in b2f.iter_mut().enumerate() {
        let shift: f64 = (0..spec.units)
            .filter(|&j| range[j] > 0.0)
            .map(|j| w2[[c, j]] * min[j] / range[j])
            .sum();
        *b -= shift;
        let _ = &mut b;
    }
    let baseline_pred = model.predict_baseline(h_test.view())?;
    let layers = vec![(w1, b1), (w2f, b2f)];
    // Ideal argmax: the whole mapped chain in exact weights, noiseless.
    let chain = chain_design(&spec.stage, 2, Some(spec))
        .map(
            &layers
                .iter()
                .map(|(w, b)| (w.view(), b.view()))
                .collect::<Vec<_>>(),
        )?
        .ideal();
    let mut scratch = chain.scratch();
    let mut out = vec![0.0; dataset.n_classes()];
    let mut ideal_pred = Vec::with_capacity(test.y.len());
    for row in test_u.axis_iter(Axis(0)) {
        chain.forward_noiseless(&row.to_vec(), &mut scratch, &mut out)?;
        ideal_pred.push(
            crate::training::argmax(&out).ok_or(PipelineError::NonFinite {
                what: "an ideal output of the hidden chain",
            })?,
        );
    }
    let mut p = Prepared::assemble(
        dataset,
        train,
        test,
        test_u,
        layers,
        Some(spec),
        [ideal_pred, baseline_pred],
    );
    p.train_mean_u = cost::mean_input(&u_train);
    p.train_u = u_train;
    Ok(p)
}

/// The competition stage of a classifier design.
#[derive(Debug, Clone)]
pub enum CompetitionDesign {
    /// Current-mode WTA (full EKV DC solve per decision).
    CurrentWta(Box<WtaDesign>),
    /// Multi-input differential pair fed with the weight-stage currents.
    DiffPair(Box<DiffPairDesign>),
    /// Current-mode WTA with hysteresis (each cell's output mirrored back into its input); its
    /// state carries from one decision of a chip to the next, in test-split order.
    Hysteretic(Box<HysteresisDesign>),
    /// Exact argmax of the weight stage's output currents (no circuit).
    Argmax,
    /// k-winners WTA (limited outputs); accuracy is top-k accuracy.
    KWinners(Box<crate::stages::competition::kwta::KWinnersDesign>),
    /// A tree of small current-mode WTAs.
    Cascade(Box<crate::stages::competition::cascade::CascadeDesign>),
    /// Ranking by repeated maximum with one current-mode WTA; accuracy is top-k accuracy.
    Ranking(Box<crate::stages::competition::cascade::RankingDesign>),
}

impl CompetitionDesign {
    /// The static input shot noise of this stage over a single-pole bandwidth of its input
    /// nodes (capacitance `capacitance`, F): the current-mode WTA's input node conductance is
    /// its sink's drain coupling ([`InputShotNoise::for_wta`]); the other stages use
    /// kappa = 1/n of the process's NMOS (their input node is diode-like).
    pub fn static_noise(
        &self,
        process: &Process,
        capacitance: f64,
        temperature: f64,
    ) -> InputShotNoise {
        match self {
            CompetitionDesign::CurrentWta(w) => {
                InputShotNoise::for_wta(w, capacitance, temperature)
            }
            CompetitionDesign::Hysteretic(h) => {
                InputShotNoise::for_wta(&h.wta, capacitance, temperature)
            }
            CompetitionDesign::KWinners(k) => {
                InputShotNoise::for_wta(&k.wta, capacitance, temperature)
            }
            CompetitionDesign::Ranking(r) => {
                InputShotNoise::for_wta(&r.wta, capacitance, temperature)
            }
            CompetitionDesign::Cascade(c) => {
                InputShotNoise::for_wta(&c.cell, capacitance, temperature)
            }
            _ => InputShotNoise {
                bandwidth: crate::stages::competition::noise::NoiseBandwidth::SinglePole {
                    capacitance,
                    slope: 1.0 / process.nmos.n,
                },
                temperature,
            },
        }
    }
}

/// Transient evaluation of each decision (current-mode WTA only).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TransientEvaluation {
    /// Integrator options; `read_time` = `Some(t)` gives time-limited decisions.
    pub options: TransientOptions,
    /// Shot noise integrated as an SDE; `None` = noiseless.
    pub noise: Option<NoiseOptions>,
}

/// Everything nominal about one design point.
#[derive(Debug, Clone)]
pub struct ClassifierDesign {
    pub process: Process,
    /// The weight stage design used for every layer of the chain.
    pub weights: WeightStageDesign,
    pub competition: CompetitionDesign,
    pub decision: DecisionRule,
    /// Per-decision input-referred shot noise of the competition stage's inputs, applied as a
    /// static draw only where no transient SDE integrates the input shot noise itself
    /// ([`ClassifierDesign::static_input_noise`]).
    pub input_noise: Option<InputShotNoise>,
    /// Evaluate the current-mode WTA in time (decision time, energy) instead of at DC.
    pub transient: Option<TransientEvaluation>,
    /// With a hidden stage: evaluate its normaliser as this circuit (every transistor with its
    /// own mismatch, DC solve) instead of the weak-inversion closed form used for training.
    pub hidden_circuit: Option<CompetitionDesign>,
    pub conditions: Conditions,
}

impl ClassifierDesign {
    /// Whether the static input-referred shot-noise draw applies. One owner per noise source
    /// per evaluation mode: a transient run whose SDE integrates the inputs' shot noise
    /// (`NoiseOptions::input_shot`) owns it; otherwise (DC evaluation) the static draw does.
    pub fn static_input_noise(&self) -> bool {
        self.input_noise.is_some()
            && !matches!(
                &self.transient,
                Some(TransientEvaluation { noise: Some(o), .. }) if o.input_shot
            )
    }

    /// The competition stage's inputs for one decision: the weight-stage `currents`, plus one
    /// static input-noise draw each (written into `noisy`) when [`Self::static_input_noise`].
    pub fn competition_inputs<'a, R: rand::Rng + ?Sized>(
        &self,
        currents: &'a [f64],
        noisy: &'a mut [f64],
        rng: &mut R,
    ) -> Result<&'a [f64], CompetitionError> {
        self.competition_inputs_scaled(currents, noisy, rng, 1.0)
    }

    /// [`Self::competition_inputs`] with the static noise multiplied by `scale` (the draws are
    /// the same whatever the scale; 0 switches it off for an error budget).
    pub fn competition_inputs_scaled<'a, R: rand::Rng + ?Sized>(
        &self,
        currents: &'a [f64],
        noisy: &'a mut [f64],
        rng: &mut R,
        scale: f64,
    ) -> Result<&'a [f64], CompetitionError> {
        match &self.input_noise {
            Some(n) if self.static_input_noise() => {
                n.apply_scaled(currents, noisy, rng, scale)?;
                Ok(noisy)
            }
            _ => Ok(currents),
        }
    }
}

/// A design point ready for chips: the design and the weights mapped onto it.
#[derive(Debug, Clone)]
pub struct PointSetup {
    pub design: ClassifierDesign,
    pub mapped: MappedChain,
    /// Post-fabrication trim of the competition stage's lines ([`PointSetup::with_trim`]).
    pub trim: Option<TrimSetup>,
    /// Program-and-verify of the weight elements ([`PointSetup::with_program_verify`]);
    /// `None` = one-shot programming.
    pub program_verify: Option<crate::stages::weights::ProgramVerify>,
}

/// A trim design with its calibration level (model notes §11, *Trim*).
#[derive(Debug, Clone, PartialEq)]
pub struct TrimSetup {
    pub design: trim::TrimDesign,
    /// Calibration current per line, A: the nominal chain's mean output over its lines at the
    /// training split's mean input (line trim only; 0 without it).
    pub level_a: f64,
    /// Column trim: each input column's drive level during calibration (the calibration
    /// subset's mean scaled input; 1 for the bias line, last). Empty without column trim.
    pub column_levels: Vec<f64>,
    /// Column trim: each input column's nominal current per unit input, A (the comparator's
    /// reference, from the mapped targets at the element's levels). Empty without column trim.
    pub column_reference: Vec<f64>,
}

impl PointSetup {
    /// Map the prepared classifier's weights onto the design's weight stage.
    pub fn new(design: ClassifierDesign, prep: &Prepared) -> Result<Self, PipelineError> {
        design.weights.validate()?;
        design.conditions.validate()?;
        match &design.competition {
            CompetitionDesign::CurrentWta(w) => w.validate()?,
            CompetitionDesign::DiffPair(w) => w.validate()?,
            CompetitionDesign::Hysteretic(w) => w.validate()?,
            CompetitionDesign::Argmax => {}
            CompetitionDesign::KWinners(w) => w.validate()?,
            CompetitionDesign::Cascade(w) => w.validate()?,
            CompetitionDesign::Ranking(w) => w.validate()?,
        }
        if let Some(n) = &design.input_noise {
            n.validate()?;
        }
        if design.transient.is_some()
            && !matches!(
                design.competition,
                CompetitionDesign::CurrentWta(_)
                    | CompetitionDesign::Hysteretic(_)
                    | CompetitionDesign::KWinners(_)
                    | CompetitionDesign::Cascade(_)
                    | CompetitionDesign::Ranking(_)
            )
        {
            return Err(PipelineError::Unsupported {
                what: "the transient evaluation is available for the current-mode WTA circuits \
                       only (current_wta, hysteretic_wta, k_winners, cascade, repeated_max); \
                       use evaluation = \"dc\" or one of those circuits",
            });
        }
        if matches!(
            design.hidden_circuit,
            Some(CompetitionDesign::Hysteretic(_))
        ) {
            return Err(PipelineError::Unsupported {
                what: "a hidden normaliser cannot be the hysteretic WTA (a normaliser holds no \
                       winner); use current_wta or diff_pair",
            });
        }
        let chain = chain_design(&design.weights, prep.layers.len(), prep.hidden.as_ref());
        let layers: Vec<_> = prep
            .layers
            .iter()
            .map(|(w, b)| (w.view(), b.view()))
            .collect();
        let mapped = chain.map(&layers)?;
        if prep.hidden.is_some() {
            check_readout_levels(&design.weights, &mapped, &layers, prep)?;
        }
        if let (Some(CompetitionDesign::CurrentWta(w)), Some(spec)) =
            (&design.hidden_circuit, &prep.hidden)
        {
            check_hidden_wta(w, spec, &mapped, prep, design.conditions.temperature_k)?;
        }
        Ok(Self {
            design,
            mapped,
            trim: None,
            program_verify: None,
        })
    }

    /// This point with its weight elements programmed and verified (model notes §5.1): every
    /// stage's element must be a linear one.
    pub fn with_program_verify(
        mut self,
        pv: crate::stages::weights::ProgramVerify,
    ) -> Result<Self, PipelineError> {
        pv.validate()?;
        for s in self.mapped.stages() {
            pv.check_element(&s.design().element)?;
        }
        self.program_verify = Some(pv);
        Ok(self)
    }

    /// This point with a trim DAC per competition line, calibrated at the nominal chain's mean
    /// output current at the training split's mean input (`prep.train_mean_u`).
    pub fn with_trim(
        mut self,
        t: trim::TrimDesign,
        prep: &Prepared,
    ) -> Result<Self, PipelineError> {
        t.validate()?;
        let mut setup = TrimSetup {
            design: t,
            level_a: 0.0,
            column_levels: Vec::new(),
            column_reference: Vec::new(),
        };
        if t.columns {
            let rows = t.calibration_rows(prep.n_train)?;
            let first = self
                .mapped
                .stages()
                .first()
                .ok_or(trim::TrimError::Lines { lines: 0 })?;
            setup.column_reference = first.nominal_column_currents();
            let mut levels: Vec<f64> = (0..first.inputs())
                .map(|i| {
                    let col = prep.train_u.column(i);
                    let n = rows.min(col.len());
                    if n == 0 {
                        return 0.0;
                    }
                    col.iter().take(n).map(|v| v.clamp(0.0, 1.0)).sum::<f64>() / n as f64
                })
                .collect();
            levels.push(1.0);
            setup.column_levels = levels;
        }
        if !t.lines {
            self.trim = Some(setup);
            return Ok(self);
        }
        match &self.design.competition {
            CompetitionDesign::Argmax => return Err(trim::TrimError::NoCircuit.into()),
            CompetitionDesign::CurrentWta(_) | CompetitionDesign::DiffPair(_) => {}
            CompetitionDesign::Hysteretic(_) => {
                return Err(trim::TrimError::Circuit {
                    circuit: "hysteretic_wta",
                }
                .into())
            }
            CompetitionDesign::KWinners(_) => {
                return Err(trim::TrimError::Circuit {
                    circuit: "k_winners",
                }
                .into())
            }
            CompetitionDesign::Cascade(_) => {
                return Err(trim::TrimError::Circuit { circuit: "cascade" }.into())
            }
            CompetitionDesign::Ranking(_) => {
                return Err(trim::TrimError::Circuit {
                    circuit: "repeated_max",
                }
                .into())
            }
        }
        let nominal = self.mapped.nominal_levels();
        let mut scratch = nominal.scratch();
        let mut out = vec![0.0; nominal.outputs()];
        let x: Vec<f64> = (0..prep.n_features)
            .map(|i| prep.train_mean_u.get(i).copied().unwrap_or(0.0))
            .collect();
        nominal.forward_noiseless(&x, &mut scratch, &mut out)?;
        let level = out.iter().sum::<f64>() / out.len().max(1) as f64;
        if !(level.is_finite() && level > 0.0) {
            return Err(trim::TrimError::Level { level }.into());
        }
        setup.level_a = level;
        self.trim = Some(setup);
        Ok(self)
    }

    /// One line describing the competition stage, for manifests and reports.
    pub fn describe(&self) -> String {
        let si = crate::units::format_si;
        match &self.design.competition {
            CompetitionDesign::KWinners(k) => format!(
                "k-winners WTA, {} cells, k = {} (accuracy is top-{} accuracy), unit current {}, \
                 bias {}, sink {} x {}, output {} x {}, limiter {} x {}",
                k.wta.n,
                k.k,
                k.k,
                si(k.unit_current, "A", 3),
                match k.wta.bias {
                    crate::stages::competition::CurrentSource::Ideal { current } =>
                        si(current, "A", 3),
                    _ => "from a transistor".into(),
                },
                si(k.wta.sink.w, "m", 3),
                si(k.wta.sink.l, "m", 3),
                si(k.wta.output.w, "m", 3),
                si(k.wta.output.l, "m", 3),
                si(k.limiter.w, "m", 3),
                si(k.limiter.l, "m", 3),
            ),
            CompetitionDesign::Ranking(r) => format!(
                "ranking by repeated maximum, {} cells, k = {} steps (accuracy is top-{} \
                 accuracy; DC steps counted as {} each), sink {} x {}, output {} x {}",
                r.wta.n,
                r.k,
                r.k,
                si(r.step_time, "s", 3),
                si(r.wta.sink.w, "m", 3),
                si(r.wta.sink.l, "m", 3),
                si(r.wta.output.w, "m", 3),
                si(r.wta.output.l, "m", 3),
            ),
            CompetitionDesign::Cascade(c) => {
                format!(
                "WTA cascade, {} classes, fan-in {}, {} levels ({}){}, sink {} x {}, output {} x \
                 {}, replica {} x {}",
                c.classes,
                c.fan_in,
                c.depth(),
                c.levels()
                    .iter()
                    .map(|l| l.iter().map(|s| s.to_string()).collect::<Vec<_>>().join("+"))
                    .collect::<Vec<_>>()
                    .join(" then "),
                match c.padding() {
                    Some(p) => format!(
                        ", padded: fan-in {} does not divide the lines, {} of {} slots unused",
                        c.fan_in, p.unused, p.slots
                    ),
                    None => String::new(),
                },
                si(c.cell.sink.w, "m", 3),
                si(c.cell.sink.l, "m", 3),
                si(c.cell.output.w, "m", 3),
                si(c.cell.output.l, "m", 3),
                si(c.copy.w, "m", 3),
                si(c.copy.l, "m", 3),
            )
            }
            CompetitionDesign::Argmax => "exact argmax of the weight-stage currents".into(),
            CompetitionDesign::DiffPair(w) => format!(
                "multi-input differential pair, {} inputs, pair devices {} x {}, {:?} inputs",
                w.n,
                crate::units::format_si(w.pair.w, "m", 3),
                crate::units::format_si(w.pair.l, "m", 3),
                w.input
            ),
            CompetitionDesign::Hysteretic(h) => format!(
                "hysteretic current-mode WTA, {} cells, feedback fraction {}, sink {} x {}, \
                 output {} x {}, mirror {} x {}",
                h.wta.n,
                crate::units::short_number(h.feedback),
                crate::units::format_si(h.wta.sink.w, "m", 3),
                crate::units::format_si(h.wta.sink.l, "m", 3),
                crate::units::format_si(h.wta.output.w, "m", 3),
                crate::units::format_si(h.wta.output.l, "m", 3),
                crate::units::format_si(h.mirror.w, "m", 3),
                crate::units::format_si(h.mirror.l, "m", 3),
            ),
            CompetitionDesign::CurrentWta(w) => format!(
                "current-mode WTA, {} cells, sink {} x {}, output {} x {}, {}",
                w.n,
                crate::units::format_si(w.sink.w, "m", 3),
                crate::units::format_si(w.sink.l, "m", 3),
                crate::units::format_si(w.output.w, "m", 3),
                crate::units::format_si(w.output.l, "m", 3),
                match w.bias {
                    crate::stages::competition::CurrentSource::Ideal { current } =>
                        format!("ideal bias {}", crate::units::format_si(current, "A", 3)),
                    crate::stages::competition::CurrentSource::Transistor {
                        gate_voltage, ..
                    } => format!(
                        "transistor bias at {}",
                        crate::units::format_si(gate_voltage, "V", 3)
                    ),
                }
            ),
        }
    }
}

/// Accuracy over the test split of a noiseless chain (argmax of its output currents).
fn chain_accuracy(chain: &EffectiveChain, prep: &Prepared) -> Result<f64, PipelineError> {
    let mut scratch = chain.scratch();
    let mut out = vec![0.0; chain.outputs()];
    let mut correct = 0usize;
    for (row, &y) in prep.test_u.outer_iter().zip(&prep.test_y) {
        chain.forward_noiseless(&row.to_vec(), &mut scratch, &mut out)?;
        if crate::training::argmax(&out) == Some(y) {
            correct += 1;
        }
    }
    Ok(correct as f64 / prep.test_y.len().max(1) as f64)
}

/// Does a perfect chip with `levels` element levels keep at least half of the exact weights'
/// margin over chance? (The half is the project's own threshold, no source: it separates a
/// collapse to chance from the ordinary loss of a few levels.)
fn levels_keep_margin(acc_levels: f64, acc_ideal: f64, chance: f64) -> bool {
    acc_levels - chance >= 0.5 * (acc_ideal - chance)
}

/// With a hidden stage, the read-out acts on shares that vary over a small part of [0, 1]; its
/// weights (the min-max scaling folded in, see `prepare_hidden`) then carry the class
/// differences in small departures from large common values, which a few element levels
/// cannot hold. Evaluate a perfect chip (targets rounded to the levels, no other error) and
/// refuse the point when it falls to chance while the exact weights classify well, with the
/// smallest power-of-two level count that works.
fn check_readout_levels(
    stage: &WeightStageDesign,
    mapped: &MappedChain,
    layers: &[(ArrayView2<f64>, ArrayView1<f64>)],
    prep: &Prepared,
) -> Result<(), PipelineError> {
    let levels_of = |d: &WeightStageDesign| match &d.element {
        crate::stages::weights::ElementDesign::Linear(e) => e.levels,
        crate::stages::weights::ElementDesign::Subthreshold(e) => e.levels,
    };
    let Some(levels) = levels_of(stage) else {
        return Ok(());
    };
    let acc_ideal = chain_accuracy(&mapped.ideal(), prep)?;
    let mut counts = vec![0usize; prep.class_names.len().max(1)];
    for &y in &prep.test_y {
        if let Some(c) = counts.get_mut(y) {
            *c += 1;
        }
    }
    let chance = counts.iter().copied().max().unwrap_or(0) as f64 / prep.test_y.len().max(1) as f64;
    let acc_levels = chain_accuracy(&mapped.nominal_levels(), prep)?;
    if levels_keep_margin(acc_levels, acc_ideal, chance) || acc_ideal - chance < 0.05 {
        return Ok(());
    }
    let mut needed = None;
    let mut n = levels.max(2).next_power_of_two().max(4) * 2;
    while n <= 65536 {
        let mut d = stage.clone();
        match &mut d.element {
            crate::stages::weights::ElementDesign::Linear(e) => e.levels = Some(n),
            crate::stages::weights::ElementDesign::Subthreshold(e) => e.levels = Some(n),
        }
        let m = chain_design(&d, layers.len(), prep.hidden.as_ref()).map(layers)?;
        if levels_keep_margin(
            chain_accuracy(&m.nominal_levels(), prep)?,
            acc_ideal,
            chance,
        ) {
            needed = Some(n);
            break;
        }
        n *= 2;
    }
    Err(PipelineError::HiddenReadoutLevels {
        levels,
        acc_levels,
        acc_ideal,
        chance,
        needed,
    })
}

/// Samples of the test split used to check the hidden WTA's operating region.
const HIDDEN_CHECK_SAMPLES: usize = 40;

/// Largest total-variation distance between the nominal hidden WTA's shares and the closed-form
/// shares `I_k^g / sum I_j^g` (g = 1/eta of the circuit's drain coupling) over `currents`, and
/// the lowest sink drain voltage of the winning cells; `None` when a solve fails.
fn hidden_wta_departure(
    w: &WtaDesign,
    temperature: f64,
    currents: &[Vec<f64>],
) -> Option<(f64, f64)> {
    let Some(crate::device::DrainCoupling::Eta(eta)) = w.drain_coupling else {
        return None;
    };
    let law = HiddenNonlinearity::PowerLawNormaliser {
        exponent: 1.0 / eta,
        bias_current_a: 1.0,
    };
    let c = WtaChip::nominal(w.clone()).ok()?.at(temperature).ok()?;
    let mut ws = Workspace::new();
    let mut sol = StageSolution::for_stage(&c);
    let (mut worst, mut vk_min) = (0.0f64, f64::INFINITY);
    for i in currents {
        c.solve(i, &mut ws, &mut sol).ok()?;
        let mut closed = i.clone();
        law.normalise_in_place(&mut closed);
        let tv = 0.5
            * closed
                .iter()
                .zip(&sol.shares)
                .map(|(a, b)| (a - b).abs())
                .sum::<f64>();
        worst = worst.max(tv);
        let k = crate::training::argmax(i).unwrap_or(0);
        vk_min = vk_min.min(sol.node_voltages.get(k).copied().unwrap_or(f64::NAN));
    }
    Some((worst, vk_min))
}

/// The hidden normaliser as a current-mode WTA must work where its weak-inversion law does:
/// the read-out is trained on shares `I_k^g / sum I_j^g`, which the circuit gives only with the
/// sinks saturated (drain voltage V_k >= 4 U_T; DEVELOPERS.md model notes §4.1). A small gain
/// g = kappa/sigma is a large drain coupling; the output transistors' drain then holds the
/// common node so high that the sinks carry their currents in triode, and the circuit's gain
/// collapses (at g = 2 on iris: about 0.4, every chip at chance). Checked on the nominal circuit
/// with the ideal hidden currents of the first test samples: the winning cell's sink (the one
/// whose share the read-out relies on) must be saturated in every sample. A refusal says the
/// smallest gain that works (found by bisection on the same check) and how far the shares
/// depart from the law (total-variation distance).
fn check_hidden_wta(
    w: &WtaDesign,
    spec: &HiddenSpec,
    mapped: &MappedChain,
    prep: &Prepared,
    temperature: f64,
) -> Result<(), PipelineError> {
    let ideal = mapped.ideal();
    let Some(first) = ideal.stages().first() else {
        return Ok(());
    };
    let mut currents = Vec::new();
    for row in prep.test_u.outer_iter().take(HIDDEN_CHECK_SAMPLES) {
        let x = row.to_vec();
        let mut buf = vec![0.0; spec.units];
        first.forward_noiseless(&x, &mut buf)?;
        currents.push(buf);
    }
    let Some(crate::device::DrainCoupling::Eta(eta)) = w.drain_coupling else {
        return Ok(());
    };
    let at = |g: f64| {
        let mut t = w.clone();
        t.drain_coupling = Some(crate::device::DrainCoupling::Eta(1.0 / g));
        hidden_wta_departure(&t, temperature, &currents)
    };
    let four_ut = 4.0 * crate::physics::thermal_voltage(temperature);
    let works = |g: f64| at(g).is_some_and(|(_, v)| v >= four_ut);
    let gain = 1.0 / eta;
    let (departure, vk_min) = at(gain).unwrap_or((f64::NAN, f64::NAN));
    if vk_min >= four_ut {
        return Ok(());
    }
    // Smallest working gain: double until it works, then bisect to 1 %.
    let (mut lo, mut hi) = (gain, gain * 2.0);
    while !works(hi) && hi < 1e4 {
        lo = hi;
        hi *= 2.0;
    }
    if !works(hi) {
        return Err(PipelineError::HiddenWtaOutOfSaturation {
            gain,
            departure,
            vk_min,
            four_ut,
            g_min: f64::INFINITY,
        });
    }
    while hi / lo > 1.01 {
        let mid = (lo * hi).sqrt();
        if works(mid) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    Err(PipelineError::HiddenWtaOutOfSaturation {
        gain,
        departure,
        vk_min,
        four_ut: 4.0 * crate::physics::thermal_voltage(temperature),
        g_min: (hi * 10.0).ceil() / 10.0,
    })
}

/// One chip's outcome over the test split.
#[derive(Debug, Clone, PartialEq)]
pub struct ChipOutcome {
    pub chip: u64,
    pub samples: u64,
    /// Converged, unambiguous decisions equal to the true class.
    pub correct: u64,
    /// Decisions equal to ideal argmax (ambiguous and failed ones never agree).
    pub agree: u64,
    pub ambiguous: u64,
    /// Failed decisions, by kind (their sum: [`FailureCounts::total`]).
    pub failed: FailureCounts,
    /// `confusion[true][pred]`, columns: classes, then ambiguous, then failed (every kind).
    pub confusion: Vec<Vec<u64>>,
    /// Sum of decision times and energies (transient evaluation), with their count.
    pub decision_time_sum: f64,
    pub energy_sum: f64,
    pub timed: u64,
    /// A chip that could not be built at all (e.g. a sampled device out of range).
    pub chip_error: Option<String>,
    /// The first failed decision's reason (solver or compliance), if any.
    pub first_failure: Option<String>,
    /// What programming the die's weights cost (program-and-verify only).
    pub programming: Option<crate::stages::weights::ProgramCounts>,
}

impl ChipOutcome {
    fn empty(chip: u64, n_classes: usize) -> Self {
        Self {
            chip,
            samples: 0,
            correct: 0,
            agree: 0,
            ambiguous: 0,
            failed: FailureCounts::default(),
            confusion: vec![vec![0; n_classes + 2]; n_classes],
            decision_time_sum: 0.0,
            energy_sum: 0.0,
            timed: 0,
            chip_error: None,
            first_failure: None,
            programming: None,
        }
    }

    /// Accuracy: correct over all samples (ambiguous and failed decisions count as not correct,
    /// and are reported apart).
    pub fn accuracy(&self) -> f64 {
        if self.samples == 0 {
            0.0
        } else {
            self.correct as f64 / self.samples as f64
        }
    }

    /// Share of samples where the decision equals ideal argmax.
    pub fn agreement(&self) -> f64 {
        if self.samples == 0 {
            0.0
        } else {
            self.agree as f64 / self.samples as f64
        }
    }

    /// Count one decision of true class `truth` (ideal argmax `ideal`): a sample is always
    /// counted, in exactly one of correct, wrong, ambiguous or failed (by kind).
    pub fn record(&mut self, outcome: DecisionOutcome, truth: usize, ideal: usize) {
        let n_classes = self.confusion.len();
        self.samples += 1;
        let column = match outcome {
            DecisionOutcome::Correct => {
                self.correct += 1;
                if truth == ideal {
                    self.agree += 1;
                }
                Some(truth)
            }
            DecisionOutcome::Wrong { winner } => {
                if winner == ideal {
                    self.agree += 1;
                }
                (winner < n_classes).then_some(winner)
            }
            DecisionOutcome::Ambiguous => {
                self.ambiguous += 1;
                Some(n_classes)
            }
            DecisionOutcome::Failed(kind) => {
                self.failed.add(kind);
                Some(n_classes + 1)
            }
        };
        if let (Some(row), Some(j)) = (self.confusion.get_mut(truth), column) {
            if let Some(c) = row.get_mut(j) {
                *c += 1;
            }
        }
    }
}

/// Why a decision failed. Every failure is one of these, counted apart and never folded into
/// accuracy (DEVELOPERS.md "Decisions and failures").
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum FailureKind {
    /// No operating point was found: a DC solve stopped short of its tolerance, a transient step
    /// failed, or the sampled circuit is outside the device model (e.g. a mismatch draw that
    /// makes a parameter invalid).
    NotConverged,
    /// The circuit has no operating point within the supply (a node would leave the rails).
    OutOfSupplyCompliance,
    /// The weight stage (or chain) could not produce valid currents for this input.
    WeightStage,
    /// The per-decision noise could not be applied.
    Noise,
}

impl FailureKind {
    /// Every kind, in the order of the `failed_*` columns.
    pub const ALL: [FailureKind; 4] = [
        FailureKind::NotConverged,
        FailureKind::OutOfSupplyCompliance,
        FailureKind::WeightStage,
        FailureKind::Noise,
    ];

    /// The kind's name in results files (`failed_<name>` columns).
    pub fn name(self) -> &'static str {
        match self {
            FailureKind::NotConverged => "not_converged",
            FailureKind::OutOfSupplyCompliance => "out_of_supply_compliance",
            FailureKind::WeightStage => "weight_stage",
            FailureKind::Noise => "noise",
        }
    }

    /// The kind of a competition stage's error. An invalid input current is the upstream
    /// weight stage's failure (the stage's inputs are its outputs).
    pub fn of_competition(e: &CompetitionError) -> FailureKind {
        match e {
            CompetitionError::Compliance { .. } => FailureKind::OutOfSupplyCompliance,
            CompetitionError::InvalidInput { .. } => FailureKind::WeightStage,
            CompetitionError::NotConverged { .. }
            | CompetitionError::InvalidParameter { .. }
            | CompetitionError::WrongLength { .. } => FailureKind::NotConverged,
        }
    }

    /// The kind of a transient evaluation's error.
    pub fn of_transient(e: &TransientError) -> FailureKind {
        match e {
            TransientError::Stage(s) => FailureKind::of_competition(s),
            _ => FailureKind::NotConverged,
        }
    }

    /// The kind of an error while building a chip (every decision of that chip fails so).
    pub fn of_pipeline(e: &PipelineError) -> FailureKind {
        match e {
            PipelineError::Competition(c) => FailureKind::of_competition(c),
            _ => FailureKind::WeightStage,
        }
    }
}

/// Failed decisions counted by kind.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct FailureCounts {
    pub not_converged: u64,
    pub out_of_supply_compliance: u64,
    pub weight_stage: u64,
    pub noise: u64,
}

impl FailureCounts {
    /// Count one failure of `kind`.
    pub fn add(&mut self, kind: FailureKind) {
        *self.get_mut(kind) += 1;
    }

    fn get_mut(&mut self, kind: FailureKind) -> &mut u64 {
        match kind {
            FailureKind::NotConverged => &mut self.not_converged,
            FailureKind::OutOfSupplyCompliance => &mut self.out_of_supply_compliance,
            FailureKind::WeightStage => &mut self.weight_stage,
            FailureKind::Noise => &mut self.noise,
        }
    }

    /// Failures of `kind`.
    pub fn get(&self, kind: FailureKind) -> u64 {
        match kind {
            FailureKind::NotConverged => self.not_converged,
            FailureKind::OutOfSupplyCompliance => self.out_of_supply_compliance,
            FailureKind::WeightStage => self.weight_stage,
            FailureKind::Noise => self.noise,
        }
    }

    /// Every failed decision.
    pub fn total(&self) -> u64 {
        self.not_converged + self.out_of_supply_compliance + self.weight_stage + self.noise
    }

    /// Add another count, kind by kind.
    pub fn merge(&mut self, other: &FailureCounts) {
        for k in FailureKind::ALL {
            *self.get_mut(k) += other.get(k);
        }
    }
}

/// What one decision came to, judged against its true class.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DecisionOutcome {
    /// A clear winner equal to the true class.
    Correct,
    /// A clear winner, not the true class.
    Wrong { winner: usize },
    /// The decision rule found no clear winner.
    Ambiguous,
    /// No decision, and why.
    Failed(FailureKind),
}

impl DecisionOutcome {
    /// Judge a circuit's result (`Ok((winner, ambiguous))` or the failure's kind) against the
    /// true class.
    pub fn judge(result: Result<(usize, bool), FailureKind>, truth: usize) -> DecisionOutcome {
        match result {
            Err(k) => DecisionOutcome::Failed(k),
            Ok((_, true)) => DecisionOutcome::Ambiguous,
            Ok((w, false)) if w == truth => DecisionOutcome::Correct,
            Ok((w, false)) => DecisionOutcome::Wrong { winner: w },
        }
    }
}

/// Keep the first failure's reason and return its kind.
fn failed(
    first: &mut Option<String>,
    kind: FailureKind,
    reason: impl std::fmt::Display,
) -> FailureKind {
    if first.is_none() {
        *first = Some(reason.to_string());
    }
    kind
}

/// Which dies a sweep point evaluates: how chip streams are keyed.
///
/// Paired dies (common random numbers): die `c` draws the same standard normals at every sweep
/// point, scaled by that point's sigmas and sizes (dV_T = z A_VT / sqrt(2 W L) with the same
/// z), so the difference between two points is a paired difference: its variance is
/// var(a) + var(b) - 2 cov(a, b), well below that of two independent populations.
/// Independent dies: fresh dies at every point (the point index is part of every key).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Dies {
    /// The same dies at every sweep point (keys without the point index).
    #[default]
    Paired,
    /// Fresh dies at every sweep point (keys with the point index).
    Independent { point: u64 },
}

impl Dies {
    /// The stream `[domain, (point,) tail...]`.
    pub fn stream(self, seed: u64, domain: u64, tail: &[u64]) -> crate::rng::Stream {
        let mut path = Vec::with_capacity(tail.len() + 2);
        path.push(domain);
        if let Dies::Independent { point } = self {
            path.push(point);
        }
        path.extend_from_slice(tail);
        stream(seed, &path)
    }
}

/// Per-decision noise sources: the last element of a sample-noise stream key.
pub mod noise_source {
    /// Read noise of the weight elements (every stage, in chain order).
    pub const READ: u64 = 0;
    /// Input-referred shot noise of the competition stage (DC evaluation).
    pub const INPUT: u64 = 1;
    /// Noise integrated by the transient evaluation.
    pub const TRANSIENT: u64 = 2;
}

/// Stream index of the competition stage's chip draws (after the weight stages' 0, 1, ...).
pub const COMPETITION_STREAM: u64 = 1000;
/// Stream index of the hidden normaliser circuit's chip draws.
pub const HIDDEN_CIRCUIT_STREAM: u64 = 1001;

/// Program-and-verify a die's weight elements: element `i` of array `a` of stage `k` draws
/// from `[CHIP, (point,) chip, VERIFY_STREAM + k, a, i]`.
fn program_verify(
    wchip: &mut crate::stages::weights::ChainChip,
    pv: &crate::stages::weights::ProgramVerify,
    seed: u64,
    dies: Dies,
    chip: u64,
) -> Result<crate::stages::weights::ProgramCounts, PipelineError> {
    use crate::stages::weights::verify::VERIFY_STREAM;
    Ok(wchip.program_verify(pv, |k, a, i| {
        dies.stream(seed, domain::CHIP, &[chip, VERIFY_STREAM + k, a, i])
    })?)
}

/// Sample the competition chip of a design from its chip stream (`None` for the exact argmax).
/// Its Pelgrom draws are multiplied by `mismatch` (the draws are made whatever the scale).
pub fn sample_competition(
    design: &CompetitionDesign,
    process: &Process,
    rng: &mut crate::rng::Stream,
    mismatch: f64,
) -> Result<Option<CompetitionChip>, PipelineError> {
    // Each transistor's constants by its polarity (every device of the WTA and the
    // differential pair is an NMOS: their draws are unchanged).
    let mut draw = |t: &crate::device::Transistor| {
        let m = sample_mismatch(rng, process.tech(t.polarity), t);
        crate::device::MosMismatch {
            dvt0: mismatch * m.dvt0,
            dbeta_rel: mismatch * m.dbeta_rel,
        }
    };
    Ok(match design {
        CompetitionDesign::Argmax => None,
        CompetitionDesign::CurrentWta(w) => Some(CompetitionChip::Wta(WtaChip::sample(
            (**w).clone(),
            &mut draw,
        )?)),
        CompetitionDesign::DiffPair(w) => Some(CompetitionChip::DiffPair(DiffPairChip::sample(
            (**w).clone(),
            &mut draw,
        )?)),
        CompetitionDesign::Hysteretic(w) => Some(CompetitionChip::Hysteretic(
            HysteresisChip::sample((**w).clone(), &mut draw)?,
        )),
        // The same samplers in the same order as `build_composite`: the die the run evaluated.
        CompetitionDesign::KWinners(k) => Some(CompetitionChip::KWinners(
            crate::stages::competition::kwta::KWinnersChip::sample((**k).clone(), &mut draw)?,
        )),
        CompetitionDesign::Cascade(c) => Some(CompetitionChip::Cascade(
            crate::stages::competition::cascade::CascadeChip::sample((**c).clone(), &mut draw)?,
        )),
        CompetitionDesign::Ranking(r) => Some(CompetitionChip::Ranking(
            crate::stages::competition::cascade::RankingChip::sample((**r).clone(), &mut draw)?,
        )),
    })
}

/// Sample and evaluate the circuits built from the current-mode WTA (same draws order and
/// scaling as [`sample_competition`]): `None` for the other designs.
fn build_composite(
    design: &CompetitionDesign,
    process: &Process,
    temperature: f64,
    rng: &mut crate::rng::Stream,
    mismatch: f64,
) -> Result<Option<Decider>, PipelineError> {
    use crate::stages::competition::cascade::{CascadeChip, RankingChip};
    use crate::stages::competition::kwta::KWinnersChip;
    let mut draw = |t: &crate::device::Transistor| {
        let m = sample_mismatch(rng, process.tech(t.polarity), t);
        crate::device::MosMismatch {
            dvt0: mismatch * m.dvt0,
            dbeta_rel: mismatch * m.dbeta_rel,
        }
    };
    Ok(Some(match design {
        CompetitionDesign::KWinners(k) => Decider::KWinners(Box::new(
            KWinnersChip::sample((**k).clone(), &mut draw)?.at(temperature)?,
        )),
        CompetitionDesign::Cascade(c) => Decider::Cascade(Box::new(
            CascadeChip::sample((**c).clone(), &mut draw)?.at(temperature)?,
        )),
        CompetitionDesign::Ranking(r) => Decider::Ranking(Box::new(
            RankingChip::sample((**r).clone(), &mut draw)?.at(temperature)?,
        )),
        _ => return Ok(None),
    }))
}

/// Sample and evaluate a competition circuit of a chip at its temperature. Its Pelgrom draws
/// are multiplied by `mismatch` (the draws are made whatever the scale); `infinite_gain` gives
/// the current-mode WTA's infinite-gain limit (see [`budget`]).
fn build_decider(
    design: &CompetitionDesign,
    process: &Process,
    temperature: f64,
    rng: &mut crate::rng::Stream,
    mismatch: f64,
    infinite_gain: bool,
) -> Result<Decider, PipelineError> {
    if infinite_gain
        && matches!(
            design,
            CompetitionDesign::KWinners(_)
                | CompetitionDesign::Cascade(_)
                | CompetitionDesign::Ranking(_)
        )
    {
        return Err(PipelineError::Unsupported {
            what: "the infinite-gain limit of the k-winners, cascade and ranking circuits is not \
                   modelled",
        });
    }
    if let Some(d) = build_composite(design, process, temperature, rng, mismatch)? {
        return Ok(d);
    }
    Ok(match sample_competition(design, process, rng, mismatch)? {
        None => Decider::Argmax,
        Some(CompetitionChip::Wta(c)) if infinite_gain => {
            // Input-referred factor of each cell's sink transistor (module `budget` docs).
            let ut = crate::physics::thermal_voltage(temperature);
            let kappa = 1.0 / process.nmos.n;
            Decider::Limit(
                c.sink
                    .iter()
                    .map(|m| (kappa * m.dvt0 / ut).exp() / (1.0 + m.dbeta_rel).max(1e-300))
                    .collect(),
            )
        }
        Some(CompetitionChip::Wta(c)) => Decider::Wta(Box::new(c.at(temperature)?)),
        Some(CompetitionChip::DiffPair(_)) if infinite_gain => {
            return Err(PipelineError::Unsupported {
                what: "the differential pair's infinite-gain limit is not modelled",
            })
        }
        Some(CompetitionChip::DiffPair(c)) => Decider::DiffPair(Box::new(c.at(temperature)?)),
        Some(CompetitionChip::Hysteretic(_)) if infinite_gain => {
            return Err(PipelineError::Unsupported {
                what: "the hysteretic WTA's infinite-gain limit is not modelled",
            })
        }
        Some(CompetitionChip::Hysteretic(c)) => Decider::Hysteretic(Box::new(c.at(temperature)?)),
        // Built by `build_composite` above; the same chips if they come this way.
        Some(CompetitionChip::KWinners(c)) => Decider::KWinners(Box::new(c.at(temperature)?)),
        Some(CompetitionChip::Cascade(c)) => Decider::Cascade(Box::new(c.at(temperature)?)),
        Some(CompetitionChip::Ranking(c)) => Decider::Ranking(Box::new(c.at(temperature)?)),
    })
}

/// One die of a sweep point rebuilt from (seed, point, chip) with the same streams as
/// [`evaluate_chip`]: its competition chip, its temperature, and the competition stage's inputs
/// (the weight stage's output currents) for chosen test samples, without per-decision noise
/// (the die's static state only).
#[derive(Debug, Clone)]
pub struct DieSamples {
    pub chip: CompetitionChip,
    pub temperature: f64,
    /// Test-sample indices, as asked.
    pub test_indices: Vec<usize>,
    /// Competition inputs per chosen sample, A.
    pub inputs: Vec<Vec<f64>>,
    /// True class and ideal-argmax class per chosen sample.
    pub truth: Vec<usize>,
    pub ideal: Vec<usize>,
    /// The die's trim after calibration (with `[trim]`): already applied to `inputs`.
    pub trim: Option<DieTrim>,
}

/// One die's trim gains after calibration (model notes §11, *Trim*).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct DieTrim {
    /// Gain of each competition line's input mirror (line 0 the reference, 1); empty without
    /// line trim.
    pub line_gains: Vec<f64>,
    /// Gain of each input column of the first weight stage (bias line last); empty without
    /// column trim.
    pub column_gains: Vec<f64>,
}

/// Rebuild chip `chip` of sweep point `point` and compute its competition inputs for the test
/// samples `indices` (see [`DieSamples`]).
pub fn sample_die(
    setup: &PointSetup,
    prep: &Prepared,
    seed: u64,
    dies: Dies,
    chip: u64,
    indices: &[usize],
) -> Result<DieSamples, PipelineError> {
    let d = &setup.design;
    if d.hidden_circuit.is_some() && prep.hidden.is_some() {
        return Err(PipelineError::Unsupported {
            what: "netlist export of a design whose hidden normaliser is evaluated as a circuit \
                   is not supported; export a design without hidden.circuit",
        });
    }
    let mut wchip = setup.mapped.sample_chip(&d.process, |k| {
        dies.stream(seed, domain::CHIP, &[chip, k as u64])
    });
    if let Some(pv) = &setup.program_verify {
        program_verify(&mut wchip, pv, seed, dies, chip)?;
    }
    // The die as trimmed (the same calibration as `evaluate_chip_with`).
    let mut die_trim = setup.trim.as_ref().map(|_| DieTrim::default());
    if let Some(t) = setup.trim.as_ref().filter(|t| t.design.columns) {
        let mut r = dies.stream(seed, domain::CHIP, &[chip, trim::COLUMN_TRIM_STREAM]);
        let gains = column_trim_gains(t, &wchip, &d.process, &d.conditions, &mut r)?;
        wchip.trim_input_lines(&gains);
        if let Some(x) = die_trim.as_mut() {
            x.column_gains = gains;
        }
    }
    let mut chip_rng = dies.stream(seed, domain::CHIP, &[chip, COMPETITION_STREAM]);
    let eff = wchip.effective(&d.conditions)?;
    if let Some(t) = setup.trim.as_ref().filter(|t| t.design.lines) {
        let mut c = dies.stream(seed, domain::CHIP, &[chip, COMPETITION_STREAM]);
        let cal = build_decider(
            &d.competition,
            &d.process,
            t.design.calibration_temperature_k,
            &mut c,
            1.0,
            false,
        )?;
        let mut r = dies.stream(seed, domain::CHIP, &[chip, trim::TRIM_STREAM]);
        let gains = trim_gains(
            t,
            &cal,
            &d.process,
            d.conditions.temperature_k,
            eff.outputs(),
            &mut r,
        )?;
        if let Some(x) = die_trim.as_mut() {
            x.line_gains = gains;
        }
    }
    let comp = sample_competition(&d.competition, &d.process, &mut chip_rng, 1.0)?.ok_or(
        PipelineError::Unsupported {
            what: "the design's competition stage is the exact argmax (no circuit to export); \
                   set competition.circuit to a circuit",
        },
    )?;
    let n_test = prep.test_y.len();
    let mut scratch: ChainScratch = eff.scratch();
    let mut inputs = Vec::with_capacity(indices.len());
    for &i in indices {
        if i >= n_test {
            return Err(PipelineError::Shape {
                what: format!("test sample {i} does not exist (the test split has {n_test})"),
            });
        }
        let x: Vec<f64> = prep.test_u.row(i).to_vec();
        let mut currents = vec![0.0; eff.outputs()];
        eff.forward_noiseless(&x, &mut scratch, &mut currents)?;
        if let Some(g) = die_trim.as_ref().filter(|t| !t.line_gains.is_empty()) {
            for (c, g) in currents.iter_mut().zip(&g.line_gains) {
                *c *= g;
            }
        }
        inputs.push(currents);
    }
    Ok(DieSamples {
        trim: die_trim,
        chip: comp,
        temperature: d.conditions.temperature_k,
        test_indices: indices.to_vec(),
        inputs,
        truth: indices.iter().map(|&i| prep.test_y[i]).collect(),
        ideal: indices.iter().map(|&i| prep.ideal_pred[i]).collect(),
    })
}

enum Decider {
    Wta(Box<crate::stages::competition::wta::WtaCircuit>),
    DiffPair(Box<crate::stages::competition::diffpair::DiffPairCircuit>),
    Hysteretic(Box<crate::stages::competition::hysteretic::HysteresisCircuit>),
    Argmax,
    /// Infinite-gain limit: argmax of the inputs times these input-referred factors.
    Limit(Vec<f64>),
    KWinners(Box<crate::stages::competition::kwta::KWinnersCircuit>),
    Cascade(Box<crate::stages::competition::cascade::CascadeCircuit>),
    Ranking(Box<crate::stages::competition::cascade::RankingCircuit>),
}

/// Evaluate chip `chip` of sweep point `point` over the whole test split.
pub fn evaluate_chip(
    setup: &PointSetup,
    prep: &Prepared,
    seed: u64,
    dies: Dies,
    chip: u64,
) -> ChipOutcome {
    evaluate_chip_with(setup, prep, seed, dies, chip, &ChipToggles::default())
}

/// [`evaluate_chip`] with some nonidealities scaled (by zero, for an error budget) or the
/// competition stage at its infinite-gain limit. The draws are the same whatever `toggles`.
pub fn evaluate_chip_with(
    setup: &PointSetup,
    prep: &Prepared,
    seed: u64,
    dies: Dies,
    chip: u64,
    toggles: &ChipToggles,
) -> ChipOutcome {
    let n_classes = prep.class_names.len();
    let mut out = ChipOutcome::empty(chip, n_classes);
    let d = &setup.design;
    // Weight stage k draws from [CHIP, (point,) chip, k]; the competition stage from
    // [CHIP, (point,) chip, COMPETITION_STREAM].
    let weight_process = if toggles.weight_mismatch == 1.0 {
        std::borrow::Cow::Borrowed(&d.process)
    } else {
        let mut p = d.process.clone();
        for tech in [&mut p.nmos, &mut p.pmos] {
            tech.a_vt_pair *= toggles.weight_mismatch;
            tech.a_beta_pair *= toggles.weight_mismatch;
        }
        std::borrow::Cow::Owned(p)
    };
    let mut wchip = setup.mapped.sample_chip(&weight_process, |k| {
        dies.stream(seed, domain::CHIP, &[chip, k as u64])
    });
    // Program-and-verify after the one-shot write (its own streams; none drawn when off).
    if let Some(pv) = &setup.program_verify {
        match program_verify(&mut wchip, pv, seed, dies, chip) {
            Ok(c) => out.programming = Some(c),
            Err(e) => {
                let kind = FailureKind::of_pipeline(&e);
                for (&t, &ideal) in prep.test_y.iter().zip(&prep.ideal_pred) {
                    out.record(DecisionOutcome::Failed(kind), t, ideal);
                }
                out.chip_error = Some(e.to_string());
                return out;
            }
        }
    }
    let mut chip_rng = dies.stream(seed, domain::CHIP, &[chip, COMPETITION_STREAM]);
    let built = (|| -> Result<_, PipelineError> {
        // Column trim: calibrated on this die's first weight stage before anything runs; its
        // DACs draw from a stream of their own.
        if let Some(t) = setup.trim.as_ref().filter(|t| t.design.columns) {
            let mut r = dies.stream(seed, domain::CHIP, &[chip, trim::COLUMN_TRIM_STREAM]);
            let gains = column_trim_gains(t, &wchip, &d.process, &d.conditions, &mut r)?;
            wchip.trim_input_lines(&gains);
        }
        let mut eff = wchip.effective(&d.conditions)?;
        if toggles.read_noise != 1.0 {
            eff.scale_read_noise(toggles.read_noise);
        }
        let t = d.conditions.temperature_k;
        let temp = t;
        let decider = build_decider(
            &d.competition,
            &d.process,
            t,
            &mut chip_rng,
            toggles.competition_mismatch,
            toggles.infinite_gain,
        )?;
        let hidden = match &d.hidden_circuit {
            Some(h) if eff.stages().len() == 2 => {
                let mut r = dies.stream(seed, domain::CHIP, &[chip, HIDDEN_CIRCUIT_STREAM]);
                Some(build_decider(
                    h,
                    &d.process,
                    t,
                    &mut r,
                    toggles.hidden_mismatch,
                    false,
                )?)
            }
            _ => None,
        };
        // Trim: calibrated on this die's own circuit; its DAC draws from a stream of its own.
        let gains = match setup.trim.as_ref().filter(|t| t.design.lines) {
            Some(t) => {
                let mut r = dies.stream(seed, domain::CHIP, &[chip, trim::TRIM_STREAM]);
                // Calibrated at its own temperature: the same draws evaluated there.
                let at_cal = if t.design.calibration_temperature_k != temp {
                    let mut c = dies.stream(seed, domain::CHIP, &[chip, COMPETITION_STREAM]);
                    Some(build_decider(
                        &d.competition,
                        &d.process,
                        t.design.calibration_temperature_k,
                        &mut c,
                        toggles.competition_mismatch,
                        toggles.infinite_gain,
                    )?)
                } else {
                    None
                };
                let cal = at_cal.as_ref().unwrap_or(&decider);
                Some(trim_gains(t, cal, &d.process, temp, eff.outputs(), &mut r)?)
            }
            None => None,
        };
        Ok((eff, decider, hidden, gains))
    })();
    let (eff, decider, hidden, gains) = match built {
        Ok(x) => x,
        Err(e) => {
            // Every decision of an unbuildable chip is a failed one, of the build error's kind;
            // the reason is kept.
            let kind = FailureKind::of_pipeline(&e);
            for (&t, &ideal) in prep.test_y.iter().zip(&prep.ideal_pred) {
                out.record(DecisionOutcome::Failed(kind), t, ideal);
            }
            out.chip_error = Some(e.to_string());
            return out;
        }
    };
    let mut currents = vec![0.0; eff.outputs()];
    let mut noisy = vec![0.0; eff.outputs()];
    let mut trimmed = vec![0.0; eff.outputs()];
    let mut scratch: ChainScratch = eff.scratch();
    let noisy_weights = eff.stages().iter().any(|s| s.has_read_noise());
    let mut ws = Workspace::new();
    // The hysteretic WTA's own workspace (its kept state) and its transient end state.
    let mut hws = Workspace::new();
    let mut hstate: Vec<f64> = Vec::new();
    let mut tws = TransientWorkspace::new();
    let mut sol = StageSolution::default();
    let mut hsol = StageSolution::default();
    let mut hbuf = vec![0.0; eff.stages().first().map_or(0, |s| s.outputs())];
    let mut xbuf: Vec<f64> = Vec::with_capacity(prep.test_u.ncols());
    // Sum of decision times, energies, and their count (transient evaluation).
    let mut out_time = (0.0, 0.0, 0u64);
    let noise_stream =
        |i: usize, source: u64| dies.stream(seed, domain::SAMPLE_NOISE, &[chip, i as u64, source]);
    let static_noise = d.static_input_noise();
    // DC decisions of the WTA are solved in batches (`dc::solve_batch`): a sample's inputs wait
    // in `pending` and are decided and recorded in sample order.
    let mut pending = DcBatch::default();
    for (i, (row, &truth)) in prep.test_u.outer_iter().zip(&prep.test_y).enumerate() {
        // One stream per sample and noise source, made only when the source draws.
        let mut read_rng = noisy_weights.then(|| noise_stream(i, noise_source::READ));
        let x: &[f64] = match row.as_slice() {
            Some(s) => s,
            None => {
                xbuf.clear();
                xbuf.extend(row.iter());
                &xbuf
            }
        };
        // This sample's failure reason, if any; kept after the pending decisions' (sample order).
        let mut sample_first: Option<String> = None;
        let first = &mut sample_first;
        let rows = &mut pending.rows;
        let result = (|| -> Result<(usize, bool), FailureKind> {
            // Weight stage(s), and with a hidden circuit its normaliser in between.
            match (&hidden, eff.stages()) {
                (Some(h), [stage0, stage1]) => {
                    // Hidden stage evaluated as a circuit: first layer, normaliser circuit (its
                    // shares feed the read-out as they do in the closed form), read-out layer.
                    match read_rng.as_mut() {
                        Some(r) => stage0.forward(x, &mut hbuf, r),
                        None => stage0.forward_noiseless(x, &mut hbuf),
                    }
                    .map_err(|e| failed(first, FailureKind::WeightStage, e))?;
                    let solved = match h {
                        Decider::Argmax
                        | Decider::Limit(_)
                        | Decider::Hysteretic(_)
                        | Decider::Ranking(_) => Ok(()),
                        Decider::Wta(c) => c.solve(&hbuf, &mut ws, &mut hsol),
                        Decider::DiffPair(c) => c.solve(&hbuf, &mut ws, &mut hsol),
                        Decider::KWinners(c) => c.solve(&hbuf, &mut ws, &mut hsol),
                        Decider::Cascade(c) => c.solve(&hbuf, &mut ws, &mut hsol),
                    };
                    solved.map_err(|e| {
                        failed(
                            first,
                            FailureKind::of_competition(&e),
                            format_args!("hidden stage: {e}"),
                        )
                    })?;
                    match read_rng.as_mut() {
                        Some(r) => stage1.forward(&hsol.shares, &mut currents, r),
                        None => stage1.forward_noiseless(&hsol.shares, &mut currents),
                    }
                    .map_err(|e| failed(first, FailureKind::WeightStage, e))?;
                }
                _ => match read_rng.as_mut() {
                    Some(r) => eff.forward(x, &mut scratch, &mut currents, r),
                    None => eff.forward_noiseless(x, &mut scratch, &mut currents),
                }
                .map_err(|e| failed(first, FailureKind::WeightStage, e))?,
            }
            // Static (input-referred) noise: only where no transient SDE owns it; its stream
            // is made only when it draws.
            let inputs: &[f64] = if static_noise {
                let mut input_rng = noise_stream(i, noise_source::INPUT);
                d.competition_inputs_scaled(
                    &currents,
                    &mut noisy,
                    &mut input_rng,
                    toggles.shot_noise,
                )
                .map_err(|e| failed(first, FailureKind::Noise, e))?
            } else {
                &currents
            };
            // Each line through its trimmed input mirror.
            let inputs: &[f64] = match &gains {
                Some(g) => {
                    for ((t, &i), &g) in trimmed.iter_mut().zip(inputs).zip(g) {
                        *t = i * g;
                    }
                    &trimmed
                }
                None => inputs,
            };
            match &decider {
                Decider::Argmax => crate::training::argmax(inputs)
                    .map(|w| (w, false))
                    .ok_or_else(|| {
                        failed(
                            first,
                            FailureKind::WeightStage,
                            "the weight stage's output currents are not finite",
                        )
                    }),
                Decider::Limit(f) => {
                    // Argmax of the inputs referred through each cell's sink mismatch.
                    let mut best: Option<(usize, f64)> = None;
                    for (k, (&i, &g)) in inputs.iter().zip(f).enumerate() {
                        let v = i * g;
                        if v.is_nan() {
                            best = None;
                            break;
                        }
                        if best.is_none_or(|(_, b)| v > b) {
                            best = Some((k, v));
                        }
                    }
                    best.map(|(w, _)| (w, false)).ok_or_else(|| {
                        failed(
                            first,
                            FailureKind::WeightStage,
                            "the weight stage's output currents are not finite",
                        )
                    })
                }
                Decider::Wta(c) => match &d.transient {
                    None => {
                        rows.extend_from_slice(inputs);
                        Ok((DEFERRED, false))
                    }
                    Some(t) => {
                        let mut noise_rng = noise_stream(i, noise_source::TRANSIENT);
                        let decision = transient_decision(
                            c.as_ref(),
                            inputs,
                            None,
                            t,
                            &mut noise_rng,
                            &mut tws,
                            &mut out_time,
                        )
                        .map_err(|e| failed(first, FailureKind::of_transient(&e), e))?;
                        Ok(winner_or_ambiguous(decision))
                    }
                },
                Decider::DiffPair(c) => {
                    solve_decide(c.as_ref(), inputs, &mut ws, &mut sol, &d.decision, first)
                }
                // State carries from one test sample to the next (the physical chip: the
                // previous winner holds): the DC solve starts from the state kept in `hws`;
                // a transient starts from the previous decision's end state.
                Decider::Hysteretic(c) => match &d.transient {
                    None => {
                        solve_decide(c.as_ref(), inputs, &mut hws, &mut sol, &d.decision, first)
                    }
                    Some(t) => {
                        let mut noise_rng = noise_stream(i, noise_source::TRANSIENT);
                        let decision = transient_decision(
                            c.as_ref(),
                            inputs,
                            (!hstate.is_empty()).then_some(&hstate[..]),
                            t,
                            &mut noise_rng,
                            &mut tws,
                            &mut out_time,
                        )
                        .map_err(|e| failed(first, FailureKind::of_transient(&e), e))?;
                        hstate.clear();
                        hstate.extend_from_slice(&tws.solution().node_voltages);
                        Ok(winner_or_ambiguous(decision))
                    }
                },
                Decider::KWinners(c) => {
                    let k = c.k();
                    match &d.transient {
                        None => match c.solve(inputs, &mut ws, &mut sol) {
                            Ok(()) => {
                                let top = d.decision.decide_top_k(&sol.shares, k);
                                Ok((top.scored_class(&sol.shares, truth), top.decision.ambiguous))
                            }
                            Err(e) => Err(failed(first, FailureKind::of_competition(&e), e)),
                        },
                        Some(t) => {
                            let mut noise_rng = noise_stream(i, noise_source::TRANSIENT);
                            let decision = transient_decision(
                                c.as_ref(),
                                inputs,
                                None,
                                t,
                                &mut noise_rng,
                                &mut tws,
                                &mut out_time,
                            )
                            .map_err(|e| failed(first, FailureKind::of_transient(&e), e))?;
                            let shares = &tws.solution().shares;
                            let top = t.options.rule.decide_top_k(shares, k);
                            Ok((
                                top.scored_class(shares, truth),
                                decision.is_none_or(|x| x.ambiguous),
                            ))
                        }
                    }
                }
                Decider::Cascade(c) => match &d.transient {
                    None => solve_decide(c.as_ref(), inputs, &mut ws, &mut sol, &d.decision, first),
                    Some(t) => {
                        let mut noise_rng = noise_stream(i, noise_source::TRANSIENT);
                        let noise = t
                            .noise
                            .as_ref()
                            .map(|o| (o, &mut noise_rng as &mut dyn rand::RngCore));
                        let r = c
                            .simulate(inputs, &t.options, noise, &mut tws)
                            .map_err(|e| failed(first, FailureKind::of_transient(&e), e))?;
                        add_time(&mut out_time, r.decision_time, r.energy);
                        // A group that never decided leaves the tree undecided.
                        Ok((
                            r.decision.winner,
                            r.decision.ambiguous || r.decision_time.is_none(),
                        ))
                    }
                },
                Decider::Ranking(c) => {
                    let mut noise_rng = noise_stream(i, noise_source::TRANSIENT);
                    let transient = d.transient.as_ref().map(|t| {
                        (
                            &t.options,
                            t.noise
                                .as_ref()
                                .map(|o| (o, &mut noise_rng as &mut dyn rand::RngCore)),
                        )
                    });
                    let rule = match &d.transient {
                        Some(t) => t.options.rule,
                        None => d.decision,
                    };
                    let r = c
                        .rank(inputs, &rule, transient, &mut ws, &mut tws)
                        .map_err(|e| failed(first, FailureKind::of_transient(&e), e))?;
                    // Time and energy: the steps' sum (DC: the per-step time model).
                    add_time(&mut out_time, r.time, r.energy);
                    Ok((r.scored_class(truth), r.ambiguous()))
                }
            }
        })();
        if let (Ok((DEFERRED, _)), Decider::Wta(c)) = (&result, &decider) {
            pending.samples.push((i, truth));
            if pending.samples.len() == DC_BATCH {
                pending.flush(c.as_ref(), &d.decision, &prep.ideal_pred, &mut out);
            }
            continue;
        }
        if let Decider::Wta(c) = &decider {
            pending.flush(c.as_ref(), &d.decision, &prep.ideal_pred, &mut out);
        }
        if out.first_failure.is_none() {
            out.first_failure = sample_first;
        }
        out.record(
            DecisionOutcome::judge(result, truth),
            truth,
            prep.ideal_pred[i],
        );
    }
    if let Decider::Wta(c) = &decider {
        pending.flush(c.as_ref(), &d.decision, &prep.ideal_pred, &mut out);
    }
    out.decision_time_sum = out_time.0;
    out.energy_sum = out_time.1;
    out.timed = out_time.2;
    out
}

/// One transient decision of a shared-node circuit, from `start` (the state a circuit that holds
/// state left) or from the options' initial state: time-limited runs give the decision at the
/// read-out time, others the decision that held to the end of the run. A decided run's time and
/// energy are added to `out_time`.
#[allow(clippy::too_many_arguments)]
fn transient_decision<C: crate::stages::competition::SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    start: Option<&[f64]>,
    t: &TransientEvaluation,
    noise_rng: &mut dyn rand::RngCore,
    tws: &mut TransientWorkspace,
    out_time: &mut (f64, f64, u64),
) -> Result<Option<crate::stages::competition::Decision>, TransientError> {
    let noise = t.noise.as_ref().map(|o| (o, noise_rng));
    let s = match start {
        Some(v) => simulate_from(c, inputs, v, &t.options, noise, tws)?,
        None => simulate(c, inputs, &t.options, noise, tws)?,
    };
    add_time(out_time, s.decision_time, s.energy_to_decision);
    Ok(if t.options.read_time.is_some() {
        s.decision_at_read
    } else {
        s.decision
    })
}

/// The winner and ambiguity of a transient decision; no decision held: as ambiguous as a
/// decision can be.
fn winner_or_ambiguous(decision: Option<crate::stages::competition::Decision>) -> (usize, bool) {
    decision.map_or((0, true), |d| (d.winner, d.ambiguous))
}

/// Add one decided run's time and energy to the chip's sums (time, energy, count).
fn add_time(out_time: &mut (f64, f64, u64), time: Option<f64>, energy: Option<f64>) {
    if let (Some(td), Some(e)) = (time, energy) {
        out_time.0 += td;
        out_time.1 += e;
        out_time.2 += 1;
    }
}

/// Winner marking a decision left to the batched DC solve (never a class index).
const DEFERRED: usize = usize::MAX;

/// Decisions handed to the batched DC solve at once: long enough that the solver's lanes stay
/// full while the slowest decisions finish (it refills a lane as soon as its decision leaves),
/// short enough to keep the waiting rows small (512 rows of N inputs).
const DC_BATCH: usize = 32 * crate::maths::LANES;

/// DC decisions of one chip waiting for the batched solve, in sample order.
#[derive(Default)]
struct DcBatch {
    /// Inputs, one row per waiting decision.
    rows: Vec<f64>,
    /// (test sample, true class) of each row.
    samples: Vec<(usize, usize)>,
    ws: BatchWorkspace,
    sols: Vec<StageSolution>,
    results: Vec<Result<(), CompetitionError>>,
}

impl DcBatch {
    /// Solve every waiting decision and record them in sample order (failures by kind, the
    /// first reason kept), as `solve_decide` would one by one.
    fn flush<C: crate::stages::competition::SharedNodeCircuit + ?Sized>(
        &mut self,
        c: &C,
        rule: &DecisionRule,
        ideal: &[usize],
        out: &mut ChipOutcome,
    ) {
        let m = self.samples.len();
        if m == 0 {
            return;
        }
        if self.sols.len() < m {
            self.sols.resize_with(m, StageSolution::default);
            self.results.resize_with(m, || Ok(()));
        }
        solve_batch(
            c,
            &self.rows,
            &mut self.ws,
            &mut self.sols[..m],
            &mut self.results[..m],
        );
        for (j, &(i, truth)) in self.samples.iter().enumerate() {
            let result = match &self.results[j] {
                Ok(()) => {
                    let d = self.sols[j].decide(rule);
                    Ok((d.winner, d.ambiguous))
                }
                Err(e) => Err(failed(
                    &mut out.first_failure,
                    FailureKind::of_competition(e),
                    e,
                )),
            };
            out.record(DecisionOutcome::judge(result, truth), truth, ideal[i]);
        }
        self.rows.clear();
        self.samples.clear();
    }
}

/// The trim gains of one die: its DAC errors drawn from `rng`, then the calibration of
/// [`trim::TrimDesign::calibrate`] measured on the die's own competition stage (DC solves).
/// The gains apply at `temperature_k` (the operating temperature): a DAC threshold error's
/// effect, exp(-dV / (n U_T)), follows U_T.
fn trim_gains(
    t: &TrimSetup,
    decider: &Decider,
    process: &Process,
    temperature_k: f64,
    lines: usize,
    rng: &mut crate::rng::Stream,
) -> Result<Vec<f64>, PipelineError> {
    // Refused by `PointSetup::with_trim` already; kept here so no circuit is calibrated by a
    // measurement that does not exist.
    let unsupported = match decider {
        Decider::Hysteretic(_) => Some("hysteretic_wta"),
        Decider::KWinners(_) => Some("k_winners"),
        Decider::Cascade(_) => Some("cascade"),
        Decider::Ranking(_) => Some("repeated_max"),
        _ => None,
    };
    if let Some(circuit) = unsupported {
        return Err(trim::TrimError::Circuit { circuit }.into());
    }
    let dacs = t.design.draw_dacs(lines, process.nmos.a_beta_pair, rng);
    let mut ws = Workspace::new();
    let mut sol = StageSolution::default();
    let mut ratio = |x: &[f64], k: usize| -> Result<f64, CompetitionError> {
        let out = |sol: &StageSolution| (sol.outputs[k] / sol.outputs[0]).ln();
        Ok(match decider {
            Decider::Wta(c) => {
                c.solve(x, &mut ws, &mut sol)?;
                out(&sol)
            }
            Decider::DiffPair(c) => {
                c.solve(x, &mut ws, &mut sol)?;
                out(&sol)
            }
            Decider::Limit(f) => (x[k] * f[k]).ln() - (x[0] * f[0]).ln(),
            Decider::Argmax => (x[k] / x[0]).ln(),
            // Returned above.
            Decider::Hysteretic(_)
            | Decider::KWinners(_)
            | Decider::Cascade(_)
            | Decider::Ranking(_) => f64::NAN,
        })
    };
    let n_ut = |kelvin: f64| process.nmos.n * crate::physics::thermal_voltage(kelvin);
    let cal_t = t.design.calibration_temperature_k;
    let (gains, codes) = t
        .design
        .calibrate(lines, t.level_a, &dacs, n_ut(cal_t), &mut ratio)??;
    if t.design.unit_vt_sigma() == 0.0 || temperature_k == cal_t {
        return Ok(gains);
    }
    // The codes found at the calibration temperature, their gains where the die runs.
    Ok(codes
        .iter()
        .zip(&dacs)
        .enumerate()
        .map(|(k, (&c, dac))| match k {
            0 => 1.0,
            _ => t.design.gain_of(c, dac, n_ut(temperature_k)),
        })
        .collect())
}

/// The column-trim gains of one die (bias line last): its DAC errors drawn from `rng`, the
/// first weight stage's column currents measured at the calibration temperature, each column
/// brought to its nominal current by [`trim::TrimDesign::calibrate_columns`]; the gains at the
/// operating conditions' temperature.
fn column_trim_gains(
    t: &TrimSetup,
    chip: &ChainChip,
    process: &Process,
    conditions: &Conditions,
    rng: &mut crate::rng::Stream,
) -> Result<Vec<f64>, PipelineError> {
    let Some(first) = chip.stages().first() else {
        return Err(trim::TrimError::Lines { lines: 0 }.into());
    };
    let columns = first.inputs() + 1;
    let dacs = t.design.draw_dacs(columns, process.nmos.a_beta_pair, rng);
    let cal_t = t.design.calibration_temperature_k;
    let at_cal = Conditions {
        temperature_k: cal_t,
        ..*conditions
    };
    let die = first.column_currents(&at_cal)?;
    let n_ut = |kelvin: f64| process.nmos.n * crate::physics::thermal_voltage(kelvin);
    let codes = t.design.calibrate_columns(
        &die,
        &t.column_reference,
        &t.column_levels,
        &dacs,
        n_ut(cal_t),
    );
    Ok(codes
        .iter()
        .zip(&dacs)
        .map(|(&c, dac)| t.design.gain_of(c, dac, n_ut(conditions.temperature_k)))
        .collect())
}

/// One DC solve and decision: `(winner, ambiguous)`, or the failure's kind (its reason kept in
/// `first_failure` if it is the first).
fn solve_decide<S: CompetitionStage + ?Sized>(
    stage: &S,
    inputs: &[f64],
    ws: &mut Workspace,
    sol: &mut StageSolution,
    rule: &DecisionRule,
    first_failure: &mut Option<String>,
) -> Result<(usize, bool), FailureKind> {
    match stage.solve(inputs, ws, sol) {
        Ok(()) => {
            let d = sol.decide(rule);
            Ok((d.winner, d.ambiguous))
        }
        Err(e) => Err(failed(first_failure, FailureKind::of_competition(&e), e)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stages::competition::InputSummary;

    /// Every decision lands in exactly one of correct / wrong / ambiguous / failed-by-kind, and
    /// the kinds follow the error that caused them (DEVELOPERS.md "Decisions and failures";
    /// before typed outcomes every failure was one bare count).
    #[test]
    fn decisions_are_counted_once_with_their_failure_kind() {
        let inputs = InputSummary::of(&[1e-9, 2e-9]);
        let compliance = CompetitionError::Compliance {
            stage: "s",
            parameter: "p",
            reason: "r",
            fix: "f",
            inputs,
        };
        let not_conv = CompetitionError::NotConverged {
            stage: "s",
            iterations: 3,
            residual: 1.0,
            tolerance: 1e-8,
            inputs,
        };
        let bad_input = CompetitionError::InvalidInput {
            stage: "s",
            index: 0,
            value: f64::NAN,
            unit: "A",
            nonnegative: true,
        };
        assert_eq!(
            FailureKind::of_competition(&compliance),
            FailureKind::OutOfSupplyCompliance
        );
        assert_eq!(
            FailureKind::of_competition(&not_conv),
            FailureKind::NotConverged
        );
        assert_eq!(
            FailureKind::of_competition(&bad_input),
            FailureKind::WeightStage
        );
        assert_eq!(
            FailureKind::of_transient(&TransientError::Stage(compliance.clone())),
            FailureKind::OutOfSupplyCompliance
        );
        let mut o = ChipOutcome::empty(0, 3);
        type Case = (Result<(usize, bool), FailureKind>, usize, usize);
        let results: [Case; 7] = [
            (Ok((1, false)), 1, 1),                          // correct, agrees
            (Ok((2, false)), 1, 2),                          // wrong, agrees with ideal
            (Ok((0, true)), 0, 0),                           // ambiguous
            (Err(FailureKind::NotConverged), 2, 2),          // failed
            (Err(FailureKind::OutOfSupplyCompliance), 2, 2), // failed
            (Err(FailureKind::WeightStage), 0, 0),           // failed
            (Err(FailureKind::Noise), 1, 1),                 // failed
        ];
        for (r, truth, ideal) in results {
            o.record(DecisionOutcome::judge(r, truth), truth, ideal);
        }
        assert_eq!(o.samples, 7);
        assert_eq!((o.correct, o.agree, o.ambiguous), (1, 2, 1));
        assert_eq!(
            o.failed,
            FailureCounts {
                not_converged: 1,
                out_of_supply_compliance: 1,
                weight_stage: 1,
                noise: 1
            }
        );
        assert_eq!(o.failed.total(), 4);
        let confusion_total: u64 = o.confusion.iter().flatten().sum();
        assert_eq!(confusion_total, 7);
        // Failed decisions sit in the last confusion column, ambiguous ones before it.
        assert_eq!(o.confusion[2][4], 2);
        assert_eq!(o.confusion[0][3], 1);
        assert_eq!(
            DecisionOutcome::judge(Ok((2, false)), 1),
            DecisionOutcome::Wrong { winner: 2 }
        );
    }
}
