//! Error budget of one design point: which nonidealities are active, and the design of each
//! budget variant (the design with some of them switched off).
//!
//! Every variant is evaluated on the same dies: the chip streams are keyed by (seed, point,
//! chip, block) only, and every sampler draws a fixed number of standard-normal (and uniform)
//! values whatever its sigmas (see `MappedStage::sample_chip`, `ElementArrayChip::program`,
//! `WtaChip::sample`). Switching a nonideality off therefore scales its draws by zero instead
//! of skipping them:
//! - static sigmas (programming error, drift, stuck elements, DAC gain, offset sources) are set
//!   to zero in the design: the draws are still made;
//! - Pelgrom mismatch is scaled per block ([`ChipToggles`]: weight stage, competition stage,
//!   hidden stage), because the blocks share one process;
//! - per-decision noise (read noise, shot noise) shares one stream per chip, consumed sample by
//!   sample: a switched-off source still draws its normals and adds zero times them
//!   ([`ChipToggles::read_noise`], [`ChipToggles::shot_noise`]).
//!
//! Finite competition gain switched off gives the infinite-gain limit of the current-mode WTA:
//! the winner is the largest input current referred through each cell's input (sink)
//! transistor, `I_k exp(kappa dV_T,k / U_T) / (1 + dbeta_k)`; an output transistor's error is
//! divided by the gain and vanishes in the limit (DEVELOPERS.md model notes section 4.1, after
//! J. Lazzaro et al., NIPS 1, 1989). An infinite-gain stage gives the whole bias to the winner,
//! so its decisions are never ambiguous.
//!
//! Numerical core: no I/O, no printing.

use super::{ClassifierDesign, CompetitionDesign, PipelineError};
use crate::stages::weights::{ElementDesign, SignedEncoding};

/// How a chip is built and run beside its design: per-block mismatch scales, per-decision
/// noise scales, and the infinite-gain limit of the competition stage. The default (every
/// scale 1, no limit) is the chip as designed.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ChipToggles {
    /// Scale of the Pelgrom draws of the weight stages (subthreshold elements, mirrors).
    pub weight_mismatch: f64,
    /// Scale of the Pelgrom draws of the competition stage's transistors.
    pub competition_mismatch: f64,
    /// Scale of the Pelgrom draws of the hidden normaliser circuit.
    pub hidden_mismatch: f64,
    /// Scale of the per-decision read noise of the weight elements (drawn whatever the scale).
    pub read_noise: f64,
    /// Scale of the per-decision shot noise at the competition inputs (drawn whatever the scale).
    pub shot_noise: f64,
    /// Decide by the competition stage's infinite-gain limit instead of solving the circuit.
    pub infinite_gain: bool,
}

impl Default for ChipToggles {
    fn default() -> Self {
        Self {
            weight_mismatch: 1.0,
            competition_mismatch: 1.0,
            hidden_mismatch: 1.0,
            read_noise: 1.0,
            shot_noise: 1.0,
            infinite_gain: false,
        }
    }
}

/// The stage a nonideality belongs to (for the per-stage split of a budget).
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum StageGroup {
    Weights,
    Hidden,
    Competition,
}

impl StageGroup {
    pub const ALL: [StageGroup; 3] = [
        StageGroup::Weights,
        StageGroup::Hidden,
        StageGroup::Competition,
    ];

    /// Short key (CSV).
    pub fn key(self) -> &'static str {
        match self {
            StageGroup::Weights => "weights",
            StageGroup::Hidden => "hidden",
            StageGroup::Competition => "competition",
        }
    }
}

/// One nonideality a budget can switch on and off.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Nonideality {
    /// Pelgrom mismatch of the weight stage: subthreshold elements, differential-encoding
    /// mirrors, and the output lines' offset current sources.
    WeightMismatch,
    /// Static gain error of each input line's DAC / current source.
    DacMismatch,
    /// Programming error of the stored weights.
    ProgrammingError,
    /// Per-decision read noise of the weight elements.
    ReadNoise,
    /// Drift of linear elements since programming.
    Drift,
    /// Elements stuck at the ends of their range.
    StuckElements,
    /// Temperature away from the programming temperature (subthreshold elements).
    Temperature,
    /// The hidden normaliser evaluated as a circuit with its mismatch (instead of the closed form).
    HiddenStage,
    /// Pelgrom mismatch of the competition stage's transistors.
    CompetitionMismatch,
    /// Finite gain of the current-mode WTA (vs its infinite-gain limit).
    FiniteGain,
    /// Per-decision shot noise at the competition stage's inputs.
    ShotNoise,
}

impl Nonideality {
    pub const ALL: [Nonideality; 11] = [
        Nonideality::WeightMismatch,
        Nonideality::DacMismatch,
        Nonideality::ProgrammingError,
        Nonideality::ReadNoise,
        Nonideality::Drift,
        Nonideality::StuckElements,
        Nonideality::Temperature,
        Nonideality::HiddenStage,
        Nonideality::CompetitionMismatch,
        Nonideality::FiniteGain,
        Nonideality::ShotNoise,
    ];

    /// Short key (CSV, command line).
    pub fn key(self) -> &'static str {
        match self {
            Nonideality::WeightMismatch => "weight_mismatch",
            Nonideality::DacMismatch => "dac_mismatch",
            Nonideality::ProgrammingError => "programming_error",
            Nonideality::ReadNoise => "read_noise",
            Nonideality::Drift => "drift",
            Nonideality::StuckElements => "stuck_elements",
            Nonideality::Temperature => "temperature",
            Nonideality::HiddenStage => "hidden_mismatch",
            Nonideality::CompetitionMismatch => "competition_mismatch",
            Nonideality::FiniteGain => "finite_gain",
            Nonideality::ShotNoise => "shot_noise",
        }
    }

    /// What it is, in words (tables, report).
    pub fn label(self) -> &'static str {
        match self {
            Nonideality::WeightMismatch => {
                "mismatch of the weight elements, mirrors, offset sources"
            }
            Nonideality::DacMismatch => "mismatch of the input DAC lines",
            Nonideality::ProgrammingError => "programming error of the weights",
            Nonideality::ReadNoise => "read noise of the weights",
            Nonideality::Drift => "drift of the weights since programming",
            Nonideality::StuckElements => "stuck weight elements",
            Nonideality::Temperature => "temperature away from programming",
            Nonideality::HiddenStage => "hidden-stage circuit and its mismatch",
            Nonideality::CompetitionMismatch => "mismatch of the competition stage",
            Nonideality::FiniteGain => "finite gain of the competition stage",
            Nonideality::ShotNoise => "shot noise at the competition inputs",
        }
    }

    /// The stage it belongs to. Temperature acts on the stored weights (the circuits also run
    /// at that temperature), so it counts with the weights.
    pub fn stage(self) -> StageGroup {
        match self {
            Nonideality::HiddenStage => StageGroup::Hidden,
            Nonideality::CompetitionMismatch | Nonideality::FiniteGain | Nonideality::ShotNoise => {
                StageGroup::Competition
            }
            _ => StageGroup::Weights,
        }
    }

    /// Is it switched on in `design` (with `layers` weight layers: 2 with a hidden stage)?
    pub fn is_active(self, design: &ClassifierDesign, layers: usize) -> bool {
        let w = &design.weights;
        let p = &design.process;
        let has_mm = |t: &crate::device::Transistor| {
            let tech = p.tech(t.polarity);
            tech.a_vt_pair > 0.0 || tech.a_beta_pair > 0.0
        };
        match self {
            Nonideality::WeightMismatch => {
                let element = match &w.element {
                    ElementDesign::Subthreshold(e) => has_mm(&e.device),
                    ElementDesign::Linear(_) => false,
                };
                let mirror = match &w.encoding {
                    SignedEncoding::Differential { mirror } => has_mm(mirror),
                    SignedEncoding::Shifted => false,
                };
                element || mirror || w.offset_sigma_rel > 0.0
            }
            Nonideality::DacMismatch => w.input.gain_sigma_rel > 0.0,
            Nonideality::ProgrammingError => match &w.element {
                ElementDesign::Linear(e) => e.programming_error.sigma > 0.0,
                ElementDesign::Subthreshold(e) => e.programming_error_v > 0.0,
            },
            Nonideality::ReadNoise => match &w.element {
                ElementDesign::Linear(e) => e.read_noise.sigma > 0.0,
                ElementDesign::Subthreshold(e) => e.read_noise_rel > 0.0,
            },
            Nonideality::Drift => match &w.element {
                ElementDesign::Linear(e) => {
                    (e.drift.nu > 0.0 || e.drift.nu_sigma > 0.0)
                        && design.conditions.time_since_programming_s > e.drift.t0_s
                }
                ElementDesign::Subthreshold(_) => false,
            },
            Nonideality::StuckElements => match &w.element {
                ElementDesign::Linear(e) => {
                    e.stuck_at_min_fraction > 0.0 || e.stuck_at_max_fraction > 0.0
                }
                ElementDesign::Subthreshold(_) => false,
            },
            Nonideality::Temperature => match &w.element {
                ElementDesign::Subthreshold(e) => {
                    design.conditions.temperature_k != e.program_temperature_k
                }
                ElementDesign::Linear(_) => false,
            },
            Nonideality::HiddenStage => design.hidden_circuit.is_some() && layers == 2,
            Nonideality::CompetitionMismatch => {
                !matches!(design.competition, CompetitionDesign::Argmax)
                    && (p.nmos.a_vt_pair > 0.0 || p.nmos.a_beta_pair > 0.0)
            }
            Nonideality::FiniteGain => {
                matches!(design.competition, CompetitionDesign::CurrentWta(_))
            }
            Nonideality::ShotNoise => design.input_noise.is_some(),
        }
    }
}

/// The nonidealities switched on in `design` (in [`Nonideality::ALL`] order). Errors when the
/// design cannot be budgeted: a transient evaluation, or a differential-pair competition stage
/// (whose infinite-gain limit is not modelled).
pub fn active_nonidealities(
    design: &ClassifierDesign,
    layers: usize,
) -> Result<Vec<Nonideality>, PipelineError> {
    if design.transient.is_some() {
        return Err(PipelineError::Unsupported {
            what: "an error budget evaluates decisions at DC; set competition.evaluation = \"dc\"",
        });
    }
    if matches!(design.competition, CompetitionDesign::Hysteretic(_)) {
        return Err(PipelineError::Unsupported {
            what: "an error budget needs competition.circuit = \"current_wta\" or \"argmax\": the \
                   hysteretic WTA's infinite-gain limit is not modelled",
        });
    }
    if matches!(design.competition, CompetitionDesign::DiffPair(_)) {
        return Err(PipelineError::Unsupported {
            what: "an error budget needs competition.circuit = \"current_wta\" or \"argmax\": the \
                   differential pair's infinite-gain limit is not modelled",
        });
    }
    Ok(Nonideality::ALL
        .into_iter()
        .filter(|n| n.is_active(design, layers))
        .collect())
}

/// The design and chip toggles of the variant of `design` in which exactly the nonidealities
/// for which `on` is true are switched on (quantisation of weights and DAC always stays).
/// Switching off never changes the number or order of draws (module docs).
pub fn variant(
    design: &ClassifierDesign,
    on: impl Fn(Nonideality) -> bool,
) -> (ClassifierDesign, ChipToggles) {
    let mut d = design.clone();
    let mut t = ChipToggles::default();
    if !on(Nonideality::WeightMismatch) {
        t.weight_mismatch = 0.0;
        d.weights.offset_sigma_rel = 0.0;
    }
    if !on(Nonideality::DacMismatch) {
        d.weights.input.gain_sigma_rel = 0.0;
    }
    if !on(Nonideality::ProgrammingError) {
        match &mut d.weights.element {
            ElementDesign::Linear(e) => e.programming_error.sigma = 0.0,
            ElementDesign::Subthreshold(e) => e.programming_error_v = 0.0,
        }
    }
    if !on(Nonideality::ReadNoise) {
        t.read_noise = 0.0;
    }
    if let ElementDesign::Linear(e) = &mut d.weights.element {
        if !on(Nonideality::Drift) {
            e.drift.nu = 0.0;
            e.drift.nu_sigma = 0.0;
        }
        if !on(Nonideality::StuckElements) {
            e.stuck_at_min_fraction = 0.0;
            e.stuck_at_max_fraction = 0.0;
        }
    }
    if !on(Nonideality::Temperature) {
        if let ElementDesign::Subthreshold(e) = &d.weights.element {
            d.conditions.temperature_k = e.program_temperature_k;
            if let Some(n) = &mut d.input_noise {
                n.temperature = e.program_temperature_k;
            }
        }
    }
    if !on(Nonideality::HiddenStage) {
        d.hidden_circuit = None;
        t.hidden_mismatch = 0.0;
    }
    if !on(Nonideality::CompetitionMismatch) {
        t.competition_mismatch = 0.0;
    }
    if !on(Nonideality::FiniteGain) {
        t.infinite_gain = true;
    }
    if !on(Nonideality::ShotNoise) {
        t.shot_noise = 0.0;
    }
    (d, t)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stages::competition::wta::WtaDesign;
    use crate::stages::competition::CurrentSource as WtaBias;
    use crate::stages::competition::{CompetitionStage, StageSolution, Workspace};
    use rand::Rng;

    /// The infinite-gain limit against the full EKV circuit at a high gain (1000): the
    /// current-mode WTA's winner is the largest input referred through its sink transistor,
    /// I_k exp(kappa dV_T / U_T) / (1 + dbeta) (weak-inversion analysis of J. Lazzaro,
    /// S. Ryckebusch, M. Mahowald, C. Mead, NIPS 1, 1989; DEVELOPERS.md model notes section
    /// 4.1). On random inputs the two pick the same winner in almost every case, while the
    /// opposite sign of the referral would not.
    #[test]
    fn infinite_gain_limit_matches_a_high_gain_circuit() {
        let process = crate::device::presets::preset("generic-180nm").unwrap();
        let dev = crate::device::Transistor {
            polarity: crate::device::Polarity::Nmos,
            w: 1e-6,
            l: 1e-6,
        };
        let mut d = WtaDesign::new(
            10,
            process.clone(),
            dev,
            dev,
            WtaBias::Ideal { current: 1e-7 },
        );
        d.drain_coupling = Some(crate::device::DrainCoupling::Eta(1e-3));
        let comp = CompetitionDesign::CurrentWta(Box::new(d));
        let mut inputs_rng = crate::rng::stream(5, &[0]);
        let (mut same, mut same_flipped, mut total) = (0, 0, 0);
        for chip in 0..20u64 {
            let mut r1 = crate::rng::stream(9, &[chip]);
            let mut r2 = crate::rng::stream(9, &[chip]);
            let circuit =
                super::super::build_decider(&comp, &process, 300.0, &mut r1, 1.0, false).unwrap();
            let limit =
                super::super::build_decider(&comp, &process, 300.0, &mut r2, 1.0, true).unwrap();
            let (super::super::Decider::Wta(c), super::super::Decider::Limit(f)) = (circuit, limit)
            else {
                panic!("unexpected deciders");
            };
            let (mut ws, mut sol) = (Workspace::new(), StageSolution::default());
            for _ in 0..50 {
                let x: Vec<f64> = (0..10)
                    .map(|_| 1e-9 * (1.0 + 0.3 * inputs_rng.gen::<f64>()))
                    .collect();
                c.solve(&x, &mut ws, &mut sol).unwrap();
                let w = crate::training::argmax(&sol.shares).unwrap();
                let referred: Vec<f64> = x.iter().zip(&f).map(|(a, b)| a * b).collect();
                let flipped: Vec<f64> = x.iter().zip(&f).map(|(a, b)| a / b).collect();
                total += 1;
                same += usize::from(crate::training::argmax(&referred) == Some(w));
                same_flipped += usize::from(crate::training::argmax(&flipped) == Some(w));
            }
        }
        let share = same as f64 / total as f64;
        assert!(share >= 0.97, "agreement {share}");
        assert!(
            (same_flipped as f64 / total as f64) < 0.9,
            "flipped {same_flipped}/{total}"
        );
    }

    /// Bookkeeping (no outside source): a linear-element design with every static nonideality
    /// on reports each as active; switching all off zeroes their sigmas in the design and sets
    /// the chip toggles; switching all on returns the design unchanged.
    #[test]
    fn variants_switch_each_nonideality() {
        use crate::stages::competition::noise::{InputShotNoise, NoiseBandwidth};
        use crate::stages::weights::{
            Conditions, DriftSpec, ErrorSpec, LinearElement, SigmaKind, WeightStageDesign,
        };
        let err = ErrorSpec {
            sigma: 0.01,
            kind: SigmaKind::Relative,
        };
        let mut weights = WeightStageDesign::default();
        weights.input.gain_sigma_rel = 0.01;
        weights.offset_sigma_rel = 0.01;
        weights.element = ElementDesign::Linear(LinearElement {
            programming_error: err,
            read_noise: err,
            drift: DriftSpec {
                nu: 0.05,
                nu_sigma: 0.01,
                t0_s: 1.0,
            },
            stuck_at_min_fraction: 0.01,
            ..LinearElement::default()
        });
        let process = crate::device::presets::preset("generic-180nm").unwrap();
        let dev = crate::device::Transistor {
            polarity: crate::device::Polarity::Nmos,
            w: 1e-6,
            l: 1e-6,
        };
        let design = ClassifierDesign {
            competition: CompetitionDesign::CurrentWta(Box::new(WtaDesign::new(
                3,
                process.clone(),
                dev,
                dev,
                WtaBias::Ideal { current: 1e-7 },
            ))),
            process,
            weights,
            decision: Default::default(),
            input_noise: Some(InputShotNoise {
                bandwidth: NoiseBandwidth::Fixed(1e6),
                temperature: 300.0,
            }),
            transient: None,
            hidden_circuit: None,
            conditions: Conditions {
                temperature_k: 300.0,
                time_since_programming_s: 100.0,
            },
        };
        let active = active_nonidealities(&design, 1).unwrap();
        for n in [
            Nonideality::WeightMismatch,
            Nonideality::DacMismatch,
            Nonideality::ProgrammingError,
            Nonideality::ReadNoise,
            Nonideality::Drift,
            Nonideality::StuckElements,
            Nonideality::CompetitionMismatch,
            Nonideality::FiniteGain,
            Nonideality::ShotNoise,
        ] {
            assert!(active.contains(&n), "{n:?} not detected");
        }
        assert!(!active.contains(&Nonideality::Temperature));
        assert!(!active.contains(&Nonideality::HiddenStage));
        let (off, t) = variant(&design, |_| false);
        let still = active_nonidealities(&off, 1).unwrap();
        for n in [
            Nonideality::DacMismatch,
            Nonideality::ProgrammingError,
            Nonideality::Drift,
            Nonideality::StuckElements,
        ] {
            assert!(!still.contains(&n), "{n:?} still on");
        }
        assert_eq!(off.weights.offset_sigma_rel, 0.0);
        assert_eq!(
            (
                t.weight_mismatch,
                t.competition_mismatch,
                t.read_noise,
                t.shot_noise
            ),
            (0.0, 0.0, 0.0, 0.0)
        );
        assert!(t.infinite_gain);
        let (on, t) = variant(&design, |n| active.contains(&n));
        assert_eq!(format!("{on:?}"), format!("{design:?}"));
        // No hidden stage here: its scale is 0 and acts on nothing.
        assert_eq!(
            t,
            ChipToggles {
                hidden_mismatch: 0.0,
                ..ChipToggles::default()
            }
        );
    }

    #[test]
    fn keys_are_unique_and_every_stage_is_used() {
        let mut keys: Vec<_> = Nonideality::ALL.iter().map(|n| n.key()).collect();
        keys.sort_unstable();
        keys.dedup();
        assert_eq!(keys.len(), Nonideality::ALL.len());
        for g in StageGroup::ALL {
            assert!(Nonideality::ALL.iter().any(|n| n.stage() == g));
        }
    }
}
