//! Hardware-aware training of the read-out weight stage (DEVELOPERS.md model notes §6.2).
//!
//! The classifier is trained through the chip's soft competition instead of a float softmax:
//!
//! - parameters: the float weights `A = [W | b]` (classes x (features + 1), the bias as one more
//!   input line held at 1), exactly what the weight stage's shifted encoding maps;
//! - the encoding (`stages::weights::mapping`): per input line c_i = min_j A_ji, m = max of
//!   A - c, element target `T = w_min + span (A - c) / m` with span = range_use (w_max - w_min).
//!   The map is invariant to a per-line shift and a positive scale of A, so after every step A is
//!   put back in that canonical form (A - c) / m (the loss does not change), which also keeps the
//!   weights inside the element range: the range constraint is a projection;
//! - levels: T rounded to the element's levels in the forward pass ([`Rounding`]): to the
//!   nearest level with the gradient passed straight through (straight-through estimator; Y.
//!   Bengio, N. Léonard, A. Courville, arXiv:1308.3432, 2013), or stochastically (M. Gupta et
//!   al., ICML 2015: up with probability (t - lo) / (hi - lo)) with the exact level difference
//!   (L(hi) - L(lo)) / (hi - lo) as the gradient, an unbiased estimate of the expected loss's
//!   derivative. The straight-through iterate can stall at a rounding edge (its gradient at
//!   either neighbouring level points to the other); the expected loss under stochastic
//!   rounding is the interpolation of the levels' losses, so descent moves to the better level;
//! - injection (one chip per optimiser step, whole matrices drawn with
//!   `ndarray_rand::RandomExt::random_using` from `rng::stream(seed, [TRAINING, 1, step])`):
//!   `T' = T_q (1 + s_m E_1) + s_p (w_max - w_min) E_2` (element mismatch, multiplicative;
//!   programming error, additive in units of the element range), and one input-referred offset
//!   per competition line, `ln I_j + s_o e_j` (a sink threshold error multiplies its input
//!   current: model notes §4.1);
//! - currents `I_j = sum_i T'_ji x_i` (the unit current cancels in the shares);
//! - the competition stage's closed-form shares `I_j^g / sum_k I_k^g = softmax(g ln I_j)` with the
//!   design's gain g = kappa/sigma (model notes §4.1);
//! - loss: summed cross-entropy of those shares plus (l2 / 2) ||P_W||^2 on the canonical weights
//!   P = (A - c) / m (bias line not penalised).
//!
//! With [`SoftCompetition::Float`] and no element model the loss is exactly linfa's multinomial
//! objective, `sum -log softmax(A x)[y] + (l2/2) ||W||^2` (the check against linfa).
//!
//! Optimiser: Adam (D. P. Kingma, J. Ba, ICLR 2015) with its published defaults beta1 = 0.9,
//! beta2 = 0.999, eps = 1e-8, the learning rate decayed linearly to a tenth over the epochs
//! (common practice, no source); minibatches shuffled by `rng::stream(seed, [TRAINING, 0,
//! epoch])`. Deterministic for a seed, whatever the thread count.
//!
//! Stopping ([`Termination`]): without injection, at `gradient_tolerance` on the objective's
//! gradient norm (like the float trainer). With injection every epoch runs, and the run is
//! `converged` when the injected objective over the whole split, on 8 fixed drawn chips
//! (`stream(seed, [TRAINING, 2, k])`, the same for both weights: common random numbers) fell by
//! at most `plateau_tolerance` over the last tenth of the epochs. (Comparing epoch means of the
//! step losses, each step on its own chip and minibatch, was the first rule: the draws' spread
//! hid the trend in both directions.)

use ndarray::{s, Array1, Array2, ArrayView2, Axis};
use ndarray_rand::rand_distr::StandardNormal;
use ndarray_rand::RandomExt;
use rand::seq::SliceRandom;

use super::{TrainingDiagnostics, TrainingError};
use crate::rng::{domain, stream};

/// How the competition stage turns line currents into the soft output the loss sees.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum SoftCompetition {
    /// A float softmax of the scores `A x` (no circuit): linfa's model, the reference case.
    Float,
    /// The current-mode WTA's closed form: shares = softmax(g ln I_j).
    PowerLaw {
        /// g = kappa / sigma (> 0).
        gain: f64,
    },
}

/// How an element's programmable levels are spaced.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LevelSpacing {
    /// Evenly spaced values of [w_min, w_max] (linear element).
    Linear,
    /// Evenly spaced ln w (subthreshold element: evenly spaced stored voltages).
    Logarithmic,
}

/// The weight element as the trainer sees it (the shifted encoding).
#[derive(Debug, Clone, PartialEq)]
pub struct ElementModel {
    pub w_min: f64,
    pub w_max: f64,
    /// Fraction of the range the largest weight uses, (0, 1].
    pub range_use: f64,
    /// Number of programmable levels; `None` = continuous.
    pub levels: Option<u32>,
    pub spacing: LevelSpacing,
}

impl ElementModel {
    fn span(&self) -> f64 {
        self.range_use * (self.w_max - self.w_min)
    }

    /// The two levels around `t`, `lo <= t <= hi` (the top level belongs to the last
    /// interval), or `None` for a continuous element.
    fn bracket(&self, t: f64) -> Option<(f64, f64)> {
        let l = self.levels.filter(|&l| l >= 2)?;
        let k_max = f64::from(l - 2);
        Some(match self.spacing {
            LevelSpacing::Linear => {
                let step = (self.w_max - self.w_min) / f64::from(l - 1);
                let k = ((t.clamp(self.w_min, self.w_max) - self.w_min) / step)
                    .floor()
                    .clamp(0.0, k_max);
                (
                    self.w_min + k * step,
                    (self.w_min + (k + 1.0) * step).min(self.w_max),
                )
            }
            LevelSpacing::Logarithmic => {
                let (lo, hi) = (self.w_min.ln(), self.w_max.ln());
                let step = (hi - lo) / f64::from(l - 1);
                let k = ((t.clamp(self.w_min, self.w_max).ln() - lo) / step)
                    .floor()
                    .clamp(0.0, k_max);
                (
                    (lo + k * step).exp(),
                    (lo + (k + 1.0) * step).exp().min(self.w_max),
                )
            }
        })
    }

    /// The level nearest to `t` (the chip's rounding, `mapping::MappedStage::nominal_levels`).
    fn quantise(&self, t: f64) -> f64 {
        let Some(l) = self.levels.filter(|&l| l >= 2) else {
            return t.clamp(self.w_min, self.w_max);
        };
        match self.spacing {
            LevelSpacing::Linear => {
                let step = (self.w_max - self.w_min) / f64::from(l - 1);
                let t = t.clamp(self.w_min, self.w_max);
                (self.w_min + ((t - self.w_min) / step).round() * step)
                    .clamp(self.w_min, self.w_max)
            }
            LevelSpacing::Logarithmic => {
                let (lo, hi) = (self.w_min.ln(), self.w_max.ln());
                let step = (hi - lo) / f64::from(l - 1);
                let t = t.clamp(self.w_min, self.w_max).ln();
                (lo + ((t - lo) / step).round() * step).clamp(lo, hi).exp()
            }
        }
    }
}

/// Strengths of the injected nonidealities (each >= 0; 0 switches one off).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Injection {
    /// Relative sigma of each element's value (mismatch), multiplicative.
    pub weight_mismatch: f64,
    /// Sigma of each element's programming error, in units of the element range w_max - w_min.
    pub programming_error: f64,
    /// Relative sigma of each competition line's input-referred offset (log domain).
    pub competition_offset: f64,
    /// Round the element targets to the element's levels (how: [`Rounding`]).
    pub quantise: bool,
    /// How the forward pass rounds to the levels while training.
    pub rounding: Rounding,
}

/// How the training forward pass rounds element targets to the levels (the chip itself, and
/// every evaluation without a draw, rounds to the nearest level).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Rounding {
    /// Nearest level, gradient passed straight through (Bengio, Léonard, Courville, 2013).
    #[default]
    Nearest,
    /// Stochastic rounding (M. Gupta, A. Agrawal, K. Gopalakrishnan, P. Narayanan, "Deep
    /// Learning with Limited Numerical Precision", ICML 2015): round up with probability
    /// (t - lo) / (hi - lo), so E[T_q] = t and the expected loss is the interpolation of the
    /// loss between levels. Its gradient in t is estimated without bias by the level difference
    /// (L(hi) - L(lo)) / (hi - lo) with the other elements as drawn (exact for the linear
    /// currents: one line's current changes, one softmax term is recomputed).
    Stochastic,
}

impl Injection {
    /// Whether any draw or rounding acts.
    pub fn any(&self) -> bool {
        self.weight_mismatch > 0.0
            || self.programming_error > 0.0
            || self.competition_offset > 0.0
            || self.quantise
    }
}

/// Options of the hardware-aware trainer.
#[derive(Debug, Clone, PartialEq)]
pub struct HardwareAwareOptions {
    /// Passes over the training split.
    pub epochs: u32,
    /// Adam's step size at the first epoch (decays linearly to a tenth).
    pub learning_rate: f64,
    /// Samples per optimiser step (a batch larger than the split is the whole split).
    pub batch_size: usize,
    /// Seed of the minibatch order and the injected draws.
    pub seed: u64,
    /// L2 penalty weight on the (canonical) weights, bias line not penalised.
    pub l2: f64,
    pub injection: Injection,
    /// Stop early when the gradient norm of the objective (summed over the split) falls below
    /// this; only checked when nothing is injected (a noisy objective has no such point).
    pub gradient_tolerance: f64,
    /// With injection: converged when the injected objective over the whole split, averaged
    /// over 8 fixed drawn chips (the same for both), fell by at most this relative amount over
    /// the last window (a tenth of the epochs, at least one) of the run.
    pub plateau_tolerance: f64,
}

impl Default for HardwareAwareOptions {
    /// 60 epochs, learning rate 0.01, batches of 64, seed 1, l2 = 0.3 (the float trainer's),
    /// nothing injected. The numbers are common practice for Adam, no source.
    fn default() -> Self {
        Self {
            epochs: 60,
            learning_rate: 0.01,
            batch_size: 64,
            seed: 1,
            l2: 0.3,
            injection: Injection::default(),
            gradient_tolerance: 1e-2,
            plateau_tolerance: 0.05,
        }
    }
}

/// A validated hardware-aware trainer: its options and the chip model it trains through.
#[derive(Debug, Clone, PartialEq)]
pub struct HardwareAwareTrainer {
    options: HardwareAwareOptions,
    competition: SoftCompetition,
    element: Option<ElementModel>,
}

/// What the trainer returns: canonical weights and how the optimiser ended.
#[derive(Debug, Clone, PartialEq)]
pub struct HardwareTrained {
    /// Weights (classes x features), acting on [0, 1] inputs.
    pub weights: Array2<f64>,
    /// Biases (one per class).
    pub bias: Array1<f64>,
    /// Objective without injection and gradient norm at the result, and the convergence flag.
    pub diagnostics: TrainingDiagnostics,
    /// Epochs run (fewer than asked when the stopping rule stopped it).
    pub epochs_run: u32,
    /// Why training stopped.
    pub termination: Termination,
    /// With injection: the relative decrease of the injected objective (on fixed draws) over
    /// the last window, (before - after) / before (`None` without injection or with one
    /// epoch).
    pub window_decrease: Option<f64>,
    /// Optimiser steps taken.
    pub steps: u64,
}

/// Why the hardware-aware trainer stopped (like an optimiser's termination reason).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Termination {
    /// Nothing injected: the gradient norm of the objective reached `gradient_tolerance`.
    GradientTolerance,
    /// Injected: every epoch ran and the injected objective (on fixed draws) fell by at most
    /// `plateau_tolerance` over the last window.
    Plateau,
    /// The epochs ran out with the objective still falling (not converged).
    EpochLimit,
}

impl Termination {
    /// The name written to the results (`gradient_tolerance`, `plateau`, `epoch_limit`).
    pub fn as_str(&self) -> &'static str {
        match self {
            Termination::GradientTolerance => "gradient_tolerance",
            Termination::Plateau => "plateau",
            Termination::EpochLimit => "epoch_limit",
        }
    }
}

fn bad(key: &'static str, value: f64, hint: &'static str) -> TrainingError {
    TrainingError::InvalidOption {
        key,
        value: value.to_string(),
        hint,
    }
}

impl HardwareAwareTrainer {
    /// Check the options and the chip model; every refusal names the option and how to fix it.
    pub fn new(
        options: HardwareAwareOptions,
        competition: SoftCompetition,
        element: Option<ElementModel>,
    ) -> Result<Self, TrainingError> {
        let o = &options;
        if o.epochs == 0 {
            return Err(bad("epochs", 0.0, "use at least 1 (e.g. 60)"));
        }
        if !(o.learning_rate.is_finite() && o.learning_rate > 0.0) {
            return Err(bad(
                "learning_rate",
                o.learning_rate,
                "use a finite number > 0 (e.g. 0.01); 0 never moves the weights",
            ));
        }
        if o.batch_size == 0 {
            return Err(bad("batch_size", 0.0, "use at least 1 (e.g. 64)"));
        }
        if !(o.l2.is_finite() && o.l2 >= 0.0) {
            return Err(bad("l2", o.l2, "use a finite number >= 0 (e.g. 0.3)"));
        }
        for (key, v) in [
            ("weight_mismatch", o.injection.weight_mismatch),
            ("programming_error", o.injection.programming_error),
            ("competition_offset", o.injection.competition_offset),
        ] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(bad(
                    key,
                    v,
                    "an injection strength is a standard deviation: use a finite number >= 0 (0 = off)",
                ));
            }
        }
        for (key, v) in [
            ("gradient_tolerance", o.gradient_tolerance),
            ("plateau_tolerance", o.plateau_tolerance),
        ] {
            if !(v.is_finite() && v > 0.0) {
                return Err(bad(key, v, "use a finite number > 0"));
            }
        }
        if let SoftCompetition::PowerLaw { gain } = competition {
            if !(gain.is_finite() && gain > 0.0) {
                return Err(bad("gain", gain, "the gain kappa/sigma must be > 0"));
            }
            if element.is_none() {
                return Err(TrainingError::Shape(
                    "the power-law competition acts on element currents: give the element model"
                        .into(),
                ));
            }
        }
        if let Some(e) = &element {
            let ok_min = match e.spacing {
                LevelSpacing::Linear => e.w_min.is_finite() && e.w_min >= 0.0,
                LevelSpacing::Logarithmic => e.w_min.is_finite() && e.w_min > 0.0,
            };
            if !ok_min {
                return Err(bad(
                    "w_min",
                    e.w_min,
                    "use >= 0 (linear element) or > 0 (subthreshold element)",
                ));
            }
            if !(e.w_max.is_finite() && e.w_max > e.w_min) {
                return Err(bad("w_max", e.w_max, "use a finite number > w_min"));
            }
            if !(e.range_use.is_finite() && e.range_use > 0.0 && e.range_use <= 1.0) {
                return Err(bad("range_use", e.range_use, "greater than 0, at most 1"));
            }
            if let Some(l) = e.levels {
                if l < 2 {
                    return Err(bad("levels", f64::from(l), "an integer >= 2"));
                }
            }
        }
        Ok(Self {
            options,
            competition,
            element,
        })
    }

    pub fn options(&self) -> &HardwareAwareOptions {
        &self.options
    }

    /// Refuse an element range whose levels cannot hold the float optimum's sign pattern under
    /// the shifted encoding: after rounding to the levels, every input line (column) of the
    /// mapped float weights `a0` (classes x (features + 1)) carries the same target on every
    /// class line, so no class differs from another and the trainer has nothing to start from.
    pub fn check_expressible(&self, a0: ArrayView2<'_, f64>) -> Result<(), TrainingError> {
        let (Some(e), true) = (&self.element, self.options.injection.quantise) else {
            return Ok(());
        };
        let p = canonical(&a0.to_owned()).0;
        let t = p.mapv(|v| e.quantise(e.w_min + e.span() * v));
        let float_differs = canonical(&a0.to_owned())
            .0
            .columns()
            .into_iter()
            .any(|c| c.iter().any(|&v| v > 0.0));
        let any_differs = t.columns().into_iter().any(|c| {
            let first = c[0];
            c.iter().any(|&v| (v - first).abs() > 0.0)
        });
        if float_differs && !any_differs {
            return Err(TrainingError::InvalidOption {
                key: "range_use",
                value: e.range_use.to_string(),
                hint: "the used part of the element range is below half a level step: every element rounds to the same level, so the float weights' signs (which class line gets more current) cannot be expressed; raise range_use or the number of levels",
            });
        }
        Ok(())
    }

    /// Train on scaled inputs `u` (samples x features, in [0, 1]) with labels `y` (class
    /// indices < `n_classes`), starting from `init` = [W | b] (classes x (features + 1)) or from
    /// zeros.
    pub fn train(
        &self,
        u: ArrayView2<'_, f64>,
        y: &[usize],
        n_classes: usize,
        init: Option<ArrayView2<'_, f64>>,
    ) -> Result<HardwareTrained, TrainingError> {
        let (n, f) = u.dim();
        if n == 0 || n != y.len() {
            return Err(TrainingError::Shape(format!(
                "{n} samples but {} labels; give one label per sample",
                y.len()
            )));
        }
        if n_classes < 2 || y.iter().any(|&c| c >= n_classes) {
            return Err(TrainingError::Shape(
                "labels must be class indices below the class count (at least two classes)".into(),
            ));
        }
        if u.iter().any(|v| !v.is_finite()) {
            return Err(TrainingError::Shape("inputs must be finite".into()));
        }
        let x = augment(u);
        let mut a = match init {
            Some(a0) => {
                if a0.dim() != (n_classes, f + 1) {
                    return Err(TrainingError::Shape(format!(
                        "initial weights are {:?}, expected {n_classes} x {}",
                        a0.dim(),
                        f + 1
                    )));
                }
                if a0.iter().any(|v| !v.is_finite()) {
                    return Err(TrainingError::NonFiniteWeights);
                }
                a0.to_owned()
            }
            None => Array2::zeros((n_classes, f + 1)),
        };
        let chip = self.element.is_some();
        if chip {
            self.check_expressible(a.view())?;
            a = canonical(&a).0;
        }
        let o = &self.options;
        let mut m1 = Array2::<f64>::zeros(a.raw_dim());
        let mut m2 = Array2::<f64>::zeros(a.raw_dim());
        let (b1, b2, eps) = (0.9f64, 0.999f64, 1e-8);
        let batch = o.batch_size.min(n);
        let mut order: Vec<usize> = (0..n).collect();
        let mut step: u64 = 0;
        // The stopping rule's window: the last tenth of the epochs (at least one); the weights
        // where it began are kept.
        let window = (o.epochs / 10).max(1);
        let mut window_start: Option<Array2<f64>> = None;
        let mut epochs_run = 0;
        let mut window_decrease = None;
        let mut termination = Termination::EpochLimit;
        for epoch in 0..o.epochs {
            epochs_run = epoch + 1;
            if o.epochs >= 2 && epoch == o.epochs - window {
                window_start = Some(a.clone());
            }
            let lr = o.learning_rate * (1.0 - 0.9 * f64::from(epoch) / f64::from(o.epochs));
            order.sort_unstable();
            order.shuffle(&mut stream(
                o.seed,
                &[domain::TRAINING, 0, u64::from(epoch)],
            ));
            for chunk in order.chunks(batch) {
                let xb = x.select(Axis(0), chunk);
                let yb: Vec<usize> = chunk.iter().map(|&i| y[i]).collect();
                let draw = self.draw(n_classes, f + 1, step);
                // The batch estimates the summed objective: scale its data term by n / batch.
                let (loss, grad) = self.loss_grad(
                    &a,
                    xb.view(),
                    &yb,
                    draw.as_ref(),
                    n as f64 / chunk.len() as f64,
                );
                let _ = loss;
                step += 1;
                let t = step as i32;
                let (c1, c2) = (1.0 - b1.powi(t), 1.0 - b2.powi(t));
                ndarray::Zip::from(&mut a)
                    .and(&mut m1)
                    .and(&mut m2)
                    .and(&grad)
                    .for_each(|w, m, v, &g| {
                        *m = b1 * *m + (1.0 - b1) * g;
                        *v = b2 * *v + (1.0 - b2) * g * g;
                        *w -= lr * (*m / c1) / ((*v / c2).sqrt() + eps);
                    });
                if chip {
                    a = canonical(&a).0;
                }
                if a.iter().any(|v| !v.is_finite()) {
                    return Err(TrainingError::NonFiniteWeights);
                }
            }
            if !o.injection.any() {
                let (_, g) = self.loss_grad(&a, x.view(), y, None, 1.0);
                if norm(&g) <= o.gradient_tolerance {
                    termination = Termination::GradientTolerance;
                    break;
                }
            }
        }
        // With injection every epoch runs (the learning rate's decay is laid over them; stopping
        // at the first flat window was tried and stops before the decay has done its work):
        // the rule judges where the run ended.
        if o.injection.any() {
            if let Some(start) = &window_start {
                let decrease = self.window_decrease(start, &a, x.view(), y, n_classes);
                window_decrease = Some(decrease);
                if decrease <= o.plateau_tolerance {
                    termination = Termination::Plateau;
                }
            }
        }
        let (objective, g) = self.loss_grad(&a, x.view(), y, None, 1.0);
        let gradient_norm = norm(&g);
        let converged = termination != Termination::EpochLimit;
        Ok(HardwareTrained {
            weights: a.slice(s![.., ..f]).to_owned(),
            bias: a.column(f).to_owned(),
            diagnostics: TrainingDiagnostics {
                gradient_norm,
                gradient_tolerance: o.gradient_tolerance,
                objective,
                converged,
            },
            epochs_run,
            steps: step,
            termination,
            window_decrease,
        })
    }

    /// Relative decrease (before - after) / before of the injected objective over the whole
    /// split from weights `before` to `after`, both evaluated on the same
    /// [`PLATEAU_CHIPS`] fixed draws (common random numbers: the draws' own spread cancels in
    /// the difference, so a small window is not mistaken for a plateau by noise).
    fn window_decrease(
        &self,
        before: &Array2<f64>,
        after: &Array2<f64>,
        x: ArrayView2<'_, f64>,
        y: &[usize],
        n_classes: usize,
    ) -> f64 {
        let (mut lb, mut la) = (0.0, 0.0);
        for k in 0..PLATEAU_CHIPS {
            let d = self.draw_keyed(n_classes, x.ncols(), 2, k);
            lb += self.loss_grad(before, x, y, d.as_ref(), 1.0).0;
            la += self.loss_grad(after, x, y, d.as_ref(), 1.0).0;
        }
        (lb - la) / lb.abs().max(1e-300)
    }

    /// The objective (no injection) of weights [W | b] on scaled inputs `u`, labels `y`.
    pub fn objective(&self, a: ArrayView2<'_, f64>, u: ArrayView2<'_, f64>, y: &[usize]) -> f64 {
        let a = if self.element.is_some() {
            canonical(&a.to_owned()).0
        } else {
            a.to_owned()
        };
        self.loss_grad(&a, augment(u).view(), y, None, 1.0).0
    }

    /// One chip's injected draws for optimiser step `step`: (E_1, E_2, e), standard normals.
    /// With stochastic rounding also one uniform per element, drawn after the normals (so the
    /// nearest-rounding draws are unchanged).
    fn draw(&self, rows: usize, cols: usize, step: u64) -> Option<Draw> {
        self.draw_keyed(rows, cols, 1, step)
    }

    /// A draw from `stream(seed, [TRAINING, sub, index])` (sub 1: optimiser steps; sub 2: the
    /// fixed chips of the stopping rule).
    fn draw_keyed(&self, rows: usize, cols: usize, sub: u64, index: u64) -> Option<Draw> {
        let inj = &self.options.injection;
        let stochastic = self.stochastic_rounding();
        if self.element.is_none()
            || (inj.weight_mismatch == 0.0
                && inj.programming_error == 0.0
                && inj.competition_offset == 0.0
                && !stochastic)
        {
            return None;
        }
        let mut rng = stream(self.options.seed, &[domain::TRAINING, sub, index]);
        let mismatch = Array2::random_using((rows, cols), StandardNormal, &mut rng);
        let programming = Array2::random_using((rows, cols), StandardNormal, &mut rng);
        let offset = Array1::random_using(rows, StandardNormal, &mut rng);
        let uniform = stochastic.then(|| {
            Array2::random_using(
                (rows, cols),
                ndarray_rand::rand_distr::Uniform::new(0.0, 1.0),
                &mut rng,
            )
        });
        Some(Draw {
            mismatch,
            programming,
            offset,
            uniform,
        })
    }

    /// Whether training steps round stochastically (quantisation on, stochastic rounding, an
    /// element with levels).
    fn stochastic_rounding(&self) -> bool {
        let inj = &self.options.injection;
        inj.quantise
            && inj.rounding == Rounding::Stochastic
            && self
                .element
                .as_ref()
                .is_some_and(|e| e.levels.is_some_and(|l| l >= 2))
    }

    /// Loss and its gradient in A on augmented inputs `x` (the data term times `data_scale`),
    /// with the given draws (`None`: no injection; levels still round when asked).
    fn loss_grad(
        &self,
        a: &Array2<f64>,
        x: ArrayView2<'_, f64>,
        y: &[usize],
        draw: Option<&Draw>,
        data_scale: f64,
    ) -> (f64, Array2<f64>) {
        let (loss, g, _) = self.loss_grad_dx(a, x, y, draw, data_scale, false);
        (loss, g)
    }

    /// [`Self::loss_grad`], and with `want_dx` (chip model only) also the data term's gradient
    /// in the inputs `x` (times `data_scale`): dL/dx = dL/dI T' (currents I = x T'^T).
    fn loss_grad_dx(
        &self,
        a: &Array2<f64>,
        x: ArrayView2<'_, f64>,
        y: &[usize],
        draw: Option<&Draw>,
        data_scale: f64,
        want_dx: bool,
    ) -> (f64, Array2<f64>, Option<Array2<f64>>) {
        let f = a.ncols() - 1;
        let l2 = self.options.l2;
        let Some(e) = &self.element else {
            // Float: logits A x, the l2 term on W.
            let z = x.dot(&a.t());
            let (loss, d) = cross_entropy(&z, y, |_, _| 1.0);
            let mut g = d.t().dot(&x) * data_scale;
            let mut w = g.slice_mut(s![.., ..f]);
            w.scaled_add(l2, &a.slice(s![.., ..f]));
            let pen = 0.5 * l2 * a.slice(s![.., ..f]).iter().map(|v| v * v).sum::<f64>();
            return (loss * data_scale + pen, g, None);
        };
        let gain = match self.competition {
            SoftCompetition::PowerLaw { gain } => gain,
            SoftCompetition::Float => 1.0,
        };
        let inj = &self.options.injection;
        let (p, argmin, m, argmax) = canonical(a);
        let span = e.span();
        let t = p.mapv(|v| e.w_min + span * v);
        // Stochastic rounding: the bracketing levels of every element, and the drawn level.
        let brackets = match draw.and_then(|d| d.uniform.as_ref()) {
            Some(u) if inj.quantise => {
                let mut lo = Array2::zeros(t.raw_dim());
                let mut hi = Array2::zeros(t.raw_dim());
                let mut tq = Array2::zeros(t.raw_dim());
                for (idx, &v) in t.indexed_iter() {
                    let (l, h) = e.bracket(v).unwrap_or((v, v));
                    let frac = if h > l { (v - l) / (h - l) } else { 0.0 };
                    lo[idx] = l;
                    hi[idx] = h;
                    tq[idx] = if u[idx] < frac { h } else { l };
                }
                Some((lo, hi, tq))
            }
            _ => None,
        };
        let tq = match &brackets {
            Some((_, _, tq)) => tq.clone(),
            None if inj.quantise => t.mapv(|v| e.quantise(v)),
            None => t,
        };
        let (tn, mult) = apply_draw(
            tq,
            draw.map(|d| (&d.mismatch, &d.programming)),
            inj.weight_mismatch,
            inj.programming_error,
            e,
        );
        let currents = x.dot(&tn.t());
        // A line whose current would be at or below zero carries a floor current (its share is
        // then nil); no gradient flows through the floor.
        let floor = 1e-12 * (e.w_max * x.ncols() as f64).max(1e-300);
        let mut z = currents.mapv(|i| gain * i.max(floor).ln());
        let offsets: Array1<f64> = match draw {
            Some(d) => d.offset.mapv(|o| gain * inj.competition_offset * o),
            None => Array1::zeros(z.ncols()),
        };
        for mut row in z.rows_mut() {
            row += &offsets;
        }
        let (loss, d) = cross_entropy(&z, y, |r, k| {
            let i = currents[(r, k)];
            if i > floor {
                gain / i
            } else {
                0.0
            }
        });
        let dx = want_dx.then(|| d.dot(&tn) * data_scale);
        let mut gp = match &brackets {
            // Stochastic rounding: dE[L]/dT = (L(hi) - L(lo)) / (hi - lo) per element.
            Some((lo, hi, tq)) => {
                let ctx = LevelDifference {
                    x: x.view(),
                    y,
                    z: &z,
                    currents: &currents,
                    offsets: &offsets,
                    gain,
                    floor,
                };
                let ones;
                let mult = match &mult {
                    Some(m) => m,
                    None => {
                        ones = Array2::ones(lo.raw_dim());
                        &ones
                    }
                };
                ctx.gradient(lo, hi, tq, mult) * data_scale
            }
            // dL/dT' -> dL/dT (through the multiplicative draw; rounding passed straight
            // through).
            None => {
                let mut g = d.t().dot(&x) * data_scale;
                if let Some(mult) = &mult {
                    g *= mult;
                }
                g
            }
        };
        gp *= span;
        // l2 on the canonical weights (bias line not penalised).
        let pen = 0.5 * l2 * p.slice(s![.., ..f]).iter().map(|v| v * v).sum::<f64>();
        gp.slice_mut(s![.., ..f])
            .scaled_add(l2, &p.slice(s![.., ..f]));
        // Through P = (A - c) / m: c_i = A[argmin_i, i], m = A[J, I] - c_I.
        let mut ga = &gp / m;
        for (i, col) in gp.columns().into_iter().enumerate() {
            ga[(argmin[i], i)] -= col.sum() / m;
        }
        let gm: f64 = gp.iter().zip(p.iter()).map(|(g, pv)| g * pv).sum::<f64>() / m;
        let (jj, ii) = argmax;
        ga[(jj, ii)] -= gm;
        ga[(argmin[ii], ii)] += gm;
        (loss * data_scale + pen, ga, dx)
    }
}

/// A hidden stage trained jointly with the read-out ([`HardwareAwareTrainer::train_joint`]):
/// its element under the shifted encoding, the exponent of its power-law normaliser and the
/// strengths of its own injected element draws.
#[derive(Debug, Clone, PartialEq)]
pub struct HiddenStageModel {
    pub element: ElementModel,
    /// Exponent g_h of the normaliser's shares `I_k^g_h / sum_j I_j^g_h` (> 0).
    pub gain: f64,
    /// Relative sigma of each hidden element's value (>= 0).
    pub weight_mismatch: f64,
    /// Sigma of each hidden element's programming error, in units of its range (>= 0).
    pub programming_error: f64,
}

/// What the joint trainer returns: the hidden stage's canonical weights and biases, and the
/// read-out's result (its diagnostics are the joint objective's).
#[derive(Debug, Clone, PartialEq)]
pub struct JointTrained {
    /// Hidden weights (units x features), acting on [0, 1] inputs.
    pub hidden_weights: Array2<f64>,
    /// Hidden biases (one per hidden line).
    pub hidden_bias: Array1<f64>,
    /// The read-out (acting on the hidden shares) and how the optimiser ended.
    pub readout: HardwareTrained,
}

/// One hidden-stage forward pass, kept for the backward pass.
struct HiddenPass {
    p: Array2<f64>,
    argmin: Vec<usize>,
    m: f64,
    argmax: (usize, usize),
    mult: Option<Array2<f64>>,
    currents: Array2<f64>,
    floor: f64,
    shares: Array2<f64>,
}

/// One chip's draws of the hidden stage's elements: (E_1, E_2), standard normals.
struct HiddenDraw {
    mismatch: Array2<f64>,
    programming: Array2<f64>,
}

impl HiddenStageModel {
    /// Refuse a non-positive exponent or a negative strength, naming it.
    pub fn validate(&self) -> Result<(), TrainingError> {
        if !(self.gain.is_finite() && self.gain > 0.0) {
            return Err(bad(
                "hidden.exponent",
                self.gain,
                "the hidden normaliser's exponent must be positive",
            ));
        }
        for (key, v) in [
            ("weight_mismatch", self.weight_mismatch),
            ("programming_error", self.programming_error),
        ] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(bad(key, v, "use a strength >= 0 (0 switches it off)"));
            }
        }
        Ok(())
    }

    /// Shares of the hidden normaliser for augmented inputs `x` (samples x (features + 1)):
    /// `T` from the canonical form of `a1`, rounded to the nearest level when `quantise`, the
    /// draw applied, currents `I = x T'^T`, shares `softmax(g_h ln I)` (the closed form of
    /// `HiddenNonlinearity::normalise_in_place`).
    fn forward(
        &self,
        a1: &Array2<f64>,
        x: ArrayView2<'_, f64>,
        quantise: bool,
        draw: Option<&HiddenDraw>,
    ) -> HiddenPass {
        let e = &self.element;
        let (p, argmin, m, argmax) = canonical(a1);
        let span = e.span();
        let t = p.mapv(|v| e.w_min + span * v);
        let tq = if quantise {
            t.mapv(|v| e.quantise(v))
        } else {
            t
        };
        let (tn, mult) = apply_draw(
            tq,
            draw.map(|d| (&d.mismatch, &d.programming)),
            self.weight_mismatch,
            self.programming_error,
            e,
        );
        let currents = x.dot(&tn.t());
        let floor = 1e-12 * (e.w_max * x.ncols() as f64).max(1e-300);
        let mut shares = currents.mapv(|i| self.gain * i.max(floor).ln());
        for mut row in shares.rows_mut() {
            let max = row.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            row.mapv_inplace(|v| (v - max).exp());
            let sum = row.sum();
            row /= sum;
        }
        HiddenPass {
            p,
            argmin,
            m,
            argmax,
            mult,
            currents,
            floor,
            shares,
        }
    }

    /// Gradient in A_1 from dL/dh (samples x units): through the normaliser's softmax
    /// Jacobian `dh_k/dz_j = h_k (delta_kj - h_j)`, `dz/dI = g_h / I`, the currents, the draw,
    /// the (straight-through) rounding and the encoding's canonical map.
    fn backward(
        &self,
        pass: &HiddenPass,
        x: ArrayView2<'_, f64>,
        dh: ArrayView2<'_, f64>,
    ) -> Array2<f64> {
        let mut di = Array2::zeros(pass.shares.raw_dim());
        for (r, (h, g)) in pass.shares.rows().into_iter().zip(dh.rows()).enumerate() {
            let dot = h.dot(&g);
            for k in 0..h.len() {
                let i = pass.currents[(r, k)];
                di[(r, k)] = if i > pass.floor {
                    h[k] * (g[k] - dot) * self.gain / i
                } else {
                    0.0
                };
            }
        }
        let mut gp = di.t().dot(&x);
        if let Some(mult) = &pass.mult {
            gp *= mult;
        }
        gp *= self.element.span();
        canonical_backward(&gp, &pass.p, &pass.argmin, pass.m, pass.argmax)
    }
}

/// Gradient in A from the gradient `gp` in the canonical weights P = (A - c) / m
/// (c_i = A[argmin_i, i], m = A[J, I] - c_I).
fn canonical_backward(
    gp: &Array2<f64>,
    p: &Array2<f64>,
    argmin: &[usize],
    m: f64,
    argmax: (usize, usize),
) -> Array2<f64> {
    let mut ga = gp / m;
    for (i, col) in gp.columns().into_iter().enumerate() {
        ga[(argmin[i], i)] -= col.sum() / m;
    }
    let gm: f64 = gp.iter().zip(p.iter()).map(|(g, pv)| g * pv).sum::<f64>() / m;
    let (jj, ii) = argmax;
    ga[(jj, ii)] -= gm;
    ga[(argmin[ii], ii)] += gm;
    ga
}

impl HardwareAwareTrainer {
    /// The hidden stage's draws from `stream(seed, [TRAINING, sub, index])` (sub 3: optimiser
    /// steps; sub 4: the stopping rule's fixed chips), or `None` when it injects nothing.
    fn hidden_draw(
        &self,
        hs: &HiddenStageModel,
        dim: (usize, usize),
        sub: u64,
        index: u64,
    ) -> Option<HiddenDraw> {
        if hs.weight_mismatch == 0.0 && hs.programming_error == 0.0 {
            return None;
        }
        let mut rng = stream(self.options.seed, &[domain::TRAINING, sub, index]);
        let mismatch = Array2::random_using(dim, StandardNormal, &mut rng);
        let programming = Array2::random_using(dim, StandardNormal, &mut rng);
        Some(HiddenDraw {
            mismatch,
            programming,
        })
    }

    /// Joint loss (the read-out's objective on the hidden stage's shares; the hidden weights
    /// carry no l2 term, so it is the read-out-only objective's own function) and its
    /// gradients in A_1 (hidden) and A_0 (read-out), on augmented inputs `x`.
    #[allow(clippy::too_many_arguments)]
    fn joint_loss_grad(
        &self,
        hs: &HiddenStageModel,
        a1: &Array2<f64>,
        a0: &Array2<f64>,
        x: ArrayView2<'_, f64>,
        y: &[usize],
        draws: (Option<&Draw>, Option<&HiddenDraw>),
        data_scale: f64,
    ) -> (f64, Array2<f64>, Array2<f64>) {
        let pass = hs.forward(a1, x, self.options.injection.quantise, draws.1);
        let h = augment(pass.shares.view());
        let (loss, g0, dx) = self.loss_grad_dx(a0, h.view(), y, draws.0, data_scale, true);
        let units = pass.shares.ncols();
        let g1 = match dx {
            Some(dx) => hs.backward(&pass, x, dx.slice(s![.., ..units])),
            None => Array2::zeros(a1.raw_dim()),
        };
        (loss, g1, g0)
    }

    /// The joint objective (no injection; levels round when asked) of hidden weights `a1` =
    /// [W_1 | b_1] and read-out `a0` = [W_0 | b_0] on scaled inputs `u`, labels `y`.
    pub fn joint_objective(
        &self,
        hs: &HiddenStageModel,
        a1: ArrayView2<'_, f64>,
        a0: ArrayView2<'_, f64>,
        u: ArrayView2<'_, f64>,
        y: &[usize],
    ) -> f64 {
        let a1 = canonical(&a1.to_owned()).0;
        let a0 = canonical(&a0.to_owned()).0;
        self.joint_loss_grad(hs, &a1, &a0, augment(u).view(), y, (None, None), 1.0)
            .0
    }

    /// Train the hidden stage and the read-out together (model notes §6.2) on scaled inputs
    /// `u` (samples x features, in [0, 1]), from `a1` = [W_1 | b_1] (units x (features + 1))
    /// and `a0` = [W_0 | b_0] (classes x (units + 1)). The same optimiser, schedule, draws
    /// of the read-out and stopping rules as [`Self::train`]; the hidden stage rounds to the
    /// nearest level (straight-through) and draws its own elements from `[TRAINING, 3, step]`.
    pub fn train_joint(
        &self,
        hs: &HiddenStageModel,
        u: ArrayView2<'_, f64>,
        y: &[usize],
        n_classes: usize,
        a1: ArrayView2<'_, f64>,
        a0: ArrayView2<'_, f64>,
    ) -> Result<JointTrained, TrainingError> {
        hs.validate()?;
        let (n, f) = u.dim();
        let units = a1.nrows();
        if self.element.is_none() {
            return Err(TrainingError::Shape(
                "joint training of a hidden stage needs the chip model (an element)".into(),
            ));
        }
        if n == 0 || n != y.len() {
            return Err(TrainingError::Shape(format!(
                "{n} samples but {} labels; give one label per sample",
                y.len()
            )));
        }
        if n_classes < 2 || y.iter().any(|&c| c >= n_classes) {
            return Err(TrainingError::Shape(
                "labels must be class indices below the class count (at least two classes)".into(),
            ));
        }
        if a1.dim() != (units, f + 1) || units == 0 || a0.dim() != (n_classes, units + 1) {
            return Err(TrainingError::Shape(format!(
                "initial weights are {:?} (hidden) and {:?} (read-out), expected {units} x {} \
                 and {n_classes} x {}",
                a1.dim(),
                a0.dim(),
                f + 1,
                units + 1
            )));
        }
        if u.iter()
            .chain(a1.iter())
            .chain(a0.iter())
            .any(|v| !v.is_finite())
        {
            return Err(TrainingError::Shape(
                "inputs and initial weights must be finite".into(),
            ));
        }
        self.check_expressible(a0)?;
        let x = augment(u);
        let mut a1 = canonical(&a1.to_owned()).0;
        let mut a0 = canonical(&a0.to_owned()).0;
        let o = &self.options;
        let (b1, b2, eps) = (0.9f64, 0.999f64, 1e-8);
        let mut m = [
            Array2::<f64>::zeros(a1.raw_dim()),
            Array2::<f64>::zeros(a0.raw_dim()),
        ];
        let mut v = m.clone();
        let batch = o.batch_size.min(n);
        let mut order: Vec<usize> = (0..n).collect();
        let mut step: u64 = 0;
        let window = (o.epochs / 10).max(1);
        let mut window_start: Option<(Array2<f64>, Array2<f64>)> = None;
        let mut epochs_run = 0;
        let mut termination = Termination::EpochLimit;
        let injects = o.injection.any() || hs.weight_mismatch > 0.0 || hs.programming_error > 0.0;
        for epoch in 0..o.epochs {
            epochs_run = epoch + 1;
            if o.epochs >= 2 && epoch == o.epochs - window {
                window_start = Some((a1.clone(), a0.clone()));
            }
            let lr = o.learning_rate * (1.0 - 0.9 * f64::from(epoch) / f64::from(o.epochs));
            order.sort_unstable();
            order.shuffle(&mut stream(
                o.seed,
                &[domain::TRAINING, 0, u64::from(epoch)],
            ));
            for chunk in order.chunks(batch) {
                let xb = x.select(Axis(0), chunk);
                let yb: Vec<usize> = chunk.iter().map(|&i| y[i]).collect();
                let d0 = self.draw(n_classes, units + 1, step);
                let d1 = self.hidden_draw(hs, (units, f + 1), 3, step);
                let (_, g1, g0) = self.joint_loss_grad(
                    hs,
                    &a1,
                    &a0,
                    xb.view(),
                    &yb,
                    (d0.as_ref(), d1.as_ref()),
                    n as f64 / chunk.len() as f64,
                );
                step += 1;
                let t = step as i32;
                let (c1, c2) = (1.0 - b1.powi(t), 1.0 - b2.powi(t));
                for (k, (a, g)) in [(&mut a1, &g1), (&mut a0, &g0)].into_iter().enumerate() {
                    ndarray::Zip::from(&mut *a)
                        .and(&mut m[k])
                        .and(&mut v[k])
                        .and(g)
                        .for_each(|w, m, v, &g| {
                            *m = b1 * *m + (1.0 - b1) * g;
                            *v = b2 * *v + (1.0 - b2) * g * g;
                            *w -= lr * (*m / c1) / ((*v / c2).sqrt() + eps);
                        });
                }
                a1 = canonical(&a1).0;
                a0 = canonical(&a0).0;
                if a1.iter().chain(a0.iter()).any(|v| !v.is_finite()) {
                    return Err(TrainingError::NonFiniteWeights);
                }
            }
            if !injects {
                let (_, g1, g0) =
                    self.joint_loss_grad(hs, &a1, &a0, x.view(), y, (None, None), 1.0);
                if (norm(&g1).powi(2) + norm(&g0).powi(2)).sqrt() <= o.gradient_tolerance {
                    termination = Termination::GradientTolerance;
                    break;
                }
            }
        }
        let mut window_decrease = None;
        if injects {
            if let Some((s1, s0)) = &window_start {
                let (mut lb, mut la) = (0.0, 0.0);
                for k in 0..PLATEAU_CHIPS {
                    let d0 = self.draw_keyed(n_classes, units + 1, 2, k);
                    let d1 = self.hidden_draw(hs, (units, f + 1), 4, k);
                    let d = (d0.as_ref(), d1.as_ref());
                    lb += self.joint_loss_grad(hs, s1, s0, x.view(), y, d, 1.0).0;
                    la += self.joint_loss_grad(hs, &a1, &a0, x.view(), y, d, 1.0).0;
                }
                let decrease = (lb - la) / lb.abs().max(1e-300);
                window_decrease = Some(decrease);
                if decrease <= o.plateau_tolerance {
                    termination = Termination::Plateau;
                }
            }
        }
        let (objective, g1, g0) =
            self.joint_loss_grad(hs, &a1, &a0, x.view(), y, (None, None), 1.0);
        let gradient_norm = (norm(&g1).powi(2) + norm(&g0).powi(2)).sqrt();
        let converged = termination != Termination::EpochLimit;
        Ok(JointTrained {
            hidden_weights: a1.slice(s![.., ..f]).to_owned(),
            hidden_bias: a1.column(f).to_owned(),
            readout: HardwareTrained {
                weights: a0.slice(s![.., ..units]).to_owned(),
                bias: a0.column(units).to_owned(),
                diagnostics: TrainingDiagnostics {
                    gradient_norm,
                    gradient_tolerance: o.gradient_tolerance,
                    objective,
                    converged,
                },
                epochs_run,
                steps: step,
                termination,
                window_decrease,
            },
        })
    }
}

/// One chip's element errors on the levels `tq`: with the standard normals (E_1, E_2) of
/// `draws`, `T' = tq (1 + s_m E_1) + s_p (w_max - w_min) E_2`, and the multiplier `1 + s_m E_1`
/// (what the gradient flows through); without draws `tq` itself.
fn apply_draw(
    tq: Array2<f64>,
    draws: Option<(&Array2<f64>, &Array2<f64>)>,
    weight_mismatch: f64,
    programming_error: f64,
    e: &ElementModel,
) -> (Array2<f64>, Option<Array2<f64>>) {
    match draws {
        Some((mismatch, programming)) => {
            let mult = mismatch.mapv(|z| 1.0 + weight_mismatch * z);
            let tn =
                &tq * &mult + &programming.mapv(|z| z * programming_error * (e.w_max - e.w_min));
            (tn, Some(mult))
        }
        None => (tq, None),
    }
}

struct Draw {
    mismatch: Array2<f64>,
    programming: Array2<f64>,
    offset: Array1<f64>,
    /// Uniforms in [0, 1) of stochastic rounding (round up when below the fraction).
    uniform: Option<Array2<f64>>,
}

/// What the level-difference gradient of stochastic rounding needs from one forward pass.
struct LevelDifference<'a> {
    x: ArrayView2<'a, f64>,
    y: &'a [usize],
    z: &'a Array2<f64>,
    currents: &'a Array2<f64>,
    offsets: &'a Array1<f64>,
    gain: f64,
    floor: f64,
}

impl LevelDifference<'_> {
    /// Per element (j, i): sum over samples of (L with the element at `hi` - L at `lo`) /
    /// (hi - lo), the other elements as drawn (`tq`), through the multiplicative draw `mult`.
    /// Moving one element changes only line j's current, I_j +- dT mult_ji x_i, so each sample's
    /// loss is recomputed from the log-sum-exp of the other lines.
    fn gradient(
        &self,
        lo: &Array2<f64>,
        hi: &Array2<f64>,
        tq: &Array2<f64>,
        mult: &Array2<f64>,
    ) -> Array2<f64> {
        let (c, cols) = lo.dim();
        let mut g = Array2::zeros((c, cols));
        let mut rest = vec![0.0; c];
        for (r, &yr) in self.y.iter().enumerate() {
            let zr = self.z.row(r);
            for (j, slot) in rest.iter_mut().enumerate() {
                let m = zr
                    .iter()
                    .enumerate()
                    .filter(|&(k, _)| k != j)
                    .fold(f64::NEG_INFINITY, |a, (_, &v)| a.max(v));
                let sum: f64 = zr
                    .iter()
                    .enumerate()
                    .filter(|&(k, _)| k != j)
                    .map(|(_, &v)| (v - m).exp())
                    .sum();
                *slot = m + sum.ln();
            }
            for j in 0..c {
                let i_now = self.currents[(r, j)];
                let loss_at = |current: f64| {
                    let zj = self.gain * current.max(self.floor).ln() + self.offsets[j];
                    let (a, b) = (rest[j].max(zj), rest[j].min(zj));
                    let lse = a + (b - a).exp().ln_1p();
                    // The target's score: line j's when j is the target, else unchanged.
                    lse - if j == yr { zj } else { zr[yr] }
                };
                for i in 0..cols {
                    let (l, h) = (lo[(j, i)], hi[(j, i)]);
                    if h <= l {
                        continue;
                    }
                    let xi = self.x[(r, i)] * mult[(j, i)];
                    let i_lo = i_now - (tq[(j, i)] - l) * xi;
                    let i_hi = i_lo + (h - l) * xi;
                    g[(j, i)] += (loss_at(i_hi) - loss_at(i_lo)) / (h - l);
                }
            }
        }
        g
    }
}

/// Inputs with the bias line (a column of ones) appended.
fn augment(u: ArrayView2<'_, f64>) -> Array2<f64> {
    let (n, f) = u.dim();
    let mut x = Array2::ones((n, f + 1));
    x.slice_mut(s![.., ..f]).assign(&u);
    x
}

/// The encoding's canonical form of A: P = (A - c) / m with c the per-column minimum and m the
/// largest shifted entry; also each column's argmin row, m and the (row, column) of the
/// largest shifted entry. A matrix with no spread (m = 0) is returned shifted, with m = 1.
fn canonical(a: &Array2<f64>) -> (Array2<f64>, Vec<usize>, f64, (usize, usize)) {
    let mut argmin = Vec::with_capacity(a.ncols());
    let mut p = a.clone();
    for (i, mut col) in p.columns_mut().into_iter().enumerate() {
        let (r, c) =
            a.column(i)
                .iter()
                .copied()
                .enumerate()
                .fold(
                    (0, f64::INFINITY),
                    |b, (r, v)| if v < b.1 { (r, v) } else { b },
                );
        argmin.push(r);
        col.mapv_inplace(|v| v - c);
    }
    let mut best = (0, 0);
    let mut m = f64::NEG_INFINITY;
    for ((j, i), &v) in p.indexed_iter() {
        if v > m {
            m = v;
            best = (j, i);
        }
    }
    if m.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
        return (p, argmin, 1.0, best);
    }
    p.mapv_inplace(|v| v / m);
    (p, argmin, m, best)
}

/// Summed cross-entropy of softmax rows of `z` against `y`, and dL/dI = (p - onehot) * dz/dI
/// per entry (`dz(row, class)` gives dz/dI; 1 for the float model).
fn cross_entropy(
    z: &Array2<f64>,
    y: &[usize],
    dz: impl Fn(usize, usize) -> f64,
) -> (f64, Array2<f64>) {
    let mut d = Array2::zeros(z.raw_dim());
    let mut loss = 0.0;
    for (r, (row, &c)) in z.rows().into_iter().zip(y).enumerate() {
        let max = row.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let lse = max + row.iter().map(|v| (v - max).exp()).sum::<f64>().ln();
        loss += lse - row[c];
        for (k, &v) in row.iter().enumerate() {
            let p = (v - lse).exp() - if k == c { 1.0 } else { 0.0 };
            d[(r, k)] = p * dz(r, k);
        }
    }
    (loss, d)
}

fn norm(g: &Array2<f64>) -> f64 {
    g.iter().map(|v| v * v).sum::<f64>().sqrt()
}

/// Fixed drawn chips on which the stopping rule compares the weights at the start and the end
/// of its window (common practice, no source).
const PLATEAU_CHIPS: u64 = 8;

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn chip_trainer(gain: f64, inj: Injection, l2: f64) -> HardwareAwareTrainer {
        HardwareAwareTrainer::new(
            HardwareAwareOptions {
                l2,
                injection: inj,
                ..Default::default()
            },
            SoftCompetition::PowerLaw { gain },
            Some(ElementModel {
                w_min: 0.05,
                w_max: 1.0,
                range_use: 0.9,
                levels: None,
                spacing: LevelSpacing::Linear,
            }),
        )
        .unwrap()
    }

    /// Central finite difference of the loss in one entry (step h).
    fn fd(
        t: &HardwareAwareTrainer,
        a: &Array2<f64>,
        x: &Array2<f64>,
        y: &[usize],
        draw: Option<&Draw>,
        (j, i): (usize, usize),
        h: f64,
    ) -> f64 {
        let mut ap = a.clone();
        ap[(j, i)] += h;
        let mut am = a.clone();
        am[(j, i)] -= h;
        (t.loss_grad(&ap, x.view(), y, draw, 1.0).0 - t.loss_grad(&am, x.view(), y, draw, 1.0).0)
            / (2.0 * h)
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(24))]
        // Analytic gradient against central finite differences (the derivative's definition;
        // error O(h^2)): float model, and the chip model through the encoding's canonical map
        // with a fixed injected draw. Random entries make ties of the min/max a null event.
        #[test]
        fn gradients_match_finite_differences(
            seed in 0u64..1000,
            gain in 2.0f64..40.0,
            l2 in 0.0f64..1.0,
        ) {
            let mut rng = stream(seed, &[99]);
            let (c, f, n) = (3, 4, 7);
            let a = Array2::random_using((c, f + 1), StandardNormal, &mut rng);
            let u = Array2::random_using((n, f), rand::distributions::Uniform::new(0.0, 1.0), &mut rng);
            let x = augment(u.view());
            let y: Vec<usize> = (0..n).map(|i| i % c).collect();
            let float = HardwareAwareTrainer::new(
                HardwareAwareOptions { l2, ..Default::default() },
                SoftCompetition::Float,
                None,
            ).unwrap();
            let inj = Injection {
                weight_mismatch: 0.05,
                programming_error: 0.01,
                competition_offset: 0.02,
                quantise: false,
                rounding: Rounding::Nearest,
            };
            let chip = chip_trainer(gain, inj, l2);
            let draw = chip.draw(c, f + 1, seed);
            prop_assert!(draw.is_some());
            for (t, d) in [(&float, None), (&chip, draw.as_ref()), (&chip, None)] {
                let (_, g) = t.loss_grad(&a, x.view(), &y, d, 1.0);
                for j in 0..c {
                    for i in 0..=f {
                        let num = fd(t, &a, &x, &y, d, (j, i), 1e-6);
                        let tol = 1e-5 * (1.0 + num.abs().max(g[(j, i)].abs()));
                        prop_assert!((num - g[(j, i)]).abs() <= tol,
                            "entry ({j},{i}): analytic {} vs numeric {num}", g[(j, i)]);
                    }
                }
            }
        }
    }

    /// The hidden stage's element and normaliser for the joint tests.
    fn hidden_model(gain: f64, drawn: bool) -> HiddenStageModel {
        HiddenStageModel {
            element: ElementModel {
                w_min: 0.05,
                w_max: 1.0,
                range_use: 0.9,
                levels: None,
                spacing: LevelSpacing::Linear,
            },
            gain,
            weight_mismatch: if drawn { 0.05 } else { 0.0 },
            programming_error: if drawn { 0.01 } else { 0.0 },
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(16))]
        // Joint training: the analytic gradients in the hidden weights A_1 (through the
        // read-out's input gradient, the normaliser's softmax Jacobian and the encoding) and in
        // the read-out A_0 against central finite differences of the joint loss (the
        // derivative's definition; error O(h^2), step 1e-6, tolerance 1e-5 relative as in the
        // read-out's check), with and without fixed injected draws of both stages.
        #[test]
        fn joint_gradients_match_finite_differences(
            seed in 0u64..1000,
            gain in 2.0f64..40.0,
            hidden_gain in 1.0f64..8.0,
            l2 in 0.0f64..1.0,
        ) {
            let mut rng = stream(seed, &[98]);
            let (c, f, h, n) = (3, 4, 5, 7);
            let a1 = canonical(&Array2::random_using((h, f + 1), StandardNormal, &mut rng)).0;
            let a0 = canonical(&Array2::random_using((c, h + 1), StandardNormal, &mut rng)).0;
            let u = Array2::random_using((n, f), rand::distributions::Uniform::new(0.0, 1.0), &mut rng);
            let x = augment(u.view());
            let y: Vec<usize> = (0..n).map(|i| i % c).collect();
            let inj = Injection {
                weight_mismatch: 0.05,
                programming_error: 0.01,
                competition_offset: 0.02,
                quantise: false,
                rounding: Rounding::Nearest,
            };
            let t = chip_trainer(gain, inj, l2);
            let hs = hidden_model(hidden_gain, true);
            let d0 = t.draw(c, h + 1, seed);
            let d1 = t.hidden_draw(&hs, (h, f + 1), 3, seed);
            prop_assert!(d0.is_some() && d1.is_some());
            for d in [(d0.as_ref(), d1.as_ref()), (None, None)] {
                let (_, g1, g0) = t.joint_loss_grad(&hs, &a1, &a0, x.view(), &y, d, 1.0);
                let loss = |b1: &Array2<f64>, b0: &Array2<f64>| {
                    t.joint_loss_grad(&hs, b1, b0, x.view(), &y, d, 1.0).0
                };
                let step = 1e-6;
                for (which, g) in [(0, &g1), (1, &g0)] {
                    for ((j, i), &an) in g.indexed_iter() {
                        let (mut p1, mut p0, mut m1, mut m0) =
                            (a1.clone(), a0.clone(), a1.clone(), a0.clone());
                        if which == 0 {
                            p1[(j, i)] += step;
                            m1[(j, i)] -= step;
                        } else {
                            p0[(j, i)] += step;
                            m0[(j, i)] -= step;
                        }
                        let num = (loss(&p1, &p0) - loss(&m1, &m0)) / (2.0 * step);
                        let tol = 1e-5 * (1.0 + num.abs().max(an.abs()));
                        prop_assert!((num - an).abs() <= tol,
                            "stage {which} entry ({j},{i}): analytic {an} vs numeric {num}");
                    }
                }
            }
        }
    }

    /// With nothing injected, joint training from a start lowers the joint objective below
    /// that start and below read-out-only training from the same start (the read-out-only
    /// optimum is a point of the joint search space); invented data (three Gaussian blobs).
    #[test]
    fn joint_training_improves_on_readout_only() {
        let mut rng = stream(5, &[97]);
        let (c, f, h, n) = (3, 2, 4, 60);
        let mut u = Array2::<f64>::zeros((n, f));
        let y: Vec<usize> = (0..n).map(|i| i % c).collect();
        let centres = [[0.2, 0.3], [0.7, 0.2], [0.5, 0.8]];
        let noise: Array2<f64> = Array2::random_using((n, f), StandardNormal, &mut rng);
        for r in 0..n {
            for k in 0..f {
                u[(r, k)] = (centres[y[r]][k] + 0.1 * noise[(r, k)]).clamp(0.0, 1.0);
            }
        }
        let t = chip_trainer(8.0, Injection::default(), 0.3);
        let hs = hidden_model(2.0, false);
        let a1 = Array2::random_using((h, f + 1), StandardNormal, &mut rng);
        let a0 = Array2::random_using((c, h + 1), StandardNormal, &mut rng);
        let start = t.joint_objective(&hs, a1.view(), a0.view(), u.view(), &y);
        let shares = hs
            .forward(&canonical(&a1).0, augment(u.view()).view(), false, None)
            .shares;
        let readout = t.train(shares.view(), &y, c, Some(a0.view())).unwrap();
        let mut r0 = Array2::zeros((c, h + 1));
        r0.slice_mut(s![.., ..h]).assign(&readout.weights);
        r0.column_mut(h).assign(&readout.bias);
        let readout_only = t.joint_objective(&hs, a1.view(), r0.view(), u.view(), &y);
        approx::assert_relative_eq!(
            readout_only,
            readout.diagnostics.objective,
            max_relative = 1e-12
        );
        let joint = t
            .train_joint(&hs, u.view(), &y, c, a1.view(), a0.view())
            .unwrap();
        assert!(
            joint.readout.diagnostics.objective < readout_only,
            "joint {} vs read-out only {readout_only} (start {start})",
            joint.readout.diagnostics.objective
        );
        assert!(readout_only < start);
    }

    /// Stochastic rounding's gradient is the derivative of the expected loss (the definition
    /// of an unbiased estimate): E[L](A) and the estimate's expectation are computed exactly
    /// by enumerating every rounding of the 9 elements (each up with probability (t - lo) /
    /// (hi - lo), Gupta et al. 2015), with a fixed draw of the other injected errors; the
    /// derivative of E[L] by central finite differences (error O(h^2)).
    #[test]
    fn stochastic_rounding_gradient_is_the_expected_loss_derivative() {
        for seed in [3u64, 11, 29] {
            let mut rng = stream(seed, &[99]);
            let (c, f, n) = (3, 2, 6);
            let a = Array2::random_using((c, f + 1), StandardNormal, &mut rng);
            let u = Array2::random_using(
                (n, f),
                rand::distributions::Uniform::new(0.0, 1.0),
                &mut rng,
            );
            let x = augment(u.view());
            let y: Vec<usize> = (0..n).map(|i| i % c).collect();
            let t = HardwareAwareTrainer::new(
                HardwareAwareOptions {
                    l2: 0.2,
                    injection: Injection {
                        weight_mismatch: 0.05,
                        programming_error: 0.01,
                        competition_offset: 0.02,
                        quantise: true,
                        rounding: Rounding::Stochastic,
                    },
                    ..Default::default()
                },
                SoftCompetition::PowerLaw { gain: 10.0 },
                Some(ElementModel {
                    w_min: 0.05,
                    w_max: 1.0,
                    range_use: 0.9,
                    levels: Some(5),
                    spacing: LevelSpacing::Linear,
                }),
            )
            .unwrap();
            let base = t.draw(c, f + 1, seed).unwrap();
            let e = t.element.clone().unwrap();
            let expect = |a: &Array2<f64>| -> (f64, Array2<f64>) {
                let (p, ..) = canonical(a);
                let frac: Vec<f64> = p
                    .iter()
                    .map(|&v| {
                        let v = e.w_min + e.span() * v;
                        let (l, h) = e.bracket(v).unwrap();
                        (v - l) / (h - l)
                    })
                    .collect();
                let mut el = 0.0;
                let mut eg = Array2::zeros(a.raw_dim());
                for mask in 0u32..(1 << frac.len()) {
                    let mut prob = 1.0;
                    let mut uu = Array2::zeros(a.raw_dim());
                    for (k, (fr, slot)) in frac.iter().zip(uu.iter_mut()).enumerate() {
                        let up = (mask >> k) & 1 == 1;
                        prob *= if up { *fr } else { 1.0 - fr };
                        *slot = if up { 0.0 } else { 1.0 };
                    }
                    if prob == 0.0 {
                        continue;
                    }
                    let d = Draw {
                        mismatch: base.mismatch.clone(),
                        programming: base.programming.clone(),
                        offset: base.offset.clone(),
                        uniform: Some(uu),
                    };
                    let (l, g) = t.loss_grad(a, x.view(), &y, Some(&d), 1.0);
                    el += prob * l;
                    eg.scaled_add(prob, &g);
                }
                (el, eg)
            };
            let (_, g) = expect(&a);
            let h = 1e-6;
            for j in 0..c {
                for i in 0..=f {
                    let mut ap = a.clone();
                    ap[(j, i)] += h;
                    let mut am = a.clone();
                    am[(j, i)] -= h;
                    let num = (expect(&ap).0 - expect(&am).0) / (2.0 * h);
                    let tol = 1e-5 * (1.0 + num.abs().max(g[(j, i)].abs()));
                    assert!(
                        (num - g[(j, i)]).abs() <= tol,
                        "seed {seed} entry ({j},{i}): estimate {} vs d E[L] {num}",
                        g[(j, i)]
                    );
                }
            }
        }
    }

    /// linfa as the outside reference (DEVELOPERS.md model notes §6.2): with nothing injected,
    /// the float soft model and no element constraints, the trainer minimises linfa-logistic
    /// 0.8.1's multinomial objective `sum -log softmax(u W^T + b)[y] + (l2/2) ||W||^2`. On iris
    /// and wine (min-max scaled training split, l2 = 0.3) linfa converges to a gradient norm of
    /// 1e-8; our Adam run (full batch) must reach the same objective within 1e-4 relative (the
    /// objective is flat near the optimum: a gradient norm of 1e-2 leaves a gap below 1e-5 of
    /// these objectives) and make the same test-split predictions.
    #[test]
    fn without_injection_reaches_linfas_objective_and_predictions() {
        use crate::data::{stratified_split, Dataset, MinMaxScaler};
        use crate::training::{LogisticOptions, Trainer};
        for name in ["iris", "wine"] {
            let ds = Dataset::builtin(name).unwrap();
            let (train, test) = stratified_split(&ds, 0.3, 1).unwrap();
            let opts = LogisticOptions {
                l2: 0.3,
                gradient_tolerance: 1e-8,
                max_iterations: 5000,
                ..Default::default()
            };
            let linfa = opts.train(&train).unwrap();
            let scaler = MinMaxScaler::fit(train.x.view()).unwrap();
            let u = scaler.transform(train.x.view()).unwrap();
            let ut = scaler.transform(test.x.view()).unwrap();
            let t = HardwareAwareTrainer::new(
                HardwareAwareOptions {
                    epochs: 4000,
                    learning_rate: 0.01,
                    batch_size: usize::MAX,
                    l2: 0.3,
                    gradient_tolerance: 1e-2,
                    ..Default::default()
                },
                SoftCompetition::Float,
                None,
            )
            .unwrap();
            let ours = t.train(u.view(), &train.y, ds.n_classes(), None).unwrap();
            let mut a_linfa = Array2::zeros((ds.n_classes(), ds.n_features() + 1));
            a_linfa
                .slice_mut(s![.., ..ds.n_features()])
                .assign(&linfa.linear.weights);
            a_linfa
                .column_mut(ds.n_features())
                .assign(&linfa.linear.bias);
            let reference = t.objective(a_linfa.view(), u.view(), &train.y);
            let rel = (ours.diagnostics.objective - reference).abs() / reference;
            assert!(
                rel < 1e-4,
                "{name}: objective {} vs linfa {reference} (relative {rel:.2e}, gradient {:.2e}, epochs {})",
                ours.diagnostics.objective,
                ours.diagnostics.gradient_norm,
                ours.epochs_run
            );
            assert!(ours.diagnostics.converged, "{name}: {:?}", ours.diagnostics);
            let mine = crate::training::LinearClassifier::new(ours.weights, ours.bias)
                .unwrap()
                .predict(ut.view())
                .unwrap();
            let theirs = linfa.predict_baseline(test.x.view()).unwrap();
            assert_eq!(mine, theirs, "{name}: test-split predictions differ");
        }
    }

    /// Accuracy of a perfect chip (element targets rounded to their levels by the weight
    /// stage's own mapping, `MappedStage::nominal_levels`; no other error; infinite gain:
    /// the largest line current wins) of weights [W | b] on 1-D inputs.
    fn level_chip_accuracy(a: &Array2<f64>, levels: u32, xs: &[f64], ys: &[usize]) -> f64 {
        use crate::stages::weights::{ElementDesign, LinearElement, WeightStageDesign};
        let design = WeightStageDesign {
            element: ElementDesign::Linear(LinearElement {
                levels: Some(levels),
                ..Default::default()
            }),
            ..Default::default()
        };
        let f = a.ncols() - 1;
        let chip = design
            .map(a.slice(s![.., ..f]), a.column(f))
            .unwrap()
            .nominal_levels();
        let mut out = vec![0.0; a.nrows()];
        let right = xs
            .iter()
            .zip(ys)
            .filter(|&(&x, &y)| {
                chip.forward_noiseless(&[x], &mut out).unwrap();
                crate::training::argmax(&out) == Some(y)
            })
            .count();
        right as f64 / xs.len() as f64
    }

    /// INVENTED data (no dataset; made up for this check): a case where training through the
    /// levels provably helps. One feature x in [0, 1], two classes: class 0 at x = 0, 0.1, 0.2,
    /// 0.45, 0.5, 0.55, class 1 at 15 evenly spaced x in [0.7, 1]. Element: linear, range [0, 1],
    /// 4 levels (0, 1/3, 2/3, 1), all of the range used.
    ///
    /// The argument. Under the shifted encoding two classes on one feature map (canonical form)
    /// to targets [[0, q], [1, 0]] (class 1 the feature line, class 0 the bias line), so a chip
    /// with only the levels decides class 1 iff x > round(q): the representable thresholds are
    /// the levels. Threshold 1/3 misclassifies exactly the three class-0 points in (1/3, 2/3)
    /// (accuracy 18/21); threshold 2/3 classifies all 21. (a) linfa's float boundary (l2 = 0.3)
    /// lies below 1/2 (the class-1 majority pulls it left; checked below), so the plain read-out
    /// rounds to 1/3: plain chip accuracy 18/21. (b) With stochastic rounding (Gupta et al.
    /// 2015) the expected loss in q is the linear interpolation of the loss at the levels, so
    /// on [1/3, 2/3] its slope is 3 (L(2/3) - L(1/3)), negative here (checked below: the
    /// misclassified class-0 points cost g ln(3x) each at 1/3), and L(2/3) is the smallest of
    /// the four levels' losses (checked), so descent carries q to 2/3 and keeps it within the
    /// optimiser's step of that kink, far from the rounding edges 1/2 and 5/6: the chip rounds
    /// to 2/3, accuracy 21/21. The gain is therefore exactly 3/21. (c) The straight-through
    /// gradient at the nearest level points towards the other level on either side of 1/2, so
    /// that iterate stalls at the rounding edge (where its rounding is a coin toss): the known
    /// limit this rounding mode removes, checked too. Deterministic: full batch, fixed seed.
    #[test]
    fn invented_case_stochastic_rounding_beats_plain_training() {
        use crate::data::Dataset;
        use crate::training::{LogisticOptions, Trainer};
        let class0 = [0.0, 0.1, 0.2, 0.45, 0.5, 0.55];
        let class1: Vec<f64> = (0..15).map(|k| 0.7 + 0.3 * f64::from(k) / 14.0).collect();
        let xs: Vec<f64> = class0.iter().chain(&class1).copied().collect();
        let ys: Vec<usize> = (0..xs.len())
            .map(|i| usize::from(i >= class0.len()))
            .collect();
        let u = Array2::from_shape_vec((xs.len(), 1), xs.clone()).unwrap();
        let ds = Dataset::new(
            "invented",
            vec!["x".into()],
            vec!["a".into(), "b".into()],
            u.clone(),
            ys.clone(),
        )
        .unwrap();
        let float = LogisticOptions::default().train(&ds).unwrap();
        let mut a0 = Array2::zeros((2, 2));
        a0.column_mut(0).assign(&float.linear.weights.column(0));
        a0.column_mut(1).assign(&float.linear.bias);
        // (a) the float boundary (where the two scores meet) lies below the edge 1/2.
        let boundary = (a0[(0, 1)] - a0[(1, 1)]) / (a0[(1, 0)] - a0[(0, 0)]);
        assert!(
            (1.0 / 3.0..0.5).contains(&boundary),
            "float boundary {boundary}"
        );
        let plain = level_chip_accuracy(&a0, 4, &xs, &ys);
        assert!((plain - 18.0 / 21.0).abs() < 1e-12, "plain chip {plain}");
        let trainer = |rounding| {
            HardwareAwareTrainer::new(
                HardwareAwareOptions {
                    batch_size: usize::MAX,
                    injection: Injection {
                        quantise: true,
                        rounding,
                        ..Default::default()
                    },
                    ..Default::default()
                },
                SoftCompetition::PowerLaw { gain: 20.0 },
                Some(ElementModel {
                    w_min: 0.0,
                    w_max: 1.0,
                    range_use: 1.0,
                    levels: Some(4),
                    spacing: LevelSpacing::Linear,
                }),
            )
            .unwrap()
        };
        // (b) the loss at the four levels of q: smallest at 2/3.
        let t = trainer(Rounding::Stochastic);
        let at = |q: f64| t.objective(ndarray::array![[0.0, q], [1.0, 0.0]].view(), u.view(), &ys);
        let l = [0.0, 1.0 / 3.0, 2.0 / 3.0, 1.0].map(at);
        assert!(
            l[2] < l[0] && l[2] < l[1] && l[2] < l[3],
            "losses at the levels {l:?}"
        );
        let weights = |r: &HardwareTrained| {
            let mut a = Array2::zeros((2, 2));
            a.column_mut(0).assign(&r.weights.column(0));
            a.column_mut(1).assign(&r.bias);
            a
        };
        let r = t.train(u.view(), &ys, 2, Some(a0.view())).unwrap();
        let a = weights(&r);
        let q = a[(0, 1)] / a[(1, 0)];
        assert!((q - 2.0 / 3.0).abs() < 0.05, "q = {q}: {a}");
        let aware = level_chip_accuracy(&a, 4, &xs, &ys);
        assert!(
            aware - plain >= 3.0 / 21.0 - 1e-12,
            "hardware-aware chip {aware} against plain {plain}"
        );
        // (c) the straight-through iterate ends at the rounding edge 1/2.
        let r = trainer(Rounding::Nearest)
            .train(u.view(), &ys, 2, Some(a0.view()))
            .unwrap();
        let a = weights(&r);
        let q = a[(0, 1)] / a[(1, 0)];
        assert!((q - 0.5).abs() < 0.02, "straight-through q = {q}: {a}");
    }

    #[test]
    fn canonical_form_is_invariant_and_in_range() {
        let a = ndarray::array![[1.0, -2.0, 0.5], [3.0, 0.0, -1.0]];
        let (p, argmin, m, best) = canonical(&a);
        assert_eq!(argmin, vec![0, 0, 1]);
        assert!((m - 2.0).abs() < 1e-15);
        assert_eq!(best, (1, 0));
        let b = a.mapv(|v| 3.0 * v + 7.0);
        let (q, ..) = canonical(&b);
        for (x, y) in p.iter().zip(q.iter()) {
            assert!((x - y).abs() < 1e-12);
            assert!((0.0..=1.0).contains(x));
        }
    }

    #[test]
    fn bad_options_are_refused_with_the_option_name() {
        let e = |o: HardwareAwareOptions| {
            HardwareAwareTrainer::new(o, SoftCompetition::Float, None)
                .unwrap_err()
                .to_string()
        };
        let d = HardwareAwareOptions::default;
        let o = HardwareAwareOptions {
            learning_rate: 0.0,
            ..d()
        };
        assert!(e(o).contains("learning_rate"));
        let mut o = d();
        o.injection.weight_mismatch = -0.1;
        assert!(e(o).contains("weight_mismatch"));
        let mut o = d();
        o.injection.competition_offset = f64::NAN;
        assert!(e(o).contains("competition_offset"));
        let o = HardwareAwareOptions { epochs: 0, ..d() };
        assert!(e(o).contains("epochs"));
        let no_element = HardwareAwareTrainer::new(
            HardwareAwareOptions::default(),
            SoftCompetition::PowerLaw { gain: 100.0 },
            None,
        );
        assert!(no_element.is_err());
    }

    #[test]
    fn a_range_below_half_a_level_cannot_express_the_signs() {
        let t = HardwareAwareTrainer::new(
            HardwareAwareOptions {
                injection: Injection {
                    quantise: true,
                    ..Default::default()
                },
                ..Default::default()
            },
            SoftCompetition::PowerLaw { gain: 100.0 },
            Some(ElementModel {
                w_min: 0.0,
                w_max: 1.0,
                range_use: 0.1,
                levels: Some(4),
                spacing: LevelSpacing::Linear,
            }),
        )
        .unwrap();
        let a = ndarray::array![[1.0, -1.0], [-1.0, 1.0]];
        let err = t.check_expressible(a.view()).unwrap_err().to_string();
        assert!(err.contains("range_use"), "{err}");
        let u = ndarray::array![[0.0], [1.0]];
        assert!(t.train(u.view(), &[0, 1], 2, Some(a.view())).is_err());
    }

    #[test]
    fn bad_data_is_refused() {
        let t = chip_trainer(50.0, Injection::default(), 0.1);
        let u = ndarray::array![[0.0], [1.0]];
        assert!(t.train(u.view(), &[0], 2, None).is_err());
        assert!(t.train(u.view(), &[0, 2], 2, None).is_err());
        let nan = ndarray::array![[f64::NAN], [1.0]];
        assert!(t.train(nan.view(), &[0, 1], 2, None).is_err());
        let wrong = Array2::<f64>::zeros((3, 2));
        assert!(t.train(u.view(), &[0, 1], 2, Some(wrong.view())).is_err());
    }

    /// The stopping rule (common practice, no source): a run cut short while the injected
    /// objective still falls fast reports `epoch_limit` and not converged; the same problem run
    /// long enough reports `plateau`; the decrease is measured on fixed draws, so it is the
    /// same number whatever the minibatch order.
    #[test]
    fn stopping_rule_tells_a_falling_objective_from_a_plateau() {
        let inj = Injection {
            weight_mismatch: 0.05,
            programming_error: 0.01,
            competition_offset: 0.05,
            quantise: false,
            rounding: Rounding::Nearest,
        };
        let u = ndarray::array![
            [0.1, 0.9],
            [0.8, 0.2],
            [0.2, 0.7],
            [0.9, 0.1],
            [0.3, 0.6],
            [0.7, 0.4]
        ];
        let y = [0, 1, 0, 1, 0, 1];
        let init = ndarray::array![[0.0, 0.1, 0.0], [0.1, 0.0, 0.0]];
        let run = |epochs| {
            let mut t = chip_trainer(20.0, inj, 0.1);
            t.options.epochs = epochs;
            t.options.batch_size = 1;
            t.options.learning_rate = 0.02;
            t.train(u.view(), &y, 2, Some(init.view())).unwrap()
        };
        let short = run(2);
        assert_eq!(short.termination, Termination::EpochLimit, "{short:?}");
        assert!(!short.diagnostics.converged);
        assert!(short.window_decrease.unwrap() > 0.05);
        let long = run(400);
        assert_eq!(long.termination, Termination::Plateau, "{long:?}");
        assert!(long.diagnostics.converged);
        assert!(long.window_decrease.unwrap() <= 0.05);
        assert!(long.diagnostics.objective < short.diagnostics.objective);
    }

    #[test]
    fn same_seed_same_weights() {
        let inj = Injection {
            weight_mismatch: 0.1,
            programming_error: 0.01,
            competition_offset: 0.05,
            quantise: true,
            rounding: Rounding::Nearest,
        };
        let t = chip_trainer(30.0, inj, 0.1);
        let u = ndarray::array![[0.1, 0.9], [0.8, 0.2], [0.2, 0.7], [0.9, 0.1]];
        let y = [0, 1, 0, 1];
        let init = ndarray::array![[-1.0, 1.0, 0.0], [1.0, -1.0, 0.0]];
        let a = t.train(u.view(), &y, 2, Some(init.view())).unwrap();
        let b = t.train(u.view(), &y, 2, Some(init.view())).unwrap();
        assert_eq!(a, b);
    }
}
