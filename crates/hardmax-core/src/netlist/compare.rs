//! hardmax's own solve of an exported die beside the simulator's answer, sample by sample.

use serde::{Deserialize, Serialize};

use super::results::SimResults;
use crate::stages::competition::{CompetitionStage, DecisionRule, StageSolution, Workspace};

/// hardmax's answer for one exported sample (kept in the export's record so a comparison needs
/// no rebuild).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SampleSolution {
    /// Stage inputs (A, or V for voltage inputs).
    pub inputs: Vec<f64>,
    /// Node voltages in hardmax's node order, V (empty when the solve failed).
    pub node_voltages: Vec<f64>,
    /// Output currents, A.
    pub outputs: Vec<f64>,
    pub shares: Vec<f64>,
    pub winner: usize,
    pub ambiguous: bool,
    /// The solve's error when it did not converge (then no decision).
    pub failure: Option<String>,
}

/// Solve `stage` on every sample.
pub fn solve_samples<S: CompetitionStage + ?Sized>(
    stage: &S,
    samples: &[Vec<f64>],
    rule: &DecisionRule,
) -> Vec<SampleSolution> {
    let mut ws = Workspace::new();
    let mut sol = StageSolution::for_stage(stage);
    samples
        .iter()
        .map(|x| match stage.solve(x, &mut ws, &mut sol) {
            Ok(()) => {
                let d = sol.decide(rule);
                SampleSolution {
                    inputs: x.clone(),
                    node_voltages: sol.node_voltages.clone(),
                    outputs: sol.outputs.clone(),
                    shares: sol.shares.clone(),
                    winner: d.winner,
                    ambiguous: d.ambiguous,
                    failure: None,
                }
            }
            Err(e) => SampleSolution {
                inputs: x.clone(),
                node_voltages: Vec::new(),
                outputs: Vec::new(),
                shares: Vec::new(),
                winner: 0,
                ambiguous: false,
                failure: Some(e.to_string()),
            },
        })
        .collect()
}

/// One sample compared.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SampleComparison {
    pub sample: usize,
    /// hardmax's decision (`None` when its solve failed).
    pub hardmax_winner: Option<usize>,
    pub hardmax_ambiguous: bool,
    /// The simulator's decision under the same rule.
    pub sim_winner: usize,
    pub sim_ambiguous: bool,
    /// Same winner and same ambiguity flag.
    pub agree: bool,
    /// Largest |share difference| over the class lines.
    pub max_share_diff: f64,
    /// Largest |node-voltage difference|, V, and the node where it occurs.
    pub max_node_diff: f64,
    pub worst_node: String,
}

/// Compare every sample; `nodes` names the stage nodes in hardmax's order.
pub fn compare(
    ours: &[SampleSolution],
    sim: &SimResults,
    nodes: &[String],
    rule: &DecisionRule,
) -> Vec<SampleComparison> {
    ours.iter()
        .zip(sim.node_voltages.iter().zip(&sim.outputs))
        .enumerate()
        .map(|(s, (o, (v, out)))| {
            let total: f64 = out.iter().sum();
            let shares: Vec<f64> = out.iter().map(|x| x / total).collect();
            let d = rule.decide(&shares);
            let ok = o.failure.is_none();
            let max_share_diff = if ok {
                o.shares
                    .iter()
                    .zip(&shares)
                    .map(|(a, b)| (a - b).abs())
                    .fold(0.0, f64::max)
            } else {
                f64::NAN
            };
            let (mut worst, mut worst_node) = (if ok { 0.0 } else { f64::NAN }, String::new());
            if ok {
                for ((a, b), name) in o.node_voltages.iter().zip(v).zip(nodes) {
                    if (a - b).abs() >= worst {
                        worst = (a - b).abs();
                        worst_node = name.clone();
                    }
                }
            }
            SampleComparison {
                sample: s,
                hardmax_winner: ok.then_some(o.winner),
                hardmax_ambiguous: o.ambiguous,
                sim_winner: d.winner,
                sim_ambiguous: d.ambiguous,
                agree: ok && o.winner == d.winner && o.ambiguous == d.ambiguous,
                max_share_diff,
                max_node_diff: worst,
                worst_node,
            }
        })
        .collect()
}
