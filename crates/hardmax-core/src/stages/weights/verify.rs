//! Program-and-verify of linear weight elements (DEVELOPERS.md model notes §5.1).
//!
//! One-shot programming writes each element once: the programmed value is the level plus one
//! draw of the element's programming error. Program-and-verify repeats write, read, compare:
//!
//! 1. The first write is the one-shot write itself (the same draw from the chip stream), so a
//!    cycle limit of 1 leaves every element exactly as one-shot programming does.
//! 2. A verify read returns the held value (the programmed value; w_min or w_max for a stuck
//!    element) plus a read error `read_noise (w_max - w_min) y`, y standard normal.
//! 3. When `|read - level| <= tolerance (w_max - w_min)` the element is verified and stops.
//! 4. Otherwise, below the cycle limit, a correcting write aims at `programmed + (level - read)`
//!    (the difference the read reports) and lands there with the element's programming error
//!    at the level (`programming_error.sd(level)`, one more draw), clipped to [w_min, w_max].
//!    Without read noise the aim is the level itself, so every write is an independent draw
//!    and the cycle count is geometric with p = P(|write error| <= tolerance).
//! 5. An element still outside the tolerance after `max_cycles` writes keeps its last value and
//!    is counted as unverified (a stuck element away from its level always ends there).
//!
//! Tolerance and read noise are fractions of the element's full range (w_max - w_min): a
//! tolerance of 0.01 accepts an element within 1 % of full scale of its level. One cycle = one
//! write and one verify read; drift acts only after programming (reads happen at once).
//!
//! Draws: element e of array a (0 = positive, 1 = subtracted) of weight stage k reads its own
//! stream `stream(seed, [CHIP, (point,) chip, VERIFY_STREAM + k, a, e])`: per cycle one normal
//! (the read), then, if another write follows, one normal (the write). A separate stream per
//! element keeps every element's sequence the same whatever the tolerance or the cycle limit,
//! so swept settings stay paired, and leaves every existing stream untouched.

use rand::Rng;
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize};
use thiserror::Error;

use super::element::{ElementArrayChip, ElementDesign, LinearElement, Stuck};

/// First stream index of the verify draws: weight stage k uses `VERIFY_STREAM + k` (after the
/// competition stage's 1000, the hidden circuit's 1001 and the trim DACs' 1002).
pub const VERIFY_STREAM: u64 = 1100;

/// Largest cycle limit accepted.
pub const MAX_VERIFY_CYCLES: u32 = 10_000;

/// The program-and-verify procedure's settings.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ProgramVerify {
    /// Accepted |read - level|, as a fraction of the element's range w_max - w_min (> 0).
    pub tolerance: f64,
    /// Most writes per element, the first included (1..=[`MAX_VERIFY_CYCLES`]).
    pub max_cycles: u32,
    /// Sigma of one verify read, as a fraction of the element's range (>= 0).
    pub read_noise: f64,
    /// Time of one write-and-read cycle, s (>= 0); the programming time of a die is its cycles
    /// times this (elements programmed one after another).
    pub cycle_time_s: f64,
}

/// A refused program-and-verify setting; names the core quantity and the valid range.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum VerifyError {
    #[error(
        "verify tolerance {value} must be a finite number above 0 (a fraction of the element's \
         range, e.g. 0.01)"
    )]
    Tolerance { value: f64 },
    #[error("verify cycle limit {value} is outside 1..={MAX_VERIFY_CYCLES}")]
    MaxCycles { value: u32 },
    #[error(
        "verify read noise {value} must be a finite number >= 0 (a fraction of the element's \
         range)"
    )]
    ReadNoise { value: f64 },
    #[error("verify cycle time {value} s must be a finite number >= 0")]
    CycleTime { value: f64 },
    #[error(
        "program-and-verify is modelled for linear elements only; a subthreshold element has \
         its own verify option, which compensates the element's mismatch"
    )]
    Element,
}

impl ProgramVerify {
    /// Check every value.
    pub fn validate(&self) -> Result<(), VerifyError> {
        if !(self.tolerance.is_finite() && self.tolerance > 0.0) {
            return Err(VerifyError::Tolerance {
                value: self.tolerance,
            });
        }
        if !(1..=MAX_VERIFY_CYCLES).contains(&self.max_cycles) {
            return Err(VerifyError::MaxCycles {
                value: self.max_cycles,
            });
        }
        if !(self.read_noise.is_finite() && self.read_noise >= 0.0) {
            return Err(VerifyError::ReadNoise {
                value: self.read_noise,
            });
        }
        if !(self.cycle_time_s.is_finite() && self.cycle_time_s >= 0.0) {
            return Err(VerifyError::CycleTime {
                value: self.cycle_time_s,
            });
        }
        Ok(())
    }

    /// Check that `element` can be programmed this way.
    pub fn check_element(&self, element: &ElementDesign) -> Result<(), VerifyError> {
        match element {
            ElementDesign::Linear(_) => Ok(()),
            ElementDesign::Subthreshold(_) => Err(VerifyError::Element),
        }
    }

    /// Program-and-verify one element of level `level` whose first write gave `first`; `stuck`
    /// is its stuck state. Returns (programmed value, cycles, verified).
    pub fn element<R: Rng>(
        &self,
        e: &LinearElement,
        level: f64,
        first: f64,
        stuck: Stuck,
        rng: &mut R,
    ) -> (f64, u32, bool) {
        let range = e.w_max - e.w_min;
        let tol = self.tolerance * range;
        let read_sd = self.read_noise * range;
        let write_sd = e.programming_error.sd(level);
        let mut p = first;
        let mut cycles = 1u32;
        loop {
            let y: f64 = rng.sample(StandardNormal);
            let held = match stuck {
                Stuck::No => p,
                Stuck::AtMin => e.w_min,
                Stuck::AtMax => e.w_max,
            };
            let read = held + read_sd * y;
            if (read - level).abs() <= tol {
                return (p, cycles, true);
            }
            if cycles >= self.max_cycles {
                return (p, cycles, false);
            }
            let z: f64 = rng.sample(StandardNormal);
            let aim = p + (level - read);
            p = (aim + write_sd * z).clamp(e.w_min, e.w_max);
            cycles += 1;
        }
    }

    /// Program-and-verify every element of `array` (one-shot programmed to `targets`, the
    /// same targets as [`ElementArrayChip::program`]); element `i` draws from `stream_for(i)`.
    pub fn array<R: Rng>(
        &self,
        array: &mut ElementArrayChip,
        targets: &[f64],
        mut stream_for: impl FnMut(usize) -> R,
    ) -> Result<ProgramCounts, VerifyError> {
        let ElementArrayChip::Linear {
            design,
            programmed,
            stuck,
            ..
        } = array
        else {
            return Err(VerifyError::Element);
        };
        let mut counts = ProgramCounts::default();
        for (i, ((p, &s), &t)) in programmed
            .iter_mut()
            .zip(stuck.iter())
            .zip(targets)
            .enumerate()
        {
            let level = design.quantise(t);
            let (v, cycles, ok) = self.element(design, level, *p, s, &mut stream_for(i));
            *p = v;
            counts.elements += 1;
            counts.cycles += u64::from(cycles);
            counts.unverified += u64::from(!ok);
        }
        Ok(counts)
    }
}

/// What programming a die cost: elements, write-read cycles, elements left unverified.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct ProgramCounts {
    pub elements: u64,
    pub cycles: u64,
    pub unverified: u64,
}

impl ProgramCounts {
    /// Add another array's counts.
    pub fn merge(&mut self, o: &ProgramCounts) {
        self.elements += o.elements;
        self.cycles += o.cycles;
        self.unverified += o.unverified;
    }

    /// Mean cycles per element (0 for no elements).
    pub fn cycles_per_element(&self) -> f64 {
        if self.elements == 0 {
            0.0
        } else {
            self.cycles as f64 / self.elements as f64
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::stream;
    use crate::stages::weights::element::{ErrorSpec, SigmaKind};
    use proptest::prelude::*;

    fn element(sigma: f64) -> LinearElement {
        LinearElement {
            levels: None,
            programming_error: ErrorSpec {
                sigma,
                kind: SigmaKind::Absolute,
            },
            ..LinearElement::default()
        }
    }

    fn pv(tolerance: f64, max_cycles: u32, read_noise: f64) -> ProgramVerify {
        ProgramVerify {
            tolerance,
            max_cycles,
            read_noise,
            cycle_time_s: 1e-6,
        }
    }

    /// One-shot write of level `q` as `ElementArrayChip::program` makes it.
    fn one_shot(e: &LinearElement, q: f64, z: f64) -> f64 {
        (q + e.programming_error.sd(q) * z).clamp(e.w_min, e.w_max)
    }

    proptest! {
        /// Without read noise and with a cycle limit that is not reached, every element ends
        /// within the tolerance of its level (the definition of the procedure; common practice,
        /// no source).
        #[test]
        fn verified_within_tolerance(
            q in 0.05f64..0.95, sigma in 0.001f64..0.2, tol in 0.005f64..0.1, seed in 0u64..1000
        ) {
            let e = element(sigma);
            let v = pv(tol, MAX_VERIFY_CYCLES, 0.0);
            let mut first_rng = stream(seed, &[9, 0]);
            let z: f64 = first_rng.sample(StandardNormal);
            let (p, cycles, ok) = v.element(&e, q, one_shot(&e, q, z), Stuck::No,
                &mut stream(seed, &[9, 1]));
            // P(|N(0, 0.2)| <= 0.005) ~ 0.02: 10^4 cycles fail with probability ~ e^-200.
            prop_assert!(ok, "not verified after {cycles} cycles");
            prop_assert!((p - q).abs() <= tol * (e.w_max - e.w_min) + 1e-15);
        }
    }

    /// A cycle limit of 1 leaves every element exactly at its one-shot value.
    #[test]
    fn one_cycle_is_one_shot() {
        let e = element(0.05);
        let v = pv(0.001, 1, 0.02);
        let mut r = stream(3, &[9, 2]);
        let mut unverified = 0;
        for i in 0..1000u64 {
            let q = (i as f64 + 0.5) / 1000.0;
            let z: f64 = r.sample(StandardNormal);
            let first = one_shot(&e, q, z);
            let (p, cycles, ok) = v.element(&e, q, first, Stuck::No, &mut stream(3, &[9, 3, i]));
            assert_eq!(p.to_bits(), first.to_bits());
            assert_eq!(cycles, 1);
            unverified += u64::from(!ok);
        }
        // sigma 0.05 against tolerance 0.001: almost every element is reported unverified.
        assert!(unverified > 900, "{unverified}");
    }

    /// Mean cycles of `n` elements at level 0.5 with write sigma `s`, tolerance `t`, no read
    /// noise, no limit reached; also their variance.
    fn mean_cycles(s: f64, t: f64, n: u64, seed: u64) -> (f64, f64) {
        let e = element(s);
        let v = pv(t, MAX_VERIFY_CYCLES, 0.0);
        let mut r = stream(seed, &[9, 4]);
        let c: Vec<f64> = (0..n)
            .map(|i| {
                let z: f64 = r.sample(StandardNormal);
                let (_, c, ok) = v.element(
                    &e,
                    0.5,
                    one_shot(&e, 0.5, z),
                    Stuck::No,
                    &mut stream(seed, &[9, 5, i]),
                );
                assert!(ok);
                f64::from(c)
            })
            .collect();
        let m = c.iter().sum::<f64>() / n as f64;
        let var = c.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1) as f64;
        (m, var)
    }

    /// Without read noise each write is an independent draw N(level, s) (the level 0.5 lies
    /// more than 10 s inside the range, so clipping never acts), so the cycle count is
    /// geometric with p = P(|N(0, s)| <= t) = erf(t / (s sqrt 2)) and mean 1/p, variance
    /// (1 - p)/p^2 (geometric distribution, e.g. W. Feller, "An Introduction to Probability
    /// Theory", vol. 1, ch. XIII). erf from statrs. The Monte Carlo mean must lie within 4
    /// standard errors of 1/p.
    #[test]
    fn cycles_are_geometric() {
        for (s, t) in [(0.02, 0.02), (0.02, 0.01), (0.04, 0.01)] {
            let p = statrs::function::erf::erf(t / (s * std::f64::consts::SQRT_2));
            let n = 20_000;
            let (m, _) = mean_cycles(s, t, n, 11);
            let se = ((1.0 - p) / (p * p) / n as f64).sqrt();
            assert!(
                (m - 1.0 / p).abs() <= 4.0 * se,
                "s {s} t {t}: mean {m}, closed form {} (se {se})",
                1.0 / p
            );
        }
    }

    /// A tighter tolerance needs more cycles (the closed form above is decreasing in t).
    #[test]
    fn cycles_rise_as_tolerance_tightens() {
        let tols = [0.04, 0.02, 0.01, 0.005];
        let means: Vec<f64> = tols
            .iter()
            .map(|&t| mean_cycles(0.02, t, 4000, 5).0)
            .collect();
        for w in means.windows(2) {
            assert!(w[1] > w[0], "{means:?}");
        }
    }

    /// With read noise, a verified element's error is the read error's at most plus the
    /// tolerance: its spread shrinks with the tolerance but stays near the read sigma.
    #[test]
    fn read_noise_limits_the_verified_error() {
        let e = element(0.05);
        let v = pv(0.002, MAX_VERIFY_CYCLES, 0.01);
        let mut r = stream(8, &[9, 6]);
        let n = 4000u64;
        let mut sq = 0.0;
        for i in 0..n {
            let z: f64 = r.sample(StandardNormal);
            let (p, _, ok) = v.element(
                &e,
                0.5,
                one_shot(&e, 0.5, z),
                Stuck::No,
                &mut stream(8, &[9, 7, i]),
            );
            assert!(ok);
            sq += (p - 0.5).powi(2);
        }
        let rms = (sq / n as f64).sqrt();
        // The accepted read is within 0.002 of the level; the true value differs from the read
        // by one read error (sigma 0.01), so the rms error lies near 0.01, far below one-shot's
        // 0.05 (common practice, no source).
        assert!(rms > 0.007 && rms < 0.013, "{rms}");
    }

    /// A stuck element never verifies unless its stuck value is within the tolerance.
    #[test]
    fn stuck_element_hits_the_limit() {
        let e = element(0.01);
        let v = pv(0.01, 20, 0.0);
        let (p, c, ok) = v.element(&e, 0.5, 0.51, Stuck::AtMax, &mut stream(1, &[9, 8]));
        assert!(!ok);
        assert_eq!(c, 20);
        assert!((0.0..=1.0).contains(&p));
    }

    #[test]
    fn validation_refuses_bad_settings() {
        assert!(pv(0.01, 10, 0.0).validate().is_ok());
        assert!(matches!(
            pv(0.0, 10, 0.0).validate(),
            Err(VerifyError::Tolerance { .. })
        ));
        assert!(matches!(
            pv(f64::NAN, 10, 0.0).validate(),
            Err(VerifyError::Tolerance { .. })
        ));
        assert!(matches!(
            pv(0.01, 0, 0.0).validate(),
            Err(VerifyError::MaxCycles { .. })
        ));
        assert!(matches!(
            pv(0.01, MAX_VERIFY_CYCLES + 1, 0.0).validate(),
            Err(VerifyError::MaxCycles { .. })
        ));
        assert!(matches!(
            pv(0.01, 10, -0.1).validate(),
            Err(VerifyError::ReadNoise { .. })
        ));
        let mut b = pv(0.01, 10, 0.0);
        b.cycle_time_s = -1.0;
        assert!(matches!(b.validate(), Err(VerifyError::CycleTime { .. })));
    }
}
