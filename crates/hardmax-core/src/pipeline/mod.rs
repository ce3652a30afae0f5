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

pub mod cost;

use ndarray::{Array1, Array2, Axis};

use crate::data::{stratified_split, Dataset, MinMaxScaler};
use crate::device::mismatch::sample_mismatch;
use crate::device::Process;
use crate::rng::{domain, stream};
use crate::stages::competition::diffpair::{DiffPairChip, DiffPairDesign};
use crate::stages::competition::noise::InputShotNoise;
use crate::stages::competition::transient::{
    simulate, NoiseOptions, TransientOptions, TransientWorkspace,
};
use crate::stages::competition::wta::{WtaChip, WtaDesign};
use crate::stages::competition::{
    CompetitionError, CompetitionStage, DecisionRule, StageSolution, Workspace,
};
use crate::stages::weights::{
    random_hidden_weights, ChainDesign, ChainScratch, Conditions, HiddenNonlinearity, MappedChain,
    WeightStageDesign,
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
    #[error("{what} is not a finite number; check the dataset and the weight-stage settings")]
    NonFinite { what: &'static str },
    #[error("{what}")]
    Unsupported { what: &'static str },
    #[error("{what}; give one row per hidden unit with one weight per feature and the bias last")]
    Shape { what: String },
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
pub fn prepare(
    dataset: &Dataset,
    test_fraction: f64,
    split_seed: u64,
    trainer: &dyn Trainer,
    hidden: Option<&HiddenSpec>,
) -> Result<Prepared, PipelineError> {
    let (train, test) = stratified_split(dataset, test_fraction, split_seed)?;
    if let Some(spec) = hidden {
        return prepare_hidden(dataset, &train, &test, spec);
    }
    let model = trainer.train(&train)?;
    let test_u = model.scale(test.x.view())?;
    let ideal_pred = model.predict_ideal(test.x.view())?;
    let baseline_pred = model.predict_baseline(test.x.view())?;
    Ok(Prepared::assemble(
        dataset,
        &train,
        &test,
        test_u,
        vec![(model.linear.weights.clone(), model.linear.bias.clone())],
        None,
        [ideal_pred, baseline_pred],
    ))
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
    Ok(Prepared::assemble(
        dataset,
        train,
        test,
        test_u,
        layers,
        Some(spec),
        [ideal_pred, baseline_pred],
    ))
}

/// The competition stage of a classifier design.
#[derive(Debug, Clone)]
pub enum CompetitionDesign {
    /// Current-mode WTA (full EKV DC solve per decision).
    CurrentWta(Box<WtaDesign>),
    /// Multi-input differential pair fed with the weight-stage currents.
    DiffPair(Box<DiffPairDesign>),
    /// Exact argmax of the weight stage's output currents (no circuit).
    Argmax,
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
    /// Per-decision input-referred shot noise of the competition stage's inputs (DC evaluation).
    pub input_noise: Option<InputShotNoise>,
    /// Evaluate the current-mode WTA in time (decision time, energy) instead of at DC.
    pub transient: Option<TransientEvaluation>,
    /// With a hidden stage: evaluate its normaliser as this circuit (every transistor with its
    /// own mismatch, DC solve) instead of the weak-inversion closed form used for training.
    pub hidden_circuit: Option<CompetitionDesign>,
    pub conditions: Conditions,
}

/// A design point ready for chips: the design and the weights mapped onto it.
#[derive(Debug, Clone)]
pub struct PointSetup {
    pub design: ClassifierDesign,
    pub mapped: MappedChain,
}

impl PointSetup {
    /// Map the prepared classifier's weights onto the design's weight stage.
    pub fn new(design: ClassifierDesign, prep: &Prepared) -> Result<Self, PipelineError> {
        design.weights.validate()?;
        design.conditions.validate()?;
        match &design.competition {
            CompetitionDesign::CurrentWta(w) => w.validate()?,
            CompetitionDesign::DiffPair(w) => w.validate()?,
            CompetitionDesign::Argmax => {}
        }
        if let Some(n) = &design.input_noise {
            n.validate()?;
        }
        if design.transient.is_some()
            && !matches!(design.competition, CompetitionDesign::CurrentWta(_))
        {
            return Err(PipelineError::Unsupported {
                what: "the transient evaluation is available for the current-mode WTA only; \
                       use evaluation = \"dc\" or circuit = \"current_wta\"",
            });
        }
        let chain = chain_design(&design.weights, prep.layers.len(), prep.hidden.as_ref());
        let layers: Vec<_> = prep
            .layers
            .iter()
            .map(|(w, b)| (w.view(), b.view()))
            .collect();
        let mapped = chain.map(&layers)?;
        Ok(Self { design, mapped })
    }

    /// One line describing the competition stage, for manifests and reports.
    pub fn describe(&self) -> String {
        match &self.design.competition {
            CompetitionDesign::Argmax => "exact argmax of the weight-stage currents".into(),
            CompetitionDesign::DiffPair(w) => format!(
                "multi-input differential pair, {} inputs, pair devices {} x {}, {:?} inputs",
                w.n,
                crate::units::format_si(w.pair.w, "m", 3),
                crate::units::format_si(w.pair.l, "m", 3),
                w.input
            ),
            CompetitionDesign::CurrentWta(w) => format!(
                "current-mode WTA, {} cells, sink {} x {}, output {} x {}, {}",
                w.n,
                crate::units::format_si(w.sink.w, "m", 3),
                crate::units::format_si(w.sink.l, "m", 3),
                crate::units::format_si(w.output.w, "m", 3),
                crate::units::format_si(w.output.l, "m", 3),
                match w.bias {
                    crate::stages::competition::wta::WtaBias::Ideal { current } =>
                        format!("ideal bias {}", crate::units::format_si(current, "A", 3)),
                    crate::stages::competition::wta::WtaBias::Transistor {
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
    /// Solves that did not converge or left the circuit's compliance range.
    pub nonconverged: u64,
    /// `confusion[true][pred]`, columns: classes, then ambiguous, then non-converged.
    pub confusion: Vec<Vec<u64>>,
    /// Sum of decision times and energies (transient evaluation), with their count.
    pub decision_time_sum: f64,
    pub energy_sum: f64,
    pub timed: u64,
    /// A chip that could not be built at all (e.g. a sampled device out of range).
    pub chip_error: Option<String>,
    /// The first failed decision's reason (solver or compliance), if any.
    pub first_failure: Option<String>,
}

impl ChipOutcome {
    fn empty(chip: u64, n_classes: usize) -> Self {
        Self {
            chip,
            samples: 0,
            correct: 0,
            agree: 0,
            ambiguous: 0,
            nonconverged: 0,
            confusion: vec![vec![0; n_classes + 2]; n_classes],
            decision_time_sum: 0.0,
            energy_sum: 0.0,
            timed: 0,
            chip_error: None,
            first_failure: None,
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

/// Sample and evaluate a competition circuit of a chip at its temperature.
fn build_decider(
    design: &CompetitionDesign,
    process: &Process,
    temperature: f64,
    rng: &mut crate::rng::Stream,
) -> Result<Decider, PipelineError> {
    let tech = process.nmos.clone();
    Ok(match design {
        CompetitionDesign::Argmax => Decider::Argmax,
        CompetitionDesign::CurrentWta(w) => {
            let c = WtaChip::sample((**w).clone(), |t| sample_mismatch(rng, &tech, t))?;
            Decider::Wta(Box::new(c.at(temperature)?))
        }
        CompetitionDesign::DiffPair(w) => {
            let c = DiffPairChip::sample((**w).clone(), |t| sample_mismatch(rng, &tech, t))?;
            Decider::DiffPair(Box::new(c.at(temperature)?))
        }
    })
}

enum Decider {
    Wta(Box<crate::stages::competition::wta::WtaCircuit>),
    DiffPair(Box<crate::stages::competition::diffpair::DiffPairCircuit>),
    Argmax,
}

/// Evaluate chip `chip` of a sweep point over the whole test split; `dies` says whether the
/// chip is the same die at every point ([`Dies::Paired`]) or a fresh one.
pub fn evaluate_chip(
    setup: &PointSetup,
    prep: &Prepared,
    seed: u64,
    dies: Dies,
    chip: u64,
) -> ChipOutcome {
    let n_classes = prep.class_names.len();
    let mut out = ChipOutcome::empty(chip, n_classes);
    let d = &setup.design;
    // Weight stage k draws from [CHIP, (point,) chip, k]; the competition stage from
    // [CHIP, (point,) chip, COMPETITION_STREAM].
    let wchip = setup.mapped.sample_chip(&d.process, |k| {
        dies.stream(seed, domain::CHIP, &[chip, k as u64])
    });
    let mut chip_rng = dies.stream(seed, domain::CHIP, &[chip, COMPETITION_STREAM]);
    let built = (|| -> Result<_, PipelineError> {
        let eff = wchip.effective(&d.conditions)?;
        let t = d.conditions.temperature_k;
        let decider = build_decider(&d.competition, &d.process, t, &mut chip_rng)?;
        let hidden = match &d.hidden_circuit {
            Some(h) if eff.stages().len() == 2 => {
                let mut r = dies.stream(seed, domain::CHIP, &[chip, HIDDEN_CIRCUIT_STREAM]);
                Some(build_decider(h, &d.process, t, &mut r)?)
            }
            _ => None,
        };
        Ok((eff, decider, hidden))
    })();
    let (eff, decider, hidden) = match built {
        Ok(x) => x,
        Err(e) => {
            // Every decision of an unbuildable chip is a failed one; the reason is kept.
            out.samples = prep.test_y.len() as u64;
            out.nonconverged = out.samples;
            for &t in &prep.test_y {
                out.confusion[t][n_classes + 1] += 1;
            }
            out.chip_error = Some(e.to_string());
            return out;
        }
    };
    let mut currents = vec![0.0; eff.outputs()];
    let mut noisy = vec![0.0; eff.outputs()];
    let mut scratch: ChainScratch = eff.scratch();
    let noisy_weights = eff.stages().iter().any(|s| s.has_read_noise());
    let mut ws = Workspace::new();
    let mut tws = TransientWorkspace::new();
    let mut sol = StageSolution::default();
    let mut hsol = StageSolution::default();
    let mut hbuf = vec![0.0; eff.stages().first().map_or(0, |s| s.outputs())];
    let mut xbuf: Vec<f64> = Vec::with_capacity(prep.test_u.ncols());
    let noise_stream =
        |i: usize, source: u64| dies.stream(seed, domain::SAMPLE_NOISE, &[chip, i as u64, source]);
    for (i, (row, &truth)) in prep.test_u.outer_iter().zip(&prep.test_y).enumerate() {
        out.samples += 1;
        // One stream per sample and source, made only when the source draws.
        let mut read_rng = noisy_weights.then(|| noise_stream(i, noise_source::READ));
        let x: &[f64] = match row.as_slice() {
            Some(s) => s,
            None => {
                xbuf.clear();
                xbuf.extend(row.iter());
                &xbuf
            }
        };
        let r = match (&hidden, eff.stages()) {
            (Some(h), [first, second]) => {
                // Hidden stage evaluated as a circuit: first layer, normaliser circuit (its
                // shares feed the read-out as they do in the closed form), read-out layer.
                let a = match read_rng.as_mut() {
                    Some(r) => first.forward(x, &mut hbuf, r),
                    None => first.forward_noiseless(x, &mut hbuf),
                };
                let hs = match h {
                    Decider::Argmax => None,
                    Decider::Wta(c) => Some(c.solve(&hbuf, &mut ws, &mut hsol)),
                    Decider::DiffPair(c) => Some(c.solve(&hbuf, &mut ws, &mut hsol)),
                };
                if let Some(Err(e)) = &hs {
                    if out.first_failure.is_none() {
                        out.first_failure = Some(format!("hidden stage: {e}"));
                    }
                }
                match (a, hs) {
                    (Ok(()), Some(Ok(()))) => match read_rng.as_mut() {
                        Some(r) => second.forward(&hsol.shares, &mut currents, r),
                        None => second.forward_noiseless(&hsol.shares, &mut currents),
                    }
                    .map_err(|_| ()),
                    _ => Err(()),
                }
            }
            _ => match read_rng.as_mut() {
                Some(r) => eff.forward(x, &mut scratch, &mut currents, r),
                None => eff.forward_noiseless(x, &mut scratch, &mut currents),
            }
            .map_err(|_| ()),
        };
        if r.is_err() {
            out.nonconverged += 1;
            out.confusion[truth][n_classes + 1] += 1;
            continue;
        }
        let inputs: &[f64] = match &d.input_noise {
            Some(n) => {
                let mut input_rng = noise_stream(i, noise_source::INPUT);
                if n.apply(&currents, &mut noisy, &mut input_rng).is_err() {
                    out.nonconverged += 1;
                    out.confusion[truth][n_classes + 1] += 1;
                    continue;
                }
                &noisy
            }
            None => &currents,
        };
        let decided = match &decider {
            Decider::Argmax => crate::training::argmax(inputs).map(|w| (w, false)),
            Decider::Wta(c) => match &d.transient {
                None => solve_decide(
                    c.as_ref(),
                    inputs,
                    &mut ws,
                    &mut sol,
                    &d.decision,
                    &mut out.first_failure,
                ),
                Some(t) => {
                    let mut noise_rng = noise_stream(i, noise_source::TRANSIENT);
                    let noise = t
                        .noise
                        .as_ref()
                        .map(|o| (o, &mut noise_rng as &mut dyn rand::RngCore));
                    match simulate(c.as_ref(), inputs, &t.options, noise, &mut tws) {
                        Ok(s) => {
                            // Time-limited: the decision at the read-out time; otherwise the
                            // decision that held to the end of the run.
                            let decision = if t.options.read_time.is_some() {
                                s.decision_at_read
                            } else {
                                s.decision
                            };
                            if let (Some(td), Some(e)) = (s.decision_time, s.energy_to_decision) {
                                out.decision_time_sum += td;
                                out.energy_sum += e;
                                out.timed += 1;
                            }
                            match decision {
                                Some(dec) => Some((dec.winner, dec.ambiguous)),
                                // No decision held: as ambiguous as a decision can be.
                                None => Some((0, true)),
                            }
                        }
                        Err(e) => {
                            if out.first_failure.is_none() {
                                out.first_failure = Some(e.to_string());
                            }
                            None
                        }
                    }
                }
            },
            Decider::DiffPair(c) => solve_decide(
                c.as_ref(),
                inputs,
                &mut ws,
                &mut sol,
                &d.decision,
                &mut out.first_failure,
            ),
        };
        match decided {
            None => {
                out.nonconverged += 1;
                out.confusion[truth][n_classes + 1] += 1;
            }
            Some((_, true)) => {
                out.ambiguous += 1;
                out.confusion[truth][n_classes] += 1;
            }
            Some((w, false)) => {
                if w == truth {
                    out.correct += 1;
                }
                if w == prep.ideal_pred[i] {
                    out.agree += 1;
                }
                if w < n_classes {
                    out.confusion[truth][w] += 1;
                }
            }
        }
    }
    out
}

/// One DC solve and decision; `None` when the solve failed (counted as non-converged).
fn solve_decide<S: CompetitionStage + ?Sized>(
    stage: &S,
    inputs: &[f64],
    ws: &mut Workspace,
    sol: &mut StageSolution,
    rule: &DecisionRule,
    first_failure: &mut Option<String>,
) -> Option<(usize, bool)> {
    match stage.solve(inputs, ws, sol) {
        Ok(()) => {
            let d = sol.decide(rule);
            Some((d.winner, d.ambiguous))
        }
        Err(e) => {
            if first_failure.is_none() {
                *first_failure = Some(e.to_string());
            }
            None
        }
    }
}
