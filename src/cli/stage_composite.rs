//! `hardmax stage` for the circuits built from the current-mode WTA: the k-winners WTA, the
//! cascade (tree of small WTAs) and ranking by repeated maximum. What each adds to the stage
//! command's DC report (the k winners and their output currents; every level's groups and
//! winners; every round's winner, time and energy), its transient and the rounds of a ranking
//! sweep. A child module of `stage`, so it shares its rows and formats.

use std::fmt::Write as _;

use anyhow::anyhow;
use serde_json::json;

use super::{Format, Row, Spec};
use crate::stages::competition::cascade::{RankingChip, RankingCircuit};
use crate::stages::competition::transient::{NoiseOptions, TransientOptions, TransientWorkspace};
use crate::stages::competition::{
    CompetitionChip, CompetitionCircuit, Decision, DecisionRule, StageSolution, Workspace,
};
use crate::units::format_si;

/// What a composite circuit adds to the DC report, and the decision the run scores.
pub(super) struct Extra {
    pub rows: Vec<Row>,
    pub json: Option<(&'static str, serde_json::Value)>,
    pub table: String,
    /// The decision the chip loop takes for this circuit (the shared rule's, or the k-th
    /// place's, or the last round's).
    pub decision: Decision,
    /// The class the chip loop scores for a sample whose true class is `truth` (with the
    /// decision's `ambiguous`): top-k circuits score the truth when it is among the winners.
    pub scored: Box<dyn Fn(usize) -> usize>,
}

/// Lines in order of their share, larger first, lower index first among equals (the order of
/// [`DecisionRule::decide_top_k`]).
pub(super) fn by_share(shares: &[f64]) -> Vec<usize> {
    let mut idx: Vec<usize> = (0..shares.len()).collect();
    idx.sort_by(|&a, &b| shares[b].total_cmp(&shares[a]).then(a.cmp(&b)));
    idx
}

/// Every round of a ranking: `(decision, time, energy)` per round. Round j's time and energy are
/// the differences of the totals of rankings truncated to j and j - 1 rounds of the same chip
/// (each round's transient or DC step is the same whatever follows it; noise, when given, is
/// drawn by the rounds in order from one generator, so a truncated ranking with a fresh copy of
/// the same generator sees the same draws).
pub(super) fn ranking_rounds(
    chip: &RankingChip,
    temperature: f64,
    inputs: &[f64],
    rule: &DecisionRule,
    transient: Option<(&TransientOptions, Option<(&NoiseOptions, u64)>)>,
) -> anyhow::Result<(Vec<Round>, RankingTotals)> {
    let mut rounds = Vec::new();
    let mut prev = (Some(0.0), Some(0.0));
    let mut totals = RankingTotals::default();
    for j in 1..=chip.design.k {
        let mut c = chip.clone();
        c.design.k = j;
        let circuit: RankingCircuit = c.at(temperature)?;
        let mut rng = transient
            .and_then(|(_, n)| n)
            .map(|(_, seed)| crate::rng::stream(seed, &[crate::rng::domain::SAMPLE_NOISE]));
        let t = transient.map(|(o, n)| {
            (
                o,
                n.zip(rng.as_mut())
                    .map(|((no, _), r)| (no, r as &mut dyn rand::RngCore)),
            )
        });
        let r = circuit.rank(
            inputs,
            rule,
            t,
            &mut Workspace::new(),
            &mut TransientWorkspace::new(),
        )?;
        let step = r.steps[j - 1];
        let dt = r.time.zip(prev.0).map(|(a, b)| a - b);
        let de = r.energy.zip(prev.1).map(|(a, b)| a - b);
        rounds.push((step, dt, de));
        prev = (r.time, r.energy);
        totals = RankingTotals {
            order: r.order.clone(),
            ambiguous: r.ambiguous(),
            time: r.time,
            energy: r.energy,
        };
    }
    Ok((rounds, totals))
}

/// One round of a ranking: its decision, time (s) and energy (J).
pub(super) type Round = (Decision, Option<f64>, Option<f64>);

#[derive(Default)]
pub(super) struct RankingTotals {
    pub order: Vec<usize>,
    pub ambiguous: bool,
    pub time: Option<f64>,
    pub energy: Option<f64>,
}

fn opt_si(x: Option<f64>, unit: &str) -> String {
    x.map_or("n/a".into(), |v| format_si(v, unit, 4))
}

/// The DC extras of a composite stage (`None` for the other circuits).
pub(super) fn dc_extra(
    spec: &Spec,
    chip: &CompetitionChip,
    stage: &CompetitionCircuit,
    sol: &StageSolution,
) -> anyhow::Result<Option<Extra>> {
    let rule = spec.rule;
    Ok(Some(match stage {
        CompetitionCircuit::KWinners(c) => {
            let k = c.k();
            let top = rule.decide_top_k(&sol.shares, k);
            let order = by_share(&sol.shares);
            let mut rows = vec![Row::new("k_winners", "k", k as f64, "")];
            let mut table = format!(
                "\nk winners (k = {k}; the set is judged by the rule on the competition for place {k}: share {:.4} of what remains, next {:.4}{})\n  {:<6} {:>6} {:>12} {:>12}\n",
                top.decision.winner_share,
                top.decision.runner_up_share,
                if top.decision.ambiguous { ", AMBIGUOUS" } else { "" },
                "place",
                "line",
                "output",
                "limit"
            );
            let mut winners = Vec::new();
            for (place, &line) in order.iter().take(k).enumerate() {
                let limit = c.limit(line).unwrap_or(f64::NAN);
                rows.push(Row::new(
                    "k_winners",
                    &format!("place_{place}.line"),
                    line as f64,
                    "index",
                ));
                rows.push(Row::new(
                    "k_winners",
                    &format!("place_{place}.output"),
                    sol.outputs[line],
                    "A",
                ));
                rows.push(Row::new(
                    "k_winners",
                    &format!("place_{place}.limit"),
                    limit,
                    "A",
                ));
                let _ = writeln!(
                    table,
                    "  {:<6} {:>6} {:>12} {:>12}",
                    place,
                    line,
                    format_si(sol.outputs[line], "A", 5),
                    format_si(limit, "A", 4)
                );
                winners
                    .push(json!({"line": line, "output_a": sol.outputs[line], "limit_a": limit}));
            }
            rows.push(Row::new("k_winners", "kth_share", top.kth_share, ""));
            let shares = sol.shares.clone();
            Extra {
                rows,
                json: Some((
                    "k_winners",
                    json!({"k": k, "winners": winners, "kth_share": top.kth_share,
                           "kth_place": {"winner": top.decision.winner, "share_of_rest": top.decision.winner_share,
                                         "next": top.decision.runner_up, "next_share_of_rest": top.decision.runner_up_share},
                           "ambiguous": top.decision.ambiguous}),
                )),
                table,
                decision: top.decision,
                scored: Box::new(move |truth| top.scored_class(&shares, truth)),
            }
        }
        CompetitionCircuit::Cascade(c) => {
            let mut sol2 = StageSolution::for_stage(c);
            let groups = c.solve_levels(&spec.inputs, &mut Workspace::new(), &mut sol2)?;
            let mut rows = vec![
                Row::new("cascade", "fan_in", c.fan_in() as f64, ""),
                Row::new("cascade", "depth", c.depth() as f64, ""),
            ];
            let mut table = format!(
                "\nLevels (fan-in {}, depth {}; a group's winner is copied to the next level by its replica R)\n  {:<8} {:>9} {:>7} {:>12} {:>9} {:>11} {:>12}\n",
                c.fan_in(),
                c.depth(),
                "group",
                "lines",
                "winner",
                "win input",
                "share",
                "V_C",
                "passed up"
            );
            let mut js = Vec::new();
            for g in &groups {
                let name = format!("L{}G{}", g.level, g.group);
                let local = g.winner - g.start;
                rows.push(Row::new(
                    "level",
                    &format!("{name}.winner"),
                    g.winner as f64,
                    "index",
                ));
                rows.push(Row::new(
                    "level",
                    &format!("{name}.winner_share"),
                    g.shares[local],
                    "",
                ));
                if let Some(p) = g.passed {
                    rows.push(Row::new("level", &format!("{name}.passed"), p, "A"));
                }
                let _ = writeln!(
                    table,
                    "  {:<8} {:>9} {:>7} {:>12} {:>9.5} {:>11} {:>12}",
                    name,
                    format!("{}..{}", g.start, g.start + g.inputs.len() - 1),
                    g.winner,
                    format_si(g.inputs[local], "A", 4),
                    g.shares[local],
                    g.common_voltage
                        .map_or("lone".into(), |v| format_si(v, "V", 5)),
                    g.passed.map_or("top".into(), |p| format_si(p, "A", 4))
                );
                js.push(
                    json!({"level": g.level, "group": g.group, "first_line": g.start,
                    "inputs_a": g.inputs, "shares": g.shares, "winner": g.winner,
                    "common_voltage_v": g.common_voltage, "passed_up_a": g.passed}),
                );
            }
            let d = sol.decide(&rule);
            Extra {
                rows,
                json: Some(("levels", json!(js))),
                table,
                decision: d,
                scored: Box::new(move |_| d.winner),
            }
        }
        CompetitionCircuit::Ranking(_) => {
            let CompetitionChip::Ranking(rc) = chip else {
                return Err(anyhow!("internal: a ranking stage without its chip"));
            };
            let (rounds, totals) = ranking_rounds(rc, spec.temperature, &spec.inputs, &rule, None)?;
            ranking_extra(&rounds, &totals, "DC: each round counted as --step-time")
        }
        _ => return Ok(None),
    }))
}

/// Rows, JSON and table of a ranking's rounds.
pub(super) fn ranking_extra(rounds: &[Round], totals: &RankingTotals, how: &str) -> Extra {
    let mut rows = Vec::new();
    let mut table = format!(
        "\nRounds (repeated maximum, {how})\n  {:<6} {:>7} {:>9} {:>10} {:>12} {:>12}\n",
        "round", "winner", "share", "runner-up", "time", "energy"
    );
    let mut js = Vec::new();
    for (j, (d, t, e)) in rounds.iter().enumerate() {
        rows.push(Row::new(
            "round",
            &format!("round_{j}.winner"),
            d.winner as f64,
            "index",
        ));
        rows.push(Row::new(
            "round",
            &format!("round_{j}.winner_share"),
            d.winner_share,
            "",
        ));
        rows.push(Row::new(
            "round",
            &format!("round_{j}.ambiguous"),
            f64::from(u8::from(d.ambiguous)),
            "bool",
        ));
        rows.push(Row::text(
            "round",
            &format!("round_{j}.time_s"),
            &t.map_or(String::new(), |v| format!("{v:e}")),
        ));
        rows.push(Row::text(
            "round",
            &format!("round_{j}.energy_j"),
            &e.map_or(String::new(), |v| format!("{v:e}")),
        ));
        let _ = writeln!(
            table,
            "  {:<6} {:>7} {:>9.5} {:>10} {:>12} {:>12}{}",
            j,
            d.winner,
            d.winner_share,
            d.runner_up,
            opt_si(*t, "s"),
            opt_si(*e, "J"),
            if d.ambiguous { "  AMBIGUOUS" } else { "" }
        );
        js.push(
            json!({"round": j, "winner": d.winner, "winner_share": d.winner_share,
            "runner_up": d.runner_up, "runner_up_share": d.runner_up_share,
            "ambiguous": d.ambiguous, "time_s": t, "energy_j": e}),
        );
    }
    let _ = writeln!(
        table,
        "  total: order {:?}, time {}, energy {}{}",
        totals.order,
        opt_si(totals.time, "s"),
        opt_si(totals.energy, "J"),
        if totals.ambiguous {
            " (the set is AMBIGUOUS: its last round is)"
        } else {
            ""
        }
    );
    let last = rounds.last().map(|r| r.0).unwrap_or(Decision {
        winner: 0,
        winner_share: 0.0,
        runner_up: 0,
        runner_up_share: 0.0,
        ambiguous: true,
    });
    let order = totals.order.clone();
    Extra {
        rows,
        json: Some((
            "rounds",
            json!({"rounds": js, "order": totals.order, "ambiguous": totals.ambiguous,
                   "time_s": totals.time, "energy_j": totals.energy}),
        )),
        table,
        decision: Decision {
            ambiguous: totals.ambiguous,
            ..last
        },
        scored: Box::new(move |truth| {
            if order.contains(&truth) {
                truth
            } else {
                order.first().copied().unwrap_or(0)
            }
        }),
    }
}

/// The transient of a cascade or a ranking (the k-winners WTA uses the shared-node transient of
/// `stage::transient`): prints in the chosen format; `false` when the stage is neither.
pub(super) fn transient(
    format: Format,
    spec: &Spec,
    chip: &CompetitionChip,
    stage: &CompetitionCircuit,
    opts: &TransientOptions,
    noise: Option<(&NoiseOptions, u64)>,
    report: &super::Report,
) -> anyhow::Result<bool> {
    let (extra, headline): (Extra, Vec<Row>) = match stage {
        CompetitionCircuit::Cascade(c) => {
            let nopts;
            let mut rng = noise
                .map(|(_, seed)| crate::rng::stream(seed, &[crate::rng::domain::SAMPLE_NOISE]));
            let nz = match (noise, rng.as_mut()) {
                (Some((o, _)), Some(r)) => {
                    nopts = *o;
                    Some((&nopts, r as &mut dyn rand::RngCore))
                }
                _ => None,
            };
            let r = c.simulate(&spec.inputs, opts, nz, &mut TransientWorkspace::new())?;
            let mut rows = Vec::new();
            let mut table = String::from(
                "\nTransient of the tree (levels in sequence, groups of a level in parallel)\n",
            );
            for (l, t) in r.level_times.iter().enumerate() {
                rows.push(Row::text(
                    "transient",
                    &format!("level_{l}.time_s"),
                    &t.map_or(String::new(), |v| format!("{v:e}")),
                ));
                let _ = writeln!(table, "  level {l} time      {}", opt_si(*t, "s"));
            }
            let _ = writeln!(
                table,
                "  decision time      {}  (sum over levels)\n  energy             {}  (sum over groups)\n  winner             {} (share {:.4}){}",
                opt_si(r.decision_time, "s"),
                opt_si(r.energy, "J"),
                r.decision.winner,
                r.decision.winner_share,
                if r.decision.ambiguous || r.decision_time.is_none() { "  AMBIGUOUS or undecided" } else { "" }
            );
            let d = r.decision;
            let head = vec![
                Row::text(
                    "transient",
                    "decision_time",
                    &r.decision_time.map_or(String::new(), |v| format!("{v:e}")),
                ),
                Row::text(
                    "transient",
                    "energy_to_decision",
                    &r.energy.map_or(String::new(), |v| format!("{v:e}")),
                ),
                Row::new("transient", "winner", d.winner as f64, "index"),
                Row::new(
                    "transient",
                    "ambiguous",
                    f64::from(u8::from(d.ambiguous || r.decision_time.is_none())),
                    "bool",
                ),
            ];
            let json = json!({"decision_time_s": r.decision_time, "level_times_s": r.level_times,
                "energy_j": r.energy, "winner": d.winner, "winner_share": d.winner_share,
                "ambiguous": d.ambiguous || r.decision_time.is_none(),
                "final_outputs_a": r.solution.outputs, "final_shares": r.solution.shares,
                "noise": noise.is_some()});
            (
                Extra {
                    rows,
                    json: Some(("transient", json)),
                    table,
                    decision: d,
                    scored: Box::new(move |_| d.winner),
                },
                head,
            )
        }
        CompetitionCircuit::Ranking(_) => {
            let CompetitionChip::Ranking(rc) = chip else {
                return Err(anyhow!("internal: a ranking stage without its chip"));
            };
            let (rounds, totals) = ranking_rounds(
                rc,
                spec.temperature,
                &spec.inputs,
                &opts.rule,
                Some((opts, noise)),
            )?;
            let mut e = ranking_extra(
                &rounds,
                &totals,
                "each round a transient of the remaining cells",
            );
            let json = e.json.take().map(|(_, v)| v).unwrap_or_default();
            e.json = Some(("transient", json));
            (e, Vec::new())
        }
        _ => return Ok(false),
    };
    match format {
        Format::Csv => {
            let mut rows: Vec<&Row> = report.rows.iter().collect();
            rows.extend(&headline);
            rows.extend(&extra.rows);
            let caution = Row::text("note", "caution", crate::CAUTION);
            rows.push(&caution);
            print!("{}", super::rows_csv(rows.into_iter()));
        }
        Format::Json => {
            let mut v = json!({"parameters": report.json(), "caution": crate::CAUTION});
            if let Some((k, j)) = extra.json {
                v[k] = j;
            }
            println!("{}", serde_json::to_string_pretty(&v)?);
        }
        Format::Table => {
            let mut t = report.table();
            t.push_str(&extra.table);
            let _ = writeln!(t, "\n{}", crate::CAUTION);
            print!("{t}");
        }
    }
    Ok(true)
}

/// Ranking sweep columns: each round's winner at one sweep point's inputs.
pub(super) fn ranking_order(
    chip: &CompetitionChip,
    temperature: f64,
    inputs: &[f64],
    rule: &DecisionRule,
) -> anyhow::Result<Option<Vec<usize>>> {
    let CompetitionChip::Ranking(rc) = chip else {
        return Ok(None);
    };
    let c = rc.at(temperature)?;
    let r = c.rank(
        inputs,
        rule,
        None,
        &mut Workspace::new(),
        &mut TransientWorkspace::new(),
    )?;
    Ok(Some(r.order))
}
