//! Sweeps: axes over numeric parameter paths, combined as a grid (cross product) or zipped.
//!
//! Range values are built from an integer index (`from + i (to - from) / (points - 1)`, or the
//! geometric equivalent), never by repeated addition, so every point is reproducible and the
//! last point equals `to`.

use crate::scale::Scale;
use serde::{Deserialize, Serialize};
use toml::Value;

/// How axes combine into sweep points.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Combine {
    /// Cross product; the first axis varies slowest.
    #[default]
    Grid,
    /// Axes advance together; all must have the same number of values.
    Zip,
}

/// One sweep axis as written in an experiment file: a parameter path and either explicit
/// `values` or a range `from`, `to`, `points`, `spacing`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AxisSpec {
    pub path: String,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub values: Option<Vec<Value>>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub from: Option<Value>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub to: Option<Value>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub points: Option<i64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub spacing: Option<Scale>,
}

/// The `[sweep]` table.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SweepSpec {
    #[serde(default)]
    pub combine: Combine,
    #[serde(default)]
    pub axis: Vec<AxisSpec>,
}

/// A sweep axis with its values resolved to numbers in SI base units.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Axis {
    pub path: String,
    /// Base SI unit of the parameter ("" for dimensionless).
    pub unit: String,
    pub spacing: Scale,
    /// Whether the parameter takes integers (the values are then whole numbers).
    pub integer: bool,
    pub values: Vec<f64>,
    /// A text parameter (e.g. `competition.circuit`): the values are the indices 0, 1, ...
    /// of these texts, which are what the points set.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub labels: Option<Vec<String>>,
    /// A switch (e.g. `trim.enabled`): the labels are "false" / "true" and each point sets the
    /// boolean, not the text.
    #[serde(skip_serializing_if = "std::ops::Not::not")]
    pub boolean: bool,
}

impl Axis {
    /// The TOML value to assign for value number `i`.
    pub fn toml_value(&self, i: usize) -> Value {
        if let Some(l) = self.labels.as_ref().and_then(|l| l.get(i)) {
            if self.boolean {
                return Value::Boolean(l == "true");
            }
            return Value::String(l.clone());
        }
        let v = self.values[i];
        if self.integer {
            Value::Integer(v as i64)
        } else if self.unit.is_empty() {
            Value::Float(v)
        } else {
            // A dimensioned value keeps its unit (a bare number is refused for it); the shortest
            // text that reads back to the same double, as in a resolved experiment.
            Value::String(super::quantity::exact_si(v, &self.unit))
        }
    }
}

/// One point of the sweep: its index and one value index per axis.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct PointIndex {
    pub point: usize,
    pub value_index: Vec<usize>,
}

/// Sweep errors name the axis path and say what to write instead.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SweepError {
    #[error("sweep axis `{path}`: give either `values = [...]` or `from`, `to` and `points`, not {what}")]
    Form { path: String, what: &'static str },
    #[error("sweep axis `{path}`: the value list is empty; give at least one value")]
    Empty { path: String },
    #[error("sweep axis `{path}`: `points` must be at least 2 for a range (got {points})")]
    Points { path: String, points: i64 },
    #[error("sweep axis `{path}`: a log range needs `from` and `to` of the same sign and non-zero (got {from} .. {to})")]
    LogRange { path: String, from: f64, to: f64 },
    #[error("sweep axis `{path}`: {message}")]
    Value { path: String, message: String },
    #[error("sweep axis `{path}` is listed twice; each parameter may be swept by one axis")]
    Duplicate { path: String },
    #[error("sweep combine = \"zip\" needs axes of equal length, but `{a}` has {na} values and `{b}` has {nb}")]
    ZipLength {
        a: String,
        na: usize,
        b: String,
        nb: usize,
    },
    #[error("the sweep has {count} points; the limit is {limit}. Use fewer values or split the experiment")]
    TooLarge { count: usize, limit: usize },
}

/// Upper bound on the number of sweep points (a typo guard, not a physical limit).
pub const MAX_POINTS: usize = 100_000;

impl AxisSpec {
    /// Resolve to numbers. `parse` turns one TOML value (number or quantity string) of this
    /// path into a number in SI base units; `integer` says the parameter takes whole numbers.
    pub fn resolve(
        &self,
        unit: &str,
        integer: bool,
        parse: &dyn Fn(&Value) -> Result<f64, String>,
    ) -> Result<Axis, SweepError> {
        let path = self.path.clone();
        let has_range = self.from.is_some() || self.to.is_some() || self.points.is_some();
        let verr = |message: String| SweepError::Value {
            path: path.clone(),
            message,
        };
        let (values, spacing) = match (&self.values, has_range) {
            (Some(_), true) => return Err(SweepError::Form { path, what: "both" }),
            (Some(list), false) => {
                if list.is_empty() {
                    return Err(SweepError::Empty { path });
                }
                let v = list
                    .iter()
                    .map(|x| parse(x).map_err(&verr))
                    .collect::<Result<Vec<f64>, _>>()?;
                (v, self.spacing.unwrap_or(Scale::Linear))
            }
            (None, true) => {
                let (Some(from), Some(to), Some(points)) = (&self.from, &self.to, self.points)
                else {
                    return Err(SweepError::Form {
                        path,
                        what: "an incomplete range (`from`, `to` and `points` are all needed)",
                    });
                };
                if points < 2 {
                    return Err(SweepError::Points { path, points });
                }
                let (a, b) = (parse(from).map_err(&verr)?, parse(to).map_err(&verr)?);
                let spacing = self.spacing.unwrap_or(Scale::Linear);
                let n = points as usize;
                if n > MAX_POINTS {
                    return Err(SweepError::TooLarge {
                        count: n,
                        limit: MAX_POINTS,
                    });
                }
                let v = match spacing {
                    Scale::Linear => linear_range(a, b, n),
                    Scale::Log => {
                        if a == 0.0 || b == 0.0 || (a < 0.0) != (b < 0.0) {
                            return Err(SweepError::LogRange {
                                path,
                                from: a,
                                to: b,
                            });
                        }
                        log_range(a, b, n)
                    }
                };
                (v, spacing)
            }
            (None, false) => {
                return Err(SweepError::Form {
                    path,
                    what: "neither",
                })
            }
        };
        if let Some(bad) = values.iter().find(|v| !v.is_finite()) {
            return Err(verr(format!("value {bad} is not a finite number")));
        }
        if integer {
            if let Some(bad) = values.iter().find(|v| v.fract() != 0.0) {
                return Err(verr(format!(
                    "this parameter takes whole numbers, but the axis gives {bad}; choose values or a range whose points are integers"
                )));
            }
        }
        Ok(Axis {
            path: self.path.clone(),
            unit: unit.to_string(),
            spacing,
            integer,
            values,
            labels: None,
            boolean: false,
        })
    }
}

/// `n` linearly spaced values from `a` to `b` inclusive, each built from its index.
pub fn linear_range(a: f64, b: f64, n: usize) -> Vec<f64> {
    let d = (n - 1) as f64;
    (0..n)
        .map(|i| {
            if i == n - 1 {
                b
            } else {
                a + (b - a) * (i as f64 / d)
            }
        })
        .collect()
}

/// `n` logarithmically spaced values from `a` to `b` inclusive (same sign), from the index.
pub fn log_range(a: f64, b: f64, n: usize) -> Vec<f64> {
    let d = (n - 1) as f64;
    let (la, lb) = (a.abs().ln(), b.abs().ln());
    let s = a.signum();
    (0..n)
        .map(|i| {
            if i == 0 {
                a
            } else if i == n - 1 {
                b
            } else {
                s * (la + (lb - la) * (i as f64 / d)).exp()
            }
        })
        .collect()
}

/// All points of a sweep over `axes` (no axes: one point with no parameters).
pub fn points(axes: &[Axis], combine: Combine) -> Result<Vec<PointIndex>, SweepError> {
    for (i, a) in axes.iter().enumerate() {
        if axes[..i].iter().any(|b| b.path == a.path) {
            return Err(SweepError::Duplicate {
                path: a.path.clone(),
            });
        }
    }
    match combine {
        Combine::Zip => {
            let n = axes.first().map_or(1, |a| a.values.len());
            if let Some(b) = axes.iter().find(|b| b.values.len() != n) {
                return Err(SweepError::ZipLength {
                    a: axes[0].path.clone(),
                    na: n,
                    b: b.path.clone(),
                    nb: b.values.len(),
                });
            }
            Ok((0..n)
                .map(|i| PointIndex {
                    point: i,
                    value_index: vec![i; axes.len()],
                })
                .collect())
        }
        Combine::Grid => {
            let count = axes
                .iter()
                .try_fold(1usize, |acc, a| acc.checked_mul(a.values.len()))
                .unwrap_or(usize::MAX);
            if count > MAX_POINTS {
                return Err(SweepError::TooLarge {
                    count,
                    limit: MAX_POINTS,
                });
            }
            Ok((0..count)
                .map(|p| {
                    let mut rem = p;
                    let mut idx = vec![0; axes.len()];
                    for (k, a) in axes.iter().enumerate().rev() {
                        idx[k] = rem % a.values.len();
                        rem /= a.values.len();
                    }
                    PointIndex {
                        point: p,
                        value_index: idx,
                    }
                })
                .collect())
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn num(v: &Value) -> Result<f64, String> {
        v.as_float()
            .or_else(|| v.as_integer().map(|i| i as f64))
            .ok_or_else(|| format!("expected a number, got {v}"))
    }

    fn axis(path: &str, values: &[f64]) -> Axis {
        Axis {
            labels: None,
            boolean: false,
            path: path.into(),
            unit: String::new(),
            spacing: Scale::Linear,
            integer: false,
            values: values.to_vec(),
        }
    }

    #[test]
    fn ranges_from_index_hit_endpoints() {
        let v = linear_range(0.1, 0.7, 7);
        assert_eq!(v[6], 0.7);
        assert_relative_eq!(v[3], 0.4, max_relative = 1e-15);
        let g = log_range(1e-9, 1e-6, 4);
        assert_eq!(g[0], 1e-9);
        assert_eq!(g[3], 1e-6);
        assert_relative_eq!(g[1], 1e-8, max_relative = 1e-12);
    }

    #[test]
    fn grid_and_zip() {
        let axes = [axis("a", &[1.0, 2.0]), axis("b", &[3.0, 4.0, 5.0])];
        let g = points(&axes, Combine::Grid).unwrap();
        assert_eq!(g.len(), 6);
        assert_eq!(g[1].value_index, vec![0, 1]);
        assert_eq!(g[3].value_index, vec![1, 0]);
        let e = points(&axes, Combine::Zip).unwrap_err();
        assert!(e.to_string().contains("equal length"), "{e}");
        assert_eq!(points(&[], Combine::Grid).unwrap().len(), 1);
    }

    #[test]
    fn axis_forms_and_errors() {
        let spec: AxisSpec = toml::from_str("path = \"x\"\nvalues = []").unwrap();
        assert!(matches!(
            spec.resolve("", false, &num),
            Err(SweepError::Empty { .. })
        ));
        let spec: AxisSpec =
            toml::from_str("path = \"x\"\nfrom = 1\nto = 100\npoints = 3\nspacing = \"log\"")
                .unwrap();
        let a = spec.resolve("A", false, &num).unwrap();
        assert_relative_eq!(a.values[1], 10.0, max_relative = 1e-12);
        let spec: AxisSpec = toml::from_str("path = \"x\"\nfrom = 1\nto = 2\npoints = 3").unwrap();
        let e = spec.resolve("", true, &num).unwrap_err();
        assert!(e.to_string().contains("whole numbers"), "{e}");
        let spec: AxisSpec = toml::from_str("path = \"x\"\nfrom = 1").unwrap();
        assert!(matches!(
            spec.resolve("", false, &num),
            Err(SweepError::Form { .. })
        ));
        let spec: AxisSpec =
            toml::from_str("path = \"x\"\nfrom = 0\nto = 2\npoints = 3\nspacing = \"log\"")
                .unwrap();
        assert!(matches!(
            spec.resolve("", false, &num),
            Err(SweepError::LogRange { .. })
        ));
    }
}
