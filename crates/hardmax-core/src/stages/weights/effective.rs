//! The fast per-decision evaluation of one weight stage on one chip under fixed conditions.

use rand::Rng;
use rand_distr::StandardNormal;

use super::error::{Result, WeightStageError};
use super::input::Quantiser;

/// Output lines processed per block of the noise accumulation (stack buffer, no allocation).
const NOISE_BLOCK: usize = 16;

/// Effective weights of a stage: everything static (chip draws + conditions) folded into one
/// contiguous matrix, so that a decision is one pass over it.
///
/// `out_j = offset_j + sum_i M_ij q(x_i)` (+ read noise), with q the input DAC (clip to [0, 1]
/// and quantise). M is stored input-major (features x outputs, row-major) so the inner loop runs
/// over the contiguous output lines. All entries in A (M in A per unit input).
#[derive(Clone, Debug, PartialEq)]
pub struct EffectiveStage {
    inputs: usize,
    outputs: usize,
    quantiser: Quantiser,
    matrix: Vec<f64>,
    offset: Vec<f64>,
    noise_var: Option<Vec<f64>>,
    noise_base_var: Vec<f64>,
    clamp_at_zero: bool,
}

impl EffectiveStage {
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn new(
        inputs: usize,
        outputs: usize,
        quantiser: Quantiser,
        matrix: Vec<f64>,
        offset: Vec<f64>,
        noise_var: Option<Vec<f64>>,
        noise_base_var: Vec<f64>,
        clamp_at_zero: bool,
    ) -> Self {
        Self {
            inputs,
            outputs,
            quantiser,
            matrix,
            offset,
            noise_var,
            noise_base_var,
            clamp_at_zero,
        }
    }

    /// Number of feature inputs.
    pub fn inputs(&self) -> usize {
        self.inputs
    }
    /// Number of output lines.
    pub fn outputs(&self) -> usize {
        self.outputs
    }
    /// Does a decision draw read noise?
    pub fn has_read_noise(&self) -> bool {
        self.noise_var.is_some()
    }
    /// Multiply the read noise's standard deviation by `scale`. A stage with read noise keeps
    /// drawing one normal per output line per decision whatever the scale (0 switches the noise
    /// off without shifting later draws of the same stream).
    pub fn scale_read_noise(&mut self, scale: f64) {
        let s2 = scale * scale;
        if let Some(v) = &mut self.noise_var {
            v.iter_mut().for_each(|x| *x *= s2);
            self.noise_base_var.iter_mut().for_each(|x| *x *= s2);
        }
    }
    /// Effective matrix, input-major: entry (i, j) at `i * outputs + j`, A per unit input.
    pub fn matrix(&self) -> &[f64] {
        &self.matrix
    }
    /// Effective offset per output line (offset current + bias line), A.
    pub fn offset(&self) -> &[f64] {
        &self.offset
    }

    fn check(&self, x: &[f64], out: &[f64]) -> Result<()> {
        if x.len() != self.inputs {
            return Err(WeightStageError::DimensionMismatch {
                what: "input row length vs stage inputs (features)".into(),
                expected: self.inputs,
                got: x.len(),
            });
        }
        if out.len() != self.outputs {
            return Err(WeightStageError::DimensionMismatch {
                what: "output buffer length vs stage outputs (classes)".into(),
                expected: self.outputs,
                got: out.len(),
            });
        }
        if let Some((index, &value)) = x.iter().enumerate().find(|(_, v)| !v.is_finite()) {
            return Err(WeightStageError::NonFiniteInput { index, value });
        }
        Ok(())
    }

    #[inline]
    fn accumulate(&self, x: &[f64], out: &mut [f64]) {
        out.copy_from_slice(&self.offset);
        for (&xi, row) in x.iter().zip(self.matrix.chunks_exact(self.outputs)) {
            let xq = self.quantiser.apply(xi);
            for (o, &m) in out.iter_mut().zip(row) {
                *o += m * xq;
            }
        }
    }

    #[inline]
    fn finish(&self, out: &mut [f64]) {
        if self.clamp_at_zero {
            for o in out.iter_mut() {
                *o = o.max(0.0);
            }
        }
    }

    /// Output currents for one input row, without read noise (draws nothing).
    pub fn forward_noiseless(&self, x: &[f64], out: &mut [f64]) -> Result<()> {
        self.check(x, out)?;
        self.accumulate(x, out);
        self.finish(out);
        Ok(())
    }

    /// Output currents for one input row into `out` (length = outputs), adding per-decision
    /// read noise from `rng` when the stage has read noise; otherwise nothing is drawn.
    ///
    /// Element read noise is independent per element and Gaussian, so line j's noise is one
    /// Gaussian of variance `base_j + sum_i V_ij q(x_i)^2` (sum of independent Gaussians): one
    /// draw per output line, exact in distribution.
    pub fn forward<R: Rng + ?Sized>(&self, x: &[f64], out: &mut [f64], rng: &mut R) -> Result<()> {
        self.check(x, out)?;
        self.accumulate(x, out);
        if let Some(var) = &self.noise_var {
            let no = self.outputs;
            let mut start = 0;
            while start < no {
                let end = (start + NOISE_BLOCK).min(no);
                let mut acc = [0.0f64; NOISE_BLOCK];
                let (acc, base) = match (
                    acc.get_mut(..end - start),
                    self.noise_base_var.get(start..end),
                ) {
                    (Some(a), Some(b)) => (a, b),
                    _ => break,
                };
                acc.copy_from_slice(base);
                for (&xi, row) in x.iter().zip(var.chunks_exact(no)) {
                    let xq = self.quantiser.apply(xi);
                    let x2 = xq * xq;
                    if let Some(r) = row.get(start..end) {
                        for (a, &v) in acc.iter_mut().zip(r) {
                            *a += v * x2;
                        }
                    }
                }
                if let Some(o) = out.get_mut(start..end) {
                    for (o, &a) in o.iter_mut().zip(acc.iter()) {
                        let z: f64 = rng.sample(StandardNormal);
                        *o += a.max(0.0).sqrt() * z;
                    }
                }
                start = end;
            }
        }
        self.finish(out);
        Ok(())
    }

    /// Index of the largest output (first one on ties); `None` for an empty slice or NaN.
    /// The same rule as the reference argmax, [`crate::training::argmax`].
    pub fn argmax(out: &[f64]) -> Option<usize> {
        crate::training::argmax(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn argmax_first_on_ties_and_none_on_nan() {
        assert_eq!(EffectiveStage::argmax(&[1.0, 3.0, 3.0, 2.0]), Some(1));
        assert_eq!(EffectiveStage::argmax(&[]), None);
        assert_eq!(EffectiveStage::argmax(&[1.0, f64::NAN]), None);
    }

    /// Hand-computed 2 x 2 product: out = offset + M^T q(x), clamped at zero.
    #[test]
    fn forward_matches_hand_computation() {
        let e = EffectiveStage::new(
            2,
            2,
            Quantiser::new(None),
            vec![1.0, -2.0, 0.5, 0.25],
            vec![0.1, 0.2],
            None,
            vec![0.0; 2],
            true,
        );
        let mut out = [0.0; 2];
        e.forward_noiseless(&[1.0, 0.4], &mut out).unwrap();
        assert!((out[0] - (0.1 + 1.0 + 0.2)).abs() < 1e-15);
        assert_eq!(out[1], 0.0); // 0.2 - 2 + 0.1 < 0 -> clamped
    }
}
