//! What a design costs: gate area, static supply current, power, energy per decision.
//!
//! A pure function of the design, the mapped weights and the test split's mean input: no I/O,
//! no random draws (nominal devices). The rules (DEVELOPERS.md, "Model notes §11"):
//!
//! - **Gate area** = sum of W L over every device: the weight elements (one device per element,
//!   two per weight with the differential encoding; a linear element counts as one device of
//!   [`CostSettings::linear_element`]), the differential encoding's mirror pair per output line,
//!   the input DAC of the first stage (a binary-weighted current DAC of B bits has 2^B - 1 unit
//!   devices per input line, the bias line included; an ideal DAC counts one unit device per
//!   line as its current source: common practice, no source), the hidden normaliser circuit (its
//!   transistors when it is evaluated as a circuit; the closed form has no devices and counts
//!   0), and the competition stage (current-mode WTA: a sink and an output device per cell;
//!   differential pair: a pair device per input, plus its diode when fed through diodes).
//!   Layout area = gate area x a layout overhead factor (routing, wells, guard rings).
//! - **Static supply current** = every bias (competition stage, hidden normaliser) + the input
//!   line currents of the first stage + every weight element's current and the offset currents,
//!   evaluated nominally at the test split's mean input (the element targets the simulation
//!   maps, the DAC the design uses). Power = current x supply voltage.
//! - **Energy per decision** = power x decision time: the mean decision time of a transient
//!   evaluation, or a stated read-out time in DC evaluation.

use super::{ClassifierDesign, CompetitionDesign, PointSetup, Prepared};
use crate::device::Transistor;
use crate::stages::competition::diffpair::DiffPairInput;
use crate::stages::competition::CurrentSource;
use crate::stages::weights::{ElementDesign, SignedEncoding};

/// Errors of the cost settings; each names the setting.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CostError {
    #[error("{name} = {value}: {expected}")]
    Invalid {
        name: &'static str,
        value: f64,
        expected: &'static str,
    },
}

/// User settings of the cost model.
#[derive(Debug, Clone, PartialEq)]
pub struct CostSettings {
    /// Layout area / gate area (routing, wells, guard rings), at least 1.
    pub layout_overhead: f64,
    /// Unit device of the input DAC.
    pub dac_unit: Transistor,
    /// The device a linear (conductance/current) weight element counts as.
    pub linear_element: Transistor,
    /// Read-out time of a DC evaluation, s (the time a decision holds the bias on).
    pub read_out_time_s: f64,
}

impl CostSettings {
    /// Check every value (the one place of validation; the experiment layer names its keys).
    pub fn validate(&self) -> Result<(), CostError> {
        let bad = |name, value, expected| {
            Err(CostError::Invalid {
                name,
                value,
                expected,
            })
        };
        if !(self.layout_overhead.is_finite() && self.layout_overhead >= 1.0) {
            return bad(
                "layout_overhead",
                self.layout_overhead,
                "a factor of at least 1 (layout area over gate area; 2 is common practice)",
            );
        }
        if !(self.read_out_time_s.is_finite() && self.read_out_time_s > 0.0) {
            return bad(
                "read_out_time",
                self.read_out_time_s,
                "a time > 0 (how long a DC decision keeps the circuit biased)",
            );
        }
        for (name, v) in [
            ("dac_unit.w", self.dac_unit.w),
            ("dac_unit.l", self.dac_unit.l),
            ("linear_element.w", self.linear_element.w),
            ("linear_element.l", self.linear_element.l),
        ] {
            if !(v.is_finite() && v > 0.0) {
                return bad(name, v, "a length > 0");
            }
        }
        Ok(())
    }
}

/// The cost of one design point (SI: m^2, A, W, J).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Cost {
    /// Gate area of the weight elements and the differential encoding's mirrors.
    pub weights_area_m2: f64,
    /// Gate area of the input DAC.
    pub dac_area_m2: f64,
    /// Gate area of the hidden normaliser circuit.
    pub hidden_area_m2: f64,
    /// Gate area of the competition stage.
    pub competition_area_m2: f64,
    /// Gate area of the trim DACs: competition lines and/or input columns (0 without trim).
    pub trim_area_m2: f64,
    /// Sum of the gate areas (weights, DAC, hidden, competition, trim).
    pub gate_area_m2: f64,
    /// Gate area x layout overhead.
    pub area_m2: f64,
    /// Bias currents (competition stage, hidden normaliser).
    pub bias_current_a: f64,
    /// Input line, element and offset currents of the weight stages at the mean input.
    pub weights_current_a: f64,
    /// Total static supply current.
    pub supply_current_a: f64,
    /// Supply current x supply voltage.
    pub power_w: f64,
}

impl Cost {
    /// Energy per decision for a decision time `t` (s).
    pub fn energy_per_decision(&self, t: f64) -> f64 {
        self.power_w * t
    }
}

fn area(t: &Transistor) -> f64 {
    t.w * t.l
}

/// Gate area and bias current of a current-mode WTA (sink and output per cell, the bias).
fn wta_cost(w: &crate::stages::competition::wta::WtaDesign) -> (f64, f64) {
    let (bias_area, bias_i) = match &w.bias {
        CurrentSource::Ideal { current } => (0.0, *current),
        CurrentSource::Transistor { device, .. } => (area(device), 0.0),
    };
    (
        w.n as f64 * (area(&w.sink) + area(&w.output)) + bias_area,
        bias_i,
    )
}

/// Gate area and bias current of a competition circuit.
fn circuit_cost(c: &CompetitionDesign) -> (f64, f64) {
    match c {
        CompetitionDesign::Argmax => (0.0, 0.0),
        CompetitionDesign::CurrentWta(w) => {
            let (bias_area, bias_i) = match &w.bias {
                CurrentSource::Ideal { current } => (0.0, *current),
                // A transistor bias's current follows from its solve: counted by area only.
                CurrentSource::Transistor { device, .. } => (area(device), 0.0),
            };
            (
                w.n as f64 * (area(&w.sink) + area(&w.output)) + bias_area,
                bias_i,
            )
        }
        CompetitionDesign::Hysteretic(h) => {
            // The WTA's devices plus each cell's mirror: a diode and a feedback device of
            // `feedback` times its width.
            let (a, i) = circuit_cost(&CompetitionDesign::CurrentWta(Box::new(h.wta.clone())));
            let mirror = area(&h.mirror) * (1.0 + h.feedback);
            // The feedback copies draw alpha I_b more from the supply.
            (a + h.wta.n as f64 * mirror, i * (1.0 + h.feedback))
        }
        CompetitionDesign::KWinners(k) => {
            // The WTA's cells and bias, plus one output limiter per cell (its current is the
            // output current, part of the bias already counted).
            let (a, i) = wta_cost(&k.wta);
            (a + k.wta.n as f64 * area(&k.limiter), i)
        }
        // The same WTA decides every step (the input switches are not counted).
        CompetitionDesign::Ranking(r) => wta_cost(&r.wta),
        CompetitionDesign::Cascade(c) => {
            // Every group's WTA with its own bias, and one replica per group below the top
            // (counted by area: its current is the next level's input).
            let levels = c.levels();
            let last = levels.len() - 1;
            let (mut a, mut i) = (0.0, 0.0);
            for (l, sizes) in levels.iter().enumerate() {
                for &s in sizes.iter().filter(|&&s| s >= 2) {
                    let mut w = c.cell.clone();
                    w.n = s;
                    let (ga, gi) = wta_cost(&w);
                    a += ga + if l < last { area(&c.copy) } else { 0.0 };
                    i += gi;
                }
            }
            (a, i)
        }
        CompetitionDesign::DiffPair(d) => {
            let diode = match &d.input {
                DiffPairInput::Diode { device } => area(device),
                _ => 0.0,
            };
            let (tail_area, tail_i) = match &d.tail {
                CurrentSource::Ideal { current } => (0.0, *current),
                CurrentSource::Transistor { device, .. } => (area(device), 0.0),
            };
            (d.n as f64 * (area(&d.pair) + diode) + tail_area, tail_i)
        }
    }
}

/// The cost of a design point. `mean_input` is the test split's mean scaled input (one value
/// per feature, in [0, 1]).
pub fn point_cost(
    setup: &PointSetup,
    prep: &Prepared,
    mean_input: &[f64],
    settings: &CostSettings,
) -> Result<Cost, CostError> {
    settings.validate()?;
    let d: &ClassifierDesign = &setup.design;
    let stages = setup.mapped.stages();
    let mut cost = Cost::default();
    // Inputs each stage sees at the mean input: the first stage the mean input, the second the
    // hidden shares of the nominal (ideal) chain.
    let mut hidden_in = Vec::new();
    if stages.len() > 1 {
        // A failed nominal evaluation leaves the second stage's inputs at zero.
        let _ = setup
            .mapped
            .ideal()
            .hidden_features(mean_input, &mut hidden_in);
    }
    for (k, s) in stages.iter().enumerate() {
        let design = s.design();
        let features = s.inputs();
        let classes = s.outputs();
        let lines = features + 1;
        let per_weight = if s.targets_minus().is_some() { 2 } else { 1 };
        let element = match &design.element {
            ElementDesign::Subthreshold(e) => area(&e.device),
            ElementDesign::Linear(_) => area(&settings.linear_element),
        };
        cost.weights_area_m2 += (classes * lines * per_weight) as f64 * element;
        if let SignedEncoding::Differential { mirror } = &design.encoding {
            cost.weights_area_m2 += 2.0 * classes as f64 * area(mirror);
        }
        // The input line levels x_i (quantised as the DAC does), bias line at 1.
        let q = design.input.quantiser();
        let x: Vec<f64> = if k == 0 {
            (0..features)
                .map(|i| q.apply(mean_input.get(i).copied().unwrap_or(0.0)))
                .chain(std::iter::once(1.0))
                .collect()
        } else {
            (0..features)
                .map(|i| hidden_in.get(i).copied().unwrap_or(0.0))
                .chain(std::iter::once(1.0))
                .collect()
        };
        let iu = design.input.full_scale_current_a;
        if k == 0 {
            let units = match design.input.dac_bits {
                Some(b) => (1u64 << b.min(24)) as f64 - 1.0,
                None => 1.0,
            };
            cost.dac_area_m2 += lines as f64 * units * area(&settings.dac_unit);
            cost.weights_current_a += iu * x.iter().sum::<f64>();
        }
        let element_sum = |t: &ndarray::Array2<f64>| -> f64 {
            t.rows()
                .into_iter()
                .map(|r| r.iter().zip(&x).map(|(w, xi)| w * xi).sum::<f64>())
                .sum()
        };
        let mut elements = element_sum(s.targets_plus());
        if let Some(m) = s.targets_minus() {
            elements += element_sum(m);
        }
        cost.weights_current_a += iu * elements + classes as f64 * s.offset_current_a();
    }
    let (comp_area, comp_bias) = circuit_cost(&d.competition);
    cost.competition_area_m2 = comp_area;
    cost.bias_current_a += comp_bias;
    if let Some(h) = &prep.hidden {
        match &d.hidden_circuit {
            Some(c) => {
                let (a, i) = circuit_cost(c);
                cost.hidden_area_m2 = a;
                cost.bias_current_a += i;
            }
            None => cost.bias_current_a += h.nonlinearity.bias_current_a(),
        }
    }
    if let Some(t) = &setup.trim {
        cost.trim_area_m2 = t.design.total_area_m2(
            stages.last().map_or(0, |s| s.outputs()),
            stages.first().map_or(0, |s| s.inputs() + 1),
        );
    }
    cost.gate_area_m2 = cost.weights_area_m2
        + cost.dac_area_m2
        + cost.hidden_area_m2
        + cost.competition_area_m2
        + cost.trim_area_m2;
    cost.area_m2 = cost.gate_area_m2 * settings.layout_overhead;
    cost.supply_current_a = cost.bias_current_a + cost.weights_current_a;
    cost.power_w = cost.supply_current_a * d.process.vdd;
    Ok(cost)
}

/// Mean of every column of `u` (the test split's mean scaled input).
pub fn mean_input(u: &ndarray::Array2<f64>) -> Vec<f64> {
    let n = u.nrows().max(1) as f64;
    u.columns()
        .into_iter()
        .map(|c| c.iter().map(|v| v.clamp(0.0, 1.0)).sum::<f64>() / n)
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::{preset, Polarity};
    use crate::pipeline::{ClassifierDesign, CompetitionDesign, PointSetup, Prepared};
    use crate::stages::competition::wta::WtaDesign;
    use crate::stages::competition::DecisionRule;
    use crate::stages::weights::{
        Conditions, ElementDesign, InputDesign, LinearElement, OffsetSetting, WeightStageDesign,
    };
    use approx::assert_relative_eq;
    use ndarray::array;

    fn nmos(w_um: f64, l_um: f64) -> Transistor {
        Transistor {
            polarity: Polarity::Nmos,
            w: w_um * 1e-6,
            l: l_um * 1e-6,
        }
    }

    /// A two-class, one-feature classifier (invented numbers) with weights W = [[1], [-1]],
    /// b = [-0.5, 0.5] and test inputs 0.2 and 0.6 (mean 0.4).
    fn setup() -> (PointSetup, Prepared) {
        let mut process = preset("generic-180nm").unwrap_or_else(|e| panic!("{e}"));
        process.vdd = 1.8;
        let prep = Prepared {
            dataset_name: "invented".into(),
            class_names: vec!["a".into(), "b".into()],
            n_features: 1,
            n_train: 2,
            test_u: array![[0.2], [0.6]],
            test_y: vec![1, 0],
            layers: vec![(array![[1.0], [-1.0]], array![-0.5, 0.5])],
            hidden: None,
            ideal_pred: vec![1, 0],
            baseline_pred: vec![1, 0],
            ideal_acc: 1.0,
            baseline_acc: 1.0,
            untested_classes: Vec::new(),
            train_mean_u: Vec::new(),
            train_u: ndarray::Array2::zeros((0, 0)),
        };
        let weights = WeightStageDesign {
            input: InputDesign {
                dac_bits: Some(4),
                full_scale_current_a: 10e-9,
                gain_sigma_rel: 0.0,
            },
            element: ElementDesign::Linear(LinearElement {
                levels: None,
                ..LinearElement::default()
            }),
            offset: OffsetSetting::Fixed { current_a: 2e-9 },
            ..WeightStageDesign::default()
        };
        let wta = WtaDesign::new(
            2,
            process.clone(),
            nmos(1.0, 2.0),
            nmos(3.0, 1.0),
            CurrentSource::Ideal { current: 100e-9 },
        );
        let design = ClassifierDesign {
            process,
            weights,
            competition: CompetitionDesign::CurrentWta(Box::new(wta)),
            decision: DecisionRule::default(),
            input_noise: None,
            transient: None,
            hidden_circuit: None,
            conditions: Conditions::default(),
        };
        let s = PointSetup::new(design, &prep).unwrap_or_else(|e| panic!("{e}"));
        (s, prep)
    }

    fn settings() -> CostSettings {
        CostSettings {
            layout_overhead: 2.0,
            dac_unit: nmos(1.0, 0.5),
            linear_element: nmos(2.0, 1.0),
            read_out_time_s: 1e-6,
        }
    }

    /// Hand calculation (DEVELOPERS.md model notes §11; the mapping of the shifted encoding is
    /// model notes §5). Lines: 1 feature + bias = 2, classes 2.
    /// Shifted encoding: columns [1, -1] and [-0.5, 0.5] minus their minima -> [[2, 0], [0, 1]],
    /// scaled by 1/2 onto the element range [0, 1]: targets [[1, 0], [0, 0.5]].
    /// Area: elements 2 x 2 x (2 um x 1 um) = 8 um^2; DAC 2 lines x (2^4 - 1) x 0.5 um^2
    /// = 15 um^2; WTA 2 x (1 x 2 + 3 x 1) = 10 um^2; gate area 33 um^2, x 2 = 66 um^2.
    /// Current at the mean input 0.4 (a 4-bit DAC holds 6/15 = 0.4 exactly): input lines
    /// 10 nA x (0.4 + 1) = 14 nA; elements 10 nA x (1 x 0.4 + 0 x 1 + 0 x 0.4 + 0.5 x 1) = 9 nA;
    /// offsets 2 x 2 nA = 4 nA; bias 100 nA: 127 nA, x 1.8 V = 228.6 nW, x 1 us = 0.2286 pJ.
    #[test]
    fn cost_matches_a_hand_calculation() {
        let (s, prep) = setup();
        let c = point_cost(&s, &prep, &mean_input(&prep.test_u), &settings())
            .unwrap_or_else(|e| panic!("{e}"));
        let um2 = 1e-12;
        assert_relative_eq!(c.weights_area_m2, 8.0 * um2, max_relative = 1e-12);
        assert_relative_eq!(c.dac_area_m2, 15.0 * um2, max_relative = 1e-12);
        assert_relative_eq!(c.competition_area_m2, 10.0 * um2, max_relative = 1e-12);
        assert_relative_eq!(c.hidden_area_m2, 0.0);
        assert_relative_eq!(c.gate_area_m2, 33.0 * um2, max_relative = 1e-12);
        assert_relative_eq!(c.area_m2, 66.0 * um2, max_relative = 1e-12);
        assert_relative_eq!(c.bias_current_a, 100e-9, max_relative = 1e-12);
        assert_relative_eq!(c.weights_current_a, 27e-9, max_relative = 1e-9);
        assert_relative_eq!(c.supply_current_a, 127e-9, max_relative = 1e-9);
        assert_relative_eq!(c.power_w, 228.6e-9, max_relative = 1e-9);
        assert_relative_eq!(c.energy_per_decision(1e-6), 0.2286e-12, max_relative = 1e-9);
    }

    /// A layout overhead below 1 (negative included) or a zero read-out time is refused, naming
    /// the setting.
    #[test]
    fn bad_settings_name_the_setting() {
        let (s, prep) = setup();
        let mut bad = settings();
        bad.layout_overhead = -1.0;
        let e = point_cost(&s, &prep, &[0.4], &bad).unwrap_err().to_string();
        assert!(e.contains("layout_overhead"), "{e}");
        let mut bad = settings();
        bad.read_out_time_s = 0.0;
        let e = point_cost(&s, &prep, &[0.4], &bad).unwrap_err().to_string();
        assert!(e.contains("read_out_time"), "{e}");
    }
}
