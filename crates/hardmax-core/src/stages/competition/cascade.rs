//! Competition for many classes and for several winners built from plain current-mode WTAs
//! ([`super::wta`], Lazzaro et al. 1989): a tree of small WTAs ([`CascadeChip`]) and ranking by
//! repeated maximum ([`RankingChip`]). DEVELOPERS.md model notes §4.6 and §4.7.
//!
//! ## Tree (cascade)
//!
//! The classes are split into groups of `fan_in` consecutive lines; each group is a WTA of its
//! own devices. A copy of each group's largest input passes to the next level: a replica sink
//! transistor R (gate at the group's common node V_C, source at ground, drain held at
//! `copy_drain_voltage` by the next level's input mirror) carries what the group's sinks carry
//! at that gate voltage, i.e. the winner's input current up to the drain-coupling factor
//! `e^{sigma (V_copy - V_win)/U_T}` and R's own mismatch. The next level's groups compete on
//! these copies, and so on until one group is left; the final winner's path down the tree is
//! the class. A group of one line (when the fan-in does not divide the lines of a level) passes
//! its input on unchanged; the unused slots are the tree's padding ([`CascadeDesign::padding`]).
//!
//! Each class's output is the product of its lines' shares along its path times the last
//! group's output current, so the shares sum to 1 and the shared decision rule judges the
//! path's clarity at every level at once.
//!
//! Transient: the levels run one after another (the next level's inputs are the copies at the
//! previous level's end state); the groups of a level run in parallel, so a level takes its
//! slowest group's decision time and the tree's decision time is the sum over levels. Energy is
//! the sum over every group.
//!
//! ## Ranking by repeated maximum
//!
//! One WTA decides; the winner's input is switched off (its cell leaves the competition) and
//! the rest compete again, k times: the k winners in order. Every step is a plain WTA decision
//! of the same devices. The set of the first k is ambiguous when the k-th step is (the shared
//! rule on that step's shares). Time: the sum of the steps' transient decision times, or k
//! times `step_time` at DC (a stated per-step time model); energy likewise summed.
//!
//! Numerical core: no I/O, no printing.

#![allow(clippy::needless_range_loop)]

use rand::RngCore;

use crate::device::{Ekv, MosMismatch, Polarity, Transistor};

use super::common::{check_mismatch, nonnegative, Devices};
use super::decision::{Decision, DecisionRule};
use super::mos::Mos;
use super::transient::TransientWorkspace;
use super::transient::{simulate, NoiseOptions, TransientError, TransientOptions};
use super::wta::{WtaChip, WtaCircuit, WtaDesign};
use super::{
    fill_shares, positive, validate_inputs, CompetitionError, CompetitionStage, StageSolution,
    Workspace,
};

const STAGE: &str = "WTA cascade";
const RANK_STAGE: &str = "ranking by repeated maximum";

/// Nominal design of a tree of WTAs.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct CascadeDesign {
    /// Number of classes (lines of the first level), at least 2.
    pub classes: usize,
    /// Lines per group, at least 2.
    pub fan_in: usize,
    /// Every group's WTA (sizes, bias, capacitances; its `n` is set per group).
    pub cell: WtaDesign,
    /// The replica sink that copies a group's winning input to the next level (NMOS).
    pub copy: Transistor,
    /// Drain voltage of the replica, V (held by the next level's input mirror).
    pub copy_drain_voltage: f64,
}

/// How many slots of the tree are unused when the fan-in does not divide a level's lines.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Padding {
    /// Slots over all levels (groups x fan-in).
    pub slots: usize,
    /// Of which unused.
    pub unused: usize,
}

impl CascadeDesign {
    /// A tree with the replica's drain at half the supply.
    pub fn new(classes: usize, fan_in: usize, cell: WtaDesign, copy: Transistor) -> Self {
        let v = 0.5 * cell.supply;
        CascadeDesign {
            classes,
            fan_in,
            cell,
            copy,
            copy_drain_voltage: v,
        }
    }

    /// Check every parameter; the error names the first bad one.
    pub fn validate(&self) -> Result<(), CompetitionError> {
        if self.fan_in < 2 {
            return Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: "fan_in",
                value: self.fan_in as f64,
                reason: "a group of the tree must have at least 2 lines",
            });
        }
        if self.classes < 2 {
            return Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: "n",
                value: self.classes as f64,
                reason: "a competition needs at least 2 classes",
            });
        }
        let mut c = self.cell.clone();
        c.n = 2;
        c.validate()?;
        if self.copy.polarity != Polarity::Nmos {
            return Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: "copy",
                value: -1.0,
                reason: "the replica of the sinks is an NMOS",
            });
        }
        positive(STAGE, "copy.w", self.copy.w)?;
        positive(STAGE, "copy.l", self.copy.l)?;
        nonnegative(STAGE, "copy_drain_voltage", self.copy_drain_voltage)?;
        if self.copy_drain_voltage > self.cell.supply {
            return Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: "copy_drain_voltage",
                value: self.copy_drain_voltage,
                reason: "must not exceed the supply",
            });
        }
        Ok(())
    }

    /// Group sizes per level, first level first (the last level has one group).
    pub fn levels(&self) -> Vec<Vec<usize>> {
        let f = self.fan_in.max(2);
        let mut lines = self.classes;
        let mut out = Vec::new();
        loop {
            let groups = lines.div_ceil(f);
            out.push(
                (0..groups)
                    .map(|g| f.min(lines - g * f))
                    .collect::<Vec<_>>(),
            );
            if groups <= 1 {
                break;
            }
            lines = groups;
        }
        out
    }

    /// Number of levels (sequential WTA decisions).
    pub fn depth(&self) -> usize {
        self.levels().len()
    }

    /// The unused slots of the levels below the top (the top group has exactly the lines
    /// left), or `None` when the fan-in divides the lines of every such level.
    pub fn padding(&self) -> Option<Padding> {
        let levels = self.levels();
        let below = &levels[..levels.len() - 1];
        let slots: usize = below.iter().map(|l| l.len() * self.fan_in).sum();
        let used: usize = below.iter().map(|l| l.iter().sum::<usize>()).sum();
        (slots > used).then_some(Padding {
            slots,
            unused: slots - used,
        })
    }

    /// Groups that are circuits (two or more lines), over all levels.
    pub fn circuit_groups(&self) -> usize {
        self.levels()
            .iter()
            .map(|l| l.iter().filter(|&&s| s >= 2).count())
            .sum()
    }

    /// Transistors per chip: each circuit group's WTA, plus a replica per group below the top.
    pub fn transistor_count(&self) -> usize {
        let levels = self.levels();
        let last = levels.len() - 1;
        let mut n = 0;
        for (l, sizes) in levels.iter().enumerate() {
            for &s in sizes.iter().filter(|&&s| s >= 2) {
                n += 2 * s + usize::from(self.cell.bias.is_transistor());
                if l < last {
                    n += 1;
                }
            }
        }
        n
    }

    fn group_design(&self, size: usize) -> WtaDesign {
        let mut d = self.cell.clone();
        d.n = size;
        d
    }
}

/// One group of a sampled tree.
#[derive(Clone, Debug, PartialEq)]
pub struct GroupChip {
    /// The group's WTA (`None` for a lone line, which passes its input on).
    pub cells: Option<WtaChip>,
    /// The replica's mismatch (`None` at the top level and for a lone line).
    pub copy: Option<MosMismatch>,
}

/// One sampled tree.
#[derive(Clone, Debug, PartialEq)]
pub struct CascadeChip {
    pub design: CascadeDesign,
    /// Groups per level.
    pub groups: Vec<Vec<GroupChip>>,
}

impl CascadeChip {
    /// Sample a tree in a fixed order: level by level, group by group, each circuit group's
    /// WTA draws ([`WtaChip::sample`]) then its replica (below the top level).
    pub fn sample<F>(design: CascadeDesign, mut draw: F) -> Result<CascadeChip, CompetitionError>
    where
        F: FnMut(&Transistor) -> MosMismatch,
    {
        design.validate()?;
        let levels = design.levels();
        let last = levels.len() - 1;
        let mut groups = Vec::with_capacity(levels.len());
        for (l, sizes) in levels.iter().enumerate() {
            let mut row = Vec::with_capacity(sizes.len());
            for &s in sizes {
                if s < 2 {
                    row.push(GroupChip {
                        cells: None,
                        copy: None,
                    });
                    continue;
                }
                let cells = WtaChip::sample(design.group_design(s), &mut draw)?;
                let copy = (l < last).then(|| draw(&design.copy));
                if let Some(m) = &copy {
                    check_mismatch(STAGE, std::iter::once(m))?;
                }
                row.push(GroupChip {
                    cells: Some(cells),
                    copy,
                });
            }
            groups.push(row);
        }
        Ok(CascadeChip { design, groups })
    }

    /// The replica sink of group `group` of level `level` at `temperature` (K), with its
    /// mismatch and the cells' drain coupling, as the solve evaluates it (`None` for a lone line
    /// or a top-level group, which have no replica). For the netlist export.
    pub fn copy_device(&self, level: usize, group: usize, temperature: f64) -> Option<Ekv> {
        let d = &self.design;
        let m = self.groups.get(level)?.get(group)?.copy?;
        let devices = Devices::new(&d.cell.process, d.cell.drain_coupling, temperature);
        Some(devices.one(&d.copy, m))
    }

    /// A tree without mismatch.
    pub fn nominal(design: CascadeDesign) -> Result<CascadeChip, CompetitionError> {
        Self::sample(design, |_| MosMismatch::default())
    }

    /// The tree at a temperature (K), ready to solve.
    pub fn at(&self, temperature: f64) -> Result<CascadeCircuit, CompetitionError> {
        positive(STAGE, "temperature", temperature)?;
        let d = &self.design;
        let devices = Devices::new(&d.cell.process, d.cell.drain_coupling, temperature);
        let mut levels = Vec::with_capacity(self.groups.len());
        let mut nodes = 0;
        for row in &self.groups {
            let mut out = Vec::with_capacity(row.len());
            let mut start = 0;
            for g in row {
                let wta = g.cells.as_ref().map(|c| c.at(temperature)).transpose()?;
                let size = g.cells.as_ref().map_or(1, |c| c.design.n);
                if wta.is_some() {
                    nodes += size + 1;
                }
                out.push(GroupCircuit {
                    start,
                    size,
                    wta,
                    copy: g.copy.map(|m| Mos::new(&devices.one(&d.copy, m))),
                });
                start += size;
            }
            levels.push(out);
        }
        Ok(CascadeCircuit {
            classes: d.classes,
            fan_in: d.fan_in,
            levels,
            copy_drain_voltage: d.copy_drain_voltage,
            nodes,
        })
    }
}

/// One group at its conditions.
#[derive(Clone, Debug, PartialEq)]
struct GroupCircuit {
    /// First line of the group at its level.
    start: usize,
    size: usize,
    wta: Option<WtaCircuit>,
    copy: Option<Mos>,
}

/// A tree at its conditions.
#[derive(Clone, Debug, PartialEq)]
pub struct CascadeCircuit {
    classes: usize,
    fan_in: usize,
    levels: Vec<Vec<GroupCircuit>>,
    copy_drain_voltage: f64,
    nodes: usize,
}

/// A transient of the whole tree.
#[derive(Clone, Debug, PartialEq)]
pub struct CascadeTransient {
    /// Sum over levels of the slowest group's decision time, s; `None` when a group did not
    /// decide.
    pub decision_time: Option<f64>,
    /// Each level's time (its slowest group's decision time), s.
    pub level_times: Vec<Option<f64>>,
    /// Sum over every group of the energy to its decision, J.
    pub energy: Option<f64>,
    /// Per-class outputs and shares, and every group's end-state node voltages.
    pub solution: StageSolution,
    /// The shared rule on the class shares at the end.
    pub decision: Decision,
}

impl CascadeCircuit {
    /// Number of levels.
    pub fn depth(&self) -> usize {
        self.levels.len()
    }

    /// Lines per group.
    pub fn fan_in(&self) -> usize {
        self.fan_in
    }

    /// The replica current of a group whose common node is at `vc`.
    fn copy_current(&self, g: &GroupCircuit, vc: f64) -> f64 {
        match &g.copy {
            Some(m) => m.id(vc, self.copy_drain_voltage, 0.0),
            None => 0.0,
        }
    }

    /// Run the tree level by level: `group` solves one group (its inputs, into a solution) and
    /// returns its decision time and energy (transient) or nothing (DC).
    fn run<F>(
        &self,
        inputs: &[f64],
        out: &mut StageSolution,
        mut group: F,
    ) -> Result<(Vec<Option<f64>>, Option<f64>), TransientError>
    where
        F: FnMut(
            &WtaCircuit,
            &[f64],
            &mut StageSolution,
        ) -> Result<Option<(f64, f64)>, TransientError>,
    {
        validate_inputs(STAGE, self.classes, inputs, "A", true)?;
        out.resize(self.classes, self.nodes);
        let mut cur = inputs.to_vec();
        let mut shares: Vec<Vec<f64>> = Vec::with_capacity(self.levels.len());
        let mut gsol = StageSolution::default();
        let mut node = 0;
        let mut level_times = Vec::with_capacity(self.levels.len());
        let mut energy = Some(0.0);
        let mut last_total = 0.0;
        for row in &self.levels {
            let mut next = vec![0.0; row.len()];
            let mut s = vec![1.0; cur.len()];
            let mut level_time: Option<f64> = Some(0.0);
            for (gi, g) in row.iter().enumerate() {
                let x = &cur[g.start..g.start + g.size];
                match &g.wta {
                    None => next[gi] = x[0],
                    Some(w) => {
                        let timed = group(w, x, &mut gsol)?;
                        match timed {
                            Some((t, e)) => {
                                level_time = level_time.map(|lt| lt.max(t));
                                energy = energy.map(|s| s + e);
                            }
                            None => {
                                level_time = None;
                                energy = None;
                            }
                        }
                        s[g.start..g.start + g.size].copy_from_slice(&gsol.shares[..g.size]);
                        out.node_voltages[node..node + g.size + 1]
                            .copy_from_slice(&gsol.node_voltages[..g.size + 1]);
                        node += g.size + 1;
                        next[gi] = self.copy_current(g, gsol.node_voltages[g.size]);
                        last_total = gsol.outputs[..g.size].iter().sum();
                    }
                }
            }
            level_times.push(level_time);
            shares.push(s);
            cur = next;
        }
        let f = self.fan_in;
        for c in 0..self.classes {
            let mut idx = c;
            let mut p = 1.0;
            for s in &shares {
                p *= s[idx];
                idx /= f;
            }
            out.outputs[c] = p * last_total;
        }
        fill_shares(&out.outputs, &mut out.shares);
        let total = level_times.iter().try_fold(0.0, |a, t| t.map(|t| a + t));
        Ok((level_times, energy.filter(|_| total.is_some())))
    }

    /// The tree's transient (module docs): each group by the generic integrator, the levels in
    /// sequence. `noise` draws every group's noise from the one generator, in group order.
    pub fn simulate(
        &self,
        inputs: &[f64],
        opts: &TransientOptions,
        mut noise: Option<(&NoiseOptions, &mut dyn RngCore)>,
        tws: &mut TransientWorkspace,
    ) -> Result<CascadeTransient, TransientError> {
        let mut sol = StageSolution::default();
        let (level_times, energy) = self.run(inputs, &mut sol, |w, x, gsol| {
            let nz = noise
                .as_mut()
                .map(|(o, r)| (*o, &mut **r as &mut dyn RngCore));
            let s = simulate(w, x, opts, nz, tws)?;
            let end = tws.solution();
            gsol.resize(end.outputs.len(), end.node_voltages.len());
            gsol.outputs.copy_from_slice(&end.outputs);
            gsol.shares.copy_from_slice(&end.shares);
            gsol.node_voltages.copy_from_slice(&end.node_voltages);
            Ok(match (s.decision_time, s.energy_to_decision) {
                (Some(t), Some(e)) if opts.read_time.is_none() => Some((t, e)),
                _ if opts.read_time.is_some() => Some((s.end_time, s.energy)),
                _ => None,
            })
        })?;
        let decision = opts.rule.decide(&sol.shares);
        let total = level_times.iter().try_fold(0.0, |a, t| t.map(|t| a + t));
        Ok(CascadeTransient {
            decision_time: total,
            level_times,
            energy,
            solution: sol,
            decision,
        })
    }
}

impl CompetitionStage for CascadeCircuit {
    fn n(&self) -> usize {
        self.classes
    }

    fn node_count(&self) -> usize {
        self.nodes
    }

    fn node_name(&self, i: usize) -> String {
        let mut base = 0;
        for (l, row) in self.levels.iter().enumerate() {
            for (g, gc) in row.iter().enumerate() {
                if gc.wta.is_none() {
                    continue;
                }
                if i < base + gc.size + 1 {
                    let j = i - base;
                    return if j == gc.size {
                        format!("L{l}G{g}.V_C")
                    } else {
                        format!("L{l}G{g}.V_{j}")
                    };
                }
                base += gc.size + 1;
            }
        }
        format!("node {i}")
    }

    fn stage_name(&self) -> &'static str {
        STAGE
    }

    fn input_unit(&self) -> &'static str {
        "A"
    }

    fn solve(
        &self,
        inputs: &[f64],
        ws: &mut Workspace,
        out: &mut StageSolution,
    ) -> Result<(), CompetitionError> {
        let mut info = super::SolveInfo {
            converged: true,
            method: super::SolveMethod::Newton,
            ..Default::default()
        };
        let r = self.run(inputs, out, |w, x, gsol| {
            w.solve(x, ws, gsol)?;
            info.iterations += gsol.info.iterations;
            info.residual = info.residual.max(gsol.info.residual);
            Ok(None)
        });
        match r {
            Ok(_) => {
                out.info = info;
                Ok(())
            }
            Err(TransientError::Stage(e)) => Err(e),
            // The DC closure returns stage errors only.
            Err(_) => Err(CompetitionError::InvalidParameter {
                stage: STAGE,
                parameter: "solve",
                value: f64::NAN,
                reason: "a group's solve failed",
            }),
        }
    }
}

/// One group's DC result within a tree (for `hardmax stage`): what it saw and which line won.
#[derive(Clone, Debug, PartialEq)]
pub struct GroupOutcome {
    /// Level (0 = the class lines) and group index within the level.
    pub level: usize,
    pub group: usize,
    /// First line of the group at its level (a class index at level 0).
    pub start: usize,
    /// The group's input currents (level 0: the classes'; above: the copies), A.
    pub inputs: Vec<f64>,
    /// The group's output shares (a lone line: `[1]`).
    pub shares: Vec<f64>,
    /// Winning line within the level (`start` + the group's largest share).
    pub winner: usize,
    /// The group's common-node voltage, V (`None` for a lone line).
    pub common_voltage: Option<f64>,
    /// The current passed to the next level, A: the replica's copy, the lone line's input, or
    /// `None` at the top.
    pub passed: Option<f64>,
}

impl CascadeCircuit {
    /// kappa/sigma of the first circuit group's cell 0 (every group shares the cell design).
    pub fn cell_gain(&self) -> Option<f64> {
        self.levels
            .iter()
            .flatten()
            .find_map(|g| g.wta.as_ref())
            .and_then(|w| w.gain(0))
    }

    /// The DC solve of [`CompetitionStage::solve`] with every group's inputs, shares and winner,
    /// level by level, group by group.
    pub fn solve_levels(
        &self,
        inputs: &[f64],
        ws: &mut Workspace,
        out: &mut StageSolution,
    ) -> Result<Vec<GroupOutcome>, CompetitionError> {
        self.solve(inputs, ws, out)?;
        let mut result = Vec::new();
        let mut cur = inputs.to_vec();
        let mut gsol = StageSolution::default();
        let top = self.levels.len() - 1;
        for (l, row) in self.levels.iter().enumerate() {
            let mut next = vec![0.0; row.len()];
            for (gi, g) in row.iter().enumerate() {
                let x = cur[g.start..g.start + g.size].to_vec();
                let (shares, vc) = match &g.wta {
                    None => (vec![1.0], None),
                    Some(w) => {
                        w.solve(&x, ws, &mut gsol)?;
                        (
                            gsol.shares[..g.size].to_vec(),
                            Some(gsol.node_voltages[g.size]),
                        )
                    }
                };
                let local = shares
                    .iter()
                    .enumerate()
                    .fold(
                        (0, f64::NEG_INFINITY),
                        |b, (i, &v)| if v > b.1 { (i, v) } else { b },
                    )
                    .0;
                next[gi] = match vc {
                    None => x[0],
                    Some(v) => self.copy_current(g, v),
                };
                result.push(GroupOutcome {
                    level: l,
                    group: gi,
                    start: g.start,
                    inputs: x,
                    shares,
                    winner: g.start + local,
                    common_voltage: vc,
                    passed: (l < top).then_some(next[gi]),
                });
            }
            cur = next;
        }
        Ok(result)
    }
}

/// Nominal design of ranking by repeated maximum.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct RankingDesign {
    /// The WTA that decides every step.
    pub wta: WtaDesign,
    /// Number of steps (winners), 1..=N-1.
    pub k: usize,
    /// Time a DC step is counted as taking, s (the per-step time model of a DC evaluation).
    pub step_time: f64,
}

impl RankingDesign {
    /// Check every parameter.
    pub fn validate(&self) -> Result<(), CompetitionError> {
        self.wta.validate()?;
        if self.k < 1 || self.k >= self.wta.n {
            return Err(CompetitionError::InvalidParameter {
                stage: RANK_STAGE,
                parameter: "k",
                value: self.k as f64,
                reason: "the number of winners must be from 1 to N - 1 (N = number of classes)",
            });
        }
        positive(RANK_STAGE, "step_time", self.step_time)
    }
}

/// A sampled ranking circuit: one WTA chip (the same draws as [`WtaChip::sample`]).
#[derive(Clone, Debug, PartialEq)]
pub struct RankingChip {
    pub design: RankingDesign,
    pub cells: WtaChip,
}

impl RankingChip {
    /// Sample: exactly the plain WTA's draws.
    pub fn sample<F>(design: RankingDesign, draw: F) -> Result<RankingChip, CompetitionError>
    where
        F: FnMut(&Transistor) -> MosMismatch,
    {
        design.validate()?;
        let cells = WtaChip::sample(design.wta.clone(), draw)?;
        Ok(RankingChip { design, cells })
    }

    /// The chip at a temperature, ready to rank.
    pub fn at(&self, temperature: f64) -> Result<RankingCircuit, CompetitionError> {
        positive(RANK_STAGE, "temperature", temperature)?;
        let full = self.cells.at(temperature)?;
        Ok(RankingCircuit {
            chip: self.cells.clone(),
            full,
            temperature,
            k: self.design.k,
            step_time: self.design.step_time,
        })
    }
}

/// How each ranking step runs in time: the integrator's options and, for an SDE, the noise
/// options with the generator every step draws from.
pub type StepTransient<'a> = (
    &'a TransientOptions,
    Option<(&'a NoiseOptions, &'a mut dyn RngCore)>,
);

/// Ranking at its conditions.
#[derive(Clone, Debug, PartialEq)]
pub struct RankingCircuit {
    chip: WtaChip,
    full: WtaCircuit,
    temperature: f64,
    k: usize,
    step_time: f64,
}

/// The result of ranking one input vector.
#[derive(Clone, Debug, PartialEq)]
pub struct Ranking {
    /// The winners in order (k entries).
    pub order: Vec<usize>,
    /// Every step's decision, with indices of the original lines.
    pub steps: Vec<Decision>,
    /// Total time, s: the steps' transient decision times, or k x step_time at DC.
    pub time: Option<f64>,
    /// Total energy, J (transient: to each step's decision; DC: V_dd x (inputs + bias) x
    /// step_time per step).
    pub energy: Option<f64>,
}

impl Ranking {
    /// The set of the first k is ambiguous when the last step is.
    pub fn ambiguous(&self) -> bool {
        self.steps.last().is_none_or(|d| d.ambiguous)
    }

    /// The class to score: `truth` when it is among the winners, else the first winner.
    pub fn scored_class(&self, truth: usize) -> usize {
        if self.order.contains(&truth) {
            truth
        } else {
            self.order.first().copied().unwrap_or(0)
        }
    }
}

impl RankingCircuit {
    /// Number of steps.
    pub fn k(&self) -> usize {
        self.k
    }

    /// The full WTA (all cells).
    pub fn full(&self) -> &WtaCircuit {
        &self.full
    }

    /// The WTA of the cells still in the competition (`keep[k]`), same devices.
    fn remaining(&self, keep: &[bool]) -> Result<WtaCircuit, CompetitionError> {
        let pick = |v: &[MosMismatch]| -> Vec<MosMismatch> {
            v.iter()
                .zip(keep)
                .filter(|(_, &k)| k)
                .map(|(m, _)| *m)
                .collect()
        };
        let mut d = self.chip.design.clone();
        d.n = keep.iter().filter(|&&k| k).count();
        WtaChip::from_mismatch(
            d,
            pick(&self.chip.sink),
            pick(&self.chip.output),
            self.chip.bias,
        )?
        .at(self.temperature)
    }

    /// Rank `inputs`: DC when `transient` is `None`, else each step by the transient (its
    /// noise from the one generator, step by step).
    pub fn rank(
        &self,
        inputs: &[f64],
        rule: &DecisionRule,
        mut transient: Option<StepTransient<'_>>,
        ws: &mut Workspace,
        tws: &mut TransientWorkspace,
    ) -> Result<Ranking, TransientError> {
        let n = self.chip.design.n;
        validate_inputs(RANK_STAGE, n, inputs, "A", true)?;
        let mut keep = vec![true; n];
        let mut order = Vec::with_capacity(self.k);
        let mut steps = Vec::with_capacity(self.k);
        let mut time = Some(0.0);
        let mut energy = Some(0.0);
        let mut sol = StageSolution::default();
        let mut x = Vec::with_capacity(n);
        let mut idx = Vec::with_capacity(n);
        let vdd = self.chip.design.supply;
        let ib = self.full.bias().current_at(vdd);
        for step in 0..self.k {
            let circuit = if step == 0 {
                std::borrow::Cow::Borrowed(&self.full)
            } else {
                std::borrow::Cow::Owned(self.remaining(&keep)?)
            };
            x.clear();
            idx.clear();
            for j in 0..n {
                if keep[j] {
                    x.push(inputs[j]);
                    idx.push(j);
                }
            }
            let d = match transient.as_mut() {
                None => {
                    circuit.solve(&x, ws, &mut sol)?;
                    time = time.map(|t| t + self.step_time);
                    let i_sum: f64 = x.iter().sum::<f64>() + ib;
                    energy = energy.map(|e| e + vdd * i_sum * self.step_time);
                    rule.decide(&sol.shares)
                }
                Some((opts, noise)) => {
                    let nz = noise
                        .as_mut()
                        .map(|(o, r)| (*o, &mut **r as &mut dyn RngCore));
                    let s = simulate(circuit.as_ref(), &x, opts, nz, tws)?;
                    let (d, t, e) = if opts.read_time.is_some() {
                        (s.decision_at_read, Some(s.end_time), Some(s.energy))
                    } else {
                        (s.decision, s.decision_time, s.energy_to_decision)
                    };
                    time = time.zip(t).map(|(a, b)| a + b);
                    energy = energy.zip(e).map(|(a, b)| a + b);
                    match d {
                        Some(d) => d,
                        // No decision held: the end state's, marked ambiguous.
                        None => Decision {
                            ambiguous: true,
                            ..rule.decide(&tws.solution().shares)
                        },
                    }
                }
            };
            let mapped = Decision {
                winner: idx[d.winner],
                runner_up: idx[d.runner_up],
                ..d
            };
            keep[mapped.winner] = false;
            order.push(mapped.winner);
            steps.push(mapped);
        }
        Ok(Ranking {
            order,
            steps,
            time,
            energy,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::presets;
    use crate::stages::competition::CurrentSource;
    use proptest::prelude::*;

    fn cell(gain: Option<f64>) -> WtaDesign {
        let p = presets::preset("generic-180nm").unwrap();
        let t = Transistor {
            polarity: Polarity::Nmos,
            w: 2e-6,
            l: 2e-6,
        };
        let mut d = WtaDesign::new(2, p, t, t, CurrentSource::Ideal { current: 20e-9 });
        d.drain_coupling = gain.map(crate::stages::competition::analysis::drain_coupling_for_gain);
        d
    }

    fn tree(classes: usize, fan_in: usize) -> CascadeDesign {
        CascadeDesign::new(
            classes,
            fan_in,
            cell(Some(1000.0)),
            Transistor {
                polarity: Polarity::Nmos,
                w: 2e-6,
                l: 2e-6,
            },
        )
    }

    /// Tree shapes (arithmetic of the module docs): 256 = 16 x 16 without padding; 10 with
    /// fan-in 4 is groups of 4 + 4 + 2 (12 slots, 2 unused), then one of 3; fan-in below 2 is
    /// refused.
    #[test]
    fn shapes_and_padding() {
        let t = tree(256, 16);
        assert_eq!(t.levels(), vec![vec![16; 16], vec![16]]);
        assert_eq!(t.padding(), None);
        let t = tree(10, 4);
        assert_eq!(t.levels(), vec![vec![4, 4, 2], vec![3]]);
        assert_eq!(
            t.padding(),
            Some(Padding {
                slots: 12,
                unused: 2
            })
        );
        assert_eq!(tree(10, 5).levels(), vec![vec![5, 5], vec![2]]);
        assert_eq!(tree(10, 5).padding(), None);
        assert_eq!(
            tree(10, 3).levels(),
            vec![vec![3, 3, 3, 1], vec![3, 1], vec![2]]
        );
        assert!(tree(10, 1).validate().is_err());
        assert!(tree(10, 0).validate().is_err());
        assert!(tree(1, 4).validate().is_err());
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(24))]
        /// With ideal devices (no mismatch, gain 1000) the tree picks argmax's class whenever
        /// the largest input leads the next by at least 5 % (the replica's drain-coupling
        /// error, e^{sigma dV/U_T}, stays well inside that at gain 1000: module docs).
        #[test]
        fn ideal_tree_picks_argmax(
            xs in proptest::collection::vec(1.0f64..10.0, 16),
            lead in 1.05f64..2.0,
            at in 0usize..16,
            fan_in in 2usize..6,
        ) {
            let mut x: Vec<f64> = xs.iter().map(|v| v * 1e-9).collect();
            let others = x.iter().enumerate().filter(|(i, _)| *i != at).map(|(_, v)| *v)
                .fold(0.0, f64::max);
            x[at] = others * lead;
            let c = CascadeChip::nominal(tree(16, fan_in)).unwrap().at(300.0).unwrap();
            let mut sol = StageSolution::default();
            c.solve(&x, &mut Workspace::new(), &mut sol).unwrap();
            let d = DecisionRule::argmax().decide(&sol.shares);
            prop_assert_eq!(d.winner, at);
            let s: f64 = sol.shares.iter().sum();
            prop_assert!((s - 1.0).abs() < 1e-9);
        }
    }

    /// The tree's transient: levels in sequence, so its decision time is the sum of the levels'
    /// (module docs) and grows with depth: trees of fan-in 4 over 4, 16 and 64 classes (depth 1,
    /// 2, 3) take longer with each level, and each picks the largest input.
    #[test]
    fn transient_time_adds_over_levels() {
        let mut x: Vec<f64> = (0..64)
            .map(|i| (2.0 + (i * 37 % 64) as f64 / 16.0) * 1e-9)
            .collect();
        x[21] = 9e-9;
        let opts = TransientOptions::default();
        let mut tws = TransientWorkspace::new();
        let mut times = Vec::new();
        for (classes, f) in [(4usize, 4usize), (16, 4), (64, 4)] {
            let c = CascadeChip::nominal(tree(classes, f))
                .unwrap()
                .at(300.0)
                .unwrap();
            let r = c.simulate(&x[..classes], &opts, None, &mut tws).unwrap();
            let sum: f64 = r.level_times.iter().map(|t| t.unwrap()).sum();
            assert!((r.decision_time.unwrap() - sum).abs() <= 1e-12 * sum);
            assert_eq!(r.level_times.len(), c.depth());
            let want = x[..classes]
                .iter()
                .enumerate()
                .fold((0, 0.0), |b, (i, &v)| if v > b.1 { (i, v) } else { b })
                .0;
            assert_eq!(r.decision.winner, want);
            times.push(r.decision_time.unwrap());
        }
        assert!(times[0] < times[1] && times[1] < times[2], "{times:?}");
    }

    /// Ranking by repeated maximum on the same devices: the first step is the plain WTA's
    /// decision; with well-separated inputs the order is the inputs' order; DC time is k steps.
    #[test]
    fn ranking_orders_well_separated_inputs() {
        let mut d = cell(None);
        d.n = 6;
        let design = RankingDesign {
            wta: d.clone(),
            k: 4,
            step_time: 1e-6,
        };
        let chip = RankingChip::sample(design, |_| MosMismatch::default()).unwrap();
        let c = chip.at(300.0).unwrap();
        let x = [3e-9, 9e-9, 1e-9, 7e-9, 5e-9, 2e-9];
        let r = c
            .rank(
                &x,
                &DecisionRule::default(),
                None,
                &mut Workspace::new(),
                &mut TransientWorkspace::new(),
            )
            .unwrap();
        assert_eq!(r.order, vec![1, 3, 4, 0]);
        assert!(!r.ambiguous());
        assert!((r.time.unwrap() - 4e-6).abs() < 1e-18);
        let mut sol = StageSolution::default();
        c.full().solve(&x, &mut Workspace::new(), &mut sol).unwrap();
        assert_eq!(r.steps[0], sol.decide(&DecisionRule::default()));
        // Transient steps: times add.
        let opts = TransientOptions::default();
        let rt = c
            .rank(
                &x,
                &DecisionRule::default(),
                Some((&opts, None)),
                &mut Workspace::new(),
                &mut TransientWorkspace::new(),
            )
            .unwrap();
        assert_eq!(rt.order, r.order);
        assert!(rt.time.unwrap() > 0.0);
        // k outside 1..N-1.
        for k in [0, 6] {
            let bad = RankingDesign {
                wta: d.clone(),
                k,
                step_time: 1e-6,
            };
            assert!(bad.validate().is_err());
        }
    }
}
