//! The competition-stage interface: what a shared-node circuit implements once so the generic
//! DC solver ([`super::dc`]), the transient integrator ([`super::transient`]) and the
//! [`CompetitionStage`](super::CompetitionStage) front (blanket impl) all work on it.
//!
//! ## The circuit shape
//!
//! N line nodes `V_0..V_{N-1}` and one common node `V_C` (node N). Line k is fed its input
//! current `I_k` and drained by a *load* branch `I_L,k(V_k, V_C)`; its *output* branch
//! `I_O,k(V_k, V_C)` flows into the common node, and a [`CurrentSource`] drains the common node.
//! The node equations (currents into each node) are
//!
//! ```text
//! line k:  I_k - I_L,k(V_k, V_C)
//! common:  Σ_k I_O,k(V_k, V_C) - I_bias(V_C)
//! ```
//!
//! so the Jacobian is an arrowhead (line k couples only to itself and to V_C): each branch
//! reports its current with the two partial derivatives ([`Branch`]), and the solvers eliminate
//! the lines in O(N). The output currents are the stage's outputs. A circuit whose line
//! voltages are set by its inputs alone (the load does not depend on V_C, or the lines are
//! driven) says so with [`DcStrategy::LinesFirst`].
//!
//! ## Batched evaluation
//!
//! Every method evaluates one line of one operating point and is `#[inline]`-able, and the
//! solvers keep their state in named workspace buffers (one entry per line). The batched DC
//! solve ([`super::dc::solve_batch`]) of many decisions of one chip lays the same buffers out as
//! struct-of-arrays lanes ([`Lanes`]: one lane per decision, [`LANES`] decisions in lockstep)
//! and calls the lane methods [`SharedNodeCircuit::load_lanes`],
//! [`SharedNodeCircuit::output_lanes`] and [`SharedNodeCircuit::closed_form_start_lanes`].
//! Their defaults loop over the one-point methods, so every circuit works unchanged; a circuit
//! overrides them with the vectorised kernels of [`crate::maths`] (the WTA does; DEVELOPERS.md,
//! "How to add a competition circuit").
//!
//! Numerical core: no I/O, no printing.

use super::mos::Mos;
use super::source::{CurrentSource, SourceKeys};
use super::CompetitionError;
use crate::device::noise::shot_noise_psd;
pub use crate::maths::{Lanes, LANES};

/// A branch current and its partial derivatives in the two node voltages it touches.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Branch {
    /// Current, A (load: out of the line node; output: into the common node).
    pub current: f64,
    /// Derivative in the line voltage V_k, A/V.
    pub d_line: f64,
    /// Derivative in the common-node voltage V_C, A/V.
    pub d_common: f64,
}

/// A branch at [`LANES`] operating points (struct of arrays; fields as [`Branch`]).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BranchLanes {
    pub current: Lanes,
    pub d_line: Lanes,
    pub d_common: Lanes,
}

impl Default for BranchLanes {
    fn default() -> BranchLanes {
        BranchLanes {
            current: [0.0; LANES],
            d_line: [0.0; LANES],
            d_common: [0.0; LANES],
        }
    }
}

impl BranchLanes {
    /// Lane-wise `f(lane)`.
    #[inline]
    pub fn from_fn(mut f: impl FnMut(usize) -> Branch) -> BranchLanes {
        let mut b = BranchLanes::default();
        for lane in 0..LANES {
            let x = f(lane);
            b.current[lane] = x.current;
            b.d_line[lane] = x.d_line;
            b.d_common[lane] = x.d_common;
        }
        b
    }
}

/// How the DC solver finds the operating point.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DcStrategy {
    /// Lines and common node coupled: damped Newton on the arrowhead (at most `max_newton`
    /// steps), then a nested monotone bracketing solve if Newton did not converge.
    Coupled { max_newton: usize },
    /// Each line voltage follows from its input alone ([`SharedNodeCircuit::line_voltage`]);
    /// then one monotone scalar solve of the common node.
    LinesFirst,
}

/// What a circuit says when its DC solve fails (config keys and advice).
#[derive(Clone, Copy, Debug)]
pub struct CircuitMessages {
    /// Keys of the common node's source.
    pub source_keys: SourceKeys,
    /// The common node would have to fall below its lowest voltage.
    pub below_reason: &'static str,
    pub below_fix: &'static str,
    /// The common node would have to rise above the supply.
    pub above_reason: &'static str,
    pub above_fix: &'static str,
    /// A line node would have to rise above the supply.
    pub line_reason: &'static str,
    pub line_fix: &'static str,
}

/// A shared-node competition circuit at its conditions (module docs). Implement it once; the
/// DC solve, the transient and [`CompetitionStage`](super::CompetitionStage) come with it.
pub trait SharedNodeCircuit {
    /// Short name of the stage for messages.
    fn name(&self) -> &'static str;
    /// Name of the common node (e.g. `"V_C"`).
    fn common_node_name(&self) -> &'static str;
    /// Prefix of the line nodes' names (e.g. `"V_"` gives `V_0`, `V_1`, ...).
    fn line_node_prefix(&self) -> &'static str;
    /// Unit of the inputs: `"A"` (currents; then they must be >= 0) or `"V"`.
    fn inputs_unit(&self) -> &'static str {
        "A"
    }

    /// Number of lines N (inputs = outputs).
    fn lines(&self) -> usize;
    /// Supply V_dd, V: the upper limit of every node.
    fn supply(&self) -> f64;
    /// Lowest voltage of the common node, V.
    fn common_min(&self) -> f64;
    /// Relative KCL tolerance of the DC solve at every node.
    fn tolerance(&self) -> f64;
    /// How the DC solver proceeds.
    fn strategy(&self) -> DcStrategy;
    /// Error texts.
    fn messages(&self) -> &'static CircuitMessages;
    /// Temperature, K.
    fn temperature(&self) -> f64;

    /// The source draining the common node, evaluated.
    fn source(&self) -> &CurrentSource<crate::device::Ekv>;
    /// The same source, folded for the inner loops.
    fn source_fast(&self) -> &CurrentSource<Mos>;

    /// Load of line k at `(v_line, v_common)` with its partials.
    fn load(&self, k: usize, v_line: f64, v_common: f64) -> Branch;
    /// Load current only (may be cheaper than [`SharedNodeCircuit::load`]).
    fn load_current(&self, k: usize, v_line: f64, v_common: f64) -> f64;
    /// Current scale of line k's KCL at `(v_line, v_common)` (the denominator of its relative
    /// residual): the load's magnitude unless the load is a difference of branches (then the
    /// sum of their magnitudes).
    fn load_scale(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        self.load_current(k, v_line, v_common).abs()
    }
    /// Output of line k at `(v_line, v_common)` with its partials.
    fn output(&self, k: usize, v_line: f64, v_common: f64) -> Branch;
    /// Output current only.
    fn output_current(&self, k: usize, v_line: f64, v_common: f64) -> f64;

    /// Closed-form start for a [`DcStrategy::Coupled`] solve: fills `lines` with starting line
    /// voltages (using `scratch`, N entries, freely) and returns the starting common-node
    /// voltage. For [`DcStrategy::LinesFirst`], `lines` holds the solved line voltages on
    /// entry and only the common-node start is returned.
    fn closed_form_start(&self, inputs: &[f64], scratch: &mut [f64], lines: &mut [f64]) -> f64;

    /// [`SharedNodeCircuit::load`] of line k at [`LANES`] operating points (one per decision of
    /// a batched solve). The default loops over `load`; override it with a vectorised kernel.
    #[inline]
    fn load_lanes(&self, k: usize, v_line: &Lanes, v_common: &Lanes) -> BranchLanes {
        BranchLanes::from_fn(|lane| self.load(k, v_line[lane], v_common[lane]))
    }

    /// [`SharedNodeCircuit::output`] of line k at [`LANES`] operating points. The default loops
    /// over `output`.
    #[inline]
    fn output_lanes(&self, k: usize, v_line: &Lanes, v_common: &Lanes) -> BranchLanes {
        BranchLanes::from_fn(|lane| self.output(k, v_line[lane], v_common[lane]))
    }

    /// [`SharedNodeCircuit::closed_form_start`] of [`LANES`] decisions at once (a
    /// [`DcStrategy::Coupled`] circuit): `inputs[k][lane]` is line k's input of decision `lane`;
    /// fills `lines[k][lane]` and returns each decision's common-node start. `scratch` has at
    /// least N entries, free to use. The default calls `closed_form_start` lane by lane; a
    /// circuit may override it with a cheaper vectorised start (the Newton solve then starts
    /// from slightly different voltages and converges to the same tolerance).
    fn closed_form_start_lanes(
        &self,
        inputs: &[Lanes],
        scratch: &mut [Lanes],
        lines: &mut [Lanes],
    ) -> Lanes {
        let n = self.lines();
        let flat = scratch[..n].as_flattened_mut();
        let (x, rest) = flat.split_at_mut(n);
        let (sc, l) = rest.split_at_mut(n);
        let l = &mut l[..n];
        let mut vc = [0.0; LANES];
        for lane in 0..LANES {
            for k in 0..n {
                x[k] = inputs[k][lane];
            }
            vc[lane] = self.closed_form_start(x, sc, l);
            for k in 0..n {
                lines[k][lane] = l[k];
            }
        }
        vc
    }

    /// Starting voltage of line k fed `input` at a given common-node voltage (the nested
    /// bracketing solve's start).
    fn line_start(&self, k: usize, input: f64, v_common: f64) -> f64 {
        let _ = (k, v_common, input);
        0.5 * self.supply()
    }

    /// Line voltage set by the input alone ([`DcStrategy::LinesFirst`] only); `inputs` is the
    /// whole vector, for error messages.
    fn line_voltage(&self, k: usize, input: f64, inputs: &[f64]) -> Result<f64, CompetitionError> {
        let _ = (k, inputs);
        Ok(input)
    }

    /// True when the node equations have several solutions and the one reached depends on the
    /// circuit's previous state (hysteresis): the DC solve then starts from the state held in
    /// the [`Workspace`](super::Workspace) and settles the node equations from there
    /// ([`super::dc`], "Circuits that hold state").
    fn carries_state(&self) -> bool {
        false
    }

    /// True when the line nodes are driven by the inputs (no KCL at the lines, no transient).
    fn lines_driven(&self) -> bool {
        false
    }

    /// Capacitances `(each line node, common node)`, F, for the transient.
    fn capacitances(&self) -> (f64, f64);
    /// kappa = 1/n of the lines' load devices (for the transient's time scale).
    fn kappa(&self) -> f64;

    /// One-sided shot-noise PSD (A²/Hz) of line k's load at `(v_line, v_common)`.
    fn load_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64;
    /// One-sided shot-noise PSD (A²/Hz) of line k's output at `(v_line, v_common)`.
    fn output_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64;

    /// True when [`SharedNodeCircuit::load`] already includes the input source's supply
    /// compliance (the load is the sink current divided by `1 - e^{-(V_dd - V_k)/U_T}`), so the
    /// DC solve has it too; the transient then feeds the plain input current.
    fn input_compliance_in_load(&self) -> bool {
        false
    }

    /// The decision the transient tracks on the output shares: the shared rule by default; a
    /// circuit that selects several winners judges the competition for its last place
    /// ([`DecisionRule::decide_top_k`](super::DecisionRule::decide_top_k)).
    fn decide(&self, rule: &super::DecisionRule, shares: &[f64]) -> super::Decision {
        rule.decide(shares)
    }
}

/// `2 q (I_f + I_r)` of a folded device, via [`shot_noise_psd`] on the equivalent EKV device.
#[inline]
pub(super) fn mos_shot_psd(m: &Mos, vg: f64, vd: f64, vs: f64) -> f64 {
    let d = crate::device::Ekv {
        polarity: crate::device::Polarity::Nmos,
        vt0: m.vt0,
        n: m.n(),
        beta: m.is / (2.0 * m.n() * m.ut() * m.ut()),
        eta: m.eta,
        ut: m.ut(),
    };
    shot_noise_psd(&d, vg, vd, vs)
}

/// True when `inputs` has `n` entries and `voltages` and `out` have `n + 1`.
#[inline]
fn node_lengths_ok(n: usize, inputs: &[f64], voltages: &[f64], out: &[f64]) -> bool {
    inputs.len() == n && voltages.len() == n + 1 && out.len() == n + 1
}

/// Net current (A) flowing into each node for node voltages `[V_0..V_{N-1}, V_C]`: entry k is
/// `I_k - I_L,k` (0 for driven lines), entry N is `Σ I_O,k - I_bias`. Zero at a DC solution;
/// with the node capacitances it gives the right-hand side of the circuit's ODE,
/// `C dV/dt = node current`. Returns `None` on a length mismatch.
pub fn node_currents<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    voltages: &[f64],
    out: &mut [f64],
) -> Option<()> {
    let n = c.lines();
    if !node_lengths_ok(n, inputs, voltages, out) {
        return None;
    }
    let vc = voltages[n];
    let driven = c.lines_driven();
    let mut s = 0.0;
    for k in 0..n {
        let vk = voltages[k];
        out[k] = if driven {
            0.0
        } else {
            inputs[k] - c.load_current(k, vk, vc)
        };
        s += c.output_current(k, vk, vc);
    }
    out[n] = s - c.source_fast().eval(vc).0;
    Some(())
}

/// Relative KCL residual at each node for node voltages `[V_0..V_{N-1}, V_C]`: entry k is
/// `(I_k - I_L,k)/max(|I_k|, |I_L,k|)` (0 when both are 0, and for driven lines), entry N is
/// `(Σ I_O,k - I_bias)/I_bias`. Returns `None` on a length mismatch.
pub fn kcl_residuals<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    voltages: &[f64],
    out: &mut [f64],
) -> Option<()> {
    let n = c.lines();
    if !node_lengths_ok(n, inputs, voltages, out) {
        return None;
    }
    let vc = voltages[n];
    let driven = c.lines_driven();
    let mut s = 0.0;
    for k in 0..n {
        let vk = voltages[k];
        out[k] = if driven {
            0.0
        } else {
            let il = c.load_current(k, vk, vc);
            let scale = inputs[k].abs().max(c.load_scale(k, vk, vc));
            if scale > 0.0 {
                (inputs[k] - il) / scale
            } else {
                0.0
            }
        };
        s += c.output_current(k, vk, vc);
    }
    let ib = c.source_fast().eval(vc).0;
    out[n] = (s - ib) / ib.abs().max(f64::MIN_POSITIVE);
    Some(())
}
