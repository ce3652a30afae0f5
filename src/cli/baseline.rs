//! `hardmax baseline`: train the float classifier on a dataset and print the two reference
//! accuracies (linfa baseline and ideal argmax of the mapped weights) on the test split.

use std::path::PathBuf;

use anyhow::Context;
use clap::Args;

use crate::data::{load_csv, stratified_split, CsvOptions, Dataset};
use crate::training::{cross_validate, train_with_references, LogisticOptions};

#[derive(Debug, Args)]
#[command(group = clap::ArgGroup::new("source").required(true).args(["dataset", "csv"]))]
#[command(after_help = crate::CAUTION)]
pub struct BaselineArgs {
    /// A shipped dataset: iris, wine or digits.
    #[arg(long, value_name = "NAME")]
    pub dataset: Option<String>,
    /// Your own CSV file: header row, numeric feature columns, one label column.
    #[arg(long, value_name = "PATH")]
    pub csv: Option<PathBuf>,
    /// Name of the label column in the CSV file.
    #[arg(long, value_name = "COL", default_value = "label", requires = "csv")]
    pub label_column: String,
    /// A CSV column to skip (repeat for several).
    #[arg(long = "ignore", value_name = "COL", requires = "csv")]
    pub ignore: Vec<String>,
    /// Share of each class held out for testing, in (0, 1).
    #[arg(long, default_value_t = 0.3)]
    pub test_fraction: f64,
    /// Master seed of the train/test split.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// L2 regularisation weight of the logistic regression [default: 0.3].
    #[arg(long)]
    pub l2: Option<f64>,
    /// Iteration limit of the optimiser [default: 500].
    #[arg(long)]
    pub max_iterations: Option<u64>,
    /// Standardise features while training (folded into the weights afterwards).
    #[arg(long)]
    pub standardize: bool,
    /// Also report K-fold stratified cross-validation accuracy of the float model (K >= 2).
    #[arg(long, value_name = "K")]
    pub folds: Option<usize>,
}

pub fn run(args: BaselineArgs) -> anyhow::Result<()> {
    let ds: Dataset = match (&args.dataset, &args.csv) {
        (Some(name), _) => Dataset::builtin(name)?,
        (None, Some(path)) => {
            let opts = CsvOptions {
                label_column: args.label_column.clone(),
                ignore_columns: args.ignore.clone(),
            };
            load_csv(path, &opts)?
        }
        (None, None) => anyhow::bail!("give a dataset with --dataset NAME or --csv PATH"),
    };
    let defaults = LogisticOptions::default();
    let opts = LogisticOptions {
        l2: args.l2.unwrap_or(defaults.l2),
        max_iterations: args.max_iterations.unwrap_or(defaults.max_iterations),
        standardize: args.standardize,
        ..defaults
    };
    let (train, test) = stratified_split(&ds, args.test_fraction, args.seed)?;
    let r = train_with_references(&train, &test, &opts)
        .with_context(|| format!("training on dataset `{}`", ds.name))?;
    let d = &r.model.diagnostics;

    let rows: Vec<(&str, String)> = vec![
        ("dataset", ds.name.clone()),
        ("samples", ds.n_samples().to_string()),
        ("features", ds.n_features().to_string()),
        (
            "classes",
            format!("{} ({})", ds.n_classes(), ds.class_names.join(", ")),
        ),
        (
            "train / test",
            format!(
                "{} / {} (test fraction {}, seed {})",
                train.n_samples(),
                test.n_samples(),
                args.test_fraction,
                args.seed
            ),
        ),
        (
            "training",
            format!(
                "multinomial logistic regression (linfa), l2 {}, max iterations {}, {}",
                opts.l2,
                opts.max_iterations,
                if opts.standardize {
                    "standardised"
                } else {
                    "min-max inputs"
                }
            ),
        ),
        (
            "optimiser",
            if d.converged {
                format!("converged (gradient norm {:.2e})", d.gradient_norm)
            } else {
                format!(
                    "NOT converged: gradient norm {:.2e} > tolerance {:.0e}; raise --max-iterations",
                    d.gradient_norm, d.gradient_tolerance
                )
            },
        ),
        ("linfa baseline", pct(r.baseline_accuracy)),
        ("ideal argmax", pct(r.ideal_accuracy)),
        ("agreement", pct(r.agreement)),
    ];
    let mut rows = rows;
    if let Some(k) = args.folds {
        let cv = cross_validate(&ds, k, args.seed, &opts)
            .with_context(|| format!("{k}-fold cross-validation on dataset `{}`", ds.name))?;
        let folds: Vec<String> = cv
            .fold_accuracies
            .iter()
            .map(|a| format!("{a:.3}"))
            .collect();
        rows.push((
            "cross-validation",
            format!(
                "{} mean over {k} stratified folds ({})",
                pct(cv.mean_accuracy),
                folds.join(", ")
            ),
        ));
    }
    let width = rows.iter().map(|(k, _)| k.len()).max().unwrap_or(0);
    for (k, v) in rows {
        println!("{k:<width$}  {v}");
    }
    println!();
    println!("{}", crate::CAUTION);
    Ok(())
}

fn pct(x: f64) -> String {
    format!("{:.4} ({:.2} %)", x, 100.0 * x)
}
