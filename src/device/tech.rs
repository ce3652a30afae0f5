//! Process (technology) parameters, sized transistors, mismatch draws, and their evaluation into
//! an [`Ekv`] device at a temperature.
//!
//! Design vs chip vs conditions: a [`Transistor`] (polarity, W, L) is part of a *design*; a
//! [`MosMismatch`] is one *chip*'s static draw for that transistor; the temperature is a
//! *condition*. [`Process::ekv`] combines the three into a device ready to evaluate.

use serde::{Deserialize, Serialize};

use super::ekv::{Ekv, Polarity};
use crate::physics::thermal_voltage;

/// How the drain couples into the channel's surface potential (sets the WTA gain kappa/sigma).
///
/// Users may give it in any of these forms; the form given is kept so reports can say which.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DrainCoupling {
    /// EKV drain coupling coefficient `eta` in `V_P = (V_G - V_T0 + eta (V_D - V_S)) / n`.
    Eta(f64),
    /// Drain coupling into the surface potential, `sigma = eta / n`.
    Sigma(f64),
    /// An Early voltage V_A in volts: `sigma ≈ U_T / V_A` at the process's nominal temperature.
    EarlyVoltage(f64),
    /// Early voltage proportional to channel length: `V_A = value * L` (value in V/m).
    EarlyVoltagePerLength(f64),
}

impl DrainCoupling {
    /// The EKV `eta` for a device of slope factor `n` and length `l`, using the thermal voltage
    /// `ut_nom` at the process's nominal temperature to convert an Early voltage.
    pub fn eta(&self, n: f64, l: f64, ut_nom: f64) -> f64 {
        match *self {
            DrainCoupling::Eta(eta) => eta,
            DrainCoupling::Sigma(sigma) => sigma * n,
            DrainCoupling::EarlyVoltage(va) => n * ut_nom / va,
            DrainCoupling::EarlyVoltagePerLength(va_per_m) => n * ut_nom / (va_per_m * l),
        }
    }
}

/// Parameters of one device type (NMOS or PMOS) of a process, at the nominal temperature.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct DeviceTech {
    /// Threshold voltage magnitude V_T0 at the nominal temperature, V.
    pub vt0: f64,
    /// Slope factor n (kappa = 1/n).
    pub n: f64,
    /// Transconductance parameter mu C_ox in A/V^2 (beta = mu C_ox W / L).
    pub mu_cox: f64,
    /// Drain coupling (see [`DrainCoupling`]).
    pub drain_coupling: DrainCoupling,
    /// Pelgrom threshold constant A_VT of a matched *pair*, in V·m (1 mV·µm = 1e-9 V·m).
    pub a_vt_pair: f64,
    /// Pelgrom current-factor constant A_beta of a matched *pair*, as a fraction times metres
    /// (1 %·µm = 1e-8 m).
    pub a_beta_pair: f64,
    /// Linear temperature coefficient of V_T0 magnitude, V/K (typically -1 to -2 mV/K: common
    /// practice, no source).
    pub vt0_tempco: f64,
    /// Exponent of the mobility temperature law beta ∝ (T/T_nom)^exp (about -1.5: common practice).
    pub beta_temp_exponent: f64,
    /// Gate oxide capacitance per area, F/m^2 (flicker noise, gate capacitance).
    pub cox: f64,
    /// Flicker noise coefficient K_F in V^2·F (input-referred PSD = K_F / (C_ox W L f)).
    pub kf: f64,
}

/// A process: both device types plus supply and nominal temperature.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Process {
    /// Name; the shipped presets are generic and say so in their name.
    pub name: String,
    /// Nominal supply voltage, V.
    pub vdd: f64,
    /// Temperature at which the device parameters are given, K.
    pub t_nom: f64,
    pub nmos: DeviceTech,
    pub pmos: DeviceTech,
}

/// A sized transistor of a design.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Transistor {
    pub polarity: Polarity,
    /// Channel width, m.
    pub w: f64,
    /// Channel length, m.
    pub l: f64,
}

/// One chip's static deviation of one transistor from nominal (a single device, not a pair).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct MosMismatch {
    /// Threshold deviation, V (added to the V_T0 magnitude).
    pub dvt0: f64,
    /// Relative current-factor deviation: beta -> beta (1 + dbeta_rel).
    pub dbeta_rel: f64,
}

impl Transistor {
    /// Gate area W L in m^2.
    pub fn area(&self) -> f64 {
        self.w * self.l
    }
}

impl Process {
    /// The parameters of the device type of `t`.
    pub fn tech(&self, polarity: Polarity) -> &DeviceTech {
        match polarity {
            Polarity::Nmos => &self.nmos,
            Polarity::Pmos => &self.pmos,
        }
    }

    /// Evaluate transistor `t` with mismatch `mm` at `temperature` (K) into an EKV device.
    ///
    /// V_T0(T) = V_T0 + tempco (T - T_nom) + dV_T0; beta(T) = mu C_ox W/L (T/T_nom)^exp (1 + dbeta);
    /// U_T = kT/q. Drain coupling is resolved at the nominal temperature.
    pub fn ekv(&self, t: &Transistor, temperature: f64, mm: MosMismatch) -> Ekv {
        let tech = self.tech(t.polarity);
        let ut = thermal_voltage(temperature);
        let ut_nom = thermal_voltage(self.t_nom);
        Ekv {
            polarity: t.polarity,
            vt0: tech.vt0 + tech.vt0_tempco * (temperature - self.t_nom) + mm.dvt0,
            n: tech.n,
            beta: tech.mu_cox * t.w / t.l
                * (temperature / self.t_nom).powf(tech.beta_temp_exponent)
                * (1.0 + mm.dbeta_rel),
            eta: tech.drain_coupling.eta(tech.n, t.l, ut_nom),
            ut,
        }
    }
}
