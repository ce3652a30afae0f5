//! Physical quantities in experiment files: `Q<Current>` and friends read a number (base SI
//! units) or a string with prefix and unit ("10 nA"), check the dimension, and write back the
//! exact value with its base unit ("1e-8 A") so a resolved experiment round-trips bit for bit.

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
            // Debug formatting is the shortest text that reads back to the same double.
            s.serialize_str(&format!("{:?} {unit}", self.0))
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

/// Parse any dimension's resolved form "<number> <base unit>" back into (value, dimension), used
/// to find the unit of a swept path from the resolved experiment.
pub fn parse_resolved(text: &str) -> Option<(f64, Dimension)> {
    let (num, unit) = text.trim().split_once(' ')?;
    let v: f64 = num.parse().ok()?;
    let unit = unit.trim();
    Dimension::ALL
        .iter()
        .find(|d| d.base_unit() == unit && !unit.is_empty())
        .map(|d| (v, *d))
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
    }

    #[test]
    fn wrong_unit_is_an_error() {
        let e = toml::from_str::<T>("i = \"10 nV\"\na = 1e-9").unwrap_err();
        assert!(e.to_string().contains("10 nV"), "{e}");
    }
}
