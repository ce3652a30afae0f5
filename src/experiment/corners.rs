//! Global corners (`[corners]` in an experiment file), shared by `hardmax size` (every
//! candidate at every corner) and `hardmax run` / `batch` (every sweep point at every corner).
//!
//! A corner is a list of `--set` overrides (process shifts of V_T0 and mu C_ox, supply,
//! temperature), so every key, unit and model check applies to it. For a run, [`load_run`]
//! expands the resolved experiment: each sweep point is evaluated at each corner, the corner
//! being one more (text) sweep axis, [`CORNER_AXIS`], last, so the point number runs over
//! (sweep point, corner) pairs (`point = sweep_point x corners + corner`). Dies are paired
//! across corners: a die's draws depend on (seed, chip) only (with independent dies on the sweep
//! point, never on the corner, see [`die_point`]), and the corner shifts them globally.
//! The resolved `[corners]` table stays in the resolved experiment of a corner run, so the
//! experiment hash (resume, `batch`'s up-to-date check, shards) covers it; an experiment without
//! corners is unchanged.

use std::path::Path;

use serde::Deserialize;
use toml::Value;

use super::config::{load_str, ConfigError, Resolved};
use super::quantity::{exact_si, parse_resolved};
use super::sweep::{Axis, Combine, PointIndex};
use super::tree;
use crate::scale::Scale;
use crate::units::{parse_quantity, Dimension};
pub use hardmax_report::corners::CORNER_AXIS;

/// A `[corners]` table the file cannot be read with; names the file, line and key.
#[derive(Debug, thiserror::Error)]
#[error("`{file}`{line}: [corners]: {message}")]
pub struct CornersError {
    pub file: String,
    pub line: super::config::LineNo,
    pub message: String,
}

/// Errors of loading an experiment for a run with its corners.
#[derive(Debug, thiserror::Error)]
pub enum CornerRunError {
    #[error(transparent)]
    Config(#[from] ConfigError),
    #[error(transparent)]
    Corners(#[from] CornersError),
    #[error("`{file}`: corner `{corner}`: {source}")]
    Corner {
        file: String,
        corner: String,
        #[source]
        source: Box<ConfigError>,
    },
}

/// Line of `key = ...` within table `table` of a TOML text (the first after its header).
fn key_line_after(text: &str, table: &str, key: &str) -> Option<usize> {
    let head = format!("[{table}]");
    let start = text.lines().position(|l| l.trim() == head)?;
    text.lines()
        .enumerate()
        .skip(start + 1)
        .find(|(_, l)| {
            let t = l.trim_start();
            t.strip_prefix(key)
                .is_some_and(|r| r.trim_start().starts_with('='))
        })
        .map(|(i, _)| i + 1)
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct CornersFile {
    #[serde(default)]
    vt0_sigma: Option<String>,
    #[serde(default)]
    beta_sigma: Option<f64>,
    #[serde(default)]
    sigmas: Option<f64>,
    #[serde(default)]
    process: Vec<String>,
    #[serde(default)]
    vdd: Vec<String>,
    #[serde(default)]
    temperature: Vec<String>,
    #[serde(default)]
    corner: Vec<CornerFile>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct CornerFile {
    name: String,
    #[serde(default)]
    process: Option<String>,
    #[serde(default)]
    vdd: Option<String>,
    #[serde(default)]
    temperature: Option<String>,
}

/// One global corner: a name and the experiment overrides that put every die there.
#[derive(Debug, Clone, PartialEq)]
pub struct Corner {
    pub name: String,
    pub overrides: Vec<String>,
}

/// Read the `[corners]` table of `text` (none: an empty list). Process corners are two letters
/// (NMOS then PMOS) of `t` (typical), `f` (fast: |V_T0| lowered by `sigmas x vt0_sigma`, beta
/// raised by a factor 1 + `sigmas x beta_sigma` through mu C_ox), `s` (slow: the reverse); the
/// shifts are stated in the file, no default is assumed. `vdd` and `temperature` set
/// `process.vdd` and `conditions.temperature` (weights stay programmed at
/// `weights.program_temperature`, so the temperature logic applies at each corner). The lists
/// `process`, `vdd`, `temperature` combine as a grid; `[[corners.corner]]` adds named
/// combinations.
pub fn parse_corners(
    text: &str,
    file: &Path,
    resolved: &Resolved,
) -> Result<Vec<Corner>, CornersError> {
    let fname = file.display().to_string();
    let root: Value = toml::from_str(text).map_err(|e| CornersError {
        file: fname.clone(),
        line: Default::default(),
        message: e.to_string(),
    })?;
    let Some(table) = root.get("corners").cloned() else {
        return Ok(vec![]);
    };
    let bad = |key: &str, message: String| CornersError {
        file: fname.clone(),
        line: super::config::LineNo(super::config::line_of(text, key)),
        message: format!("`{key}`: {message}"),
    };
    let c: CornersFile = serde_path_to_error::deserialize(table).map_err(|e| {
        // An unknown key is named with its own line (serde's path stops at its table).
        let inner = e.inner().to_string();
        let unknown = inner
            .strip_prefix("unknown field `")
            .and_then(|r| r.split('`').next())
            .map(str::to_string);
        let at = e.path().to_string();
        let key = match (&unknown, at.as_str()) {
            (Some(u), "." | "") => format!("corners.{u}"),
            (_, p) => format!("corners.{p}"),
        };
        let line = super::config::line_of(text, &key).or_else(|| {
            unknown
                .as_deref()
                .and_then(|u| key_line_after(text, "corners", u))
        });
        CornersError {
            file: fname.clone(),
            line: super::config::LineNo(line),
            message: format!(
                "`{key}`: {}. Corner keys: vt0_sigma, beta_sigma, sigmas, process, vdd, \
                 temperature, corner (with name, process, vdd, temperature)",
                inner
                    .split(", expected")
                    .next()
                    .unwrap_or(&inner)
                    .trim_end()
            ),
        }
    })?;
    let base = |path: &str| -> Result<(f64, &'static str), CornersError> {
        tree::get(&resolved.tree, path)
            .and_then(Value::as_str)
            .and_then(parse_resolved)
            .map(|(v, d)| (v, d.base_unit()))
            .ok_or_else(|| bad("corners", format!("internal: `{path}` has no value")))
    };
    let sigmas = c.sigmas.unwrap_or(3.0);
    if !(sigmas.is_finite() && sigmas >= 0.0) {
        return Err(bad("corners.sigmas", "must be a number >= 0".into()));
    }
    let vt0_sigma = match &c.vt0_sigma {
        Some(t) => Some(
            parse_quantity(t, Dimension::Voltage)
                .map_err(|e| bad("corners.vt0_sigma", e.to_string()))?,
        ),
        None => None,
    };
    if let Some(b) = c.beta_sigma {
        if !(b.is_finite() && b >= 0.0 && sigmas * b < 1.0) {
            return Err(bad(
                "corners.beta_sigma",
                "must be >= 0 with sigmas x beta_sigma below 1".into(),
            ));
        }
    }
    let process_overrides = |name: &str, key: &str| -> Result<Vec<String>, CornersError> {
        let letters: Vec<char> = name.chars().collect();
        if letters.len() != 2 || !letters.iter().all(|l| matches!(l, 't' | 'f' | 's')) {
            return Err(bad(
                key,
                format!("`{name}` is not a process corner; use tt, ff, ss, fs or sf (NMOS letter first)"),
            ));
        }
        let mut o = Vec::new();
        for (dev, l) in ["nmos", "pmos"].iter().zip(&letters) {
            let sign = match l {
                'f' => -1.0,
                's' => 1.0,
                _ => continue,
            };
            let (Some(sv), Some(sb)) = (vt0_sigma, c.beta_sigma) else {
                return Err(bad(
                    key,
                    format!("corner `{name}` needs corners.vt0_sigma (e.g. \"15 mV\") and corners.beta_sigma (e.g. 0.05): the global shifts of one sigma, stated for your process"),
                ));
            };
            let (vt0, vu) = base(&format!("process.{dev}.vt0"))?;
            let (mu, mu_unit) = base(&format!("process.{dev}.mu_cox"))?;
            o.push(format!(
                "process.{dev}.vt0=\"{}\"",
                exact_si(vt0 + sign * sigmas * sv, vu)
            ));
            o.push(format!(
                "process.{dev}.mu_cox=\"{}\"",
                exact_si(mu * (1.0 - sign * sigmas * sb), mu_unit)
            ));
        }
        Ok(o)
    };
    let quantity =
        |t: &str, key: &str, dim: Dimension, path: &str| -> Result<String, CornersError> {
            let v = parse_quantity(t, dim).map_err(|e| bad(key, e.to_string()))?;
            Ok(format!("{path}=\"{}\"", exact_si(v, dim.base_unit())))
        };
    let mut out = Vec::new();
    if !c.process.is_empty() || !c.vdd.is_empty() || !c.temperature.is_empty() {
        let procs: Vec<Option<&String>> = if c.process.is_empty() {
            vec![None]
        } else {
            c.process.iter().map(Some).collect()
        };
        let vdds: Vec<Option<&String>> = if c.vdd.is_empty() {
            vec![None]
        } else {
            c.vdd.iter().map(Some).collect()
        };
        let temps: Vec<Option<&String>> = if c.temperature.is_empty() {
            vec![None]
        } else {
            c.temperature.iter().map(Some).collect()
        };
        for p in &procs {
            for v in &vdds {
                for t in &temps {
                    let mut o = Vec::new();
                    let mut name = Vec::new();
                    if let Some(p) = p {
                        o.extend(process_overrides(p, "corners.process")?);
                        name.push(p.to_string());
                    }
                    if let Some(v) = v {
                        o.push(quantity(
                            v,
                            "corners.vdd",
                            Dimension::Voltage,
                            "process.vdd",
                        )?);
                        name.push(v.to_string());
                    }
                    if let Some(t) = t {
                        o.push(quantity(
                            t,
                            "corners.temperature",
                            Dimension::Temperature,
                            "conditions.temperature",
                        )?);
                        name.push(t.to_string());
                    }
                    out.push(Corner {
                        name: name.join(" / "),
                        overrides: o,
                    });
                }
            }
        }
    }
    for (k, cf) in c.corner.iter().enumerate() {
        let key = format!("corners.corner.{k}");
        let mut o = Vec::new();
        if let Some(p) = &cf.process {
            o.extend(process_overrides(p, &key)?);
        }
        if let Some(v) = &cf.vdd {
            o.push(quantity(v, &key, Dimension::Voltage, "process.vdd")?);
        }
        if let Some(t) = &cf.temperature {
            o.push(quantity(
                t,
                &key,
                Dimension::Temperature,
                "conditions.temperature",
            )?);
        }
        out.push(Corner {
            name: cf.name.clone(),
            overrides: o,
        });
    }
    if out.is_empty() {
        return Err(bad(
            "corners",
            "the table names no corner; give process, vdd, temperature lists or [[corners.corner]]"
                .into(),
        ));
    }
    let mut names: Vec<&str> = out.iter().map(|c| c.name.as_str()).collect();
    names.sort_unstable();
    if names.windows(2).any(|w| w[0] == w[1]) {
        return Err(bad("corners", "two corners have the same name".into()));
    }
    Ok(out)
}

/// The corner run of an experiment file: load it with `overrides`, and when it has a
/// `[corners]` table evaluate each sweep point at each corner (see the module text). Without
/// corners this is [`super::config::load`].
pub fn load_run(file: &Path, overrides: &[String]) -> Result<Resolved, CornerRunError> {
    let text = std::fs::read_to_string(file).map_err(|err| ConfigError::Read {
        path: file.into(),
        err,
    })?;
    // The corners are read from the file's text (with its lines for messages): a `--set` of a
    // corner key would be silently ignored, so it is refused.
    if let Some(o) = overrides
        .iter()
        .find(|o| o.trim_start().starts_with("corners"))
    {
        return Err(CornersError {
            file: file.display().to_string(),
            line: super::config::LineNo(None),
            message: format!("`--set {o}`: corner settings cannot be set on the command line; edit the [corners] table of the file"),
        }
        .into());
    }
    let resolved = load_str(&text, file, overrides)?;
    let corners = parse_corners(&text, file, &resolved)?;
    if corners.is_empty() {
        return Ok(resolved);
    }
    expand(&text, file, overrides, resolved, &corners)
}

/// Expand `resolved` over `corners` (none empty).
pub fn expand(
    text: &str,
    file: &Path,
    overrides: &[String],
    mut resolved: Resolved,
    corners: &[Corner],
) -> Result<Resolved, CornerRunError> {
    let fname = file.display().to_string();
    let k = corners.len();
    if resolved.base.sweep.combine == Combine::Zip && resolved.axes.len() > 1 {
        return Err(CornersError {
            file: fname,
            line: super::config::LineNo(super::config::line_of(text, "sweep.combine")),
            message: "corners with a zipped sweep of several axes are not supported; use                       combine = \"grid\" or one axis"
                .into(),
        }
        .into());
    }
    let mut at_corner = Vec::with_capacity(k);
    for c in corners {
        let mut o = overrides.to_vec();
        o.extend(c.overrides.iter().cloned());
        let r = load_str(text, file, &o).map_err(|e| CornerRunError::Corner {
            file: fname.clone(),
            corner: c.name.clone(),
            source: Box::new(e),
        })?;
        if r.axes.len() != resolved.axes.len() {
            return Err(CornersError {
                file: fname,
                line: super::config::LineNo(super::config::line_of(text, "corners")),
                message: format!(
                    "corner `{}` sets a swept key ({}); a corner may not change what the sweep \
                     sweeps. Remove that axis or that corner setting",
                    c.name,
                    r.replaced_axes.join(", ")
                ),
            }
            .into());
        }
        for w in &r.warnings {
            let w = format!("corner `{}`: {w}", c.name);
            if !resolved.warnings.contains(&w) && !resolved.warnings.iter().any(|x| w.ends_with(x))
            {
                resolved.warnings.push(w);
            }
        }
        at_corner.push(r.at_point);
    }
    let mut points = Vec::with_capacity(resolved.points.len() * k);
    let mut at_point = Vec::with_capacity(resolved.points.len() * k);
    for p in &resolved.points {
        for (j, exps) in at_corner.iter().enumerate() {
            let mut value_index = p.value_index.clone();
            value_index.push(j);
            points.push(PointIndex {
                point: p.point * k + j,
                value_index,
            });
            at_point.push(exps[p.point].clone());
        }
    }
    resolved.axes.push(Axis {
        path: CORNER_AXIS.into(),
        unit: String::new(),
        spacing: Scale::Linear,
        integer: true,
        values: (0..k).map(|j| j as f64).collect(),
        labels: Some(corners.iter().map(|c| c.name.clone()).collect()),
        boolean: false,
    });
    resolved.base.sweep.combine = Combine::Grid;
    resolved.points = points;
    resolved.at_point = at_point;
    // The corners are part of what the results depend on: keep the table (as given) in the
    // resolved experiment, so the experiment hash and the saved experiment.toml cover it.
    let root: Value = toml::from_str(text).map_err(|e| ConfigError::Syntax {
        path: file.into(),
        message: e.to_string(),
    })?;
    if let (Some(t), Some(c)) = (resolved.tree.as_table_mut(), root.get("corners")) {
        t.insert("corners".into(), c.clone());
    }
    Ok(resolved)
}

/// Number of corners of a resolved run (1 without corners).
pub fn corner_count(resolved: &Resolved) -> usize {
    resolved
        .axes
        .last()
        .filter(|a| a.path == CORNER_AXIS)
        .map_or(1, |a| a.values.len().max(1))
}

/// The sweep point whose dies point `point` uses: the point itself without corners, else the
/// design point it evaluates at a corner (independent dies are fresh per design point, the
/// same at each of its corners).
pub fn die_point(resolved: &Resolved, point: usize) -> usize {
    point / corner_count(resolved)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::{MosMismatch, Polarity, Transistor};

    const EXP: &str = "name = \"c\"\n[dataset]\nname = \"iris\"\n\
        [[sweep.axis]]\npath = \"competition.bias_current\"\nvalues = [\"10 nA\", \"100 nA\"]\n\
        [corners]\nvt0_sigma = \"15 mV\"\nbeta_sigma = 0.05\nprocess = [\"tt\", \"ff\", \"ss\", \"fs\"]\n\
        temperature = [\"300 K\", \"358.15 K\"]\n";

    fn expanded() -> Resolved {
        let file = Path::new("c.toml");
        let r = load_str(EXP, file, &[]).unwrap();
        let corners = parse_corners(EXP, file, &r).unwrap();
        expand(EXP, file, &[], r, &corners).unwrap()
    }

    /// Each sweep point at each corner, corner last: point = sweep point x corners + corner.
    #[test]
    fn every_point_at_every_corner() {
        let r = expanded();
        assert_eq!(corner_count(&r), 8);
        assert_eq!(r.points.len(), 16);
        assert_eq!(r.at_point.len(), 16);
        let axis = r.axes.last().unwrap();
        assert_eq!(axis.path, CORNER_AXIS);
        assert_eq!(axis.labels.as_ref().unwrap()[3], "ff / 358.15 K");
        assert_eq!(r.points[11].value_index, vec![1, 3]);
        assert_eq!(die_point(&r, 11), 1);
        // The corners are in the resolved experiment (hence in its hash).
        assert!(r.to_toml().contains("[corners]"));
        // Point 11 = bias 100 nA at ff / 358.15 K.
        approx::assert_relative_eq!(r.at_point[11].competition.bias_current.si(), 100e-9);
        approx::assert_relative_eq!(r.at_point[11].conditions.temperature.si(), 358.15);
    }

    /// A corner's temperature is where the dies are read; the weights stay programmed at
    /// `weights.program_temperature` (the existing temperature logic applies at each corner).
    #[test]
    fn corner_temperature_reads_weights_programmed_elsewhere() {
        let r = expanded();
        let cool = &r.at_point[0];
        let hot = &r.at_point[1];
        approx::assert_relative_eq!(cool.conditions.temperature.si(), 300.0);
        approx::assert_relative_eq!(hot.conditions.temperature.si(), 358.15);
        approx::assert_relative_eq!(hot.weights.program_temperature.si(), 300.0);
        approx::assert_relative_eq!(cool.weights.program_temperature.si(), 300.0);
    }

    /// A transistor-biased competition tail (NMOS, gate at a fixed voltage) carries more current
    /// at the fast corner than at typical and less at the slow one (lower |V_T0| and higher
    /// beta make a faster device; common practice, no source). PMOS follows its own letter (fs:
    /// NMOS fast, PMOS slow).
    #[test]
    fn fast_corner_draws_more_tail_current_than_slow() {
        let r = expanded();
        let tail = Transistor {
            polarity: Polarity::Nmos,
            w: 2e-6,
            l: 2e-6,
        };
        let current = |point: usize| {
            let e = &r.at_point[point];
            let p = super::super::build::process(e).unwrap();
            p.ekv(&tail, 300.0, MosMismatch::default())
                .id(0.6, 0.9, 0.0)
        };
        // Corners at 300 K: tt = 0, ff = 2, ss = 4, fs = 6.
        let (tt, ff, ss, fs) = (current(0), current(2), current(4), current(6));
        assert!(ff > 1.2 * tt, "ff {ff} tt {tt}");
        assert!(ss < tt / 1.2, "ss {ss} tt {tt}");
        approx::assert_relative_eq!(fs, ff, max_relative = 1e-12);
        let pm = |point: usize| {
            let p = super::super::build::process(&r.at_point[point]).unwrap();
            (p.pmos.vt0.abs(), p.pmos.mu_cox)
        };
        let (tt_p, fs_p) = (pm(0), pm(6));
        assert!(fs_p.0 > tt_p.0 && fs_p.1 < tt_p.1, "{fs_p:?} {tt_p:?}");
    }

    /// A corner may not set a swept key (the sweep would silently lose an axis).
    #[test]
    fn corner_setting_a_swept_key_is_refused() {
        let text = EXP
            .replace("competition.bias_current", "conditions.temperature")
            .replace("[\"10 nA\", \"100 nA\"]", "[\"300 K\", \"320 K\"]");
        let file = Path::new("c.toml");
        let r = load_str(&text, file, &[]).unwrap();
        let corners = parse_corners(&text, file, &r).unwrap();
        let e = expand(&text, file, &[], r, &corners)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("sets a swept key (conditions.temperature)"),
            "{e}"
        );
    }

    /// An unknown key in [corners] is named with its line.
    #[test]
    fn unknown_corner_key_names_key_and_line() {
        let text = format!("{EXP}vdd_list = [\"1.8 V\"]\n");
        let file = Path::new("c.toml");
        let r = load_str(&text, file, &[]).unwrap();
        let e = parse_corners(&text, file, &r).unwrap_err().to_string();
        assert!(e.contains("`corners.vdd_list`"), "{e}");
        assert!(e.contains("(line 12)"), "{e}");
    }
}
