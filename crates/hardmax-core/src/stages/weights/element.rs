//! Weight elements: their nominal design, their static per-chip draws, and their effective
//! value under operating conditions.
//!
//! A weight is a dimensionless gain: an element on input line i multiplies that line's current
//! x_i I_u by w. For a conductance element read with a fixed voltage, w = G / G_unit; for a
//! current-weight or current-mirror element, w is the current ratio.
//!
//! Two element kinds:
//! - [`LinearElement`]: a programmable value in [w_min, w_max] with L evenly spaced levels (or
//!   continuous), programming error, per-decision read noise, drift after programming, and
//!   stuck elements.
//! - [`SubthresholdElement`]: a floating-gate or current-mirror element in weak inversion whose
//!   weight is w = exp(kappa dV / U_T) relative to a matched reference device; the stored
//!   quantity is the voltage dV. Its transistor carries Pelgrom mismatch, and because dV is held
//!   while U_T = kT/q changes, w(T) = w(T0)^(T0/T) (DEVELOPERS.md model notes section 5).

use rand::Rng;
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize};

use super::error::{check_nonneg, check_nonneg_in, check_pos, check_pos_in, invalid, Result};
use super::Conditions;
use crate::device::mismatch::sample_mismatch;
use crate::device::{MosMismatch, Process, Transistor};
use crate::physics::thermal_voltage;

/// Is a sigma relative to the value, or absolute (in weight units)?
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SigmaKind {
    /// sigma is a fraction of the element's (programmed) value: sd = sigma |w|.
    Relative,
    /// sigma is in weight units (the same units as w_min, w_max): sd = sigma.
    Absolute,
}

/// A Gaussian error of given sigma, relative or absolute.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ErrorSpec {
    pub sigma: f64,
    pub kind: SigmaKind,
}

impl ErrorSpec {
    /// No error.
    pub const NONE: ErrorSpec = ErrorSpec {
        sigma: 0.0,
        kind: SigmaKind::Relative,
    };

    /// Standard deviation for an element of value `w`.
    #[inline]
    pub fn sd(&self, w: f64) -> f64 {
        match self.kind {
            SigmaKind::Relative => self.sigma * w.abs(),
            SigmaKind::Absolute => self.sigma,
        }
    }
}

/// Drift after programming, power law w(t) = w0 (t / t0)^(-nu) for t > t0, w0 for t <= t0.
///
/// The power law in time is the usual description of conductance drift of resistive and
/// phase-change memory elements (common practice; e.g. D. Ielmini, A. Lacaita, D. Mantegazza,
/// IEEE Trans. Electron Devices 54(2), 2007, for phase-change resistance drift, from memory).
/// Each element draws its own exponent nu + nu_sigma z (truncated at 0) once per chip.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DriftSpec {
    /// Mean drift exponent nu (0 = no drift).
    pub nu: f64,
    /// Element-to-element sigma of the exponent.
    pub nu_sigma: f64,
    /// Reference time t0 after programming, s (> 0).
    pub t0_s: f64,
}

impl DriftSpec {
    /// No drift.
    pub const NONE: DriftSpec = DriftSpec {
        nu: 0.0,
        nu_sigma: 0.0,
        t0_s: 1.0,
    };

    /// Multiplicative drift factor (t/t0)^(-nu) for `t` seconds after programming.
    #[inline]
    pub fn factor(t0_s: f64, nu: f64, t: f64) -> f64 {
        if t <= t0_s || nu == 0.0 {
            1.0
        } else {
            (t / t0_s).powf(-nu)
        }
    }
}

/// A linear programmable element (conductance or current-weight).
///
/// No temperature dependence is modelled for this element (its weight is a programmed ratio);
/// time since programming acts through [`DriftSpec`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LinearElement {
    /// Smallest programmable weight (>= 0).
    pub w_min: f64,
    /// Largest programmable weight (> w_min).
    pub w_max: f64,
    /// Number of evenly spaced levels in [w_min, w_max] (>= 2); `None` = continuous.
    pub levels: Option<u32>,
    /// Programming error (static, one draw per element per chip). The programmed value is
    /// clipped to [w_min, w_max]: an element cannot hold a value outside its range.
    pub programming_error: ErrorSpec,
    /// Read noise (per decision; relative sigmas apply to the element's effective value).
    pub read_noise: ErrorSpec,
    /// Drift after programming.
    pub drift: DriftSpec,
    /// Fraction of elements stuck at w_min (chip draw, Bernoulli per element).
    pub stuck_at_min_fraction: f64,
    /// Fraction of elements stuck at w_max.
    pub stuck_at_max_fraction: f64,
}

impl Default for LinearElement {
    /// Range [0, 1], 16 levels (4 bits), no error, noise, drift or stuck elements.
    fn default() -> Self {
        Self {
            w_min: 0.0,
            w_max: 1.0,
            levels: Some(16),
            programming_error: ErrorSpec::NONE,
            read_noise: ErrorSpec::NONE,
            drift: DriftSpec::NONE,
            stuck_at_min_fraction: 0.0,
            stuck_at_max_fraction: 0.0,
        }
    }
}

/// A subthreshold element: w = exp(kappa dV / U_T), dV stored (floating gate or held gate
/// voltage) relative to a matched reference device.
///
/// Common temperature dependences of V_T0 and beta cancel between the element and its
/// reference (they are matched); the stored dV does not, hence w(T) = w(T0)^(T0/T). The
/// reference device is shared by an input line, so its own deviation is a line gain error
/// (modelled by [`super::InputDesign::gain_sigma_rel`]); each element's own transistor carries
/// its Pelgrom draw: w = (1 + dbeta) exp(kappa (dV - dV_T0) / U_T). Charge loss over time is
/// not modelled (time since programming does not act on this element).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SubthresholdElement {
    /// Smallest programmable weight (> 0).
    pub w_min: f64,
    /// Largest programmable weight (> w_min).
    pub w_max: f64,
    /// Number of evenly spaced dV levels between U_T0/kappa ln(w_min) and U_T0/kappa ln(w_max)
    /// (so log-spaced weights), >= 2; `None` = continuous.
    pub levels: Option<u32>,
    /// Sigma of the programming error of the stored dV, V.
    pub programming_error_v: f64,
    /// The element's transistor (its polarity picks kappa and the Pelgrom constants).
    pub device: Transistor,
    /// Temperature T0 at which the element is programmed, K.
    pub program_temperature_k: f64,
    /// Program-and-verify: programming measures the element at T0 and compensates its own
    /// mismatch (only the programming error remains at T0). `false` = open-loop programming.
    pub verify_compensates_mismatch: bool,
    /// Relative sigma of per-decision read noise of the element's current (0 = none).
    pub read_noise_rel: f64,
}

impl Default for SubthresholdElement {
    /// Range [1/16, 1], continuous, 1 mV programming error, NMOS 2 µm x 2 µm, programmed at
    /// 300 K open-loop, no read noise.
    fn default() -> Self {
        Self {
            w_min: 1.0 / 16.0,
            w_max: 1.0,
            levels: None,
            programming_error_v: 1e-3,
            device: Transistor {
                polarity: crate::device::Polarity::Nmos,
                w: 2e-6,
                l: 2e-6,
            },
            program_temperature_k: 300.0,
            verify_compensates_mismatch: false,
            read_noise_rel: 0.0,
        }
    }
}

/// Which element a stage is built from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ElementDesign {
    Linear(LinearElement),
    Subthreshold(SubthresholdElement),
}

impl Default for ElementDesign {
    fn default() -> Self {
        ElementDesign::Linear(LinearElement::default())
    }
}

fn check_levels(name: &str, levels: Option<u32>) -> Result<()> {
    match levels {
        Some(l) if l < 2 => Err(invalid(
            name,
            l,
            "an integer >= 2 (omit for a continuous element)",
        )),
        _ => Ok(()),
    }
}

/// Round `t` to the nearest of `levels` evenly spaced points of [lo, hi].
#[inline]
pub(crate) fn quantise_level(t: f64, lo: f64, hi: f64, levels: Option<u32>) -> f64 {
    let t = t.clamp(lo, hi);
    match levels {
        Some(l) if l >= 2 => {
            let step = (hi - lo) / f64::from(l - 1);
            (lo + ((t - lo) / step).round() * step).clamp(lo, hi)
        }
        _ => t,
    }
}

impl LinearElement {
    /// Check every value; names are reported under `prefix`.
    pub fn validate(&self, prefix: &str) -> Result<()> {
        check_nonneg(&format!("{prefix}.w_min"), self.w_min)?;
        if !(self.w_max.is_finite() && self.w_max > self.w_min) {
            return Err(invalid(
                &format!("{prefix}.w_max"),
                self.w_max,
                "a finite number > w_min",
            ));
        }
        check_levels(&format!("{prefix}.levels"), self.levels)?;
        check_nonneg(
            &format!("{prefix}.programming_error.sigma"),
            self.programming_error.sigma,
        )?;
        check_nonneg(&format!("{prefix}.read_noise.sigma"), self.read_noise.sigma)?;
        check_nonneg(&format!("{prefix}.drift.nu"), self.drift.nu)?;
        check_nonneg(&format!("{prefix}.drift.nu_sigma"), self.drift.nu_sigma)?;
        check_pos_in(&format!("{prefix}.drift.t0_s"), self.drift.t0_s, "s")?;
        for (n, f) in [
            ("stuck_at_min_fraction", self.stuck_at_min_fraction),
            ("stuck_at_max_fraction", self.stuck_at_max_fraction),
        ] {
            if !(f.is_finite() && (0.0..=1.0).contains(&f)) {
                return Err(invalid(&format!("{prefix}.{n}"), f, "0 to 1"));
            }
        }
        let sum = self.stuck_at_min_fraction + self.stuck_at_max_fraction;
        if sum > 1.0 {
            return Err(invalid(
                &format!("{prefix}.stuck_at_min_fraction + stuck_at_max_fraction"),
                sum,
                "a sum of at most 1",
            ));
        }
        Ok(())
    }

    /// The nominal level nearest to `target` (no error).
    pub fn quantise(&self, target: f64) -> f64 {
        quantise_level(target, self.w_min, self.w_max, self.levels)
    }
}

impl SubthresholdElement {
    /// Check every value; names are reported under `prefix`.
    pub fn validate(&self, prefix: &str) -> Result<()> {
        check_pos(&format!("{prefix}.w_min"), self.w_min)?;
        if !(self.w_max.is_finite() && self.w_max > self.w_min) {
            return Err(invalid(
                &format!("{prefix}.w_max"),
                self.w_max,
                "a finite number > w_min",
            ));
        }
        check_levels(&format!("{prefix}.levels"), self.levels)?;
        check_nonneg_in(
            &format!("{prefix}.programming_error_v"),
            self.programming_error_v,
            "V",
        )?;
        check_pos_in(&format!("{prefix}.device.w"), self.device.w, "m")?;
        check_pos_in(&format!("{prefix}.device.l"), self.device.l, "m")?;
        check_pos_in(
            &format!("{prefix}.program_temperature_k"),
            self.program_temperature_k,
            "K",
        )?;
        check_nonneg(&format!("{prefix}.read_noise_rel"), self.read_noise_rel)?;
        Ok(())
    }

    /// The stored voltage dV = U_T(T0)/kappa ln(w) that sets weight `w` at T0.
    pub fn dv_for_weight(&self, kappa: f64, w: f64) -> f64 {
        thermal_voltage(self.program_temperature_k) / kappa * w.ln()
    }

    /// The nominal dV level nearest to the one of `target` (no error), V.
    pub fn quantise_dv(&self, kappa: f64, target: f64) -> f64 {
        let lo = self.dv_for_weight(kappa, self.w_min);
        let hi = self.dv_for_weight(kappa, self.w_max);
        quantise_level(
            self.dv_for_weight(kappa, target.clamp(self.w_min, self.w_max)),
            lo,
            hi,
            self.levels,
        )
    }
}

/// Weight of a subthreshold element: (1 + dbeta) exp(kappa (dV - dV_T0) / U_T) at `temperature_k`.
#[inline]
pub fn subthreshold_weight(kappa: f64, dv: f64, mm: MosMismatch, temperature_k: f64) -> f64 {
    (1.0 + mm.dbeta_rel).max(0.0) * (kappa * (dv - mm.dvt0) / thermal_voltage(temperature_k)).exp()
}

/// Stuck state of a linear element.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Stuck {
    No,
    AtMin,
    AtMax,
}

/// One chip's draws for an array of elements (row-major over outputs x input lines).
#[derive(Clone, Debug, PartialEq)]
pub enum ElementArrayChip {
    Linear {
        design: LinearElement,
        /// Programmed value (level + programming error, clipped to range).
        programmed: Vec<f64>,
        stuck: Vec<Stuck>,
        /// Per-element drift exponent.
        nu: Vec<f64>,
    },
    Subthreshold {
        design: SubthresholdElement,
        kappa: f64,
        /// Stored dV, V (level + programming error + verify correction).
        dv: Vec<f64>,
        mismatch: Vec<MosMismatch>,
    },
}

impl ElementArrayChip {
    /// Program one array of elements to `targets` (already inside [w_min, w_max]).
    ///
    /// Draws per element, whatever the sigmas (so that sweeping a sigma reuses the same draws):
    /// linear: one uniform (stuck), one normal (programming), one normal (drift exponent);
    /// subthreshold: one normal (programming), then the Pelgrom pair of normals.
    pub(crate) fn program<R: Rng>(
        element: &ElementDesign,
        process: &Process,
        targets: &[f64],
        rng: &mut R,
    ) -> Self {
        match element {
            ElementDesign::Linear(e) => {
                let n = targets.len();
                let mut programmed = Vec::with_capacity(n);
                let mut stuck = Vec::with_capacity(n);
                let mut nu = Vec::with_capacity(n);
                for &t in targets {
                    let u: f64 = rng.gen();
                    let z_p: f64 = rng.sample(StandardNormal);
                    let z_nu: f64 = rng.sample(StandardNormal);
                    let q = e.quantise(t);
                    let p = (q + e.programming_error.sd(q) * z_p).clamp(e.w_min, e.w_max);
                    let s = if u < e.stuck_at_min_fraction {
                        Stuck::AtMin
                    } else if u < e.stuck_at_min_fraction + e.stuck_at_max_fraction {
                        Stuck::AtMax
                    } else {
                        Stuck::No
                    };
                    programmed.push(p);
                    stuck.push(s);
                    nu.push((e.drift.nu + e.drift.nu_sigma * z_nu).max(0.0));
                }
                ElementArrayChip::Linear {
                    design: e.clone(),
                    programmed,
                    stuck,
                    nu,
                }
            }
            ElementDesign::Subthreshold(e) => {
                let tech = process.tech(e.device.polarity);
                let kappa = 1.0 / tech.n;
                let ut0 = thermal_voltage(e.program_temperature_k);
                let mut dv = Vec::with_capacity(targets.len());
                let mut mismatch = Vec::with_capacity(targets.len());
                for &t in targets {
                    let z_p: f64 = rng.sample(StandardNormal);
                    let mm = sample_mismatch(rng, tech, &e.device);
                    let mut v = e.quantise_dv(kappa, t) + e.programming_error_v * z_p;
                    if e.verify_compensates_mismatch {
                        // Programming reads (1+dbeta) exp(kappa (v - dVT)/U_T0) and corrects
                        // v until it reads the target level.
                        v += mm.dvt0 - ut0 / kappa * (1.0 + mm.dbeta_rel).max(1e-300).ln();
                    }
                    dv.push(v);
                    mismatch.push(mm);
                }
                ElementArrayChip::Subthreshold {
                    design: e.clone(),
                    kappa,
                    dv,
                    mismatch,
                }
            }
        }
    }

    /// Number of elements.
    pub fn len(&self) -> usize {
        match self {
            ElementArrayChip::Linear { programmed, .. } => programmed.len(),
            ElementArrayChip::Subthreshold { dv, .. } => dv.len(),
        }
    }

    /// Is the array empty?
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Effective weight and per-decision read-noise variance (weight units squared) of
    /// element `k` under `c`. Out-of-range `k` gives (0, 0).
    pub fn effective(&self, k: usize, c: &Conditions) -> (f64, f64) {
        match self {
            ElementArrayChip::Linear {
                design,
                programmed,
                stuck,
                nu,
            } => {
                let (Some(&p), Some(&s), Some(&n)) = (programmed.get(k), stuck.get(k), nu.get(k))
                else {
                    return (0.0, 0.0);
                };
                let w = match s {
                    Stuck::AtMin => design.w_min,
                    Stuck::AtMax => design.w_max,
                    Stuck::No => {
                        p * DriftSpec::factor(design.drift.t0_s, n, c.time_since_programming_s)
                    }
                };
                let sd = design.read_noise.sd(w);
                (w, sd * sd)
            }
            ElementArrayChip::Subthreshold {
                design,
                kappa,
                dv,
                mismatch,
            } => {
                let (Some(&v), Some(&mm)) = (dv.get(k), mismatch.get(k)) else {
                    return (0.0, 0.0);
                };
                let w = subthreshold_weight(*kappa, v, mm, c.temperature_k);
                let sd = design.read_noise_rel * w;
                (w, sd * sd)
            }
        }
    }

    /// Does this array add per-decision read noise?
    pub fn has_read_noise(&self) -> bool {
        match self {
            ElementArrayChip::Linear { design, .. } => design.read_noise.sigma > 0.0,
            ElementArrayChip::Subthreshold { design, .. } => design.read_noise_rel > 0.0,
        }
    }
}

impl ElementDesign {
    /// Check every value; names are reported under `prefix` (e.g. `element`).
    pub fn validate(&self, prefix: &str) -> Result<()> {
        match self {
            ElementDesign::Linear(e) => e.validate(&format!("{prefix}.linear")),
            ElementDesign::Subthreshold(e) => e.validate(&format!("{prefix}.subthreshold")),
        }
    }

    /// Programmable range (w_min, w_max).
    pub fn range(&self) -> (f64, f64) {
        match self {
            ElementDesign::Linear(e) => (e.w_min, e.w_max),
            ElementDesign::Subthreshold(e) => (e.w_min, e.w_max),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Rounding to the nearest of L evenly spaced levels (uniform quantiser; B. Widrow,
    /// I. Kollár, "Quantization Noise", 2008): error at most half a step, levels hit exactly.
    #[test]
    fn level_quantiser() {
        let step = 1.0 / 3.0;
        for k in 0..=300 {
            let t = k as f64 / 300.0;
            let q = quantise_level(t, 0.0, 1.0, Some(4));
            assert!((q - t).abs() <= 0.5 * step + 1e-15);
            let code = q / step;
            assert!((code - code.round()).abs() < 1e-12);
        }
        assert_eq!(quantise_level(0.37, 0.0, 1.0, None), 0.37);
        assert_eq!(quantise_level(1.5, 0.2, 1.0, Some(2)), 1.0);
    }

    /// Drift factor (t/t0)^(-nu) (power law, common practice), 1 before t0.
    #[test]
    fn drift_factor() {
        assert_eq!(DriftSpec::factor(1.0, 0.1, 0.5), 1.0);
        assert!((DriftSpec::factor(1.0, 0.1, 10.0) - 10f64.powf(-0.1)).abs() < 1e-15);
    }

    #[test]
    fn validation_names_parameters() {
        let e = LinearElement {
            stuck_at_min_fraction: 0.7,
            stuck_at_max_fraction: 0.6,
            ..LinearElement::default()
        };
        let m = e.validate("element.linear").unwrap_err().to_string();
        assert!(
            m.contains("stuck_at_min_fraction + stuck_at_max_fraction"),
            "{m}"
        );
        let e = LinearElement {
            drift: DriftSpec {
                t0_s: 0.0,
                ..DriftSpec::NONE
            },
            ..LinearElement::default()
        };
        assert!(e
            .validate("x")
            .unwrap_err()
            .to_string()
            .contains("x.drift.t0_s"));
    }
}
