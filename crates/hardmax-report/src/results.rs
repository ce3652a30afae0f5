//! The results folder: per-point records (the unit of resume), tidy CSV tables, the manifest.
//!
//! Every finished sweep point is saved at once as `points/point-NNNNNN.json` (atomic write).
//! The CSV tables are regenerated from all saved records after each point, so an interrupted
//! run keeps every finished point, and a resumed run ends with the same files as an
//! uninterrupted one. Layout and columns: DEVELOPERS.md, "Results folder".

use std::fs;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use super::stats::{summarize, wilson_interval};
use crate::io::write_atomic;
// One definition of the table schema, shared with the reader in `report`.
use crate::report::folder::{CHIP_COLUMNS, CONFUSION_COLUMNS, FAILURE_COLUMNS, POINT_STAT_COLUMNS};
use hardmax_core::pipeline::{FailureCounts, FailureKind};

/// Version of the results-folder format (manifest `format_version`).
pub const FORMAT_VERSION: u32 = 1;
/// Name of the format (manifest `format`).
pub const FORMAT_NAME: &str = "hardmax-results";

/// One chip's outcome at one sweep point.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ChipRow {
    pub chip: u64,
    /// Correct, unambiguous, converged decisions over all samples.
    pub accuracy: f64,
    /// Share of samples where the circuit's decision equals ideal argmax.
    pub agreement: f64,
    pub ambiguous: u64,
    /// Failed decisions of every kind (the column keeps its first name).
    pub nonconverged: u64,
    /// Failed decisions by kind (absent in records of older versions: all zero).
    #[serde(default)]
    pub failed: FailureCounts,
    pub samples: u64,
    /// Mean time to decision (transient evaluation only).
    pub decision_time_mean_s: Option<f64>,
    /// Mean energy per decision (transient evaluation only).
    pub energy_mean_j: Option<f64>,
}

/// Everything recorded for one finished sweep point.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PointRecord {
    pub point: usize,
    /// One value per sweep axis, SI base units, in axis order.
    pub params: Vec<f64>,
    pub chips: Vec<ChipRow>,
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
}

impl PointRecord {
    /// Population statistics of this point. Yield = share of chips whose accuracy meets the
    /// target, with a Wilson score interval (Wilson 1927).
    pub fn summary(&self) -> PointSummary {
        let acc: Vec<f64> = self.chips.iter().map(|c| c.accuracy).collect();
        let s = summarize(&acc);
        let pass = self
            .chips
            .iter()
            .filter(|c| c.accuracy >= self.target - 1e-12)
            .count() as u64;
        let n = self.chips.len() as u64;
        let (lo, hi) = wilson_interval(pass, n, self.z);
        let samples: u64 = self.chips.iter().map(|c| c.samples).sum();
        let ambiguous: u64 = self.chips.iter().map(|c| c.ambiguous).sum();
        let mean_opt = |f: fn(&ChipRow) -> Option<f64>| {
            let v: Vec<f64> = self.chips.iter().filter_map(f).collect();
            (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64)
        };
        PointSummary {
            chips: self.chips.len(),
            samples,
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
                self.chips.iter().map(|c| c.agreement).sum::<f64>() / n as f64
            },
            ambiguous_frac: if samples == 0 {
                0.0
            } else {
                ambiguous as f64 / samples as f64
            },
            nonconverged: self.chips.iter().map(|c| c.nonconverged).sum(),
            failed: self
                .chips
                .iter()
                .fold(FailureCounts::default(), |mut a, c| {
                    a.merge(&c.failed);
                    a
                }),
            decision_time_mean_s: mean_opt(|c| c.decision_time_mean_s),
            energy_mean_j: mean_opt(|c| c.energy_mean_j),
        }
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
#[derive(Debug)]
pub struct ResultsDir {
    pub root: PathBuf,
}

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
                for sub in ["", "points", "plots", "transfer"] {
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
                }
                Some(_) => return Err(ResultsError::OtherExperiment(root.into())),
                None if non_empty => return Err(ResultsError::Foreign(root.into())),
                None => {}
            }
        }
        fs::create_dir_all(root.join("points"))
            .map_err(|e| ResultsError::NotWritable(root.into(), e))?;
        write_atomic(&stamp, hash.as_bytes())?;
        Ok((Self { root: root.into() }, resumed))
    }

    fn point_path(&self, point: usize) -> PathBuf {
        self.root
            .join("points")
            .join(format!("point-{point:06}.json"))
    }

    /// Save one finished point (atomic).
    pub fn save_point(&self, rec: &PointRecord) -> Result<(), ResultsError> {
        let json = serde_json::to_vec_pretty(rec).map_err(|e| {
            ResultsError::Read(self.point_path(rec.point), format!("cannot encode: {e}"))
        })?;
        write_atomic(&self.point_path(rec.point), &json)?;
        Ok(())
    }

    /// Every saved point record, by point index. Unreadable records (e.g. from a crash of an
    /// older version) are skipped and recomputed.
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
                {
                    out.push(rec);
                }
            }
        }
        out.sort_by_key(|r| r.point);
        out
    }

    /// Rewrite points.csv, chips.csv and confusion.csv from `records` (sorted by point).
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
        write_atomic(
            &self.root.join("chips.csv"),
            &chips_csv(records, axis_paths),
        )?;
        write_atomic(
            &self.root.join("confusion.csv"),
            &confusion_csv(records, class_names),
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
    let mut rows = vec![header];
    for r in records {
        let s = r.summary();
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
        rows.push(row);
    }
    to_bytes(rows)
}

/// The `chips.csv` table.
pub fn chips_csv(records: &[PointRecord], axis_paths: &[String]) -> Vec<u8> {
    let mut header = vec!["point".to_string()];
    header.extend(axis_paths.iter().cloned());
    header.extend(CHIP_COLUMNS.map(String::from));
    header.extend(FAILURE_COLUMNS.map(String::from));
    let mut rows = vec![header];
    for r in records {
        for c in &r.chips {
            let mut row = vec![r.point.to_string()];
            row.extend(r.params.iter().map(|v| fmt(*v)));
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
            rows.push(row);
        }
    }
    to_bytes(rows)
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
            chips: accs
                .iter()
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
                })
                .collect(),
            confusion: vec![vec![3, 1, 0, 0], vec![0, 4, 1, 0]],
            ideal_acc: 0.9,
            baseline_acc: 0.9,
            target: 0.8,
            z: 1.96,
            elapsed_s: 0.1,
            first_failure: None,
        }
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
        rd.save_point(&record(1, &[0.9, 0.7])).unwrap();
        rd.save_point(&record(0, &[0.9])).unwrap();
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
        assert!(header.ends_with(
            "decision_time_mean_s,energy_mean_j,failed_not_converged,\
             failed_out_of_supply_compliance,failed_weight_stage,failed_noise"
        ));
        // Two chips with 1 not converged and 2 out of compliance each: 2 and 4 at the point.
        assert!(p.lines().nth(1).unwrap().ends_with(",6,,,2,4,0,0"), "{p}");
        let c = String::from_utf8(confusion_csv(&recs, &["a".into(), "b".into()])).unwrap();
        assert!(c.contains("0,b,ambiguous,1"), "{c}");
        let ch = String::from_utf8(chips_csv(&recs, &["x".into()])).unwrap();
        assert_eq!(ch.lines().count(), 3);
        assert!(
            ch.lines().nth(1).unwrap().ends_with(",3,10,,,1,2,0,0"),
            "{ch}"
        );
    }
}
