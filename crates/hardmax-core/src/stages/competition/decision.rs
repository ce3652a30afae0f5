//! The hard decision taken from a stage's output shares.
//!
//! The winner is the largest output; the decision is *ambiguous* when the winner's share is
//! below `min_winner_share` or the runner-up's share is above `max_runner_up_share`
//! (DEVELOPERS.md model notes §4.4). Ambiguous decisions are counted apart from right and wrong ones.

use serde::{Deserialize, Serialize};

/// User-set thresholds on output shares (each in [0, 1]).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct DecisionRule {
    /// Ambiguous when the winner's share is below this.
    pub min_winner_share: f64,
    /// Ambiguous when the runner-up's share is above this.
    pub max_runner_up_share: f64,
}

impl Default for DecisionRule {
    /// Winner must hold at least 60 % of the output and the runner-up at most 30 % (a choice of
    /// ours for a clear WTA decision; set both for your read-out).
    fn default() -> Self {
        DecisionRule {
            min_winner_share: 0.6,
            max_runner_up_share: 0.3,
        }
    }
}

/// Outcome of one decision.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Decision {
    /// Index of the largest output (the lowest index among exact ties).
    pub winner: usize,
    /// The winner's share.
    pub winner_share: f64,
    /// Index of the second largest output (equal to `winner` when there is one class).
    pub runner_up: usize,
    /// The runner-up's share (0 with one class).
    pub runner_up_share: f64,
    /// The rule flagged this decision.
    pub ambiguous: bool,
}

impl DecisionRule {
    /// A rule that never flags a decision (pure argmax).
    pub fn argmax() -> DecisionRule {
        DecisionRule {
            min_winner_share: 0.0,
            max_runner_up_share: 1.0,
        }
    }

    /// Decide from shares (non-finite shares are never winners; an empty slice gives an
    /// ambiguous decision for class 0).
    pub fn decide(&self, shares: &[f64]) -> Decision {
        let mut w = usize::MAX;
        let mut ws = f64::NEG_INFINITY;
        let mut r = usize::MAX;
        let mut rs = f64::NEG_INFINITY;
        for (i, &s) in shares.iter().enumerate() {
            if s.is_nan() {
                continue;
            }
            if s > ws {
                r = w;
                rs = ws;
                w = i;
                ws = s;
            } else if s > rs {
                r = i;
                rs = s;
            }
        }
        if w == usize::MAX {
            return Decision {
                winner: 0,
                winner_share: 0.0,
                runner_up: 0,
                runner_up_share: 0.0,
                ambiguous: true,
            };
        }
        if r == usize::MAX {
            r = w;
            rs = 0.0;
        }
        Decision {
            winner: w,
            winner_share: ws,
            runner_up: r,
            runner_up_share: rs,
            ambiguous: ws < self.min_winner_share || rs > self.max_runner_up_share,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The rule as stated in DEVELOPERS.md model notes §4.4 (our own definition), on hand-made shares.
    #[test]
    fn winner_and_ambiguity() {
        let rule = DecisionRule {
            min_winner_share: 0.5,
            max_runner_up_share: 0.3,
        };
        let d = rule.decide(&[0.1, 0.7, 0.2]);
        assert_eq!((d.winner, d.runner_up, d.ambiguous), (1, 2, false));
        // Winner below its threshold.
        assert!(rule.decide(&[0.3, 0.45, 0.25]).ambiguous);
        // Runner-up above its threshold.
        assert!(rule.decide(&[0.35, 0.55, 0.1]).ambiguous);
        // Exact tie: lowest index wins, and the tie is ambiguous under this rule.
        let d = rule.decide(&[0.5, 0.5]);
        assert_eq!(d.winner, 0);
        assert!(d.ambiguous);
        assert!(!DecisionRule::argmax().decide(&[0.5, 0.5]).ambiguous);
        assert!(DecisionRule::argmax().decide(&[]).ambiguous);
    }
}
