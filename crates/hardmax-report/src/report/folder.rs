//! Reading a results folder (schema: DEVELOPERS.md, "Results folder"): `manifest.json`,
//! `points.csv`, `chips.csv`, `confusion.csv`, and optional stage transfer curves kept in
//! `transfer/NAME.csv` (with `transfer/NAME.json` holding the x-axis label, see
//! [`TransferMeta`]).
//!
//! Reading is strict about the schema (every required column, every manifest key, the format
//! version) and names the file, line and column of anything wrong. Extra columns in
//! `points.csv` are kept and shown in the report table as plain numbers.

use std::collections::BTreeMap;
use std::fs;
use std::path::{Path, PathBuf};

use serde::Deserialize;

use hardmax_core::pipeline::FailureCounts;

use super::error::ReportError;

pub use crate::format::{
    ChipRow, DatasetInfo, HostInfo, Manifest, RunStatus, Scale, Sweep, SweepMode, SweepParameter,
    CHIP_COLUMNS, CONFUSION_COLUMNS, FAILURE_COLUMNS, POINT_STAT_COLUMNS,
};

/// The value `format` must have in a manifest.
pub const MANIFEST_FORMAT: &str = crate::format::FORMAT_NAME;

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

/// One row of `chips.csv` as read: its line, point and parameter values, and the chip's row.
#[derive(Debug, Clone, PartialEq)]
pub struct ChipEntry {
    pub line: u64,
    pub point: u64,
    pub params: Vec<f64>,
    pub row: ChipRow,
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
    /// What the report needs of `chips.csv`, per sweep point (bounded: no row is kept).
    pub chips: BTreeMap<u64, PointChips>,
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

        // chips.csv is streamed (a 10^6-die run's file is about 60 bytes per die): every row
        // is checked, and each point keeps only the counts the figures need.
        let chips_path = dir.join("chips.csv");
        let file = open_required(&chips_path, "one row per chip per sweep point")?;
        let mut chips: BTreeMap<u64, PointChips> = BTreeMap::new();
        for_each_chip(
            std::io::BufReader::with_capacity(1 << 16, file),
            &chips_path,
            &manifest,
            |c| chips.entry(c.point).or_default().add(&c.row),
        )?;

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

    /// What `chips.csv` holds of sweep point `point` (none when it has no row).
    pub fn chips_of(&self, point: u64) -> Option<&PointChips> {
        self.chips.get(&point)
    }

    /// Number of rows read from `chips.csv`.
    pub fn chip_rows(&self) -> u64 {
        self.chips.values().map(|c| c.rows).sum()
    }

    /// Call `each` with the mean decision time of every chip of `point` that has one, in file
    /// order, reading `chips.csv` again (streamed; for figures that need a second pass).
    pub fn for_each_decision_time(
        &self,
        point: u64,
        mut each: impl FnMut(f64),
    ) -> Result<(), ReportError> {
        self.for_each_chip_of(point, |row| {
            if let Some(t) = row.decision_time_mean_s {
                each(t);
            }
        })
    }

    /// Call `each` with every chip row of `point`, in file order, reading `chips.csv` again
    /// (streamed; for sections that need the dies themselves, e.g. paired comparisons).
    pub fn for_each_chip_of(
        &self,
        point: u64,
        mut each: impl FnMut(&ChipRow),
    ) -> Result<(), ReportError> {
        let path = self.dir.join("chips.csv");
        let file = open_required(&path, "one row per chip per sweep point")?;
        for_each_chip(
            std::io::BufReader::with_capacity(1 << 16, file),
            &path,
            &self.manifest,
            |c| {
                if c.point == point {
                    each(&c.row);
                }
            },
        )
    }

    /// Confusion counts of sweep point `point`.
    pub fn confusion_of(&self, point: u64) -> impl Iterator<Item = &ConfusionRow> {
        self.confusion.iter().filter(move |c| c.point == point)
    }
}

/// What the report keeps of one sweep point's rows of `chips.csv`: counts, not rows.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct PointChips {
    /// Rows of the point.
    pub rows: u64,
    /// How many chips have each accuracy value (exact; at most one value per possible number
    /// of correct test decisions).
    pub accuracies: crate::stats::ValueCounts,
    /// Chips with a finite, positive mean decision time, and the smallest and largest.
    pub timed: u64,
    pub time_min_s: f64,
    pub time_max_s: f64,
}

impl PointChips {
    fn add(&mut self, c: &ChipRow) {
        self.rows += 1;
        self.accuracies.add(c.accuracy);
        if let Some(t) = c.decision_time_mean_s.filter(|t| t.is_finite() && *t > 0.0) {
            if self.timed == 0 {
                (self.time_min_s, self.time_max_s) = (t, t);
            } else {
                self.time_min_s = self.time_min_s.min(t);
                self.time_max_s = self.time_max_s.max(t);
            }
            self.timed += 1;
        }
    }
}

/// Open a file the folder must hold, as [`read_required`] does.
fn open_required(path: &Path, what: &'static str) -> Result<fs::File, ReportError> {
    match fs::File::open(path) {
        Ok(f) => Ok(f),
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

/// Parse and check `manifest.json` text (`path` is for messages), through the format's own
/// [`Manifest::parse`].
pub fn parse_manifest(text: &str, path: &Path) -> Result<Manifest, ReportError> {
    Ok(Manifest::parse(text, path)?)
}

/// A CSV file's header and its records, each with its line number.
type CsvTable = (Vec<String>, Vec<Record>);

/// One CSV record with its line number.
type Record = (u64, Vec<String>);

/// The error of a CSV reader, with the file and line.
fn csv_error(path: &Path, e: csv::Error) -> ReportError {
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
}

/// A CSV reader over `input` and the header it read (an empty file is refused).
fn csv_reader<R: std::io::Read>(
    input: R,
    path: &Path,
) -> Result<(Vec<String>, csv::Reader<R>), ReportError> {
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .flexible(false)
        .from_reader(input);
    let header: Vec<String> = rdr
        .headers()
        .map_err(|e| csv_error(path, e))?
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
    Ok((header, rdr))
}

/// Read a CSV text into its header and records, with the line of each record.
fn read_csv(text: &str, path: &Path) -> Result<CsvTable, ReportError> {
    let (header, mut rdr) = csv_reader(text.as_bytes(), path)?;
    let mut rows = Vec::new();
    for rec in rdr.records() {
        let rec = rec.map_err(|e| csv_error(path, e))?;
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

/// Read `chips.csv` from `input` one row at a time (`path` is for messages), checking every
/// row, and hand each to `each`: memory does not grow with the number of rows.
pub fn for_each_chip<R: std::io::Read>(
    input: R,
    path: &Path,
    manifest: &Manifest,
    mut each: impl FnMut(ChipEntry),
) -> Result<(), ReportError> {
    let (header, mut rdr) = csv_reader(input, path)?;
    let cols = Columns { path, header };
    let (point_col, pcols) = cols.point_and_params(manifest)?;
    let c = cols.find_all(&CHIP_COLUMNS, "per-chip column")?;
    let failure_cols = failure_columns(&cols.header);
    let col = |name: &str| c.get(name).copied().unwrap_or(0);
    let mut record = csv::StringRecord::new();
    loop {
        match rdr.read_record(&mut record) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => return Err(csv_error(path, e)),
        }
        let line = record.position().map(|p| p.line()).unwrap_or(0);
        let rec: Vec<String> = record.iter().map(str::to_string).collect();
        let rec = &rec;
        // Counts are whole numbers; an empty cell reads as 0 (NaN for a share).
        let count = |name: &str| -> Result<u64, ReportError> {
            Ok(cols.opt_f64(rec, line, col(name))?.map_or(0, |v| v as u64))
        };
        let share = |name: &str| -> Result<f64, ReportError> {
            Ok(cols.opt_f64(rec, line, col(name))?.unwrap_or(f64::NAN))
        };
        let mut by_kind = [0u64; 4];
        if let Some(fc) = failure_cols {
            for (n, c) in by_kind.iter_mut().zip(fc) {
                *n = cols.opt_f64(rec, line, c)?.map_or(0, |v| v as u64);
            }
        }
        // `FAILURE_COLUMNS` order is `FailureKind::ALL` order.
        let [not_converged, out_of_supply_compliance, weight_stage, noise] = by_kind;
        let failed = FailureCounts {
            not_converged,
            out_of_supply_compliance,
            weight_stage,
            noise,
        };
        each(ChipEntry {
            line,
            point: cols.req_u64(rec, line, point_col)?,
            params: cols.req_all(rec, line, &pcols)?,
            row: ChipRow {
                chip: cols.req_u64(rec, line, col("chip"))?,
                accuracy: share("accuracy")?,
                agreement: share("agreement")?,
                ambiguous: count("ambiguous")?,
                nonconverged: count("nonconverged")?,
                failed,
                samples: count("samples")?,
                decision_time_mean_s: cols.opt_f64(rec, line, col("decision_time_mean_s"))?,
                energy_mean_j: cols.opt_f64(rec, line, col("energy_mean_j"))?,
                // The report reads the program-and-verify figures from points.csv.
                programming: None,
            },
        });
    }
    Ok(())
}

/// Parse `chips.csv` text (`path` is for messages) into its rows.
pub fn parse_chips(
    text: &str,
    path: &Path,
    manifest: &Manifest,
) -> Result<Vec<ChipEntry>, ReportError> {
    let mut out = Vec::new();
    for_each_chip(text.as_bytes(), path, manifest, |c| out.push(c))?;
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
