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

/// Outcome of a k-winners decision (the k largest outputs are the selected set).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TopK {
    /// How many winners.
    pub k: usize,
    /// The competition for the k-th place, judged by the shared rule on what remains after the
    /// k - 1 places above it: `winner` is the k-th largest output (the last member of the set),
    /// `runner_up` the (k+1)-th (the first outside), each share taken of the remaining outputs
    /// (for k = 1 exactly [`DecisionRule::decide`]).
    pub decision: Decision,
    /// The k-th largest share itself (of all outputs): the set's threshold.
    pub kth_share: f64,
}

impl TopK {
    /// Whether class `c` is in the selected set: its share is above the k-th's, or equal with
    /// an index not above the k-th's (the same tie order as [`DecisionRule::decide`]).
    pub fn contains(&self, shares: &[f64], c: usize) -> bool {
        match shares.get(c) {
            Some(&s) if !s.is_nan() => {
                s > self.kth_share || (s == self.kth_share && c <= self.decision.winner)
            }
            _ => false,
        }
    }

    /// The class to score: `truth` when it is in the set, otherwise the largest output (so a
    /// decision counts as correct exactly when the true class is within the top k).
    pub fn scored_class(&self, shares: &[f64], truth: usize) -> usize {
        if self.contains(shares, truth) {
            truth
        } else {
            DecisionRule::argmax().decide(shares).winner
        }
    }
}

impl DecisionRule {
    /// Top-k decision (model notes §4.4): the k largest shares form the set; the set is
    /// *ambiguous* when the competition for its last place is, under this rule, with the shares
    /// of the k-th and (k+1)-th taken of what remains once the k - 1 larger outputs are removed.
    /// No allocation: O(N k). `k` is clamped to 1..=N.
    pub fn decide_top_k(&self, shares: &[f64], k: usize) -> TopK {
        let k = k.clamp(1, shares.len().max(1));
        // Order: larger share first, lower index first among equal shares.
        let before = |a: (f64, usize), b: (f64, usize)| a.0 > b.0 || (a.0 == b.0 && a.1 < b.1);
        let mut prev: Option<(f64, usize)> = None;
        let mut removed = 0.0;
        let place = |prev: Option<(f64, usize)>| -> Option<(f64, usize)> {
            let mut best: Option<(f64, usize)> = None;
            for (i, &s) in shares.iter().enumerate() {
                if s.is_nan() || prev.is_some_and(|p| !before(p, (s, i))) {
                    continue;
                }
                if best.is_none_or(|b| before((s, i), b)) {
                    best = Some((s, i));
                }
            }
            best
        };
        for _ in 1..k {
            match place(prev) {
                Some(p) => {
                    removed += p.0;
                    prev = Some(p);
                }
                None => break,
            }
        }
        let kth = place(prev);
        let next = kth.and_then(|p| place(Some(p)));
        let Some((ks, ki)) = kth else {
            return TopK {
                k,
                decision: self.decide(&[]),
                kth_share: f64::INFINITY,
            };
        };
        let rest = (1.0 - removed).max(f64::MIN_POSITIVE);
        let (ri, rs) = next.map_or((ki, 0.0), |(s, i)| (i, s / rest));
        let ws = ks / rest;
        TopK {
            k,
            decision: Decision {
                winner: ki,
                winner_share: ws,
                runner_up: ri,
                runner_up_share: rs,
                ambiguous: ws < self.min_winner_share || rs > self.max_runner_up_share,
            },
            kth_share: ks,
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
    /// Top-k rule (our definition, model notes §4.4) on hand-made shares; k = 1 is the plain
    /// rule.
    #[test]
    fn top_k_set_and_ambiguity() {
        let rule = DecisionRule {
            min_winner_share: 0.6,
            max_runner_up_share: 0.3,
        };
        let shares = [0.05, 0.4, 0.02, 0.5, 0.03];
        assert_eq!(rule.decide_top_k(&shares, 1).decision, rule.decide(&shares));
        // k = 2: set {3, 1}; the 2nd place has 0.4 of the remaining 0.5 (0.8), the 3rd 0.05/0.5.
        let t = rule.decide_top_k(&shares, 2);
        assert_eq!((t.decision.winner, t.decision.runner_up), (1, 0));
        assert!((t.decision.winner_share - 0.8).abs() < 1e-12);
        assert!((t.decision.runner_up_share - 0.1).abs() < 1e-12);
        assert!(!t.decision.ambiguous);
        assert!(t.contains(&shares, 3) && t.contains(&shares, 1) && !t.contains(&shares, 0));
        assert_eq!(t.scored_class(&shares, 1), 1);
        assert_eq!(t.scored_class(&shares, 4), 3);
        // k = 3: 3rd place 0.05 of 0.1 remaining: below 0.6, ambiguous.
        assert!(rule.decide_top_k(&shares, 3).decision.ambiguous);
        // Ties keep the lowest index first.
        let t = rule.decide_top_k(&[0.25, 0.25, 0.25, 0.25], 2);
        assert_eq!((t.decision.winner, t.decision.runner_up), (1, 2));
        assert!(t.contains(&[0.25; 4], 0) && !t.contains(&[0.25; 4], 2));
    }
}
