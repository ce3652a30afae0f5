//! Analysis of one competition stage (what `hardmax stage` reports): the small-signal gain,
//! measured and in closed form, and transfer sweeps of one input. The command line only parses,
//! formats and prints.
//!
//! Numerical core: no I/O, no printing.

use thiserror::Error;

use crate::device::DrainCoupling;
use crate::scale::Scale;

use super::{CompetitionCircuit, CompetitionError, CompetitionStage, StageSolution, Workspace};

/// The drain coupling that gives a competition gain `g = kappa/sigma` (eta = 1/g; with equal
/// slope factors the weak-inversion gain of the current-mode WTA is `n_A/(n_B eta_A) = 1/eta`,
/// model notes §4.1). The one conversion used by experiment files and the `stage` command.
pub fn drain_coupling_for_gain(g: f64) -> DrainCoupling {
    DrainCoupling::Eta(1.0 / g)
}

/// Numerical gain `d ln(out_a/out_b) / d ln(in_a/in_b)` between the largest input a and the
/// next b: the relative output difference over the relative input difference for small
/// differences (model notes §4.1), by a central difference of ±1e-5 in `ln(in_a/in_b)`.
/// `None` when one of the two inputs is not positive or the result is not finite.
pub fn numerical_gain<S: CompetitionStage + ?Sized>(
    stage: &S,
    inputs: &[f64],
) -> Result<Option<f64>, CompetitionError> {
    if inputs.len() < 2 {
        return Ok(None);
    }
    let mut order: Vec<usize> = (0..inputs.len()).collect();
    order.sort_by(|&x, &y| inputs[y].total_cmp(&inputs[x]));
    let (a, b) = (order[0], order[1]);
    if inputs[a] <= 0.0 || inputs[b] <= 0.0 {
        return Ok(None);
    }
    let mut ws = Workspace::new();
    let mut sol = StageSolution::for_stage(stage);
    let mut perturbed = inputs.to_vec();
    let mut eval = |delta: f64| -> Result<(f64, f64), CompetitionError> {
        perturbed.copy_from_slice(inputs);
        perturbed[a] *= 1.0 + delta;
        perturbed[b] *= 1.0 - delta;
        stage.solve(&perturbed, &mut ws, &mut sol)?;
        Ok((
            (sol.outputs[a] / sol.outputs[b]).ln(),
            (perturbed[a] / perturbed[b]).ln(),
        ))
    };
    let d = 1e-5;
    let (out_plus, in_plus) = eval(d)?;
    let (out_minus, in_minus) = eval(-d)?;
    let g = (out_plus - out_minus) / (in_plus - in_minus);
    Ok(g.is_finite().then_some(g))
}

/// The weak-inversion closed-form gain of a stage and what it is.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ClosedFormGain {
    pub value: f64,
    /// The formula and its source.
    pub derivation: &'static str,
}

/// The closed-form gain: kappa/sigma of cell 0 for the current-mode WTA, 1 for the diode-fed
/// differential pair (a plain normaliser).
pub fn closed_form_gain(stage: &CompetitionCircuit) -> ClosedFormGain {
    match stage {
        CompetitionCircuit::Wta(c) => ClosedFormGain {
            value: c.gain(0).unwrap_or(f64::NAN),
            derivation: "kappa/sigma = n_A/(n_B eta_A), weak-inversion closed form (DEVELOPERS.md model notes §4.1)",
        },
        CompetitionCircuit::Hysteretic(c) => ClosedFormGain {
            value: c.gain(0).unwrap_or(f64::NAN),
            derivation: "kappa/sigma = n_A/(n_B eta_A) of the WTA without its feedback, weak-inversion closed form (DEVELOPERS.md model notes §4.1, §4.5)",
        },
        CompetitionCircuit::KWinners(c) => ClosedFormGain {
            value: c.cells().gain(0).unwrap_or(f64::NAN),
            derivation: "kappa/sigma = n_A/(n_B eta_A) of the cells while no output is limited, weak-inversion closed form (DEVELOPERS.md model notes §4.1, §4.5)",
        },
        CompetitionCircuit::Cascade(c) => ClosedFormGain {
            value: c.cell_gain().unwrap_or(f64::NAN),
            derivation: "kappa/sigma = n_A/(n_B eta_A) of each group's WTA (first group of the first level), weak-inversion closed form (DEVELOPERS.md model notes §4.1, §4.6)",
        },
        CompetitionCircuit::Ranking(c) => ClosedFormGain {
            value: c.full().gain(0).unwrap_or(f64::NAN),
            derivation: "kappa/sigma = n_A/(n_B eta_A) of the WTA every round uses, weak-inversion closed form (DEVELOPERS.md model notes §4.1, §4.7)",
        },
        CompetitionCircuit::DiffPair(_) => ClosedFormGain {
            value: 1.0,
            derivation: "1: diode-connected inputs make a plain normaliser in weak inversion (DEVELOPERS.md model notes §4.2)",
        },
    }
}

/// Which quantity a transfer sweep moves.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum SweepQuantity {
    /// x = I_0 - I_1 around their given mean (I_0, I_1 = mean ± x/2), other inputs as given.
    Difference,
    /// x = I_k, other inputs as given.
    Input(usize),
}

/// A transfer sweep: `points` values of one quantity from `from` to `to`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TransferSweep {
    pub quantity: SweepQuantity,
    pub from: f64,
    pub to: f64,
    pub points: usize,
    /// Spacing of the points: `x_i = from + i (to - from)/(points - 1)` (linear) or
    /// `x_i = from (to/from)^(i/(points - 1))` (log).
    pub spacing: Scale,
}

/// Why a transfer sweep cannot run or stopped.
#[derive(Clone, Debug, PartialEq, Error)]
pub enum SweepError {
    #[error("a sweep needs at least 2 points (got {0})")]
    TooFewPoints(usize),
    #[error("a log sweep needs its ends of the same sign and not zero (got {from:e}, {to:e})")]
    LogEnds { from: f64, to: f64 },
    #[error("input index {index} is out of range (there are {n} inputs)")]
    NoSuchInput { index: usize, n: usize },
    #[error("a difference sweep needs at least 2 inputs")]
    NoPair,
    /// x would make input `input` negative (`mean` is the mean of I_0 and I_1 for a
    /// difference sweep).
    #[error("x = {x:e} would make input {input} negative")]
    NegativeInput { x: f64, input: usize, mean: f64 },
    /// The stage's solve failed at point `point`.
    #[error("sweep point {point} (x = {x:e}): {source}")]
    Solve {
        point: usize,
        x: f64,
        source: Box<CompetitionError>,
    },
}

impl TransferSweep {
    /// Check the sweep for a stage of `n` inputs.
    pub fn check(&self, n: usize) -> Result<(), SweepError> {
        match self.quantity {
            SweepQuantity::Input(index) if index >= n => {
                return Err(SweepError::NoSuchInput { index, n })
            }
            SweepQuantity::Difference if n < 2 => return Err(SweepError::NoPair),
            _ => {}
        }
        if self.points < 2 {
            return Err(SweepError::TooFewPoints(self.points));
        }
        if self.spacing == Scale::Log && self.from * self.to <= 0.0 {
            return Err(SweepError::LogEnds {
                from: self.from,
                to: self.to,
            });
        }
        Ok(())
    }

    /// The swept value of point `i`.
    pub fn x(&self, i: usize) -> f64 {
        let f = i as f64 / (self.points - 1) as f64;
        self.spacing.interpolate(self.from, self.to, f)
    }

    /// Solve `stage` at every point, the other inputs as in `inputs`, and pass each point's
    /// x and solution to `each` in order.
    pub fn run<S: CompetitionStage + ?Sized>(
        &self,
        stage: &S,
        inputs: &[f64],
        each: impl FnMut(f64, &StageSolution),
    ) -> Result<(), SweepError> {
        let mut ws = Workspace::new();
        self.run_with(stage, inputs, &mut ws, false, each)
    }

    /// [`TransferSweep::run`] with a caller's workspace (a circuit that holds state carries it
    /// from point to point and from one call to the next), forwards or, with `reverse`, from
    /// the last point to the first.
    pub fn run_with<S: CompetitionStage + ?Sized>(
        &self,
        stage: &S,
        inputs: &[f64],
        ws: &mut Workspace,
        reverse: bool,
        mut each: impl FnMut(f64, &StageSolution),
    ) -> Result<(), SweepError> {
        self.check(inputs.len())?;
        let mut sol = StageSolution::for_stage(stage);
        let mut line_inputs = inputs.to_vec();
        let mean01 = 0.5 * (inputs[0] + inputs[1]);
        for i in 0..self.points {
            let point = if reverse { self.points - 1 - i } else { i };
            let x = self.x(point);
            match self.quantity {
                SweepQuantity::Difference => {
                    line_inputs[0] = mean01 + 0.5 * x;
                    line_inputs[1] = mean01 - 0.5 * x;
                    if line_inputs[0] < 0.0 || line_inputs[1] < 0.0 {
                        return Err(SweepError::NegativeInput {
                            x,
                            input: usize::from(line_inputs[0] >= 0.0),
                            mean: mean01,
                        });
                    }
                }
                SweepQuantity::Input(index) => {
                    if x < 0.0 {
                        return Err(SweepError::NegativeInput {
                            x,
                            input: index,
                            mean: f64::NAN,
                        });
                    }
                    line_inputs[index] = x;
                }
            }
            stage
                .solve(&line_inputs, ws, &mut sol)
                .map_err(|source| SweepError::Solve {
                    point,
                    x,
                    source: Box::new(source),
                })?;
            each(x, &sol);
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stages::competition::ideal_normaliser::IdealNormaliser;

    fn normaliser(n: usize, bias: f64) -> IdealNormaliser {
        IdealNormaliser::new(n, bias)
    }

    // The exact normaliser has gain 1: I_O,a/I_O,b = I_a/I_b (translinear normaliser, C. Mead,
    // "Analog VLSI and Neural Systems", 1989).
    #[test]
    fn gain_of_an_exact_normaliser_is_one() {
        let c = normaliser(3, 5e-9);
        let g = numerical_gain(&c, &[10e-9, 12e-9, 9e-9]).unwrap().unwrap();
        approx::assert_relative_eq!(g, 1.0, max_relative = 1e-4);
        assert_eq!(numerical_gain(&c, &[10e-9, 0.0, 0.0]).unwrap(), None);
    }

    // The sweep's x values follow the documented formulas (x_i = from + i (to - from)/(P - 1),
    // log: from (to/from)^(i/(P-1))); the shares of the exact normaliser are I_k / Σ I.
    #[test]
    fn sweep_points_and_shares() {
        let c = normaliser(2, 5e-9);
        let s = TransferSweep {
            quantity: SweepQuantity::Input(0),
            from: 1e-9,
            to: 100e-9,
            points: 3,
            spacing: Scale::Log,
        };
        let mut seen = Vec::new();
        s.run(&c, &[10e-9, 10e-9], |x, sol| seen.push((x, sol.shares[0])))
            .unwrap();
        assert_eq!(seen.len(), 3);
        approx::assert_relative_eq!(seen[1].0, 10e-9, max_relative = 1e-12);
        for (x, share) in seen {
            approx::assert_relative_eq!(share, x / (x + 10e-9), max_relative = 1e-8);
        }
        let bad = TransferSweep {
            quantity: SweepQuantity::Difference,
            from: -30e-9,
            to: 0.0,
            points: 2,
            spacing: Scale::Linear,
        };
        assert!(matches!(
            bad.run(&c, &[10e-9, 10e-9], |_, _| {}),
            Err(SweepError::NegativeInput { .. })
        ));
        assert!(matches!(
            TransferSweep { points: 1, ..bad }.check(2),
            Err(SweepError::TooFewPoints(1))
        ));
    }
}
