//! Noise power spectral densities of a MOS transistor, and their integrals over a bandwidth.
//!
//! White (shot/thermal) channel noise: R. Sarpeshkar, T. Delbrück, C. Mead, "White noise in MOS
//! transistors and resistors", IEEE Circuits & Devices 9(6), 1993. A subthreshold channel
//! carries the shot noise of its forward and reverse current components,
//!
//! ```text
//! S_I = 2 q (I_f + I_r)        (one-sided, A^2/Hz)
//! ```
//!
//! which is `2 q I_D` in saturation (I_r -> 0) and `4 k T g_ds` at V_DS = 0 (I_f = I_r, and
//! g_ds = I_f / U_T): one formula for "shot" and "thermal" noise. Here I_f = I_S F(forward) and
//! I_r = I_S F(reverse) from the EKV model ([`Ekv::inversion_coefficients`]).
//!
//! **Validity**: weak inversion, and approximately moderate inversion. In strong inversion the
//! forward/reverse shot form overestimates the channel noise (it grows with I_D instead of with
//! g_m): at V_DS = 0 it exceeds the Nyquist value 4 k T g_ds by about F/F' = ln(1+e^(x/2)) /
//! logistic(x/2) ≈ x/2 with x = (V_P - V_S)/U_T. Use [`strong_inversion_thermal_noise_psd`]
//! there: the long-channel saturation value `4 k T (2/3) g_ms` with g_ms = n g_m the source
//! transconductance (A. van der Ziel, "Noise in Solid State Devices and Circuits", Wiley 1986,
//! from memory; in weak inversion the same expression with 1/2 in place of 2/3 gives 2 q I_D
//! again).
//!
//! [`white_channel_noise_psd`] covers all regions with one continuous expression: the long-channel
//! thermal noise `4 k T (mu / L^2) |Q_inv,total|` (F. Klaassen, J. Prins, "Thermal noise of MOS
//! transistors", Philips Research Reports 22, 1967, from memory) written with the normalised
//! charges of the charge-based EKV model, i = q^2 + q (C. Enz, E. Vittoz, "Charge-Based MOS
//! Transistor Modeling", Wiley 2006, from memory):
//!
//! ```text
//! S_I = 4 k T (I_S / U_T) N,   N = [ (2/3)(q_f^2 + q_f q_r + q_r^2) + (1/2)(q_f + q_r) ] / (1 + q_f + q_r)
//! ```
//!
//! Limits (tested): N -> (i_f + i_r)/2 in weak inversion (= the shot form above), N -> (2/3) q_f
//! in strong-inversion saturation (= 4 k T (2/3) g_ms), N = q at V_DS = 0 (= 4 k T g_ds in both
//! weak and strong inversion). The charges are obtained from the inversion coefficients of this
//! crate's F(x) interpolation, so in moderate inversion it is an interpolation, not a fit to a
//! foundry noise model.
//!
//! Flicker noise, input-referred at the gate: `S_V = K_F / (C_ox W L f)` (V^2/Hz).
//!
//! Numerical core: no I/O.

use std::f64::consts::PI;

use super::ekv::Ekv;
use super::error::{check, DeviceError};
use super::tech::{DeviceTech, Transistor};
use crate::physics::ELEMENTARY_CHARGE;

/// One-sided channel shot-noise current PSD `2 q (I_f + I_r)` in A^2/Hz at bulk-referred
/// terminal voltages (Sarpeshkar, Delbrück, Mead 1993). Valid in weak and moderate inversion;
/// see the module docs for strong inversion, and [`white_channel_noise_psd`] for all regions.
pub fn shot_noise_psd(ekv: &Ekv, vg: f64, vd: f64, vs: f64) -> f64 {
    let (i_f, i_r) = ekv.inversion_coefficients(vg, vd, vs);
    2.0 * ELEMENTARY_CHARGE * ekv.specific_current() * (i_f + i_r)
}

/// Long-channel strong-inversion saturation thermal noise `4 k T (2/3) g_ms` in A^2/Hz, with
/// g_ms = n |dI_D/dV_G| (van der Ziel 1986, from memory). Not valid in weak inversion or in the
/// triode region.
pub fn strong_inversion_thermal_noise_psd(ekv: &Ekv, vg: f64, vd: f64, vs: f64) -> f64 {
    let gm = ekv.eval(vg, vd, vs).d_vg.abs();
    // k T = q U_T.
    let kt = ELEMENTARY_CHARGE * ekv.ut;
    4.0 * kt * (2.0 / 3.0) * ekv.n * gm
}

/// Normalised inversion charge q from an inversion coefficient i, solving i = q^2 + q
/// (charge-based EKV; Enz, Vittoz 2006, from memory), written without cancellation for small i.
pub fn normalised_charge(i: f64) -> f64 {
    let i = i.max(0.0);
    2.0 * i / (1.0 + (1.0 + 4.0 * i).sqrt())
}

/// White channel noise PSD in A^2/Hz, continuous over weak, moderate and strong inversion and
/// from V_DS = 0 to saturation (module docs): `4 k T (I_S/U_T) N(q_f, q_r)`. Equals
/// [`shot_noise_psd`] in weak inversion and [`strong_inversion_thermal_noise_psd`] in
/// strong-inversion saturation. Long-channel: no velocity saturation or excess noise.
pub fn white_channel_noise_psd(ekv: &Ekv, vg: f64, vd: f64, vs: f64) -> f64 {
    let (i_f, i_r) = ekv.inversion_coefficients(vg, vd, vs);
    let (qf, qr) = (normalised_charge(i_f), normalised_charge(i_r));
    let n = ((2.0 / 3.0) * (qf * qf + qf * qr + qr * qr) + 0.5 * (qf + qr)) / (1.0 + qf + qr);
    // 4 k T I_S / U_T = 4 q I_S.
    4.0 * ELEMENTARY_CHARGE * ekv.specific_current() * n
}

/// Input-referred flicker noise PSD at the gate, `K_F / (C_ox W L f)` in V^2/Hz, at frequency
/// `f` (Hz, > 0; returns infinity at f = 0).
pub fn flicker_noise_gate_psd(tech: &DeviceTech, t: &Transistor, f: f64) -> f64 {
    tech.kf / (tech.cox * t.area() * f)
}

/// Variance (V^2) of the input-referred flicker noise integrated over [f_lo, f_hi]:
/// `K_F / (C_ox W L) ln(f_hi / f_lo)` (equal power per decade). Requires 0 < f_lo < f_hi.
pub fn flicker_noise_gate_variance(
    tech: &DeviceTech,
    t: &Transistor,
    f_lo: f64,
    f_hi: f64,
) -> Result<f64, DeviceError> {
    check(
        "noise.f_lo",
        f_lo,
        |v| v > 0.0,
        "a lower frequency bound above 0 Hz (1/f noise diverges at 0)",
    )?;
    check(
        "noise.f_hi",
        f_hi,
        |v| v > f_lo,
        "an upper frequency bound above the lower bound",
    )?;
    Ok(tech.kf / (tech.cox * t.area()) * (f_hi / f_lo).ln())
}

/// Variance of a white noise of one-sided PSD `psd` over a noise bandwidth `bandwidth` (Hz):
/// `psd * bandwidth` (units of psd times Hz).
pub fn white_noise_variance(psd: f64, bandwidth: f64) -> f64 {
    psd * bandwidth
}

/// Standard deviation of a white noise over a bandwidth: `sqrt(psd * bandwidth)`.
pub fn noise_sigma_over_bandwidth(psd: f64, bandwidth: f64) -> f64 {
    white_noise_variance(psd, bandwidth).max(0.0).sqrt()
}

/// Equivalent noise bandwidth of a single-pole low-pass with -3 dB frequency `f_3db`:
/// `(pi/2) f_3db` (the integral of 1/(1+(f/f_3db)^2) over 0..inf; standard calculus).
pub fn single_pole_noise_bandwidth(f_3db: f64) -> f64 {
    PI / 2.0 * f_3db
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::{DrainCoupling, Polarity};
    use crate::physics::{thermal_voltage, BOLTZMANN};
    use approx::assert_relative_eq;

    fn nmos(eta: f64) -> Ekv {
        Ekv {
            polarity: Polarity::Nmos,
            vt0: 0.45,
            n: 1.3,
            beta: 2e-4,
            eta,
            ut: thermal_voltage(300.0),
        }
    }

    /// Weak-inversion saturation: S_I = 2 q I_D (Sarpeshkar, Delbrück, Mead 1993).
    #[test]
    fn shot_noise_in_saturation_is_2qi() {
        for m in [nmos(0.0), nmos(0.02)] {
            let (vg, vd, vs) = (0.15, 0.4, 0.0);
            let id = m.id(vg, vd, vs);
            assert_relative_eq!(
                shot_noise_psd(&m, vg, vd, vs),
                2.0 * ELEMENTARY_CHARGE * id,
                epsilon = 0.0,
                max_relative = 1e-6
            );
        }
        // PMOS with mirrored voltages: same.
        let p = Ekv {
            polarity: Polarity::Pmos,
            ..nmos(0.0)
        };
        let id = p.id(-0.15, -0.4, 0.0);
        assert_relative_eq!(
            shot_noise_psd(&p, -0.15, -0.4, 0.0),
            2.0 * ELEMENTARY_CHARGE * id,
            epsilon = 0.0,
            max_relative = 1e-6
        );
    }

    /// At V_DS = 0 the shot noise of the two opposing components equals the Nyquist thermal
    /// noise 4 k T g_ds of the channel conductance (Sarpeshkar, Delbrück, Mead 1993), g_ds from
    /// the EKV analytic derivative, in weak inversion at two temperatures.
    #[test]
    fn shot_noise_at_zero_vds_is_4ktgds() {
        for temp in [250.0, 300.0, 400.0] {
            let m = Ekv {
                ut: thermal_voltage(temp),
                ..nmos(0.0)
            };
            // Deep weak inversion: EKV's F/F' departs from 1 by about e^(x/2)/2 (< 2e-4 here).
            let (vg, v) = (-0.2, 0.05);
            let gds = m.eval(vg, v, v).d_vd;
            let nyquist = 4.0 * BOLTZMANN * temp * gds;
            assert_relative_eq!(
                shot_noise_psd(&m, vg, v, v),
                nyquist,
                epsilon = 0.0,
                max_relative = 1e-3
            );
        }
    }

    /// In strong inversion at V_DS = 0 the shot form overestimates Nyquist by about F/F' (module
    /// docs): a test that documents the validity limit.
    #[test]
    fn shot_form_overestimates_in_strong_inversion() {
        let m = nmos(0.0);
        let (vg, v) = (1.5, 0.0);
        let gds = m.eval(vg, v, v).d_vd;
        let ratio = shot_noise_psd(&m, vg, v, v) / (4.0 * BOLTZMANN * 300.0 * gds);
        let x = (vg - m.vt0) / m.n / m.ut;
        let (f, fp) = super::super::ekv::ekv_f_and_slope(x);
        assert_relative_eq!(ratio, f / fp, epsilon = 0.0, max_relative = 1e-6);
        assert!(ratio > 10.0);
    }

    /// Strong-inversion saturation: 4kT(2/3) g_ms with the square-law g_m = beta (V_G-V_T0)/n
    /// (van der Ziel 1986, from memory; square law from Enz, Krummenacher, Vittoz 1995), and the
    /// picker uses it there and the shot form in weak inversion.
    #[test]
    fn strong_inversion_thermal_noise() {
        let m = nmos(0.0);
        let (vg, vd, vs) = (1.8, 2.5, 0.0);
        let gm_square_law = m.beta * (vg - m.vt0) / m.n;
        let want = 4.0 * BOLTZMANN * 300.0 * (2.0 / 3.0) * m.n * gm_square_law;
        assert_relative_eq!(
            strong_inversion_thermal_noise_psd(&m, vg, vd, vs),
            want,
            epsilon = 0.0,
            max_relative = 0.05
        );
    }

    /// The all-region channel noise reduces to its published limits (module docs): the shot
    /// form 2q(I_f + I_r) in weak inversion (Sarpeshkar, Delbrück, Mead 1993), 4kT(2/3)g_ms in
    /// strong-inversion saturation (van der Ziel 1986, from memory), and the Nyquist value
    /// 4kT g_ds at V_DS = 0 in weak and in strong inversion (Klaassen, Prins 1967, from memory).
    #[test]
    fn all_region_channel_noise_limits() {
        let m = nmos(0.0);
        let kt4 = 4.0 * BOLTZMANN * 300.0;
        // Weak inversion, saturated and at V_DS = 0: relative departure O(i_f) ~ 1e-5.
        for (vg, vd, vs) in [(-0.1, 0.4, 0.0), (-0.1, 0.05, 0.05), (-0.1, 0.03, 0.0)] {
            assert_relative_eq!(
                white_channel_noise_psd(&m, vg, vd, vs),
                shot_noise_psd(&m, vg, vd, vs),
                epsilon = 0.0,
                max_relative = 1e-3
            );
        }
        // Strong inversion: the charges q = sqrt(i) - 1/2 + O(1/sqrt(i)) and F' = sqrt(F) agree
        // to first order, so the limits are reached with a relative error below 1/sqrt(i_f)
        // (about 0.75/sqrt(i_f) in saturation), shrinking as the overdrive grows.
        let tol = |vg: f64, vd: f64, vs: f64| 1.0 / m.inversion_coefficients(vg, vd, vs).0.sqrt();
        for vg in [1.2, 1.8, 3.0] {
            let (vd, vs) = (vg + 1.0, 0.0);
            assert_relative_eq!(
                white_channel_noise_psd(&m, vg, vd, vs),
                strong_inversion_thermal_noise_psd(&m, vg, vd, vs),
                epsilon = 0.0,
                max_relative = tol(vg, vd, vs)
            );
            // V_DS = 0: the Nyquist value 4kT g_ds, where the shot form is far off.
            let gds = m.eval(vg, 0.2, 0.2).d_vd;
            assert_relative_eq!(
                white_channel_noise_psd(&m, vg, 0.2, 0.2),
                kt4 * gds,
                epsilon = 0.0,
                max_relative = tol(vg, 0.2, 0.2)
            );
            // Triode: (2/3)(1 + a + a^2)/(1 + a) times 4kT g_ds(0), a = q_r/q_f
            // (long-channel theory, Klaassen, Prins 1967, from memory).
            let vd = 0.3;
            let (i_f, i_r) = m.inversion_coefficients(vg, vd, 0.0);
            let a = (i_r / i_f).sqrt();
            let g0 = m.eval(vg, 0.0, 0.0).d_vd;
            assert_relative_eq!(
                white_channel_noise_psd(&m, vg, vd, 0.0),
                kt4 * g0 * (2.0 / 3.0) * (1.0 + a + a * a) / (1.0 + a),
                epsilon = 0.0,
                max_relative = tol(vg, vd, 0.0)
            );
        }
    }

    proptest::proptest! {
        /// Continuous and increasing in V_G (more inversion charge, more noise) across all
        /// regions: no jump where the limits hand over.
        #[test]
        fn all_region_noise_is_smooth(vg in -0.3f64..2.0, vds in 0.0f64..1.5) {
            let m = nmos(0.02);
            let s0 = white_channel_noise_psd(&m, vg, vds, 0.0);
            let s1 = white_channel_noise_psd(&m, vg + 1e-4, vds, 0.0);
            proptest::prop_assert!(s1 > s0);
            proptest::prop_assert!(s1 / s0 - 1.0 < 1e-4 / m.ut * 1.01);
        }
    }

    fn tech() -> DeviceTech {
        DeviceTech {
            vt0: 0.45,
            n: 1.3,
            mu_cox: 300e-6,
            drain_coupling: DrainCoupling::Sigma(0.004),
            a_vt_pair: 5e-9,
            a_beta_pair: 1e-8,
            vt0_tempco: -1.5e-3,
            beta_temp_exponent: -1.5,
            cox: 8.5e-3,
            kf: 1e-25,
        }
    }

    /// Flicker PSD K_F/(C_ox W L f) and its integral K_F/(C_ox W L) ln(f_hi/f_lo): checked
    /// against a trapezoid quadrature in ln f of the PSD, and equal power per decade (the 1/f law).
    #[test]
    fn flicker_noise_psd_and_integral() {
        let tech = tech();
        let t = Transistor {
            polarity: Polarity::Nmos,
            w: 2e-6,
            l: 1e-6,
        };
        // 1e-25 / (8.5e-3 * 2e-12 * 10 Hz) = 5.882e-13 V^2/Hz.
        assert_relative_eq!(
            flicker_noise_gate_psd(&tech, &t, 10.0),
            5.882e-13,
            epsilon = 0.0,
            max_relative = 1e-3
        );
        let (lo, hi) = (1.0f64, 1e4f64);
        let steps = 4000;
        let (a, b) = (lo.ln(), hi.ln());
        let h = (b - a) / steps as f64;
        let mut quad = 0.0;
        for i in 0..=steps {
            let u = a + h * i as f64;
            let f = u.exp();
            let w = if i == 0 || i == steps { 0.5 } else { 1.0 };
            quad += w * flicker_noise_gate_psd(&tech, &t, f) * f * h;
        }
        let var = flicker_noise_gate_variance(&tech, &t, lo, hi).unwrap_or(f64::NAN);
        assert_relative_eq!(var, quad, epsilon = 0.0, max_relative = 1e-6);
        let d1 = flicker_noise_gate_variance(&tech, &t, 1.0, 10.0).unwrap_or(f64::NAN);
        let d2 = flicker_noise_gate_variance(&tech, &t, 1e3, 1e4).unwrap_or(f64::NAN);
        assert_relative_eq!(d1, d2, epsilon = 0.0, max_relative = 1e-12);
        let e = flicker_noise_gate_variance(&tech, &t, 0.0, 10.0).unwrap_err();
        assert!(e.to_string().contains("noise.f_lo"), "{e}");
        let e = flicker_noise_gate_variance(&tech, &t, 10.0, 10.0).unwrap_err();
        assert!(e.to_string().contains("noise.f_hi"), "{e}");
    }

    /// White noise over a bandwidth: variance = PSD * B; single-pole noise bandwidth pi/2 f_3dB
    /// checked against a numerical integral of 1/(1+(f/f0)^2).
    #[test]
    fn white_noise_over_bandwidth() {
        let psd = 2.0 * ELEMENTARY_CHARGE * 1e-9; // 2qI at 1 nA
        assert_relative_eq!(
            noise_sigma_over_bandwidth(psd, 1e6),
            (psd * 1e6).sqrt(),
            epsilon = 0.0,
            max_relative = 1e-12
        );
        // Numerical integral over 0..1e4 f0 with substitution f = f0 tan(theta).
        let f0 = 1e3;
        let steps = 100_000;
        let top = (1e4f64).atan();
        let h = top / steps as f64;
        let mut s = 0.0;
        for i in 0..steps {
            let th = h * (i as f64 + 0.5);
            let f = f0 * th.tan();
            let dfdth = f0 / th.cos().powi(2);
            s += dfdth / (1.0 + (f / f0).powi(2)) * h;
        }
        assert_relative_eq!(
            single_pole_noise_bandwidth(f0),
            s,
            epsilon = 0.0,
            max_relative = 2e-4
        );
    }
}
