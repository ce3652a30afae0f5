//! The classifier on a chip: trained weights mapped onto a weight stage feeding a competition
//! stage; one chip's forward pass over a test split; per-chip metrics.
//!
//! Numerical core: no I/O, no printing. Every random draw comes from keyed streams:
//! - chip (static) draws: `rng::stream(seed, [CHIP, point, chip])`, weight stage first, then
//!   the competition stage's transistors, in a fixed order;
//! - per-decision noise: `rng::stream(seed, [SAMPLE_NOISE, point, chip])`, consumed sample by
//!   sample in test-set order by the one thread that evaluates the chip.
//!
//! So a chip's outcome depends only on (seed, point, chip), never on thread scheduling.

use ndarray::Array2;

use crate::data::{stratified_split, Dataset};
use crate::device::mismatch::sample_mismatch;
use crate::device::Process;
use crate::rng::{domain, stream};
use crate::stages::competition::diffpair::{DiffPairChip, DiffPairDesign};
use crate::stages::competition::noise::InputShotNoise;
use crate::stages::competition::wta::{WtaChip, WtaDesign};
use crate::stages::competition::{
    CompetitionError, CompetitionStage, DecisionRule, StageSolution, Workspace,
};
use crate::stages::weights::{Conditions, MappedStage, WeightStageDesign};
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
    /// Float weights on [0, 1] inputs (classes x features) and biases.
    pub weights: Array2<f64>,
    pub bias: ndarray::Array1<f64>,
    /// Ideal argmax of the mapped weights, per test sample.
    pub ideal_pred: Vec<usize>,
    /// The linfa model's own predictions, per test sample.
    pub baseline_pred: Vec<usize>,
    pub ideal_acc: f64,
    pub baseline_acc: f64,
}

/// Split, train and evaluate the references.
pub fn prepare(
    dataset: &Dataset,
    test_fraction: f64,
    split_seed: u64,
    trainer: &dyn Trainer,
) -> Result<Prepared, PipelineError> {
    let (train, test) = stratified_split(dataset, test_fraction, split_seed)?;
    let model = trainer.train(&train)?;
    let test_u = model.scale(test.x.view())?;
    let ideal_pred = model.predict_ideal(test.x.view())?;
    let baseline_pred = model.predict_baseline(test.x.view())?;
    Ok(Prepared {
        dataset_name: dataset.name.clone(),
        class_names: dataset.class_names.clone(),
        n_features: dataset.n_features(),
        n_train: train.n_samples(),
        ideal_acc: accuracy(&ideal_pred, &test.y),
        baseline_acc: accuracy(&baseline_pred, &test.y),
        test_u,
        test_y: test.y.clone(),
        weights: model.linear.weights.clone(),
        bias: model.linear.bias.clone(),
        ideal_pred,
        baseline_pred,
    })
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

/// Everything nominal about one design point.
#[derive(Debug, Clone)]
pub struct ClassifierDesign {
    pub process: Process,
    pub weights: WeightStageDesign,
    pub competition: CompetitionDesign,
    pub decision: DecisionRule,
    /// Per-decision input-referred shot noise of the competition stage's inputs.
    pub input_noise: Option<InputShotNoise>,
    pub conditions: Conditions,
}

/// A design point ready for chips: the design and the weights mapped onto it.
#[derive(Debug, Clone)]
pub struct PointSetup {
    pub design: ClassifierDesign,
    pub mapped: MappedStage,
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
        let mapped = design.weights.map(prep.weights.view(), prep.bias.view())?;
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

enum Decider {
    Wta(Box<crate::stages::competition::wta::WtaCircuit>),
    DiffPair(Box<crate::stages::competition::diffpair::DiffPairCircuit>),
    Argmax,
}

/// Evaluate chip `chip` of sweep point `point` over the whole test split.
pub fn evaluate_chip(
    setup: &PointSetup,
    prep: &Prepared,
    seed: u64,
    point: u64,
    chip: u64,
) -> ChipOutcome {
    let n_classes = prep.class_names.len();
    let mut out = ChipOutcome::empty(chip, n_classes);
    let d = &setup.design;
    let mut chip_rng = stream(seed, &[domain::CHIP, point, chip]);
    let wchip = setup.mapped.sample_chip(&d.process, &mut chip_rng);
    let built = (|| -> Result<_, PipelineError> {
        let eff = wchip.effective(&d.conditions)?;
        let decider = match &d.competition {
            CompetitionDesign::Argmax => Decider::Argmax,
            CompetitionDesign::CurrentWta(w) => {
                let tech = d.process.nmos.clone();
                let cchip =
                    WtaChip::sample((**w).clone(), |t| sample_mismatch(&mut chip_rng, &tech, t))?;
                Decider::Wta(Box::new(cchip.at(d.conditions.temperature_k)?))
            }
            CompetitionDesign::DiffPair(w) => {
                let tech = d.process.nmos.clone();
                let cchip = DiffPairChip::sample((**w).clone(), |t| {
                    sample_mismatch(&mut chip_rng, &tech, t)
                })?;
                Decider::DiffPair(Box::new(cchip.at(d.conditions.temperature_k)?))
            }
        };
        Ok((eff, decider))
    })();
    let (eff, decider) = match built {
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
    let mut noise_rng = stream(seed, &[domain::SAMPLE_NOISE, point, chip]);
    let mut currents = vec![0.0; eff.outputs()];
    let mut noisy = vec![0.0; eff.outputs()];
    let mut ws = Workspace::new();
    let mut sol = StageSolution::default();
    let noisy_weights = eff.has_read_noise();
    for (i, (row, &truth)) in prep.test_u.outer_iter().zip(&prep.test_y).enumerate() {
        out.samples += 1;
        let x = row
            .as_slice()
            .map(|s| s.to_vec())
            .unwrap_or_else(|| row.to_vec());
        let r = if noisy_weights {
            eff.forward(&x, &mut currents, &mut noise_rng)
        } else {
            eff.forward_noiseless(&x, &mut currents)
        };
        if r.is_err() {
            out.nonconverged += 1;
            out.confusion[truth][n_classes + 1] += 1;
            continue;
        }
        let inputs: &[f64] = match &d.input_noise {
            Some(n) => {
                if n.apply(&currents, &mut noisy, &mut noise_rng).is_err() {
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
            Decider::Wta(c) => solve_decide(
                c.as_ref(),
                inputs,
                &mut ws,
                &mut sol,
                &d.decision,
                &mut out.first_failure,
            ),
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
