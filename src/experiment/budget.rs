//! The error budget of one design point (edge layer): build the variants of the point's design
//! (core: `pipeline::budget`), evaluate every variant on the same dies in parallel, and reduce
//! the per-die accuracies to paired costs with intervals.
//!
//! Paired dies: every variant uses the point's own index in the chip streams, so die c has the
//! same draws in every variant (the core scales switched-off draws by zero instead of skipping
//! them). The all-on variant is the design as run by `hardmax run`: its dies are that run's
//! chips at this point.

use std::collections::BTreeSet;
use std::path::Path;

use rayon::prelude::*;

use super::build::{design, prepare_data, BuildError};
use super::config::Resolved;
use crate::pipeline::budget::{active_nonidealities, variant, Nonideality, StageGroup};
use crate::pipeline::{evaluate_chip_with, ChipToggles, PipelineError, PointSetup, Prepared};
use hardmax_report::paired::{
    newcombe_from_pairs, normal_quantile, paired_t_interval, PairedInterval,
};
use hardmax_report::report::budget::{BudgetItem, BudgetTable, ItemKind};

/// Errors of a budget; each names the option or key to change.
#[derive(Debug, thiserror::Error)]
pub enum BudgetError {
    #[error(
        "--point {point} is out of range: `{file}` has {points} sweep point(s), numbered 0 to {last}"
    )]
    PointOutOfRange {
        point: usize,
        points: usize,
        last: usize,
        file: String,
    },
    #[error(
        "`{file}`, sweep point {point}: no nonideality is switched on, so there is nothing to budget. \
         Switch one on, e.g. weights.programming_error, weights.read_noise, input.gain_mismatch, \
         weights.offset_mismatch, process.nmos.a_vt with weights.element = \"subthreshold\" or \
         competition.circuit = \"current_wta\", competition.noise, or conditions.temperature away \
         from weights.program_temperature"
    )]
    NothingActive { file: String, point: usize },
    #[error("--chips must be at least 2 (a paired interval needs two dies), got {0}")]
    TooFewChips(u64),
    #[error("`{file}`, sweep point {point}: {message}")]
    Build {
        file: String,
        point: usize,
        message: String,
    },
    #[error("cannot start {threads} worker threads: {message}")]
    Threads { threads: usize, message: String },
}

/// Options of a budget run.
#[derive(Clone, Debug)]
pub struct BudgetOptions {
    /// Sweep point index (0 = the first point, or the only one).
    pub point: usize,
    /// Dies (default: the experiment's population.chips).
    pub chips: Option<u64>,
    pub threads: Option<usize>,
    /// The command line, recorded in the report.
    pub command: String,
}

/// One variant: the nonidealities it switches on.
#[derive(Clone, Debug, PartialEq)]
struct Variant {
    on: BTreeSet<Nonideality>,
}

/// A budget with the per-die accuracies behind it.
#[derive(Clone, Debug)]
pub struct Budget {
    pub table: BudgetTable,
    /// Names of the evaluated variants, in column order of `accuracies`.
    pub variant_names: Vec<String>,
    /// `accuracies[v][die]`.
    pub accuracies: Vec<Vec<f64>>,
    /// The exact-arithmetic ideal accuracy (the same for every die).
    pub exact_ideal: f64,
    pub active: Vec<Nonideality>,
    pub elapsed_s: f64,
}

fn name_of(on: &BTreeSet<Nonideality>, active: &[Nonideality]) -> String {
    if on.is_empty() {
        "quantised_ideal".into()
    } else if on.len() == active.len() {
        "all_on".into()
    } else if on.len() + 1 == active.len() && active.len() > 1 {
        let off = active.iter().find(|n| !on.contains(n));
        format!("all_but_{}", off.map_or("", |n| n.key()))
    } else {
        on.iter().map(|n| n.key()).collect::<Vec<_>>().join("+")
    }
}

/// Run the budget of one point of `resolved`.
pub fn run_budget(resolved: &Resolved, opts: &BudgetOptions) -> Result<Budget, BudgetError> {
    let t0 = std::time::Instant::now();
    let file = resolved.file.display().to_string();
    let points = resolved.at_point.len();
    let e = resolved
        .at_point
        .get(opts.point)
        .ok_or(BudgetError::PointOutOfRange {
            point: opts.point,
            points,
            last: points.saturating_sub(1),
            file: file.clone(),
        })?;
    let chips = opts.chips.unwrap_or(e.population.chips);
    if chips < 2 {
        return Err(BudgetError::TooFewChips(chips));
    }
    let build_err = |m: String| BudgetError::Build {
        file: file.clone(),
        point: opts.point,
        message: m,
    };
    let base_dir = resolved
        .file
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_default();
    let prep: Prepared = prepare_data(e, &base_dir).map_err(|m| build_err(m.to_string()))?;
    let nominal = design(e, prep.class_names.len()).map_err(|m| build_err(m.to_string()))?;
    let settings = resolved
        .points
        .get(opts.point)
        .map(|p| resolved.describe_point(p))
        .unwrap_or_default();
    let spec = BudgetSpec {
        experiment: e.name.clone(),
        settings,
        point: opts.point,
        dies: e.population.pairing.dies_at(opts.point),
        chips,
        seed: e.population.seed,
        target_accuracy: e.target.accuracy,
        confidence: e.target.confidence,
        threads: opts.threads,
        command: opts.command.clone(),
    };
    let trim = super::build::trim_design(e);
    let mut b = budget_of_with_trim(&nominal, &prep, &spec, trim).map_err(|err| match err {
        BudgetError::NothingActive { .. } => BudgetError::NothingActive {
            file: file.clone(),
            point: opts.point,
        },
        BudgetError::Build { message, .. } => build_err(message),
        other => other,
    })?;
    b.elapsed_s = t0.elapsed().as_secs_f64();
    Ok(b)
}

/// What a budget needs beside the design and the prepared classifier.
#[derive(Clone, Debug)]
pub struct BudgetSpec {
    pub experiment: String,
    pub settings: String,
    /// Sweep point index.
    pub point: usize,
    /// How the point's chip streams are keyed (paired dies or the point's own); the same for
    /// every variant.
    pub dies: crate::pipeline::Dies,
    pub chips: u64,
    pub seed: u64,
    pub target_accuracy: f64,
    pub confidence: f64,
    pub threads: Option<usize>,
    pub command: String,
}

/// The budget of `nominal` (the design of one point) over `spec.chips` paired dies.
pub fn budget_of(
    nominal: &crate::pipeline::ClassifierDesign,
    prep: &Prepared,
    spec: &BudgetSpec,
) -> Result<Budget, BudgetError> {
    budget_of_with_trim(nominal, prep, spec, None)
}

/// The budget of `nominal` with `trim` (`[trim]` enabled): every variant's dies are trimmed
/// (each die calibrated as it is in that variant, as after fabrication), and one more variant,
/// every nonideality on without the trim, gives the row `trim` (the accuracy and yield the trim
/// wins back on the same dies).
pub fn budget_of_with_trim(
    nominal: &crate::pipeline::ClassifierDesign,
    prep: &Prepared,
    spec: &BudgetSpec,
    trim: Option<crate::pipeline::trim::TrimDesign>,
) -> Result<Budget, BudgetError> {
    let t0 = std::time::Instant::now();
    let build_err = |m: String| BudgetError::Build {
        file: spec.experiment.clone(),
        point: spec.point,
        message: m,
    };
    let chips = spec.chips;
    if chips < 2 {
        return Err(BudgetError::TooFewChips(chips));
    }
    let layers = prep.layers.len();
    let active = active_nonidealities(nominal, layers).map_err(|m| build_err(m.to_string()))?;
    if active.is_empty() {
        return Err(BudgetError::NothingActive {
            file: spec.experiment.clone(),
            point: spec.point,
        });
    }

    // Variants: quantised ideal, each alone on, each alone off, each stage on, all on.
    let mut variants: Vec<Variant> = Vec::new();
    let mut push = |on: BTreeSet<Nonideality>| -> usize {
        if let Some(k) = variants.iter().position(|v| v.on == on) {
            return k;
        }
        variants.push(Variant { on });
        variants.len() - 1
    };
    let all: BTreeSet<Nonideality> = active.iter().copied().collect();
    let v_quant = push(BTreeSet::new());
    let v_all = push(all.clone());
    let v_single: Vec<usize> = active
        .iter()
        .map(|n| push([*n].into_iter().collect()))
        .collect();
    let v_loo: Vec<usize> = active
        .iter()
        .map(|n| push(all.iter().copied().filter(|m| m != n).collect()))
        .collect();
    let v_stage: Vec<(StageGroup, usize)> = StageGroup::ALL
        .iter()
        .filter_map(|g| {
            let on: BTreeSet<Nonideality> =
                active.iter().copied().filter(|n| n.stage() == *g).collect();
            (!on.is_empty()).then(|| (*g, push(on)))
        })
        .collect();

    let trim_err = |m: PipelineError| {
        let key = match &m {
            PipelineError::Trim(_) => "trim / competition.circuit: ",
            _ => "",
        };
        build_err(format!("{key}{}", BuildError::from(m)))
    };
    let mut setups: Vec<(PointSetup, ChipToggles)> = variants
        .iter()
        .map(|v| {
            let (d, t) = variant(nominal, |n| v.on.contains(&n));
            let s = PointSetup::new(d, prep)
                .map_err(|m: PipelineError| build_err(BuildError::from(m).to_string()))?;
            let s = match trim {
                Some(tr) => s.with_trim(tr, prep).map_err(trim_err)?,
                None => s,
            };
            Ok((s, t))
        })
        .collect::<Result<_, _>>()?;
    // With trim: the all-on variant untrimmed, last.
    let v_untrimmed = match (trim, setups.get(v_all)) {
        (Some(_), Some((s, t))) => {
            let mut s = s.clone();
            s.trim = None;
            let t = *t;
            setups.push((s, t));
            Some(setups.len() - 1)
        }
        _ => None,
    };

    let pool = {
        let mut b = rayon::ThreadPoolBuilder::new();
        if let Some(t) = spec.threads {
            b = b.num_threads(t.max(1));
        }
        b.build().map_err(|e| BudgetError::Threads {
            threads: spec.threads.unwrap_or(0),
            message: e.to_string(),
        })?
    };
    let seed = spec.seed;
    let dies = spec.dies;
    // per_die[die][variant]; each die evaluates every variant (same draws in each).
    let per_die: Vec<Vec<f64>> = pool.install(|| {
        (0..chips)
            .into_par_iter()
            .map(|c| {
                setups
                    .iter()
                    .map(|(s, t)| evaluate_chip_with(s, prep, seed, dies, c, t).accuracy())
                    .collect()
            })
            .collect()
    });
    let nv = setups.len();
    let accuracies: Vec<Vec<f64>> = (0..nv)
        .map(|v| per_die.iter().map(|d| d[v]).collect())
        .collect();

    let target = spec.target_accuracy;
    let conf = spec.confidence;
    let z = normal_quantile(conf);
    let exact = prep.ideal_acc;
    let n = chips as usize;
    let diff = |a: &[f64], b: &[f64]| -> Vec<f64> { a.iter().zip(b).map(|(x, y)| x - y).collect() };
    let pass = |a: &[f64]| -> Vec<bool> { a.iter().map(|&x| x >= target).collect() };
    let mean = |a: &[f64]| a.iter().sum::<f64>() / a.len().max(1) as f64;
    let yield_of =
        |a: &[f64]| pass(a).iter().filter(|&&p| p).count() as f64 / a.len().max(1) as f64;
    let acc = |v: usize| accuracies[v].as_slice();
    // Cost of variant `v` against reference `r` (r - v on each die).
    let cost = |r: &[f64], v: &[f64]| -> (PairedInterval, PairedInterval) {
        (
            paired_t_interval(&diff(r, v), conf),
            newcombe_from_pairs(&pass(r), &pass(v), z),
        )
    };
    let exact_die = vec![exact; n];
    let mut items: Vec<BudgetItem> = Vec::new();
    let reference = |key: &str, desc: &str, a: &[f64]| BudgetItem {
        key: key.into(),
        kind: ItemKind::Reference,
        stage: String::new(),
        description: desc.into(),
        rank: None,
        accuracy_mean: mean(a),
        yield_: yield_of(a),
        acc_cost: None,
        yield_cost: None,
        loo_acc_gain: None,
        loo_yield_gain: None,
    };
    items.push(reference(
        "exact_ideal",
        "exact-arithmetic ideal (float weights mapped, argmax)",
        &exact_die,
    ));
    items.push(reference(
        "quantised_ideal",
        "weights on their levels and DAC quantised only",
        acc(v_quant),
    ));
    let (qa, qy) = cost(&exact_die, acc(v_quant));
    items.push(BudgetItem {
        key: "quantisation".into(),
        kind: ItemKind::Quantisation,
        stage: StageGroup::Weights.key().into(),
        description: "quantisation of weights and input DAC".into(),
        rank: None,
        accuracy_mean: mean(acc(v_quant)),
        yield_: yield_of(acc(v_quant)),
        acc_cost: Some(qa),
        yield_cost: Some(qy),
        loo_acc_gain: None,
        loo_yield_gain: None,
    });
    let mut singles: Vec<BudgetItem> = active
        .iter()
        .zip(v_single.iter().zip(&v_loo))
        .map(|(nonideality, (&vs, &vl))| {
            let (a, y) = cost(acc(v_quant), acc(vs));
            let (la, ly) = cost(acc(vl), acc(v_all));
            BudgetItem {
                key: nonideality.key().into(),
                kind: ItemKind::Single,
                stage: nonideality.stage().key().into(),
                description: nonideality.label().into(),
                rank: None,
                accuracy_mean: mean(acc(vs)),
                yield_: yield_of(acc(vs)),
                acc_cost: Some(a),
                yield_cost: Some(y),
                loo_acc_gain: Some(la),
                loo_yield_gain: Some(ly),
            }
        })
        .collect();
    singles.sort_by(|a, b| {
        let ca = a.acc_cost.map_or(f64::NEG_INFINITY, |c| c.estimate);
        let cb = b.acc_cost.map_or(f64::NEG_INFINITY, |c| c.estimate);
        cb.total_cmp(&ca)
    });
    for (k, s) in singles.iter_mut().enumerate() {
        s.rank = Some(k + 1);
    }
    items.extend(singles);
    for (g, v) in &v_stage {
        let (a, y) = cost(acc(v_quant), acc(*v));
        items.push(BudgetItem {
            key: format!("stage_{}", g.key()),
            kind: ItemKind::Stage,
            stage: g.key().into(),
            description: format!("every {} nonideality on together", g.key()),
            rank: None,
            accuracy_mean: mean(acc(*v)),
            yield_: yield_of(acc(*v)),
            acc_cost: Some(a),
            yield_cost: Some(y),
            loo_acc_gain: None,
            loo_yield_gain: None,
        });
    }
    // Interaction: per die, all-on loss minus the sum of the single losses.
    let total = diff(acc(v_quant), acc(v_all));
    let inter: Vec<f64> = (0..n)
        .map(|c| {
            total[c]
                - v_single
                    .iter()
                    .map(|&v| acc(v_quant)[c] - acc(v)[c])
                    .sum::<f64>()
        })
        .collect();
    let yq = yield_of(acc(v_quant));
    let y_inter =
        (yq - yield_of(acc(v_all))) - v_single.iter().map(|&v| yq - yield_of(acc(v))).sum::<f64>();
    items.push(BudgetItem {
        key: "interaction".into(),
        kind: ItemKind::Interaction,
        stage: String::new(),
        description: "all-on loss minus the sum of the single losses".into(),
        rank: None,
        accuracy_mean: f64::NAN,
        yield_: f64::NAN,
        acc_cost: Some(paired_t_interval(&inter, conf)),
        yield_cost: Some(PairedInterval {
            estimate: y_inter,
            lo: f64::NAN,
            hi: f64::NAN,
            n,
        }),
        loo_acc_gain: None,
        loo_yield_gain: None,
    });
    let (ta, ty) = cost(acc(v_quant), acc(v_all));
    items.push(BudgetItem {
        key: "all_on".into(),
        kind: ItemKind::AllOn,
        stage: String::new(),
        description: "every nonideality on (the design as run)".into(),
        rank: None,
        accuracy_mean: mean(acc(v_all)),
        yield_: yield_of(acc(v_all)),
        acc_cost: Some(ta),
        yield_cost: Some(ty),
        loo_acc_gain: None,
        loo_yield_gain: None,
    });
    if let Some(vu) = v_untrimmed {
        let (ga, gy) = cost(acc(v_all), acc(vu));
        items.push(BudgetItem {
            key: "trim".into(),
            kind: ItemKind::Reference,
            stage: String::new(),
            description: "every nonideality on without the trim DACs; cost = what the trim \
                          wins back (trimmed all-on minus untrimmed, same dies)"
                .into(),
            rank: None,
            accuracy_mean: mean(acc(vu)),
            yield_: yield_of(acc(vu)),
            acc_cost: Some(ga),
            yield_cost: Some(gy),
            loo_acc_gain: None,
            loo_yield_gain: None,
        });
    }

    let table = BudgetTable {
        experiment: spec.experiment.clone(),
        point: spec.point,
        settings: spec.settings.clone(),
        dies: n,
        samples: prep.test_y.len(),
        target_accuracy: target,
        confidence: conf,
        seed,
        command: spec.command.clone(),
        items,
    };
    Ok(Budget {
        table,
        variant_names: variants
            .iter()
            .map(|v| name_of(&v.on, &active))
            .chain(v_untrimmed.map(|_| "all_on_untrimmed".to_string()))
            .collect(),
        accuracies,
        exact_ideal: exact,
        active,
        elapsed_s: t0.elapsed().as_secs_f64(),
    })
}

/// `budget-dies.csv`: one row per die, one column per variant (accuracy), the numbers behind
/// every interval of the budget.
pub fn dies_csv(b: &Budget) -> String {
    let mut s = String::from("die,exact_ideal");
    for n in &b.variant_names {
        s.push(',');
        s.push_str(n);
    }
    s.push('\n');
    let dies = b.accuracies.first().map_or(0, Vec::len);
    for c in 0..dies {
        s.push_str(&format!("{c},{}", b.exact_ideal));
        for v in &b.accuracies {
            s.push_str(&format!(",{}", v[c]));
        }
        s.push('\n');
    }
    s
}
