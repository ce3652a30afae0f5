//! Current-mode WTA with hysteresis: the current-mode WTA of [`super::wta`] with each cell's
//! output current mirrored back, a fraction alpha of it, into the cell's own input node.
//!
//! The circuit is the positive-feedback variant of the current-mode WTA: J. Lazzaro,
//! S. Ryckebusch, M. Mahowald, C. Mead, "Winner-take-all networks of O(N) complexity", Advances
//! in Neural Information Processing Systems 1 (1989), describe adding positive feedback to the
//! cells so that a winner holds (hysteresis); G. Indiveri, "A current-mode hysteretic
//! winner-take-all network, with excitatory and inhibitory coupling", Analog Integrated Circuits
//! and Signal Processing 28 (2001) 279-291, builds the local positive feedback from each cell's
//! output back into its input. What is modelled here is the arrangement of the brief: a PMOS
//! current mirror (diode P_k, feedback device Q_k of alpha times P_k's width) carries a copy of
//! B_k's current, `I_F,k = alpha_k I_B,k`, into V_k. The analysis below is ours.
//!
//! Cell k: input I_k and feedback I_F,k into V_k; NMOS A_k (gate V_C, drain V_k) sinks them;
//! NMOS B_k (gate V_k, source V_C) gives the output I_B,k; the bias drains V_C. Node
//! equations: `I_k + alpha_k I_B,k = I_A,k` at V_k, `Σ I_B,k = I_bias` at V_C. The load of line
//! k is therefore `I_A,k - alpha_k I_B,k` (still a function of V_k and V_C only: the arrowhead
//! structure of [`SharedNodeCircuit`] is kept).
//!
//! ## Mirror
//!
//! P_k and Q_k are taken in weak-inversion saturation without drain coupling, so the copy is
//! `alpha_k = alpha (1 + dbeta_Q)/(1 + dbeta_P) exp(-(dV_T,Q - dV_T,P)/(n_p U_T))` of B_k's
//! current (threshold deviations added to |V_T0|, `n_p` the PMOS slope factor): every mirror
//! device carries its own mismatch. The same constant gain is written into the netlist export.
//!
//! ## Several DC solutions
//!
//! With feedback the node equations have several solutions for the same inputs (the winner
//! that holds, the one that would take over, and an unstable one between). The solve therefore
//! carries state: it starts from the previous operating point held in the [`Workspace`] (or
//! from every node at 0 V when there is none: a power-up), integrates the node equations with
//! the generic transient until they settle (the branch the circuit reaches from that state),
//! and polishes the result with Newton on the exact DC equations
//! ([`super::dc`], "Circuits that hold state"). The reached operating point becomes the new
//! state.
//!
//! ## Hysteresis width and the bound on alpha (model notes §4.5)
//!
//! Two cells, inputs `I_m ± x/2`, weak inversion with gain g: the share s of cell 1 satisfies
//! `x(s) = 2 ((r - 1) I_m + alpha I_b (r (1 - s) - s)) / (1 + r)`, `r = (s/(1-s))^(1/g)`; the
//! up-sweep switches at the local maximum of x(s), the down-sweep at the local minimum, and the
//! width is their difference ([`hysteresis_width_closed_form`]); for large g it approaches
//! `2 alpha I_b`. The winner's state stays a stable operating point (not an oscillation) for any
//! input when `alpha < (C_in / C_C) / (kappa - sigma)` ([`HysteresisDesign::feedback_limit`]);
//! a larger fraction is refused.
//!
//! Numerical core: no I/O, no printing.

#![allow(clippy::needless_range_loop)]

use crate::device::{Ekv, MosMismatch, Polarity, Transistor};
use crate::physics::thermal_voltage;

use super::circuit::{Branch, CircuitMessages, DcStrategy, SharedNodeCircuit};
use super::common::{check_count, check_mismatch, draw_n};
use super::mos::Mos;
use super::source::{CurrentSource, SourceKeys};
use super::wta::{WtaChip, WtaCircuit, WtaDesign};
use super::{positive, CompetitionError};

const STAGE: &str = "hysteretic current-mode WTA";

static MESSAGES: CircuitMessages = CircuitMessages {
    source_keys: SourceKeys {
        current: "bias current",
        device: "bias.device",
        w: "bias.device.w",
        l: "bias.device.l",
        gate_voltage: "bias.gate_voltage",
        nmos_reason: "the bias transistor is an NMOS",
        nmos_first: false,
    },
    below_reason: "the inputs cannot carry the bias current with the common node V_C \
                   at or above ground",
    below_fix: "raise the input currents or lower the bias current",
    above_reason: "the common node V_C would have to rise above the supply",
    above_fix: "raise the supply, widen the sink transistors, or lower the input currents",
    line_reason: "an input node would have to rise above the supply: its sink transistor \
                  cannot carry the input and feedback currents",
    line_fix: "widen the sink transistors (W/L), lower the input currents or the feedback, \
               or raise the supply",
};

/// Nominal design of a hysteretic current-mode WTA (every quantity SI).
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct HysteresisDesign {
    /// The current-mode WTA (cells, bias, supply, capacitances).
    pub wta: WtaDesign,
    /// Feedback fraction alpha: the share of each cell's output current mirrored back into its
    /// input node (0 = the plain WTA).
    pub feedback: f64,
    /// The mirror's diode device P_k (PMOS); the feedback device Q_k has `feedback` times its
    /// width and the same length.
    pub mirror: Transistor,
}

impl HysteresisDesign {
    /// Largest feedback fraction for which a winner's state is a stable operating point for
    /// every input (model notes §4.5): `(C_in / C_C) / (kappa - sigma)` with the sink's
    /// kappa = 1/n and drain coupling sigma; infinite without a common-node capacitance.
    pub fn feedback_limit(&self) -> f64 {
        let kappa = 1.0 / self.wta.process.nmos.n;
        let sigma = self.wta.sink_sigma();
        if self.wta.common_capacitance == 0.0 {
            return f64::INFINITY;
        }
        (self.wta.input_capacitance / self.wta.common_capacitance) / (kappa - sigma).max(1e-12)
    }

    /// The feedback device Q_k (width alpha W of the diode; the diode's width when alpha = 0,
    /// where its draw is multiplied by zero).
    pub fn feedback_device(&self) -> Transistor {
        let f = if self.feedback > 0.0 {
            self.feedback
        } else {
            1.0
        };
        Transistor {
            polarity: self.mirror.polarity,
            w: self.mirror.w * f,
            l: self.mirror.l,
        }
    }

    /// Check every parameter; the error names the first bad one.
    pub fn validate(&self) -> Result<(), CompetitionError> {
        self.wta.validate()?;
        if !(self.feedback.is_finite() && self.feedback >= 0.0) {
            return Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: "feedback",
                value: self.feedback,
                reason: "the feedback fraction must be finite and >= 0",
            });
        }
        positive(STAGE, "input_capacitance", self.wta.input_capacitance)?;
        let limit = self.feedback_limit();
        if self.feedback >= limit {
            return Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: "feedback",
                value: self.feedback,
                reason: "at or above (C_in/C_C)/(kappa - sigma), where a winner's state stops \
                         being stable and the circuit oscillates instead of holding a winner \
                         (model notes §4.5); lower it, or raise the node capacitance against \
                         the common capacitance",
            });
        }
        if self.mirror.polarity != Polarity::Pmos {
            return Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: "mirror",
                value: -1.0,
                reason: "the feedback mirror is built from PMOS transistors",
            });
        }
        positive(STAGE, "mirror.w", self.mirror.w)?;
        positive(STAGE, "mirror.l", self.mirror.l)?;
        Ok(())
    }

    /// Transistors per chip: the WTA's, plus two per cell for the mirror.
    pub fn transistor_count(&self) -> usize {
        self.wta.transistor_count() + 2 * self.wta.n
    }
}

/// One sampled hysteretic WTA: the WTA chip plus every mirror device's mismatch.
#[derive(Clone, Debug, PartialEq)]
pub struct HysteresisChip {
    pub design: HysteresisDesign,
    /// The WTA part (sinks A_k, outputs B_k, bias).
    pub wta: WtaChip,
    /// Mismatch of the mirror diodes P_0..P_{N-1}.
    pub mirror_in: Vec<MosMismatch>,
    /// Mismatch of the feedback devices Q_0..Q_{N-1}.
    pub mirror_out: Vec<MosMismatch>,
}

impl HysteresisChip {
    /// A chip without mismatch.
    pub fn nominal(design: HysteresisDesign) -> Result<HysteresisChip, CompetitionError> {
        let n = design.wta.n;
        let wta = WtaChip::nominal(design.wta.clone())?;
        HysteresisChip::from_mismatch(
            design,
            wta,
            vec![MosMismatch::default(); n],
            vec![MosMismatch::default(); n],
        )
    }

    /// A chip from given draws.
    pub fn from_mismatch(
        design: HysteresisDesign,
        wta: WtaChip,
        mirror_in: Vec<MosMismatch>,
        mirror_out: Vec<MosMismatch>,
    ) -> Result<HysteresisChip, CompetitionError> {
        design.validate()?;
        let n = design.wta.n;
        check_count(STAGE, "mirror diode mismatch", n, mirror_in.len())?;
        check_count(STAGE, "feedback device mismatch", n, mirror_out.len())?;
        check_mismatch(STAGE, mirror_in.iter().chain(&mirror_out))?;
        Ok(HysteresisChip {
            design,
            wta,
            mirror_in,
            mirror_out,
        })
    }

    /// Sample a chip, drawing in a fixed order: the WTA's (A_0..A_{N-1}, B_0..B_{N-1}, the bias
    /// transistor if the bias is one), then P_0..P_{N-1}, then Q_0..Q_{N-1}.
    pub fn sample<F>(
        design: HysteresisDesign,
        mut draw: F,
    ) -> Result<HysteresisChip, CompetitionError>
    where
        F: FnMut(&Transistor) -> MosMismatch,
    {
        design.validate()?;
        let wta = WtaChip::sample(design.wta.clone(), &mut draw)?;
        let n = design.wta.n;
        let mirror_in = draw_n(n, &design.mirror, &mut draw);
        let q = design.feedback_device();
        let mirror_out = draw_n(n, &q, &mut draw);
        HysteresisChip::from_mismatch(design, wta, mirror_in, mirror_out)
    }

    /// Feedback gain alpha_k of each cell at a temperature (module docs, "Mirror").
    pub fn feedback_gains(&self, temperature: f64) -> Vec<f64> {
        let d = &self.design;
        let np = d.wta.process.pmos.n;
        let ut = thermal_voltage(temperature);
        self.mirror_in
            .iter()
            .zip(&self.mirror_out)
            .map(|(p, q)| {
                d.feedback * (1.0 + q.dbeta_rel) / (1.0 + p.dbeta_rel)
                    * (-(q.dvt0 - p.dvt0) / (np * ut)).exp()
            })
            .collect()
    }

    /// The chip at a temperature (K), ready to solve.
    pub fn at(&self, temperature: f64) -> Result<HysteresisCircuit, CompetitionError> {
        let wta = self.wta.at(temperature)?;
        let feedback = self.feedback_gains(temperature);
        Ok(HysteresisCircuit { wta, feedback })
    }
}

/// A hysteretic WTA chip at a temperature, ready to solve.
#[derive(Clone, Debug, PartialEq)]
pub struct HysteresisCircuit {
    /// The WTA part.
    pub wta: WtaCircuit,
    /// Feedback gain alpha_k of each cell (mismatch included).
    pub feedback: Vec<f64>,
}

impl HysteresisCircuit {
    /// Sink transistor A_k.
    pub fn sink(&self, k: usize) -> Option<&Ekv> {
        self.wta.sink(k)
    }

    /// Output transistor B_k.
    pub fn output(&self, k: usize) -> Option<&Ekv> {
        self.wta.output(k)
    }

    /// Weak-inversion gain g of cell k (as the plain WTA's).
    pub fn gain(&self, k: usize) -> Option<f64> {
        self.wta.gain(k)
    }
}

/// Width of the hysteresis in the input difference `x = I_1 - I_0` of two cells with mean
/// input `mean`, bias `bias`, feedback fraction `alpha` and gain `g`, in the weak-inversion
/// closed form (model notes §4.5): returns `(x_up, x_down)`, the up-sweep and down-sweep
/// switching points (`x_up - x_down` is the width; both 0 when the closed form has no fold,
/// i.e. without hysteresis).
pub fn hysteresis_width_closed_form(mean: f64, bias: f64, alpha: f64, g: f64) -> (f64, f64) {
    // x(s), s = share of cell 1, from the normaliser with the feedback added to each input.
    let x = |s: f64| {
        let r = (s / (1.0 - s)).powf(1.0 / g);
        2.0 * ((r - 1.0) * mean + alpha * bias * (r * (1.0 - s) - s)) / (1.0 + r)
    };
    // Find the local maximum of x on s in (0, 1/2] by a fine scan in logit(s) then golden
    // section; the local minimum is its mirror image (x(1 - s) = -x(s) by symmetry).
    let logit_to_s = |u: f64| 1.0 / (1.0 + (-u).exp());
    let (lo_u, hi_u) = (-60.0_f64, 0.0_f64);
    let steps = 6000;
    let mut best = (f64::NEG_INFINITY, lo_u);
    let mut prev = f64::NEG_INFINITY;
    let mut found = false;
    for i in 0..=steps {
        let u = lo_u + (hi_u - lo_u) * i as f64 / steps as f64;
        let v = x(logit_to_s(u));
        if v > best.0 {
            best = (v, u);
        }
        if i > 0 && v < prev {
            found = true;
        }
        prev = v;
    }
    if !found || best.1 >= hi_u - 1e-9 {
        return (0.0, 0.0);
    }
    let h = (hi_u - lo_u) / steps as f64;
    let (mut a, mut b) = (best.1 - h, best.1 + h);
    let phi = 0.5 * (5.0_f64.sqrt() - 1.0);
    for _ in 0..100 {
        let c = b - phi * (b - a);
        let d = a + phi * (b - a);
        if x(logit_to_s(c)) > x(logit_to_s(d)) {
            b = d;
        } else {
            a = c;
        }
    }
    let up = x(logit_to_s(0.5 * (a + b)));
    (up, -up)
}

impl SharedNodeCircuit for HysteresisCircuit {
    fn name(&self) -> &'static str {
        STAGE
    }

    fn common_node_name(&self) -> &'static str {
        "V_C"
    }

    fn line_node_prefix(&self) -> &'static str {
        "V_"
    }

    fn lines(&self) -> usize {
        self.wta.lines()
    }

    fn supply(&self) -> f64 {
        self.wta.supply
    }

    fn common_min(&self) -> f64 {
        self.wta.vc_min
    }

    fn tolerance(&self) -> f64 {
        self.wta.tolerance
    }

    fn strategy(&self) -> DcStrategy {
        DcStrategy::Coupled {
            max_newton: self.wta.max_newton,
        }
    }

    fn messages(&self) -> &'static CircuitMessages {
        &MESSAGES
    }

    fn temperature(&self) -> f64 {
        self.wta.temperature
    }

    fn source(&self) -> &CurrentSource<Ekv> {
        self.wta.source()
    }

    fn source_fast(&self) -> &CurrentSource<Mos> {
        self.wta.source_fast()
    }

    /// Sink A_k minus the mirrored feedback `alpha_k I_B,k` (both leave/enter V_k).
    #[inline]
    fn load(&self, k: usize, v_line: f64, v_common: f64) -> Branch {
        let a = SharedNodeCircuit::load(&self.wta, k, v_line, v_common);
        let b = SharedNodeCircuit::output(&self.wta, k, v_line, v_common);
        let f = self.feedback[k];
        Branch {
            current: a.current - f * b.current,
            d_line: a.d_line - f * b.d_line,
            d_common: a.d_common - f * b.d_common,
        }
    }

    #[inline]
    fn load_current(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        self.wta.load_current(k, v_line, v_common)
            - self.feedback[k] * self.wta.output_current(k, v_line, v_common)
    }

    /// The sink's current plus the feedback's: the current scale of line k's KCL.
    fn load_scale(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        self.wta.load_current(k, v_line, v_common).abs()
            + self.feedback[k] * self.wta.output_current(k, v_line, v_common).abs()
    }

    #[inline]
    fn output(&self, k: usize, v_line: f64, v_common: f64) -> Branch {
        SharedNodeCircuit::output(&self.wta, k, v_line, v_common)
    }

    #[inline]
    fn output_current(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        self.wta.output_current(k, v_line, v_common)
    }

    fn closed_form_start(&self, inputs: &[f64], scratch: &mut [f64], lines: &mut [f64]) -> f64 {
        self.wta.closed_form_start(inputs, scratch, lines)
    }

    fn line_start(&self, k: usize, input: f64, v_common: f64) -> f64 {
        self.wta.line_start(k, input, v_common)
    }

    fn carries_state(&self) -> bool {
        true
    }

    fn capacitances(&self) -> (f64, f64) {
        self.wta.capacitances()
    }

    fn kappa(&self) -> f64 {
        self.wta.kappa()
    }

    /// The sink's shot noise plus the feedback device's (`2 q alpha_k I_B,k`, saturated).
    fn load_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        self.wta.load_noise_psd(k, v_line, v_common)
            + 2.0
                * crate::physics::ELEMENTARY_CHARGE
                * self.feedback[k]
                * self.wta.output_current(k, v_line, v_common).abs()
    }

    fn output_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        self.wta.output_noise_psd(k, v_line, v_common)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::{preset, DrainCoupling};
    use crate::stages::competition::{CompetitionStage, StageSolution, Workspace};

    /// A two-cell design on the generic 180 nm preset (invented sizes) with gain `g`.
    pub(crate) fn design(n: usize, alpha: f64, g: f64, bias: f64) -> HysteresisDesign {
        let p = preset("generic-180nm").unwrap();
        let t = |w: f64| Transistor {
            polarity: Polarity::Nmos,
            w,
            l: 1e-6,
        };
        let mut wta = WtaDesign::new(
            n,
            p,
            t(10e-6),
            t(10e-6),
            CurrentSource::Ideal { current: bias },
        );
        wta.drain_coupling = Some(DrainCoupling::Eta(1.0 / g));
        HysteresisDesign {
            wta,
            feedback: alpha,
            mirror: Transistor {
                polarity: Polarity::Pmos,
                w: 4e-6,
                l: 2e-6,
            },
        }
    }

    /// Up-sweep and down-sweep switching points of x = I_1 - I_0 (inputs mean ± x/2), each
    /// the midpoint of the step where the winner changed; the state carries along each sweep.
    fn switching_points(c: &HysteresisCircuit, mean: f64, span: f64, steps: usize) -> (f64, f64) {
        let mut ws = Workspace::new();
        let mut sol = StageSolution::for_stage(c);
        let xs: Vec<f64> = (0..=steps)
            .map(|i| -span + 2.0 * span * i as f64 / steps as f64)
            .collect();
        let mut find = |order: &mut dyn Iterator<Item = &f64>| -> f64 {
            let mut prev: Option<(f64, bool)> = None;
            let mut at = f64::NAN;
            for &x in order {
                c.solve(&[mean - 0.5 * x, mean + 0.5 * x], &mut ws, &mut sol)
                    .unwrap();
                let one = sol.shares[1] > 0.5;
                if let Some((px, p)) = prev {
                    if p != one && at.is_nan() {
                        at = 0.5 * (px + x);
                    }
                }
                prev = Some((x, one));
            }
            at
        };
        // Start the up-sweep from a state where cell 0 clearly wins (the sweep's first point).
        let up = find(&mut xs.iter());
        let down = find(&mut xs.iter().rev());
        (up, down)
    }

    // (a) Hysteresis width: the up- and down-sweep switching points of the EKV circuit against
    // the weak-inversion closed form of model notes §4.5 (our derivation; its fold found
    // numerically). Tolerance: the sweep step (W/200 each side) plus the EKV departure from the
    // power law at i = I/I_S ≈ 2e-4, sqrt(i)/2 ≈ 0.7 % of g ln(a_1/a_0) (model notes §4.1);
    // 3 % of the width covers both.
    #[test]
    fn hysteresis_width_matches_weak_inversion_analysis() {
        let (mean, bias, alpha, g) = (1e-9, 1e-9, 0.2, 300.0);
        let chip = HysteresisChip::nominal(design(2, alpha, g, bias)).unwrap();
        let c = chip.at(300.0).unwrap();
        let (cf_up, cf_down) = hysteresis_width_closed_form(mean, bias, alpha, g);
        let width = cf_up - cf_down;
        assert!(
            width > 0.5 * 2.0 * alpha * bias,
            "closed-form width {width:e}"
        );
        let span = 1.5 * alpha * bias;
        let steps = 600;
        let (up, down) = switching_points(&c, mean, span, steps);
        let measured = up - down;
        approx::assert_relative_eq!(measured, width, max_relative = 0.03);
        approx::assert_relative_eq!(up, cf_up, max_relative = 0.03);
        approx::assert_relative_eq!(down, cf_down, max_relative = 0.03);
    }

    // (a) Without feedback the circuit is the plain WTA: the up and down sweeps switch at the
    // same point (width zero within one sweep step), and the closed form says zero.
    #[test]
    fn no_feedback_no_hysteresis() {
        let (mean, bias, g) = (1e-9, 1e-9, 300.0);
        let chip = HysteresisChip::nominal(design(2, 0.0, g, bias)).unwrap();
        let c = chip.at(300.0).unwrap();
        let span = 0.2 * bias;
        // An odd step count keeps x = 0 (equal inputs, shares 1/2) off the grid.
        let steps = 401;
        let (up, down) = switching_points(&c, mean, span, steps);
        assert!(
            (up - down).abs() <= 1e-6 * 2.0 * span / steps as f64,
            "{up:e} {down:e}"
        );
        assert_eq!(hysteresis_width_closed_form(mean, bias, 0.0, g), (0.0, 0.0));
    }

    // The asymptotic form of model notes §4.5, 2 alpha I_b - (2c/g)(1 + ln(2 g alpha I_b / c)),
    // c = I_m + alpha I_b / 2, approaches the closed-form fold as g grows (our derivation).
    #[test]
    fn asymptotic_width() {
        for &(g, tol) in &[(1000.0, 0.02), (10000.0, 0.003)] {
            let (m, b, a) = (1e-9, 1e-9, 0.2);
            let (up, down) = hysteresis_width_closed_form(m, b, a, g);
            let c = m + a * b / 2.0;
            let approx = 2.0 * a * b - (2.0 * c / g) * (1.0 + (2.0 * g * a * b / c).ln());
            approx::assert_relative_eq!(up - down, approx, max_relative = tol);
        }
    }

    // (d) Bad input: a feedback fraction at or above the stability bound, a negative one, an
    // NMOS mirror.
    #[test]
    fn refuses_bad_feedback() {
        let d = design(3, 0.0, 300.0, 1e-9);
        let limit = d.feedback_limit();
        // (C_in/C_C)/(kappa - sigma) = 0.25 / (1/1.3 - 1/(1.3*300))
        approx::assert_relative_eq!(
            limit,
            0.25 / (1.0 / 1.3 - 1.0 / 390.0),
            max_relative = 1e-12
        );
        for alpha in [limit, 2.0 * limit, -0.1, f64::NAN] {
            let mut bad = d.clone();
            bad.feedback = alpha;
            let e = HysteresisChip::nominal(bad).unwrap_err().to_string();
            assert!(e.contains("feedback"), "{e}");
        }
        let mut bad = d.clone();
        bad.mirror.polarity = Polarity::Nmos;
        assert!(HysteresisChip::nominal(bad)
            .unwrap_err()
            .to_string()
            .contains("PMOS"));
        let c = HysteresisChip::nominal(d).unwrap().at(300.0).unwrap();
        let mut ws = Workspace::new();
        let mut sol = StageSolution::for_stage(&c);
        assert!(c.solve(&[1e-9, -1e-9, 1e-9], &mut ws, &mut sol).is_err());
        assert!(c.solve(&[1e-9, 1e-9], &mut ws, &mut sol).is_err());
    }

    // The bound is where the winner's state stops being stable (model notes §4.5): just below
    // it a winner whose own input has gone (I_w -> small) still settles; the DC solve reaches
    // a point whose KCL residual meets the tolerance.
    #[test]
    fn holds_below_the_bound() {
        let d = design(2, 0.0, 300.0, 1e-9);
        let mut d2 = d.clone();
        d2.feedback = 0.9 * d.feedback_limit();
        let c = HysteresisChip::nominal(d2).unwrap().at(300.0).unwrap();
        let mut ws = Workspace::new();
        let mut sol = StageSolution::for_stage(&c);
        c.solve(&[2e-9, 1e-9], &mut ws, &mut sol).unwrap();
        assert!(sol.shares[0] > 0.99);
        // Cell 0's input falls below cell 1's by less than alpha I_b: the winner holds.
        c.solve(&[0.85e-9, 1e-9], &mut ws, &mut sol).unwrap();
        assert!(sol.shares[0] > 0.99, "{:?}", sol.shares);
        assert!(sol.info.residual <= c.tolerance());
    }

    // (c) Property: after any sequence of two decisions (the second from the state the first
    // left), the generic node equations' relative KCL residual (circuit::kcl_residuals, with
    // the feedback in each line's load) meets the solver's tolerance at every node, and the
    // outputs sum to the bias (KCL at V_C). Invariant of any DC solution (Kirchhoff), no
    // outside source needed.
    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(24))]
        #[test]
        fn kcl_residual_meets_tolerance(
            a in proptest::collection::vec(0.2e-9..5e-9f64, 3),
            b in proptest::collection::vec(0.2e-9..5e-9f64, 3),
            alpha in 0.0..0.3f64,
            g in 30.0..1000.0f64,
            dvt in proptest::collection::vec(-5e-3..5e-3f64, 5),
        ) {
            let d = design(3, alpha, g, 2e-9);
            let mut chip = HysteresisChip::nominal(d).unwrap();
            chip.wta.sink[0].dvt0 = dvt[0];
            chip.wta.output[1].dvt0 = dvt[1];
            chip.mirror_in[2].dvt0 = dvt[2];
            chip.mirror_out[0].dvt0 = dvt[3];
            chip.wta.sink[2].dvt0 = dvt[4];
            let c = chip.at(300.0).unwrap();
            let mut ws = Workspace::new();
            let mut sol = StageSolution::for_stage(&c);
            for x in [&a, &b] {
                c.solve(x, &mut ws, &mut sol).unwrap();
                let mut r = vec![0.0; 4];
                crate::stages::competition::circuit::kcl_residuals(&c, x, &sol.node_voltages, &mut r)
                    .unwrap();
                for (i, v) in r.iter().enumerate() {
                    proptest::prop_assert!(v.abs() <= c.tolerance(), "node {i}: {v:e}");
                }
                let s: f64 = sol.outputs.iter().sum();
                proptest::prop_assert!((s / 2e-9 - 1.0).abs() <= 2.0 * c.tolerance());
                proptest::prop_assert_eq!(ws.state(), &sol.node_voltages[..]);
            }
        }
    }
}
