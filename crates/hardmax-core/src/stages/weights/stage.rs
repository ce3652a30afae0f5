//! One chip's instance of a mapped weight stage, and its effective weights under conditions.

use rand::Rng;
use rand_distr::StandardNormal;

use super::effective::EffectiveStage;
use super::element::ElementArrayChip;
use super::error::{Result, WeightStageError};
use super::mapping::{MappedStage, SignedEncoding};
use super::Conditions;
use crate::device::mismatch::sample_mismatch;
use crate::device::{MosMismatch, Process, Transistor};

/// One chip's static draws for one weight stage: programmed elements (with programming error,
/// stuck elements, drift exponents or Pelgrom mismatch), input-line gain errors, offset-source
/// errors, and the mirror pairs of the differential encoding.
#[derive(Clone, Debug, PartialEq)]
pub struct WeightStageChip {
    mapped: MappedStage,
    process: Process,
    /// Gain factor (1 + e_i) of each input line, bias line last.
    line_gain: Vec<f64>,
    /// Gain factor of each output line's offset current source.
    offset_gain: Vec<f64>,
    plus: ElementArrayChip,
    minus: Option<ElementArrayChip>,
    /// (input/diode device, output device) of each output line's mirror.
    mirrors: Vec<(MosMismatch, MosMismatch)>,
}

impl MappedStage {
    /// Sample one chip's static draws from `rng`, which the caller derives as
    /// `rng::stream(seed, &[rng::domain::CHIP, point, chip, stage_index])`.
    ///
    /// Draw order (fixed, whatever the sigmas): input-line gains (features + 1), offset gains
    /// (outputs), positive elements (row-major), subtracted elements, mirror pairs.
    pub fn sample_chip<R: Rng>(&self, process: &Process, rng: &mut R) -> WeightStageChip {
        let d = &self.design;
        let line_gain = d.input.sample_gains(rng, self.features + 1);
        let offset_gain = (0..self.classes)
            .map(|_| {
                let z: f64 = rng.sample(StandardNormal);
                1.0 + d.offset_sigma_rel * z
            })
            .collect();
        // Row-major copies (whatever the arrays' memory layout): element k = j * lines + i.
        let flat_plus: Vec<f64> = self.plus.iter().copied().collect();
        let plus = ElementArrayChip::program(&d.element, process, &flat_plus, rng);
        let minus = self.minus.as_ref().map(|m| {
            let flat: Vec<f64> = m.iter().copied().collect();
            ElementArrayChip::program(&d.element, process, &flat, rng)
        });
        let mirrors = match &d.encoding {
            SignedEncoding::Differential { mirror } => {
                let tech = process.tech(mirror.polarity);
                (0..self.classes)
                    .map(|_| {
                        let a = sample_mismatch(rng, tech, mirror);
                        let b = sample_mismatch(rng, tech, mirror);
                        (a, b)
                    })
                    .collect()
            }
            SignedEncoding::Shifted => Vec::new(),
        };
        WeightStageChip {
            mapped: self.clone(),
            process: process.clone(),
            line_gain,
            offset_gain,
            plus,
            minus,
            mirrors,
        }
    }
}

/// Current gain I_out / I_in of a mirror of two devices `t` with draws `mm_in` (diode) and
/// `mm_out`, at input current `i_in` and temperature `temperature_k`, with the EKV model; the
/// output device is held at the diode's drain voltage (e.g. by a cascode).
pub fn mirror_gain(
    process: &Process,
    t: &Transistor,
    mm_in: MosMismatch,
    mm_out: MosMismatch,
    i_in: f64,
    temperature_k: f64,
    line: usize,
) -> Result<f64> {
    let dev_in = process.ekv(t, temperature_k, mm_in);
    let dev_out = process.ekv(t, temperature_k, mm_out);
    let s = t.polarity.sign();
    let id = |d: &crate::device::Ekv, v: f64| d.id(s * v, s * v, 0.0);
    let (mut lo, mut hi) = (-1.0, process.vdd.abs() + 2.0);
    if !(id(&dev_in, hi) >= i_in && id(&dev_in, lo) <= i_in) {
        return Err(WeightStageError::MirrorOperatingPoint {
            line,
            current: i_in,
            lo,
            hi,
        });
    }
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if id(&dev_in, mid) < i_in {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo < 1e-15 {
            break;
        }
    }
    let v = 0.5 * (lo + hi);
    let iin = id(&dev_in, v);
    if iin > 0.0 && iin.is_finite() {
        Ok(id(&dev_out, v) / iin)
    } else {
        Err(WeightStageError::MirrorOperatingPoint {
            line,
            current: i_in,
            lo,
            hi,
        })
    }
}

impl WeightStageChip {
    /// Program-and-verify this chip's elements after their one-shot write (see
    /// [`super::verify`]): array 0 (positive) then 1 (subtracted); element `i` of array `a`
    /// draws from `stream_for(a, i)`. Returns the cycles it took.
    pub fn program_verify<R: Rng>(
        &mut self,
        pv: &super::verify::ProgramVerify,
        mut stream_for: impl FnMut(u64, u64) -> R,
    ) -> std::result::Result<super::verify::ProgramCounts, super::verify::VerifyError> {
        let flat_plus: Vec<f64> = self.mapped.plus.iter().copied().collect();
        let mut counts = pv.array(&mut self.plus, &flat_plus, |i| stream_for(0, i as u64))?;
        if let (Some(m), Some(chip)) = (self.mapped.minus.as_ref(), self.minus.as_mut()) {
            let flat: Vec<f64> = m.iter().copied().collect();
            counts.merge(&pv.array(chip, &flat, |i| stream_for(1, i as u64))?);
        }
        Ok(counts)
    }
}

impl WeightStageChip {
    /// The mapped stage this chip instantiates.
    pub fn mapped(&self) -> &MappedStage {
        &self.mapped
    }
    /// Positive element array draws.
    pub fn plus(&self) -> &ElementArrayChip {
        &self.plus
    }
    /// Subtracted element array draws (differential encoding).
    pub fn minus(&self) -> Option<&ElementArrayChip> {
        self.minus.as_ref()
    }
    /// Input-line gain factors (bias line last).
    pub fn line_gain(&self) -> &[f64] {
        &self.line_gain
    }

    /// Gain of output line `j`'s mirror under `c` (1 for the shifted encoding). The mirror is
    /// evaluated at a representative input current: half the line's nominal full-scale
    /// subtracted current (I_u sum_i w-_ji / 2), or I_u w_max / 2 if that is zero.
    pub fn mirror_gain(&self, j: usize, c: &Conditions) -> Result<f64> {
        let (SignedEncoding::Differential { mirror }, Some(minus), Some(&(a, b))) = (
            &self.mapped.design.encoding,
            self.mapped.minus.as_ref(),
            self.mirrors.get(j),
        ) else {
            return Ok(1.0);
        };
        let iu = self.mapped.design.input.full_scale_current_a;
        let sum: f64 = minus.row(j).sum();
        let (_, w_max) = self.mapped.design.element.range();
        let i_rep = if sum > 0.0 {
            0.5 * iu * sum
        } else {
            0.5 * iu * w_max
        };
        mirror_gain(&self.process, mirror, a, b, i_rep, c.temperature_k, j)
    }

    /// Number of feature inputs (the bias line not counted).
    pub fn inputs(&self) -> usize {
        self.mapped.features
    }

    /// Multiply each input line's gain (features, bias line last) by `gains` (a trim DAC per
    /// input column; lines without a gain keep theirs).
    pub fn trim_input_lines(&mut self, gains: &[f64]) {
        for (g, t) in self.line_gain.iter_mut().zip(gains) {
            *g *= t;
        }
    }

    /// Each input column's current per unit input on this chip under `c`: the sum over output
    /// lines of |effective weight|, A; the bias line last (without the offset currents). What a
    /// column trim's calibration measures with the column driven alone.
    pub fn column_currents(&self, c: &Conditions) -> Result<Vec<f64>> {
        let e = self.effective(c)?;
        let no = e.outputs().max(1);
        let mut cols: Vec<f64> = e
            .matrix()
            .chunks_exact(no)
            .map(|row| row.iter().map(|m| m.abs()).sum())
            .collect();
        let oc = self.mapped.offset_current_a;
        cols.push(
            e.offset()
                .iter()
                .zip(&self.offset_gain)
                .map(|(o, g)| (o - oc * g).abs())
                .sum(),
        );
        Ok(cols)
    }

    /// Fold every static draw and the conditions into an [`EffectiveStage`] (once per chip and
    /// condition; the per-decision pass is then one sweep over a contiguous matrix).
    pub fn effective(&self, c: &Conditions) -> Result<EffectiveStage> {
        c.validate()?;
        let m = &self.mapped;
        let (no, nf) = (m.classes, m.features);
        let lines = nf + 1;
        let iu = m.design.input.full_scale_current_a;
        let gains = (0..no)
            .map(|j| self.mirror_gain(j, c))
            .collect::<Result<Vec<f64>>>()?;
        let noisy = self.plus.has_read_noise();
        let mut matrix = vec![0.0; nf * no];
        let mut var = vec![0.0; nf * no];
        let mut offset = vec![0.0; no];
        let mut base_var = vec![0.0; no];
        for j in 0..no {
            let mg = gains.get(j).copied().unwrap_or(1.0);
            for i in 0..lines {
                let k = j * lines + i;
                let (wp, vp) = self.plus.effective(k, c);
                let (wm, vm) = match &self.minus {
                    Some(a) => a.effective(k, c),
                    None => (0.0, 0.0),
                };
                let g = iu * self.line_gain.get(i).copied().unwrap_or(1.0);
                let w = g * (wp - mg * wm);
                let v = g * g * (vp + mg * mg * vm);
                if i < nf {
                    if let (Some(mx), Some(vx)) =
                        (matrix.get_mut(i * no + j), var.get_mut(i * no + j))
                    {
                        *mx = w;
                        *vx = v;
                    }
                } else if let (Some(o), Some(b)) = (offset.get_mut(j), base_var.get_mut(j)) {
                    *o = w + m.offset_current_a * self.offset_gain.get(j).copied().unwrap_or(1.0);
                    *b = v;
                }
            }
        }
        Ok(EffectiveStage::new(
            nf,
            no,
            m.design.input.quantiser(),
            matrix,
            offset,
            if noisy { Some(var) } else { None },
            base_var,
            true,
        ))
    }
}
