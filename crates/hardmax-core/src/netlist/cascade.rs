//! The netlist of a tree of WTAs ([`CascadeChip`], DEVELOPERS.md model notes §4.6): every
//! group of every level written as the current-mode WTA's devices, and each group's replica
//! sink as a behavioural source carrying the replica's EKV drain current (gate at the group's
//! common node, drain held at `copy_drain_voltage`, source at ground) into the input node of
//! the line it feeds at the next level. That is the model's own statement: the next level's
//! input mirror is ideal (the Rust solve hands the replica's current on as the next group's
//! input current), so the netlist carries the copy as a current source controlled by the lower
//! group's common node, not as a transistor-level mirror. One `.op` solves the whole tree at
//! once; the coupling goes one way (a level never loads the one below), so this is the same
//! system as the model's level-by-level solve.
//!
//! Layout (as [`super::build`]): one subcircuit `hmdie` whose ports are the tree's nodes in
//! hardmax's node order (level by level, group by group, groups of two or more lines only:
//! `l<L>g<G>n<j>` for line j of the group, then its common node `l<L>g<G>c`), then one output
//! drain `o<m>` per line of every such group, in the same order (the physical drains of the
//! groups' output transistors, not the classes: a class's output in hardmax is the product of
//! its path's shares times the top group's output current). A lone line (a group of one, when
//! the fan-in does not divide a level) has no device: its input goes straight to the line it
//! feeds at the next level.

use std::fmt::Write as _;

use super::build::{
    ekv_call, DeviceForm, Netlist, NetlistError, NetlistOptions, EKV_FUNCTIONS, SUBCIRCUIT,
};
use crate::stages::competition::cascade::CascadeChip;
use crate::stages::competition::CurrentSource;

/// Where line `line` of level `level` of a tree with `levels` (group sizes per level) and
/// fan-in `f` is a circuit node: `(level, group, position)`, following lone lines up the tree.
fn node_of(
    levels: &[Vec<usize>],
    f: usize,
    mut level: usize,
    mut line: usize,
) -> (usize, usize, usize) {
    loop {
        let g = line / f;
        if levels[level][g] >= 2 || level + 1 >= levels.len() {
            return (level, g, line % f);
        }
        level += 1;
        line = g;
    }
}

fn line_node(l: usize, g: usize, j: usize) -> String {
    format!("l{l}g{g}n{j}")
}

fn common_node(l: usize, g: usize) -> String {
    format!("l{l}g{g}c")
}

/// Build the deck of a cascade die at `temperature` (K) evaluated on `samples` (the classes'
/// input currents, A). Behavioural form only ([`NetlistError::CascadeForm`] otherwise): the
/// replica's copy into the next level is the model's ideal mirror, which a model card cannot
/// express. The returned [`Netlist::n`] is the number of output drains (every group's lines),
/// and [`Netlist::nodes`] the tree's nodes in hardmax's node order.
pub fn build_cascade(
    chip: &CascadeChip,
    temperature: f64,
    samples: &[Vec<f64>],
    opts: &NetlistOptions,
) -> Result<Netlist, NetlistError> {
    if opts.form != DeviceForm::Behavioural {
        return Err(NetlistError::CascadeForm);
    }
    if !(temperature > 0.0 && temperature.is_finite()) {
        return Err(NetlistError::Temperature(temperature));
    }
    let d = &chip.design;
    let classes = d.classes;
    if samples.is_empty() {
        return Err(NetlistError::NoSamples);
    }
    for (s, x) in samples.iter().enumerate() {
        if x.len() != classes {
            return Err(NetlistError::InputCount {
                sample: s,
                got: x.len(),
                n: classes,
            });
        }
        if let Some((i, &v)) = x.iter().enumerate().find(|(_, v)| !v.is_finite()) {
            return Err(NetlistError::NonFinite {
                sample: s,
                index: i,
                value: v,
            });
        }
    }
    let levels = d.levels();
    if levels.len() != chip.groups.len() {
        return Err(NetlistError::Inconsistent);
    }
    let f = d.fan_in;
    let mut s = String::new();
    writeln!(s, "* {}", opts.title.replace(['\n', '\r'], " ")).unwrap();
    writeln!(
        s,
        "* hardmax netlist export: WTA cascade, {classes} classes, fan-in {f}, {} level(s), {} K, \
         {} sample(s), devices: behavioural EKV (hardmax's equations); replicas copy into the \
         next level as ideal mirrors (as the model)",
        levels.len(),
        temperature,
        samples.len()
    )
    .unwrap();
    writeln!(s, "* {}", crate::CAUTION).unwrap();
    s.push_str(EKV_FUNCTIONS);
    // Nodes and output drains in hardmax's order.
    let mut nodes = Vec::new();
    let mut outs = Vec::new();
    for (l, row) in chip.groups.iter().enumerate() {
        for (g, gc) in row.iter().enumerate() {
            if let Some(c) = &gc.cells {
                for j in 0..c.design.n {
                    nodes.push(line_node(l, g, j));
                    outs.push(format!("o{}", outs.len()));
                }
                nodes.push(common_node(l, g));
            }
        }
    }
    writeln!(
        s,
        ".subckt {SUBCIRCUIT} {} {}",
        nodes.join(" "),
        outs.join(" ")
    )
    .unwrap();
    let mut out_index = 0;
    let mut output_voltage = d.cell.output_voltage;
    for (l, row) in chip.groups.iter().enumerate() {
        for (g, gc) in row.iter().enumerate() {
            let Some(cells) = &gc.cells else { continue };
            let c = cells.at(temperature)?;
            output_voltage = c.output_voltage;
            let nc = common_node(l, g);
            writeln!(s, "* level {l}, group {g}: {} lines", cells.design.n).unwrap();
            for j in 0..cells.design.n {
                let (Some(a), Some(b)) = (c.sink(j), c.output(j)) else {
                    return Err(NetlistError::Inconsistent);
                };
                let nj = line_node(l, g, j);
                let vn = format!("V({nj})");
                let vc = format!("V({nc})");
                let o = &outs[out_index];
                out_index += 1;
                writeln!(
                    s,
                    "BA{l}_{g}_{j} {nj} 0 I={{{}}}",
                    ekv_call(a, &vc, &vn, "0")
                )
                .unwrap();
                writeln!(
                    s,
                    "BB{l}_{g}_{j} {o} {nc} I={{{}}}",
                    ekv_call(b, &vn, &format!("V({o})"), &vc)
                )
                .unwrap();
            }
            match c.bias() {
                CurrentSource::Ideal { current } => {
                    writeln!(s, "IBIAS{l}_{g} {nc} 0 DC {current:e}").unwrap()
                }
                CurrentSource::Transistor {
                    device,
                    gate_voltage,
                } => writeln!(
                    s,
                    "BBIAS{l}_{g} {nc} 0 I={{{}}}",
                    ekv_call(
                        device,
                        &format!("{gate_voltage:e}"),
                        &format!("V({nc})"),
                        "0"
                    )
                )
                .unwrap(),
            }
            if gc.copy.is_some() {
                let Some(r) = chip.copy_device(l, g, temperature) else {
                    return Err(NetlistError::Inconsistent);
                };
                let (tl, tg, tj) = node_of(&levels, f, l + 1, g);
                // The replica's current (its drain at copy_drain_voltage) into the next level.
                writeln!(
                    s,
                    "BR{l}_{g} 0 {} I={{{}}}",
                    line_node(tl, tg, tj),
                    ekv_call(
                        &r,
                        &format!("V({nc})"),
                        &format!("{:e}", d.copy_drain_voltage),
                        "0"
                    )
                )
                .unwrap();
            }
        }
    }
    writeln!(s, ".ends {SUBCIRCUIT}").unwrap();
    for (si, x) in samples.iter().enumerate() {
        match opts.sample_notes.get(si) {
            Some(note) => {
                writeln!(s, "* sample {si}: {}", note.replace(['\n', '\r'], " ")).unwrap()
            }
            None => writeln!(s, "* sample {si}").unwrap(),
        }
        for (k, &v) in x.iter().enumerate() {
            let (l, g, j) = node_of(&levels, f, 0, k);
            writeln!(s, "I_S{si}_{k} 0 s{si}_{} DC {v:e}", line_node(l, g, j)).unwrap();
        }
        for (m, o) in outs.iter().enumerate() {
            writeln!(s, "VO_S{si}_{m} s{si}_{o} 0 DC {output_voltage:e}").unwrap();
        }
        let ports: Vec<String> = nodes
            .iter()
            .chain(&outs)
            .map(|p| format!("s{si}_{p}"))
            .collect();
        writeln!(s, "XS{si} {} {SUBCIRCUIT}", ports.join(" ")).unwrap();
    }
    writeln!(s, ".temp {}", ((temperature - 273.15) * 1e9).round() / 1e9).unwrap();
    writeln!(
        s,
        ".options reltol=1e-9 abstol=1e-21 vntol=1e-12 gmin=1e-30 itl1=5000"
    )
    .unwrap();
    writeln!(s, ".op").unwrap();
    if let Some(raw) = &opts.ngspice_raw {
        writeln!(s, ".control\nrun\nset filetype=ascii\nwrite {raw}\n.endc").unwrap();
    }
    writeln!(s, ".end").unwrap();
    Ok(Netlist {
        text: s,
        n: outs.len(),
        samples: samples.len(),
        nodes,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Lone lines pass up the tree: 10 classes at fan-in 3 are groups 3+3+3+1, then 3+1, then
    /// 2 (the arithmetic of `CascadeDesign::levels`); class 9 is a lone line whose input goes
    /// to level 1 line 3, itself lone, so to level 2 line 1.
    #[test]
    fn lone_lines_feed_the_next_circuit_group() {
        let levels = vec![vec![3, 3, 3, 1], vec![3, 1], vec![2]];
        assert_eq!(node_of(&levels, 3, 0, 4), (0, 1, 1));
        assert_eq!(node_of(&levels, 3, 0, 9), (2, 0, 1));
        assert_eq!(node_of(&levels, 3, 1, 2), (1, 0, 2));
        assert_eq!(node_of(&levels, 3, 1, 3), (2, 0, 1));
    }
}
