//! Chains of weight stages with a soft competition stage (normaliser) as the hidden
//! nonlinearity between two of them.
//!
//! `x -> stage 0 -> hidden 0 -> stage 1 -> ... -> stage n-1 -> output currents`. A hidden
//! nonlinearity turns the previous stage's output currents into shares in [0, 1], which the next
//! stage takes as its inputs (a current hand-off: share times the next stage's full-scale
//! current). Hidden-fed stages normally use an ideal input DAC (`dac_bits: None`): the hand-off
//! is analog; a set `dac_bits` quantises the shares like any input.

use ndarray::{Array1, Array2, ArrayView1, ArrayView2};
use rand::Rng;
use serde::{Deserialize, Serialize};

use super::effective::EffectiveStage;
use super::error::{check_pos, invalid, Result, WeightStageError};
use super::mapping::{MappedStage, WeightStageDesign};
use super::stage::WeightStageChip;
use super::Conditions;
use crate::device::Process;

/// The hidden nonlinearity between two weight stages.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum HiddenNonlinearity {
    /// Weak-inversion closed form of the current-mode WTA, a power-law normaliser
    /// `out_k = I_b x_k^g / sum_j x_j^g` with g = kappa/sigma (J. Lazzaro, S. Ryckebusch,
    /// M. Mahowald, C. Mead, NIPS 1, 1989; gain analysis in DEVELOPERS.md model notes section 4).
    PowerLawNormaliser {
        /// Exponent g (> 0; 1 = linear normaliser, large = hard WTA).
        exponent: f64,
        /// Bias current I_b, A.
        bias_current_a: f64,
    },
    // TODO(competition stage): add `Circuit(...)` holding the full EKV competition stage
    // (stages::competition) once it lands: its chip draws come from the same chip stream as
    // the weight stages (stage index = position in the chain), and its DC solve replaces
    // `normalise_in_place` below (non-converged decisions must then be reported, not hidden).
}

impl HiddenNonlinearity {
    fn validate(&self, prefix: &str) -> Result<()> {
        match *self {
            HiddenNonlinearity::PowerLawNormaliser {
                exponent,
                bias_current_a,
            } => {
                check_pos(&format!("{prefix}.power_law_normaliser.exponent"), exponent)?;
                check_pos(
                    &format!("{prefix}.power_law_normaliser.bias_current_a"),
                    bias_current_a,
                )
            }
        }
    }

    /// Replace currents `v` (A) by their shares `out_k / I_b` in [0, 1]. Computed in the log
    /// domain (no overflow for large g); non-positive currents get share 0; all non-positive
    /// gives equal shares.
    #[inline]
    pub fn normalise_in_place(&self, v: &mut [f64]) {
        match *self {
            HiddenNonlinearity::PowerLawNormaliser { exponent, .. } => {
                let mut lmax = f64::NEG_INFINITY;
                for x in v.iter_mut() {
                    *x = if *x > 0.0 { x.ln() } else { f64::NEG_INFINITY };
                    lmax = lmax.max(*x);
                }
                if lmax == f64::NEG_INFINITY {
                    let n = v.len().max(1) as f64;
                    v.iter_mut().for_each(|x| *x = 1.0 / n);
                    return;
                }
                let mut sum = 0.0;
                for x in v.iter_mut() {
                    *x = (exponent * (*x - lmax)).exp();
                    sum += *x;
                }
                v.iter_mut().for_each(|x| *x /= sum);
            }
        }
    }

    /// The normaliser's output currents (A) = shares times I_b.
    pub fn bias_current_a(&self) -> f64 {
        match *self {
            HiddenNonlinearity::PowerLawNormaliser { bias_current_a, .. } => bias_current_a,
        }
    }
}

/// A chain: `stages.len()` weight stages and `stages.len() - 1` hidden nonlinearities.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChainDesign {
    pub stages: Vec<WeightStageDesign>,
    pub hidden: Vec<HiddenNonlinearity>,
}

/// Draw a random hidden layer (`units` x `features` weights and `units` biases, uniform in
/// [-1, 1]). The caller derives `rng` as `rng::stream(seed, &[rng::domain::DESIGN, stage])`:
/// a drawn hidden stage is part of the design, the same for every chip.
pub fn random_hidden_weights<R: Rng>(
    rng: &mut R,
    units: usize,
    features: usize,
) -> (Array2<f64>, Array1<f64>) {
    let w = Array2::from_shape_simple_fn((units, features), || rng.gen_range(-1.0..=1.0));
    let b = Array1::from_shape_simple_fn(units, || rng.gen_range(-1.0..=1.0));
    (w, b)
}

impl ChainDesign {
    /// Validate and map one (weights, bias) pair per stage. Stage k+1 must have as many
    /// features as stage k has outputs.
    pub fn map(&self, layers: &[(ArrayView2<f64>, ArrayView1<f64>)]) -> Result<MappedChain> {
        if self.stages.is_empty() {
            return Err(invalid("stages", 0, "at least one weight stage"));
        }
        if self.hidden.len() + 1 != self.stages.len() {
            return Err(WeightStageError::DimensionMismatch {
                what: "hidden nonlinearities vs weight stages - 1".into(),
                expected: self.stages.len() - 1,
                got: self.hidden.len(),
            });
        }
        if layers.len() != self.stages.len() {
            return Err(WeightStageError::DimensionMismatch {
                what: "weight layers vs weight stages".into(),
                expected: self.stages.len(),
                got: layers.len(),
            });
        }
        for (k, h) in self.hidden.iter().enumerate() {
            h.validate(&format!("hidden[{k}]"))?;
        }
        let mut stages = Vec::with_capacity(layers.len());
        for (k, (d, (w, b))) in self.stages.iter().zip(layers).enumerate() {
            let m = d.map(w.view(), b.view())?;
            if let Some(prev) = stages.last().map(|p: &MappedStage| p.outputs()) {
                if m.inputs() != prev {
                    return Err(WeightStageError::DimensionMismatch {
                        what: format!("features of stage {k} vs outputs of stage {}", k - 1),
                        expected: prev,
                        got: m.inputs(),
                    });
                }
            }
            stages.push(m);
        }
        Ok(MappedChain {
            stages,
            hidden: self.hidden.clone(),
        })
    }
}

/// A chain with its element targets.
#[derive(Clone, Debug, PartialEq)]
pub struct MappedChain {
    stages: Vec<MappedStage>,
    hidden: Vec<HiddenNonlinearity>,
}

impl MappedChain {
    /// The mapped stages.
    pub fn stages(&self) -> &[MappedStage] {
        &self.stages
    }

    /// Sample a chip: stage k's draws come from `stream_for(k)`, which the caller builds as
    /// `rng::stream(seed, &[rng::domain::CHIP, point, chip, k])`.
    pub fn sample_chip<R: Rng>(
        &self,
        process: &Process,
        mut stream_for: impl FnMut(usize) -> R,
    ) -> ChainChip {
        ChainChip {
            stages: self
                .stages
                .iter()
                .enumerate()
                .map(|(k, s)| s.sample_chip(process, &mut stream_for(k)))
                .collect(),
            hidden: self.hidden.clone(),
        }
    }

    /// The chain with its element targets rounded to the programmable levels and nothing else
    /// (see [`MappedStage::nominal_levels`]): ideal DACs, closed-form normalisers, no noise.
    pub fn nominal_levels(&self) -> EffectiveChain {
        EffectiveChain {
            stages: self
                .stages
                .iter()
                .map(MappedStage::nominal_levels)
                .collect(),
            hidden: self.hidden.clone(),
        }
    }

    /// Ideal chain: exact mapped weights, ideal DACs, closed-form normalisers.
    pub fn ideal(&self) -> EffectiveChain {
        EffectiveChain {
            stages: self.stages.iter().map(MappedStage::ideal).collect(),
            hidden: self.hidden.clone(),
        }
    }
}

/// One chip of a chain.
#[derive(Clone, Debug, PartialEq)]
pub struct ChainChip {
    stages: Vec<WeightStageChip>,
    hidden: Vec<HiddenNonlinearity>,
}

impl ChainChip {
    /// Program-and-verify every stage's elements (see [`super::verify`]); element `i` of array
    /// `a` of stage `k` draws from `stream_for(k, a, i)`. Returns the summed cycles.
    pub fn program_verify<R: Rng>(
        &mut self,
        pv: &super::verify::ProgramVerify,
        mut stream_for: impl FnMut(u64, u64, u64) -> R,
    ) -> std::result::Result<super::verify::ProgramCounts, super::verify::VerifyError> {
        let mut counts = super::verify::ProgramCounts::default();
        for (k, s) in self.stages.iter_mut().enumerate() {
            counts.merge(&s.program_verify(pv, |a, i| stream_for(k as u64, a, i))?);
        }
        Ok(counts)
    }
    /// The stage chips.
    pub fn stages(&self) -> &[WeightStageChip] {
        &self.stages
    }
    /// Multiply the first stage's input lines (features, bias line last) by `gains`: a trim
    /// DAC per input column (model notes §11, *Trim*).
    pub fn trim_input_lines(&mut self, gains: &[f64]) {
        if let Some(s) = self.stages.first_mut() {
            s.trim_input_lines(gains);
        }
    }
    /// Effective weights of every stage under `c`.
    pub fn effective(&self, c: &Conditions) -> Result<EffectiveChain> {
        Ok(EffectiveChain {
            stages: self
                .stages
                .iter()
                .map(|s| s.effective(c))
                .collect::<Result<_>>()?,
            hidden: self.hidden.clone(),
        })
    }
}

/// Reusable buffers for the intermediate lines of a chain (allocate once, reuse per decision).
#[derive(Clone, Debug, Default)]
pub struct ChainScratch {
    bufs: Vec<Vec<f64>>,
}

/// Effective chain, evaluated per decision.
#[derive(Clone, Debug, PartialEq)]
pub struct EffectiveChain {
    stages: Vec<EffectiveStage>,
    hidden: Vec<HiddenNonlinearity>,
}

impl EffectiveChain {
    /// The effective stages.
    pub fn stages(&self) -> &[EffectiveStage] {
        &self.stages
    }
    /// Multiply every stage's read-noise standard deviation by `scale` (draws are kept; see
    /// [`EffectiveStage::scale_read_noise`]).
    pub fn scale_read_noise(&mut self, scale: f64) {
        self.stages
            .iter_mut()
            .for_each(|s| s.scale_read_noise(scale));
    }
    /// Number of feature inputs of the first stage.
    pub fn inputs(&self) -> usize {
        self.stages.first().map_or(0, EffectiveStage::inputs)
    }
    /// Number of output lines of the last stage.
    pub fn outputs(&self) -> usize {
        self.stages.last().map_or(0, EffectiveStage::outputs)
    }
    /// Buffers sized for this chain.
    pub fn scratch(&self) -> ChainScratch {
        ChainScratch {
            bufs: self
                .stages
                .iter()
                .take(self.stages.len().saturating_sub(1))
                .map(|s| vec![0.0; s.outputs()])
                .collect(),
        }
    }

    fn run<R: Rng + ?Sized>(
        &self,
        x: &[f64],
        scratch: &mut ChainScratch,
        out: &mut [f64],
        mut rng: Option<&mut R>,
    ) -> Result<()> {
        let n = self.stages.len();
        if scratch.bufs.len() + 1 != n
            || scratch
                .bufs
                .iter()
                .zip(&self.stages)
                .any(|(b, s)| b.len() != s.outputs())
        {
            *scratch = self.scratch();
        }
        for (k, stage) in self.stages.iter().enumerate() {
            let nb = scratch.bufs.len();
            let (done, rest) = scratch.bufs.split_at_mut(k.min(nb));
            let input: &[f64] = match k.checked_sub(1).and_then(|p| done.get(p)) {
                Some(b) => b,
                None => x,
            };
            let target: &mut [f64] = if k + 1 == n {
                &mut *out
            } else {
                match rest.first_mut() {
                    Some(b) => b,
                    None => return Ok(()),
                }
            };
            match rng.as_deref_mut() {
                Some(r) => stage.forward(input, target, r)?,
                None => stage.forward_noiseless(input, target)?,
            }
            if let Some(h) = self.hidden.get(k) {
                h.normalise_in_place(target);
            }
        }
        Ok(())
    }

    /// Output currents of the last stage for one input row, with read noise from `rng` where
    /// enabled (nothing is drawn by noise-free stages).
    pub fn forward<R: Rng + ?Sized>(
        &self,
        x: &[f64],
        scratch: &mut ChainScratch,
        out: &mut [f64],
        rng: &mut R,
    ) -> Result<()> {
        self.run(x, scratch, out, Some(rng))
    }

    /// Output currents without any read noise.
    pub fn forward_noiseless(
        &self,
        x: &[f64],
        scratch: &mut ChainScratch,
        out: &mut [f64],
    ) -> Result<()> {
        self.run::<rand_chacha::ChaCha8Rng>(x, scratch, out, None)
    }

    /// The inputs the last stage sees (hidden shares in [0, 1]) for one input row, noiseless:
    /// what a trainer fits the last stage on. For a single-stage chain, `x` clipped to [0, 1].
    pub fn hidden_features(&self, x: &[f64], out: &mut Vec<f64>) -> Result<()> {
        out.clear();
        let n = self.stages.len();
        if n <= 1 {
            out.extend(x.iter().map(|v| v.clamp(0.0, 1.0)));
            return Ok(());
        }
        let head = EffectiveChain {
            stages: self.stages.iter().take(n - 1).cloned().collect(),
            hidden: self.hidden.clone(),
        };
        out.resize(head.outputs(), 0.0);
        let mut s = head.scratch();
        head.forward_noiseless(x, &mut s, out)
    }
}
