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

/// How strongly the drain voltage moves the channel's surface potential (sigma = eta/n; with
/// kappa = 1/n for the gate, it sets the current-mode WTA's gain g = kappa/sigma).
///
/// Users may give it in any of these forms; the form given is kept so reports can say which.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DrainCoupling {
    /// EKV drain coupling coefficient `eta` in `V_P = (V_G - V_T0 + eta (V_D - V_S)) / n`.
    Eta(f64),
    /// `sigma = eta / n` given directly: the weight of V_D in the weak-inversion exponent.
    Sigma(f64),
    /// An Early voltage V_A in volts. In weak-inversion saturation `d ln I_D / d V_D = sigma/U_T`,
    /// and the Early voltage is `V_A = I_D / (dI_D/dV_D)`, so `sigma = U_T / V_A` at the
    /// process's nominal temperature.
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
    /// Gate-oxide capacitance of transistor `t`, C_ox W L in F (intrinsic gate capacitance scale;
    /// overlap and junction capacitances are not included).
    pub fn gate_capacitance(&self, t: &Transistor) -> f64 {
        self.cox * t.area()
    }

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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::presets::preset;
    use approx::assert_relative_eq;

    fn process() -> Process {
        preset("generic-180nm").unwrap_or_else(|e| panic!("{e}"))
    }

    fn nmos(w: f64, l: f64) -> Transistor {
        Transistor {
            polarity: Polarity::Nmos,
            w,
            l,
        }
    }

    /// V_T0(T) = V_T0 + tempco (T - T_nom) (linear tempco of -1 to -2 mV/K: common practice, no
    /// source), U_T = kT/q (CODATA 2018), beta ∝ (T/T_nom)^exp (exp ≈ -1.5: common practice),
    /// beta = mu C_ox W/L (Enz, Krummenacher, Vittoz 1995), mismatch additive on V_T0 and
    /// multiplicative on beta.
    #[test]
    fn temperature_laws() {
        let p = process();
        let t = nmos(4e-6, 2e-6);
        let nom = p.ekv(&t, p.t_nom, MosMismatch::default());
        assert_relative_eq!(nom.vt0, p.nmos.vt0, epsilon = 0.0, max_relative = 1e-14);
        assert_relative_eq!(
            nom.beta,
            p.nmos.mu_cox * 2.0,
            epsilon = 0.0,
            max_relative = 1e-14
        );
        for temp in [233.15, 273.15, 350.0, 398.15] {
            let e = p.ekv(&t, temp, MosMismatch::default());
            assert_relative_eq!(
                e.ut,
                crate::physics::thermal_voltage(temp),
                epsilon = 0.0,
                max_relative = 1e-14
            );
            // -1.5 mV/K over (T - 300.15 K).
            assert_relative_eq!(
                e.vt0,
                0.45 - 1.5e-3 * (temp - 300.15),
                epsilon = 0.0,
                max_relative = 1e-12
            );
            assert_relative_eq!(
                e.beta / nom.beta,
                (temp / 300.15).powf(-1.5),
                epsilon = 0.0,
                max_relative = 1e-12
            );
            // The slope factor and the drain coupling do not drift.
            assert_eq!(e.n, nom.n);
            assert_eq!(e.eta, nom.eta);
        }
        let mm = MosMismatch {
            dvt0: 3e-3,
            dbeta_rel: -0.02,
        };
        let e = p.ekv(&t, 350.0, mm);
        let e0 = p.ekv(&t, 350.0, MosMismatch::default());
        assert_relative_eq!(e.vt0 - e0.vt0, 3e-3, epsilon = 0.0, max_relative = 1e-9);
        assert_relative_eq!(e.beta / e0.beta, 0.98, epsilon = 0.0, max_relative = 1e-12);
        // PMOS takes its own tempco (-1.8 mV/K in the preset).
        let tp = Transistor {
            polarity: Polarity::Pmos,
            ..t
        };
        let ep = p.ekv(&tp, 350.0, MosMismatch::default());
        assert_relative_eq!(
            ep.vt0,
            0.45 - 1.8e-3 * (350.0 - 300.15),
            epsilon = 0.0,
            max_relative = 1e-12
        );
        assert_eq!(ep.polarity, Polarity::Pmos);
    }

    /// An Early voltage V_A means I_D / g_ds = V_A in weak-inversion saturation, where
    /// I_D ∝ exp(sigma V_D / U_T) and sigma ≈ U_T / V_A (DEVELOPERS.md model notes section 3; EKV weak-inversion
    /// law, Enz, Krummenacher, Vittoz 1995); all four ways of giving the coupling agree.
    #[test]
    fn drain_coupling_forms() {
        let mut p = process();
        let t = nmos(2e-6, 2e-6);
        let ut = crate::physics::thermal_voltage(p.t_nom);
        let n = p.nmos.n;
        let va = 20.0;
        let forms = [
            DrainCoupling::EarlyVoltage(va),
            DrainCoupling::EarlyVoltagePerLength(va / t.l),
            DrainCoupling::Sigma(ut / va),
            DrainCoupling::Eta(n * ut / va),
        ];
        for dc in forms {
            p.nmos.drain_coupling = dc;
            let e = p.ekv(&t, p.t_nom, MosMismatch::default());
            assert_relative_eq!(e.sigma(), ut / va, epsilon = 0.0, max_relative = 1e-12);
            // Deep weak inversion (EKV departs from the exponential by ~e^(x/2)).
            let ev = e.eval(-0.1, 0.6, 0.0);
            assert_relative_eq!(ev.id / ev.d_vd, va, epsilon = 0.0, max_relative = 1e-3);
        }
        // Early voltage per length: twice the length, twice V_A, half the coupling.
        p.nmos.drain_coupling = DrainCoupling::EarlyVoltagePerLength(1e7);
        let short = p.ekv(&nmos(2e-6, 1e-6), p.t_nom, MosMismatch::default());
        let long = p.ekv(&nmos(2e-6, 2e-6), p.t_nom, MosMismatch::default());
        assert_relative_eq!(
            short.eta / long.eta,
            2.0,
            epsilon = 0.0,
            max_relative = 1e-12
        );
    }

    fn expect_err(r: Result<(), DeviceError>, parameter: &str, fragment: &str) {
        let e = r
            .err()
            .unwrap_or_else(|| panic!("{parameter} should be rejected"));
        let msg = e.to_string();
        assert!(msg.contains(&format!("`{parameter}`")), "{msg}");
        assert!(msg.contains(fragment), "{msg}");
    }

    /// C_ox W L: 4.1 nm oxide, eps_ox = 3.9 eps_0 -> 8.42 fF/um^2, so 8.42 fF for 1 um^2
    /// (parallel-plate capacitor; eps_0 from CODATA 2018).
    #[test]
    fn gate_capacitance() {
        let p = process();
        let c = p.nmos.gate_capacitance(&nmos(2e-6, 0.5e-6));
        assert_relative_eq!(
            c,
            3.9 * 8.854_187_812_8e-12 / 4.1e-9 * 1e-12,
            epsilon = 0.0,
            max_relative = 1e-9
        );
        assert_relative_eq!(c, 8.42e-15, epsilon = 0.0, max_relative = 1e-3);
    }

    #[test]
    fn transistor_validation() {
        assert!(nmos(1e-6, 180e-9).validate().is_ok());
        expect_err(
            nmos(0.0, 1e-6).validate(),
            "transistor.w",
            "from 1 nm to 1 cm",
        );
        expect_err(
            nmos(-1e-6, 1e-6).validate(),
            "transistor.w",
            "from 1 nm to 1 cm",
        );
        expect_err(nmos(f64::NAN, 1e-6).validate(), "transistor.w", "NaN");
        expect_err(nmos(1e-6, f64::INFINITY).validate(), "transistor.l", "inf");
        // 10 m: micrometres written as metres.
        expect_err(nmos(1e-6, 10.0).validate(), "transistor.l", "\"1 um\"");
    }

    #[test]
    fn process_validation() {
        let good = process();
        assert!(good.validate().is_ok());
        type Edit = fn(&mut Process);
        let cases: [(Edit, &str, &str); 12] = [
            (|p| p.nmos.n = 1.0, "nmos.n", "above 1"),
            (|p| p.pmos.n = 12.0, "pmos.n", "at most 5"),
            (|p| p.nmos.n = f64::NAN, "nmos.n", "above 1"),
            (|p| p.t_nom = 0.0, "process.t_nom", "above 0 K"),
            (|p| p.t_nom = -5.0, "process.t_nom", "above 0 K"),
            (|p| p.vdd = f64::INFINITY, "process.vdd", "above 0 V"),
            (|p| p.nmos.mu_cox = 0.0, "nmos.mu_cox", "uA/V^2"),
            (
                |p| p.nmos.drain_coupling = DrainCoupling::Eta(0.0),
                "nmos.drain_coupling",
                "eta",
            ),
            (
                |p| p.pmos.drain_coupling = DrainCoupling::Sigma(-0.01),
                "pmos.drain_coupling",
                "sigma",
            ),
            (
                |p| p.nmos.drain_coupling = DrainCoupling::EarlyVoltage(0.0),
                "nmos.drain_coupling",
                "Early voltage",
            ),
            (
                |p| p.nmos.drain_coupling = DrainCoupling::EarlyVoltagePerLength(f64::NAN),
                "nmos.drain_coupling",
                "V/um",
            ),
            (|p| p.pmos.kf = f64::NAN, "pmos.kf", "V^2·F"),
        ];
        for (edit, parameter, fragment) in cases {
            let mut p = good.clone();
            edit(&mut p);
            expect_err(p.validate(), parameter, fragment);
        }
        let mut p = good.clone();
        p.nmos.a_vt_pair = -1e-9;
        expect_err(p.validate(), "nmos.a_vt_pair", "mV·um");
    }

    #[test]
    fn checked_evaluation() {
        let p = process();
        let t = nmos(1e-6, 1e-6);
        let mm = MosMismatch::default();
        let e = p
            .checked_ekv(&t, 300.0, mm)
            .unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(e, p.ekv(&t, 300.0, mm));
        for bad in [0.0, -10.0, f64::NAN] {
            let r = p.checked_ekv(&t, bad, mm).map(|_| ());
            expect_err(r, "temperature", "above 0 K");
        }
        let r = p
            .checked_ekv(
                &t,
                300.0,
                MosMismatch {
                    dvt0: 0.0,
                    dbeta_rel: -1.5,
                },
            )
            .map(|_| ());
        expect_err(r, "mismatch.dbeta_rel", "above -1");
        let r = p.checked_ekv(&nmos(0.0, 1e-6), 300.0, mm).map(|_| ());
        expect_err(r, "transistor.w", "1 nm");
    }
}
