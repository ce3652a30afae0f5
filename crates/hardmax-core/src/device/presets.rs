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
//!   analog devices (from memory). The current-mode WTA gain is g = kappa/sigma = V_A/(n U_T)
//!   (DEVELOPERS.md model notes section 4 with sigma ≈ U_T/V_A): at L = 1 µm and 27 °C about 550 (350 nm), 300
//!   (180 nm) and 170 (65 nm), growing in proportion to L.

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
    use crate::physics::thermal_voltage;

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
    /// 150-600 cm²/Vs, PMOS 40-250 cm²/Vs: from memory), and the WTA gain at L = 1 µm,
    /// V_A/(n U_T), in the hundreds (DEVELOPERS.md model notes section 4: hundreds to about a thousand, common
    /// practice, no source; 65 nm lands just under 200 at 1 µm).
    #[test]
    fn mobility_and_wta_gain_ranges() {
        for p in all() {
            let mu_n = p.nmos.mu_cox / p.nmos.cox * 1e4;
            let mu_p = p.pmos.mu_cox / p.pmos.cox * 1e4;
            assert!((150.0..=600.0).contains(&mu_n), "{}: {mu_n}", p.name);
            assert!((40.0..=250.0).contains(&mu_p), "{}: {mu_p}", p.name);
            let ut = thermal_voltage(p.t_nom);
            for t in [&p.nmos, &p.pmos] {
                let l = 1e-6;
                let eta = t.drain_coupling.eta(t.n, l, ut);
                let gain = (1.0 / t.n) / (eta / t.n);
                assert!((150.0..=1000.0).contains(&gain), "{}: {gain}", p.name);
            }
        }
    }
}
