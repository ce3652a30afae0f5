//! `hardmax stage` end to end (assert_cmd): the three output formats, the sweep CSV fixed in
//! DEVELOPERS.md (`x, out_0.., share_0..`), the transient, and bad inputs. Values are checked
//! against published closed forms: the current-mode WTA's weak-inversion normaliser
//! I_out,k = I_b I_k^g / Σ I_j^g (Lazzaro, Ryckebusch, Mahowald, Mead, NIPS 1, 1989; gain
//! analysis DEVELOPERS.md model notes §4.1), the diode-fed differential pair as a plain normaliser
//! I_out,k = I_b I_k / Σ I_j (Mead, "Analog VLSI and Neural Systems", 1989; DEVELOPERS.md model notes §4.2), and
//! U_T(300 K) = 25.852 mV (CODATA 2018 k and q; DEVELOPERS.md model notes §3).

use assert_cmd::Command;

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

fn fails_with(args: &[&str], fragments: &[&str]) {
    let out = hardmax().arg("stage").args(args).assert().failure();
    let err = String::from_utf8(out.get_output().stderr.clone()).unwrap();
    for f in fragments {
        assert!(err.contains(f), "{args:?}: {err:?} lacks {f:?}");
    }
    assert!(!err.contains("panicked"), "{err}");
}

/// Weak-inversion closed form of the current-mode WTA at a low gain g = 10 (inputs ~2e-3 I_S,
/// where EKV is within about 2 % of the exponential, and every sink saturated, V_k ≈ 0.3 V >>
/// 4 U_T; at g = 3 the sinks drop into triode and the closed form does not apply): the outputs
/// are I_b I_k^10 / Σ I_j^10 within 3 % (tolerance: a choice of ours), the table prints every
/// parameter and the caution.
#[test]
fn table_output_matches_closed_form() {
    let s = stdout_of(&[
        "--inputs",
        "1nA,1.2nA,0.9nA",
        "--bias",
        "2nA",
        "--gain",
        "10",
        "--temperature",
        "300K",
    ]);
    for f in [
        "Parameters used",
        "25.852 mV",
        "A_0 (sink)",
        "B_2 (output)",
        "generic-180nm",
        "Decision: winner 1",
        "architecture-stage estimates",
        "not sign-off",
    ] {
        assert!(s.contains(f), "missing {f:?} in\n{s}");
    }
    let json = stdout_of(&[
        "--inputs",
        "1nA,1.2nA,0.9nA",
        "--bias",
        "2nA",
        "--gain",
        "10",
        "--format",
        "json",
    ]);
    let v: serde_json::Value = serde_json::from_str(&json).unwrap();
    let outs: Vec<f64> = v["outputs_a"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .collect();
    let inputs = [1.0e-9, 1.2e-9, 0.9e-9];
    let denom: f64 = inputs.iter().map(|i: &f64| i.powi(10)).sum();
    for (o, i) in outs.iter().zip(inputs) {
        let expected = 2e-9 * i.powi(10) / denom;
        assert!((o / expected - 1.0).abs() < 0.03, "{o} vs {expected}");
    }
    let shares: f64 = v["shares"]
        .as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_f64().unwrap())
        .sum();
    assert!((shares - 1.0).abs() < 1e-12);
    // Numerical gain near the closed form kappa/sigma = 10 (small-signal version of the same law).
    let g = v["gain"]["numerical"].as_f64().unwrap();
    assert!((g / 10.0 - 1.0).abs() < 0.03, "{g}");
    assert!((v["gain"]["closed_form"].as_f64().unwrap() - 10.0).abs() < 1e-9);
    assert_eq!(v["decision"]["winner"], 1);
    assert!(v["solver"]["converged"].as_bool().unwrap());
    assert_eq!(v["parameters"]["temperature [K]"].as_f64().unwrap(), 300.0);
    assert!(v["caution"].as_str().unwrap().contains("not sign-off"));
}

/// CSV format: a long table `section,name,value,unit` with every parameter used; the diode-fed
/// differential pair (invented example file) normalises: out_k ≈ I_b I_k / Σ I_j within 3 %.
#[test]
fn csv_output_and_diff_pair_normaliser() {
    let s = stdout_of(&["--stage", &example("diffpair-soft.toml"), "--format", "csv"]);
    let mut r = csv::Reader::from_reader(s.as_bytes());
    assert_eq!(
        r.headers().unwrap().iter().collect::<Vec<_>>(),
        ["section", "name", "value", "unit"]
    );
    let rows: Vec<csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
    let get = |section: &str, name: &str| -> f64 {
        rows.iter()
            .find(|x| &x[0] == section && &x[1] == name)
            .unwrap_or_else(|| panic!("{section}.{name} missing"))[2]
            .parse()
            .unwrap()
    };
    let inputs = [5e-9, 7e-9, 6e-9, 2e-9];
    let sum: f64 = inputs.iter().sum();
    for (k, i) in inputs.iter().enumerate() {
        let o = get("output", &format!("out_{k}"));
        let expected = 20e-9 * i / sum;
        assert!((o / expected - 1.0).abs() < 0.03, "{o} vs {expected}");
    }
    assert_eq!(get("parameter", "temperature"), 300.0);
    // V_T0 given at the preset's nominal 300.15 K, used at 300 K with the preset's tempco.
    let p = hardmax::device::preset("generic-65nm").unwrap();
    let vt0 = 0.38 + p.nmos.vt0_tempco * (300.0 - p.t_nom);
    assert!((get("device", "M_0 (pair).vt0") - vt0).abs() < 1e-12);
    assert_eq!(get("device", "M_0 (pair).n"), 1.35);
    assert!(rows
        .iter()
        .any(|x| &x[0] == "note" && x[2].contains("not sign-off")));
}

/// Sweep CSV: header `x, out_0..out_2, share_0..share_2` (DEVELOPERS.md), x built from the
/// integer index (x_i = from + i (to - from)/(points - 1)), shares summing to 1, the winner
/// changing sides at x = 0 (symmetric inputs 0 and 1), and the command naming the quantity.
#[test]
fn sweep_writes_transfer_curve() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("curve.csv");
    let p = path.to_str().unwrap();
    let s = stdout_of(&[
        "--stage",
        &example("wta-three-class.toml"),
        "--sweep",
        "diff",
        "--from=-1nA",
        "--to",
        "1nA",
        "--points",
        "11",
        "--out",
        p,
    ]);
    assert!(s.contains("x = I_0 - I_1 in A"), "{s}");
    let mut r = csv::Reader::from_path(&path).unwrap();
    assert_eq!(
        r.headers().unwrap().iter().collect::<Vec<_>>(),
        ["x", "out_0", "out_1", "out_2", "share_0", "share_1", "share_2"]
    );
    let rows: Vec<Vec<f64>> = r
        .records()
        .map(|x| x.unwrap().iter().map(|v| v.parse().unwrap()).collect())
        .collect();
    assert_eq!(rows.len(), 11);
    for (i, row) in rows.iter().enumerate() {
        let x = -1e-9 + 2e-9 * i as f64 / 10.0;
        assert!((row[0] - x).abs() < 1e-21, "{} vs {x}", row[0]);
        assert!((row[4] + row[5] + row[6] - 1.0).abs() < 1e-12);
    }
    assert!(rows[0][5] > 0.99 && rows[10][4] > 0.99);
    assert!((rows[5][4] - rows[5][5]).abs() < 1e-9);
    // Log sweep of one input to standard output.
    let s = stdout_of(&[
        "--inputs",
        "10nA,12nA",
        "--sweep",
        "input:0",
        "--from",
        "1nA",
        "--to",
        "100nA",
        "--scale",
        "log",
        "--points",
        "3",
    ]);
    let xs: Vec<f64> = s
        .lines()
        .skip(1)
        .map(|l| l.split(',').next().unwrap().parse().unwrap())
        .collect();
    assert_eq!(xs.len(), 3);
    assert!((xs[1] - 1e-8).abs() < 1e-20, "{xs:?}");
}

/// Transient: prints decision time and energy; the energy per decision is at least what the
/// constant input sources alone draw, V_dd Σ I_k t_dec (the integral of a constant), and the
/// waveform CSV starts at t = 0 with every node at 0 V (the documented reset state).
#[test]
fn transient_reports_time_energy_and_waveform() {
    let dir = tempfile::tempdir().unwrap();
    let wave = dir.path().join("wave.csv");
    let s = stdout_of(&[
        "--stage",
        &example("wta-three-class.toml"),
        "--transient",
        "--format",
        "json",
        "--waveform",
        wave.to_str().unwrap(),
    ]);
    let v: serde_json::Value = serde_json::from_str(&s).unwrap();
    let t = &v["transient"];
    let td = t["decision_time_s"].as_f64().unwrap();
    let e = t["energy_to_decision_j"].as_f64().unwrap();
    assert!(td > 0.0 && td < 1e-4, "{td}");
    let lower = 1.8 * (10e-9 + 11e-9 + 9.5e-9) * td;
    assert!(e >= lower && e < 3.0 * lower, "{e} vs {lower}");
    assert_eq!(t["winner"], 1);
    assert!(t["settled"].as_bool().unwrap());
    let w = std::fs::read_to_string(&wave).unwrap();
    let mut lines = w.lines();
    assert_eq!(lines.next().unwrap(), "t,V_0,V_1,V_2,V_C,out_0,out_1,out_2");
    let first: Vec<f64> = lines
        .next()
        .unwrap()
        .split(',')
        .map(|x| x.parse().unwrap())
        .collect();
    assert!(first[..5].iter().all(|&x| x == 0.0));
    // Table format with a read-out time: the time-limited decision is printed.
    let s = stdout_of(&[
        "--stage",
        &example("wta-three-class.toml"),
        "--transient",
        "--read-time",
        "10us",
    ]);
    assert!(s.contains("decision time"), "{s}");
    assert!(s.contains("read at 10 µs"), "{s}");
    assert!(s.contains("not sign-off"));
}

/// Bad inputs are errors naming the parameter, never panics.
#[test]
fn bad_inputs_name_the_parameter() {
    fails_with(&["--inputs", "10nA"], &["at least 2 inputs"]);
    fails_with(&["--inputs", "10nA,-1nA"], &["--inputs[1]", "negative"]);
    fails_with(&["--inputs", "10nA,NaN"], &["--inputs[1]", "not finite"]);
    fails_with(
        &["--inputs", "10nA,9nA", "--bias", "10nV"],
        &["--bias", "a current"],
    );
    fails_with(
        &["--inputs", "10nA,9nA", "--preset", "foo"],
        &["unknown process preset", "generic-180nm"],
    );
    fails_with(
        &["--inputs", "10nA,9nA", "--bias", "1mA"],
        &["the bias current cannot be carried within the supply"],
    );
    fails_with(
        &["--inputs", "10mA,9nA"],
        &["the inputs cannot be carried", "widen the sink"],
    );
    fails_with(&["--inputs", "10nA,9nA", "--n", "0.5"], &["nmos.n"]);
    fails_with(
        &["--inputs", "10nA,9nA", "--temperature", "0K"],
        &["--temperature", "absolute zero"],
    );
    fails_with(
        &["--inputs", "10nA,9nA", "--sink-w", "3 V"],
        &["--sink-w", "a length"],
    );
    fails_with(
        &[
            "--inputs", "1nA,2nA", "--sweep", "input:7", "--from", "1nA", "--to", "2nA",
        ],
        &["input index 7"],
    );
    fails_with(&[], &["no inputs"]);
    let dir = tempfile::tempdir().unwrap();
    let f = dir.path().join("bad.toml");
    std::fs::write(
        &f,
        "inputs = [\"1 nA\", \"2 nA\"]\n[sink]\nwidth = \"2 um\"\n",
    )
    .unwrap();
    fails_with(
        &["--stage", f.to_str().unwrap()],
        &["unknown key `sink.width`", "w, l"],
    );
    std::fs::write(
        &f,
        "inputs = [\"1 nA\", \"2 nA\"]\nbias_current = \"5 nF\"\n",
    )
    .unwrap();
    fails_with(
        &["--stage", f.to_str().unwrap()],
        &["key `bias_current`", "5 nF"],
    );
}
