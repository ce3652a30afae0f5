//! The results folder: per-point records (the unit of resume), tidy CSV tables, the manifest.
//!
//! Every finished sweep point is saved at once as `points/point-NNNNNN.json` (atomic write).
//! The CSV tables are regenerated from all saved records after each point, so an interrupted
//! run keeps every finished point, and a resumed run ends with the same files as an
//! uninterrupted one. Layout and columns: DEVELOPERS.md, "Results folder".

use std::fs;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use super::stats::{wilson_interval, ValueCounts};
use crate::io::{write_atomic, StreamFile};
// One definition of the format (row type, columns, version), shared with the reader in `report`.
use crate::format::{
    ChipProgramming, CHIP_COLUMNS, CONFUSION_COLUMNS, FAILURE_COLUMNS, POINT_STAT_COLUMNS,
    PROGRAM_CHIP_COLUMNS, PROGRAM_POINT_COLUMNS,
};
pub use crate::format::{ChipRow, FORMAT_NAME, FORMAT_VERSION};
use hardmax_core::pipeline::{FailureCounts, FailureKind};

/// Everything recorded for one finished sweep point.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PointRecord {
    pub point: usize,
    /// One value per sweep axis, SI base units, in axis order.
    pub params: Vec<f64>,
    /// Index of the first chip of the record (0 for a whole point; a shard's part of a point
    /// starts later). The chips are contiguous from here; their rows are in the point's chip
    /// file (`points/point-NNNNNN.chips.csv`), not in the record.
    #[serde(default)]
    pub first_chip: u64,
    /// The chips' statistics, accumulated online in chip order.
    pub stats: ChipStats,
    /// Confusion counts summed over chips: `confusion[true][pred]`, with two extra predicted
    /// columns: ambiguous, then non-converged.
    pub confusion: Vec<Vec<u64>>,
    pub ideal_acc: f64,
    pub baseline_acc: f64,
    pub target: f64,
    /// Normal quantile for the yield interval (1.96 for 95 %).
    pub z: f64,
    pub elapsed_s: f64,
    /// Why the first failed decision (in chip order) failed, if any decision failed.
    #[serde(default)]
    pub first_failure: Option<String>,
    /// Yield target of the pass rule (`crate::answers`), if the experiment gives one.
    #[serde(default)]
    pub yield_target: Option<f64>,
    /// What the design point costs.
    #[serde(default)]
    pub cost: Option<crate::answers::PointCost>,
    /// Chip c is the same die at every sweep point (paired differences).
    #[serde(default)]
    pub paired: bool,
}

/// Statistics of a point's chips, accumulated one chip at a time in chip order. What a point
/// keeps of its chips in memory does not grow with the number of dies: a few sums and counts,
/// and exact counts of the distinct accuracy values (at most one per possible number of
/// correct test decisions), from which the percentiles and the yield follow exactly. The sums
/// are plain sequential sums in chip order, the order `chips.csv` lists the chips in, so the
/// statistics do not depend on the thread count or on how a run was sharded. What needs the
/// dies in chip order (the paired differences between points) reads the point's chip file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ChipStats {
    /// How many dies have each accuracy value (exact; bounded by the test split's size).
    pub accuracy_counts: ValueCounts,
    pub agreement_sum: f64,
    pub samples: u64,
    pub ambiguous: u64,
    pub nonconverged: u64,
    #[serde(default)]
    pub failed: FailureCounts,
    /// Sum and count of the chips' mean decision times (transient only).
    pub decision_time_sum_s: f64,
    pub decision_time_chips: u64,
    /// Sum and count of the chips' mean energies per decision (transient only).
    pub energy_sum_j: f64,
    pub energy_chips: u64,
    /// Program-and-verify sums over the chips (absent without `[programming]`, so other
    /// records keep their bytes).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub programming: Option<ProgramSums>,
}

/// Program-and-verify cost summed over a point's chips, in chip order.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct ProgramSums {
    pub chips: u64,
    pub elements: u64,
    pub cycles: u64,
    pub unverified: u64,
    pub time_sum_s: f64,
}

impl Default for ChipStats {
    fn default() -> Self {
        // Sums start at -0.0, the neutral element of f64 addition (and `Iterator::sum`'s start).
        ChipStats {
            accuracy_counts: ValueCounts::default(),
            agreement_sum: -0.0,
            samples: 0,
            ambiguous: 0,
            nonconverged: 0,
            failed: FailureCounts::default(),
            decision_time_sum_s: -0.0,
            decision_time_chips: 0,
            energy_sum_j: -0.0,
            energy_chips: 0,
            programming: None,
        }
    }
}

impl ChipStats {
    /// Add the next chip (in chip order).
    pub fn push(&mut self, c: &ChipRow) {
        self.accuracy_counts.add(c.accuracy);
        self.agreement_sum += c.agreement;
        self.samples += c.samples;
        self.ambiguous += c.ambiguous;
        self.nonconverged += c.nonconverged;
        self.failed.merge(&c.failed);
        if let Some(t) = c.decision_time_mean_s {
            self.decision_time_sum_s += t;
            self.decision_time_chips += 1;
        }
        if let Some(e) = c.energy_mean_j {
            self.energy_sum_j += e;
            self.energy_chips += 1;
        }
        if let Some(p) = &c.programming {
            let s = self.programming.get_or_insert(ProgramSums {
                chips: 0,
                elements: 0,
                cycles: 0,
                unverified: 0,
                time_sum_s: -0.0,
            });
            s.chips += 1;
            s.elements += p.elements;
            s.cycles += p.cycles;
            s.unverified += p.unverified;
            s.time_sum_s += p.time_s;
        }
    }

    /// The statistics of `rows`, in their order.
    pub fn of<'a>(rows: impl IntoIterator<Item = &'a ChipRow>) -> ChipStats {
        let mut s = ChipStats::default();
        for r in rows {
            s.push(r);
        }
        s
    }

    /// Number of chips.
    pub fn chips(&self) -> usize {
        self.accuracy_counts.total() as usize
    }
}

/// Population statistics of one point (a `points.csv` row).
#[derive(Clone, Debug, PartialEq)]
pub struct PointSummary {
    pub chips: usize,
    pub samples: u64,
    pub acc_mean: f64,
    pub acc_std: f64,
    pub acc_p05: f64,
    pub acc_p50: f64,
    pub acc_p95: f64,
    pub yield_: f64,
    pub yield_lo: f64,
    pub yield_hi: f64,
    pub agreement_mean: f64,
    pub ambiguous_frac: f64,
    pub nonconverged: u64,
    /// Failed decisions by kind, summed over chips.
    pub failed: FailureCounts,
    pub decision_time_mean_s: Option<f64>,
    pub energy_mean_j: Option<f64>,
    /// Program-and-verify: cycles per element, unverified share of the elements, mean
    /// programming time of a die (absent without `[programming]`).
    pub programming: Option<[f64; 3]>,
}

impl PointRecord {
    /// Population statistics of this point. Yield = share of chips whose accuracy meets the
    /// target, with a Wilson score interval (Wilson 1927).
    pub fn summary(&self) -> PointSummary {
        let st = &self.stats;
        let s = st.accuracy_counts.summary();
        let pass = st.accuracy_counts.at_least(self.target - 1e-12);
        let n = st.accuracy_counts.total();
        let (lo, hi) = wilson_interval(pass, n, self.z);
        let mean = |sum: f64, k: u64| (k > 0).then(|| sum / k as f64);
        PointSummary {
            chips: n as usize,
            samples: st.samples,
            acc_mean: s.as_ref().map_or(f64::NAN, |s| s.mean),
            acc_std: s.as_ref().map_or(f64::NAN, |s| s.std),
            acc_p05: s.as_ref().map_or(f64::NAN, |s| s.p05),
            acc_p50: s.as_ref().map_or(f64::NAN, |s| s.p50),
            acc_p95: s.as_ref().map_or(f64::NAN, |s| s.p95),
            yield_: if n == 0 {
                f64::NAN
            } else {
                pass as f64 / n as f64
            },
            yield_lo: lo,
            yield_hi: hi,
            agreement_mean: if n == 0 {
                f64::NAN
            } else {
                st.agreement_sum / n as f64
            },
            ambiguous_frac: if st.samples == 0 {
                0.0
            } else {
                st.ambiguous as f64 / st.samples as f64
            },
            nonconverged: st.nonconverged,
            failed: st.failed,
            decision_time_mean_s: mean(st.decision_time_sum_s, st.decision_time_chips),
            energy_mean_j: mean(st.energy_sum_j, st.energy_chips),
            programming: st.programming.map(|p| {
                let per = |x: u64| {
                    if p.elements == 0 {
                        f64::NAN
                    } else {
                        x as f64 / p.elements as f64
                    }
                };
                [
                    per(p.cycles),
                    per(p.unverified),
                    mean(p.time_sum_s, p.chips).unwrap_or(f64::NAN),
                ]
            }),
        }
    }

    /// The chip indices of this record: `first_chip ..` one per chip.
    pub fn chip_range(&self) -> std::ops::Range<u64> {
        self.first_chip..self.first_chip + self.stats.chips() as u64
    }
}

/// Errors of the results folder; each names the path and says what to do.
#[derive(Debug, thiserror::Error)]
pub enum ResultsError {
    #[error("output folder `{0}` cannot be created or written: {1}. Choose another folder with --out or fix its permissions")]
    NotWritable(PathBuf, std::io::Error),
    #[error("output folder `{0}` already holds results of a different experiment (or tool version); nothing was changed. Use another --out folder, or --fresh to replace them")]
    OtherExperiment(PathBuf),
    #[error("output folder `{0}` is not empty and is not a hardmax results folder; nothing was changed. Use another --out folder")]
    Foreign(PathBuf),
    #[error("cannot read `{0}`: {1}")]
    Read(PathBuf, String),
    #[error(transparent)]
    Write(#[from] crate::io::AtomicWriteError),
}

/// Name of the file that marks a folder as ours and records which experiment it holds.
pub const STAMP_FILE: &str = "experiment.hash";

fn dir_is_empty(p: &Path) -> bool {
    fs::read_dir(p).is_ok_and(|mut rd| rd.next().is_none())
}

/// Does `root` hold only what a run killed before its stamp was written leaves: an empty
/// `points/` and temporary files of [`crate::io::write_atomic`]?
fn only_an_abandoned_start(root: &Path) -> bool {
    let Ok(rd) = fs::read_dir(root) else {
        return false;
    };
    rd.flatten().all(|e| {
        let name = e.file_name().to_string_lossy().into_owned();
        (name == "points" && dir_is_empty(&e.path())) || crate::io::is_temp_name(&name)
    })
}

/// A results folder being written.
#[derive(Debug, Default)]
pub struct ResultsDir {
    pub root: PathBuf,
    /// Differences between two points already computed from their chip files (which never
    /// change once committed), keyed by both points' chips: tables rewritten after every point
    /// read each pair's chip files once per run, not once per point.
    diff_cache: std::sync::Mutex<DiffCache>,
}

type DiffKey = (usize, u64, u64, usize, u64, u64);
type DiffCache = std::collections::HashMap<DiffKey, Option<crate::answers::Difference>>;

impl ResultsDir {
    /// Open `root` for an experiment with hash `hash`. A folder with the same hash resumes; a
    /// missing or empty folder starts fresh; a folder of another experiment is refused unless
    /// `fresh` (then its old records are removed). Nothing is touched before these checks pass.
    ///
    /// Temporary files of writers that are gone (a killed run) are removed from the folder,
    /// `points/`, `plots/` and `transfer/` first. A folder that holds nothing but what a run
    /// killed during its very first write leaves (an empty `points/`, temporary files) starts
    /// over.
    pub fn open(root: &Path, hash: &str, fresh: bool) -> Result<(Self, bool), ResultsError> {
        let stamp = root.join(STAMP_FILE);
        let mut resumed = false;
        if root.exists() {
            let old = fs::read_to_string(&stamp).ok();
            if old.is_some() || only_an_abandoned_start(root) {
                for sub in ["", "points", "chips", "plots", "transfer"] {
                    crate::io::remove_stale_temps(&root.join(sub));
                }
            }
            let non_empty = fs::read_dir(root)
                .map_err(|e| ResultsError::NotWritable(root.into(), e))?
                .flatten()
                .any(|e| !(e.file_name() == "points" && dir_is_empty(&e.path())));
            match old {
                Some(h) if h.trim() == hash && !fresh => resumed = true,
                Some(_) if fresh => {
                    let _ = fs::remove_dir_all(root.join("points"));
                    let _ = fs::remove_dir_all(root.join("chips"));
                }
                Some(_) => return Err(ResultsError::OtherExperiment(root.into())),
                None if non_empty => return Err(ResultsError::Foreign(root.into())),
                None => {}
            }
        }
        fs::create_dir_all(root.join("points"))
            .map_err(|e| ResultsError::NotWritable(root.into(), e))?;
        write_atomic(&stamp, hash.as_bytes())?;
        Ok((Self::at(root), resumed))
    }

    /// The folder at `root`, as it is (no check, nothing written): for reading and for code
    /// that has checked the folder itself.
    pub fn at(root: &Path) -> Self {
        Self {
            root: root.into(),
            diff_cache: Default::default(),
        }
    }

    /// The accuracies of `rec`'s chips, read one line at a time from its chip file, in chip
    /// order (memory does not grow with the number of chips).
    pub fn chip_accuracies(&self, rec: &PointRecord) -> crate::answers::AccuracyStream<'static> {
        use std::io::BufRead;
        let path = self.chips_path(rec.point);
        let n_params = rec.params.len();
        let file = match fs::File::open(&path) {
            Ok(f) => f,
            Err(e) => {
                let msg = format!("cannot read `{}`: {e}", path.display());
                return Box::new(std::iter::once(Err(msg)));
            }
        };
        let lines = std::io::BufReader::with_capacity(1 << 16, file).lines();
        Box::new(lines.enumerate().map(move |(i, l)| {
            let line = l.map_err(|e| format!("cannot read `{}`: {e}", path.display()))?;
            parse_chip_line(&line, n_params)
                .map(|c| c.accuracy)
                .ok_or_else(|| {
                    format!(
                        "`{}` line {} is not a chip row; delete the file and its point record to recompute the point",
                        path.display(),
                        i + 1
                    )
                })
        }))
    }

    /// The differences between adjacent points of `records` (sorted by point), each pair's
    /// accuracies streamed from the chip files (cached per pair).
    pub fn differences(
        &self,
        records: &[PointRecord],
    ) -> Result<Vec<crate::answers::Difference>, ResultsError> {
        let mut out = Vec::new();
        for w in records.windows(2) {
            let [a, b] = w else { continue };
            let key = (
                a.point,
                a.first_chip,
                a.stats.chips() as u64,
                b.point,
                b.first_chip,
                b.stats.chips() as u64,
            );
            let cached = self
                .diff_cache
                .lock()
                .ok()
                .and_then(|c| c.get(&key).cloned());
            let d = match cached {
                Some(d) => d,
                None => {
                    let d = crate::answers::difference(a, b, b.paired, b.z, &|r| {
                        self.chip_accuracies(r)
                    })
                    .map_err(|e| ResultsError::Read(self.chips_path(b.point), e))?;
                    if let Ok(mut c) = self.diff_cache.lock() {
                        c.insert(key, d.clone());
                    }
                    d
                }
            };
            out.extend(d);
        }
        Ok(out)
    }

    fn point_path(&self, point: usize) -> PathBuf {
        self.root
            .join("points")
            .join(format!("point-{point:06}.json"))
    }

    /// The chip file of `point`: its `chips.csv` rows (no header), in chip order
    /// (`chips/point-NNNNNN.csv`).
    pub fn chips_path(&self, point: usize) -> PathBuf {
        self.root
            .join("chips")
            .join(format!("point-{point:06}.csv"))
    }

    /// Start streaming the chip file of `point` (visible only once committed; the temporary
    /// file is in the same folder).
    pub fn stream_chips(&self, point: usize) -> Result<StreamFile, ResultsError> {
        fs::create_dir_all(self.root.join("chips"))
            .map_err(|e| ResultsError::NotWritable(self.root.clone(), e))?;
        Ok(StreamFile::create(&self.chips_path(point))?)
    }

    /// Save one finished point (atomic). Its chip file must be committed first: a record
    /// without its chip file is not a finished point.
    pub fn save_point(&self, rec: &PointRecord) -> Result<(), ResultsError> {
        let mut f = StreamFile::create(&self.point_path(rec.point))?;
        serde_json::to_writer_pretty(&mut f, rec).map_err(|e| {
            ResultsError::Read(self.point_path(rec.point), format!("cannot encode: {e}"))
        })?;
        f.commit()?;
        Ok(())
    }

    /// Every saved point record with its chip file, by point index. Unreadable records (e.g.
    /// from a crash of an older version, or whose chip file is missing) are skipped and
    /// recomputed.
    pub fn load_points(&self) -> Vec<PointRecord> {
        let mut out = Vec::new();
        if let Ok(rd) = fs::read_dir(self.root.join("points")) {
            for e in rd.flatten() {
                let p = e.path();
                if p.extension().and_then(|x| x.to_str()) != Some("json") {
                    continue;
                }
                if let Some(rec) = fs::read(&p)
                    .ok()
                    .and_then(|b| serde_json::from_slice::<PointRecord>(&b).ok())
                    .filter(|r| self.chips_path(r.point).is_file())
                {
                    out.push(rec);
                }
            }
        }
        out.sort_by_key(|r| r.point);
        out
    }

    /// Rewrite points.csv, chips.csv, confusion.csv and differences.csv from `records` (sorted
    /// by point). chips.csv is the header followed by the points' chip files, copied in blocks.
    pub fn write_tables(
        &self,
        records: &[PointRecord],
        axis_paths: &[String],
        class_names: &[String],
    ) -> Result<(), ResultsError> {
        write_atomic(
            &self.root.join("points.csv"),
            &points_csv(records, axis_paths),
        )?;
        let mut chips = StreamFile::create(&self.root.join("chips.csv"))?;
        let programming = records.iter().any(|r| r.stats.programming.is_some());
        chips.write(&chips_csv_header_with(axis_paths, programming))?;
        for r in records {
            chips.append_file(&self.chips_path(r.point))?;
        }
        chips.commit()?;
        write_atomic(
            &self.root.join("confusion.csv"),
            &confusion_csv(records, class_names),
        )?;
        write_atomic(
            &self.root.join("differences.csv"),
            &crate::answers::differences_csv(&self.differences(records)?),
        )?;
        Ok(())
    }
}

fn opt(v: Option<f64>) -> String {
    v.map(fmt).unwrap_or_default()
}

/// Shortest round-trip decimal of a float (deterministic across runs and platforms).
pub fn fmt(v: f64) -> String {
    if v.is_nan() {
        String::new()
    } else {
        format!("{v:?}")
    }
}

fn to_bytes(rows: Vec<Vec<String>>) -> Vec<u8> {
    let mut w = csv::Writer::from_writer(Vec::new());
    for r in rows {
        // Writing to memory cannot fail.
        let _ = w.write_record(&r);
    }
    w.into_inner().unwrap_or_default()
}

/// The `points.csv` table.
pub fn points_csv(records: &[PointRecord], axis_paths: &[String]) -> Vec<u8> {
    let mut header = vec!["point".to_string()];
    header.extend(axis_paths.iter().cloned());
    header.extend(POINT_STAT_COLUMNS.map(String::from));
    header.extend(FAILURE_COLUMNS.map(String::from));
    header.extend(crate::answers::DESIGN_COLUMNS.map(String::from));
    let programming = records.iter().any(|r| r.stats.programming.is_some());
    if programming {
        header.extend(PROGRAM_POINT_COLUMNS.map(String::from));
    }
    let mut rows = vec![header];
    for r in records {
        let s = r.summary();
        let design = crate::answers::design_cells(r, &s);
        let mut row = vec![r.point.to_string()];
        row.extend(r.params.iter().map(|v| fmt(*v)));
        row.extend([
            s.chips.to_string(),
            s.samples.to_string(),
            fmt(s.acc_mean),
            fmt(s.acc_std),
            fmt(s.acc_p05),
            fmt(s.acc_p50),
            fmt(s.acc_p95),
            fmt(r.ideal_acc),
            fmt(r.baseline_acc),
            fmt(r.target),
            fmt(s.yield_),
            fmt(s.yield_lo),
            fmt(s.yield_hi),
            fmt(s.agreement_mean),
            fmt(s.ambiguous_frac),
            s.nonconverged.to_string(),
            opt(s.decision_time_mean_s),
            opt(s.energy_mean_j),
        ]);
        row.extend(FailureKind::ALL.map(|k| s.failed.get(k).to_string()));
        row.extend(design);
        if programming {
            match s.programming {
                Some(p) => row.extend(p.map(fmt)),
                None => row.extend(PROGRAM_POINT_COLUMNS.map(|_| String::new())),
            }
        }
        rows.push(row);
    }
    to_bytes(rows)
}

/// The header line of `chips.csv`.
pub fn chips_csv_header(axis_paths: &[String]) -> Vec<u8> {
    chips_csv_header_with(axis_paths, false)
}

/// The header line of `chips.csv`, with the program-and-verify columns when `programming`.
pub fn chips_csv_header_with(axis_paths: &[String], programming: bool) -> Vec<u8> {
    let mut header = vec!["point".to_string()];
    header.extend(axis_paths.iter().cloned());
    header.extend(CHIP_COLUMNS.map(String::from));
    header.extend(FAILURE_COLUMNS.map(String::from));
    if programming {
        header.extend(PROGRAM_CHIP_COLUMNS.map(String::from));
    }
    to_bytes(vec![header])
}

/// The `chips.csv` rows of `rows` (chips of point `point` with parameter values `params`).
pub fn chip_rows_csv<'a>(
    point: usize,
    params: &[f64],
    rows: impl IntoIterator<Item = &'a ChipRow>,
) -> Vec<u8> {
    let lines = rows
        .into_iter()
        .map(|c| {
            let mut row = vec![point.to_string()];
            row.extend(params.iter().map(|v| fmt(*v)));
            row.extend([
                c.chip.to_string(),
                fmt(c.accuracy),
                fmt(c.agreement),
                c.ambiguous.to_string(),
                c.nonconverged.to_string(),
                c.samples.to_string(),
                opt(c.decision_time_mean_s),
                opt(c.energy_mean_j),
            ]);
            row.extend(FailureKind::ALL.map(|k| c.failed.get(k).to_string()));
            if let Some(p) = &c.programming {
                row.extend([
                    p.elements.to_string(),
                    p.cycles.to_string(),
                    p.unverified.to_string(),
                    fmt(p.time_s),
                ]);
            }
            row
        })
        .collect();
    to_bytes(lines)
}

/// Read one line of a chip file (a `chips.csv` row) back: the row after the point and its
/// `n_params` parameter cells. The inverse of [`chip_rows_csv`] (floats are written as their
/// shortest round-trip decimal, so they read back to the same bits).
pub fn parse_chip_line(line: &str, n_params: usize) -> Option<ChipRow> {
    let cells: Vec<&str> = line.trim_end_matches(['\r', '\n']).split(',').collect();
    let c = cells.get(1 + n_params..)?;
    let fixed = CHIP_COLUMNS.len() + FAILURE_COLUMNS.len();
    if c.len() != fixed && c.len() != fixed + PROGRAM_CHIP_COLUMNS.len() {
        return None;
    }
    let float = |t: &str| -> Option<f64> {
        if t.is_empty() {
            Some(f64::NAN)
        } else {
            t.parse().ok()
        }
    };
    let maybe = |t: &str| -> Option<Option<f64>> {
        if t.is_empty() {
            Some(None)
        } else {
            t.parse().ok().map(Some)
        }
    };
    Some(ChipRow {
        chip: c[0].parse().ok()?,
        accuracy: float(c[1])?,
        agreement: float(c[2])?,
        ambiguous: c[3].parse().ok()?,
        nonconverged: c[4].parse().ok()?,
        samples: c[5].parse().ok()?,
        decision_time_mean_s: maybe(c[6])?,
        energy_mean_j: maybe(c[7])?,
        failed: FailureCounts {
            not_converged: c[8].parse().ok()?,
            out_of_supply_compliance: c[9].parse().ok()?,
            weight_stage: c[10].parse().ok()?,
            noise: c[11].parse().ok()?,
        },
        programming: match c.get(fixed..) {
            Some([e, n, u, t]) => Some(ChipProgramming {
                elements: e.parse().ok()?,
                cycles: n.parse().ok()?,
                unverified: u.parse().ok()?,
                time_s: t.parse().ok()?,
            }),
            _ => None,
        },
    })
}

/// The `confusion.csv` table (`point,true_class,predicted_class,count`, zero counts omitted).
pub fn confusion_csv(records: &[PointRecord], class_names: &[String]) -> Vec<u8> {
    let mut rows = vec![CONFUSION_COLUMNS.map(String::from).to_vec()];
    let label = |j: usize| -> String {
        match j.checked_sub(class_names.len()) {
            None => class_names[j].clone(),
            Some(0) => "ambiguous".into(),
            Some(_) => "nonconverged".into(),
        }
    };
    for r in records {
        for (t, row) in r.confusion.iter().enumerate() {
            for (p, &count) in row.iter().enumerate() {
                if count > 0 && t < class_names.len() && p < class_names.len() + 2 {
                    rows.push(vec![
                        r.point.to_string(),
                        class_names[t].clone(),
                        label(p),
                        count.to_string(),
                    ]);
                }
            }
        }
    }
    to_bytes(rows)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn record(point: usize, accs: &[f64]) -> PointRecord {
        PointRecord {
            point,
            params: vec![1e-9 * (point + 1) as f64],
            first_chip: 0,
            stats: ChipStats::of(&rows(accs)),
            confusion: vec![vec![3, 1, 0, 0], vec![0, 4, 1, 0]],
            ideal_acc: 0.9,
            baseline_acc: 0.9,
            target: 0.8,
            yield_target: None,
            cost: None,
            paired: true,
            z: 1.96,
            elapsed_s: 0.1,
            first_failure: None,
        }
    }

    fn rows(accs: &[f64]) -> Vec<ChipRow> {
        accs.iter()
            .enumerate()
            .map(|(i, &a)| ChipRow {
                chip: i as u64,
                accuracy: a,
                agreement: a,
                ambiguous: 1,
                nonconverged: 3,
                failed: FailureCounts {
                    not_converged: 1,
                    out_of_supply_compliance: 2,
                    weight_stage: 0,
                    noise: 0,
                },
                samples: 10,
                decision_time_mean_s: None,
                energy_mean_j: None,
                programming: None,
            })
            .collect()
    }

    /// Yield: 10 of 100 chips meet the target -> 0.1 with Wilson [0.0552, 0.1744] (Wilson 1927).
    #[test]
    fn summary_yield_uses_wilson() {
        let mut accs = vec![0.5; 90];
        accs.extend(vec![0.85; 10]);
        let s = record(0, &accs).summary();
        assert!((s.yield_ - 0.1).abs() < 1e-12);
        assert!((s.yield_lo - 0.0552).abs() < 5e-5 && (s.yield_hi - 0.1744).abs() < 5e-5);
        assert!((s.ambiguous_frac - 0.1).abs() < 1e-12);
    }

    #[test]
    fn folder_refuses_other_experiment_and_resumes_same() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path().join("r");
        let (rd, resumed) = ResultsDir::open(&root, "abc", false).unwrap();
        assert!(!resumed);
        for (p, accs) in [(1, &[0.9, 0.7][..]), (0, &[0.9][..])] {
            let mut f = rd.stream_chips(p).unwrap();
            f.write(&chip_rows_csv(p, &[1.0], &rows(accs))).unwrap();
            f.commit().unwrap();
            rd.save_point(&record(p, accs)).unwrap();
        }
        // A record whose chip file is missing is not a finished point.
        rd.save_point(&record(2, &[0.5])).unwrap();
        let (rd2, resumed) = ResultsDir::open(&root, "abc", false).unwrap();
        assert!(resumed);
        let recs = rd2.load_points();
        assert_eq!(recs.iter().map(|r| r.point).collect::<Vec<_>>(), vec![0, 1]);
        let e = ResultsDir::open(&root, "other", false).unwrap_err();
        assert!(e.to_string().contains("different experiment"), "{e}");
        // The refused open changed nothing.
        assert_eq!(rd2.load_points().len(), 2);
        let foreign = dir.path().join("f");
        fs::create_dir_all(&foreign).unwrap();
        fs::write(foreign.join("x.txt"), "mine").unwrap();
        assert!(matches!(
            ResultsDir::open(&foreign, "abc", false),
            Err(ResultsError::Foreign(_))
        ));
    }

    /// A run killed during its very first write leaves `points/` and a temporary stamp: the same
    /// command starts over instead of refusing a foreign folder; stale temporary files of gone
    /// writers go away when a run opens the folder.
    #[test]
    fn killed_first_write_starts_over_and_stale_temps_are_removed() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path().join("r");
        fs::create_dir_all(root.join("points")).unwrap();
        let tmp = root.join(".experiment.hash.99999999.tmp");
        fs::write(&tmp, "ab").unwrap();
        let (_, resumed) = ResultsDir::open(&root, "abc", false).unwrap();
        assert!(!resumed);
        assert!(!tmp.exists());
        // In a folder of ours: stale temps in the folder and plots/ are removed on open.
        fs::create_dir_all(root.join("plots")).unwrap();
        let a = root.join(".points.csv.99999999.tmp");
        let b = root.join("plots").join(".accuracy.svg.99999999.tmp");
        fs::write(&a, "x").unwrap();
        fs::write(&b, "x").unwrap();
        let (_, resumed) = ResultsDir::open(&root, "abc", false).unwrap();
        assert!(resumed);
        assert!(!a.exists() && !b.exists());
    }

    #[test]
    fn tables_have_schema_columns() {
        let recs = [record(0, &[0.9, 0.7])];
        let p = String::from_utf8(points_csv(&recs, &["competition.bias_current".into()])).unwrap();
        let header = p.lines().next().unwrap();
        assert!(header.starts_with("point,competition.bias_current,chips,samples,acc_mean"));
        assert!(header.contains(
            "decision_time_mean_s,energy_mean_j,failed_not_converged,\
             failed_out_of_supply_compliance,failed_weight_stage,failed_noise,yield_target,pass"
        ));
        assert!(header.ends_with("decision_time_s,energy_per_decision_j"));
        // Two chips with 1 not converged and 2 out of compliance each: 2 and 4 at the point.
        assert!(p.lines().nth(1).unwrap().contains(",6,,,2,4,0,0,"), "{p}");
        let c = String::from_utf8(confusion_csv(&recs, &["a".into(), "b".into()])).unwrap();
        assert!(c.contains("0,b,ambiguous,1"), "{c}");
        let mut ch = chips_csv_header(&["x".into()]);
        ch.extend(chip_rows_csv(0, &[2e-9], &rows(&[0.9, 0.7])));
        let ch = String::from_utf8(ch).unwrap();
        assert_eq!(ch.lines().count(), 3);
        assert!(
            ch.lines().nth(1).unwrap().ends_with(",3,10,,,1,2,0,0"),
            "{ch}"
        );
        // Each line reads back to the same row, bit for bit.
        for (line, row) in ch.lines().skip(1).zip(rows(&[0.9, 0.7])) {
            assert_eq!(parse_chip_line(line, 1), Some(row));
        }
    }

    /// Program-and-verify columns appear only when the chips carry them: the chip rows read
    /// back bit for bit, and the point's cycles per element are the summed cycles over the
    /// summed elements (a plain ratio, no source needed).
    #[test]
    fn programming_columns_only_when_present() {
        let mut chips = rows(&[0.9, 0.7]);
        for (i, c) in chips.iter_mut().enumerate() {
            c.programming = Some(ChipProgramming {
                elements: 100,
                cycles: 150 + 10 * i as u64,
                unverified: i as u64,
                time_s: 1e-6 * (150 + 10 * i) as f64,
            });
        }
        let mut rec = record(0, &[]);
        rec.stats = ChipStats::of(&chips);
        let p = String::from_utf8(points_csv(&[rec.clone()], &[])).unwrap();
        assert!(p.lines().next().unwrap().ends_with(
            "energy_per_decision_j,program_cycles_per_element,program_unverified_frac,\
             program_time_mean_s"
        ));
        let s = rec.summary().programming.unwrap();
        assert!((s[0] - 310.0 / 200.0).abs() < 1e-12);
        assert!((s[1] - 1.0 / 200.0).abs() < 1e-12);
        assert!((s[2] - 155e-6).abs() < 1e-15);
        let mut ch = chips_csv_header_with(&[], true);
        ch.extend(chip_rows_csv(0, &[], &chips));
        let ch = String::from_utf8(ch).unwrap();
        assert!(ch.lines().next().unwrap().ends_with(
            "failed_noise,program_elements,program_cycles,program_unverified,program_time_s"
        ));
        for (line, row) in ch.lines().skip(1).zip(&chips) {
            assert_eq!(parse_chip_line(line, 0).as_ref(), Some(row));
        }
        // Without programming nothing changes.
        let plain = String::from_utf8(points_csv(&[record(0, &[0.9])], &[])).unwrap();
        assert!(!plain.contains("program_"));
    }

    /// The online statistics against a direct computation over all chips at once: mean and
    /// sample standard deviation by their textbook formulas, percentiles by linear
    /// interpolation between order statistics (Hyndman & Fan 1996, type 7, R's default), the
    /// yield as a count; decision times averaged over the chips that have one.
    #[test]
    fn online_statistics_equal_a_direct_computation() {
        // A deterministic, unsorted population of 1001 accuracies in [0, 1].
        let accs: Vec<f64> = (0..1001u64)
            .map(|i| ((i * 7919) % 1001) as f64 / 1000.0)
            .collect();
        let mut chips = rows(&accs);
        for (i, c) in chips.iter_mut().enumerate() {
            c.decision_time_mean_s = (i % 3 == 0).then_some(1e-6 * (i as f64 + 1.0));
        }
        let mut stats = ChipStats::default();
        for c in &chips {
            stats.push(c);
        }
        let mut rec = record(0, &[]);
        rec.stats = stats;
        let s = rec.summary();
        let n = accs.len() as f64;
        let mean = accs.iter().sum::<f64>() / n;
        let var = accs.iter().map(|a| (a - mean).powi(2)).sum::<f64>() / (n - 1.0);
        let mut sorted = accs.clone();
        sorted.sort_by(f64::total_cmp);
        let type7 = |p: f64| {
            let h = (n - 1.0) * p;
            let (lo, f) = (h.floor() as usize, h - h.floor());
            sorted[lo] + f * (sorted[(lo + 1).min(sorted.len() - 1)] - sorted[lo])
        };
        approx::assert_relative_eq!(s.acc_mean, mean, max_relative = 1e-12);
        approx::assert_relative_eq!(s.acc_std, var.sqrt(), max_relative = 1e-9);
        approx::assert_relative_eq!(s.acc_p05, type7(0.05), max_relative = 1e-12);
        approx::assert_relative_eq!(s.acc_p50, type7(0.50), max_relative = 1e-12);
        approx::assert_relative_eq!(s.acc_p95, type7(0.95), max_relative = 1e-12);
        let pass = accs.iter().filter(|&&a| a >= 0.8 - 1e-12).count() as f64;
        approx::assert_relative_eq!(s.yield_, pass / n, max_relative = 1e-12);
        let times: Vec<f64> = chips
            .iter()
            .filter_map(|c| c.decision_time_mean_s)
            .collect();
        let t_mean = times.iter().sum::<f64>() / times.len() as f64;
        approx::assert_relative_eq!(
            s.decision_time_mean_s.unwrap(),
            t_mean,
            max_relative = 1e-12
        );
        assert_eq!(s.samples, 10 * 1001);
        assert_eq!(s.failed.not_converged, 1001);
        assert!(s.energy_mean_j.is_none());
    }
}
