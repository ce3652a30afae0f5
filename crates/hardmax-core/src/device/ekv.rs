//! EKV MOSFET drain current, valid in weak, moderate and strong inversion.
//!
//! C. Enz, F. Krummenacher, E. Vittoz, "An analytical MOS transistor model valid in all regions
//! of operation and dedicated to low-voltage and low-current applications", Analog Integrated
//! Circuits and Signal Processing 8, 1995.
//!
//! All voltages are referred to the transistor's bulk (body) terminal. With `u = U_T`:
//!
//! ```text
//! I_D = I_S [F((V_P - V_S)/u) - F((V_P - V_D)/u)],   F(x) = ln^2(1 + e^(x/2))
//! V_P = (V_G - V_T0 + eta (V_D - V_S)) / n,            I_S = 2 n beta u^2
//! ```
//!
//! Two numbers say how hard each terminal pushes on the barrier the carriers must cross.
//! `kappa = 1/n`: the share of a gate-voltage step that reaches the channel's surface potential
//! (the rest drops across the oxide and depletion capacitances in series). `sigma = eta/n`: the
//! same share for a drain-voltage step, which lowers the barrier a little (`eta` enters the
//! pinch-off voltage above). The source sets the carrier supply directly, with weight 1. So in
//! weak-inversion saturation the current is exponential in a weighted sum of the three terminal
//! voltages, `I_D ∝ exp((kappa V_G + sigma V_D - V_S)/u)`.
//!
//! Polarity: for a PMOS device the same equations are applied to the negated bulk-referred
//! voltages (the n-well is the bulk), and the returned current is the current that flows *out*
//! of the drain terminal in forward operation. For NMOS it is the current flowing *into* the
//! drain. So in both cases a device in forward operation returns a positive current.

use serde::{Deserialize, Serialize};

/// Channel type.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Polarity {
    /// n-channel device, bulk at the lowest potential.
    Nmos,
    /// p-channel device, bulk (n-well) at the highest potential.
    Pmos,
}

impl Polarity {
    /// +1 for NMOS, -1 for PMOS: multiply bulk-referred voltages by this before evaluating.
    #[inline]
    pub fn sign(self) -> f64 {
        match self {
            Polarity::Nmos => 1.0,
            Polarity::Pmos => -1.0,
        }
    }
}

/// One transistor ready to evaluate at one temperature: a plain value type, every field SI.
///
/// `vt0` is the threshold magnitude (positive for an enhancement device of either polarity),
/// `beta = mu C_ox W / L` in A/V^2, `n` the slope factor (kappa = 1/n), `eta` the drain
/// coupling coefficient, `ut` the thermal voltage in volts.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Ekv {
    pub polarity: Polarity,
    pub vt0: f64,
    pub n: f64,
    pub beta: f64,
    pub eta: f64,
    pub ut: f64,
}

/// Drain current and its partial derivatives in the (bulk-referred) terminal voltages.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct EkvEval {
    /// Drain current in A (sign convention: see module docs).
    pub id: f64,
    /// dI_D/dV_G in A/V.
    pub d_vg: f64,
    /// dI_D/dV_D in A/V.
    pub d_vd: f64,
    /// dI_D/dV_S in A/V.
    pub d_vs: f64,
}

/// `ln(1 + e^x)` without overflow or loss of precision for large |x|.
#[inline]
pub fn softplus(x: f64) -> f64 {
    if x > 36.0 {
        x + (-x).exp()
    } else if x < -36.0 {
        x.exp()
    } else {
        x.max(0.0) + (-x.abs()).exp().ln_1p()
    }
}

/// Logistic function `1 / (1 + e^-x)`.
#[inline]
pub fn logistic(x: f64) -> f64 {
    if x >= 0.0 {
        1.0 / (1.0 + (-x).exp())
    } else {
        let e = x.exp();
        e / (1.0 + e)
    }
}

/// EKV interpolation function `F(x) = ln^2(1 + e^(x/2))`.
#[inline]
pub fn ekv_f(x: f64) -> f64 {
    let s = softplus(0.5 * x);
    s * s
}

/// `F(x)` and `F'(x) = ln(1 + e^(x/2)) * logistic(x/2)`.
#[inline]
pub fn ekv_f_and_slope(x: f64) -> (f64, f64) {
    let h = 0.5 * x;
    let s = softplus(h);
    (s * s, s * logistic(h))
}

impl Ekv {
    /// kappa = 1/n: how strongly the gate voltage moves the channel's surface potential.
    #[inline]
    pub fn kappa(&self) -> f64 {
        1.0 / self.n
    }

    /// sigma = eta/n: how strongly the drain voltage moves the channel's surface potential.
    #[inline]
    pub fn sigma(&self) -> f64 {
        self.eta / self.n
    }

    /// Specific current I_S = 2 n beta U_T^2 in A.
    #[inline]
    pub fn specific_current(&self) -> f64 {
        2.0 * self.n * self.beta * self.ut * self.ut
    }

    /// Pinch-off voltage V_P for bulk-referred, polarity-corrected voltages.
    #[inline]
    fn pinch_off(&self, vg: f64, vd: f64, vs: f64) -> f64 {
        (vg - self.vt0 + self.eta * (vd - vs)) / self.n
    }

    /// Drain current for bulk-referred terminal voltages.
    #[inline]
    pub fn id(&self, vg: f64, vd: f64, vs: f64) -> f64 {
        let p = self.polarity.sign();
        let (vg, vd, vs) = (p * vg, p * vd, p * vs);
        let vp = self.pinch_off(vg, vd, vs);
        let inv_ut = 1.0 / self.ut;
        self.specific_current() * (ekv_f((vp - vs) * inv_ut) - ekv_f((vp - vd) * inv_ut))
    }

    /// Forward and reverse normalised currents i_f = F((V_P-V_S)/U_T), i_r = F((V_P-V_D)/U_T).
    #[inline]
    pub fn inversion_coefficients(&self, vg: f64, vd: f64, vs: f64) -> (f64, f64) {
        let p = self.polarity.sign();
        let (vg, vd, vs) = (p * vg, p * vd, p * vs);
        let vp = self.pinch_off(vg, vd, vs);
        let inv_ut = 1.0 / self.ut;
        (ekv_f((vp - vs) * inv_ut), ekv_f((vp - vd) * inv_ut))
    }

    /// Drain current with analytic partial derivatives in V_G, V_D, V_S (bulk-referred).
    #[inline]
    pub fn eval(&self, vg: f64, vd: f64, vs: f64) -> EkvEval {
        let p = self.polarity.sign();
        let (vg, vd, vs) = (p * vg, p * vd, p * vs);
        let vp = self.pinch_off(vg, vd, vs);
        let inv_ut = 1.0 / self.ut;
        let is = self.specific_current();
        let (ff, sf) = ekv_f_and_slope((vp - vs) * inv_ut);
        let (fr, sr) = ekv_f_and_slope((vp - vd) * inv_ut);
        let inv_n = 1.0 / self.n;
        let en = self.eta * inv_n;
        let k = is * inv_ut;
        // d(vp)/dvg = 1/n, d(vp)/dvd = eta/n, d(vp)/dvs = -eta/n.
        // The current keeps its forward-positive sign for both polarities, but the voltages were
        // flipped, so the chain rule multiplies every derivative by p.
        let kp = k * p;
        EkvEval {
            id: is * (ff - fr),
            d_vg: kp * inv_n * (sf - sr),
            d_vd: kp * (sf * en - sr * (en - 1.0)),
            d_vs: kp * (sf * (-en - 1.0) - sr * (-en)),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn nmos() -> Ekv {
        Ekv {
            polarity: Polarity::Nmos,
            vt0: 0.45,
            n: 1.3,
            beta: 2e-4,
            eta: 0.0,
            ut: crate::physics::thermal_voltage(300.0),
        }
    }

    /// Weak inversion: I_D = I_S e^(v_p) (e^(-v_s) - e^(-v_d)) (Enz, Krummenacher, Vittoz 1995).
    #[test]
    fn weak_inversion_limit() {
        let m = nmos();
        let (vg, vd, vs) = (-0.1, 0.03, 0.0);
        let ut = m.ut;
        let vp = (vg - m.vt0) / m.n;
        let closed = m.specific_current() * (vp / ut).exp() * ((-vs / ut).exp() - (-vd / ut).exp());
        assert_relative_eq!(m.id(vg, vd, vs), closed, epsilon = 0.0, max_relative = 1e-3);
    }

    /// Strong-inversion saturation: I_D = beta/(2n) (V_G - V_T0)^2 (Enz, Krummenacher, Vittoz 1995).
    #[test]
    fn strong_inversion_saturation_limit() {
        let m = nmos();
        let (vg, vd, vs) = (2.0, 3.0, 0.0);
        let closed = m.beta / (2.0 * m.n) * (vg - m.vt0).powi(2);
        // The exact EKV value differs from the square law by the softplus tail, 4 e^(-x/2)/x with
        // x = (V_G - V_T0)/(n U_T) = 46 here (see the next test).
        assert_relative_eq!(m.id(vg, vd, vs), closed, epsilon = 0.0, max_relative = 1e-9);
    }

    /// Approach to the square law: with eta = 0, V_S = 0 and a saturated drain,
    /// F(x) = ln^2(1 + e^(x/2)) = (x/2)^2 (1 + 4 e^(-x/2) / x + ...), so the relative departure
    /// from beta/(2n) (V_G - V_T0)^2 is 4 e^(-x/2)/x with x = (V_G - V_T0)/(n U_T) (series of the
    /// EKV interpolation function, Enz, Krummenacher, Vittoz 1995).
    #[test]
    fn strong_inversion_converges_to_square_law() {
        let m = nmos();
        for vg in [0.75, 0.95, 1.2] {
            let closed = m.beta / (2.0 * m.n) * (vg - m.vt0).powi(2);
            let err = m.id(vg, 5.0, 0.0) / closed - 1.0;
            let x = (vg - m.vt0) / (m.n * m.ut);
            let want = 4.0 * (-x / 2.0).exp() / x;
            assert_relative_eq!(err, want, epsilon = 0.0, max_relative = 0.05);
        }
    }

    /// A PMOS device with every bulk-referred voltage negated carries the same current.
    #[test]
    fn pmos_is_mirror_of_nmos() {
        let n = nmos();
        let p = Ekv {
            polarity: Polarity::Pmos,
            ..n
        };
        assert_relative_eq!(
            n.id(0.6, 0.9, 0.1),
            p.id(-0.6, -0.9, -0.1),
            epsilon = 0.0,
            max_relative = 1e-12
        );
        let (en, ep) = (n.eval(0.6, 0.9, 0.1), p.eval(-0.6, -0.9, -0.1));
        assert_relative_eq!(en.d_vg, -ep.d_vg, epsilon = 0.0, max_relative = 1e-12);
        assert_relative_eq!(en.d_vd, -ep.d_vd, epsilon = 0.0, max_relative = 1e-12);
    }

    use proptest::prelude::*;

    fn device(polarity: Polarity, n: f64, eta: f64) -> Ekv {
        Ekv {
            polarity,
            n,
            eta,
            ..nmos()
        }
    }

    fn polarity_strategy() -> impl Strategy<Value = Polarity> {
        prop_oneof![Just(Polarity::Nmos), Just(Polarity::Pmos)]
    }

    /// Subthreshold swing: in weak-inversion saturation the gate voltage per decade of drain
    /// current is n U_T ln 10 (Enz, Krummenacher, Vittoz 1995; about 60 mV/dec times n at 300 K,
    /// common practice), measured numerically from `id`.
    #[test]
    fn subthreshold_swing() {
        let ut = crate::physics::thermal_voltage(300.0);
        for n in [1.0, 1.3, 1.6] {
            let m = device(Polarity::Nmos, n, 0.0);
            // Deep weak inversion: F(x) = e^x (1 - e^(x/2) + ...), so stay where e^(x/2) < 1e-3.
            let (v1, v2) = (-0.3, -0.2);
            let decades = (m.id(v2, 0.5, 0.0) / m.id(v1, 0.5, 0.0)).log10();
            let swing = (v2 - v1) / decades;
            assert_relative_eq!(
                swing,
                n * ut * std::f64::consts::LN_10,
                epsilon = 0.0,
                max_relative = 1e-3
            );
        }
        // n = 1 gives 59.5 mV/dec at 300 K (the familiar ~60 mV/dec).
        let m = device(Polarity::Nmos, 1.0, 0.0);
        let swing = 0.1 / (m.id(-0.2, 0.5, 0.0) / m.id(-0.3, 0.5, 0.0)).log10();
        assert_relative_eq!(swing, 59.53e-3, epsilon = 0.0, max_relative = 1e-3);
    }

    /// The drain current is antisymmetric in swapping source and drain when eta = 0 (the EKV
    /// model is symmetric: Enz, Krummenacher, Vittoz 1995) and zero at V_D = V_S.
    #[test]
    fn source_drain_symmetry() {
        let m = nmos();
        for (vg, a, b) in [(0.2, 0.0, 0.3), (0.9, 0.1, 0.2), (1.5, 0.4, 1.0)] {
            assert_relative_eq!(
                m.id(vg, a, b),
                -m.id(vg, b, a),
                epsilon = 0.0,
                max_relative = 1e-12
            );
            assert_eq!(m.id(vg, a, a), 0.0);
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(512))]

        /// Analytic partial derivatives agree with central finite differences at random operating
        /// points in weak, moderate and strong inversion, forward and reverse, NMOS and PMOS
        /// (derivatives of the EKV current of Enz, Krummenacher, Vittoz 1995).
        #[test]
        fn derivatives_match_finite_differences(
            pol in polarity_strategy(),
            n in 1.1f64..1.8,
            eta in 0.0f64..0.05,
            vg in -0.3f64..2.0,
            vd in 0.0f64..2.0,
            vs in 0.0f64..1.0,
        ) {
            let m = device(pol, n, eta);
            // Scale of the individual forward/reverse terms (computed in the NMOS frame), so
            // that cancellations near V_D = V_S are judged against what the terms are.
            let vp = (vg - m.vt0 + eta * (vd - vs)) / n;
            let (_, s_f) = ekv_f_and_slope((vp - vs) / m.ut);
            let (_, s_r) = ekv_f_and_slope((vp - vd) / m.ut);
            let scale = m.specific_current() / m.ut * (s_f + s_r);
            let sg = pol.sign();
            let (vg, vd, vs) = (sg * vg, sg * vd, sg * vs);
            let e = m.eval(vg, vd, vs);
            prop_assert!((e.id - m.id(vg, vd, vs)).abs() <= 1e-12 * e.id.abs());
            let h = 1e-5;
            let fd = |f: &dyn Fn(f64) -> f64| (f(h) - f(-h)) / (2.0 * h);
            let fd_g = fd(&|d| m.id(vg + d, vd, vs));
            let fd_d = fd(&|d| m.id(vg, vd + d, vs));
            let fd_s = fd(&|d| m.id(vg, vd, vs + d));
            for (name, a, b) in [("d_vg", e.d_vg, fd_g), ("d_vd", e.d_vd, fd_d), ("d_vs", e.d_vs, fd_s)] {
                prop_assert!(
                    (a - b).abs() <= 1e-5 * a.abs() + 1e-7 * scale,
                    "{name}: analytic {a:e}, finite difference {b:e}, scale {scale:e}"
                );
            }
        }

        /// Monotonic and continuous across moderate inversion: I_D rises with V_G when V_D > V_S
        /// and never falls with V_D (0 <= eta < n), and a small voltage step changes the current
        /// by no more than the step times the slope (no jumps), for NMOS and PMOS (Enz,
        /// Krummenacher, Vittoz 1995: one expression valid in all regions).
        #[test]
        fn monotone_and_continuous(
            pol in polarity_strategy(),
            n in 1.1f64..1.8,
            eta in 0.0f64..0.05,
            vov in -0.3f64..0.5,
            vds in 0.001f64..1.0,
            vs in 0.0f64..0.5,
        ) {
            let m = device(pol, n, eta);
            let sg = pol.sign();
            let vg = m.vt0 + vs * n + vov; // around V_P = V_S: moderate inversion
            let at = |g: f64, d: f64| m.id(sg * g, sg * d, sg * vs);
            let vd = vs + vds;
            let step = 1e-3;
            let (i0, ig, id_) = (at(vg, vd), at(vg + step, vd), at(vg, vd + step));
            prop_assert!(i0 > 0.0);
            prop_assert!(ig > i0, "not increasing in V_G: {i0:e} -> {ig:e}");
            prop_assert!(id_ >= i0, "decreasing in V_D: {i0:e} -> {id_:e}");
            // Continuity: the change over a step is bounded by the larger end slope (+1 %).
            let tiny = 1e-6;
            let slope = |g: f64| (sg * m.eval(sg * g, sg * vd, sg * vs).d_vg).abs();
            let change = (at(vg + tiny, vd) - i0).abs();
            prop_assert!(change <= 1.01 * tiny * slope(vg).max(slope(vg + tiny)));
        }
    }
}
