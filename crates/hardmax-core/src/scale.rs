//! The one scale type of a swept quantity: linear or logarithmic spacing. Used by experiment
//! sweep axes (`spacing = "log"`), the results manifest (`"scale": "log"`), plot axes and the
//! stage command's transfer sweeps.

use serde::{Deserialize, Serialize};

/// Spacing of swept values (and the scale of an axis that shows them).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Scale {
    /// `x(f) = from + f (to - from)`.
    #[default]
    Linear,
    /// `x(f) = from (to/from)^f` (ends of the same sign, not zero).
    Log,
}

impl Scale {
    /// Both scales, in the order their names are listed.
    pub const ALL: [Scale; 2] = [Scale::Linear, Scale::Log];

    /// The name used in files and on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Scale::Linear => "linear",
            Scale::Log => "log",
        }
    }

    /// The value at fraction `f` of the way from `from` to `to` on this scale.
    pub fn interpolate(self, from: f64, to: f64, f: f64) -> f64 {
        match self {
            Scale::Linear => from + (to - from) * f,
            Scale::Log => from * (to / from).powf(f),
        }
    }
}

impl std::fmt::Display for Scale {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

impl std::str::FromStr for Scale {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Scale::ALL
            .into_iter()
            .find(|k| k.name() == s)
            .ok_or_else(|| format!("`{s}` is not a scale; write `linear` or `log`"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Ends and midpoints: the linear midpoint of 1 and 100 is 50.5, the geometric one 10
    /// (arithmetic and geometric mean, textbook definitions).
    #[test]
    fn interpolation_and_names() {
        assert_eq!(Scale::Linear.interpolate(1.0, 100.0, 0.0), 1.0);
        assert!((Scale::Linear.interpolate(1.0, 100.0, 0.5) - 50.5).abs() < 1e-12);
        assert!((Scale::Log.interpolate(1.0, 100.0, 0.5) - 10.0).abs() < 1e-12);
        assert!((Scale::Log.interpolate(1.0, 100.0, 1.0) - 100.0).abs() < 1e-12);
        for s in Scale::ALL {
            assert_eq!(s.name().parse::<Scale>(), Ok(s));
            let json = serde_json::to_string(&s).unwrap();
            assert_eq!(json, format!("\"{}\"", s.name()));
        }
        assert!("logarithmic"
            .parse::<Scale>()
            .unwrap_err()
            .contains("linear"));
    }
}
