//! The batched DC solve (`dc::solve_batch`: several decisions of one chip in lockstep Newton,
//! vectorised EKV kernels) against the scalar solve (`CompetitionStage::solve`, the reference,
//! itself checked against the weak-inversion closed form of Lazzaro, Ryckebusch, Mahowald, Mead,
//! NIPS 1, 1989, and against ngspice in `tests/competition_spice.rs`): the same decisions, node
//! voltages within the solver's tolerance, the same failures (kind and message) and flags, on
//! random stages; and each decision's answer independent of the batch around it.

#![allow(clippy::needless_range_loop)]

mod competition_support;

use competition_support::*;
use hardmax::stages::competition::dc::{solve_batch, BatchWorkspace};
use hardmax::stages::competition::{
    CompetitionError, CompetitionStage, CurrentSource, DecisionRule, StageSolution, Workspace,
    WtaCircuit,
};
use proptest::prelude::*;

fn scalar(c: &WtaCircuit, x: &[f64]) -> Result<StageSolution, CompetitionError> {
    let mut ws = Workspace::new();
    let mut out = StageSolution::for_stage(c);
    c.solve(x, &mut ws, &mut out).map(|_| out)
}

fn batched(c: &WtaCircuit, rows: &[Vec<f64>]) -> Vec<Result<StageSolution, CompetitionError>> {
    let flat: Vec<f64> = rows.iter().flatten().copied().collect();
    let mut sols = vec![StageSolution::default(); rows.len()];
    let mut res = vec![Ok(()); rows.len()];
    let mut bw = BatchWorkspace::new();
    solve_batch(c, &flat, &mut bw, &mut sols, &mut res);
    res.into_iter()
        .zip(sols)
        .map(|(r, s)| r.map(|_| s))
        .collect()
}

/// One input: 0, a current from 1 fA to 1 mA (log-uniform), or (rarely) an invalid value or a
/// current no sink can carry within the supply.
fn input() -> impl Strategy<Value = f64> {
    prop_oneof![
        2 => Just(0.0),
        60 => (-15.0f64..-3.0).prop_map(|e| 10f64.powf(e)),
        1 => Just(-1e-12),
        1 => Just(f64::NAN),
        2 => Just(1.0),
    ]
}

/// Node-voltage tolerance: the solver's relative KCL tolerance 1e-8 moves a node by about
/// 1e-8 n U_T / eta (30 nV at eta = 0.01, `WTA_RELATIVE_TOLERANCE` docs); 1e-9 V + 1e-6
/// relative is the scalar tests' own bracketing-versus-Newton bound (`competition_wta.rs`).
fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9 + 1e-6 * a.abs()
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    /// Random chip (mismatch on every transistor, ideal or transistor bias), random batch of
    /// decisions including zero inputs, invalid inputs and out-of-compliance ones: each
    /// decision's status equals the scalar one (the same error, message included), converged
    /// ones agree on node voltages, shares and the decision.
    #[test]
    fn batched_matches_scalar(
        n in 2usize..12,
        rows in proptest::collection::vec(proptest::collection::vec(input(), 11), 1..21),
        seed in any::<u64>(),
        transistor_bias in any::<bool>(),
        ib_exp in -10.0f64..-6.0,
    ) {
        let mut d = wide_range_design(n);
        if !transistor_bias {
            d.bias = CurrentSource::Ideal { current: 10f64.powf(ib_exp) };
        }
        let mut rng = hardmax::rng::stream(seed, &[hardmax::rng::domain::CHIP]);
        let c = gaussian_chip(d, 3e-3, 0.01, &mut rng).at(300.0).unwrap();
        let rows: Vec<Vec<f64>> = rows.into_iter().map(|r| r[..n].to_vec()).collect();
        agree_with_scalar(&c, &rows, n)?;
    }

    /// Near-ties at high and low gain (drain coupling 0.002 to 0.05): rows whose inputs lie
    /// within a few per cent of each other, so the runner-up cells' sinks sit near or past
    /// saturation (the start's saturation-side path, `wta.rs`), some inputs exactly equal:
    /// the same agreement with the scalar solve as above.
    #[test]
    fn near_ties_match_scalar(
        n in 2usize..12,
        spread in proptest::collection::vec(
            proptest::collection::vec(prop_oneof![1 => Just(0.0), 6 => -0.05f64..0.05], 11),
            1..21,
        ),
        seed in any::<u64>(),
        eta_exp in -2.7f64..-1.3,
        ib_exp in -9.0f64..-6.5,
        level in -0.7f64..0.3,
    ) {
        let ib = 10f64.powf(ib_exp);
        let mut rng = hardmax::rng::stream(seed, &[hardmax::rng::domain::CHIP]);
        let c = gaussian_chip(wta_design(n, 10f64.powf(eta_exp), ib), 3e-3, 0.01, &mut rng)
            .at(300.0)
            .unwrap();
        let base = ib * 10f64.powf(level);
        let rows: Vec<Vec<f64>> = spread
            .into_iter()
            .map(|r| r[..n].iter().map(|d| base * (1.0 + d)).collect())
            .collect();
        agree_with_scalar(&c, &rows, n)?;
    }
}

/// Each decision of `rows` solved in one batch has the scalar solve's status (the same error,
/// message included); converged ones agree on node voltages, shares and the decision.
fn agree_with_scalar(c: &WtaCircuit, rows: &[Vec<f64>], n: usize) -> Result<(), TestCaseError> {
    let got = batched(c, rows);
    let rule = DecisionRule::default();
    for (x, b) in rows.iter().zip(&got) {
        let a = scalar(c, x);
        match (&a, b) {
            // Same variant and message (an error holding a NaN input is not `==` itself).
            (Err(ea), Err(eb)) => {
                prop_assert_eq!(std::mem::discriminant(ea), std::mem::discriminant(eb));
                prop_assert_eq!(ea.to_string(), eb.to_string());
            }
            (Ok(sa), Ok(sb)) => {
                prop_assert!(sb.info.converged);
                prop_assert!(sb.info.residual <= c.tolerance);
                for k in 0..=n {
                    let (va, vb) = (sa.node_voltages[k], sb.node_voltages[k]);
                    prop_assert!(close(va, vb), "node {}: {} vs {} for {:?}", k, va, vb, x);
                }
                for k in 0..n {
                    prop_assert!((sa.shares[k] - sb.shares[k]).abs() <= 1e-6);
                }
                // Same decision unless the two leading shares are within the tolerance's
                // reach of each other (a tie the solver cannot resolve either way).
                let (da, db) = (sa.decide(&rule), sb.decide(&rule));
                let mut s = sa.shares.clone();
                s.sort_by(|p, q| q.total_cmp(p));
                if s[0] - s[1] > 1e-6 {
                    prop_assert_eq!(da.winner, db.winner);
                }
                prop_assert_eq!(da.ambiguous, db.ambiguous);
            }
            _ => prop_assert!(false, "scalar {:?} vs batched {:?} for {:?}", a, b, x),
        }
    }
    Ok(())
}

/// Failures keep their kind and flags: invalid inputs, a missing bias path (all inputs 0), an
/// input no sink can carry within the supply (1 mA through 2 µm / 1 µm needs V_C - V_T0 ≈ 3.7 V,
/// square law, Enz, Krummenacher, Vittoz 1995), and a decision that needs the bracketing
/// fallback (Newton budget 0): each exactly as the scalar solve says, beside good decisions.
#[test]
fn failures_and_fallbacks_are_the_scalar_ones() {
    let c = WtaChip3::new();
    let rows = vec![
        vec![1e-9, 2e-9, 1.5e-9],
        vec![1e-9, -1e-12, 1e-9],
        vec![0.0, 0.0, 0.0],
        vec![1e-3, 1e-9, 1e-9],
        vec![1e-9, f64::NAN, 1e-9],
        vec![3e-9, 1e-9, 1e-9],
    ];
    let got = batched(&c.0, &rows);
    let mut kinds = Vec::new();
    for (x, b) in rows.iter().zip(&got) {
        let a = scalar(&c.0, x);
        match (&a, b) {
            (Err(ea), Err(eb)) => {
                // Same variant and message (an error holding a NaN input is not `==` itself).
                assert_eq!(std::mem::discriminant(ea), std::mem::discriminant(eb));
                assert_eq!(ea.to_string(), eb.to_string());
                kinds.push(std::mem::discriminant(eb));
            }
            (Ok(sa), Ok(sb)) => {
                for k in 0..4 {
                    assert!(close(sa.node_voltages[k], sb.node_voltages[k]));
                }
            }
            _ => panic!("scalar {a:?} vs batched {b:?}"),
        }
    }
    // Invalid input, compliance (bias), compliance (supply), invalid input.
    assert_eq!(kinds.len(), 4);
    assert!(matches!(got[2], Err(CompetitionError::Compliance { .. })));
    assert!(matches!(got[3], Err(CompetitionError::Compliance { .. })));
    // The bracketing fallback: a circuit with no Newton budget goes to the scalar path whole.
    let mut bracket = c.0.clone();
    bracket.max_newton = 0;
    let got = batched(&bracket, &rows[..1]);
    let a = scalar(&bracket, &rows[0]).unwrap();
    let b = got[0].as_ref().unwrap();
    assert_eq!(a.info.method, b.info.method);
    assert_eq!(a.node_voltages, b.node_voltages);
}

/// A 3-cell chip with mismatch (sinks and outputs 2 µm / 1 µm, 1 nA ideal bias).
struct WtaChip3(WtaCircuit);

impl WtaChip3 {
    fn new() -> WtaChip3 {
        let mut rng = hardmax::rng::stream(9, &[hardmax::rng::domain::CHIP]);
        WtaChip3(
            gaussian_chip(wta_design(3, 0.01, 1e-9), 3e-3, 0.01, &mut rng)
                .at(300.0)
                .unwrap(),
        )
    }
}

/// Determinism: a decision's answer is bit for bit the same whatever else is in its batch
/// (alone, among others, at another lane), so results cannot depend on how samples are grouped
/// (by a thread count or a shard). Bit equality is the property under test here.
#[test]
fn a_decision_does_not_depend_on_its_batch() {
    let mut rng = hardmax::rng::stream(11, &[hardmax::rng::domain::CHIP]);
    let c = gaussian_chip(wide_range_design(10), 3e-3, 0.01, &mut rng)
        .at(300.0)
        .unwrap();
    // Decisions at scales from 10 pA to 1 µA per line, so lanes beside each other take
    // different branches of the kernels (weak-inversion series or the full kernel, triode or
    // saturated loads) and need different numbers of passes.
    let rows: Vec<Vec<f64>> = (0..19)
        .map(|j| {
            let scale = 10f64.powi((j % 6) - 11) * if j % 4 == 0 { 3.0 } else { 1.0 };
            (0..10)
                .map(|k| scale * (1.0 + 0.01 * ((j * 7 + k * 3) % 11) as f64))
                .collect()
        })
        .collect();
    let all = batched(&c, &rows);
    for (j, row) in rows.iter().enumerate() {
        let alone = batched(&c, std::slice::from_ref(row));
        let shifted = batched(&c, &rows[j.saturating_sub(3)..=j]);
        let a = all[j].as_ref().unwrap();
        for other in [&alone[0], shifted.last().unwrap()] {
            let o = other.as_ref().unwrap();
            let bits = |s: &StageSolution| -> Vec<u64> {
                s.node_voltages.iter().map(|v| v.to_bits()).collect()
            };
            assert_eq!(bits(a), bits(o), "decision {j}");
            assert_eq!(a.info, o.info);
        }
    }
}
