//! `hardmax stage` for the circuits built from the current-mode WTA (Lazzaro, Ryckebusch,
//! Mahowald, Mead, NIPS 1, 1989): the k-winners WTA (Urahama and Nagao, IEEE Trans. Neural
//! Networks 6(3), 1995; our equations in DEVELOPERS.md model notes §4.5), the cascade (§4.6)
//! and ranking by repeated maximum (§4.7), and the hysteretic WTA's feedback warning (§4.5).
//! Checks: with nominal devices and well-separated inputs each circuit picks what the ideal
//! argmax (or top-k, or repeated argmax) of the inputs picks; the k-winners' output currents
//! follow the hand analysis of §4.5 ("Why k win": k - 1 cells at their limit, the k-th carries
//! the rest of the bias, Σ x = I_b); a ranking's DC rounds follow its stated time model
//! (step_time per round, energy V_dd (Σ remaining inputs + I_b) step_time); a limiter's
//! threshold offset scales its limit by exp(-dV_T/(n_p U_T)) (its weak-inversion law, kwta
//! module docs; U_T from CODATA 2018 k and q). The example stage files are invented.

use assert_cmd::Command;
use serde_json::Value;

fn hardmax() -> Command {
    Command::cargo_bin("hardmax").unwrap()
}

fn example(name: &str) -> String {
    format!("{}/experiments/stages/{name}", env!("CARGO_MANIFEST_DIR"))
}

fn stdout_of(args: &[&str]) -> String {
    let out = hardmax().arg("stage").args(args).assert().success();
    String::from_utf8(out.get_output().stdout.clone()).unwrap()
}

fn json_of(args: &[&str]) -> Value {
    let mut a = args.to_vec();
    a.extend(["--format", "json"]);
    serde_json::from_str(&stdout_of(&a)).unwrap()
}

fn fails_with(args: &[&str], fragments: &[&str]) {
    let out = hardmax().arg("stage").args(args).assert().failure();
    let err = String::from_utf8(out.get_output().stderr.clone()).unwrap();
    for f in fragments {
        assert!(err.contains(f), "{args:?}: {err:?} lacks {f:?}");
    }
    assert!(!err.contains("panicked"), "{err}");
}

fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs()
}

/// Inputs 10, 14, 9, 12, 11 nA, k = 2, unit 20 nA (bias 30 nA), limiter L_1 3 mV off: the set
/// is {1, 3} (top-2 of the inputs); line 1 sits at its own limit, line 3 carries the rest of the
/// bias, 30 nA - limit_1 (within 1 %: the WTA's leftovers are attoamperes); the limit is
/// 20 nA exp(-3 mV/(n_p U_T)) (1e-9 relative).
#[test]
fn k_winners_dc_transient_and_offsets() {
    let file = example("k-winners-five-class.toml");
    let v = json_of(&["--stage", &file]);
    let kw = &v["k_winners"];
    let lines: Vec<u64> = kw["winners"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| w["line"].as_u64().unwrap())
        .collect();
    assert_eq!(lines, vec![1, 3]);
    let p = hardmax::device::preset("generic-180nm").unwrap();
    let ut = hardmax::physics::thermal_voltage(300.15);
    let want_limit = 20e-9 * (-3e-3 / (p.pmos.n * ut)).exp();
    let limit = v["parameters"]["device.L_1.limit [A]"].as_f64().unwrap();
    assert!(rel(limit, want_limit) < 1e-9, "{limit} vs {want_limit}");
    let out1 = kw["winners"][0]["output_a"].as_f64().unwrap();
    let out3 = kw["winners"][1]["output_a"].as_f64().unwrap();
    assert!(rel(out1, limit) < 0.01, "{out1} vs limit {limit}");
    assert!(rel(out3, 30e-9 - limit) < 0.01, "{out3}");
    assert!(!kw["ambiguous"].as_bool().unwrap());
    // CSV rows and the table say the same.
    let csv = stdout_of(&["--stage", &file, "--format", "csv"]);
    assert!(csv.contains("k_winners,place_0.line,1,index"), "{csv}");
    let table = stdout_of(&["--stage", &file]);
    assert!(table.contains("k winners (k = 2"), "{table}");
    // Transient: the same set at the end of the run.
    let t = json_of(&["--stage", &file, "--transient"]);
    let w: Vec<u64> = t["transient"]["k_winners"]["winners"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_u64().unwrap())
        .collect();
    assert_eq!(w, vec![1, 3]);
    assert!(t["transient"]["decision_time_s"].as_f64().unwrap() > 0.0);
    // Sweep: the transfer-curve CSV of the fixed format.
    let s = stdout_of(&[
        "--stage", &file, "--sweep", "input:2", "--from", "5nA", "--to", "20nA", "--points", "4",
    ]);
    assert!(s.starts_with("x,out_0,out_1,out_2,out_3,out_4,share_0,"));
    assert_eq!(s.lines().count(), 5);
    // Devices it does not have.
    fails_with(
        &["--stage", &file, "--offset", "Q_0:vt0=1mV"],
        &["no transistor `Q_0`", "L_0..L_4"],
    );
}

/// Eight inputs, fan-in 2: three levels; the tree's class is the argmax of the inputs (line 1,
/// 14 nA), each first-level group's winner its larger input, and a group's copy passed up is
/// its winner's input within 5 % (the replica's drain-coupling error, cascade module docs).
/// Transient: the decision time is the sum of the level times (module docs).
#[test]
fn cascade_levels_and_transient() {
    let file = example("cascade-eight-class.toml");
    let v = json_of(&["--stage", &file]);
    assert_eq!(v["decision"]["winner"].as_u64().unwrap(), 1);
    let levels = v["levels"].as_array().unwrap();
    let first: Vec<u64> = levels
        .iter()
        .filter(|g| g["level"] == 0)
        .map(|g| g["winner"].as_u64().unwrap())
        .collect();
    assert_eq!(first, vec![1, 3, 5, 7]);
    assert_eq!(levels.len(), 4 + 2 + 1);
    let g0 = &levels[0];
    let passed = g0["passed_up_a"].as_f64().unwrap();
    assert!(rel(passed, 14e-9) < 0.05, "{passed}");
    assert!(levels[6]["passed_up_a"].is_null());
    let shares: f64 = v["shares"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .sum();
    assert!((shares - 1.0).abs() < 1e-9);
    let t = json_of(&["--stage", &file, "--transient"]);
    let tr = &t["transient"];
    assert_eq!(tr["winner"].as_u64().unwrap(), 1);
    let sum: f64 = tr["level_times_s"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .sum();
    let total = tr["decision_time_s"].as_f64().unwrap();
    assert!(rel(total, sum) < 1e-12, "{total} vs {sum}");
    // A cascade's devices carry their group.
    fails_with(
        &["--stage", &file, "--offset", "A_0:vt0=1mV"],
        &["no transistor `A_0`", "L0G0.A_0", "L0G0.R"],
    );
    let moved = json_of(&["--stage", &file, "--offset", "L0G0.R:vt0=5mV"]);
    let p2 = moved["levels"][0]["passed_up_a"].as_f64().unwrap();
    assert!(
        p2 < passed,
        "a higher replica threshold copies less: {p2} vs {passed}"
    );
}

/// k = 3 rounds on 10, 14, 9, 12, 11 nA: order 1, 3, 4 (repeated argmax); at DC each round is
/// step_time (1 µs) and uses V_dd (Σ remaining inputs + I_b) step_time: 1.8 V x (56 + 20) nA x
/// 1 µs = 136.8 fJ, then 111.6 fJ, then 90 fJ. The transient's rounds rank the same.
#[test]
fn repeated_max_rounds() {
    let file = example("repeated-max-five-class.toml");
    let v = json_of(&["--stage", &file]);
    let r = &v["rounds"];
    let order: Vec<u64> = r["order"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_u64().unwrap())
        .collect();
    assert_eq!(order, vec![1, 3, 4]);
    for (j, e) in [136.8e-15, 111.6e-15, 90e-15].iter().enumerate() {
        let round = &r["rounds"][j];
        assert!(rel(round["time_s"].as_f64().unwrap(), 1e-6) < 1e-9);
        assert!(
            rel(round["energy_j"].as_f64().unwrap(), *e) < 1e-9,
            "{round}"
        );
    }
    let t = json_of(&["--stage", &file, "--transient"]);
    let rounds = t["transient"]["rounds"].as_array().unwrap();
    let w: Vec<u64> = rounds
        .iter()
        .map(|x| x["winner"].as_u64().unwrap())
        .collect();
    assert_eq!(w, vec![1, 3, 4]);
    let sum: f64 = rounds.iter().map(|x| x["time_s"].as_f64().unwrap()).sum();
    let total = t["transient"]["time_s"].as_f64().unwrap();
    assert!(rel(total, sum) < 1e-9);
    // Sweep: round columns after the fixed ones.
    let s = stdout_of(&[
        "--stage", &file, "--sweep", "input:2", "--from", "5nA", "--to", "20nA", "--points", "3",
    ]);
    let head = s.lines().next().unwrap();
    assert!(head.ends_with(",round_0,round_1,round_2"), "{head}");
    // At I_2 = 20 nA line 2 wins the first round.
    assert!(s.lines().last().unwrap().ends_with(",2,1,3"), "{s}");
}

/// The hysteretic WTA's feedback current alpha I_b against its inputs: at alpha I_b / I_m >= 2
/// (derived in model notes §4.5: the up switching point, about alpha I_b, lies beyond the
/// largest difference two inputs of mean I_m can have, 2 I_m) the stage warns, and indeed a
/// sweep over the whole range of x = I_0 - I_1 never switches the held winner; at a small ratio
/// it does not warn.
#[test]
fn hysteretic_feedback_warning() {
    let base = [
        "--circuit",
        "hysteretic-wta",
        "--inputs",
        "10nA,11nA",
        "--bias-current",
        "100nA",
    ];
    let mut a = base.to_vec();
    a.extend(["--feedback", "0.3"]);
    let table = stdout_of(&a);
    assert!(
        table.contains("WARNING: hysteretic WTA: the feedback current") && table.contains("2.857"),
        "{table}"
    );
    let v = json_of(&a);
    assert_eq!(v["warnings"].as_array().unwrap().len(), 1);
    let mut sw = a.clone();
    sw.extend([
        "--sweep",
        "diff",
        "--from=-20.9nA",
        "--to",
        "20.9nA",
        "--points",
        "41",
    ]);
    let out = hardmax().arg("stage").args(&sw).assert().success();
    let err = String::from_utf8(out.get_output().stderr.clone()).unwrap();
    assert!(!err.contains("up sweep: winner"), "{err}");
    let mut small = base.to_vec();
    small.extend(["--feedback", "0.05"]);
    let v = json_of(&small);
    assert!(v["warnings"].as_array().unwrap().is_empty());
}

/// `hardmax run` warns too (stdout and the manifest's `warnings`) when a hysteretic design's
/// feedback current alpha I_b = 0.3 x 1 µA dwarfs its inputs (a few nA from a 5 nA full-scale
/// input DAC: the ratio is far above 2), and not at alpha I_b = 0.05 x 5 nA. Data: the invented
/// demo scenario (datasets/demo/README.md).
#[test]
fn run_warns_about_feedback_that_dwarfs_the_inputs() {
    let tmp = tempfile::tempdir().unwrap();
    let data = format!(
        "{}/datasets/demo/hive_buzz_demo.csv",
        env!("CARGO_MANIFEST_DIR")
    );
    let run = |bias: &str, feedback: f64| -> (String, Value) {
        let text = format!(
            r#"# Invented demo scenario (datasets/demo/README.md), for a test.
name = "feedback-warning"
[dataset]
file = "{data}"
test_fraction = 0.1
[input]
dac_bits = 6
full_scale_current = "5 nA"
[weights]
element = "linear"
levels = 16
[competition]
circuit = "hysteretic_wta"
bias_current = "{bias}"
feedback = {feedback}
[population]
chips = 2
seed = 3
"#
        );
        let f = tmp.path().join(format!("fb-{feedback}.toml"));
        std::fs::write(&f, text).unwrap();
        let out = tmp.path().join(format!("res-{feedback}"));
        let o = hardmax()
            .args(["run", "--no-report"])
            .arg(&f)
            .arg("-o")
            .arg(&out)
            .assert()
            .success();
        let stdout = String::from_utf8(o.get_output().stdout.clone()).unwrap()
            + &String::from_utf8(o.get_output().stderr.clone()).unwrap();
        let m: Value =
            serde_json::from_str(&std::fs::read_to_string(out.join("manifest.json")).unwrap())
                .unwrap();
        (stdout, m)
    };
    let (text, m) = run("1 uA", 0.3);
    assert!(text.contains("the feedback current alpha I_b"), "{text}");
    let w = m["warnings"].as_array().unwrap();
    assert!(
        w.iter()
            .any(|x| x.as_str().unwrap().contains("point 0: hysteretic WTA")),
        "{w:?}"
    );
    let (text, m) = run("5 nA", 0.05);
    assert!(!text.contains("the feedback current alpha I_b"), "{text}");
    assert!(m["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .all(|x| !x.as_str().unwrap().contains("feedback current")));
}
