//! The results-folder format in one place: its name and version, the manifest type (written by
//! a run, a shard and a merge, read back by resume, `batch`, `merge` and the report through the
//! same type), the per-chip row, the column lists of the CSV tables, and the scale of a swept
//! parameter. Layout and meaning: DEVELOPERS.md, "Results folder".
//!
//! The manifest is written with its keys in sorted order (through `serde_json::Value`, whose
//! maps are sorted), so the file's bytes do not depend on the field order below.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use hardmax_core::pipeline::FailureCounts;
/// Scale of a swept parameter (`"scale": "linear" | "log"` in the manifest): the one scale type
/// of the project, defined in the core beside the sweeps that use it.
pub use hardmax_core::scale::Scale;

/// Version of the results-folder format (manifest `format_version`).
pub const FORMAT_VERSION: u32 = 1;
/// Name of the format (manifest `format`).
pub const FORMAT_NAME: &str = "hardmax-results";

/// The fixed statistics columns of `points.csv`, in schema order (after `point` and the sweep
/// parameter columns).
pub const POINT_STAT_COLUMNS: [&str; 18] = [
    "chips",
    "samples",
    "acc_mean",
    "acc_std",
    "acc_p05",
    "acc_p50",
    "acc_p95",
    "ideal_acc",
    "baseline_acc",
    "target",
    "yield",
    "yield_lo",
    "yield_hi",
    "agreement_mean",
    "ambiguous_frac",
    "nonconverged",
    "decision_time_mean_s",
    "energy_mean_j",
];

/// The fixed columns of `chips.csv` after `point` and the sweep parameter columns.
pub const CHIP_COLUMNS: [&str; 8] = [
    "chip",
    "accuracy",
    "agreement",
    "ambiguous",
    "nonconverged",
    "samples",
    "decision_time_mean_s",
    "energy_mean_j",
];

/// Failed decisions by kind, the last columns of both `points.csv` and `chips.csv` (in the
/// order of `pipeline::FailureKind::ALL`). Optional when reading: folders written before they
/// existed read with the kinds unknown.
pub const FAILURE_COLUMNS: [&str; 4] = [
    "failed_not_converged",
    "failed_out_of_supply_compliance",
    "failed_weight_stage",
    "failed_noise",
];

/// Program-and-verify columns of `chips.csv`, after the failure columns; written only when
/// the run programmed and verified its weights (`[programming]`), so other folders keep their
/// bytes: elements programmed, write-read cycles, elements left outside the tolerance at the
/// cycle limit, programming time (cycles x cycle time).
pub const PROGRAM_CHIP_COLUMNS: [&str; 4] = [
    "program_elements",
    "program_cycles",
    "program_unverified",
    "program_time_s",
];

/// Program-and-verify columns of `points.csv`, after the design columns (only with
/// `[programming]`): cycles per element over every die's elements, the share of elements left
/// unverified, and the mean programming time of a die.
pub const PROGRAM_POINT_COLUMNS: [&str; 3] = [
    "program_cycles_per_element",
    "program_unverified_frac",
    "program_time_mean_s",
];

/// What programming one die's weights cost (program-and-verify only).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct ChipProgramming {
    pub elements: u64,
    pub cycles: u64,
    pub unverified: u64,
    /// Cycles x cycle time, s.
    pub time_s: f64,
}

/// Columns of `confusion.csv`.
pub const CONFUSION_COLUMNS: [&str; 4] = ["point", "true_class", "predicted_class", "count"];

/// One chip's outcome at one sweep point: a `chips.csv` row after its point and parameter
/// columns, and an entry of a point record.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ChipRow {
    pub chip: u64,
    /// Correct, unambiguous, converged decisions over all samples (NaN: an empty cell).
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
    /// Program-and-verify cost of the die (absent without `[programming]`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub programming: Option<ChipProgramming>,
}

/// Whether a run finished every sweep point.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RunStatus {
    Complete,
    Partial,
}

/// How sweep parameters combine: cross product (`grid`) or side by side (`zip`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SweepMode {
    Grid,
    Zip,
}

/// Whether die c is the same die at every sweep point.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Pairing {
    Paired,
    Independent,
}

/// One swept parameter as recorded in the manifest (values in SI base units).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SweepParameter {
    pub path: String,
    pub unit: String,
    pub scale: Scale,
    pub values: Vec<f64>,
    /// A text parameter (e.g. `competition.circuit`): `values` are indices into these
    /// (absent for numeric axes, so their manifests are unchanged).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub labels: Option<Vec<String>>,
}

/// The sweep of a run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Sweep {
    pub mode: SweepMode,
    pub parameters: Vec<SweepParameter>,
}

/// The dataset a run used.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct DatasetInfo {
    pub name: String,
    pub classes: Vec<String>,
    pub features: u64,
    pub train_samples: u64,
    pub test_samples: u64,
}

/// The machine a run ran on.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct HostInfo {
    pub os: String,
    pub arch: String,
    pub cpus: u64,
    pub hostname: String,
}

impl HostInfo {
    /// This machine.
    pub fn this_machine() -> HostInfo {
        HostInfo {
            os: std::env::consts::OS.into(),
            arch: std::env::consts::ARCH.into(),
            cpus: std::thread::available_parallelism().map_or(1, |n| n.get() as u64),
            hostname: std::fs::read_to_string("/etc/hostname")
                .map(|s| s.trim().to_string())
                .unwrap_or_default(),
        }
    }
}

/// One file an experiment reads (its dataset CSV, a hidden-layer weights file), with the
/// SHA-256 of its content: part of the experiment's identity.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct InputFile {
    /// The experiment key that names the file (`dataset.file`, `hidden.weights_file`).
    pub key: String,
    /// The path as opened (relative ones joined to the experiment file's folder).
    pub path: String,
    /// SHA-256 of the content, hex.
    pub sha256: String,
}

/// The `shard` entry of a shard folder's manifest (DEVELOPERS.md, "Shard folders").
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct ShardEntry {
    /// 1-based shard index K of `count` N.
    pub index: u64,
    pub count: u64,
    pub units_total: u64,
    pub unit_start: u64,
    pub unit_end: u64,
    /// SHA-256 of every input file by content.
    pub inputs_hash: String,
}

/// One shard a merged folder was made from (`merged_from`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct MergedFrom {
    /// "K/N".
    pub shard: String,
    pub folder: String,
    pub host: Option<HostInfo>,
    pub threads: Option<u64>,
    pub elapsed_s: Option<f64>,
}

/// `manifest.json`, format version [`FORMAT_VERSION`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    pub format: String,
    pub format_version: u64,
    pub tool_version: String,
    pub experiment_name: String,
    #[serde(default)]
    pub description: String,
    /// Identity of the folder's content (resolved experiment, input files, tool version).
    pub experiment_hash: String,
    /// The same without the input files (absent in older folders).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub settings_hash: Option<String>,
    /// Every input file, hashed (absent in older folders).
    #[serde(default)]
    pub inputs: Vec<InputFile>,
    /// Physically odd but legal settings and tolerated data problems found when the run
    /// started (absent in older folders).
    #[serde(default)]
    pub warnings: Vec<String>,
    pub seed: u64,
    pub status: RunStatus,
    pub points_total: u64,
    pub points_done: u64,
    pub chips_per_point: u64,
    pub target_accuracy: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub target_yield: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pairing: Option<Pairing>,
    pub threads: u64,
    pub transient: bool,
    pub dataset: DatasetInfo,
    pub competition: String,
    pub sweep: Sweep,
    pub command: String,
    pub host: HostInfo,
    pub started_unix_s: u64,
    pub elapsed_s: f64,
    /// Present in a shard folder only.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub shard: Option<ShardEntry>,
    /// Present in a merged folder only.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub merged_from: Option<Vec<MergedFrom>>,
    /// Which trainer made each point's weights; present only when some point used the
    /// hardware-aware trainer (float-only folders keep their manifest unchanged).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub trainer: Option<TrainerInfo>,
    /// Program-and-verify settings; present only when the run used it (other manifests are
    /// unchanged).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub programming: Option<ProgrammingInfo>,
}

/// The manifest's record of program-and-verify (model notes §5.1).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ProgrammingInfo {
    /// `program_and_verify`.
    pub method: String,
    /// Accepted |read - level| as a fraction of the element's range.
    pub tolerance: f64,
    pub max_cycles: u64,
    /// Sigma of a verify read as a fraction of the element's range.
    pub read_noise: f64,
    pub cycle_time_s: f64,
}

/// The manifest's record of the trainers behind a run's weights.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainerInfo {
    /// `float` or `hardware_aware`, one per sweep point.
    pub per_point: Vec<String>,
    /// Each hardware-aware training (one per distinct prepared read-out) and how it ended.
    pub hardware_aware: Vec<HardwareTraining>,
}

/// How one hardware-aware training ended.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct HardwareTraining {
    /// The first sweep point that used these weights.
    pub point: u64,
    pub trainer: String,
    pub epochs: u64,
    pub steps: u64,
    pub objective: f64,
    pub gradient_norm: f64,
    pub converged: bool,
    /// Why training stopped: `gradient_tolerance`, `plateau` or `epoch_limit` (empty in a
    /// folder written before the field existed).
    #[serde(default)]
    pub termination: String,
    /// Relative decrease of the windowed injected objective over the last window (absent
    /// without injection or before two windows ran).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub window_decrease: Option<f64>,
    /// Whether the hidden stage was trained together with the read-out
    /// (`training.hardware.train_hidden`; absent, false, in a folder written before).
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub hidden_trained: bool,
}

/// A manifest that cannot be read; each names the file and says what to do.
#[derive(Debug, thiserror::Error)]
pub enum ManifestError {
    #[error("cannot read `{}`: {source}. Check that the file exists and is readable.", path.display())]
    Read {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error(
        "`{}` line {line}, column {column}: {message}. The manifest must be the JSON that \
         `hardmax run` writes (see DEVELOPERS.md, \"Results folder\").",
        path.display()
    )]
    Json {
        path: PathBuf,
        line: usize,
        column: usize,
        message: String,
    },
    #[error(
        "`{}`: key `{key}`: {message}. The manifest must be the JSON that `hardmax run` writes \
         (see DEVELOPERS.md, \"Results folder\").",
        path.display()
    )]
    Value {
        path: PathBuf,
        key: String,
        message: String,
    },
    #[error(
        "`{}` has format_version {found}, but this hardmax reads results format version \
         {FORMAT_VERSION}. Use the hardmax version that wrote it (tool_version \
         {tool_version}), or re-run the experiment with this version.",
        path.display()
    )]
    FormatVersion {
        path: PathBuf,
        found: String,
        tool_version: String,
    },
}

impl Manifest {
    /// Read and check `path` (a `manifest.json`).
    pub fn read(path: &Path) -> Result<Manifest, ManifestError> {
        let text = std::fs::read_to_string(path).map_err(|source| ManifestError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        Manifest::parse(&text, path)
    }

    /// Parse and check manifest text (`path` is for messages): the format name and version
    /// first (so a folder of another version says so instead of naming a missing key), then
    /// the typed content, then its consistency.
    pub fn parse(text: &str, path: &Path) -> Result<Manifest, ManifestError> {
        let json_err = |e: serde_json::Error| ManifestError::Json {
            path: path.to_path_buf(),
            line: e.line(),
            column: e.column(),
            message: e.to_string(),
        };
        let value_err = |key: &str, message: String| ManifestError::Value {
            path: path.to_path_buf(),
            key: key.to_string(),
            message,
        };
        let value: serde_json::Value = serde_json::from_str(text).map_err(json_err)?;
        let Some(obj) = value.as_object() else {
            return Err(value_err("(top level)", "expected a JSON object".into()));
        };
        match obj.get("format").and_then(|f| f.as_str()) {
            Some(FORMAT_NAME) => {}
            Some(other) => {
                return Err(value_err(
                    "format",
                    format!("is `{other}`, expected `{FORMAT_NAME}`: this is not a hardmax results manifest"),
                ))
            }
            None => {
                return Err(value_err(
                    "format",
                    format!("is missing or not a string; expected `{FORMAT_NAME}`"),
                ))
            }
        }
        let version = obj.get("format_version");
        if version.and_then(|v| v.as_u64()) != Some(u64::from(FORMAT_VERSION)) {
            return Err(ManifestError::FormatVersion {
                path: path.to_path_buf(),
                found: version.map_or_else(|| "(missing)".into(), |v| v.to_string()),
                tool_version: obj
                    .get("tool_version")
                    .and_then(|v| v.as_str())
                    .unwrap_or("unknown")
                    .to_string(),
            });
        }
        let m: Manifest = serde_json::from_str(text).map_err(json_err)?;
        m.check()
            .map_err(|(key, message)| value_err(&key, message))?;
        Ok(m)
    }

    /// Consistency of a parsed manifest: (key, what is wrong).
    fn check(&self) -> Result<(), (String, String)> {
        if self.points_done > self.points_total {
            return Err((
                "points_done".into(),
                format!(
                    "is {} but points_total is {}; a run cannot finish more points than it has",
                    self.points_done, self.points_total
                ),
            ));
        }
        if self.status == RunStatus::Complete
            && self.points_done != self.points_total
            && self.shard.is_none()
        {
            return Err((
                "status".into(),
                format!(
                    "is `complete` but only {} of {} points are done; a stopped run is `partial`",
                    self.points_done, self.points_total
                ),
            ));
        }
        if !(0.0..=1.0).contains(&self.target_accuracy) {
            return Err((
                "target_accuracy".into(),
                format!("is {}, expected a share in [0, 1]", self.target_accuracy),
            ));
        }
        if !self.elapsed_s.is_finite() || self.elapsed_s < 0.0 {
            return Err((
                "elapsed_s".into(),
                format!("is {}, expected seconds >= 0", self.elapsed_s),
            ));
        }
        for (i, p) in self.sweep.parameters.iter().enumerate() {
            let key = format!("sweep.parameters[{i}].values");
            if p.values.is_empty() {
                return Err((key, format!("parameter `{}` has no values", p.path)));
            }
            if let Some(v) = p.values.iter().find(|v| !v.is_finite()) {
                return Err((key, format!("`{v}` is not a finite number")));
            }
            if p.scale == Scale::Log {
                if let Some(v) = p.values.iter().find(|v| **v <= 0.0) {
                    return Err((
                        key,
                        format!(
                            "scale is `log` but parameter `{}` has the value {v}; log scales need values > 0",
                            p.path
                        ),
                    ));
                }
            }
        }
        let mut seen = std::collections::BTreeSet::new();
        for p in &self.sweep.parameters {
            if !seen.insert(p.path.as_str()) {
                return Err((
                    "sweep.parameters".into(),
                    format!("parameter `{}` is listed twice", p.path),
                ));
            }
        }
        Ok(())
    }

    /// The manifest as written: pretty JSON with sorted keys.
    pub fn to_bytes(&self) -> Vec<u8> {
        // Serialising plain data cannot fail; sorted keys come from `Value`'s map.
        serde_json::to_value(self)
            .and_then(|v| serde_json::to_vec_pretty(&v))
            .unwrap_or_default()
    }

    /// Write the manifest to `path` (atomic).
    pub fn write(&self, path: &Path) -> Result<(), crate::io::AtomicWriteError> {
        crate::io::write_atomic(path, &self.to_bytes())
    }

    /// The swept parameters' paths, in order (the parameter columns of the tables).
    pub fn axis_paths(&self) -> Vec<String> {
        self.sweep
            .parameters
            .iter()
            .map(|p| p.path.clone())
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Manifest {
        Manifest {
            format: FORMAT_NAME.into(),
            format_version: u64::from(FORMAT_VERSION),
            tool_version: "0.1.0".into(),
            experiment_name: "x".into(),
            description: String::new(),
            experiment_hash: "ab".into(),
            settings_hash: Some("cd".into()),
            inputs: vec![],
            warnings: vec![],
            seed: 1,
            status: RunStatus::Complete,
            points_total: 2,
            points_done: 2,
            chips_per_point: 3,
            target_accuracy: 0.9,
            target_yield: Some(0.95),
            pairing: Some(Pairing::Paired),
            threads: 2,
            transient: false,
            dataset: DatasetInfo::default(),
            competition: "wta".into(),
            sweep: Sweep {
                mode: SweepMode::Grid,
                parameters: vec![SweepParameter {
                    path: "competition.gain".into(),
                    unit: String::new(),
                    scale: Scale::Log,
                    values: vec![10.0, 100.0],
                    labels: None,
                }],
            },
            command: "hardmax run x.toml".into(),
            host: HostInfo::this_machine(),
            started_unix_s: 1_796_000_000,
            elapsed_s: 1.5,
            shard: None,
            merged_from: None,
            trainer: None,
            programming: None,
        }
    }

    /// Written and read through the same type: a round trip gives the same manifest, keys are
    /// sorted, and absent optional parts are not written.
    #[test]
    fn round_trip_and_sorted_keys() {
        let m = sample();
        let text = String::from_utf8(m.to_bytes()).unwrap();
        let back = Manifest::parse(&text, Path::new("m.json")).unwrap();
        assert_eq!(back, m);
        let keys: Vec<&str> = text
            .lines()
            .filter(|l| l.starts_with("  \""))
            .map(|l| l.trim().split('"').nth(1).unwrap())
            .collect();
        let mut sorted = keys.clone();
        sorted.sort();
        assert_eq!(keys, sorted);
        assert!(!text.contains("\"shard\"") && !text.contains("merged_from"));
        assert!(text.contains("\"scale\": \"log\""), "{text}");
    }

    /// Another format version names the file, both versions and what to do.
    #[test]
    fn other_version_is_refused_with_a_fix() {
        let text = String::from_utf8(sample().to_bytes())
            .unwrap()
            .replace("\"format_version\": 1", "\"format_version\": 7");
        let e = Manifest::parse(&text, Path::new("r/manifest.json")).unwrap_err();
        assert!(matches!(e, ManifestError::FormatVersion { .. }), "{e:?}");
        let msg = e.to_string();
        assert!(msg.contains("`r/manifest.json`") && msg.contains("format_version 7"));
        assert!(msg.contains("re-run the experiment"), "{msg}");
    }

    #[test]
    fn inconsistent_counts_name_the_key() {
        let mut m = sample();
        m.points_done = 1;
        let text = String::from_utf8(m.to_bytes()).unwrap();
        let e = Manifest::parse(&text, Path::new("m.json")).unwrap_err();
        assert!(e.to_string().contains("key `status`"), "{e}");
    }

    /// A trainer record written before `hidden_trained` existed reads as false, and a false
    /// flag is not written (folders of runs that keep the hidden layer fixed are unchanged).
    #[test]
    fn hidden_trained_defaults_to_false_and_is_not_written_when_false() {
        let old = r#"{"point":1,"trainer":"hardware_aware","epochs":60,"steps":120,
            "objective":91.5,"gradient_norm":3.0,"converged":false}"#;
        let t: HardwareTraining = serde_json::from_str(old).unwrap();
        assert!(!t.hidden_trained);
        assert!(!serde_json::to_string(&t)
            .unwrap()
            .contains("hidden_trained"));
        let joint = HardwareTraining {
            hidden_trained: true,
            ..t
        };
        let back: HardwareTraining =
            serde_json::from_str(&serde_json::to_string(&joint).unwrap()).unwrap();
        assert!(back.hidden_trained);
    }
}
