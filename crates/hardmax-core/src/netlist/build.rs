//! The netlist builder: one die, several input vectors, one SPICE3 deck (see the module docs of
//! [`crate::netlist`] for the layout and the two device forms).

use std::fmt::Write as _;

use thiserror::Error;

use crate::device::{Ekv, MosMismatch, Transistor};
use crate::stages::competition::kwta::{KWinnersChip, KWinnersCircuit};
use crate::stages::competition::{
    CompetitionChip, CompetitionCircuit, CompetitionError, CurrentSource, DiffPairInput,
};

/// Name of the die's subcircuit in every exported netlist.
pub const SUBCIRCUIT: &str = "hmdie";

/// One die to export: a sampled competition stage and the temperature it runs at (K).
#[derive(Clone, Debug, PartialEq)]
pub struct Die {
    pub chip: CompetitionChip,
    pub temperature: f64,
}

/// How transistors are written.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DeviceForm {
    /// Behavioural current sources carrying hardmax's own EKV equations (exact agreement
    /// expected).
    Behavioural,
    /// MOSFET instances of the designer's model `model` from the file `include` (written as
    /// given into an `.include` line); mismatch as a series gate source (threshold) and a width
    /// scale (current factor).
    ModelCard { include: String, model: String },
}

/// What to write besides the circuit.
#[derive(Clone, Debug, PartialEq)]
pub struct NetlistOptions {
    /// First line of the deck (SPICE reads it as the title).
    pub title: String,
    pub form: DeviceForm,
    /// With `Some(file)`, an ngspice `.control` block that runs the operating point and writes
    /// every vector to `file` as an ASCII raw file; `None` gives a plain deck ending in `.op`.
    pub ngspice_raw: Option<String>,
    /// One comment per sample (e.g. which test sample it is); empty = none.
    pub sample_notes: Vec<String>,
}

/// A built netlist and the names needed to read its results back.
#[derive(Clone, Debug, PartialEq)]
pub struct Netlist {
    pub text: String,
    /// Number of class lines.
    pub n: usize,
    /// Number of samples (subcircuit instances).
    pub samples: usize,
    /// The stage's node names inside the subcircuit, in hardmax's node order
    /// (`n0..n{N-1}, nc` for the WTA; `g0..g{N-1}, ns` for the differential pair).
    pub nodes: Vec<String>,
}

impl Netlist {
    /// Name of the simulator vector holding node `local` of sample `s` (lower case, as ngspice
    /// writes it).
    pub fn node_vector(s: usize, local: &str) -> String {
        format!("v(s{s}_{local})")
    }

    /// Name of the simulator vector holding the branch current of output `k` of sample `s`
    /// (the current into the positive terminal of `VO_S<s>_<k>`, so minus the output current).
    pub fn output_vector(s: usize, k: usize) -> String {
        format!("i(vo_s{s}_{k})")
    }
}

/// Why a netlist could not be built.
#[derive(Debug, Error, PartialEq)]
pub enum NetlistError {
    #[error("no samples to export: choose at least one test sample")]
    NoSamples,
    #[error("sample {sample} has {got} inputs but the stage has {n} class lines")]
    InputCount { sample: usize, got: usize, n: usize },
    #[error("sample {sample}, input {index} = {value:e} is not a finite number")]
    NonFinite {
        sample: usize,
        index: usize,
        value: f64,
    },
    #[error("model name `{0}` is not a SPICE name: use letters, digits and `_` only (e.g. nch)")]
    ModelName(String),
    #[error("model file `{0}` cannot be written into an .include line (no quotes or line breaks)")]
    IncludePath(String),
    #[error("temperature {0} K: must be above 0 K")]
    Temperature(f64),
    #[error(
        "the k-winners WTA is exported in the behavioural form only (its limiter is a closed-form \
         model): choose the behavioural device form"
    )]
    KWinnersForm,
    #[error(
        "{0} has no netlist export yet (its levels or rounds are separate circuits); export a \
         current_wta, diff_pair, hysteretic_wta or k_winners design"
    )]
    NotExported(&'static str),
    #[error(
        "the WTA cascade is exported in the behavioural form only (the replica's copy into the \
         next level is the model's ideal mirror): choose the behavioural device form"
    )]
    CascadeForm,
    #[error("internal: the evaluated stage does not match its chip; please report this")]
    Inconsistent,
    #[error(transparent)]
    Stage(#[from] CompetitionError),
}

/// The EKV helper functions of the behavioural form: softplus in its overflow-free form,
/// `F(x) = ln^2(1 + e^(x/2))` and the drain current with voltages bulk (ground) referred.
pub const EKV_FUNCTIONS: &str = ".func spl(h) {max(h,0)+ln(1+exp(-abs(h)))}
.func ekvf(x) {spl(x/2)*spl(x/2)}
.func ekv(vg,vd,vs,is,vt,n,eta,ut) {is*(ekvf(((vg-vt+eta*(vd-vs))/n-vs)/ut)-ekvf(((vg-vt+eta*(vd-vs))/n-vd)/ut))}
";

/// The behavioural EKV call of one evaluated device (NMOS, bulk at ground).
pub fn ekv_call(d: &Ekv, vg: &str, vd: &str, vs: &str) -> String {
    format!(
        "ekv({vg},{vd},{vs},{:e},{:e},{:e},{:e},{:e})",
        d.specific_current(),
        d.vt0,
        d.n,
        d.eta,
        d.ut
    )
}

/// Writes one transistor in the chosen form.
struct Writer<'a> {
    form: &'a DeviceForm,
    s: String,
}

impl Writer<'_> {
    #[allow(clippy::too_many_arguments)]
    /// Transistor `name` with drain `d`, gate `g`, source `s` (bulk at ground).
    /// `ekv` is the evaluated device (behavioural form); `t`, `mm` the sized transistor and its
    /// mismatch (model-card form). A gate given as a number is a fixed gate voltage.
    fn mos(
        &mut self,
        name: &str,
        d: &str,
        g: Gate<'_>,
        s: &str,
        ekv: &Ekv,
        t: &Transistor,
        mm: &MosMismatch,
    ) {
        let node = |x: &str| {
            if x == "0" {
                "0".to_string()
            } else {
                format!("V({x})")
            }
        };
        match self.form {
            DeviceForm::Behavioural => {
                let vg = match g {
                    Gate::Node(x) => node(x),
                    Gate::Fixed(v) => format!("{v:e}"),
                };
                let call = ekv_call(ekv, &vg, &node(d), &node(s));
                writeln!(self.s, "B{name} {d} {s} I={{{call}}}").unwrap();
            }
            DeviceForm::ModelCard { model, .. } => {
                let gate_node = match g {
                    Gate::Node(x) => x.to_string(),
                    Gate::Fixed(v) => {
                        let gn = format!("gf_{}", name.to_lowercase());
                        writeln!(self.s, "VF{name} {gn} 0 DC {v:e}").unwrap();
                        gn
                    }
                };
                // Threshold shift: the gate sees V(gate) - dV_T0.
                let inner = format!("gm_{}", name.to_lowercase());
                writeln!(self.s, "VT{name} {gate_node} {inner} DC {:e}", mm.dvt0).unwrap();
                writeln!(
                    self.s,
                    "M{name} {d} {inner} {s} 0 {model} W={:e} L={:e}",
                    t.w * (1.0 + mm.dbeta_rel),
                    t.l
                )
                .unwrap();
            }
        }
    }

    fn bias(
        &mut self,
        name: &str,
        node: &str,
        b: &CurrentSource<Ekv>,
        t: Option<&Transistor>,
        mm: &MosMismatch,
    ) -> Result<(), NetlistError> {
        match (*b, t) {
            (
                CurrentSource::Transistor {
                    device,
                    gate_voltage,
                },
                Some(t),
            ) => self.mos(name, node, Gate::Fixed(gate_voltage), "0", &device, t, mm),
            (CurrentSource::Ideal { current: i }, _) => {
                writeln!(self.s, "I{name} {node} 0 DC {i:e}").unwrap()
            }
            (CurrentSource::Transistor { .. }, None) => return Err(NetlistError::Inconsistent),
        }
        Ok(())
    }
}

#[derive(Clone, Copy)]
enum Gate<'a> {
    Node(&'a str),
    Fixed(f64),
}

fn check_name(model: &str) -> Result<(), NetlistError> {
    let ok = !model.is_empty()
        && model.chars().all(|c| c.is_ascii_alphanumeric() || c == '_')
        && model
            .chars()
            .next()
            .is_some_and(|c| c.is_ascii_alphabetic());
    if ok {
        Ok(())
    } else {
        Err(NetlistError::ModelName(model.into()))
    }
}

/// Build the deck of `die` evaluated on `samples` (one input vector per sample: currents in A,
/// or gate voltages in V for a differential pair with voltage inputs).
pub fn build(
    die: &Die,
    samples: &[Vec<f64>],
    opts: &NetlistOptions,
) -> Result<Netlist, NetlistError> {
    match &die.chip {
        CompetitionChip::KWinners(k) => build_kwinners(k, die.temperature, samples, opts),
        CompetitionChip::Cascade(_) | CompetitionChip::Ranking(_) => {
            Err(NetlistError::NotExported(die.chip_name()))
        }
        _ => build_any(AnyChip::Stage(&die.chip), die.temperature, samples, opts),
    }
}

impl Die {
    /// The circuit's name in messages.
    fn chip_name(&self) -> &'static str {
        match &self.chip {
            CompetitionChip::Cascade(_) => "the WTA cascade",
            CompetitionChip::Ranking(_) => "ranking by repeated maximum",
            _ => "this circuit",
        }
    }
}

/// Build the deck of a k-winners die ([`KWinnersChip`]) at `temperature` (K) evaluated on
/// `samples` (input currents, A), in the layout of [`build`] (nodes `n0..n{N-1}, nc`). The
/// behavioural form writes the Rust model's own equations: each sink A_k divided by its input
/// source's compliance factor `1 - e^{-(V_dd - V_k)/U_T}` (the line equation of
/// [`KWinnersCircuit`]), and each output B_k with its PMOS limiter L_k as one source carrying
/// the closed-form series current `x(u, eps)` (module docs of
/// [`crate::stages::competition::kwta`]; the node between B_k and L_k is eliminated there, so it
/// is not a node here either). Only the behavioural form is offered: the model-card form would
/// simulate a different (transistor-level) circuit.
pub fn build_kwinners(
    chip: &KWinnersChip,
    temperature: f64,
    samples: &[Vec<f64>],
    opts: &NetlistOptions,
) -> Result<Netlist, NetlistError> {
    if opts.form != DeviceForm::Behavioural {
        return Err(NetlistError::KWinnersForm);
    }
    build_any(AnyChip::KWinners(chip), temperature, samples, opts)
}

/// The chips [`build_any`] writes.
#[derive(Clone, Copy)]
enum AnyChip<'a> {
    Stage(&'a CompetitionChip),
    KWinners(&'a KWinnersChip),
}

/// The k-winners limited output `x(u, I_u, eps)` (stable form of the smaller root; `x = u` for
/// `u <= 0`), as in `KWinnersCircuit`.
const KWTA_FUNCTIONS: &str =
    ".func klim(u,iu,e) {u<=0 ? u : 2*u*iu*(1-e)/(u+iu+sqrt((u-iu)*(u-iu)+4*u*iu*e))}
";

/// Cells, limiters and bias of a k-winners die (behavioural form only).
fn write_kwinners(
    w: &mut Writer<'_>,
    kc: &KWinnersCircuit,
    chip: &KWinnersChip,
    nodes: &[String],
    outs: &[String],
) -> Result<(), NetlistError> {
    let c = kc.cells();
    let n = nodes.len() - 1;
    let ut = crate::physics::thermal_voltage(c.temperature);
    let vdd = c.supply;
    w.s.push_str(KWTA_FUNCTIONS);
    for k in 0..n {
        let (Some(a), Some(b), Some(iu)) = (c.sink(k), c.output(k), kc.limit(k)) else {
            return Err(NetlistError::Inconsistent);
        };
        let nk = &nodes[k];
        // Sink over the input source's compliance factor (the Rust model's line equation).
        let sink = ekv_call(a, "V(nc)", &format!("V({nk})"), "0");
        writeln!(
            w.s,
            "BA{k} {nk} 0 I={{{sink}/(1-exp(-({vdd:e}-V({nk}))/{ut:e}))}}"
        )
        .unwrap();
        // B_k in series with its limiter L_k (largest current I_u,k, mismatch included).
        let u = ekv_call(b, &format!("V({nk})"), &format!("V({})", outs[k]), "V(nc)");
        writeln!(
            w.s,
            "BB{k} {} nc I={{klim({u},{iu:e},exp(-({vdd:e}-V(nc))/{ut:e}))}}",
            outs[k]
        )
        .unwrap();
    }
    let d = &chip.cells.design;
    let t = match &d.bias {
        CurrentSource::Transistor { device, .. } => Some(device),
        CurrentSource::Ideal { .. } => None,
    };
    w.bias("BIAS", "nc", c.bias(), t, &chip.cells.bias)
}

fn build_any(
    chip: AnyChip<'_>,
    temperature: f64,
    samples: &[Vec<f64>],
    opts: &NetlistOptions,
) -> Result<Netlist, NetlistError> {
    if !(temperature > 0.0 && temperature.is_finite()) {
        return Err(NetlistError::Temperature(temperature));
    }
    let (circuit, kcircuit, n) = match chip {
        AnyChip::Stage(c) => (Some(c.at(temperature)?), None, c.n()),
        AnyChip::KWinners(c) => (None, Some(c.at(temperature)?), c.design.wta.n),
    };
    if samples.is_empty() {
        return Err(NetlistError::NoSamples);
    }
    for (s, x) in samples.iter().enumerate() {
        if x.len() != n {
            return Err(NetlistError::InputCount {
                sample: s,
                got: x.len(),
                n,
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
    if let DeviceForm::ModelCard { include, model } = &opts.form {
        check_name(model)?;
        if include.contains(['"', '\n', '\r']) {
            return Err(NetlistError::IncludePath(include.clone()));
        }
    }
    let mut w = Writer {
        form: &opts.form,
        s: String::new(),
    };
    let title = opts.title.replace(['\n', '\r'], " ");
    writeln!(w.s, "* {title}").unwrap();
    // Line nodes and the common node: the shared-node WTAs `n0..` and `nc`, the pair `g0..`
    // and `ns`.
    let (what, line, common) = match &circuit {
        None => ("k-winners WTA", "n", "nc"),
        Some(CompetitionCircuit::Wta(_)) => ("current-mode WTA", "n", "nc"),
        Some(CompetitionCircuit::Hysteretic(_)) => ("hysteretic current-mode WTA", "n", "nc"),
        Some(CompetitionCircuit::DiffPair(_)) => ("multi-input differential pair", "g", "ns"),
        // Dispatched by `build` before this point.
        Some(_) => return Err(NetlistError::Inconsistent),
    };
    let nodes: Vec<String> = (0..n)
        .map(|k| format!("{line}{k}"))
        .chain([common.to_string()])
        .collect();
    writeln!(
        w.s,
        "* hardmax netlist export: {what}, N = {n}, {} K, {} sample(s), devices: {}",
        temperature,
        samples.len(),
        match &opts.form {
            DeviceForm::Behavioural => "behavioural EKV (hardmax's equations)".to_string(),
            DeviceForm::ModelCard { model, .. } => format!(
                "model `{model}`; threshold shift = series gate source VT*, beta shift = W scale"
            ),
        }
    )
    .unwrap();
    writeln!(w.s, "* {}", crate::CAUTION).unwrap();
    match &opts.form {
        DeviceForm::Behavioural => w.s.push_str(EKV_FUNCTIONS),
        DeviceForm::ModelCard { include, .. } => writeln!(w.s, ".include \"{include}\"").unwrap(),
    }
    let outs: Vec<String> = (0..n).map(|k| format!("o{k}")).collect();
    writeln!(
        w.s,
        ".subckt {SUBCIRCUIT} {} {}",
        nodes.join(" "),
        outs.join(" ")
    )
    .unwrap();
    let output_voltage;
    let current_inputs;
    match (&circuit, chip) {
        (None, AnyChip::KWinners(chip)) => {
            let Some(kc) = &kcircuit else {
                return Err(NetlistError::Inconsistent);
            };
            output_voltage = kc.cells().output_voltage;
            current_inputs = true;
            write_kwinners(&mut w, kc, chip, &nodes, &outs)?;
        }
        (Some(CompetitionCircuit::Wta(c)), AnyChip::Stage(CompetitionChip::Wta(chip))) => {
            output_voltage = c.output_voltage;
            current_inputs = true;
            let d = &chip.design;
            for k in 0..n {
                let (a, b) = (c.sink(k), c.output(k));
                let (Some(a), Some(b)) = (a, b) else {
                    return Err(NetlistError::Inconsistent);
                };
                w.mos(
                    &format!("A{k}"),
                    &nodes[k],
                    Gate::Node("nc"),
                    "0",
                    a,
                    &d.sink,
                    &chip.sink[k],
                );
                w.mos(
                    &format!("B{k}"),
                    &outs[k],
                    Gate::Node(&nodes[k]),
                    "nc",
                    b,
                    &d.output,
                    &chip.output[k],
                );
            }
            let t = match &d.bias {
                CurrentSource::Transistor { device, .. } => Some(device),
                CurrentSource::Ideal { .. } => None,
            };
            w.bias("BIAS", common, c.bias(), t, &chip.bias)?;
        }
        (
            Some(CompetitionCircuit::Hysteretic(h)),
            AnyChip::Stage(CompetitionChip::Hysteretic(hchip)),
        ) => {
            // The WTA's devices; B_k's drain reaches its output port through a 0 V source
            // VM<k> whose current a current-controlled source F<k> copies, times the mirror's
            // gain alpha_k (mismatch included), into the cell's input node (the feedback).
            let (c, chip) = (&h.wta, &hchip.wta);
            output_voltage = c.output_voltage;
            current_inputs = true;
            let d = &chip.design;
            for k in 0..n {
                let (a, b) = (c.sink(k), c.output(k));
                let (Some(a), Some(b), Some(alpha)) = (a, b, h.feedback.get(k)) else {
                    return Err(NetlistError::Inconsistent);
                };
                w.mos(
                    &format!("A{k}"),
                    &nodes[k],
                    Gate::Node("nc"),
                    "0",
                    a,
                    &d.sink,
                    &chip.sink[k],
                );
                let drain = format!("d{k}");
                w.mos(
                    &format!("B{k}"),
                    &drain,
                    Gate::Node(&nodes[k]),
                    "nc",
                    b,
                    &d.output,
                    &chip.output[k],
                );
                writeln!(w.s, "VM{k} {} {drain} DC 0", outs[k]).unwrap();
                writeln!(w.s, "F{k} 0 {} VM{k} {alpha:e}", nodes[k]).unwrap();
            }
            let t = match &d.bias {
                CurrentSource::Transistor { device, .. } => Some(device),
                CurrentSource::Ideal { .. } => None,
            };
            w.bias("BIAS", common, c.bias(), t, &chip.bias)?;
        }
        (
            Some(CompetitionCircuit::DiffPair(c)),
            AnyChip::Stage(CompetitionChip::DiffPair(chip)),
        ) => {
            output_voltage = c.output_voltage;
            let d = &chip.design;
            current_inputs = !matches!(d.input, DiffPairInput::Voltage);
            for k in 0..n {
                if let (DiffPairInput::Diode { device }, Some(e)) = (&d.input, c.diode(k)) {
                    w.mos(
                        &format!("D{k}"),
                        &nodes[k],
                        Gate::Node(&nodes[k]),
                        "0",
                        e,
                        device,
                        &chip.diodes[k],
                    );
                }
                if let DiffPairInput::Resistor { resistance, .. } = d.input {
                    writeln!(w.s, "R{k} {} rref {resistance:e}", nodes[k]).unwrap();
                }
                if let Some(p) = c.pair(k) {
                    w.mos(
                        &format!("P{k}"),
                        &outs[k],
                        Gate::Node(&nodes[k]),
                        common,
                        p,
                        &d.pair,
                        &chip.pair[k],
                    );
                }
            }
            if let DiffPairInput::Resistor { reference, .. } = d.input {
                writeln!(w.s, "VREF rref 0 DC {reference:e}").unwrap();
            }
            let t = match &d.tail {
                CurrentSource::Transistor { device, .. } => Some(device),
                CurrentSource::Ideal { .. } => None,
            };
            w.bias("TAIL", common, c.tail(), t, &chip.tail)?;
        }
        _ => return Err(NetlistError::Inconsistent),
    }
    writeln!(w.s, ".ends {SUBCIRCUIT}").unwrap();
    for (s, x) in samples.iter().enumerate() {
        match opts.sample_notes.get(s) {
            Some(note) => {
                writeln!(w.s, "* sample {s}: {}", note.replace(['\n', '\r'], " ")).unwrap()
            }
            None => writeln!(w.s, "* sample {s}").unwrap(),
        }
        for (k, &v) in x.iter().enumerate() {
            if current_inputs {
                writeln!(w.s, "I_S{s}_{k} 0 s{s}_{} DC {v:e}", nodes[k]).unwrap();
            } else {
                writeln!(w.s, "VG_S{s}_{k} s{s}_{} 0 DC {v:e}", nodes[k]).unwrap();
            }
            writeln!(w.s, "VO_S{s}_{k} s{s}_{} 0 DC {output_voltage:e}", outs[k]).unwrap();
        }
        let ports: Vec<String> = nodes
            .iter()
            .chain(&outs)
            .map(|p| format!("s{s}_{p}"))
            .collect();
        writeln!(w.s, "XS{s} {} {SUBCIRCUIT}", ports.join(" ")).unwrap();
    }
    // Celsius, rounded to 1 nK so the deck does not show binary noise.
    writeln!(
        w.s,
        ".temp {}",
        ((temperature - 273.15) * 1e9).round() / 1e9
    )
    .unwrap();
    match opts.form {
        DeviceForm::Behavioural => writeln!(
            w.s,
            ".options reltol=1e-9 abstol=1e-21 vntol=1e-12 gmin=1e-30 itl1=5000"
        ),
        DeviceForm::ModelCard { .. } => writeln!(
            w.s,
            // Tolerances of a transistor-level run (the tight ones above make BSIM3 decks of
            // hundreds of instances crawl); 1 fA absolute against nA currents.
            ".options reltol=1e-6 abstol=1e-15 vntol=1e-9 gmin=1e-18 itl1=500"
        ),
    }
    .unwrap();
    writeln!(w.s, ".op").unwrap();
    if let Some(raw) = &opts.ngspice_raw {
        writeln!(w.s, ".control").unwrap();
        writeln!(w.s, "run").unwrap();
        writeln!(w.s, "set filetype=ascii").unwrap();
        writeln!(w.s, "write {raw}").unwrap();
        writeln!(w.s, ".endc").unwrap();
    }
    writeln!(w.s, ".end").unwrap();
    Ok(Netlist {
        text: w.s,
        n,
        samples: samples.len(),
        nodes,
    })
}
