//! Physical constants and the thermal voltage.
//!
//! Exact SI values of the 2019 redefinition (CODATA 2018): the Boltzmann constant and the
//! elementary charge are defined, not measured.

/// Boltzmann constant k in J/K (exact, CODATA 2018).
pub const BOLTZMANN: f64 = 1.380_649e-23;
/// Elementary charge q in C (exact, CODATA 2018).
pub const ELEMENTARY_CHARGE: f64 = 1.602_176_634e-19;
/// 0 degC in kelvin.
pub const ZERO_CELSIUS: f64 = 273.15;

/// Thermal voltage U_T = k T / q in volts, for an absolute temperature in kelvin.
///
/// `thermal_voltage(300.0)` = 25.852 mV; 27 degC = 300.15 K gives 25.865 mV: temperatures are
/// always explicit in hardmax, never assumed.
#[inline]
pub fn thermal_voltage(temperature_k: f64) -> f64 {
    BOLTZMANN * temperature_k / ELEMENTARY_CHARGE
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// U_T(300 K) = 25.852 mV from the exact SI constants (CODATA 2018).
    #[test]
    fn thermal_voltage_at_300k() {
        assert_relative_eq!(
            thermal_voltage(300.0),
            25.852e-3,
            epsilon = 0.0,
            max_relative = 2e-5
        );
        // 27 degC = 300.15 K, same source.
        assert_relative_eq!(
            thermal_voltage(300.15),
            25.865e-3,
            epsilon = 0.0,
            max_relative = 2e-5
        );
    }

    /// U_T is linear in T with slope k/q = 8.617333262e-5 V/K (k in eV/K, exact in the 2019 SI,
    /// CODATA 2018), so U_T(2T) = 2 U_T(T) and U_T(0) = 0.
    #[test]
    fn thermal_voltage_is_linear_in_temperature() {
        assert_relative_eq!(
            BOLTZMANN / ELEMENTARY_CHARGE,
            8.617_333_262e-5,
            epsilon = 0.0,
            max_relative = 1e-10
        );
        for t in [1.0, 77.0, 233.15, 300.0, 398.15] {
            assert_relative_eq!(
                thermal_voltage(t),
                8.617_333_262e-5 * t,
                epsilon = 0.0,
                max_relative = 1e-10
            );
            assert_relative_eq!(
                thermal_voltage(2.0 * t),
                2.0 * thermal_voltage(t),
                epsilon = 0.0,
                max_relative = 1e-14
            );
        }
        assert_eq!(thermal_voltage(0.0), 0.0);
        // -40 degC and 125 degC (industrial range ends): k/q T = 20.091 mV and 34.310 mV.
        assert_relative_eq!(
            thermal_voltage(ZERO_CELSIUS - 40.0),
            20.0913e-3,
            epsilon = 0.0,
            max_relative = 5e-5
        );
        assert_relative_eq!(
            thermal_voltage(ZERO_CELSIUS + 125.0),
            34.3099e-3,
            epsilon = 0.0,
            max_relative = 5e-5
        );
    }
}
