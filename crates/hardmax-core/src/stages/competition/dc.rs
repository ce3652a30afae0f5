//! The DC solver of every [`SharedNodeCircuit`] (module docs of [`super::circuit`] for the
//! circuit shape).
//!
//! ## Coupled circuits ([`DcStrategy::Coupled`])
//!
//! Damped Newton on all N+1 node voltages with the KCL residuals taken in log form
//! (`ln(I_L,k/I_k)` at line k, `ln(Σ I_O/I_bias)` at the common node, close to linear in the
//! voltages for exponential devices). The Jacobian is an arrowhead (each V_k couples only to
//! V_C), so each step eliminates the V_k and solves one scalar equation for V_C: O(N) per step,
//! no allocation. The line updates are taken in `ln V_k` (the linear step is the same, the update
//! multiplicative), which keeps the lines above ground. Steps of V_C are limited to 0.1 V and
//! halved back inside `[common_min, supply]`. When Newton has not converged within its budget, a
//! bracketing solve takes over: an outer monotone scalar solve on V_C
//! (`h(V_C) = ln Σ I_O,k(V_k(V_C), V_C) - ln I_bias(V_C)`, decreasing) with an inner monotone
//! 1-D solve of each V_k on `[0, V_dd]`. It converges whenever an operating point exists inside
//! the supply, and otherwise says which parameter the supply cannot carry.
//!
//! ## Lines first ([`DcStrategy::LinesFirst`])
//!
//! Each line voltage from its input alone, then the common node by one monotone scalar solve of
//! `ln Σ I_O,k(V_C) = ln I_bias(V_C)`, started from the circuit's closed form.
//!
//! ## Circuits that hold state ([`SharedNodeCircuit::carries_state`])
//!
//! A circuit with positive feedback has several DC solutions for the same inputs; the one it
//! sits at is the one reached from its previous state. The solve starts from the state kept in
//! the [`Workspace`] (node voltages of the last solve; every node at 0 V when there is none, a
//! power-up), integrates the node equations with the generic transient
//! ([`super::transient::simulate_from`], noiseless) until they settle, then polishes that point
//! with Newton on the exact DC equations (linear-form residuals, arrowhead elimination, steps
//! limited to 50 mV; no positivity guard, since a line's load may fall with its voltage). The
//! reached point becomes the state. A run that does not settle (no stable operating point
//! reached) or a Newton polish that does not meet the tolerance is a `NotConverged` error; the
//! state is then left as it was.
//!
//! Numerical core: no I/O, no printing.

// Index loops run over parallel per-line arrays.
#![allow(clippy::needless_range_loop)]

use crate::solvers::{solve_monotone, ScalarError, ScalarTolerance};

use super::circuit::{DcStrategy, Lanes, SharedNodeCircuit, LANES};
use super::common::{begin_solve, check_residual, common_node_failure, finish_solve};
use super::{CompetitionError, InputSummary, SolveMethod, StageSolution, Workspace};

/// Where the Newton phase ended.
enum NewtonEnd {
    Converged(usize, f64),
    Gave(usize),
}

/// DC operating point of `c` for `inputs` (one per line) into `out`, using `ws` as scratch
/// (no allocation once both have grown to the circuit's size).
pub fn solve<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    ws: &mut Workspace,
    out: &mut StageSolution,
) -> Result<(), CompetitionError> {
    let n = c.lines();
    begin_solve(c.name(), n, inputs, c.inputs_unit(), ws, out)?;
    if c.carries_state() {
        return solve_from_state(c, inputs, ws, out);
    }
    match c.strategy() {
        DcStrategy::Coupled { max_newton } => {
            let (vc, iterations, residual, method) = match newton(c, inputs, max_newton, ws, out) {
                NewtonEnd::Converged(it, res) => {
                    (out.node_voltages[n], it, res, SolveMethod::Newton)
                }
                NewtonEnd::Gave(spent) => {
                    let (vc, it) = bracketing(c, inputs, ws, spent)?;
                    let res = finish(c, inputs, vc, ws, out);
                    check_residual(c.name(), it, res, c.tolerance(), inputs, c.inputs_unit())?;
                    (vc, it, res, SolveMethod::Bracketing)
                }
            };
            finish_solve(out, &ws.line_voltage[..n], vc, iterations, residual, method);
        }
        DcStrategy::LinesFirst => lines_first(c, inputs, ws, out)?,
    }
    Ok(())
}

fn newton<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    max_newton: usize,
    ws: &mut Workspace,
    out: &mut StageSolution,
) -> NewtonEnd {
    let n = c.lines();
    let vmax = c.supply();
    let vc_min = c.common_min();
    let tolerance = c.tolerance();
    let mut vc = c.closed_form_start(inputs, &mut ws.start_share[..n], &mut ws.line_voltage[..n]);
    let source = c.source_fast();
    let Workspace {
        load_d_line,
        load_d_common,
        scaled_residual,
        line_voltage,
        ..
    } = ws;
    let (a, cc, q, v) = (
        &mut load_d_line[..n],
        &mut load_d_common[..n],
        &mut scaled_residual[..n],
        &mut line_voltage[..n],
    );
    for it in 1..=max_newton {
        out.node_voltages[n] = vc;
        let mut s_sum = 0.0;
        let mut e_sum = 0.0;
        let mut bca = 0.0;
        let mut bqa = 0.0;
        let mut res: f64 = 0.0;
        for k in 0..n {
            let i = inputs[k];
            let vk = v[k];
            let eb = c.output(k, vk, vc);
            out.outputs[k] = eb.current;
            s_sum += eb.current;
            e_sum += eb.d_common;
            if i <= 0.0 {
                a[k] = 0.0;
                continue;
            }
            let ea = c.load(k, vk, vc);
            if !(ea.current > 0.0 && ea.d_line > 0.0 && ea.current.is_finite()) {
                return NewtonEnd::Gave(it);
            }
            let rho = (ea.current / i).ln();
            res = res.max(rho.abs());
            let qk = rho * ea.current;
            a[k] = ea.d_line;
            cc[k] = ea.d_common;
            q[k] = qk;
            bca += eb.d_line * ea.d_common / ea.d_line;
            bqa += eb.d_line * qk / ea.d_line;
        }
        let (ib, p) = source.eval(vc);
        if !(s_sum > 0.0 && ib > 0.0 && s_sum.is_finite()) {
            return NewtonEnd::Gave(it);
        }
        let r = (s_sum / ib).ln();
        res = res.max(r.abs());
        // |ln(x)| <= tol implies |x - 1| <= tol (1 + tol): report the relative residual.
        if res <= 0.5 * tolerance {
            return NewtonEnd::Converged(it, res.exp_m1());
        }
        let den = e_sum / s_sum - p / ib - bca / s_sum;
        let mut dvc = (-r + bqa / s_sum) / den;
        if !dvc.is_finite() {
            return NewtonEnd::Gave(it);
        }
        dvc = dvc.clamp(-0.1, 0.1);
        for k in 0..n {
            if a[k] == 0.0 {
                continue;
            }
            // Newton in y_k = ln V_k: the linear step is the same (the Jacobian's columns
            // scale by V_k), only the update is multiplicative. ln I_L is close to linear in
            // ln V_k in triode and convex in saturation, so Newton does not overshoot into
            // negative voltages the way it does in V_k, where ln I_L is concave.
            let vk = v[k];
            let dy = (-(q[k] + cc[k] * dvc) / (a[k] * vk)).clamp(-20.0, 2.0);
            let mut nv = vk * dy.exp();
            if nv >= vmax {
                nv = 0.5 * (vk + vmax);
            }
            v[k] = nv;
        }
        let mut nvc = vc + dvc;
        if nvc < vc_min {
            nvc = 0.5 * (vc + vc_min);
        } else if nvc > vmax {
            nvc = 0.5 * (vc + vmax);
        }
        vc = nvc;
    }
    NewtonEnd::Gave(max_newton)
}

/// Inner solve of line k at a given V_C: V_k with I_L,k(V_k, V_C) = I_k on [0, V_dd].
/// Returns (V_k, clamped at the supply).
fn solve_line<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    k: usize,
    i: f64,
    vc: f64,
    start: f64,
) -> (f64, bool) {
    if i <= 0.0 {
        return (0.0, false);
    }
    let vmax = c.supply();
    let top = c.load_current(k, vmax, vc);
    if top < i {
        return (vmax, true);
    }
    let f = |vk: f64| {
        let e = c.load(k, vk, vc);
        if e.current > 0.0 {
            ((e.current / i).ln(), e.d_line / e.current)
        } else {
            (f64::NEG_INFINITY, f64::INFINITY)
        }
    };
    let tol = ScalarTolerance {
        ftol: 1e-13,
        xtol: 0.0,
        max_iter: 300,
    };
    match solve_monotone(f, 0.0, vmax, start, true, tol) {
        Ok(r) => (r.x, false),
        Err(ScalarError::NotBracketed { below: false, .. }) => (vmax, true),
        Err(ScalarError::NotBracketed { lo, .. }) => (lo, false),
        Err(ScalarError::NoConvergence { x, .. }) => (x, false),
    }
}

/// h(V_C) = ln Σ I_O - ln I_bias and its derivative, solving every line at V_C.
fn outer<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    vc: f64,
    v: &mut [f64],
    clamped: &mut [bool],
) -> (f64, f64) {
    let mut s = 0.0;
    let mut ds = 0.0;
    for k in 0..c.lines() {
        let (vk, cl) = solve_line(c, k, inputs[k], vc, v[k]);
        v[k] = vk;
        clamped[k] = cl;
        let eb = c.output(k, vk, vc);
        s += eb.current;
        let dvk = if inputs[k] > 0.0 && !cl {
            let ea = c.load(k, vk, vc);
            -ea.d_common / ea.d_line
        } else {
            0.0
        };
        ds += eb.d_common + eb.d_line * if dvk.is_finite() { dvk } else { 0.0 };
    }
    let (ib, p) = c.source_fast().eval(vc);
    let h = s.ln() - ib.ln();
    let dh = ds / s - p / ib;
    (h, dh)
}

fn bracketing<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    ws: &mut Workspace,
    spent: usize,
) -> Result<(f64, usize), CompetitionError> {
    let n = c.lines();
    let vc0 = c.closed_form_start(inputs, &mut ws.start_share[..n], &mut ws.line_voltage[..n]);
    let Workspace {
        line_voltage,
        clamped,
        ..
    } = ws;
    let (v, clamped) = (&mut line_voltage[..n], &mut clamped[..n]);
    for k in 0..n {
        v[k] = c.line_start(k, inputs[k], vc0);
    }
    let tol = ScalarTolerance {
        ftol: 0.1 * c.tolerance(),
        xtol: 1e-15,
        max_iter: 400,
    };
    let root = solve_monotone(
        |vc| outer(c, inputs, vc, v, clamped),
        c.common_min(),
        c.supply(),
        vc0,
        false,
        tol,
    );
    let msgs = c.messages();
    let vc = match root {
        Ok(r) => {
            // Leave the lines solved at the root.
            outer(c, inputs, r.x, v, clamped);
            (r.x, spent + r.iterations)
        }
        Err(err) => {
            return Err(common_node_failure(
                c.name(),
                err,
                c.source_fast().key(&msgs.source_keys),
                msgs,
                spent,
                c.tolerance(),
                InputSummary::of_in(inputs, c.inputs_unit()),
            ))
        }
    };
    if clamped.iter().any(|&x| x) {
        return Err(CompetitionError::Compliance {
            stage: c.name(),
            parameter: "inputs",
            reason: msgs.line_reason,
            fix: msgs.line_fix,
            inputs: InputSummary::of_in(inputs, c.inputs_unit()),
        });
    }
    Ok(vc)
}

/// Evaluate outputs and the relative residual at the line voltages in `ws` and `vc`.
fn finish<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    vc: f64,
    ws: &Workspace,
    out: &mut StageSolution,
) -> f64 {
    let mut res: f64 = 0.0;
    let mut s = 0.0;
    for k in 0..c.lines() {
        let vk = ws.line_voltage[k];
        let io = c.output_current(k, vk, vc);
        out.outputs[k] = io;
        s += io;
        if inputs[k] > 0.0 {
            let il = c.load_current(k, vk, vc);
            res = res.max(((il - inputs[k]) / inputs[k]).abs());
        }
    }
    let (ibias, _) = c.source_fast().eval(vc);
    res.max(((s - ibias) / ibias).abs())
}

fn lines_first<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    ws: &mut Workspace,
    out: &mut StageSolution,
) -> Result<(), CompetitionError> {
    let n = c.lines();
    let tolerance = c.tolerance();
    for k in 0..n {
        ws.line_voltage[k] = c.line_voltage(k, inputs[k], inputs)?;
    }
    let vs0 = c.closed_form_start(inputs, &mut ws.start_share[..n], &mut ws.line_voltage[..n]);
    let lines = &ws.line_voltage[..n];
    let source = c.source_fast();
    let f = |vs: f64| {
        let mut s = 0.0;
        let mut ds = 0.0;
        for (k, &vg) in lines.iter().enumerate() {
            let e = c.output(k, vg, vs);
            s += e.current;
            ds += e.d_common;
        }
        let (it, dit) = source.eval(vs);
        (s.ln() - it.ln(), ds / s - dit / it)
    };
    let tol = ScalarTolerance {
        ftol: 0.5 * tolerance,
        xtol: 1e-15,
        max_iter: 300,
    };
    let root = solve_monotone(f, c.common_min(), c.supply(), vs0, false, tol);
    let msgs = c.messages();
    let (vs, iterations) = match root {
        Ok(r) => (r.x, r.iterations),
        Err(err) => {
            return Err(common_node_failure(
                c.name(),
                err,
                source.key(&msgs.source_keys),
                msgs,
                0,
                tolerance,
                InputSummary::of_in(inputs, c.inputs_unit()),
            ))
        }
    };
    let mut s = 0.0;
    for k in 0..n {
        let o = c.output_current(k, lines[k], vs);
        out.outputs[k] = o;
        s += o;
    }
    let it = source.eval(vs).0;
    let residual = ((s - it) / it).abs();
    check_residual(
        c.name(),
        iterations,
        residual,
        tolerance,
        inputs,
        c.inputs_unit(),
    )?;
    finish_solve(
        out,
        lines,
        vs,
        iterations,
        residual,
        SolveMethod::Bracketing,
    );
    Ok(())
}

/// DC solve of a circuit that holds state (module docs, "Circuits that hold state").
fn solve_from_state<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    ws: &mut Workspace,
    out: &mut StageSolution,
) -> Result<(), CompetitionError> {
    use super::transient::{simulate_from, TransientError, TransientOptions};
    let n = c.lines();
    if ws.state.len() != n + 1 || ws.state.iter().any(|v| !v.is_finite()) {
        ws.state.clear();
        ws.state.resize(n + 1, 0.0);
    }
    let mut tws = ws.settle.take().unwrap_or_default();
    let opts = TransientOptions::default();
    let settled = simulate_from(c, inputs, &ws.state, &opts, None, &mut tws);
    let summary = match settled {
        Ok(s) => s,
        Err(e) => {
            ws.settle = Some(tws);
            return Err(match e {
                TransientError::Stage(s) => s,
                // A step that failed even at the smallest size: no settled point was reached.
                _ => CompetitionError::NotConverged {
                    stage: c.name(),
                    iterations: 0,
                    residual: f64::INFINITY,
                    tolerance: c.tolerance(),
                    inputs: InputSummary::of_in(inputs, c.inputs_unit()),
                },
            });
        }
    };
    // Settled, or ended (at t_max, 10^4 time scales) with every node's net current within
    // AT_REST_FACTOR times the settling tolerance: at rest either way (an oscillation keeps
    // |C dV/dt| large; a relative net current of 1e-5 moves a node by well under 1 mV per time
    // scale). Near a fold of the hysteresis the approach is slow and the integrator's own error
    // can hold the residual just above 1e-7 for the whole run; Newton then polishes the point
    // to the solver's tolerance, or the solve fails.
    const AT_REST_FACTOR: f64 = 100.0;
    if !(summary.settled || summary.final_residual <= AT_REST_FACTOR * opts.settle_tolerance) {
        ws.settle = Some(tws);
        return Err(CompetitionError::NotConverged {
            stage: c.name(),
            iterations: summary.newton_iterations,
            residual: summary.final_residual,
            tolerance: c.tolerance(),
            inputs: InputSummary::of_in(inputs, c.inputs_unit()),
        });
    }
    let start = &tws.solution().node_voltages;
    ws.line_voltage[..n].copy_from_slice(&start[..n]);
    let vc0 = start[n];
    ws.settle = Some(tws);
    let (vc, iterations, residual) = newton_linear(c, inputs, vc0, ws, out)?;
    finish_solve(
        out,
        &ws.line_voltage[..n],
        vc,
        iterations,
        residual,
        SolveMethod::Newton,
    );
    ws.state.copy_from_slice(&out.node_voltages);
    Ok(())
}

/// Newton on the exact node equations in linear form from `ws.line_voltage` and `vc`
/// (module docs): returns `(V_C, iterations, largest relative KCL residual)`.
fn newton_linear<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    mut vc: f64,
    ws: &mut Workspace,
    out: &mut StageSolution,
) -> Result<(f64, usize, f64), CompetitionError> {
    let n = c.lines();
    let tolerance = c.tolerance();
    let source = c.source_fast();
    let Workspace {
        load_d_line,
        load_d_common,
        scaled_residual,
        start_share,
        line_voltage,
        ..
    } = ws;
    let (jkk, jkc, f, odl, v) = (
        &mut load_d_line[..n],
        &mut load_d_common[..n],
        &mut scaled_residual[..n],
        &mut start_share[..n],
        &mut line_voltage[..n],
    );
    let max_iter = 50;
    let mut res = f64::INFINITY;
    for it in 0..=max_iter {
        let mut s_sum = 0.0;
        let mut d = 0.0;
        res = 0.0;
        for k in 0..n {
            let l = c.load(k, v[k], vc);
            let o = c.output(k, v[k], vc);
            out.outputs[k] = o.current;
            s_sum += o.current;
            d += o.d_common;
            f[k] = inputs[k] - l.current;
            let scale = inputs[k].abs().max(c.load_scale(k, v[k], vc));
            if scale > 0.0 {
                res = res.max(f[k].abs() / scale);
            }
            jkk[k] = -l.d_line;
            jkc[k] = -l.d_common;
            odl[k] = o.d_line;
        }
        let (ib, dib) = source.eval(vc);
        let fc = s_sum - ib;
        res = res.max(fc.abs() / ib.abs().max(f64::MIN_POSITIVE));
        if !res.is_finite() {
            break;
        }
        if res <= tolerance {
            return Ok((vc, it, res));
        }
        if it == max_iter {
            break;
        }
        d -= dib;
        let mut den = d;
        let mut rhs = -fc;
        for k in 0..n {
            den -= odl[k] * jkc[k] / jkk[k];
            rhs += odl[k] * f[k] / jkk[k];
        }
        let dvc = rhs / den;
        if !dvc.is_finite() {
            break;
        }
        let lim = 0.05;
        let mut scale: f64 = if dvc.abs() > lim {
            lim / dvc.abs()
        } else {
            1.0
        };
        let mut ok = true;
        for k in 0..n {
            let dv = (-f[k] - jkc[k] * dvc) / jkk[k];
            if !dv.is_finite() {
                ok = false;
            }
            if dv.abs() * scale > lim {
                scale = lim / dv.abs();
            }
            f[k] = dv;
        }
        if !ok {
            break;
        }
        for k in 0..n {
            v[k] += scale * f[k];
        }
        vc += scale * dvc;
    }
    Err(CompetitionError::NotConverged {
        stage: c.name(),
        iterations: max_iter,
        residual: res,
        tolerance,
        inputs: InputSummary::of_in(inputs, c.inputs_unit()),
    })
}

/// Newton passes a decision runs in the batch before it leaves for the scalar [`solve`] (a
/// decision of the current-mode WTA takes 2 to 5; the rare one that needs more, or the
/// bracketing fallback, is solved exactly as it would be alone).
pub const BATCH_PASSES: usize = 12;

/// Scratch of [`solve_batch`]: the Newton state of [`LANES`] decisions as struct-of-arrays (one
/// [`Lanes`] per line), the starting points of the waiting decisions, and the queue. No
/// allocation once grown to the circuit's size and the batch's length.
#[derive(Clone, Debug, Default)]
pub struct BatchWorkspace {
    inputs: Vec<Lanes>,
    line_voltage: Vec<Lanes>,
    load_d_line: Vec<Lanes>,
    load_d_common: Vec<Lanes>,
    scaled_residual: Vec<Lanes>,
    load_current: Vec<Lanes>,
    output_current: Vec<Lanes>,
    scratch: Vec<Lanes>,
    /// Decisions that enter the lanes, in row order.
    queue: Vec<usize>,
    /// Their starting points, N line voltages then V_C each, in queue order.
    starts: Vec<f64>,
    /// The scalar solve's workspace (decisions that leave the batch).
    scalar: Workspace,
}

impl BatchWorkspace {
    pub fn new() -> BatchWorkspace {
        BatchWorkspace::default()
    }

    fn ensure(&mut self, n: usize) {
        for b in [
            &mut self.inputs,
            &mut self.line_voltage,
            &mut self.load_d_line,
            &mut self.load_d_common,
            &mut self.scaled_residual,
            &mut self.load_current,
            &mut self.output_current,
            &mut self.scratch,
        ] {
            if b.len() < n {
                b.resize(n, [0.0; LANES]);
            }
        }
    }
}

/// What happened to one lane of a batch.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Lane {
    /// Still iterating.
    Running,
    /// Converged at this pass (its solution is stored).
    Done,
    /// Leaves the batch: solved alone by [`solve`] (a failed guard or the pass budget spent).
    Scalar,
    /// No decision in this lane.
    Empty,
}

/// DC operating points of `c` for `m` decisions at once: `inputs` holds them row by row (`m`
/// rows of N), `outs[j]` and `results[j]` receive decision j's solution and status (both at
/// least `m` long). Same answers as [`solve`] on each row within the solver's tolerance, and
/// the same errors (a decision that does not converge in the batch, or whose inputs are not
/// valid, is solved by [`solve`]).
///
/// The starting points of all decisions are computed first, [`LANES`] at a time
/// ([`SharedNodeCircuit::closed_form_start_lanes`]); then Newton runs on [`LANES`] decisions in
/// lockstep with the vectorised kernels of [`crate::maths`], and a lane whose decision
/// converges (or leaves) takes the next waiting decision at once, so no lane idles while
/// another needs more passes. Circuits of strategy [`DcStrategy::LinesFirst`] and circuits
/// that hold state (solved in row order, each from the state the previous left) are solved one
/// by one.
///
/// A decision's answer is bit for bit the same whatever else is in the batch: every lane's
/// arithmetic depends on that lane alone (kernels computed for all lanes are selected lane by
/// lane), and a decision's passes are its own.
pub fn solve_batch<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    bw: &mut BatchWorkspace,
    outs: &mut [StageSolution],
    results: &mut [Result<(), CompetitionError>],
) {
    let n = c.lines();
    let m = inputs.len().checked_div(n).unwrap_or(0);
    let max_newton = match c.strategy() {
        DcStrategy::Coupled { max_newton }
            if n > 0 && inputs.len() == m * n && !c.carries_state() =>
        {
            max_newton
        }
        _ => {
            // One by one; a length mismatch is reported by the scalar solve.
            if n == 0 || inputs.len() % n != 0 {
                if let (Some(o), Some(r)) = (outs.first_mut(), results.first_mut()) {
                    *r = solve(c, inputs, &mut bw.scalar, o);
                }
                return;
            }
            for (row, (o, r)) in inputs
                .chunks(n)
                .zip(outs.iter_mut().zip(results.iter_mut()))
            {
                *r = solve(c, row, &mut bw.scalar, o);
            }
            return;
        }
    };
    bw.ensure(n);
    bw.scalar.ensure(n);
    // Invalid rows go to the scalar solve (which reports them); the others queue.
    bw.queue.clear();
    for (j, row) in inputs.chunks(n).enumerate() {
        if batchable_row(c, row) {
            bw.queue.push(j);
        } else {
            results[j] = solve(c, row, &mut bw.scalar, &mut outs[j]);
        }
    }
    if bw.queue.is_empty() {
        return;
    }
    lanes(
        c,
        n,
        max_newton.min(BATCH_PASSES),
        inputs,
        bw,
        outs,
        results,
        false,
    );
}

/// The starting points [`solve_batch`] computes before its Newton passes, alone (for the
/// benchmarks: the share of the batched time spent before the first pass). Rows with invalid
/// inputs are skipped; returns how many starts were made (0 for a circuit `solve_batch` solves
/// one by one).
pub fn batch_starts<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    inputs: &[f64],
    bw: &mut BatchWorkspace,
) -> usize {
    let n = c.lines();
    let batched = matches!(c.strategy(), DcStrategy::Coupled { .. }) && !c.carries_state();
    if n == 0 || inputs.len() % n != 0 || !batched {
        return 0;
    }
    bw.ensure(n);
    bw.queue.clear();
    for (j, row) in inputs.chunks(n).enumerate() {
        if batchable_row(c, row) {
            bw.queue.push(j);
        }
    }
    lanes(c, n, 0, inputs, bw, &mut [], &mut [], true);
    bw.queue.len()
}

/// Inputs the lanes take: finite, and not negative for current inputs (any other row goes to
/// the scalar solve, which reports it).
fn batchable_row<C: SharedNodeCircuit + ?Sized>(c: &C, row: &[f64]) -> bool {
    row.iter()
        .all(|x| x.is_finite() && (c.inputs_unit() != "A" || *x >= 0.0))
}

/// [`lanes_body`], compiled for AVX2 (four lanes per instruction instead of SSE2's two) when
/// the CPU has it. The code is the same and no fused multiply-add is formed (Rust never fuses
/// `a * b + c`), so both versions give the same bits.
#[allow(clippy::too_many_arguments)]
fn lanes<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    n: usize,
    passes: usize,
    rows: &[f64],
    bw: &mut BatchWorkspace,
    outs: &mut [StageSolution],
    results: &mut [Result<(), CompetitionError>],
    starts_only: bool,
) {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: `lanes_avx2` only requires AVX2, which the CPU has (checked just above).
        unsafe { lanes_avx2(c, n, passes, rows, bw, outs, results, starts_only) };
        return;
    }
    lanes_body(c, n, passes, rows, bw, outs, results, starts_only);
}

/// [`lanes_body`] with AVX2 enabled for the code inlined into it.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
#[allow(clippy::too_many_arguments)]
unsafe fn lanes_avx2<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    n: usize,
    passes: usize,
    rows: &[f64],
    bw: &mut BatchWorkspace,
    outs: &mut [StageSolution],
    results: &mut [Result<(), CompetitionError>],
    starts_only: bool,
) {
    lanes_body(c, n, passes, rows, bw, outs, results, starts_only);
}

/// The starting points of the queued decisions, then (unless `starts_only`) the Newton passes
/// with lanes refilled from the queue (see [`solve_batch`]).
#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn lanes_body<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    n: usize,
    passes: usize,
    rows: &[f64],
    bw: &mut BatchWorkspace,
    outs: &mut [StageSolution],
    results: &mut [Result<(), CompetitionError>],
    starts_only: bool,
) {
    let BatchWorkspace {
        inputs,
        line_voltage,
        load_d_line,
        load_d_common,
        scaled_residual,
        load_current,
        output_current,
        scratch,
        queue,
        starts,
        scalar,
    } = bw;
    let (x, v) = (&mut inputs[..n], &mut line_voltage[..n]);
    let stride = n + 1;
    starts.clear();
    starts.resize(queue.len() * stride, 0.0);
    for (g, group) in queue.chunks(LANES).enumerate() {
        // Lanes beyond the group's end start a copy of its last decision (ignored).
        for l in 0..LANES {
            let j = group[l.min(group.len() - 1)];
            for k in 0..n {
                x[k][l] = rows[j * n + k];
            }
        }
        let vc = c.closed_form_start_lanes(x, &mut scratch[..n], v);
        for l in 0..group.len() {
            let s = &mut starts[(g * LANES + l) * stride..][..stride];
            for k in 0..n {
                s[k] = v[k][l];
            }
            s[n] = vc[l];
        }
    }
    if starts_only {
        return;
    }
    let mut lanes = PassLanes {
        x,
        v,
        a: &mut load_d_line[..n],
        cc: &mut load_d_common[..n],
        q: &mut scaled_residual[..n],
        il: &mut load_current[..n],
        io: &mut output_current[..n],
    };
    let mut vc = [0.0; LANES];
    let mut state = [Lane::Empty; LANES];
    // Per lane: the decision (row) it holds and the passes it has run.
    let mut dest = [0usize; LANES];
    let mut it = [0usize; LANES];
    let mut next = 0;
    loop {
        // Decisions that left: solved alone. Free lanes: the next waiting decisions.
        for l in 0..LANES {
            if state[l] == Lane::Scalar {
                let j = dest[l];
                results[j] = solve(c, &rows[j * n..(j + 1) * n], scalar, &mut outs[j]);
            }
            if state[l] == Lane::Running {
                continue;
            }
            if next < queue.len() {
                let j = queue[next];
                let s = &starts[next * stride..][..stride];
                for k in 0..n {
                    lanes.x[k][l] = rows[j * n + k];
                    lanes.v[k][l] = s[k];
                }
                vc[l] = s[n];
                (dest[l], it[l], state[l]) = (j, 0, Lane::Running);
                next += 1;
            } else {
                state[l] = Lane::Empty;
            }
        }
        let Some(live) = (0..LANES).find(|&l| state[l] == Lane::Running) else {
            return;
        };
        // An empty lane computes a copy of a running one (ignored; keeps its arithmetic
        // finite).
        for l in 0..LANES {
            if state[l] == Lane::Empty {
                for k in 0..n {
                    lanes.x[k][l] = lanes.x[k][live];
                    lanes.v[k][l] = lanes.v[k][live];
                }
                vc[l] = vc[live];
            }
        }
        for l in 0..LANES {
            if state[l] == Lane::Running {
                it[l] += 1;
            }
        }
        pass(
            c, &it, &dest, &mut lanes, &mut vc, &mut state, outs, results,
        );
        for l in 0..LANES {
            // The pass budget spent: the decision leaves the batch.
            if state[l] == Lane::Running && it[l] >= passes {
                state[l] = Lane::Scalar;
            }
        }
    }
}

/// The per-line lane arrays of the batch (struct of arrays, N entries each).
struct PassLanes<'a> {
    /// Inputs.
    x: &'a mut [Lanes],
    /// Line voltages.
    v: &'a mut [Lanes],
    /// dI_L/dV_k (0 on a line without input).
    a: &'a mut [Lanes],
    /// dI_L/dV_C.
    cc: &'a mut [Lanes],
    /// ln(I_L/I) I_L.
    q: &'a mut [Lanes],
    /// Load currents I_L.
    il: &'a mut [Lanes],
    /// Output currents.
    io: &'a mut [Lanes],
}

/// One Newton pass of [`newton`] on every running lane (its residuals, Jacobian, step limits
/// and convergence test, lane-wise; the arrowhead's elimination takes one division per line,
/// and a saturated line steps in V_k): `it[l]` is the pass lane l is at, `dest[l]` its
/// decision. A converged lane is stored and marked done, a lane whose guard fails is marked for
/// the scalar solve.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn pass<C: SharedNodeCircuit + ?Sized>(
    c: &C,
    it: &[usize; LANES],
    dest: &[usize; LANES],
    lanes: &mut PassLanes<'_>,
    vc: &mut Lanes,
    state: &mut [Lane; LANES],
    outs: &mut [StageSolution],
    results: &mut [Result<(), CompetitionError>],
) {
    let vmax = c.supply();
    let vc_min = c.common_min();
    let tolerance = c.tolerance();
    let source = c.source_fast();
    let PassLanes {
        x,
        v,
        a,
        cc,
        q,
        il,
        io,
    } = lanes;
    let n = x.len();
    let mut s_sum = [0.0; LANES];
    let mut e_sum = [0.0; LANES];
    let mut bca = [0.0; LANES];
    let mut bqa = [0.0; LANES];
    let mut res = [0.0_f64; LANES];
    let mut bad = [false; LANES];
    for k in 0..n {
        let eb = c.output_lanes(k, &v[k], vc);
        let ea = c.load_lanes(k, &v[k], vc);
        let mut ratio = [1.0; LANES];
        for l in 0..LANES {
            io[k][l] = eb.current[l];
            s_sum[l] += eb.current[l];
            e_sum[l] += eb.d_common[l];
            let i = x[k][l];
            if i > 0.0 {
                ratio[l] = ea.current[l] / i;
                bad[l] |= !(ea.current[l] > 0.0 && ea.d_line[l] > 0.0 && ea.current[l].is_finite());
            }
        }
        let rho = crate::maths::ln_mostly_near_1(&ratio);
        for l in 0..LANES {
            if x[k][l] > 0.0 {
                res[l] = res[l].max(rho[l].abs());
                let qk = rho[l] * ea.current[l];
                a[k][l] = ea.d_line[l];
                cc[k][l] = ea.d_common[l];
                q[k][l] = qk;
                il[k][l] = ea.current[l];
                // The arrowhead's elimination of line k: its output's d/dV_k over its load's.
                let w = eb.d_line[l] / ea.d_line[l];
                bca[l] += w * ea.d_common[l];
                bqa[l] += w * qk;
            } else {
                a[k][l] = 0.0;
            }
        }
    }
    let (ib, p) = source.eval_lanes(vc);
    let mut ratio = [1.0; LANES];
    for l in 0..LANES {
        bad[l] |= !(s_sum[l] > 0.0 && ib[l] > 0.0 && s_sum[l].is_finite());
        ratio[l] = s_sum[l] / ib[l];
    }
    let r = crate::maths::ln_mostly_near_1(&ratio);
    let mut dvc = [0.0; LANES];
    let mut running = false;
    for l in 0..LANES {
        if state[l] != Lane::Running {
            continue;
        }
        res[l] = res[l].max(r[l].abs());
        if bad[l] {
            state[l] = Lane::Scalar;
            continue;
        }
        if res[l] <= 0.5 * tolerance {
            // |ln(x)| <= tol implies |x - 1| <= tol (1 + tol): the relative residual.
            let j = dest[l];
            store(n, l, v, io, vc[l], it[l], res[l].exp_m1(), &mut outs[j]);
            results[j] = Ok(());
            state[l] = Lane::Done;
            continue;
        }
        let den = e_sum[l] / s_sum[l] - p[l] / ib[l] - bca[l] / s_sum[l];
        let d = (-r[l] + bqa[l] / s_sum[l]) / den;
        if !d.is_finite() {
            state[l] = Lane::Scalar;
            continue;
        }
        dvc[l] = d.clamp(-0.1, 0.1);
        running = true;
    }
    if !running {
        return;
    }
    let mut live = [false; LANES];
    for l in 0..LANES {
        live[l] = state[l] == Lane::Running;
    }
    for k in 0..n {
        // Newton in ln V_k, as in `newton`, on a line whose load is in triode (d ln I_L /
        // d ln V_k above 1/2: close to linear in ln V_k); in V_k itself on a saturated one
        // (ln I_L close to linear in V_k through the drain coupling, convex in ln V_k, where
        // steps in ln V_k fall short) unless that step would more than halve V_k. Frozen
        // lanes and lines without input keep their voltage.
        let mut dy = [0.0; LANES];
        let mut linear = [false; LANES];
        for l in 0..LANES {
            if live[l] && a[k][l] != 0.0 {
                let vk = v[k][l];
                dy[l] = (-(q[k][l] + cc[k][l] * dvc[l]) / (a[k][l] * vk)).clamp(-20.0, 2.0);
                linear[l] = a[k][l] * vk < 0.5 * il[k][l] && dy[l] > -0.5;
            }
        }
        let g = crate::maths::exp_mostly_small(&dy);
        for l in 0..LANES {
            let vk = v[k][l];
            let mut nv = if linear[l] {
                vk * (1.0 + dy[l])
            } else {
                vk * g[l]
            };
            if nv >= vmax {
                nv = 0.5 * (vk + vmax);
            }
            if live[l] && a[k][l] != 0.0 {
                v[k][l] = nv;
            }
        }
    }
    for l in 0..LANES {
        if live[l] {
            let mut nvc = vc[l] + dvc[l];
            if nvc < vc_min {
                nvc = 0.5 * (vc[l] + vc_min);
            } else if nvc > vmax {
                nvc = 0.5 * (vc[l] + vmax);
            }
            vc[l] = nvc;
        }
    }
}

/// Store lane `l`'s converged solution (its outputs in `io`, lines in `v`).
#[allow(clippy::too_many_arguments)]
fn store(
    n: usize,
    l: usize,
    v: &[Lanes],
    io: &[Lanes],
    vc: f64,
    iterations: usize,
    residual: f64,
    out: &mut StageSolution,
) {
    out.resize(n, n + 1);
    for k in 0..n {
        out.outputs[k] = io[k][l];
        out.node_voltages[k] = v[k][l];
    }
    out.node_voltages[n] = vc;
    super::fill_shares(&out.outputs, &mut out.shares);
    out.info = super::SolveInfo {
        iterations,
        residual,
        converged: true,
        method: SolveMethod::Newton,
    };
}
