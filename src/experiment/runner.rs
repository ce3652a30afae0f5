//! The Monte Carlo runner: for every sweep point not yet finished, evaluate a population of
//! chips in parallel (rayon), save the point atomically, and regenerate the tables.
//!
//! Reproducibility: each chip's draws come from streams keyed by (seed, point, chip), and chip
//! results are collected in chip order before any reduction, so the files are byte-identical
//! whatever the thread count. Interruption: every finished point is on disk; a new run of the
//! same resolved experiment into the same folder resumes from the first missing point.

use std::path::{Path, PathBuf};
use std::time::Instant;

use rayon::prelude::*;
use sha2::{Digest, Sha256};

use super::build::{build_point, cost_settings, prepare_data_trained};
use super::config::Resolved;
use super::results::{
    chip_rows_csv, ChipRow, ChipStats, PointRecord, ResultsDir, ResultsError, FORMAT_NAME,
    FORMAT_VERSION,
};
use super::shard::{Plan, ShardError, ShardSpec};
use crate::format::{
    DatasetInfo, HardwareTraining, HostInfo, InputFile, Manifest, Pairing, RunStatus, Sweep,
    SweepMode, SweepParameter, TrainerInfo,
};
use crate::io::write_atomic;
use crate::pipeline::cost::{mean_input, point_cost};
use crate::pipeline::{evaluate_chip, Dies, Prepared};

/// Chips per worker thread in one batch of the chip loop (the reorder buffer holds at most
/// threads x this many chip outcomes).
pub const CHIPS_PER_THREAD: u64 = 64;

/// Errors of a run; each says which point or file.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    #[error(transparent)]
    Results(#[from] ResultsError),
    #[error(transparent)]
    Shard(#[from] ShardError),
    #[error("sweep point {point} ({settings}): {message}")]
    Point {
        point: usize,
        settings: String,
        message: String,
    },
    #[error("cannot start {threads} worker threads: {message}")]
    Threads { threads: usize, message: String },
    #[error(
        "interrupted: {done} of {total} sweep points are finished and kept; run the same command again to resume"
    )]
    Stopped { done: usize, total: usize },
    #[error("cannot read input file `{path}` ({key}): {message}. Check the path (relative to the experiment file)")]
    Input {
        key: String,
        path: String,
        message: String,
    },
    #[error("output folder `{out}` holds results computed from a different version of {changed}; nothing was changed. Use --fresh to start over with the new file, or another --out folder")]
    InputChanged { out: PathBuf, changed: String },
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// Every input file the experiment reads (over all sweep points), hashed.
pub fn input_files(resolved: &Resolved) -> Result<Vec<InputFile>, RunError> {
    let base_dir = resolved
        .file
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_default();
    let mut wanted: Vec<(&str, PathBuf)> = Vec::new();
    for e in std::iter::once(&resolved.base).chain(&resolved.at_point) {
        if let (None, Some(f)) = (&e.dataset.name, &e.dataset.file) {
            wanted.push(("dataset.file", base_dir.join(f)));
        }
        if let (Some(f), true) = (&e.hidden.weights_file, e.hidden.units > 0) {
            wanted.push(("hidden.weights_file", base_dir.join(f)));
        }
    }
    let mut out: Vec<InputFile> = Vec::new();
    for (key, path) in wanted {
        let path_text = path.display().to_string();
        if out.iter().any(|f| f.key == key && f.path == path_text) {
            continue;
        }
        let bytes = std::fs::read(&path).map_err(|e| RunError::Input {
            key: key.into(),
            path: path_text.clone(),
            message: e.to_string(),
        })?;
        out.push(InputFile {
            key: key.into(),
            path: path_text,
            sha256: hex(&Sha256::digest(&bytes)),
        });
    }
    Ok(out)
}

/// Hash of the resolved experiment, the content of every input file it reads, and the tool
/// version: identifies a results folder's content (resume and `batch`'s up-to-date check).
pub fn identity_hash(resolved: &Resolved, inputs: &[InputFile]) -> String {
    let mut h = Sha256::new();
    h.update(FORMAT_NAME.as_bytes());
    h.update(env!("CARGO_PKG_VERSION").as_bytes());
    h.update(resolved.to_toml().as_bytes());
    for f in inputs {
        h.update(b"\0input\0");
        h.update(f.key.as_bytes());
        h.update(b"\0");
        h.update(f.sha256.as_bytes());
    }
    hex(&h.finalize())
}

/// Which input files differ between a results folder's manifest and `now`, as text for a
/// message ("`dataset.file` `data.csv`"); None when the manifest has no input list or every file
/// is the same (then the settings changed).
fn changed_inputs(out: &Path, now: &[InputFile]) -> Option<String> {
    let m = Manifest::read(&out.join("manifest.json")).ok()?;
    let changed: Vec<String> = now
        .iter()
        .filter(|f| {
            !m.inputs
                .iter()
                .any(|o| o.key == f.key && o.sha256 == f.sha256)
        })
        .map(|f| format!("input file `{}` (`{}`)", f.path, f.key))
        .collect();
    (!changed.is_empty() && m.settings_hash.is_some()).then(|| changed.join(" and "))
}

fn settings_hash(resolved: &Resolved) -> String {
    identity_hash(resolved, &[])
}

/// What the runner reports while it works (the CLI draws progress bars from it).
pub trait Observer: Sync {
    /// A run starts: `total` points, `done` of them already finished (resume), chips per point.
    fn start(&self, _total: usize, _done: usize, _chips: u64) {}
    /// A shard starts (`shard` is "K/N"): `total` points touched, `done` of them finished,
    /// `chips_todo` chips left to evaluate.
    fn start_units(&self, _shard: &str, _total: usize, _done: usize, _chips_todo: u64) {}
    /// One chip of the current point finished.
    fn chip_done(&self) {}
    /// A point finished (its summary line).
    fn point_done(&self, _point: usize, _line: &str) {}
    /// A physically odd setting or a tolerated data problem (also recorded in the manifest).
    fn warning(&self, _text: &str) {}
    /// Should the run stop after the current point?
    fn should_stop(&self) -> bool {
        false
    }
}

/// An observer that reports nothing.
pub struct Silent;
impl Observer for Silent {}

/// Options of a run.
#[derive(Clone, Debug)]
pub struct RunOptions {
    pub out: PathBuf,
    /// Worker threads (None = all cores).
    pub threads: Option<usize>,
    /// Replace results of another experiment in `out`.
    pub fresh: bool,
    /// The command line, recorded in the manifest.
    pub command: String,
    /// Run only this shard of the (point, chip) work units (see `experiment::shard`).
    pub shard: Option<ShardSpec>,
}

/// What a finished (or resumed) run did.
#[derive(Clone, Debug)]
pub struct RunSummary {
    pub out: PathBuf,
    pub points_total: usize,
    pub points_run: usize,
    pub points_resumed: usize,
    pub elapsed_s: f64,
    pub records: Vec<PointRecord>,
}

/// The identity of an experiment: [`identity_hash`] over its resolved text and input files.
pub fn experiment_hash(resolved: &Resolved) -> Result<String, RunError> {
    Ok(identity_hash(resolved, &input_files(resolved)?))
}

/// Read the manifest status of a results folder: Some(true) complete, Some(false) partial.
pub fn folder_status(out: &Path, hash: &str) -> Option<bool> {
    let m = Manifest::read(&out.join("manifest.json")).ok()?;
    (m.experiment_hash == hash).then_some(m.status == RunStatus::Complete)
}

/// Run (or resume) an experiment into `opts.out`.
pub fn run(
    resolved: &Resolved,
    opts: &RunOptions,
    observer: &dyn Observer,
) -> Result<RunSummary, RunError> {
    let t0 = Instant::now();
    let started_unix_s = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0);
    let inputs = input_files(resolved)?;
    let hash = identity_hash(resolved, &inputs);
    let settings = settings_hash(resolved);
    let plan = Plan::new(resolved, opts.shard)?;
    let base_dir = resolved
        .file
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_default();

    // Everything that can fail on the inputs is checked before the folder is touched: the
    // dataset and training of every point are prepared first.
    let mut prepared: Vec<(usize, std::sync::Arc<Prepared>)> = Vec::new();
    let mut cache: Vec<(String, std::sync::Arc<Prepared>)> = Vec::new();
    // Which trainer made each point's weights (hardware-aware: its convergence).
    let mut trainers: Vec<HardwareTraining> = Vec::new();
    for (k, e) in resolved.at_point.iter().enumerate() {
        // Training depends on the dataset and training sections; with a hidden stage also on
        // the weight stage that shapes the hidden shares.
        let key = format!(
            "{}|{}|{}",
            toml::to_string(&e.dataset).unwrap_or_default(),
            toml::to_string(&e.training).unwrap_or_default(),
            if e.hidden.units > 0 {
                format!(
                    "{}|{}|{}",
                    toml::to_string(&e.hidden).unwrap_or_default(),
                    toml::to_string(&e.weights).unwrap_or_default(),
                    toml::to_string(&e.input).unwrap_or_default()
                )
            } else {
                String::new()
            }
        );
        // Hardware-aware training trains through the point's whole design (gain, element,
        // mismatch): keyed by the whole point, so a point never reuses another's weights.
        let key = if e.training.is_hardware_aware() {
            format!("{key}|{}", toml::to_string(e).unwrap_or_default())
        } else {
            key
        };
        let prep = match cache.iter().find(|(ck, _)| *ck == key) {
            Some((_, p)) => p.clone(),
            None => {
                let (p, trained) =
                    prepare_data_trained(e, &base_dir).map_err(|m| RunError::Point {
                        point: k,
                        settings: resolved.describe_point(&resolved.points[k]),
                        message: m.to_string(),
                    })?;
                if let Some(t) = trained {
                    let d = &t.diagnostics;
                    trainers.push(HardwareTraining {
                        point: k as u64,
                        trainer: "hardware_aware".into(),
                        epochs: t.epochs_run as u64,
                        steps: t.steps,
                        objective: d.objective,
                        gradient_norm: d.gradient_norm,
                        converged: d.converged,
                        termination: t.termination.as_str().into(),
                        window_decrease: t.window_decrease,
                        hidden_trained: e
                            .training
                            .hardware
                            .as_ref()
                            .is_some_and(|h| h.train_hidden),
                    });
                }
                let p = std::sync::Arc::new(p);
                cache.push((key, p.clone()));
                p
            }
        };
        prepared.push((k, prep));
    }
    let setups = resolved
        .at_point
        .iter()
        .enumerate()
        .map(|(k, e)| {
            build_point(e, &prepared[k].1).map_err(|m| RunError::Point {
                point: k,
                settings: resolved.describe_point(&resolved.points[k]),
                message: m.to_string(),
            })
        })
        .collect::<Result<Vec<_>, _>>()?;

    if !opts.fresh {
        let old = std::fs::read_to_string(opts.out.join(super::results::STAMP_FILE)).ok();
        if old.is_some_and(|h| h.trim() != plan.stamp(&hash)) {
            if let Some(changed) = changed_inputs(&opts.out, &inputs) {
                let same_settings = Manifest::read(&opts.out.join("manifest.json"))
                    .ok()
                    .and_then(|m| m.settings_hash)
                    .is_some_and(|s| s == settings);
                if same_settings {
                    return Err(RunError::InputChanged {
                        out: opts.out.clone(),
                        changed,
                    });
                }
            }
        }
    }
    let mut warnings = resolved.warnings.clone();
    for (k, setup) in setups.iter().enumerate() {
        if let Some(w) = hysteretic_feedback_warning(setup, &prepared[k].1) {
            let w = format!("point {k}: {w}");
            warnings.push(w);
        }
    }
    for (_, p) in &prepared {
        for u in &p.untested_classes {
            let w = format!(
                "class `{}` ({} sample(s)) has no sample in the test split: accuracy leaves it out (allowed by dataset.allow_untested_classes)",
                u.class, u.count
            );
            if !warnings.contains(&w) {
                warnings.push(w);
            }
        }
    }
    let (dir, _resumed) = ResultsDir::open(&opts.out, &plan.stamp(&hash), opts.fresh)?;
    write_atomic(
        &opts.out.join("experiment.toml"),
        resolved.to_toml().as_bytes(),
    )
    .map_err(ResultsError::from)?;
    let mut records: Vec<PointRecord> = dir
        .load_points()
        .into_iter()
        .filter(|r| r.point < resolved.points.len())
        .collect();
    let resumed = records.len();
    let axis_paths: Vec<String> = resolved.axes.iter().map(|a| a.path.clone()).collect();
    let class_names = prepared
        .first()
        .map(|(_, p)| p.class_names.clone())
        .unwrap_or_default();
    let base = &resolved.base;
    let chips = base.population.chips;
    let seed = base.population.seed;
    let paired = base.population.pairing == super::config::PairingKind::Paired;
    let z = normal_quantile_two_sided(base.target.confidence);

    let pool = {
        let mut b = rayon::ThreadPoolBuilder::new();
        if let Some(t) = opts.threads {
            b = b.num_threads(t.max(1));
        }
        b.build().map_err(|e| RunError::Threads {
            threads: opts.threads.unwrap_or(0),
            message: e.to_string(),
        })?
    };
    let threads = pool.current_num_threads();

    let manifest = |records: &[PointRecord], complete: bool| {
        Manifest {
            format: FORMAT_NAME.into(),
            format_version: u64::from(FORMAT_VERSION),
            tool_version: env!("CARGO_PKG_VERSION").into(),
            experiment_name: base.name.clone(),
            description: base.description.clone(),
            experiment_hash: hash.clone(),
            settings_hash: Some(settings.clone()),
            inputs: inputs.clone(),
            warnings: warnings.clone(),
            seed,
            status: if complete {
                RunStatus::Complete
            } else {
                RunStatus::Partial
            },
            points_total: resolved.points.len() as u64,
            points_done: records.len() as u64,
            chips_per_point: chips,
            target_accuracy: base.target.accuracy,
            target_yield: Some(base.target.yield_target),
            pairing: Some(if paired {
                Pairing::Paired
            } else {
                Pairing::Independent
            }),
            threads: threads as u64,
            transient: base.competition.evaluation == super::config::EvaluationKind::Transient,
            dataset: prepared
                .first()
                .map(|(_, p)| DatasetInfo {
                    name: p.dataset_name.clone(),
                    classes: p.class_names.clone(),
                    features: p.n_features as u64,
                    train_samples: p.n_train as u64,
                    test_samples: p.test_y.len() as u64,
                })
                .unwrap_or_default(),
            competition: describe_over_points(
                &setups.iter().map(|s| s.describe()).collect::<Vec<_>>(),
            ),
            sweep: Sweep {
                mode: match base.sweep.combine {
                    super::sweep::Combine::Grid => SweepMode::Grid,
                    super::sweep::Combine::Zip => SweepMode::Zip,
                },
                parameters: resolved
                    .axes
                    .iter()
                    .map(|a| SweepParameter {
                        path: a.path.clone(),
                        unit: a.unit.clone(),
                        scale: a.spacing,
                        values: a.values.clone(),
                        labels: a.labels.clone(),
                    })
                    .collect(),
            },
            command: opts.command.clone(),
            host: HostInfo::this_machine(),
            started_unix_s,
            elapsed_s: t0.elapsed().as_secs_f64(),
            shard: plan.manifest_entry(),
            merged_from: None,
            trainer: (!trainers.is_empty()).then(|| TrainerInfo {
                per_point: resolved
                    .at_point
                    .iter()
                    .map(|e| {
                        if e.training.is_hardware_aware() {
                            "hardware_aware".to_string()
                        } else {
                            "float".to_string()
                        }
                    })
                    .collect(),
                hardware_aware: trainers.clone(),
            }),
            programming: resolved
                .at_point
                .iter()
                .find_map(super::build::program_verify)
                .map(|v| crate::format::ProgrammingInfo {
                    method: "program_and_verify".into(),
                    tolerance: v.tolerance,
                    max_cycles: u64::from(v.max_cycles),
                    read_noise: v.read_noise,
                    cycle_time_s: v.cycle_time_s,
                }),
        }
        .write(&opts.out.join("manifest.json"))
    };
    let plan_points = plan.points().len();
    manifest(&records, records.len() == plan_points).map_err(ResultsError::from)?;
    for w in &warnings {
        observer.warning(w);
    }
    plan.announce(observer, &records);

    let mut ran = 0;
    for p in &resolved.points {
        let my_chips = plan.chips_of(p.point);
        if my_chips.is_empty() || records.iter().any(|r| r.point == p.point) {
            continue;
        }
        if observer.should_stop() {
            return Err(RunError::Stopped {
                done: records.len(),
                total: plan_points,
            });
        }
        let tp = Instant::now();
        let prep = &prepared[p.point].1;
        let setup = &setups[p.point];
        let params: Vec<f64> = resolved
            .axes
            .iter()
            .zip(&p.value_index)
            .map(|(a, &i)| a.values[i])
            .collect();
        let n_classes = prep.class_names.len();
        let mut confusion = vec![vec![0u64; n_classes + 2]; n_classes];
        let mut first_failure = None;
        let mut stats = ChipStats::default();
        let first_chip = my_chips.start;
        // Chips are evaluated in parallel a batch at a time and streamed to the point's chip
        // file in chip order: the batch (threads x CHIPS_PER_THREAD chips) is the reorder
        // buffer, so memory does not grow with the number of chips and the file's bytes do not
        // depend on the thread count. The file becomes visible only when the point is finished.
        let mut chip_file = dir.stream_chips(p.point)?;
        let batch = (threads as u64 * CHIPS_PER_THREAD).max(1);
        let mut next = my_chips.start;
        while next < my_chips.end {
            let these = next..(next + batch).min(my_chips.end);
            next = these.end;
            // A stop request during a point abandons that point (it is not saved; the finished
            // ones are on disk) instead of waiting for every chip.
            let outcomes = pool.install(|| {
                these
                    .into_par_iter()
                    .map(|c| {
                        if observer.should_stop() {
                            return None;
                        }
                        let dies = if paired {
                            Dies::Paired
                        } else {
                            Dies::Independent {
                                // With corners: the design point's dies at each of its corners.
                                point: super::corners::die_point(resolved, p.point) as u64,
                            }
                        };
                        let o = evaluate_chip(setup, prep, seed, dies, c);
                        observer.chip_done();
                        Some(o)
                    })
                    .collect::<Option<Vec<_>>>()
            });
            let Some(outcomes) = outcomes else {
                return Err(RunError::Stopped {
                    done: records.len(),
                    total: plan_points,
                });
            };
            if first_failure.is_none() {
                first_failure = outcomes
                    .iter()
                    .find_map(|o| o.chip_error.clone().or_else(|| o.first_failure.clone()));
            }
            let mut rows = Vec::with_capacity(outcomes.len());
            for o in outcomes {
                for (t, row) in o.confusion.iter().enumerate() {
                    for (j, &c) in row.iter().enumerate() {
                        confusion[t][j] += c;
                    }
                }
                let row = ChipRow {
                    chip: o.chip,
                    accuracy: o.accuracy(),
                    agreement: o.agreement(),
                    ambiguous: o.ambiguous,
                    nonconverged: o.failed.total(),
                    failed: o.failed,
                    samples: o.samples,
                    decision_time_mean_s: (o.timed > 0)
                        .then(|| o.decision_time_sum / o.timed as f64),
                    energy_mean_j: (o.timed > 0).then(|| o.energy_sum / o.timed as f64),
                    programming: o.programming.map(|c| chip_programming(&c, setup)),
                };
                stats.push(&row);
                rows.push(row);
            }
            chip_file
                .write(&chip_rows_csv(p.point, &params, &rows))
                .map_err(ResultsError::from)?;
        }
        chip_file.commit().map_err(ResultsError::from)?;
        let e = &resolved.at_point[p.point];
        let cost =
            point_cost(setup, prep, &mean_input(&prep.test_u), &cost_settings(e)).map_err(|m| {
                RunError::Point {
                    point: p.point,
                    settings: resolved.describe_point(p),
                    message: format!("cost.{m}"),
                }
            })?;
        let rec = PointRecord {
            point: p.point,
            params,
            first_chip,
            stats,
            confusion,
            ideal_acc: prep.ideal_acc,
            baseline_acc: prep.baseline_acc,
            target: resolved.at_point[p.point].target.accuracy,
            z,
            elapsed_s: tp.elapsed().as_secs_f64(),
            first_failure,
            yield_target: Some(e.target.yield_target),
            cost: Some(crate::answers::PointCost {
                gate_area_m2: cost.gate_area_m2,
                area_m2: cost.area_m2,
                supply_current_a: cost.supply_current_a,
                power_w: cost.power_w,
                read_out_time_s: e.cost.read_out_time.si(),
            }),
            paired,
        };
        dir.save_point(&rec)?;
        let s = rec.summary();
        let failure_note = rec
            .first_failure
            .as_ref()
            .map(|f| format!("\n    first failed decision: {f}"))
            .unwrap_or_default();
        records.push(rec);
        records.sort_by_key(|r| r.point);
        // A shard's tables would hold statistics of part of a population: merged ones only.
        if !plan.is_shard() {
            dir.write_tables(&records, &axis_paths, &class_names)?;
            write_corners(resolved, &opts.out, &records, &axis_paths)?;
        }
        manifest(&records, records.len() == plan_points).map_err(ResultsError::from)?;
        ran += 1;
        observer.point_done(
            p.point,
            &(format!(
                "point {}/{} [{}] accuracy mean {:.4} (p05 {:.4}), yield {:.3} [{:.3}, {:.3}], {} non-converged, {:.1} s",
                p.point + 1,
                resolved.points.len(),
                resolved.describe_point(p),
                s.acc_mean,
                s.acc_p05,
                s.yield_,
                s.yield_lo,
                s.yield_hi,
                s.nonconverged,
                tp.elapsed().as_secs_f64()
            ) + &plan.part_note(p.point)
                + &failure_note),
        );
    }
    // Tables also exist when every point was resumed (a run that ran a point wrote them).
    if ran == 0 && !plan.is_shard() {
        dir.write_tables(&records, &axis_paths, &class_names)?;
        write_corners(resolved, &opts.out, &records, &axis_paths)?;
    }
    manifest(&records, true).map_err(ResultsError::from)?;
    Ok(RunSummary {
        out: opts.out.clone(),
        points_total: resolved.points.len(),
        points_run: ran,
        points_resumed: resumed,
        elapsed_s: t0.elapsed().as_secs_f64(),
        records,
    })
}

/// `corners.csv` of a run with corners (nothing otherwise).
fn write_corners(
    resolved: &Resolved,
    out: &Path,
    records: &[PointRecord],
    axis_paths: &[String],
) -> Result<(), RunError> {
    let Some(labels) = resolved
        .axes
        .last()
        .filter(|a| a.path == super::corners::CORNER_AXIS)
        .and_then(|a| a.labels.as_ref())
    else {
        return Ok(());
    };
    hardmax_report::corners::write_corners_table(out, records, axis_paths, labels)
        .map_err(ResultsError::from)?;
    Ok(())
}

/// One description of the competition stage for every sweep point: a part that differs between
/// points (a swept size or bias) is shown as its range over the sweep, "sink 1 µm ... 8 µm
/// (swept) x 1 µm", never as the first point's value alone. Parts are compared word by word
/// within each comma-separated field; the range runs from the first point's words to the last
/// point's.
pub fn describe_over_points(descriptions: &[String]) -> String {
    let (Some(first), Some(last)) = (descriptions.first(), descriptions.last()) else {
        return String::new();
    };
    if descriptions.iter().all(|d| d == first) {
        return first.clone();
    }
    let split = |d: &str| d.split(", ").map(str::to_string).collect::<Vec<_>>();
    let fields: Vec<Vec<String>> = descriptions.iter().map(|d| split(d)).collect();
    let n = fields[0].len();
    if fields.iter().any(|f| f.len() != n) {
        return format!("{first} ... {last} (swept)");
    }
    let mut out = Vec::with_capacity(n);
    for j in 0..n {
        let a = &fields[0][j];
        let b = &fields[fields.len() - 1][j];
        if fields.iter().all(|f| &f[j] == a) {
            out.push(a.clone());
            continue;
        }
        let (wa, wb): (Vec<&str>, Vec<&str>) = (a.split(' ').collect(), b.split(' ').collect());
        // Words that differ anywhere in the sweep (not only between first and last).
        let all: Vec<Vec<&str>> = fields.iter().map(|f| f[j].split(' ').collect()).collect();
        if all.iter().any(|w| w.len() != wa.len()) || wa.len() != wb.len() {
            out.push(format!("{a} ... {b} (swept)"));
            continue;
        }
        let differs = |k: usize| all.iter().any(|w| w[k] != wa[k]);
        let lo = (0..wa.len()).find(|&k| differs(k)).unwrap_or(0);
        let hi = (0..wa.len()).rev().find(|&k| differs(k)).unwrap_or(lo);
        // Keep a number's unit with it ("1 µm", not "1").
        let hi = if hi + 1 < wa.len() && wa[hi].parse::<f64>().is_ok() {
            hi + 1
        } else {
            hi
        };
        let mut words: Vec<String> = wa[..lo].iter().map(|w| w.to_string()).collect();
        words.push(format!(
            "{} ... {} (swept)",
            wa[lo..=hi].join(" "),
            wb[lo..=hi].join(" ")
        ));
        words.extend(wa[hi + 1..].iter().map(|w| w.to_string()));
        out.push(words.join(" "));
    }
    out.join(", ")
}

/// Two-sided normal quantile for a confidence level (0.95 -> 1.959964), by bisection on the
/// complementary error function (Abramowitz & Stegun 7.1.26 rational approximation of erf,
/// |error| < 1.5e-7, is enough for interval widths).
pub fn normal_quantile_two_sided(confidence: f64) -> f64 {
    fn erf(x: f64) -> f64 {
        let t = 1.0 / (1.0 + 0.327_591_1 * x.abs());
        let y = 1.0
            - (((((1.061_405_429 * t - 1.453_152_027) * t) + 1.421_413_741) * t - 0.284_496_736)
                * t
                + 0.254_829_592)
                * t
                * (-x * x).exp();
        if x >= 0.0 {
            y
        } else {
            -y
        }
    }
    let target = confidence.clamp(1e-9, 1.0 - 1e-12);
    let (mut lo, mut hi) = (0.0f64, 10.0f64);
    for _ in 0..100 {
        let mid = 0.5 * (lo + hi);
        if erf(mid / std::f64::consts::SQRT_2) < target {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Ratio of a hysteretic WTA's feedback current (alpha I_b, what the winner's input is helped
/// by) to its inputs at and above which a held winner can no longer be released: the up
/// switching point of the hysteresis, x_up ~ alpha I_b for large gain (DEVELOPERS.md model notes
/// §4.5, W ~ 2 alpha I_b), lies at or beyond 2 I_m, the largest difference two inputs of mean
/// I_m can have (x runs from -2 I_m to 2 I_m there). Derived from the model notes' hysteresis
/// width, not a rule of thumb.
pub const FEEDBACK_RATIO_LIMIT: f64 = 2.0;

/// The warning for a hysteretic WTA whose feedback current `alpha bias` dwarfs the inputs of
/// mean `mean_input` (`what` says which mean), or `None`.
pub fn feedback_warning(alpha: f64, bias: f64, mean_input: f64, what: &str) -> Option<String> {
    let ratio = alpha * bias / mean_input;
    (ratio.is_finite() && ratio >= FEEDBACK_RATIO_LIMIT).then(|| {
        format!(
            "hysteretic WTA: the feedback current alpha I_b = {} is {ratio:.3} times {what} ({}); \
             at or above {FEEDBACK_RATIO_LIMIT} a held winner is never released by any input \
             (its hysteresis, about 2 alpha I_b wide, exceeds the largest possible input \
             difference, 2 I_m: model notes §4.5), so the circuit ignores its inputs; lower \
             competition.feedback or competition.bias_current",
            crate::units::format_si(alpha * bias, "A", 4),
            crate::units::format_si(mean_input, "A", 4)
        )
    })
}

/// [`feedback_warning`] for one point of a run: the mean input is the nominal weight stage's
/// mean output line current at the training split's mean input (the scale trim calibrates to).
fn hysteretic_feedback_warning(
    setup: &crate::pipeline::PointSetup,
    prep: &Prepared,
) -> Option<String> {
    let crate::pipeline::CompetitionDesign::Hysteretic(h) = &setup.design.competition else {
        return None;
    };
    let nominal = setup.mapped.nominal_levels();
    let mut scratch = nominal.scratch();
    let mut out = vec![0.0; nominal.outputs()];
    let x: Vec<f64> = (0..prep.n_features)
        .map(|i| prep.train_mean_u.get(i).copied().unwrap_or(0.0))
        .collect();
    nominal.forward_noiseless(&x, &mut scratch, &mut out).ok()?;
    let mean = out.iter().sum::<f64>() / out.len().max(1) as f64;
    // The bias as the circuit draws it (an ideal source or a biased transistor).
    let c = crate::stages::competition::HysteresisChip::nominal((**h).clone())
        .ok()?
        .at(setup.design.conditions.temperature_k)
        .ok()?;
    let bias = c.wta.bias().current_at(c.wta.supply);
    feedback_warning(
        h.feedback,
        bias,
        mean,
        "the mean competition input (nominal weight stage at the training split's mean input)",
    )
}

/// A die's program-and-verify cost as a `chips.csv` row holds it: programming time = cycles x
/// the setting's cycle time.
fn chip_programming(
    c: &crate::stages::weights::ProgramCounts,
    setup: &crate::pipeline::PointSetup,
) -> crate::format::ChipProgramming {
    let cycle_time = setup.program_verify.map_or(0.0, |v| v.cycle_time_s);
    crate::format::ChipProgramming {
        elements: c.elements,
        cycles: c.cycles,
        unverified: c.unverified,
        time_s: c.cycles as f64 * cycle_time,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Standard normal two-sided quantiles (Abramowitz & Stegun, Table 26.1): 95 % -> 1.959964,
    /// 99 % -> 2.575829, 90 % -> 1.644854.
    /// The report header describes the design over the whole sweep: a swept size shows as its
    /// range, fixed parts once.
    #[test]
    fn swept_values_show_as_their_range() {
        let d = |w: &str| {
            format!(
                "current-mode WTA, 3 cells, sink {w} x 1 µm, output 2 µm x 2 µm, ideal bias 10 nA"
            )
        };
        let all = [d("1 µm"), d("2 µm"), d("8 µm")];
        assert_eq!(
            describe_over_points(&all),
            "current-mode WTA, 3 cells, sink 1 µm ... 8 µm (swept) x 1 µm, output 2 µm x 2 µm, ideal bias 10 nA"
        );
        assert_eq!(describe_over_points(&[d("1 µm")]), d("1 µm"));
        assert_eq!(describe_over_points(&[]), "");
    }

    #[test]
    fn normal_quantiles() {
        assert!((normal_quantile_two_sided(0.95) - 1.959964).abs() < 1e-5);
        assert!((normal_quantile_two_sided(0.99) - 2.575829).abs() < 1e-5);
        assert!((normal_quantile_two_sided(0.90) - 1.644854).abs() < 1e-5);
    }
}
