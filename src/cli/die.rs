//! One sampled die of a results folder, rebuilt for `hardmax stage --results`: its exact
//! competition devices (the core's chip sampling, `pipeline::sample_die`, on the run's seed and
//! stream keys) and the weight stage's noiseless output currents of chosen test samples.
//!
//! The folder's identity is checked first: the manifest's `experiment_hash` must equal the hash
//! of the folder's `experiment.toml` with its input files as they are now; otherwise the die
//! would be a different one and the command refuses. The manifest is read in one place
//! ([`manifest_identity`]) through the results format's manifest type.

use std::path::{Path, PathBuf};

use anyhow::{bail, Context};

use crate::experiment::build::{build_point, prepare_data};
use crate::experiment::corners::load_run as load;
use crate::experiment::runner::experiment_hash;
use crate::stages::competition::{CompetitionChip, DecisionRule};

/// The few manifest fields a die needs.
#[derive(Clone, Debug, PartialEq)]
pub struct ManifestIdentity {
    pub experiment_hash: String,
    pub seed: u64,
    pub chips_per_point: u64,
    pub points_total: u64,
}

/// Read the identity fields of `DIR/manifest.json` through the results format's one manifest
/// type (format and version checked there).
pub fn manifest_identity(dir: &Path) -> anyhow::Result<ManifestIdentity> {
    let path = dir.join("manifest.json");
    if !path.is_file() {
        bail!(
            "{}: not a results folder of `hardmax run` (no manifest.json)",
            dir.display()
        );
    }
    let m = crate::format::Manifest::read(&path)?;
    Ok(ManifestIdentity {
        experiment_hash: m.experiment_hash,
        seed: m.seed,
        chips_per_point: m.chips_per_point,
        points_total: m.points_total,
    })
}

/// A die rebuilt from a results folder.
#[derive(Clone, Debug)]
pub struct LoadedDie {
    pub chip: CompetitionChip,
    pub process: crate::device::Process,
    pub temperature: f64,
    pub rule: DecisionRule,
    /// Test-sample indices and their competition inputs, A (empty when no sample was asked).
    pub samples: Vec<usize>,
    pub inputs: Vec<Vec<f64>>,
    pub truth: Vec<usize>,
    pub class_names: Vec<String>,
    /// Number of test samples of the split.
    pub test_samples: usize,
    pub seed: u64,
    pub folder: PathBuf,
}

/// Rebuild chip `chip` of sweep point `point` of the results folder `dir`, with the inputs of
/// the test samples `samples` (relative dataset paths taken from `data_dir`, as for the run).
pub fn load_die(
    dir: &Path,
    point: usize,
    chip: u64,
    samples: &[usize],
    data_dir: &Path,
) -> anyhow::Result<LoadedDie> {
    let id = manifest_identity(dir)?;
    let exp_file = dir.join("experiment.toml");
    let resolved = load(&exp_file, &[])
        .with_context(|| format!("reading the results folder `{}`", dir.display()))?;
    let mut at_data_dir = resolved.clone();
    at_data_dir.file = data_dir.join("experiment.toml");
    let now = experiment_hash(&at_data_dir).with_context(|| {
        format!(
            "checking the inputs of the results folder `{}`",
            dir.display()
        )
    })?;
    if id.experiment_hash != now {
        bail!(
            "{}: the manifest records experiment {} but the folder's experiment.toml with its \
             input files (from --data-dir {}) is now {}: an input changed or another hardmax \
             version wrote it, so the die would not be the one the run sampled; rerun the \
             experiment, or point --data-dir at the files the run read",
            dir.display(),
            short(&id.experiment_hash),
            data_dir.display(),
            short(&now)
        );
    }
    if id.seed != resolved.base.population.seed {
        bail!(
            "{}: the manifest's seed {} differs from experiment.toml's {}; the folder is \
             inconsistent: rerun the experiment",
            dir.display(),
            id.seed,
            resolved.base.population.seed
        );
    }
    let e = resolved.at_point.get(point).with_context(|| {
        format!(
            "--point {point}: the experiment has {} sweep point(s), 0 to {}",
            resolved.at_point.len(),
            resolved.at_point.len().saturating_sub(1)
        )
    })?;
    let chips = resolved.base.population.chips;
    if chip >= chips {
        bail!(
            "--chip {chip}: the population has {chips} chip(s) per point (indices 0 to {})",
            chips.saturating_sub(1)
        );
    }
    let prep = prepare_data(e, data_dir)?;
    let setup = build_point(e, &prep)?;
    let n_test = prep.test_y.len();
    if let Some(&s) = samples.iter().max() {
        if s >= n_test {
            bail!(
                "--sample {s}: the test split has {n_test} sample(s) (indices 0 to {})",
                n_test.saturating_sub(1)
            );
        }
    }
    let die = crate::pipeline::sample_die(
        &setup,
        &prep,
        id.seed,
        resolved
            .base
            .population
            .pairing
            .dies_at(crate::experiment::corners::die_point(&resolved, point)),
        chip,
        samples,
    )?;
    Ok(LoadedDie {
        chip: die.chip,
        process: setup.design.process.clone(),
        temperature: die.temperature,
        rule: setup.design.decision,
        samples: die.test_indices,
        inputs: die.inputs,
        truth: die.truth,
        class_names: prep.class_names.clone(),
        test_samples: n_test,
        seed: id.seed,
        folder: dir.to_path_buf(),
    })
}

fn short(h: &str) -> &str {
    &h[..h.len().min(12)]
}
