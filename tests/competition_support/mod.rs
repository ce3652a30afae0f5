//! Shared helpers for the competition-stage tests and benchmark.
//!
//! The process below is *generic*: round numbers inside the published ranges for a 0.18 µm-class
//! bulk CMOS process (V_T0 ≈ 0.45 V, n ≈ 1.3, µC_ox ≈ 300 µA/V² for NMOS; A_VT ≈ 5 mV·µm, from
//! memory; DEVELOPERS.md model notes §3), not any foundry's characterised values.
#![allow(dead_code)]

use hardmax::device::{DeviceTech, DrainCoupling, MosMismatch, Polarity, Process, Transistor};
use hardmax::stages::competition::{CurrentSource, WtaChip, WtaDesign};
use rand::Rng;
use rand_distr::{Distribution, Normal};

/// Generic 0.18 µm-class process (see module docs), NMOS drain coupling eta = `eta`.
pub fn generic_process(eta: f64) -> Process {
    let nmos = DeviceTech {
        vt0: 0.45,
        n: 1.3,
        mu_cox: 300e-6,
        drain_coupling: DrainCoupling::Eta(eta),
        a_vt_pair: 5e-9,
        a_beta_pair: 1e-8,
        vt0_tempco: -1.5e-3,
        beta_temp_exponent: -1.5,
        cox: 8.5e-3,
        kf: 1e-24,
    };
    let pmos = DeviceTech {
        vt0: 0.45,
        mu_cox: 80e-6,
        ..nmos.clone()
    };
    Process {
        name: "generic-test-180nm".into(),
        vdd: 1.8,
        t_nom: 300.0,
        nmos,
        pmos,
    }
}

pub fn nmos(w: f64, l: f64) -> Transistor {
    Transistor {
        polarity: Polarity::Nmos,
        w,
        l,
    }
}

/// A WTA design: sinks and outputs W/L = 2 µm / 1 µm (I_S = 2 n µC_ox (W/L) U_T² ≈ 1.04 µA at
/// 300 K), ideal bias.
pub fn wta_design(n: usize, eta: f64, ib: f64) -> WtaDesign {
    WtaDesign::new(
        n,
        generic_process(eta),
        nmos(2e-6, 1e-6),
        nmos(2e-6, 1e-6),
        CurrentSource::Ideal { current: ib },
    )
}

/// Independent per-device Gaussian mismatch with the given sigmas (a test helper, not the
/// project's Pelgrom sampler).
pub fn gaussian_chip<R: Rng>(
    design: WtaDesign,
    sigma_vt: f64,
    sigma_beta: f64,
    rng: &mut R,
) -> WtaChip {
    let nv = Normal::new(0.0, sigma_vt).unwrap();
    let nb = Normal::new(0.0, sigma_beta).unwrap();
    WtaChip::sample(design, |_t| MosMismatch {
        dvt0: nv.sample(rng),
        dbeta_rel: nb.sample(rng),
    })
    .unwrap()
}

/// Specific current of the generic NMOS at 300 K for a W/L ratio (EKV: I_S = 2 n beta U_T^2).
pub fn is_nmos(w_over_l: f64) -> f64 {
    let ut = hardmax::physics::thermal_voltage(300.0);
    2.0 * 1.3 * 300e-6 * w_over_l * ut * ut
}

/// A WTA design able to take inputs from 1 fA to 1 mA: sinks and outputs W/L = 200 µm / 1 µm,
/// bias NMOS 10 µm / 1 µm with its gate at 0.55 V.
pub fn wide_range_design(n: usize) -> WtaDesign {
    WtaDesign::new(
        n,
        generic_process(0.01),
        nmos(200e-6, 1e-6),
        nmos(200e-6, 1e-6),
        CurrentSource::Transistor {
            device: nmos(10e-6, 1e-6),
            gate_voltage: 0.55,
        },
    )
}
