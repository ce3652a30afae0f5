//! Generic process presets: round numbers inside published ranges, for architecture-stage
//! exploration only.
//!
//! **These are not any foundry's data.** They are generic values chosen inside the ranges the
//! literature reports for bulk CMOS of each node, many recalled from memory and marked so. For
//! sign-off use your foundry's characterised models and matching data, and your team's
//! verification flow; hardmax gives architecture-stage estimates, not sign-off.
//!
//! Where the numbers come from:
//! - C_ox = eps_ox / t_ox with eps_ox = 3.9 eps_0 and a typical (electrical) oxide thickness of
//!   the node (7.6 nm, 4.1 nm, 2.5 nm: from memory).
//! - A_VT (pair convention) follows the rule of about 1 mV·µm per nm of gate oxide (M. Pelgrom,
//!   H. Tuinhout, M. Vertregt, "Transistor matching in analog CMOS applications", IEDM 1998);
//!   A_beta about 1-2 %·µm (same source; from memory).
//! - V_T0, slope factor n, mu C_ox: typical of each node, from memory.
//! - Temperature: V_T0 magnitude falls by 1.5-1.8 mV/K and beta ∝ (T/T_nom)^-1.5 (n) or ^-1.3 (p)
//!   (common practice, no source).
//! - K_F ≈ 1e-25 V²·F for NMOS and about half for PMOS (order of magnitude, from memory).
//! - Drain coupling as an Early voltage per channel length, V_A = (V_A/L) * L, for long-channel
//!   analog devices (from memory). The current-mode WTA gain follows from it, not from a quoted
//!   range: g = kappa/sigma with kappa = 1/n and sigma = U_T/V_A, i.e. g = V_A/(n U_T)
//!   ([`wta_gain`]; DEVELOPERS.md model notes §3, table of computed values per preset). At
//!   L = 1 µm and 27 °C: NMOS 552, 297, 172 and PMOS 533, 286, 166 (350, 180, 65 nm), growing in
//!   proportion to L.

use super::error::DeviceError;
use super::tech::{DeviceTech, DrainCoupling, Process};

/// Permittivity of SiO2, 3.9 eps_0, in F/m (eps_0 = 8.8541878128e-12 F/m, CODATA 2018).
pub const EPS_OX: f64 = 3.9 * 8.854_187_812_8e-12;

/// Reminder shown with every preset.
pub const PRESET_NOTE: &str = "generic parameters from published ranges, not foundry data: \
use your foundry's characterised values for sign-off";

const NAMES: [&str; 3] = ["generic-350nm", "generic-180nm", "generic-65nm"];

/// The names accepted by [`preset`].
pub fn preset_names() -> &'static [&'static str] {
    &NAMES
}

/// Nominal temperature of every preset: 27 °C.
const T_NOM: f64 = 300.15;

#[allow(clippy::too_many_arguments)]
fn tech(
    vt0: f64,
    n: f64,
    mu_cox: f64,
    va_per_um: f64,
    a_vt_mv_um: f64,
    a_beta_pct_um: f64,
    vt0_tempco: f64,
    beta_exp: f64,
    tox_nm: f64,
    kf: f64,
) -> DeviceTech {
    DeviceTech {
        vt0,
        n,
        mu_cox,
        drain_coupling: DrainCoupling::EarlyVoltagePerLength(va_per_um * 1e6),
        a_vt_pair: a_vt_mv_um / 1e9,
        a_beta_pair: a_beta_pct_um / 1e8,
        vt0_tempco,
        beta_temp_exponent: beta_exp,
        cox: EPS_OX / (tox_nm / 1e9),
        kf,
    }
}

/// The weak-inversion gain g = kappa/sigma of a current-mode WTA whose sink transistors are of
/// type `tech` with channel length `l` (m), at the process's nominal temperature `t_nom` (K):
/// kappa = 1/n, sigma = eta/n, so g = 1/eta; for an Early-voltage coupling sigma = U_T/V_A and
/// g = V_A/(n U_T) (DEVELOPERS.md model notes §3 and §4.1).
pub fn wta_gain(tech: &DeviceTech, l: f64, t_nom: f64) -> f64 {
    let ut = crate::physics::thermal_voltage(t_nom);
    let eta = tech.drain_coupling.eta(tech.n, l, ut);
    (1.0 / tech.n) / (eta / tech.n)
}

/// A generic process preset by name (see [`preset_names`]). An unknown name is an error listing
/// the valid ones. The values are generic (module docs), never a foundry's: use your foundry's
/// characterised values for sign-off.
pub fn preset(name: &str) -> Result<Process, DeviceError> {
    //                vt0   n     mu_cox   V_A/L  A_VT  A_beta tempco   exp   tox   K_F
    let (vdd, nmos, pmos) = match name {
        "generic-350nm" => (
            3.3,
            tech(
                0.55, 1.40, 170e-6, 20.0, 7.5, 1.5, -1.5e-3, -1.5, 7.6, 1.0e-25,
            ),
            tech(
                0.70, 1.45, 58e-6, 20.0, 8.0, 2.0, -1.8e-3, -1.3, 7.6, 0.5e-25,
            ),
        ),
        "generic-180nm" => (
            1.8,
            tech(
                0.45, 1.30, 300e-6, 10.0, 4.5, 1.0, -1.5e-3, -1.5, 4.1, 1.0e-25,
            ),
            tech(
                0.45, 1.35, 70e-6, 10.0, 4.5, 1.5, -1.8e-3, -1.3, 4.1, 0.5e-25,
            ),
        ),
        "generic-65nm" => (
            1.2,
            tech(
                0.40, 1.35, 400e-6, 6.0, 3.0, 1.0, -1.5e-3, -1.5, 2.5, 1.0e-25,
            ),
            tech(
                0.40, 1.40, 120e-6, 6.0, 3.0, 1.5, -1.8e-3, -1.3, 2.5, 0.5e-25,
            ),
        ),
        _ => {
            return Err(DeviceError::UnknownPreset {
                name: name.to_string(),
                valid: NAMES.join(", "),
            })
        }
    };
    Ok(Process {
        name: name.to_string(),
        vdd,
        t_nom: T_NOM,
        nmos,
        pmos,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn all() -> Vec<Process> {
        preset_names()
            .iter()
            .map(|n| preset(n).unwrap_or_else(|e| panic!("{e}")))
            .collect()
    }

    #[test]
    fn presets_validate_and_are_named_generic() {
        for p in all() {
            assert!(p.name.starts_with("generic-"), "{}", p.name);
            p.validate().unwrap_or_else(|e| panic!("{}: {e}", p.name));
        }
        let e = preset("tsmc-180").unwrap_err().to_string();
        for n in preset_names() {
            assert!(e.contains(n), "{e}");
        }
        assert!(e.contains("\"tsmc-180\""), "{e}");
    }

    /// A_VT ≈ 1 mV·µm per nm of oxide (Pelgrom, Tuinhout, Vertregt, IEDM 1998): the preset's
    /// A_VT over its oxide thickness (from C_ox = eps_ox / t_ox) is within 0.7 to 1.5 mV·µm/nm.
    /// A_beta within 0.5-2 %·µm (DEVELOPERS.md model notes, same source, from memory).
    #[test]
    fn matching_follows_oxide_rule() {
        for p in all() {
            for t in [&p.nmos, &p.pmos] {
                let tox_nm = EPS_OX / t.cox * 1e9;
                let ratio = t.a_vt_pair * 1e9 / tox_nm;
                assert!((0.7..=1.5).contains(&ratio), "{}: {ratio}", p.name);
                assert!((0.5e-8..=2e-8).contains(&t.a_beta_pair), "{}", p.name);
            }
        }
    }

    /// Mobility mu = mu C_ox / C_ox in the usual bulk-silicon inversion-layer ranges (NMOS
    /// 150-600 cm²/Vs, PMOS 40-250 cm²/Vs: from memory).
    #[test]
    fn mobility_ranges() {
        for p in all() {
            let mu_n = p.nmos.mu_cox / p.nmos.cox * 1e4;
            let mu_p = p.pmos.mu_cox / p.pmos.cox * 1e4;
            assert!((150.0..=600.0).contains(&mu_n), "{}: {mu_n}", p.name);
            assert!((40.0..=250.0).contains(&mu_p), "{}: {mu_p}", p.name);
        }
    }

    /// The WTA gain g = kappa/sigma of every preset, computed three ways that must agree:
    /// (1) [`wta_gain`]; (2) V_A/(n U_T) by hand from the preset table (V_A/L times 1 µm, the
    /// slope factor n) with U_T = kT/q from the CODATA 2018 constants at 27 °C; (3) from the EKV
    /// device itself (Enz, Krummenacher, Vittoz 1995): in weak-inversion saturation
    /// kappa = U_T d ln I/dV_G and sigma = U_T d ln I/dV_D, so their ratio, taken by central
    /// differences on `Ekv::id`, is g. The values are the ones documented per preset in
    /// DEVELOPERS.md model notes §3 (rounded to the unit there).
    #[test]
    fn wta_gain_per_preset_from_early_voltage_and_slope_factor() {
        // (preset, V_A/L in V/µm and n of NMOS, PMOS; documented gains NMOS, PMOS at 1 µm)
        let table = [
            ("generic-350nm", 20.0, 1.40, 1.45, 552.0, 533.0),
            ("generic-180nm", 10.0, 1.30, 1.35, 297.0, 286.0),
            ("generic-65nm", 6.0, 1.35, 1.40, 172.0, 166.0),
        ];
        // k = 1.380649e-23 J/K and q = 1.602176634e-19 C are exact in SI (CODATA 2018).
        let ut = 1.380649e-23 * 300.15 / 1.602176634e-19;
        for (name, va_per_um, n_n, n_p, doc_n, doc_p) in table {
            let p = preset(name).unwrap();
            for (t, n, doc, pol) in [
                (&p.nmos, n_n, doc_n, crate::device::Polarity::Nmos),
                (&p.pmos, n_p, doc_p, crate::device::Polarity::Pmos),
            ] {
                let l = 1e-6;
                let g = wta_gain(t, l, p.t_nom);
                let by_hand = va_per_um / (n * ut);
                assert!(
                    (g - by_hand).abs() <= 1e-9 * by_hand,
                    "{name}: {g} vs {by_hand}"
                );
                assert!((g - doc).abs() <= 0.5, "{name}: {g} vs documented {doc}");
                // Ten times longer channel, ten times the gain (V_A ∝ L).
                let g10 = wta_gain(t, 10.0 * l, p.t_nom);
                assert!((g10 / g - 10.0).abs() < 1e-9, "{name}");
                // From the device: weak-inversion saturation, V_D well above 4 U_T.
                let tr = crate::device::Transistor {
                    polarity: pol,
                    w: 1e-6,
                    l,
                };
                let e = p.ekv(&tr, p.t_nom, crate::device::MosMismatch::default());
                let s = pol.sign();
                let (vg, vd, h) = (0.1, 0.9, 1e-4);
                let lni = |g: f64, d: f64| e.id(s * g, s * d, 0.0).ln();
                let dg = (lni(vg + h, vd) - lni(vg - h, vd)) / (2.0 * h);
                let dd = (lni(vg, vd + h) - lni(vg, vd - h)) / (2.0 * h);
                let from_device = dg / dd;
                assert!(
                    (from_device - g).abs() <= 0.01 * g,
                    "{name} {pol:?}: device {from_device} vs {g}"
                );
            }
        }
    }
}
