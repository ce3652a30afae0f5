//! Process (technology) parameters, sized transistors, mismatch draws, and their evaluation into
//! an [`Ekv`] device at a temperature.
//!
//! Design vs chip vs conditions: a [`Transistor`] (polarity, W, L) is part of a *design*; a
//! [`MosMismatch`] is one *chip*'s static draw for that transistor; the temperature is a
//! *condition*. [`Process::ekv`] combines the three into a device ready to evaluate.

use serde::{Deserialize, Serialize};

use super::ekv::{Ekv, Polarity};
use super::error::{check, validate_temperature, DeviceError};
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

    /// Check W and L: finite, from 1 nm to 1 cm (a larger value is almost surely a unit slip,
    /// e.g. micrometres written as metres).
    pub fn validate(&self) -> Result<(), DeviceError> {
        const RANGE: &str = "a length from 1 nm to 1 cm, in metres (e.g. 1e-6 or \"1 um\")";
        check(
            "transistor.w",
            self.w,
            |v| (1e-9..=1e-2).contains(&v),
            RANGE,
        )?;
        check(
            "transistor.l",
            self.l,
            |v| (1e-9..=1e-2).contains(&v),
            RANGE,
        )
    }
}

impl DrainCoupling {
    /// Check the coupling value: finite and positive (sigma, eta below 1).
    pub fn validate(&self, parameter: &str) -> Result<(), DeviceError> {
        match *self {
            DrainCoupling::Eta(v) => check(
                parameter,
                v,
                |v| v > 0.0 && v < 1.0,
                "eta between 0 and 1 (exclusive), typically 0.001 to 0.05",
            ),
            DrainCoupling::Sigma(v) => check(
                parameter,
                v,
                |v| v > 0.0 && v < 1.0,
                "sigma between 0 and 1 (exclusive), typically 0.001 to 0.05",
            ),
            DrainCoupling::EarlyVoltage(v) => check(
                parameter,
                v,
                |v| v > 0.0 && v <= 1e4,
                "an Early voltage above 0 V and at most 10 kV, typically 5 to 100 V",
            ),
            DrainCoupling::EarlyVoltagePerLength(v) => check(
                parameter,
                v,
                |v| v > 0.0 && v <= 1e10,
                "an Early voltage per length above 0 and at most 1e10 V/m (10 kV/um), \
                 typically 2e6 to 3e7 V/m (2 to 30 V/um)",
            ),
        }
    }
}

impl DeviceTech {
    /// Check every parameter; `prefix` names the device type in messages (e.g. `nmos`).
    pub fn validate(&self, prefix: &str) -> Result<(), DeviceError> {
        let p = |name: &str| format!("{prefix}.{name}");
        check(
            &p("vt0"),
            self.vt0,
            |v| v.abs() <= 5.0,
            "a threshold magnitude from -5 V to 5 V",
        )?;
        check(
            &p("n"),
            self.n,
            |v| v > 1.0 && v <= 5.0,
            "a slope factor above 1 and at most 5, typically 1.2 to 1.6",
        )?;
        check(
            &p("mu_cox"),
            self.mu_cox,
            |v| v > 0.0 && v <= 1e-1,
            "above 0 and at most 0.1 A/V^2, typically 30 to 600 uA/V^2",
        )?;
        self.drain_coupling.validate(&p("drain_coupling"))?;
        check(
            &p("a_vt_pair"),
            self.a_vt_pair,
            |v| (0.0..=1e-7).contains(&v),
            "from 0 to 100 mV·um (1e-7 V·m), typically 1 to 10 mV·um",
        )?;
        check(
            &p("a_beta_pair"),
            self.a_beta_pair,
            |v| (0.0..=1e-6).contains(&v),
            "from 0 to 100 %·um (1e-6 m), typically 0.5 to 2 %·um",
        )?;
        check(
            &p("vt0_tempco"),
            self.vt0_tempco,
            |v| v.abs() <= 0.1,
            "from -100 mV/K to 100 mV/K, typically -1 to -2 mV/K",
        )?;
        check(
            &p("beta_temp_exponent"),
            self.beta_temp_exponent,
            |v| v.abs() <= 5.0,
            "from -5 to 5, typically about -1.5",
        )?;
        check(
            &p("cox"),
            self.cox,
            |v| v > 0.0 && v <= 1.0,
            "above 0 and at most 1 F/m^2, typically 2e-3 to 2e-2 F/m^2 (2 to 20 fF/um^2)",
        )?;
        check(
            &p("kf"),
            self.kf,
            |v| (0.0..=1e-18).contains(&v),
            "from 0 to 1e-18 V^2·F, typically 1e-26 to 1e-24 V^2·F",
        )
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

    /// Check the supply, the nominal temperature and both device types.
    pub fn validate(&self) -> Result<(), DeviceError> {
        check(
            "process.vdd",
            self.vdd,
            |v| v > 0.0 && v <= 100.0,
            "a supply above 0 V and at most 100 V",
        )?;
        validate_temperature("process.t_nom", self.t_nom)?;
        self.nmos.validate("nmos")?;
        self.pmos.validate("pmos")
    }

    /// [`Process::ekv`] after checking the transistor, the temperature and the mismatch draw
    /// (a relative beta deviation at or below -100 % would give a non-positive beta).
    pub fn checked_ekv(
        &self,
        t: &Transistor,
        temperature: f64,
        mm: MosMismatch,
    ) -> Result<Ekv, DeviceError> {
        t.validate()?;
        validate_temperature("temperature", temperature)?;
        check(
            "mismatch.dvt0",
            mm.dvt0,
            |_| true,
            "a finite threshold deviation in volts",
        )?;
        check(
            "mismatch.dbeta_rel",
            mm.dbeta_rel,
            |v| v > -1.0,
            "a relative deviation above -1 (-100 %)",
        )?;
        Ok(self.ekv(t, temperature, mm))
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
