//! Input encoding: features in [0, 1] -> input DAC -> input-line currents.
//!
//! Each feature x (min-max scaled on the training split) is clipped to [0, 1] at run time,
//! quantised by a B-bit input DAC (or passed through ideally), and multiplied by the full-scale
//! unit current `I_u`. The intercept (bias) of the classifier is one more input line held at
//! full scale (x = 1). Every input line, the bias line included, may carry a static gain error
//! of its DAC / current source (a chip draw): line current = (1 + e_i) x_q I_u with
//! e_i ~ N(0, `gain_sigma_rel`^2).

use rand::Rng;
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize};

use super::error::{check_nonneg, check_pos_in, invalid, Result};

/// Largest accepted DAC resolution (bits).
pub const MAX_DAC_BITS: u32 = 24;

/// Nominal input encoding of a stage (part of the design).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InputDesign {
    /// Input DAC resolution in bits (1..=24); `None` = ideal (no quantisation).
    pub dac_bits: Option<u32>,
    /// Full-scale unit current I_u of an input line, A (x = 1 gives I_u).
    pub full_scale_current_a: f64,
    /// Relative sigma of each input line's static gain error (chip draw); 0 = none.
    pub gain_sigma_rel: f64,
}

impl Default for InputDesign {
    /// 8-bit DAC, 1 nA full scale (a weak-inversion level), no gain mismatch.
    fn default() -> Self {
        Self {
            dac_bits: Some(8),
            full_scale_current_a: 1e-9,
            gain_sigma_rel: 0.0,
        }
    }
}

impl InputDesign {
    /// Check every value; the error names the parameter under `prefix` (e.g. `input`).
    pub fn validate(&self, prefix: &str) -> Result<()> {
        if let Some(b) = self.dac_bits {
            if b == 0 || b > MAX_DAC_BITS {
                return Err(invalid(
                    &format!("{prefix}.dac_bits"),
                    b,
                    "1 to 24 bits (omit for an ideal DAC)",
                ));
            }
        }
        check_pos_in(
            &format!("{prefix}.full_scale_current_a"),
            self.full_scale_current_a,
            "A",
        )?;
        check_nonneg(&format!("{prefix}.gain_sigma_rel"), self.gain_sigma_rel)?;
        Ok(())
    }

    /// The quantiser of this design.
    pub fn quantiser(&self) -> Quantiser {
        Quantiser::new(self.dac_bits)
    }

    /// Draw the static gain factors (1 + e_i) of `lines` input lines: exactly `lines` normal
    /// draws from `rng`, whatever the sigma (so that sweeping the sigma reuses the same draws).
    pub(crate) fn sample_gains<R: Rng>(&self, rng: &mut R, lines: usize) -> Vec<f64> {
        (0..lines)
            .map(|_| {
                let z: f64 = rng.sample(StandardNormal);
                1.0 + self.gain_sigma_rel * z
            })
            .collect()
    }
}

/// A uniform rounding quantiser on [0, 1] with 2^B codes (LSB = 1 / (2^B - 1)), or ideal.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Quantiser {
    /// 2^B - 1, or 0 for an ideal DAC.
    steps: f64,
    /// 1 / steps (0 for the ideal DAC).
    lsb: f64,
}

impl Quantiser {
    /// `None` = ideal. Bits are assumed already validated (1..=24).
    pub fn new(bits: Option<u32>) -> Self {
        let steps = match bits {
            Some(b) if (1..=MAX_DAC_BITS).contains(&b) => ((1u64 << b) - 1) as f64,
            _ => 0.0,
        };
        let lsb = if steps > 0.0 { 1.0 / steps } else { 0.0 };
        Self { steps, lsb }
    }

    /// Is this the ideal (pass-through) DAC?
    pub fn is_ideal(&self) -> bool {
        self.steps == 0.0
    }

    /// The LSB in units of full scale (0 for the ideal DAC).
    pub fn lsb(&self) -> f64 {
        self.lsb
    }

    /// Clip `x` to [0, 1] and round it to the nearest code. NaN is not handled here (callers
    /// reject non-finite inputs first).
    #[inline(always)]
    pub fn apply(&self, x: f64) -> f64 {
        let c = x.clamp(0.0, 1.0);
        if self.steps == 0.0 {
            c
        } else {
            // c * steps is in [0, 2^24 - 1]: adding 0.5 and truncating is round-half-up, the
            // same as `round()` for non-negative values, and compiles to one conversion
            // instead of a library call on baseline x86-64.
            ((c * self.steps + 0.5) as u32) as f64 * self.lsb
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rejects_bad_bits_and_currents() {
        let mut d = InputDesign {
            dac_bits: Some(0),
            ..InputDesign::default()
        };
        let e = d.validate("input").unwrap_err().to_string();
        assert!(e.contains("input.dac_bits") && e.contains("1 to 24"), "{e}");
        d.dac_bits = Some(25);
        assert!(d.validate("input").is_err());
        d.dac_bits = Some(24);
        assert!(d.validate("input").is_ok());
        d.full_scale_current_a = f64::NAN;
        let e = d.validate("input").unwrap_err().to_string();
        assert!(e.contains("full_scale_current_a"), "{e}");
    }

    /// A B-bit rounding quantiser has 2^B codes spanning full scale, LSB = FS/(2^B - 1)
    /// (standard uniform mid-tread quantiser; B. Widrow, I. Kollár, "Quantization Noise", 2008).
    #[test]
    fn codes_and_lsb() {
        let q = Quantiser::new(Some(3));
        assert_eq!(q.lsb(), 1.0 / 7.0);
        assert_eq!(q.apply(0.0), 0.0);
        assert_eq!(q.apply(1.0), 1.0);
        assert_eq!(q.apply(2.0), 1.0); // clipped
        assert_eq!(q.apply(-0.3), 0.0); // clipped
        assert_eq!(q.apply(0.5 / 7.0 + 1e-9), 1.0 / 7.0);
        assert!(Quantiser::new(None).is_ideal());
    }
}
