//! Reading a results folder (schema: DEVELOPERS.md, "Results folder"): `manifest.json`,
//! `points.csv`, `chips.csv`, `confusion.csv`, and optional stage transfer curves kept in
//! `transfer/NAME.csv` (with `transfer/NAME.json` holding the x-axis label, see
//! [`TransferMeta`]).
//!
//! Reading is strict about the schema (every required column, every manifest key, the format
//! version) and names the file, line and column of anything wrong. Extra columns in
//! `points.csv` are kept and shown in the report table as plain numbers.

use std::collections::{BTreeMap, BTreeSet};
use std::fs;
use std::path::{Path, PathBuf};

use serde::Deserialize;

use super::error::{ReportError, SUPPORTED_FORMAT_VERSION};

/// Whether a run finished every sweep point.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RunStatus {
    Complete,
    Partial,
}

/// How sweep parameters combine: cross product (`grid`) or side by side (`zip`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum SweepMode {
    Grid,
    Zip,
}

/// Axis scale the experiment asked for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Scale {
    Linear,
    Log,
}

/// One swept parameter as recorded in the manifest (values in SI base units).
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SweepParameter {
    pub path: String,
    pub unit: String,
    pub scale: Scale,
    pub values: Vec<f64>,
    /// A text parameter (e.g. `competition.circuit`): `values` are indices into these.
    #[serde(default)]
    pub labels: Option<Vec<String>>,
}

/// The sweep of a run.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct Sweep {
    pub mode: SweepMode,
    pub parameters: Vec<SweepParameter>,
}

/// The dataset a run used.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct DatasetInfo {
    pub name: String,
    pub classes: Vec<String>,
    pub features: u64,
    pub train_samples: u64,
    pub test_samples: u64,
}

/// The machine a run ran on.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct HostInfo {
    pub os: String,
    pub arch: String,
    pub cpus: u64,
    pub hostname: String,
}

/// `manifest.json`, format version 1.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct Manifest {
    pub format: String,
    pub format_version: u64,
    pub tool_version: String,
    pub experiment_name: String,
    #[serde(default)]
    pub description: String,
    pub experiment_hash: String,
    pub seed: u64,
    pub status: RunStatus,
    pub points_total: u64,
    pub points_done: u64,
    pub chips_per_point: u64,
    pub target_accuracy: f64,
    pub threads: u64,
    pub transient: bool,
    pub dataset: DatasetInfo,
    pub competition: String,
    pub sweep: Sweep,
    pub command: String,
    pub host: HostInfo,
    pub started_unix_s: f64,
    pub elapsed_s: f64,
    /// Physically odd but legal settings and tolerated data problems found when the run
    /// started (absent in older folders).
    #[serde(default)]
    pub warnings: Vec<String>,
}

/// The value `format` must have in a manifest.
pub const MANIFEST_FORMAT: &str = crate::results::FORMAT_NAME;

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

/// Columns of `confusion.csv`.
pub const CONFUSION_COLUMNS: [&str; 4] = ["point", "true_class", "predicted_class", "count"];

/// Whether a column of points.csv or chips.csv holds shares in [0, 1]: the statistics from
/// `acc_mean` to `ambiguous_frac` in points.csv, `accuracy` and `agreement` in chips.csv.
fn is_fraction_column(name: &str) -> bool {
    let share_stats = POINT_STAT_COLUMNS.get(2..15).unwrap_or_default();
    let share_chips = CHIP_COLUMNS.get(1..3).unwrap_or_default();
    share_stats.contains(&name) || share_chips.contains(&name)
}

/// One row of `points.csv`: population statistics of one sweep point.
#[derive(Debug, Clone, PartialEq)]
pub struct PointRow {
    /// Line of the row in `points.csv` (1-based; line 1 is the header).
    pub line: u64,
    pub point: u64,
    /// Values of the swept parameters, in manifest order (SI base units).
    pub params: Vec<f64>,
    pub chips: u64,
    pub samples: u64,
    pub acc_mean: Option<f64>,
    pub acc_std: Option<f64>,
    pub acc_p05: Option<f64>,
    pub acc_p50: Option<f64>,
    pub acc_p95: Option<f64>,
    pub ideal_acc: Option<f64>,
    pub baseline_acc: Option<f64>,
    pub target: Option<f64>,
    pub yield_frac: Option<f64>,
    pub yield_lo: Option<f64>,
    pub yield_hi: Option<f64>,
    pub agreement_mean: Option<f64>,
    pub ambiguous_frac: Option<f64>,
    pub nonconverged: Option<f64>,
    pub decision_time_mean_s: Option<f64>,
    pub energy_mean_j: Option<f64>,
    /// Failed decisions by kind (`FAILURE_COLUMNS` order); `None` for older folders.
    pub failed: Option<[f64; 4]>,
    /// Every cell of the row, in file column order (`None` = empty cell).
    pub cells: Vec<Option<f64>>,
}

/// `points.csv`: header and rows sorted by `point`.
#[derive(Debug, Clone, PartialEq)]
pub struct PointsTable {
    pub columns: Vec<String>,
    pub rows: Vec<PointRow>,
}

/// One row of `chips.csv`: one chip at one sweep point.
#[derive(Debug, Clone, PartialEq)]
pub struct ChipRow {
    pub line: u64,
    pub point: u64,
    pub params: Vec<f64>,
    pub chip: u64,
    pub accuracy: Option<f64>,
    pub agreement: Option<f64>,
    pub ambiguous: Option<f64>,
    pub nonconverged: Option<f64>,
    pub samples: Option<f64>,
    pub decision_time_mean_s: Option<f64>,
    pub energy_mean_j: Option<f64>,
    /// Failed decisions by kind (`FAILURE_COLUMNS` order); `None` for older folders.
    pub failed: Option<[f64; 4]>,
}

/// What a decision was counted as in `confusion.csv`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Predicted {
    /// A class, by index into `manifest.dataset.classes`.
    Class(usize),
    /// The winner's share was below the decision threshold (or the runner-up's above).
    Ambiguous,
    /// The competition-stage solve did not converge.
    NonConverged,
}

/// One row of `confusion.csv` (summed over the chips of a sweep point).
#[derive(Debug, Clone, PartialEq)]
pub struct ConfusionRow {
    pub line: u64,
    pub point: u64,
    /// Index into `manifest.dataset.classes`.
    pub true_class: usize,
    pub predicted: Predicted,
    pub count: u64,
}

/// A stage transfer curve: columns `x, out_0..out_{N-1}, share_0..share_{N-1}` (SI base units).
#[derive(Debug, Clone, PartialEq)]
pub struct TransferCurve {
    pub x: Vec<f64>,
    /// `outputs[k][i]`: output k at `x[i]`.
    pub outputs: Vec<Vec<f64>>,
    /// `shares[k][i]`: share of output k at `x[i]`.
    pub shares: Vec<Vec<f64>>,
}

/// Sidecar of a transfer curve stored in a results folder (`transfer/NAME.json`).
#[derive(Debug, Clone, PartialEq, Deserialize, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct TransferMeta {
    /// What x is, e.g. "input current of class 0".
    pub x_label: String,
    /// SI unit of x ("A", "V", or "" when dimensionless).
    #[serde(default)]
    pub x_unit: String,
}

/// A transfer curve kept in a results folder, with its label.
#[derive(Debug, Clone, PartialEq)]
pub struct NamedTransfer {
    /// File stem: `transfer/NAME.csv`.
    pub name: String,
    pub meta: TransferMeta,
    pub curve: TransferCurve,
}

/// Everything read from one results folder.
#[derive(Debug, Clone, PartialEq)]
pub struct ResultsFolder {
    pub dir: PathBuf,
    pub manifest: Manifest,
    pub points: PointsTable,
    pub chips: Vec<ChipRow>,
    pub confusion: Vec<ConfusionRow>,
    pub transfers: Vec<NamedTransfer>,
}

impl ResultsFolder {
    /// Read and check a results folder.
    pub fn read(dir: &Path) -> Result<Self, ReportError> {
        if !dir.is_dir() {
            return Err(ReportError::NotAFolder {
                path: dir.to_path_buf(),
            });
        }
        let manifest_path = dir.join("manifest.json");
        let manifest_text = read_required(&manifest_path, "the run's manifest")?;
        let manifest = parse_manifest(&manifest_text, &manifest_path)?;

        let points_path = dir.join("points.csv");
        let text = read_required(&points_path, "one row of statistics per sweep point")?;
        let points = parse_points(&text, &points_path, &manifest)?;

        let chips_path = dir.join("chips.csv");
        let text = read_required(&chips_path, "one row per chip per sweep point")?;
        let chips = parse_chips(&text, &chips_path, &manifest)?;

        let confusion_path = dir.join("confusion.csv");
        let text = read_required(&confusion_path, "decision counts per sweep point")?;
        let confusion = parse_confusion(&text, &confusion_path, &manifest)?;

        let transfers = read_transfers(&dir.join("transfer"))?;

        Ok(Self {
            dir: dir.to_path_buf(),
            manifest,
            points,
            chips,
            confusion,
            transfers,
        })
    }

    /// Whether the run stopped before every sweep point finished.
    pub fn is_partial(&self) -> bool {
        self.manifest.status == RunStatus::Partial
            || (self.points.rows.len() as u64) < self.manifest.points_total
    }

    /// The row of sweep point `point`, if it finished.
    pub fn point(&self, point: u64) -> Option<&PointRow> {
        self.points.rows.iter().find(|r| r.point == point)
    }

    /// Chips of sweep point `point`, in file order.
    pub fn chips_of(&self, point: u64) -> impl Iterator<Item = &ChipRow> {
        self.chips.iter().filter(move |c| c.point == point)
    }

    /// Confusion counts of sweep point `point`.
    pub fn confusion_of(&self, point: u64) -> impl Iterator<Item = &ConfusionRow> {
        self.confusion.iter().filter(move |c| c.point == point)
    }
}

/// A JSON file that does not parse, with the place of the problem.
fn json_error(path: &Path, e: serde_json::Error) -> ReportError {
    ReportError::ManifestJson {
        path: path.to_path_buf(),
        line: e.line(),
        column: e.column(),
        message: e.to_string(),
    }
}

fn read_required(path: &Path, what: &'static str) -> Result<String, ReportError> {
    match fs::read_to_string(path) {
        Ok(t) => Ok(t),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Err(ReportError::MissingFile {
            path: path.to_path_buf(),
            what,
        }),
        Err(source) => Err(ReportError::Read {
            path: path.to_path_buf(),
            source,
        }),
    }
}

/// Parse and check `manifest.json` text (`path` is for messages).
pub fn parse_manifest(text: &str, path: &Path) -> Result<Manifest, ReportError> {
    let json_err = |e| json_error(path, e);
    // Look at the format and its version before the typed parse, so a folder from another
    // format version says so instead of complaining about a missing key.
    let value: serde_json::Value = serde_json::from_str(text).map_err(json_err)?;
    let value_err = |key: &str, message: String| ReportError::ManifestValue {
        path: path.to_path_buf(),
        key: key.to_string(),
        message,
    };
    let Some(obj) = value.as_object() else {
        return Err(value_err("(top level)", "expected a JSON object".into()));
    };
    match obj.get("format").and_then(|f| f.as_str()) {
        Some(MANIFEST_FORMAT) => {}
        Some(other) => {
            return Err(value_err(
                "format",
                format!("is `{other}`, expected `{MANIFEST_FORMAT}`: this is not a hardmax results manifest"),
            ))
        }
        None => {
            return Err(value_err(
                "format",
                format!("is missing or not a string; expected `{MANIFEST_FORMAT}`"),
            ))
        }
    }
    let version = obj.get("format_version");
    if version.and_then(|v| v.as_u64()) != Some(SUPPORTED_FORMAT_VERSION) {
        let found = version
            .map(|v| v.to_string())
            .unwrap_or_else(|| "(missing)".into());
        let tool_version = obj
            .get("tool_version")
            .and_then(|v| v.as_str())
            .unwrap_or("unknown")
            .to_string();
        return Err(ReportError::FormatVersion {
            path: path.to_path_buf(),
            found,
            tool_version,
        });
    }
    let m: Manifest = serde_json::from_str(text).map_err(json_err)?;

    if m.points_done > m.points_total {
        return Err(value_err(
            "points_done",
            format!(
                "is {} but points_total is {}; a run cannot finish more points than it has",
                m.points_done, m.points_total
            ),
        ));
    }
    if m.status == RunStatus::Complete && m.points_done != m.points_total {
        return Err(value_err(
            "status",
            format!(
                "is `complete` but only {} of {} points are done; a stopped run is `partial`",
                m.points_done, m.points_total
            ),
        ));
    }
    if !(0.0..=1.0).contains(&m.target_accuracy) {
        return Err(value_err(
            "target_accuracy",
            format!("is {}, expected a share in [0, 1]", m.target_accuracy),
        ));
    }
    if !m.elapsed_s.is_finite() || m.elapsed_s < 0.0 {
        return Err(value_err(
            "elapsed_s",
            format!("is {}, expected seconds >= 0", m.elapsed_s),
        ));
    }
    for (i, p) in m.sweep.parameters.iter().enumerate() {
        let key = format!("sweep.parameters[{i}].values");
        if p.values.is_empty() {
            return Err(value_err(
                &key,
                format!("parameter `{}` has no values", p.path),
            ));
        }
        if let Some(v) = p.values.iter().find(|v| !v.is_finite()) {
            return Err(value_err(&key, format!("`{v}` is not a finite number")));
        }
        if p.scale == Scale::Log {
            if let Some(v) = p.values.iter().find(|v| **v <= 0.0) {
                return Err(value_err(
                    &key,
                    format!(
                        "scale is `log` but parameter `{}` has the value {v}; log scales need values > 0",
                        p.path
                    ),
                ));
            }
        }
    }
    let mut seen = BTreeSet::new();
    for p in &m.sweep.parameters {
        if !seen.insert(p.path.as_str()) {
            return Err(value_err(
                "sweep.parameters",
                format!("parameter `{}` is listed twice", p.path),
            ));
        }
    }
    Ok(m)
}

/// A CSV file's header and its records, each with its line number.
type CsvTable = (Vec<String>, Vec<Record>);

/// One CSV record with its line number.
type Record = (u64, Vec<String>);

/// Read a CSV text into its header and records, with the line of each record.
fn read_csv(text: &str, path: &Path) -> Result<CsvTable, ReportError> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .flexible(false)
        .from_reader(text.as_bytes());
    let csv_err = |e: csv::Error| {
        let line = e.position().map(|p| p.line()).unwrap_or(1);
        let message = match e.kind() {
            csv::ErrorKind::UnequalLengths {
                expected_len, len, ..
            } => format!("has {len} fields but the header has {expected_len}"),
            _ => format!("{e}"),
        };
        ReportError::Line {
            path: path.to_path_buf(),
            line,
            message,
        }
    };
    let header: Vec<String> = rdr
        .headers()
        .map_err(csv_err)?
        .iter()
        .map(str::to_string)
        .collect();
    if header.iter().all(|h| h.is_empty()) {
        return Err(ReportError::Line {
            path: path.to_path_buf(),
            line: 1,
            message: "the file is empty; expected a header line".into(),
        });
    }
    let mut rows = Vec::new();
    for rec in rdr.records() {
        let rec = rec.map_err(csv_err)?;
        let line = rec.position().map(|p| p.line()).unwrap_or(0);
        rows.push((line, rec.iter().map(str::to_string).collect()));
    }
    Ok((header, rows))
}

/// Column lookup for one CSV file.
struct Columns<'a> {
    path: &'a Path,
    header: Vec<String>,
}

impl<'a> Columns<'a> {
    /// Read a CSV text (`path` is for messages): its columns and its records.
    fn read(text: &str, path: &'a Path) -> Result<(Self, Vec<Record>), ReportError> {
        let (header, records) = read_csv(text, path)?;
        Ok((Self { path, header }, records))
    }

    /// The `point` column and the sweep-parameter columns (in manifest order).
    fn point_and_params(&self, manifest: &Manifest) -> Result<(usize, Vec<usize>), ReportError> {
        let point_col = self.find("point", "the sweep point index, first column")?;
        Ok((point_col, param_columns(self, manifest)?))
    }

    /// Every column of `names`, by name.
    fn find_all(
        &self,
        names: &[&'static str],
        hint: &str,
    ) -> Result<BTreeMap<&'static str, usize>, ReportError> {
        names
            .iter()
            .map(|&name| Ok((name, self.find(name, hint)?)))
            .collect()
    }

    /// The numbers in columns `cols` of a record, all required.
    fn req_all(&self, row: &[String], line: u64, cols: &[usize]) -> Result<Vec<f64>, ReportError> {
        cols.iter().map(|&c| self.req_f64(row, line, c)).collect()
    }

    fn find(&self, name: &str, hint: &str) -> Result<usize, ReportError> {
        self.header
            .iter()
            .position(|h| h == name)
            .ok_or_else(|| ReportError::MissingColumn {
                path: self.path.to_path_buf(),
                column: name.to_string(),
                hint: hint.to_string(),
            })
    }

    fn cell_err(&self, line: u64, col: usize, message: String) -> ReportError {
        ReportError::Cell {
            path: self.path.to_path_buf(),
            line,
            column: col + 1,
            column_name: self.header.get(col).cloned().unwrap_or_default(),
            message,
        }
    }

    fn raw<'r>(&self, row: &'r [String], line: u64, col: usize) -> Result<&'r str, ReportError> {
        row.get(col)
            .map(String::as_str)
            .ok_or_else(|| self.cell_err(line, col, "the cell is missing".into()))
    }

    /// A number; empty cell = `None`. Share columns are checked to lie in [0, 1].
    fn opt_f64(&self, row: &[String], line: u64, col: usize) -> Result<Option<f64>, ReportError> {
        let raw = self.raw(row, line, col)?;
        if raw.is_empty() {
            return Ok(None);
        }
        let v: f64 = raw.parse().map_err(|_| {
            self.cell_err(
                line,
                col,
                format!("`{raw}` is not a number (write it like 0.25 or 1e-9)"),
            )
        })?;
        if !v.is_finite() {
            return Err(self.cell_err(line, col, format!("`{raw}` is not a finite number")));
        }
        let name = self.header.get(col).map(String::as_str).unwrap_or("");
        if is_fraction_column(name) && !(0.0..=1.0).contains(&v) {
            return Err(self.cell_err(
                line,
                col,
                format!("`{raw}` is a share and must lie in [0, 1]"),
            ));
        }
        Ok(Some(v))
    }

    fn req_f64(&self, row: &[String], line: u64, col: usize) -> Result<f64, ReportError> {
        self.opt_f64(row, line, col)?.ok_or_else(|| {
            self.cell_err(
                line,
                col,
                "the cell is empty but a number is required".into(),
            )
        })
    }

    fn req_u64(&self, row: &[String], line: u64, col: usize) -> Result<u64, ReportError> {
        let raw = self.raw(row, line, col)?;
        raw.parse()
            .map_err(|_| self.cell_err(line, col, format!("`{raw}` is not a whole number >= 0")))
    }
}

/// Find the sweep-parameter columns (in manifest order).
fn param_columns(cols: &Columns, manifest: &Manifest) -> Result<Vec<usize>, ReportError> {
    manifest
        .sweep
        .parameters
        .iter()
        .enumerate()
        .map(|(i, p)| {
            cols.find(
                &p.path,
                &format!("sweep parameter {} in manifest.json", i + 1),
            )
        })
        .collect()
}

/// Parse `points.csv` text (`path` is for messages).
pub fn parse_points(
    text: &str,
    path: &Path,
    manifest: &Manifest,
) -> Result<PointsTable, ReportError> {
    let (cols, records) = Columns::read(text, path)?;
    let (point_col, pcols) = cols.point_and_params(manifest)?;
    let stat = cols.find_all(&POINT_STAT_COLUMNS, "population statistics column")?;
    let failure_cols = failure_columns(&cols.header);
    let mut rows: Vec<PointRow> = Vec::with_capacity(records.len());
    let mut seen = BTreeMap::new();
    for (line, rec) in &records {
        let line = *line;
        let point = cols.req_u64(rec, line, point_col)?;
        if let Some(prev) = seen.insert(point, line) {
            return Err(ReportError::Line {
                path: path.to_path_buf(),
                line,
                message: format!("sweep point {point} appears again (first on line {prev})"),
            });
        }
        let mut cells = Vec::with_capacity(cols.header.len());
        for c in 0..cols.header.len() {
            cells.push(cols.opt_f64(rec, line, c)?);
        }
        let params = cols.req_all(rec, line, &pcols)?;
        let get = |name: &str| -> Option<f64> {
            stat.get(name)
                .and_then(|&c| cells.get(c).copied().flatten())
        };
        let chips_col = stat.get("chips").copied().unwrap_or(0);
        let samples_col = stat.get("samples").copied().unwrap_or(0);
        rows.push(PointRow {
            line,
            point,
            params,
            chips: cols.req_u64(rec, line, chips_col)?,
            samples: cols.req_u64(rec, line, samples_col)?,
            acc_mean: get("acc_mean"),
            acc_std: get("acc_std"),
            acc_p05: get("acc_p05"),
            acc_p50: get("acc_p50"),
            acc_p95: get("acc_p95"),
            ideal_acc: get("ideal_acc"),
            baseline_acc: get("baseline_acc"),
            target: get("target"),
            yield_frac: get("yield"),
            yield_lo: get("yield_lo"),
            yield_hi: get("yield_hi"),
            agreement_mean: get("agreement_mean"),
            ambiguous_frac: get("ambiguous_frac"),
            nonconverged: get("nonconverged"),
            decision_time_mean_s: get("decision_time_mean_s"),
            energy_mean_j: get("energy_mean_j"),
            failed: failure_cols
                .map(|fc| fc.map(|c| cells.get(c).copied().flatten().unwrap_or(0.0))),
            cells,
        });
    }
    rows.sort_by_key(|r| r.point);
    Ok(PointsTable {
        columns: cols.header,
        rows,
    })
}

/// Parse `chips.csv` text (`path` is for messages).
pub fn parse_chips(
    text: &str,
    path: &Path,
    manifest: &Manifest,
) -> Result<Vec<ChipRow>, ReportError> {
    let (cols, records) = Columns::read(text, path)?;
    let (point_col, pcols) = cols.point_and_params(manifest)?;
    let c = cols.find_all(&CHIP_COLUMNS, "per-chip column")?;
    let failure_cols = failure_columns(&cols.header);
    let col = |name: &str| c.get(name).copied().unwrap_or(0);
    let mut out = Vec::with_capacity(records.len());
    for (line, rec) in &records {
        let line = *line;
        out.push(ChipRow {
            line,
            point: cols.req_u64(rec, line, point_col)?,
            params: cols.req_all(rec, line, &pcols)?,
            chip: cols.req_u64(rec, line, col("chip"))?,
            accuracy: cols.opt_f64(rec, line, col("accuracy"))?,
            agreement: cols.opt_f64(rec, line, col("agreement"))?,
            ambiguous: cols.opt_f64(rec, line, col("ambiguous"))?,
            nonconverged: cols.opt_f64(rec, line, col("nonconverged"))?,
            samples: cols.opt_f64(rec, line, col("samples"))?,
            decision_time_mean_s: cols.opt_f64(rec, line, col("decision_time_mean_s"))?,
            energy_mean_j: cols.opt_f64(rec, line, col("energy_mean_j"))?,
            failed: match failure_cols {
                Some(fc) => {
                    let mut v = [0.0; 4];
                    for (x, c) in v.iter_mut().zip(fc) {
                        *x = cols.opt_f64(rec, line, c)?.unwrap_or(0.0);
                    }
                    Some(v)
                }
                None => None,
            },
        });
    }
    Ok(out)
}

/// Positions of the failure-kind columns, when the file has all of them.
fn failure_columns(header: &[String]) -> Option<[usize; 4]> {
    let mut out = [0; 4];
    for (o, name) in out.iter_mut().zip(FAILURE_COLUMNS) {
        *o = header.iter().position(|h| h == name)?;
    }
    Some(out)
}

/// Resolve a class label from `confusion.csv`: a name from `dataset.classes`, or an index.
fn class_index(label: &str, classes: &[String]) -> Option<usize> {
    classes
        .iter()
        .position(|c| c == label)
        .or_else(|| label.parse::<usize>().ok().filter(|&i| i < classes.len()))
}

/// Parse `confusion.csv` text (`path` is for messages).
pub fn parse_confusion(
    text: &str,
    path: &Path,
    manifest: &Manifest,
) -> Result<Vec<ConfusionRow>, ReportError> {
    let (cols, records) = Columns::read(text, path)?;
    let hint = "confusion counts column";
    let pc = cols.find(CONFUSION_COLUMNS[0], hint)?;
    let tc = cols.find(CONFUSION_COLUMNS[1], hint)?;
    let prc = cols.find(CONFUSION_COLUMNS[2], hint)?;
    let cc = cols.find(CONFUSION_COLUMNS[3], hint)?;
    let classes = &manifest.dataset.classes;
    let known = || {
        let list = classes.join(", ");
        format!("expected a class of manifest.json dataset.classes ({list}) or its index")
    };
    let mut out = Vec::with_capacity(records.len());
    for (line, rec) in &records {
        let line = *line;
        let t = cols.raw(rec, line, tc)?;
        let true_class = class_index(t, classes)
            .ok_or_else(|| cols.cell_err(line, tc, format!("unknown class `{t}`: {}", known())))?;
        let p = cols.raw(rec, line, prc)?;
        let predicted = match p {
            "ambiguous" => Predicted::Ambiguous,
            "nonconverged" => Predicted::NonConverged,
            _ => Predicted::Class(class_index(p, classes).ok_or_else(|| {
                cols.cell_err(
                    line,
                    prc,
                    format!(
                        "unknown class `{p}`: {}, `ambiguous` or `nonconverged`",
                        known()
                    ),
                )
            })?),
        };
        out.push(ConfusionRow {
            line,
            point: cols.req_u64(rec, line, pc)?,
            true_class,
            predicted,
            count: cols.req_u64(rec, line, cc)?,
        });
    }
    Ok(out)
}

impl TransferCurve {
    /// Parse a transfer-curve CSV (`x, out_0..out_{N-1}, share_0..share_{N-1}`).
    pub fn parse(text: &str, path: &Path) -> Result<Self, ReportError> {
        let (cols, records) = Columns::read(text, path)?;
        let xc = cols.find("x", "the swept quantity, first column")?;
        let n = cols.header.iter().filter(|h| h.starts_with("out_")).count();
        if n == 0 {
            return Err(ReportError::MissingColumn {
                path: path.to_path_buf(),
                column: "out_0".into(),
                hint: "a transfer curve has columns x, out_0..out_{N-1}, share_0..share_{N-1}"
                    .into(),
            });
        }
        let mut oc = Vec::with_capacity(n);
        let mut sc = Vec::with_capacity(n);
        for k in 0..n {
            oc.push(cols.find(&format!("out_{k}"), "one output column per competitor")?);
            sc.push(cols.find(&format!("share_{k}"), "one share column per output")?);
        }
        let mut curve = TransferCurve {
            x: Vec::with_capacity(records.len()),
            outputs: vec![Vec::with_capacity(records.len()); n],
            shares: vec![Vec::with_capacity(records.len()); n],
        };
        for (line, rec) in &records {
            let line = *line;
            curve.x.push(cols.req_f64(rec, line, xc)?);
            for k in 0..n {
                let o = cols.req_f64(rec, line, oc[k])?;
                let s = cols.req_f64(rec, line, sc[k])?;
                if !(0.0..=1.0 + 1e-9).contains(&s) {
                    return Err(cols.cell_err(line, sc[k], format!("share {s} is outside [0, 1]")));
                }
                curve.outputs[k].push(o);
                curve.shares[k].push(s);
            }
        }
        if curve.x.is_empty() {
            return Err(ReportError::Line {
                path: path.to_path_buf(),
                line: 2,
                message: "the transfer curve has no rows".into(),
            });
        }
        Ok(curve)
    }

    /// Read a transfer-curve CSV file.
    pub fn read(path: &Path) -> Result<Self, ReportError> {
        let text = read_required(path, "the stage transfer curve")?;
        Self::parse(&text, path)
    }
}

/// Read `transfer/*.csv` (each with an optional `transfer/NAME.json` label) if the folder exists.
fn read_transfers(dir: &Path) -> Result<Vec<NamedTransfer>, ReportError> {
    if !dir.is_dir() {
        return Ok(Vec::new());
    }
    let entries = fs::read_dir(dir).map_err(|source| ReportError::Read {
        path: dir.to_path_buf(),
        source,
    })?;
    let mut csvs: Vec<PathBuf> = entries
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|e| e == "csv"))
        .collect();
    csvs.sort();
    let mut out = Vec::with_capacity(csvs.len());
    for csv_path in csvs {
        let name = csv_path
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        let curve = TransferCurve::read(&csv_path)?;
        let meta_path = csv_path.with_extension("json");
        let meta = if meta_path.is_file() {
            let text = read_required(&meta_path, "the transfer curve's axis label")?;
            serde_json::from_str(&text).map_err(|e| json_error(&meta_path, e))?
        } else {
            TransferMeta {
                x_label: "x".into(),
                x_unit: String::new(),
            }
        };
        out.push(NamedTransfer { name, meta, curve });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The share columns are picked from the schema arrays by position; this pins them by name
    /// (results-folder schema in DEVELOPERS.md): every column of points.csv and chips.csv is a
    /// share in [0, 1] except the counts (chips, samples, chip, ambiguous and non-converged
    /// decisions), times and energies.
    #[test]
    fn fraction_columns_are_the_shares_of_the_schema() {
        let not_shares = [
            "chips",
            "samples",
            "nonconverged",
            "decision_time_mean_s",
            "energy_mean_j",
            "chip",
            "ambiguous",
        ];
        for name in POINT_STAT_COLUMNS.iter().chain(&CHIP_COLUMNS) {
            assert_eq!(
                is_fraction_column(name),
                !not_shares.contains(name),
                "{name}"
            );
        }
        assert!(!is_fraction_column("point"));
    }
}
