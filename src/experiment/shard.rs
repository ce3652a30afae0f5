//! Shards: one experiment split into independent parts that run anywhere (a batch scheduler's
//! array job, several workstations) and merge into exactly the single-machine results.
//!
//! Work unit = (sweep point, chip). Units are numbered point-major, `u = point * chips + chip`,
//! and shard `k` of `n` (1-based) takes the contiguous range `[(k-1) U / n, k U / n)` of the `U`
//! units: a deterministic split whose sizes differ by at most one unit. A chip's outcome depends
//! only on (seed, point, chip) (DEVELOPERS.md, "Chip streams"), so the records of the shards,
//! concatenated in chip order, are the records a single run writes; every population statistic
//! is computed from all chips of a point after merging, never from a shard.
//!
//! A shard folder has the layout of a results folder without the tables (a shard's statistics
//! would be statistics of a part of a population): `experiment.toml`, `manifest.json` with a
//! `shard` entry, `experiment.hash` (the shard's own stamp, so a folder of shard 2/4 never
//! resumes as shard 3/4) and `points/point-NNNNNN.json` holding the shard's chips of each point
//! it touches. Format: DEVELOPERS.md, "Shard folders".

use std::collections::BTreeMap;
use std::fmt;
use std::ops::Range;
use std::path::{Path, PathBuf};
use std::str::FromStr;

use sha2::{Digest, Sha256};

use super::config::Resolved;
use super::results::{
    parse_chip_line, ChipStats, PointRecord, ResultsDir, ResultsError, FORMAT_NAME, FORMAT_VERSION,
};
use crate::format::{Manifest, ManifestError, MergedFrom, RunStatus, ShardEntry};
use crate::io::write_atomic;

/// "this shard of that many", 1-based (`2/4`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct ShardSpec {
    /// 1..=count.
    pub index: u64,
    pub count: u64,
}

impl fmt::Display for ShardSpec {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

impl FromStr for ShardSpec {
    type Err = ShardError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let bad = |m: &str| ShardError::Spec {
            text: s.to_string(),
            message: m.to_string(),
        };
        let (k, n) = s
            .trim()
            .split_once('/')
            .ok_or_else(|| bad("expected K/N, e.g. 2/4 (shard 2 of 4)"))?;
        let k: u64 = k
            .trim()
            .parse()
            .map_err(|_| bad("K is not a whole number"))?;
        let n: u64 = n
            .trim()
            .parse()
            .map_err(|_| bad("N is not a whole number"))?;
        if n == 0 {
            return Err(bad("N must be at least 1"));
        }
        if k == 0 || k > n {
            return Err(bad(&format!(
                "shard {k} is outside 1..{n}: shards are numbered from 1 to N"
            )));
        }
        Ok(Self { index: k, count: n })
    }
}

impl ShardSpec {
    /// Folder name used by `slurm-script` and the default of `run --shard`: `shard-002-of-004`.
    pub fn folder_name(&self) -> String {
        let w = self.count.to_string().len().max(3);
        format!("shard-{:0w$}-of-{:0w$}", self.index, self.count)
    }
}

/// Errors of splitting and merging; each names the shard or folder and says what to rerun.
#[derive(Debug, thiserror::Error)]
pub enum ShardError {
    #[error("shard `{text}`: {message}")]
    Spec { text: String, message: String },
    #[error("{count} shards is more than the {units} work units (sweep points x chips) of this experiment: use at most {units} shards")]
    TooMany { count: u64, units: u64 },
    #[error("`{0}` is not a shard folder: {1}")]
    NotShard(PathBuf, String),
    #[error("`{folder}` was written in results format version {found}; this hardmax reads version {expected}. Rerun that shard with this hardmax (same command)")]
    FormatVersion {
        folder: PathBuf,
        found: String,
        expected: u32,
    },
    #[error("the shards belong to different experiments or input files; merge only shards of one experiment:\n{0}")]
    Mixed(String),
    #[error("cannot merge:\n{problems}\nrerun shard(s) {rerun} with the same command (an unfinished shard resumes), then merge again")]
    Incomplete { problems: String, rerun: String },
    #[error("`{folder}` (shard {shard}): {message}. Rerun that shard with --fresh")]
    Content {
        folder: PathBuf,
        shard: ShardSpec,
        message: String,
    },
    #[error(
        "the merged results folder `{0}` is also one of the shard folders; choose another --out"
    )]
    OutIsShard(PathBuf),
    #[error("no shard folders given")]
    Empty,
    #[error(transparent)]
    Results(#[from] ResultsError),
}

/// The work units one run does: all of them, or one shard's contiguous range.
#[derive(Clone, Debug)]
pub struct Plan {
    shard: Option<ShardSpec>,
    chips: u64,
    points: usize,
    /// Unit range `[start, end)`.
    start: u64,
    end: u64,
    inputs_hash: String,
}

impl Plan {
    /// The plan of a run of `resolved`, whole or one shard. Refuses more shards than units.
    pub fn new(resolved: &Resolved, shard: Option<ShardSpec>) -> Result<Self, ShardError> {
        let chips = resolved.base.population.chips;
        let points = resolved.points.len();
        let units = points as u64 * chips;
        let (start, end) = match shard {
            None => (0, units),
            Some(s) => {
                if s.index == 0 || s.index > s.count {
                    return Err(ShardError::Spec {
                        text: s.to_string(),
                        message: format!("shard {} is outside 1..{}", s.index, s.count),
                    });
                }
                if s.count > units {
                    return Err(ShardError::TooMany {
                        count: s.count,
                        units,
                    });
                }
                unit_range(units, s)
            }
        };
        Ok(Self {
            shard,
            chips,
            points,
            start,
            end,
            inputs_hash: inputs_hash(resolved),
        })
    }

    /// Is this a shard (not a whole run)?
    pub fn is_shard(&self) -> bool {
        self.shard.is_some()
    }

    /// The chips of `point` this run evaluates (possibly empty).
    pub fn chips_of(&self, point: usize) -> Range<u64> {
        let first = point as u64 * self.chips;
        let lo = self.start.max(first);
        let hi = self.end.min(first + self.chips);
        if lo >= hi {
            0..0
        } else {
            (lo - first)..(hi - first)
        }
    }

    /// The sweep points this run touches.
    pub fn points(&self) -> Vec<usize> {
        (0..self.points)
            .filter(|&p| !self.chips_of(p).is_empty())
            .collect()
    }

    /// What the results folder is stamped with: the experiment hash for a whole run; for a shard
    /// a hash of the experiment hash, the input files and the shard, so a folder never resumes
    /// as another shard or with other inputs.
    pub fn stamp(&self, experiment_hash: &str) -> String {
        match self.shard {
            None => experiment_hash.to_string(),
            Some(s) => {
                let mut h = Sha256::new();
                h.update(b"hardmax-shard\n");
                h.update(experiment_hash.as_bytes());
                h.update(b"\n");
                h.update(self.inputs_hash.as_bytes());
                h.update(format!("\n{}/{}", s.index, s.count).as_bytes());
                hex(&h.finalize())
            }
        }
    }

    /// For a shard's progress lines: which chips of `point` the line's statistics cover.
    pub fn part_note(&self, point: usize) -> String {
        if self.shard.is_none() {
            return String::new();
        }
        let r = self.chips_of(point);
        format!(
            " (chips {}..{} of {} only; population statistics after merging)",
            r.start,
            r.end.saturating_sub(1),
            self.chips
        )
    }

    /// The manifest's `shard` entry (None for a whole run).
    pub fn manifest_entry(&self) -> Option<ShardEntry> {
        self.shard.map(|s| ShardEntry {
            index: s.index,
            count: s.count,
            units_total: self.points as u64 * self.chips,
            unit_start: self.start,
            unit_end: self.end,
            inputs_hash: self.inputs_hash.clone(),
        })
    }

    /// Tell the observer what this run will do, given the points already finished.
    pub fn announce(&self, observer: &dyn super::runner::Observer, finished: &[PointRecord]) {
        let mine = self.points();
        let done = mine
            .iter()
            .filter(|p| finished.iter().any(|r| r.point == **p))
            .count();
        match self.shard {
            None => observer.start(mine.len(), done, self.chips),
            Some(s) => {
                let todo = mine
                    .iter()
                    .filter(|p| !finished.iter().any(|r| r.point == **p))
                    .map(|&p| {
                        let r = self.chips_of(p);
                        r.end - r.start
                    })
                    .sum();
                observer.start_units(&s.to_string(), mine.len(), done, todo);
            }
        }
    }
}

/// Units `[start, end)` of shard `s` out of `units` (balanced: sizes differ by at most one).
pub fn unit_range(units: u64, s: ShardSpec) -> (u64, u64) {
    let at = |k: u64| ((units as u128 * k as u128) / s.count as u128) as u64;
    (at(s.index - 1), at(s.index))
}

fn hex(b: &[u8]) -> String {
    b.iter().map(|x| format!("{x:02x}")).collect()
}

/// Hash of every input file the experiment reads (dataset CSV, hidden weights), by content, so
/// shards run on machines with different copies of a file are never merged.
pub fn inputs_hash(resolved: &Resolved) -> String {
    let base_dir = resolved
        .file
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_default();
    let mut files: Vec<PathBuf> = Vec::new();
    for e in std::iter::once(&resolved.base).chain(resolved.at_point.iter()) {
        if let Some(f) = &e.dataset.file {
            files.push(f.clone());
        }
        if e.hidden.units > 0 {
            if let Some(f) = &e.hidden.weights_file {
                files.push(f.clone());
            }
        }
    }
    files.sort();
    files.dedup();
    let mut h = Sha256::new();
    for f in &files {
        h.update(f.to_string_lossy().as_bytes());
        h.update(b"\n");
        match std::fs::read(base_dir.join(f)) {
            Ok(bytes) => h.update(Sha256::digest(&bytes)),
            Err(_) => h.update(b"unreadable"),
        }
        h.update(b"\n");
    }
    hex(&h.finalize())
}

/// One shard folder as read for merging.
struct ShardFolder {
    dir: PathBuf,
    spec: ShardSpec,
    manifest: Manifest,
    shard: ShardEntry,
    experiment_toml: Vec<u8>,
}

fn read_shard(dir: &Path) -> Result<ShardFolder, ShardError> {
    let not = |m: String| ShardError::NotShard(dir.to_path_buf(), m);
    let manifest = Manifest::read(&dir.join("manifest.json")).map_err(|e| match e {
        ManifestError::FormatVersion { found, .. } => ShardError::FormatVersion {
            folder: dir.to_path_buf(),
            found,
            expected: FORMAT_VERSION,
        },
        ManifestError::Value { key, .. } if key == "format" => {
            not(format!("its manifest is not a `{FORMAT_NAME}` manifest"))
        }
        other => not(other.to_string()),
    })?;
    let shard = manifest.shard.clone().ok_or_else(|| {
        not("its manifest has no `shard` entry (a whole results folder, not a shard of one)".into())
    })?;
    let spec = ShardSpec {
        index: shard.index,
        count: shard.count,
    };
    if spec.index == 0 || spec.index > spec.count {
        return Err(not(format!(
            "shard entry {spec} is outside 1..{}",
            spec.count
        )));
    }
    let experiment_toml = std::fs::read(dir.join("experiment.toml"))
        .map_err(|e| not(format!("cannot read experiment.toml: {e}")))?;
    Ok(ShardFolder {
        dir: dir.to_path_buf(),
        spec,
        manifest,
        shard,
        experiment_toml,
    })
}

/// What a merge wrote.
#[derive(Debug)]
pub struct MergeSummary {
    pub out: PathBuf,
    pub shards: u64,
    pub points: usize,
    pub records: Vec<PointRecord>,
}

/// Merge shard folders (in any order) into the results folder `out`: the same tables and point
/// records as a single-machine run of the experiment (point records differ only in their
/// `elapsed_s`, the sum of the shards' times). Refuses shards of different experiments, input
/// files or splits, other format versions, unfinished shards, and missing or duplicated shards
/// (naming which to rerun). `fresh` replaces results of another experiment in `out`.
pub fn merge(
    out: &Path,
    shard_dirs: &[PathBuf],
    fresh: bool,
    command: &str,
) -> Result<MergeSummary, ShardError> {
    if shard_dirs.is_empty() {
        return Err(ShardError::Empty);
    }
    let out_canon = std::fs::canonicalize(out).ok();
    let mut shards = Vec::new();
    for d in shard_dirs {
        if out_canon.is_some() && std::fs::canonicalize(d).ok() == out_canon {
            return Err(ShardError::OutIsShard(out.to_path_buf()));
        }
        shards.push(read_shard(d)?);
    }

    // One experiment, one set of inputs, one split.
    let identity = |s: &ShardFolder| {
        (
            s.manifest.experiment_hash.clone(),
            s.shard.inputs_hash.clone(),
            s.spec.count,
            s.experiment_toml.clone(),
        )
    };
    let first = identity(&shards[0]);
    if shards.iter().any(|s| identity(s) != first) {
        let lines = shards
            .iter()
            .map(|s| {
                format!(
                    "  `{}`: experiment `{}` (hash {}, inputs {}), shard {}",
                    s.dir.display(),
                    s.manifest.experiment_name,
                    &s.manifest.experiment_hash[..s.manifest.experiment_hash.len().min(12)],
                    &s.shard.inputs_hash[..s.shard.inputs_hash.len().min(12)],
                    s.spec
                )
            })
            .collect::<Vec<_>>()
            .join("\n");
        return Err(ShardError::Mixed(lines));
    }

    // Every shard exactly once, each finished.
    let n = shards[0].spec.count;
    let mut by_index: BTreeMap<u64, Vec<&ShardFolder>> = BTreeMap::new();
    for s in &shards {
        by_index.entry(s.spec.index).or_default().push(s);
    }
    let mut problems = Vec::new();
    let mut rerun = Vec::new();
    let missing: Vec<u64> = (1..=n).filter(|k| !by_index.contains_key(k)).collect();
    if !missing.is_empty() {
        problems.push(format!(
            "  missing shard(s) {} of {n}",
            missing
                .iter()
                .map(u64::to_string)
                .collect::<Vec<_>>()
                .join(", ")
        ));
        rerun.extend(missing.iter().map(|k| format!("{k}/{n}")));
    }
    for (k, v) in &by_index {
        if v.len() > 1 {
            problems.push(format!(
                "  shard {k}/{n} given {} times: {}; give each shard once",
                v.len(),
                v.iter()
                    .map(|s| format!("`{}`", s.dir.display()))
                    .collect::<Vec<_>>()
                    .join(", ")
            ));
        }
        for s in v
            .iter()
            .filter(|s| s.manifest.status != RunStatus::Complete)
        {
            problems.push(format!(
                "  shard {k}/{n} in `{}` is unfinished (status partial)",
                s.dir.display()
            ));
            rerun.push(format!("{k}/{n}"));
        }
    }
    if !problems.is_empty() {
        rerun.dedup();
        return Err(ShardError::Incomplete {
            problems: problems.join("\n"),
            rerun: if rerun.is_empty() {
                "none (remove the duplicates)".into()
            } else {
                rerun.join(", ")
            },
        });
    }

    // Gather each point's parts in chip order and check that they tile 0..chips.
    let chips = shards[0].manifest.chips_per_point;
    let points_total = shards[0].manifest.points_total as usize;
    let units = points_total as u64 * chips;
    // Each part: its record and its chip file.
    let mut parts: BTreeMap<usize, Vec<(PointRecord, PathBuf)>> = BTreeMap::new();
    let mut shard_elapsed = Vec::new();
    for s in &shards {
        let bad = |message: String| ShardError::Content {
            folder: s.dir.clone(),
            shard: s.spec,
            message,
        };
        let (start, end) = unit_range(units, s.spec);
        let shard_dir = ResultsDir::at(&s.dir);
        let recs = shard_dir.load_points();
        let mut expected: Vec<(usize, Range<u64>)> = Vec::new();
        for p in 0..points_total {
            let first = p as u64 * chips;
            let (lo, hi) = (start.max(first), end.min(first + chips));
            if lo < hi {
                expected.push((p, (lo - first)..(hi - first)));
            }
        }
        let got: Vec<usize> = recs.iter().map(|r| r.point).collect();
        let want: Vec<usize> = expected.iter().map(|(p, _)| *p).collect();
        if got != want {
            return Err(bad(format!(
                "holds records of points {got:?}, expected points {want:?}"
            )));
        }
        for (r, (_, range)) in recs.into_iter().zip(expected) {
            if r.chip_range() != range {
                return Err(bad(format!(
                    "point {} holds chips other than {}..{}",
                    r.point,
                    range.start,
                    range.end - 1
                )));
            }
            let file = shard_dir.chips_path(r.point);
            parts.entry(r.point).or_default().push((r, file));
        }
        shard_elapsed.push((
            s.spec,
            MergedFrom {
                shard: s.spec.to_string(),
                folder: s.dir.display().to_string(),
                host: Some(s.manifest.host.clone()),
                threads: Some(s.manifest.threads),
                elapsed_s: Some(s.manifest.elapsed_s),
            },
        ));
    }
    let mut merged_parts = Vec::with_capacity(points_total);
    for (point, mut v) in parts {
        v.sort_by_key(|(r, _)| r.first_chip);
        let mut files = Vec::with_capacity(v.len());
        let mut it = v.into_iter();
        let Some((mut rec, file)) = it.next() else {
            continue;
        };
        files.push(file);
        let mut n = rec.stats.chips() as u64;
        for (r, file) in it {
            let same = r.params == rec.params
                && r.ideal_acc.to_bits() == rec.ideal_acc.to_bits()
                && r.baseline_acc.to_bits() == rec.baseline_acc.to_bits()
                && r.target.to_bits() == rec.target.to_bits()
                && r.z.to_bits() == rec.z.to_bits()
                && r.confusion.len() == rec.confusion.len();
            if !same {
                return Err(ShardError::Mixed(format!(
                    "  point {point}: the shards disagree on its settings or trained classifier"
                )));
            }
            for (a, b) in rec.confusion.iter_mut().zip(&r.confusion) {
                for (x, y) in a.iter_mut().zip(b) {
                    *x += y;
                }
            }
            n += r.stats.chips() as u64;
            rec.elapsed_s += r.elapsed_s;
            // Parts are in chip order: the first failure of the point is the first part's.
            rec.first_failure = rec.first_failure.or(r.first_failure);
            files.push(file);
        }
        if n != chips {
            return Err(ShardError::Mixed(format!(
                "  point {point}: {n} chips after merging, expected {chips}"
            )));
        }
        merged_parts.push((rec, files));
    }

    // Write the merged folder like a run does: stamp, experiment, records, tables, manifest.
    let first = &shards[0];
    let (dir, _) = ResultsDir::open(out, &first.manifest.experiment_hash, fresh)?;
    write_atomic(&out.join("experiment.toml"), &first.experiment_toml)
        .map_err(ResultsError::from)?;
    // Each point's chip file: its parts' lines in chip order, streamed, and its statistics
    // accumulated again over all its chips in that order (the same sums as a single run).
    let n_params = first.manifest.sweep.parameters.len();
    let mut records = Vec::with_capacity(merged_parts.len());
    for (mut rec, files) in merged_parts {
        let point = rec.point;
        let mut out_file = dir.stream_chips(point)?;
        let mut stats = ChipStats::default();
        for file in files {
            let unreadable = |e: String| {
                ShardError::Mixed(format!(
                "  point {point}: cannot read the chip file `{}`: {e}; rerun its shard with --fresh",
                file.display()
            ))
            };
            let f = std::fs::File::open(&file).map_err(|e| unreadable(e.to_string()))?;
            for line in std::io::BufRead::lines(std::io::BufReader::new(f)) {
                let line = line.map_err(|e| unreadable(e.to_string()))?;
                let row = parse_chip_line(&line, n_params)
                    .filter(|r| r.chip == stats.chips() as u64)
                    .ok_or_else(|| unreadable(format!("line `{line}` is not the next chip")))?;
                stats.push(&row);
                out_file
                    .write(format!("{line}\n").as_bytes())
                    .map_err(ResultsError::from)?;
            }
        }
        out_file.commit().map_err(ResultsError::from)?;
        rec.first_chip = 0;
        rec.stats = stats;
        dir.save_point(&rec)?;
        records.push(rec);
    }
    let m = &first.manifest;
    dir.write_tables(&records, &m.axis_paths(), &m.dataset.classes)?;
    if let Some(labels) = m
        .sweep
        .parameters
        .last()
        .filter(|p| p.path == super::corners::CORNER_AXIS)
        .and_then(|p| p.labels.as_ref())
    {
        hardmax_report::corners::write_corners_table(out, &records, &m.axis_paths(), labels)
            .map_err(ResultsError::from)?;
    }
    shard_elapsed.sort_by_key(|(spec, _)| *spec);
    let merged = Manifest {
        status: RunStatus::Complete,
        points_done: records.len() as u64,
        command: command.to_string(),
        started_unix_s: shards
            .iter()
            .map(|s| s.manifest.started_unix_s)
            .min()
            .unwrap_or(m.started_unix_s),
        elapsed_s: shards.iter().map(|s| s.manifest.elapsed_s).sum(),
        shard: None,
        merged_from: Some(shard_elapsed.into_iter().map(|(_, f)| f).collect()),
        ..m.clone()
    };
    merged
        .write(&out.join("manifest.json"))
        .map_err(ResultsError::from)?;
    Ok(MergeSummary {
        out: out.to_path_buf(),
        shards: n,
        points: records.len(),
        records,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spec_parses_and_refuses() {
        assert_eq!(
            "2/4".parse::<ShardSpec>().unwrap(),
            ShardSpec { index: 2, count: 4 }
        );
        for bad in ["0/4", "5/4", "1/0", "2", "a/4", "2/b", "-1/4"] {
            assert!(bad.parse::<ShardSpec>().is_err(), "{bad}");
        }
        let e = "5/4".parse::<ShardSpec>().unwrap_err().to_string();
        assert!(e.contains("outside 1..4"), "{e}");
    }

    /// The split is a partition of 0..U into contiguous ranges whose sizes differ by at most 1
    /// (balanced), for awkward sizes.
    #[test]
    fn unit_ranges_partition_and_balance() {
        for units in [1u64, 7, 10, 23, 100, 1_000_003] {
            for n in 1..=units.min(13) {
                let mut next = 0;
                let (mut lo, mut hi) = (u64::MAX, 0);
                for k in 1..=n {
                    let (a, b) = unit_range(units, ShardSpec { index: k, count: n });
                    assert_eq!(a, next);
                    next = b;
                    lo = lo.min(b - a);
                    hi = hi.max(b - a);
                }
                assert_eq!(next, units);
                assert!(hi - lo <= 1, "units {units}, n {n}: sizes {lo}..{hi}");
            }
        }
    }

    #[test]
    fn folder_names_sort_by_index() {
        let a = ShardSpec {
            index: 2,
            count: 12,
        }
        .folder_name();
        let b = ShardSpec {
            index: 10,
            count: 12,
        }
        .folder_name();
        assert_eq!(a, "shard-002-of-012");
        assert!(a < b);
    }
}
