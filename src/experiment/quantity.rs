//! Physical quantities in experiment files: `Q<Current>` and friends read a string with prefix
//! and unit ("10 nA"; a bare number is refused: the key has a dimension), check the dimension,
//! and write back the exact value with an engineering prefix ("100 nA", see [`exact_si`]) so a
//! resolved experiment reads as designers write it and round-trips bit for bit.

use std::fmt;
use std::marker::PhantomData;

use serde::{Deserialize, Deserializer, Serialize, Serializer};

use crate::units::{quantity_from_toml, Dimension};

/// A dimension marker for [`Q`].
pub trait Dim {
    const D: Dimension;
}

macro_rules! markers {
    ($($name:ident),*) => {$(
        #[doc = concat!("Marker for [`Dimension::", stringify!($name), "`].")]
        #[derive(Clone, Copy, Debug, PartialEq, Eq)]
        pub struct $name;
        impl Dim for $name {
            const D: Dimension = Dimension::$name;
        }
    )*};
}
markers!(
    Current,
    Voltage,
    Length,
    Temperature,
    Time,
    Capacitance,
    Resistance,
    Frequency,
    VoltageLength,
    FractionLength,
    Transconductance,
    VoltagePerKelvin,
    VoltagePerLength,
    CapacitancePerArea
);

/// A value of dimension `D` in SI base units.
pub struct Q<D: Dim>(pub f64, PhantomData<D>);

impl<D: Dim> Q<D> {
    pub const fn new(v: f64) -> Self {
        Q(v, PhantomData)
    }
    /// The value in SI base units.
    #[inline]
    pub fn si(&self) -> f64 {
        self.0
    }
}

impl<D: Dim> Clone for Q<D> {
    fn clone(&self) -> Self {
        *self
    }
}
impl<D: Dim> Copy for Q<D> {}
impl<D: Dim> PartialEq for Q<D> {
    fn eq(&self, o: &Self) -> bool {
        self.0 == o.0
    }
}
impl<D: Dim> fmt::Debug for Q<D> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{} {}", self.0, D::D.base_unit())
    }
}

impl<D: Dim> Serialize for Q<D> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let unit = D::D.base_unit();
        if unit.is_empty() {
            s.serialize_f64(self.0)
        } else {
            s.serialize_str(&exact_si(self.0, unit))
        }
    }
}

impl<'de, D: Dim> Deserialize<'de> for Q<D> {
    fn deserialize<De: Deserializer<'de>>(d: De) -> Result<Self, De::Error> {
        let v = toml::Value::deserialize(d)?;
        quantity_from_toml(&v, D::D)
            .map(Q::new)
            .map_err(serde::de::Error::custom)
    }
}

/// `value` with an engineering SI prefix, as a designer writes it ("100 nA", "1.8 V",
/// "4.5 nV·m"), exactly: the digits are the shortest decimal that reads back to the same double,
/// only the decimal point moves, so the (correctly rounded) parser returns the same double.
/// Outside the prefix range, or for zero, the plain shortest form with the base unit.
pub fn exact_si(value: f64, unit: &str) -> String {
    const PREFIXES: [(i32, &str); 11] = crate::units::ENGINEERING_PREFIXES;
    let plain = || {
        let t = format!("{value:?}");
        let t = t.strip_suffix(".0").map(str::to_string).unwrap_or(t);
        format!("{t} {unit}")
    };
    if value == 0.0 || !value.is_finite() {
        return plain();
    }
    // Shortest round-trip digits in scientific form: "-4.5e-9" -> sign, "45", exponent -9.
    let sci = format!("{:e}", value.abs());
    let Some((mant, exp)) = sci.split_once('e') else {
        return plain();
    };
    let Ok(exp) = exp.parse::<i32>() else {
        return plain();
    };
    let digits: String = mant.chars().filter(char::is_ascii_digit).collect();
    let e3 = exp.div_euclid(3) * 3;
    let Some(&(_, prefix)) = PREFIXES.iter().find(|(e, _)| *e == e3) else {
        return plain();
    };
    // The number is 0.d1d2d3... x 10^(exp + 1); with the prefix it is d1d2d3 x 10^(exp - e3 + 1 - len).
    let int_len = (exp - e3 + 1) as usize; // 1, 2 or 3 digits before the point
    let mut d = digits.clone();
    while d.len() < int_len {
        d.push('0');
    }
    let (int, frac) = d.split_at(int_len);
    let sign = if value < 0.0 { "-" } else { "" };
    if frac.is_empty() {
        format!("{sign}{int} {prefix}{unit}")
    } else {
        format!("{sign}{int}.{frac} {prefix}{unit}")
    }
}

/// Parse a resolved quantity ("100 nA", "1e-8 A") back into (value, dimension), used to find
/// the unit of a swept path from the resolved experiment. The first dimension whose spelling
/// reads the text wins (dimensions sharing a base unit are told apart by the caller).
pub fn parse_resolved(text: &str) -> Option<(f64, Dimension)> {
    Dimension::ALL
        .iter()
        .filter(|d| **d != Dimension::Dimensionless)
        .find_map(|d| crate::units::parse_quantity(text, *d).ok().map(|v| (v, *d)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Debug, Serialize, Deserialize, PartialEq)]
    struct T {
        i: Q<Current>,
        a: Q<VoltageLength>,
    }

    #[test]
    fn round_trips_exactly() {
        let t: T = toml::from_str("i = \"50 nA\"\na = \"5 mV um\"").unwrap();
        // Correctly rounded: exactly the double nearest 5e-8.
        assert_eq!(t.i.si(), 5e-8);
        let text = toml::to_string(&t).unwrap();
        let back: T = toml::from_str(&text).unwrap();
        assert_eq!(t, back, "{text}");
        assert_eq!(parse_resolved("1e-8 A"), Some((1e-8, Dimension::Current)));
        assert_eq!(parse_resolved("100 nA"), Some((1e-7, Dimension::Current)));
    }

    /// Resolved quantities read as designers write them, and read back to the same double.
    #[test]
    fn exact_si_is_readable_and_exact() {
        assert_eq!(exact_si(1e-7, "A"), "100 nA");
        assert_eq!(exact_si(4.5e-9, "V·m"), "4.5 nV·m");
        assert_eq!(exact_si(1.8, "V"), "1.8 V");
        assert_eq!(exact_si(300.15, "K"), "300.15 K");
        assert_eq!(exact_si(-0.0015, "V/K"), "-1.5 mV/K");
        assert_eq!(exact_si(1e7, "V/m"), "10 MV/m");
        assert_eq!(exact_si(0.0, "s"), "0 s");
        for (v, d) in [
            (1e-7, Dimension::Current),
            (0.1 + 0.2, Dimension::Voltage),
            (2.0e-6 / 3.0, Dimension::Length),
            (300.15, Dimension::Temperature),
            (3e-4, Dimension::Transconductance),
            (1.0 / 3.0 * 1e-13, Dimension::Capacitance),
        ] {
            let t = exact_si(v, d.base_unit());
            let back = crate::units::parse_quantity(&t, d).unwrap();
            assert_eq!(back.to_bits(), v.to_bits(), "{t}");
        }
    }

    #[test]
    fn wrong_unit_is_an_error() {
        let e = toml::from_str::<T>("i = \"10 nV\"\na = 1e-9").unwrap_err();
        assert!(e.to_string().contains("10 nV"), "{e}");
    }
}
