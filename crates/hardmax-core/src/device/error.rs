//! Errors of the device area.

use thiserror::Error;

/// A device or process parameter outside its accepted range, or an unknown preset.
#[derive(Clone, Debug, PartialEq, Error)]
pub enum DeviceError {
    /// A parameter is NaN, infinite or outside its accepted range.
    #[error("device parameter `{parameter}` = {value:e} is out of range: {accepted}")]
    OutOfRange {
        /// Parameter path, e.g. `nmos.n` or `transistor.w`.
        parameter: String,
        /// The value given (SI base units).
        value: f64,
        /// The accepted range, in words with units.
        accepted: &'static str,
    },
    /// A process preset name that does not exist.
    #[error("unknown process preset \"{name}\"; valid names: {valid}")]
    UnknownPreset {
        /// The name asked for.
        name: String,
        /// The valid names, comma separated.
        valid: String,
    },
}

/// `Ok` if `value` is finite and `ok(value)`, else an [`DeviceError::OutOfRange`].
pub(crate) fn check(
    parameter: &str,
    value: f64,
    ok: impl Fn(f64) -> bool,
    accepted: &'static str,
) -> Result<(), DeviceError> {
    if value.is_finite() && ok(value) {
        Ok(())
    } else {
        Err(DeviceError::OutOfRange {
            parameter: parameter.to_string(),
            value,
            accepted,
        })
    }
}

/// An absolute temperature must be finite and above 0 K.
pub fn validate_temperature(parameter: &str, temperature: f64) -> Result<(), DeviceError> {
    check(
        parameter,
        temperature,
        |t| t > 0.0 && t <= 1000.0,
        "an absolute temperature above 0 K and at most 1000 K (e.g. 300.15 K = 27 degC)",
    )
}
