//! The error budget: an analytic two-class check, the budget on digits, bad input, and the
//! command with its files (assert_cmd).

use std::path::Path;

use assert_cmd::Command;
use ndarray::{array, Array2};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use statrs::distribution::{ContinuousCDF, Normal as StatNormal};

use hardmax::experiment::budget::{budget_of, BudgetError, BudgetSpec};
use hardmax::pipeline::{ClassifierDesign, CompetitionDesign, Dies, Prepared};
use hardmax::stages::competition::DecisionRule;
use hardmax::stages::weights::{
    Conditions, ElementDesign, InputDesign, LinearElement, OffsetSetting, SignedEncoding,
    WeightStageDesign,
};
use hardmax_report::report::budget::ItemKind;

const MU: f64 = 1.0;
const S: f64 = 1.0;
/// Feature f maps to the chip input u = 0.5 + f / RANGE (so f in [-6, 6] stays unclipped).
const RANGE: f64 = 12.0;

/// Invented data: two Gaussian classes on one feature, N(+MU, S^2) (class 0) and N(-MU, S^2)
/// (class 1), `per_class` samples each, and the classifier "class 0 when f > 0" by hand.
fn invented_two_class(per_class: usize) -> Prepared {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2024);
    let n = Normal::new(0.0, S).unwrap();
    let mut u = Vec::with_capacity(2 * per_class);
    let mut y = Vec::with_capacity(2 * per_class);
    for k in 0..2 * per_class {
        let class = k % 2;
        let mean = if class == 0 { MU } else { -MU };
        let f = mean + n.sample(&mut rng);
        u.push((0.5 + f / RANGE).clamp(0.0, 1.0));
        y.push(class);
    }
    // score_0 - score_1 = 2 (u - 0.5) = 2 f / RANGE: the decision is the sign of f.
    let w = array![[1.0], [-1.0]];
    let b = array![-0.5, 0.5];
    let pred: Vec<usize> = u.iter().map(|&x| usize::from(x < 0.5)).collect();
    let acc = pred.iter().zip(&y).filter(|(p, t)| p == t).count() as f64 / y.len() as f64;
    Prepared {
        dataset_name: "invented-two-gaussians".into(),
        class_names: vec!["plus".into(), "minus".into()],
        n_features: 1,
        n_train: 0,
        test_u: Array2::from_shape_vec((u.len(), 1), u).unwrap(),
        test_y: y,
        layers: vec![(w, b)],
        hidden: None,
        ideal_pred: pred.clone(),
        baseline_pred: pred,
        ideal_acc: acc,
        baseline_acc: acc,
        untested_classes: Vec::new(),
        train_mean_u: Vec::new(),
        train_u: ndarray::Array2::zeros((0, 0)),
    }
}

/// A continuous linear element, ideal DAC, exact argmax, and one nonideality: the offset current
/// sources of the two output lines with relative mismatch `sigma` (a weight-stage mismatch).
fn offset_only_design(offset_current: f64, sigma: f64) -> ClassifierDesign {
    ClassifierDesign {
        process: hardmax::device::presets::preset("generic-180nm").unwrap(),
        weights: WeightStageDesign {
            input: InputDesign {
                dac_bits: None,
                full_scale_current_a: 1e-9,
                gain_sigma_rel: 0.0,
            },
            element: ElementDesign::Linear(LinearElement {
                levels: None,
                ..LinearElement::default()
            }),
            encoding: SignedEncoding::Shifted,
            offset: OffsetSetting::Fixed {
                current_a: offset_current,
            },
            offset_sigma_rel: sigma,
            range_use: 1.0,
        },
        competition: CompetitionDesign::Argmax,
        decision: DecisionRule::default(),
        input_noise: None,
        transient: None,
        hidden_circuit: None,
        conditions: Conditions::default(),
    }
}

fn spec(chips: u64) -> BudgetSpec {
    BudgetSpec {
        experiment: "invented-two-gaussians".into(),
        settings: String::new(),
        point: 0,
        dies: hardmax::pipeline::Dies::Paired,
        chips,
        seed: 11,
        target_accuracy: 0.8,
        confidence: 0.95,
        threads: None,
        command: "test".into(),
    }
}

/// Closed form (any statistics handbook): with classes N(+mu, s^2), N(-mu, s^2), decided by the
/// sign of f + d with a per-die offset d ~ N(0, sd^2), a die's error is
/// 0.5 [Phi((-mu - d)/s) + Phi((-mu + d)/s)] and its mean over dies is 1 - Phi(mu / sqrt(s^2 +
/// sd^2)); without the offset, 1 - Phi(mu / s). Phi from statrs. The offset of the output lines'
/// current sources, I_off (1 + sigma z_j), shifts I_0 - I_1 by I_off sigma (z_0 - z_1), which is
/// referred to the feature through the mapped weights: sd = sqrt(2) I_off sigma RANGE / (I_u dw),
/// dw = the difference of the two lines' feature weights (hand derivation from the mapping in
/// DEVELOPERS.md model notes section 5). The budget's cost must match the closed form within
/// its Monte Carlo interval; the test split's own sampling error (it is finite, the same in
/// every variant) is added as 3 sqrt(cost / samples) (a binomial bound, common practice).
#[test]
fn input_referred_offset_cost_matches_the_normal_cdf() {
    let prep = invented_two_class(50_000);
    let (i_off, sigma) = (1e-9, 0.04);
    let design = offset_only_design(i_off, sigma);
    let setup = hardmax::pipeline::PointSetup::new(design.clone(), &prep).unwrap();
    let t = setup.mapped.stages()[0].targets_plus();
    let dw = t[[0, 0]] - t[[1, 0]];
    let sd = 2f64.sqrt() * i_off * sigma * RANGE / (1e-9 * dw);
    let phi = StatNormal::standard();
    let closed = phi.cdf(MU / S) - phi.cdf(MU / (S * S + sd * sd).sqrt());
    assert!(
        closed > 0.01,
        "the check needs a visible cost, got {closed}"
    );

    let b = budget_of(&design, &prep, &spec(300)).unwrap();
    assert_eq!(
        b.active,
        vec![hardmax::pipeline::budget::Nonideality::WeightMismatch]
    );
    let item = b
        .table
        .items
        .iter()
        .find(|i| i.kind == ItemKind::Single)
        .unwrap();
    let ci = item.acc_cost.unwrap();
    let samples = prep.test_y.len() as f64;
    let tol = ci.half_width() + 3.0 * (closed / samples).sqrt();
    assert!(
        (ci.estimate - closed).abs() <= tol,
        "budget cost {:.5} [{:.5}, {:.5}], closed form {closed:.5}",
        ci.estimate,
        ci.lo,
        ci.hi
    );
    // The quantised ideal equals the exact ideal here (continuous element, ideal DAC).
    let q = b
        .table
        .items
        .iter()
        .find(|i| i.key == "quantisation")
        .unwrap();
    assert!(q.acc_cost.unwrap().estimate.abs() < 1e-12);
}

/// A design point with no nonideality switched on is refused with the keys that switch one on.
#[test]
fn nothing_to_budget_is_an_error_naming_the_keys() {
    let prep = invented_two_class(200);
    let e = budget_of(&offset_only_design(1e-9, 0.0), &prep, &spec(10)).unwrap_err();
    assert!(matches!(e, BudgetError::NothingActive { .. }));
    let m = e.to_string();
    assert!(
        m.contains("weights.programming_error") && m.contains("no nonideality"),
        "{m}"
    );
}

fn hardmax() -> Command {
    Command::cargo_bin("hardmax").unwrap()
}

/// The command end to end on digits (UCI optical digits, datasets/PROVENANCE.md): the files,
/// the ranked table, the caution; and on the budget, every single-nonideality loss at most the
/// all-on loss plus its interval (common practice, no source: nonidealities rarely cancel).
#[test]
fn budget_command_on_digits_writes_its_files() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("b");
    let exp = Path::new(env!("CARGO_MANIFEST_DIR")).join("experiments/digits-budget.toml");
    let o = hardmax()
        .args(["budget", exp.to_str().unwrap(), "--chips", "24", "--out"])
        .arg(&out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(
        stdout.contains("Spend on") || stdout.contains("No single"),
        "{stdout}"
    );
    assert!(stdout.contains(hardmax::CAUTION));
    for f in ["budget.csv", "budget-dies.csv", "budget.svg", "budget.html"] {
        assert!(out.join(f).is_file(), "{f} missing");
    }
    let html = std::fs::read_to_string(out.join("budget.html")).unwrap();
    assert!(html.contains("<svg") && html.contains(&hardmax::CAUTION.replace('\'', "&#39;")[..40]));
    let csv = std::fs::read_to_string(out.join("budget.csv")).unwrap();
    let mut r = csv::Reader::from_reader(csv.as_bytes());
    let h = r.headers().unwrap().clone();
    let col = |n: &str| h.iter().position(|c| c == n).unwrap();
    let rows: Vec<csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
    let f = |row: &csv::StringRecord, n: &str| row[col(n)].parse::<f64>().unwrap();
    let all = rows.iter().find(|r| &r[col("kind")] == "all_on").unwrap();
    let total = f(all, "accuracy_cost");
    let total_hi = f(all, "accuracy_cost_hi");
    let singles: Vec<_> = rows
        .iter()
        .filter(|r| &r[col("kind")] == "single")
        .collect();
    assert!(
        singles.len() >= 6,
        "digits-budget switches on eight nonidealities"
    );
    let mut ranks: Vec<usize> = singles
        .iter()
        .map(|r| r[col("rank")].parse().unwrap())
        .collect();
    ranks.sort_unstable();
    assert_eq!(ranks, (1..=singles.len()).collect::<Vec<_>>());
    for s in &singles {
        let cost = f(s, "accuracy_cost");
        let half = f(s, "accuracy_cost_hi") - cost;
        assert!(
            cost <= total + half + (total_hi - total),
            "{}: single loss {cost} above the all-on loss {total}",
            &s[col("item")]
        );
    }
}

/// Bad input: a point index out of range names --point and the number of points.
#[test]
fn point_out_of_range_names_the_option() {
    let exp = Path::new(env!("CARGO_MANIFEST_DIR")).join("experiments/digits-budget.toml");
    let o = hardmax()
        .args([
            "budget",
            exp.to_str().unwrap(),
            "--point",
            "3",
            "--chips",
            "4",
        ])
        .output()
        .unwrap();
    assert!(!o.status.success());
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(
        e.contains("--point 3") && e.contains("1 sweep point"),
        "{e}"
    );
}

/// Draw order: switching read noise off must not shift the shot-noise draws that follow it in
/// the same per-decision stream. The budget's "shot noise alone" variant must equal the design
/// whose read noise is present but negligible (1e-300 relative: drawn, adds nothing); the same
/// design without read noise at all (nothing drawn) gives different decisions, which shows the
/// check can fail (invariant 3 of DEVELOPERS.md; no outside source needed for bit equality).
#[test]
fn switched_off_noise_keeps_the_draws_of_later_noise() {
    use hardmax::pipeline::budget::{variant, Nonideality};
    use hardmax::pipeline::{evaluate_chip, evaluate_chip_with, PointSetup};
    use hardmax::stages::competition::noise::{InputShotNoise, NoiseBandwidth};
    use hardmax::stages::weights::{ErrorSpec, SigmaKind};
    let prep = invented_two_class(300);
    let with_read = |sigma: f64| {
        let mut d = offset_only_design(1e-9, 0.0);
        if let ElementDesign::Linear(e) = &mut d.weights.element {
            e.read_noise = ErrorSpec {
                sigma,
                kind: SigmaKind::Relative,
            };
        }
        d.input_noise = Some(InputShotNoise {
            bandwidth: NoiseBandwidth::Fixed(1e9),
            temperature: 300.0,
        });
        d
    };
    let design = with_read(0.3);
    let (vd, vt) = variant(&design, |n| n == Nonideality::ShotNoise);
    let shot_only = PointSetup::new(vd, &prep).unwrap();
    let tiny = PointSetup::new(with_read(1e-300), &prep).unwrap();
    for chip in 0..4 {
        let a = evaluate_chip_with(&shot_only, &prep, 3, Dies::Paired, chip, &vt);
        let b = evaluate_chip(&tiny, &prep, 3, Dies::Paired, chip);
        assert_eq!(a.correct, b.correct, "chip {chip}");
        assert_eq!(a.confusion, b.confusion, "chip {chip}");
    }
    // Each noise source has its own stream per sample (pipeline module docs), so a design
    // whose read noise draws nothing at all gives the same decisions too.
    let none = PointSetup::new(with_read(0.0), &prep).unwrap();
    for chip in 0..4 {
        let a = evaluate_chip_with(&shot_only, &prep, 3, Dies::Paired, chip, &vt);
        assert_eq!(
            evaluate_chip(&none, &prep, 3, Dies::Paired, chip).confusion,
            a.confusion,
            "chip {chip}"
        );
    }
}

/// The all-on variant is the design as `hardmax run` evaluates it: on the same point and seed,
/// each die's accuracy in `budget-dies.csv` equals that chip's accuracy in the run's
/// `chips.csv` (bit equality of the same computation; no outside source needed).
#[test]
fn all_on_dies_are_the_run_chips() {
    let dir = tempfile::tempdir().unwrap();
    let exp = Path::new(env!("CARGO_MANIFEST_DIR")).join("experiments/digits-budget.toml");
    let run = dir.path().join("run");
    let o = hardmax()
        .args(["run", exp.to_str().unwrap(), "--quiet", "--no-report"])
        .args(["--set", "population.chips=4", "--out"])
        .arg(&run)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let bud = dir.path().join("budget");
    let o = hardmax()
        .args([
            "budget",
            exp.to_str().unwrap(),
            "--quiet",
            "--chips",
            "4",
            "--out",
        ])
        .arg(&bud)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let read = |p: std::path::PathBuf, col: &str| -> Vec<f64> {
        let mut r = csv::Reader::from_path(p).unwrap();
        let k = r.headers().unwrap().iter().position(|c| c == col).unwrap();
        r.records()
            .map(|x| x.unwrap()[k].parse().unwrap())
            .collect()
    };
    let chips = read(run.join("chips.csv"), "accuracy");
    let dies = read(bud.join("budget-dies.csv"), "all_on");
    assert_eq!(chips.len(), 4);
    for (a, b) in chips.iter().zip(&dies) {
        assert!((a - b).abs() < 1e-12, "run {a} vs budget {b}");
    }
}
