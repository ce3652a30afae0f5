//! Static (per-decision) noise for a DC evaluation of a competition stage.
//!
//! A DC evaluation has no time axis, so noise enters as an input-referred random draw on each
//! input current, integrated over the decision's bandwidth B (DEVELOPERS.md model notes §3): the shot noise of
//! the input current, one-sided `S_I = 2 q I` (R. Sarpeshkar, T. Delbrück, C. Mead, "White noise
//! in MOS transistors and resistors", IEEE Circuits & Devices 9(6), 1993), gives a Gaussian
//! draw of standard deviation `sqrt(2 q I_k B)` on `I_k`.
//!
//! Bandwidth: a user value, or the equivalent noise bandwidth of the input node seen as a single
//! pole: the node's small-signal conductance in weak inversion is `g = s I_k / U_T`, its pole
//! `f_c = g / (2 pi C)`, and a single pole's equivalent noise bandwidth is `(pi/2) f_c`
//! (first-order low-pass; the unit test integrates it numerically), so
//! `B_k = s I_k / (4 C U_T)`. The slope `s` is the circuit's: the current-mode WTA's input node
//! is the drain of its sink transistor, whose gate (the common node) every cell shares, so the
//! node's own conductance is the sink's drain coupling, `s = sigma` (d ln I / d V_D = sigma /
//! U_T), a gain g = kappa/sigma times smaller than the transconductance kappa I / U_T
//! ([`InputShotNoise::for_wta`]; DEVELOPERS.md model notes, "static noise bandwidth").
//! The relative noise is then `sqrt(q s / (2 C U_T))`, independent of the current.
//!
//! Draws are clamped at zero (an input source does not reverse). Randomness comes from the
//! caller's generator (a per-(chip, sample) stream of `rng::stream`).

use rand::Rng;
use rand_distr::StandardNormal;

use super::CompetitionError;
use crate::physics::{thermal_voltage, ELEMENTARY_CHARGE};

const STAGE: &str = "input noise";

/// The bandwidth over which the per-decision noise is integrated.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum NoiseBandwidth {
    /// A fixed noise bandwidth, Hz.
    Fixed(f64),
    /// Equivalent noise bandwidth of each input node as a single pole: `slope I_k / (4 C U_T)`.
    SinglePole {
        /// Input node capacitance, F.
        capacitance: f64,
        /// The node's conductance in units of I/U_T: the sink's drain coupling sigma for the
        /// current-mode WTA (see [`InputShotNoise::for_wta`]).
        slope: f64,
    },
}

/// Input-referred shot noise model for one stage.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct InputShotNoise {
    pub bandwidth: NoiseBandwidth,
    /// Temperature, K (for U_T in the single-pole bandwidth).
    pub temperature: f64,
}

/// Standard deviation of the shot noise of a current `i` (A) over bandwidth `b` (Hz):
/// `sqrt(2 q i b)` (Sarpeshkar, Delbrück, Mead 1993).
#[inline]
pub fn shot_noise_sigma(i: f64, b: f64) -> f64 {
    (2.0 * ELEMENTARY_CHARGE * i.max(0.0) * b).sqrt()
}

impl InputShotNoise {
    /// Check the parameters; the error names the bad one.
    pub fn validate(&self) -> Result<(), CompetitionError> {
        let bad = |parameter, value| CompetitionError::InvalidParameter {
            stage: STAGE,
            parameter,
            value,
            reason: "must be finite and > 0",
        };
        match self.bandwidth {
            NoiseBandwidth::Fixed(b) if !(b.is_finite() && b > 0.0) => {
                return Err(bad("noise.bandwidth", b))
            }
            NoiseBandwidth::SinglePole { capacitance, slope } => {
                if !(capacitance.is_finite() && capacitance > 0.0) {
                    return Err(bad("noise.capacitance", capacitance));
                }
                if !(slope.is_finite() && slope > 0.0) {
                    return Err(bad("noise.slope", slope));
                }
            }
            _ => {}
        }
        if !(self.temperature.is_finite() && self.temperature > 0.0) {
            return Err(bad("temperature", self.temperature));
        }
        Ok(())
    }

    /// The static input noise of a current-mode WTA whose input nodes have capacitance
    /// `capacitance` (F): single-pole bandwidth with the slope `sigma` of the sink's drain
    /// coupling. The input node is the sink's drain; its gate (the common node) is shared by
    /// every cell, so a line's own perturbation sees the drain conductance sigma I / U_T, not
    /// the transconductance kappa I / U_T (DEVELOPERS.md model notes, "static noise bandwidth").
    pub fn for_wta(w: &super::wta::WtaDesign, capacitance: f64, temperature: f64) -> Self {
        InputShotNoise {
            bandwidth: NoiseBandwidth::SinglePole {
                capacitance,
                slope: w.sink_sigma(),
            },
            temperature,
        }
    }

    /// Noise bandwidth (Hz) applied to an input of `i` amperes.
    pub fn bandwidth_for(&self, i: f64) -> f64 {
        match self.bandwidth {
            NoiseBandwidth::Fixed(b) => b,
            NoiseBandwidth::SinglePole { capacitance, slope } => {
                slope * i.max(0.0) / (4.0 * capacitance * thermal_voltage(self.temperature))
            }
        }
    }

    /// Standard deviation (A) of the draw on an input of `i` amperes.
    pub fn sigma_for(&self, i: f64) -> f64 {
        shot_noise_sigma(i, self.bandwidth_for(i))
    }

    /// Write `inputs` plus one noise draw each into `noisy` (same length), clamped at zero.
    /// No allocation. Errors on a length mismatch or non-finite/negative inputs.
    pub fn apply<R: Rng + ?Sized>(
        &self,
        inputs: &[f64],
        noisy: &mut [f64],
        rng: &mut R,
    ) -> Result<(), CompetitionError> {
        self.apply_scaled(inputs, noisy, rng, 1.0)
    }

    /// [`Self::apply`] with the noise multiplied by `scale`: the same draws are made whatever
    /// the scale (0 switches the noise off without shifting later draws of the stream).
    pub fn apply_scaled<R: Rng + ?Sized>(
        &self,
        inputs: &[f64],
        noisy: &mut [f64],
        rng: &mut R,
        scale: f64,
    ) -> Result<(), CompetitionError> {
        if noisy.len() != inputs.len() {
            return Err(CompetitionError::WrongLength {
                stage: STAGE,
                what: "the noisy-input buffer",
                expected: inputs.len(),
                got: noisy.len(),
            });
        }
        for (k, (&i, o)) in inputs.iter().zip(noisy.iter_mut()).enumerate() {
            if !(i.is_finite() && i >= 0.0) {
                return Err(CompetitionError::InvalidInput {
                    stage: STAGE,
                    index: k,
                    value: i,
                    unit: "A",
                    nonnegative: true,
                });
            }
            let z: f64 = rng.sample(StandardNormal);
            *o = (i + scale * self.sigma_for(i) * z).max(0.0);
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Sample standard deviation of the draws matches sqrt(2 q I B) (Sarpeshkar, Delbrück, Mead
    /// 1993) within sampling error (5 % at 20 000 draws: the standard error of a standard
    /// deviation is sigma/sqrt(2 n) ≈ 0.5 %).
    #[test]
    fn draws_have_shot_noise_spread() {
        let model = InputShotNoise {
            bandwidth: NoiseBandwidth::Fixed(1e6),
            temperature: 300.0,
        };
        let i = 1e-9;
        let sigma = (2.0 * 1.602176634e-19 * i * 1e6f64).sqrt();
        let mut rng = crate::rng::stream(3, &[crate::rng::domain::SAMPLE_NOISE]);
        let mut buf = [0.0; 1];
        let n = 20_000;
        let (mut s, mut s2) = (0.0, 0.0);
        for _ in 0..n {
            model.apply(&[i], &mut buf, &mut rng).unwrap();
            let d = buf[0] - i;
            s += d;
            s2 += d * d;
        }
        let mean = s / n as f64;
        let sd = (s2 / n as f64 - mean * mean).sqrt();
        assert!((sd - sigma).abs() < 0.05 * sigma, "{sd} vs {sigma}");
        assert!(mean.abs() < 0.05 * sigma);
    }

    /// The single-pole equivalent noise bandwidth (pi/2) f_c: check by integrating
    /// |H(f)|^2 = 1/(1 + (f/f_c)^2) numerically (the definition of noise bandwidth).
    #[test]
    fn single_pole_bandwidth_matches_integral() {
        let (c, slope, i, t) = (100e-15, 0.75, 1e-9, 300.0);
        let model = InputShotNoise {
            bandwidth: NoiseBandwidth::SinglePole {
                capacitance: c,
                slope,
            },
            temperature: t,
        };
        let g = slope * i / thermal_voltage(t);
        let fc = g / (2.0 * std::f64::consts::PI * c);
        // ∫_0^∞ df / (1 + (f/fc)^2) with f = fc tan(theta): midpoint rule in theta.
        let m = 100_000;
        let h = std::f64::consts::FRAC_PI_2 / m as f64;
        let integral: f64 = (0..m)
            .map(|j| {
                let th = (j as f64 + 0.5) * h;
                let f = fc * th.tan();
                fc / th.cos().powi(2) / (1.0 + (f / fc).powi(2)) * h
            })
            .sum();
        assert!((model.bandwidth_for(i) - integral).abs() < 1e-6 * integral);
    }

    /// Invalid parameters and inputs are errors naming them.
    #[test]
    fn errors() {
        let bad = InputShotNoise {
            bandwidth: NoiseBandwidth::Fixed(-1.0),
            temperature: 300.0,
        };
        assert!(bad
            .validate()
            .unwrap_err()
            .to_string()
            .contains("noise.bandwidth"));
        let ok = InputShotNoise {
            bandwidth: NoiseBandwidth::Fixed(1.0),
            temperature: 300.0,
        };
        let mut rng = crate::rng::stream(1, &[3]);
        assert!(ok.apply(&[1.0, -1.0], &mut [0.0; 2], &mut rng).is_err());
        assert!(ok.apply(&[1.0], &mut [0.0; 2], &mut rng).is_err());
    }
}
