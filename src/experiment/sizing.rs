//! The sizing search of one experiment (edge layer): read the `[search]` table, check that the
//! target can be met at all, then let the core's search (`pipeline::sizing::search`) ask for
//! candidates; each candidate is the experiment with the dimensions' key paths set (the same
//! overrides as `--set`, so every key, unit and core check applies), evaluated over the
//! population in parallel (rayon) on paired dies.
//!
//! `[search]` keys (DEVELOPERS.md, "Sizing search"):
//! - `cost`: `area` (layout area, default), `competition_area` (the competition stage's gate
//!   area), `current` (static supply current), `power`, or `weighted` with `[search.weights]`
//!   `area` and `current` (each cost relative to its value at the bottom of every range).
//! - `resolution` (0.05): relative width of the final bracket of the first dimension.
//! - `grid` (5): values per further dimension (several dimensions).
//! - `verify_seed` (population.seed + 1), `verify_steps` (4), `step_factor` (1.19 = 2^(1/4)).
//! - `[[search.dimension]]`: `name`, `path` or `paths` (key paths set to the same value),
//!   `from`, `to` (in the keys' unit, e.g. "1 um").

use std::collections::HashMap;
use std::path::Path;

use rayon::prelude::*;
use serde::Deserialize;
use toml::Value;

use super::build::{build_point, cost_settings, prepare_data};
use super::config::{load_str, Experiment, Resolved};
pub use super::corners::{parse_corners, Corner, CornersError};
use super::quantity::{exact_si, parse_resolved};
use super::runner::normal_quantile_two_sided;
use super::tree;
use crate::pipeline::cost::{mean_input, point_cost};
use crate::pipeline::sizing::{
    search, wilson_lower, Answer, Candidate, LogRange, Role, SearchOptions, SearchResult, Verdict,
    METHOD_ONE, METHOD_SEVERAL,
};
use crate::pipeline::{evaluate_chip, Dies, Prepared};
use crate::units::{parse_quantity, Dimension};
use hardmax_report::report::sizing::{SizingDimension, SizingReport, SizingRow};

/// Errors of a sizing search; each names the file and key or option to change.
#[derive(Debug, thiserror::Error)]
pub enum SizingCfgError {
    #[error("`{file}`: no [search] table. Add one, e.g.\n[search]\ncost = \"area\"\n[[search.dimension]]\nname = \"wta_w\"\npaths = [\"competition.sink.w\", \"competition.output.w\"]\nfrom = \"1 um\"\nto = \"64 um\"")]
    NoSearch { file: String },
    #[error("`{file}`{line}: [search]: {message}")]
    Key {
        file: String,
        line: super::config::LineNo,
        message: String,
    },
    #[error("{source}")]
    Config {
        file: String,
        #[source]
        source: Box<super::config::ConfigError>,
    },
    #[error("`{file}`: the experiment sweeps {axes}; a sizing search sets its own values. Remove the [sweep] table or pin those keys with --set")]
    Swept { file: String, axes: String },
    #[error("`{file}`: the ideal classifier (exact arithmetic) reaches {ideal:.4} on the test split, below target.accuracy = {target}: no sizing can meet the target. Lower target.accuracy, or improve the classifier (training, hidden layer)")]
    IdealBelowTarget {
        file: String,
        ideal: f64,
        target: f64,
    },
    #[error("`{file}`: with population.chips = {chips}, even a population where every die reaches the target has a Wilson lower bound of {best:.4}, below target.yield = {target}. Raise population.chips to at least {needed}")]
    TooFewDies {
        file: String,
        chips: u64,
        best: f64,
        target: f64,
        needed: u64,
    },
    #[error("`{file}`, candidate {settings}: {message}")]
    Candidate {
        file: String,
        settings: String,
        message: String,
    },
    #[error("cannot start {threads} worker threads: {message}")]
    Threads { threads: usize, message: String },
    #[error(transparent)]
    Corners(#[from] CornersError),
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct SearchFile {
    #[serde(default)]
    cost: Option<String>,
    #[serde(default)]
    weights: Option<WeightsFile>,
    #[serde(default)]
    resolution: Option<f64>,
    #[serde(default)]
    grid: Option<usize>,
    #[serde(default)]
    verify_seed: Option<u64>,
    #[serde(default)]
    verify_steps: Option<usize>,
    #[serde(default)]
    step_factor: Option<f64>,
    #[serde(default)]
    dimension: Vec<DimFile>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct WeightsFile {
    #[serde(default)]
    area: f64,
    #[serde(default)]
    current: f64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct DimFile {
    #[serde(default)]
    name: Option<String>,
    #[serde(default)]
    path: Option<String>,
    #[serde(default)]
    paths: Option<Vec<String>>,
    from: Value,
    to: Value,
}

/// What is minimised.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum CostKind {
    Area,
    CompetitionArea,
    Current,
    Power,
    Weighted { area: f64, current: f64 },
}

impl CostKind {
    fn name(self) -> &'static str {
        match self {
            CostKind::Area => "area",
            CostKind::CompetitionArea => "competition_area",
            CostKind::Current => "current",
            CostKind::Power => "power",
            CostKind::Weighted { .. } => "weighted",
        }
    }
    fn text(self) -> String {
        match self {
            CostKind::Area => "layout area (gate area x cost.layout_overhead)".into(),
            CostKind::CompetitionArea => "the competition stage's gate area".into(),
            CostKind::Current => "static supply current".into(),
            CostKind::Power => "static power".into(),
            CostKind::Weighted { area, current } => format!(
                "{area} x area / area at the ranges' bottom + {current} x current / current at the ranges' bottom"
            ),
        }
    }
}

/// One dimension as searched.
#[derive(Debug, Clone)]
pub struct Dim {
    pub name: String,
    pub paths: Vec<String>,
    /// Base unit; empty for a number.
    pub unit: &'static str,
    pub range: LogRange,
}

/// A parsed `[search]` table.
#[derive(Debug, Clone)]
pub struct SearchSpec {
    pub dims: Vec<Dim>,
    pub cost: CostKind,
    pub opts: SearchOptions,
}

/// Read the `[search]` table of `text` (an experiment file), with units from `resolved`.
pub fn parse_search(
    text: &str,
    file: &Path,
    resolved: &Resolved,
) -> Result<SearchSpec, SizingCfgError> {
    let fname = file.display().to_string();
    let root: Value = toml::from_str(text).map_err(|e| SizingCfgError::Key {
        file: fname.clone(),
        line: Default::default(),
        message: e.to_string(),
    })?;
    let table = root
        .get("search")
        .cloned()
        .ok_or(SizingCfgError::NoSearch {
            file: fname.clone(),
        })?;
    let line = |key: &str| super::config::LineNo(super::config::line_of(text, key));
    let bad = |key: &str, message: String| SizingCfgError::Key {
        file: fname.clone(),
        line: line(key),
        message: format!("`{key}`: {message}"),
    };
    let s: SearchFile = serde_path_to_error::deserialize(table)
        .map_err(|e| bad(&format!("search.{}", e.path()), e.inner().to_string()))?;
    if s.dimension.is_empty() {
        return Err(bad(
            "search.dimension",
            "no dimension; add [[search.dimension]] with name, paths, from, to".into(),
        ));
    }
    let cost = match s.cost.as_deref().unwrap_or("area") {
        "area" => CostKind::Area,
        "competition_area" => CostKind::CompetitionArea,
        "current" => CostKind::Current,
        "power" => CostKind::Power,
        "weighted" => {
            let w = s.weights.as_ref().ok_or_else(|| {
                bad(
                    "search.cost",
                    "\"weighted\" needs [search.weights] with `area` and `current` (numbers)"
                        .into(),
                )
            })?;
            if !(w.area >= 0.0 && w.current >= 0.0 && w.area + w.current > 0.0) {
                return Err(bad(
                    "search.weights",
                    "weights must be >= 0 and not both 0".into(),
                ));
            }
            CostKind::Weighted {
                area: w.area,
                current: w.current,
            }
        }
        other => {
            return Err(bad(
                "search.cost",
                format!(
                "`{other}` is not a cost; use area, competition_area, current, power or weighted"
            ),
            ))
        }
    };
    let mut dims = Vec::new();
    for (k, d) in s.dimension.iter().enumerate() {
        let key = format!("search.dimension.{k}");
        let paths: Vec<String> = match (&d.path, &d.paths) {
            (Some(p), None) => vec![p.clone()],
            (None, Some(ps)) if !ps.is_empty() => ps.clone(),
            _ => {
                return Err(bad(
                    &key,
                    "give either `path` (one key) or `paths` (keys set to the same value)".into(),
                ))
            }
        };
        let mut unit: Option<(&'static str, Option<Dimension>)> = None;
        for p in &paths {
            let v = tree::get(&resolved.tree, p).ok_or_else(|| {
                bad(
                    &key,
                    format!("`{p}` is not a key of the experiment (see `hardmax resolve`)"),
                )
            })?;
            let this = match v {
                Value::String(t) => match parse_resolved(t) {
                    Some((_, dim)) => (dim.base_unit(), Some(dim)),
                    None => {
                        return Err(bad(
                            &key,
                            format!("`{p}` is not a quantity or a number; it cannot be searched"),
                        ))
                    }
                },
                Value::Float(_) => ("", None),
                _ => {
                    return Err(bad(
                        &key,
                        format!(
                            "`{p}` is not a real-valued key (integers and choices are not searched on a log scale)"
                        ),
                    ))
                }
            };
            if let Some(u) = unit {
                if u.0 != this.0 {
                    return Err(bad(
                        &key,
                        format!("the paths have different units ({} and {})", u.0, this.0),
                    ));
                }
            }
            unit = Some(this);
        }
        let (unit, dim) = unit.unwrap_or(("", None));
        let parse = |v: &Value, which: &str| -> Result<f64, SizingCfgError> {
            match (v, dim) {
                (Value::String(t), Some(dim)) => parse_quantity(t, dim)
                    .map_err(|e| bad(&format!("{key}.{which}"), e.to_string())),
                (Value::Float(x), None) => Ok(*x),
                (Value::Integer(x), None) => Ok(*x as f64),
                _ => Err(bad(
                    &format!("{key}.{which}"),
                    if unit.is_empty() {
                        "give a number".into()
                    } else {
                        format!("give a quantity with its unit, e.g. \"1 u{unit}\"")
                    },
                )),
            }
        };
        let lo = parse(&d.from, "from")?;
        let hi = parse(&d.to, "to")?;
        let name = d.name.clone().unwrap_or_else(|| paths[0].clone());
        let range = LogRange::new(&name, lo, hi).map_err(|e| bad(&key, e.to_string()))?;
        dims.push(Dim {
            name,
            paths,
            unit,
            range,
        });
    }
    let seed = resolved.base.population.seed;
    let opts = SearchOptions {
        resolution: s.resolution.unwrap_or(0.05),
        grid: s.grid.unwrap_or(5),
        seed,
        verify_seed: s.verify_seed.unwrap_or(seed.wrapping_add(1)),
        verify_steps: s.verify_steps.unwrap_or(4),
        step_factor: s.step_factor.unwrap_or(2f64.powf(0.25)),
    };
    if !(opts.resolution > 0.0 && opts.resolution < 1.0) {
        return Err(bad(
            "search.resolution",
            format!(
                "{} must be above 0 and below 1 (e.g. 0.05)",
                opts.resolution
            ),
        ));
    }
    if opts.grid < 2 {
        return Err(bad("search.grid", "must be at least 2".into()));
    }
    if opts.verify_seed == seed {
        return Err(bad(
            "search.verify_seed",
            "must differ from population.seed (a fresh population)".into(),
        ));
    }
    if !(opts.step_factor > 1.0 && opts.step_factor.is_finite()) {
        return Err(bad("search.step_factor", "must be above 1".into()));
    }
    Ok(SearchSpec { dims, cost, opts })
}

/// One row for a candidate evaluated at every corner: it passes only when it passes at each;
/// its numbers are those of the corner with the lowest yield lower bound (the limiting corner
/// for yield), and it names the limiting corner of accuracy (lowest mean) and current
/// (highest supply current). `rows` pairs each corner's name with its row; none is empty.
pub fn combine_corners(rows: &[(String, SizingRow)]) -> Option<SizingRow> {
    use hardmax_report::corners::{highest, lowest};
    let ny = lowest(rows, |r| r.0.as_str(), |r| r.1.margin)?;
    let na = lowest(rows, |r| r.0.as_str(), |r| r.1.acc_mean)?;
    let nc = highest(rows, |r| r.0.as_str(), |r| r.1.supply_current_a)?;
    let mut out = rows
        .iter()
        .find(|(n, _)| *n == ny.corner)
        .map(|(_, r)| r.clone())?;
    out.pass = rows.iter().all(|(_, r)| r.pass);
    out.elapsed_s = rows.iter().map(|(_, r)| r.elapsed_s).sum();
    out.supply_current_a = nc.value;
    out.limiting_yield = ny.corner;
    out.limiting_accuracy = na.corner;
    out.limiting_current = nc.corner;
    Some(out)
}

/// One evaluated candidate.
#[derive(Debug, Clone)]
pub struct Probe {
    pub row: SizingRow,
    pub cost: f64,
    /// Program-and-verify (`[programming]` on): cycles per element over the dies, mean
    /// programming time of a die, s.
    pub programming: Option<(f64, f64)>,
}

impl Verdict for Probe {
    fn passes(&self) -> bool {
        self.row.pass
    }
    fn margin(&self) -> f64 {
        self.row.margin
    }
}

impl Candidate for Probe {
    fn cost(&self) -> f64 {
        self.cost
    }
    fn front_costs(&self) -> (f64, f64) {
        (self.row.area_m2, self.row.supply_current_a)
    }
}

/// Options of a search run.
#[derive(Clone, Debug, Default)]
pub struct SizeOptions {
    pub overrides: Vec<String>,
    pub threads: Option<usize>,
    pub command: String,
}

/// The search's result with its report.
pub struct Sized {
    pub result: SearchResult<Probe>,
    pub report: SizingReport,
    /// With `[programming]` on: one sentence on program-and-verify and its cost at the final
    /// design, for `answer.txt`.
    pub programming_note: Option<String>,
}

fn prep_key(e: &Experiment) -> String {
    let parts = [
        Value::try_from(&e.dataset),
        Value::try_from(&e.training),
        Value::try_from(&e.hidden),
        Value::try_from(&e.weights),
        Value::try_from(&e.input),
        Value::try_from(&e.process),
    ];
    parts
        .iter()
        .map(|p| p.as_ref().map(|v| v.to_string()).unwrap_or_default())
        .collect::<Vec<_>>()
        .join("\n")
}

/// The program-and-verify settings of the experiment file (with the command's overrides).
fn resolved_programming(
    text: &str,
    file: &Path,
    overrides: &[String],
) -> Option<crate::stages::weights::ProgramVerify> {
    let r = load_str(text, file, overrides).ok()?;
    r.at_point.first().and_then(super::build::program_verify)
}

/// Run the sizing search of the experiment file `file` (its `[search]` table).
pub fn run_size(file: &Path, opts: &SizeOptions) -> Result<Sized, SizingCfgError> {
    let t0 = std::time::Instant::now();
    let fname = file.display().to_string();
    let text = std::fs::read_to_string(file).map_err(|e| SizingCfgError::Config {
        file: fname.clone(),
        source: Box::new(super::config::ConfigError::Read {
            path: file.into(),
            err: e,
        }),
    })?;
    let cfg_err = |source| SizingCfgError::Config {
        file: fname.clone(),
        source: Box::new(source),
    };
    let resolved = load_str(&text, file, &opts.overrides).map_err(cfg_err)?;
    let spec = parse_search(&text, file, &resolved)?;
    let corners = parse_corners(&text, file, &resolved)?;
    // Every corner must load (its values inside the models' ranges) before searching.
    for c in &corners {
        let mut o = opts.overrides.clone();
        o.extend(c.overrides.iter().cloned());
        load_str(&text, file, &o).map_err(|e| SizingCfgError::Key {
            file: fname.clone(),
            line: Default::default(),
            message: format!("corner `{}`: {e}", c.name),
        })?;
    }
    let searched: Vec<&str> = spec
        .dims
        .iter()
        .flat_map(|d| d.paths.iter().map(String::as_str))
        .collect();
    let other_axes: Vec<String> = resolved
        .axes
        .iter()
        .filter(|a| !searched.contains(&a.path.as_str()))
        .map(|a| a.path.clone())
        .collect();
    if !other_axes.is_empty() {
        return Err(SizingCfgError::Swept {
            file: fname.clone(),
            axes: other_axes.join(", "),
        });
    }
    let base_dir = file.parent().map(Path::to_path_buf).unwrap_or_default();

    // Candidate: the experiment with every dimension's paths set.
    let overrides_at = |values: &[f64]| -> Vec<String> {
        let mut o = opts.overrides.clone();
        for (d, v) in spec.dims.iter().zip(values) {
            for p in &d.paths {
                if d.unit.is_empty() {
                    o.push(format!("{p}={v:?}"));
                } else {
                    o.push(format!("{p}=\"{}\"", exact_si(*v, d.unit)));
                }
            }
        }
        o
    };
    let bottoms: Vec<f64> = spec.dims.iter().map(|d| d.range.lo).collect();
    let first = load_str(&text, file, &overrides_at(&bottoms)).map_err(cfg_err)?;
    let e0 = first.at_point[0].clone();

    // Before searching: can the target be met at all?
    let chips = e0.population.chips;
    let z = normal_quantile_two_sided(e0.target.confidence);
    let best = wilson_lower(chips, chips, z);
    if best < e0.target.yield_target {
        let mut needed = chips.max(1);
        while wilson_lower(needed, needed, z) < e0.target.yield_target && needed < 1 << 40 {
            needed *= 2;
        }
        let (mut lo, mut hi) = (needed / 2, needed);
        while hi - lo > 1 {
            let m = (lo + hi) / 2;
            if wilson_lower(m, m, z) >= e0.target.yield_target {
                hi = m
            } else {
                lo = m
            }
        }
        return Err(SizingCfgError::TooFewDies {
            file: fname.clone(),
            chips,
            best,
            target: e0.target.yield_target,
            needed: hi,
        });
    }
    let mut preps: HashMap<String, Prepared> = HashMap::new();
    let cand_err = |values: &[f64], message: String| SizingCfgError::Candidate {
        file: fname.clone(),
        settings: spec
            .dims
            .iter()
            .zip(values)
            .map(|(d, v)| format!("{} = {}", d.name, exact_si(*v, d.unit)))
            .collect::<Vec<_>>()
            .join(", "),
        message,
    };
    let p0 = prepare_data(&e0, &base_dir).map_err(|m| cand_err(&bottoms, m.to_string()))?;
    if p0.ideal_acc < e0.target.accuracy {
        return Err(SizingCfgError::IdealBelowTarget {
            file: fname.clone(),
            ideal: p0.ideal_acc,
            target: e0.target.accuracy,
        });
    }
    let ideal_acc = p0.ideal_acc;
    let test_samples = p0.test_y.len();
    preps.insert(prep_key(&e0), p0);

    let pool = {
        let mut b = rayon::ThreadPoolBuilder::new();
        if let Some(t) = opts.threads {
            b = b.num_threads(t.max(1));
        }
        b.build().map_err(|e| SizingCfgError::Threads {
            threads: opts.threads.unwrap_or(0),
            message: e.to_string(),
        })?
    };
    let mut reference: Option<(f64, f64)> = None;
    let mut eval_one = |values: &[f64],
                        extra: &[String],
                        seed: u64,
                        role: Role|
     -> Result<Probe, SizingCfgError> {
        let tc = std::time::Instant::now();
        let mut o = overrides_at(values);
        o.extend(extra.iter().cloned());
        let r = load_str(&text, file, &o).map_err(cfg_err)?;
        let e = &r.at_point[0];
        let key = prep_key(e);
        if !preps.contains_key(&key) {
            let p = prepare_data(e, &base_dir).map_err(|m| cand_err(values, m.to_string()))?;
            preps.insert(key.clone(), p);
        }
        let prep = &preps[&key];
        let setup = build_point(e, prep).map_err(|m| cand_err(values, m.to_string()))?;
        let cost = point_cost(&setup, prep, &mean_input(&prep.test_u), &cost_settings(e))
            .map_err(|m| cand_err(values, format!("cost.{m}")))?;
        let n = e.population.chips;
        let outcomes: Vec<(f64, Option<crate::stages::weights::ProgramCounts>)> =
            pool.install(|| {
                (0..n)
                    .into_par_iter()
                    .map(|c| {
                        let o = evaluate_chip(&setup, prep, seed, Dies::Paired, c);
                        (o.accuracy(), o.programming)
                    })
                    .collect()
            });
        let programming = setup.program_verify.map(|v| {
            let mut sum = crate::stages::weights::ProgramCounts::default();
            for (_, c) in &outcomes {
                if let Some(c) = c {
                    sum.merge(c);
                }
            }
            (
                sum.cycles_per_element(),
                sum.cycles as f64 * v.cycle_time_s / n.max(1) as f64,
            )
        });
        let mut acc: Vec<f64> = outcomes.iter().map(|(a, _)| *a).collect();
        let reached = acc.iter().filter(|&&a| a >= e.target.accuracy).count() as u64;
        let (lo, hi) = hardmax_report::stats::wilson_interval(reached, n, z);
        let mean = acc.iter().sum::<f64>() / n.max(1) as f64;
        acc.sort_by(f64::total_cmp);
        let p05 = hardmax_report::stats::percentile_sorted(&acc, 0.05);
        let (a0, i0) = *reference.get_or_insert((cost.area_m2, cost.supply_current_a));
        let c = match spec.cost {
            CostKind::Area => cost.area_m2,
            CostKind::CompetitionArea => cost.competition_area_m2,
            CostKind::Current => cost.supply_current_a,
            CostKind::Power => cost.power_w,
            CostKind::Weighted { area, current } => {
                area * cost.area_m2 / a0.max(f64::MIN_POSITIVE)
                    + current * cost.supply_current_a / i0.max(f64::MIN_POSITIVE)
            }
        };
        Ok(Probe {
            row: SizingRow {
                role: role.key().into(),
                values: values.to_vec(),
                seed,
                dies: n,
                reached,
                yield_: reached as f64 / n.max(1) as f64,
                yield_lo: lo,
                yield_hi: hi,
                pass: lo >= e.target.yield_target,
                margin: lo - e.target.yield_target,
                acc_mean: mean,
                acc_p05: p05,
                area_m2: cost.area_m2,
                competition_area_m2: cost.competition_area_m2,
                supply_current_a: cost.supply_current_a,
                power_w: cost.power_w,
                cost: c,
                elapsed_s: tc.elapsed().as_secs_f64(),
                limiting_yield: String::new(),
                limiting_accuracy: String::new(),
                limiting_current: String::new(),
            },
            cost: c,
            programming,
        })
    };
    let eval = |values: &[f64], seed: u64, role: Role| -> Result<Probe, SizingCfgError> {
        if corners.is_empty() {
            return eval_one(values, &[], seed, role);
        }
        let mut rows = Vec::with_capacity(corners.len());
        let mut cost = f64::NEG_INFINITY;
        // Programming is at one temperature and supply: the corners' largest cost is kept.
        let mut programming: Option<(f64, f64)> = None;
        for c in &corners {
            let p = eval_one(values, &c.overrides, seed, role)?;
            cost = cost.max(p.cost);
            if let Some((a, b)) = p.programming {
                let (x, y) = programming.unwrap_or((a, b));
                programming = Some((x.max(a), y.max(b)));
            }
            rows.push((c.name.clone(), p.row));
        }
        let mut row = combine_corners(&rows).expect("at least one corner");
        // The cost of a design at corners: its largest over the corners (current grows at the
        // fast corner and high supply; the area is the same everywhere).
        row.cost = cost;
        Ok(Probe {
            row,
            cost,
            programming,
        })
    };
    let ranges: Vec<LogRange> = spec.dims.iter().map(|d| d.range.clone()).collect();
    let result = search(&ranges, &spec.opts, eval)?.map_err(|e| SizingCfgError::Key {
        file: fname.clone(),
        line: Default::default(),
        message: e.to_string(),
    })?;
    let (answer_row, best_row, widen) = match &result.answer {
        Answer::Met { step } => (Some(*step), None, vec![]),
        Answer::NotMet { best_step, widen } => (None, Some(*best_step), widen.clone()),
    };
    let report = SizingReport {
        experiment: resolved.base.name.clone(),
        dims: spec
            .dims
            .iter()
            .map(|d| SizingDimension {
                name: d.name.clone(),
                paths: d.paths.clone(),
                unit: d.unit.into(),
                lo: d.range.lo,
                hi: d.range.hi,
            })
            .collect(),
        cost_name: spec.cost.name().into(),
        cost_text: spec.cost.text(),
        method: if spec.dims.len() == 1 {
            METHOD_ONE.into()
        } else {
            format!(
                "{METHOD_SEVERAL} ({} values per grid dimension)",
                spec.opts.grid
            )
        },
        resolution: spec.opts.resolution,
        target_accuracy: e0.target.accuracy,
        yield_target: e0.target.yield_target,
        confidence: e0.target.confidence,
        ideal_acc,
        test_samples,
        rows: result.trace.iter().map(|s| s.verdict.row.clone()).collect(),
        front: result.front.clone(),
        answer_row,
        final_row: result.final_step(),
        best_row,
        widen,
        status: result.status(),
        corners: corners.iter().map(|c| c.name.clone()).collect(),
        command: opts.command.clone(),
        elapsed_s: t0.elapsed().as_secs_f64(),
    };
    let programming_note = resolved_programming(&text, file, &opts.overrides).map(|v| {
        let at = result
            .final_step()
            .and_then(|i| result.trace.get(i))
            .and_then(|s| s.verdict.programming);
        format!(
            "weights programmed and verified: tolerance {} of the element range, at most {} \
             cycles, verify read noise {} of the range, {:.3e} s per cycle{}\n",
            v.tolerance,
            v.max_cycles,
            v.read_noise,
            v.cycle_time_s,
            match at {
                Some((per, t)) => format!(
                    "; at the final design {per:.3} cycles per element, {t:.3e} s of programming \
                     per die"
                ),
                None => String::new(),
            }
        )
    });
    Ok(Sized {
        result,
        report,
        programming_note,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(margin: f64, acc: f64, current: f64) -> SizingRow {
        SizingRow {
            role: "bisect".into(),
            values: vec![1e-6],
            seed: 1,
            dies: 100,
            reached: 90,
            yield_: 0.9,
            yield_lo: 0.95 + margin,
            yield_hi: 0.99,
            pass: margin >= 0.0,
            margin,
            acc_mean: acc,
            acc_p05: acc,
            area_m2: 1e-9,
            competition_area_m2: 1e-10,
            supply_current_a: current,
            power_w: 1e-6,
            cost: 1e-9,
            elapsed_s: 1.0,
            limiting_yield: String::new(),
            limiting_accuracy: String::new(),
            limiting_current: String::new(),
        }
    }

    /// A point failing at one corner fails overall (common practice, no source), and the
    /// limiting corner of each metric is named.
    #[test]
    fn failing_at_one_corner_fails_overall() {
        let rows = vec![
            ("tt".to_string(), row(0.02, 0.95, 1e-6)),
            ("ss".to_string(), row(-0.01, 0.93, 0.8e-6)),
            ("ff".to_string(), row(0.01, 0.92, 1.3e-6)),
        ];
        let c = combine_corners(&rows).unwrap();
        assert!(!c.pass);
        assert_eq!(c.limiting_yield, "ss");
        assert_eq!(c.limiting_accuracy, "ff");
        assert_eq!(c.limiting_current, "ff");
        approx::assert_relative_eq!(c.margin, -0.01);
        let all_pass: Vec<_> = rows
            .iter()
            .map(|(n, r)| {
                (
                    n.clone(),
                    row(r.margin.abs(), r.acc_mean, r.supply_current_a),
                )
            })
            .collect();
        assert!(combine_corners(&all_pass).unwrap().pass);
    }
}
