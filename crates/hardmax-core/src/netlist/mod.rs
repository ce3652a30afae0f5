//! SPICE netlists of a sampled competition stage, and the simulator's answers read back.
//!
//! Pure text in and out (numerical core: no I/O, no printing): [`build`] writes a plain SPICE3
//! netlist of one die (one sampled competition stage with every transistor's own mismatch)
//! evaluated on several input vectors; [`results`] parses what a simulator returns (ngspice's
//! ASCII raw file, or the documented CSV of node voltages and output currents) and [`compare`]
//! sets it beside hardmax's own solve, sample by sample. Files and the simulator run live in
//! the CLI (`hardmax export-netlist`, `hardmax compare-netlist`).
//!
//! Layout of an exported netlist: the die is one subcircuit `.subckt hmdie` whose ports are the
//! stage's nodes (in hardmax's node order) and one output drain per class line; every test
//! sample is an instance `XS<s>` of it with its own input sources and its own output-drain
//! voltage sources (whose branch currents are the output currents), so one `.op` solves every
//! sample at once and each sample is an independent operating point. Top-level node names are
//! `s<s>_<node>`; output currents are the branch currents of `VO_S<s>_<k>`.
//!
//! Device forms ([`DeviceForm`]):
//! - `Behavioural`: every transistor is a behavioural current source carrying the EKV drain
//!   current (C. Enz, F. Krummenacher, E. Vittoz, Analog Integrated Circuits and Signal
//!   Processing 8, 1995) with its per-instance V_T0 and I_S: the same equations hardmax solves,
//!   so the answers must agree to the solver tolerance.
//! - `ModelCard`: every transistor is a MOSFET instance of the designer's model (`.include`d);
//!   its threshold deviation dV_T0 is a series DC voltage source in the gate lead (the gate sees
//!   V_G - dV_T0, which shifts the threshold by +dV_T0 in every region for any model) and its
//!   relative current-factor deviation scales the width, W -> W (1 + dbeta/beta) (beta ∝ W/L).
//!   Width scaling is exact for a model whose current is proportional to W (no narrow-width
//!   terms); for models with strong narrow-width effects use the multiplier instead by
//!   post-editing, as said in DEVELOPERS.md.

pub mod build;
pub mod cascade;
pub mod compare;
pub mod results;

pub use build::{build, build_kwinners, DeviceForm, Die, Netlist, NetlistError, NetlistOptions};
pub use cascade::build_cascade;
pub use compare::{compare, solve_samples, SampleComparison, SampleSolution};
pub use results::{parse_ascii_raw, parse_results_csv, SimResults, SimResultsError};
