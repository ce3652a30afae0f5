//! Cross-check of the WTA DC solve against an independent circuit simulator, ngspice, solving
//! the same model equations: every transistor is written as a SPICE behavioural current source
//! carrying the EKV drain current (Enz, Krummenacher, Vittoz 1995; softplus written in its
//! stable form), and ngspice's own Newton solver finds the operating point (`.op`). Node
//! voltages must agree within 1 µV.
//!
//! The netlists and ngspice's answers are stored in `tests/data/spice/` so `cargo test` checks
//! them without ngspice; when `ngspice` is on PATH the netlists are also run live and compared.
//! `HARDMAX_REGEN_SPICE=1` rewrites the stored files from a live run.

#![allow(clippy::needless_range_loop)]

mod competition_support;

use std::collections::HashMap;
use std::fmt::Write as _;
use std::path::PathBuf;
use std::process::Command;

use competition_support::*;
use hardmax::device::Ekv;
use hardmax::stages::competition::wta::CircuitBias;
use hardmax::stages::competition::{
    CompetitionStage, StageSolution, Workspace, WtaBias, WtaChip, WtaCircuit,
};

/// Agreement required between our node voltages and ngspice's, V.
const TOLERANCE_V: f64 = 1e-6;

struct Case {
    name: &'static str,
    circuit: WtaCircuit,
    inputs: Vec<f64>,
}

fn cases() -> Vec<Case> {
    let mut out = Vec::new();
    // N = 2, deep weak inversion (I/I_S ≈ 1e-3), no mismatch.
    let c = WtaChip::nominal(wta_design(2, 0.01, 1e-9))
        .unwrap()
        .at(300.0)
        .unwrap();
    out.push(Case {
        name: "wta2_weak",
        circuit: c,
        inputs: vec![1e-9, 1.1e-9],
    });
    // N = 5, weak inversion, mismatch on every transistor, a zero and a tiny input.
    let mut rng = hardmax::rng::stream(11, &[hardmax::rng::domain::CHIP]);
    let chip = gaussian_chip(wta_design(5, 0.01, 2e-9), 3e-3, 0.01, &mut rng);
    out.push(Case {
        name: "wta5_mismatch",
        circuit: chip.at(300.0).unwrap(),
        inputs: vec![1e-9, 0.0, 1.05e-9, 1e-12, 0.98e-9],
    });
    // N = 16, moderate inversion (I/I_S ≈ 1), mismatch, at 330 K.
    let mut rng = hardmax::rng::stream(12, &[hardmax::rng::domain::CHIP]);
    let chip = gaussian_chip(wta_design(16, 0.02, 1e-6), 3e-3, 0.01, &mut rng);
    out.push(Case {
        name: "wta16_moderate",
        circuit: chip.at(330.0).unwrap(),
        inputs: (0..16).map(|k| 1e-6 * (0.7 + 0.05 * k as f64)).collect(),
    });
    // N = 16, strong inversion (I/I_S ≈ 5-20), transistor bias, mismatch.
    let mut d = wta_design(16, 0.02, 1e-6);
    d.bias = WtaBias::Transistor {
        device: nmos(4e-6, 1e-6),
        gate_voltage: 0.6,
    };
    let mut rng = hardmax::rng::stream(13, &[hardmax::rng::domain::CHIP]);
    let chip = gaussian_chip(d, 3e-3, 0.01, &mut rng);
    out.push(Case {
        name: "wta16_strong",
        circuit: chip.at(300.0).unwrap(),
        inputs: (0..16)
            .map(|k| 5e-6 * (1.0 + 0.2 * ((k * 7 % 16) as f64)))
            .collect(),
    });
    out
}

fn ekv_call(d: &Ekv, vg: &str, vd: &str, vs: &str) -> String {
    format!(
        "ekv({vg},{vd},{vs},{:e},{:e},{:e},{:e},{:e})",
        d.specific_current(),
        d.vt0,
        d.n,
        d.eta,
        d.ut
    )
}

/// The WTA as a SPICE netlist of EKV behavioural current sources.
fn netlist(name: &str, c: &WtaCircuit, inputs: &[f64]) -> String {
    let n = c.n();
    let mut s = String::new();
    writeln!(
        s,
        "* hardmax cross-check {name}: current-mode WTA, N = {n}, EKV as B-sources"
    )
    .unwrap();
    writeln!(s, ".func spl(h) {{max(h,0)+ln(1+exp(-abs(h)))}}").unwrap();
    writeln!(s, ".func ekvf(x) {{spl(x/2)*spl(x/2)}}").unwrap();
    writeln!(
        s,
        ".func ekv(vg,vd,vs,is,vt,n,eta,ut) {{is*(ekvf(((vg-vt+eta*(vd-vs))/n-vs)/ut)-ekvf(((vg-vt+eta*(vd-vs))/n-vd)/ut))}}"
    )
    .unwrap();
    writeln!(s, "VOUT nout 0 DC {:e}", c.output_voltage).unwrap();
    for k in 0..n {
        writeln!(s, "I{k} 0 n{k} DC {:e}", inputs[k]).unwrap();
        let a = c.sink(k).unwrap();
        let b = c.output(k).unwrap();
        writeln!(
            s,
            "BA{k} n{k} 0 I={{{}}}",
            ekv_call(a, "V(nc)", &format!("V(n{k})"), "0")
        )
        .unwrap();
        writeln!(
            s,
            "BB{k} nout nc I={{{}}}",
            ekv_call(b, &format!("V(n{k})"), "V(nout)", "V(nc)")
        )
        .unwrap();
    }
    match *c.bias() {
        CircuitBias::Ideal(i) => writeln!(s, "IBIAS nc 0 DC {i:e}").unwrap(),
        CircuitBias::Transistor {
            device,
            gate_voltage,
        } => writeln!(
            s,
            "BBIAS nc 0 I={{{}}}",
            ekv_call(&device, &format!("{gate_voltage:e}"), "V(nc)", "0")
        )
        .unwrap(),
    }
    writeln!(
        s,
        ".options reltol=1e-9 abstol=1e-21 vntol=1e-12 gmin=1e-30 itl1=5000"
    )
    .unwrap();
    writeln!(s, ".control").unwrap();
    writeln!(s, "op").unwrap();
    writeln!(s, "set wr_singlescale").unwrap();
    writeln!(s, "set wr_vecnames").unwrap();
    writeln!(s, "set numdgt=15").unwrap();
    let vecs: Vec<String> = (0..n).map(|k| format!("v(n{k})")).collect();
    writeln!(s, "wrdata {name}.txt {} v(nc)", vecs.join(" ")).unwrap();
    writeln!(s, ".endc").unwrap();
    writeln!(s, ".end").unwrap();
    s
}

/// Parse ngspice `wrdata` output (header of names, one row of values) into name -> value.
fn parse_wrdata(text: &str) -> HashMap<String, f64> {
    let mut lines = text.lines().filter(|l| !l.trim().is_empty());
    let names: Vec<String> = lines
        .next()
        .unwrap_or("")
        .split_whitespace()
        .map(|s| s.to_lowercase())
        .collect();
    let values: Vec<f64> = lines
        .next()
        .unwrap_or("")
        .split_whitespace()
        .map(|s| s.parse().unwrap())
        .collect();
    names.into_iter().zip(values).collect()
}

fn our_voltages(c: &WtaCircuit, inputs: &[f64]) -> Vec<f64> {
    let mut ws = Workspace::new();
    let mut out = StageSolution::for_stage(c);
    c.solve(inputs, &mut ws, &mut out).unwrap();
    out.node_voltages
}

fn compare(name: &str, c: &WtaCircuit, ours: &[f64], spice: &HashMap<String, f64>) {
    let n = c.n();
    let mut worst = 0.0f64;
    for k in 0..=n {
        let key = if k == n {
            "v(nc)".to_string()
        } else {
            format!("v(n{k})")
        };
        let v = *spice
            .get(&key)
            .unwrap_or_else(|| panic!("{name}: {key} missing"));
        assert!(
            (ours[k] - v).abs() <= TOLERANCE_V,
            "{name}: node {key}: ours {} V, ngspice {} V",
            ours[k],
            v
        );
        worst = worst.max((ours[k] - v).abs());
    }
    eprintln!("{name}: largest node-voltage difference to ngspice {worst:.2e} V");
}

fn data_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/data/spice")
}

/// Stored ngspice answers (independent circuit simulator ngspice solving the same model
/// equations) agree with our solve within 1 µV, and the stored netlists are exactly what the
/// cases generate today.
#[test]
fn stored_ngspice_references_agree() {
    for case in cases() {
        let dir = data_dir();
        let net = std::fs::read_to_string(dir.join(format!("{}.cir", case.name)))
            .unwrap_or_else(|e| panic!("{}: stored netlist missing ({e})", case.name));
        assert_eq!(
            net,
            netlist(case.name, &case.circuit, &case.inputs),
            "{}: stored netlist differs from the generated one; rerun with HARDMAX_REGEN_SPICE=1",
            case.name
        );
        let text = std::fs::read_to_string(dir.join(format!("{}.txt", case.name))).unwrap();
        let spice = parse_wrdata(&text);
        let ours = our_voltages(&case.circuit, &case.inputs);
        compare(case.name, &case.circuit, &ours, &spice);
    }
}

/// When ngspice is installed, run every netlist live and compare (independent circuit
/// simulator ngspice solving the same model equations).
#[test]
fn live_ngspice_agrees() {
    let available = Command::new("ngspice")
        .arg("--version")
        .output()
        .map(|o| o.status.success())
        .unwrap_or(false);
    if !available {
        eprintln!(
            "ngspice not on PATH: live cross-check skipped (stored references still checked)"
        );
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let regen = std::env::var_os("HARDMAX_REGEN_SPICE").is_some();
    for case in cases() {
        let net = netlist(case.name, &case.circuit, &case.inputs);
        let cir = tmp.path().join(format!("{}.cir", case.name));
        std::fs::write(&cir, &net).unwrap();
        let out = Command::new("ngspice")
            .arg("-b")
            .arg(&cir)
            .current_dir(tmp.path())
            .output()
            .unwrap();
        let txt = tmp.path().join(format!("{}.txt", case.name));
        let text = std::fs::read_to_string(&txt).unwrap_or_else(|_| {
            panic!(
                "{}: ngspice wrote no result:\n{}",
                case.name,
                String::from_utf8_lossy(&out.stdout)
            )
        });
        let spice = parse_wrdata(&text);
        let ours = our_voltages(&case.circuit, &case.inputs);
        if regen {
            std::fs::create_dir_all(data_dir()).unwrap();
            std::fs::write(data_dir().join(format!("{}.cir", case.name)), &net).unwrap();
            std::fs::write(data_dir().join(format!("{}.txt", case.name)), &text).unwrap();
        }
        compare(case.name, &case.circuit, &ours, &spice);
    }
}
