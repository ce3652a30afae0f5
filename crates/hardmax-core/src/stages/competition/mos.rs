//! A transistor pre-evaluated for the inner loops of the competition solvers.
//!
//! Same equations as [`crate::device::Ekv`] (EKV: C. Enz, F. Krummenacher, E. Vittoz, Analog
//! Integrated Circuits and Signal Processing 8, 1995), with constants folded in and one change
//! for precision: when drain and source are close (|V_D - V_S| < U_T), the difference
//! `F(x_f) - F(x_r)` is computed as `(s_f - s_r)(s_f + s_r)` with
//! `s_f - s_r = ln(1 + logistic(h_r) expm1(h_f - h_r))`, which keeps full relative precision
//! for a sink transistor whose drain sits a tiny fraction of U_T above its source (a WTA loser
//! fed 1 fA). The test below checks it against `Ekv::eval`.

// Index loops run over parallel per-lane arrays (they vectorise as written).
#![allow(clippy::needless_range_loop)]

use crate::device::{Ekv, EkvEval};
use crate::maths::{self, Lanes, LANES};

/// [`EkvEval`] of one device at [`LANES`] operating points (struct of arrays).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EkvLanes {
    pub id: Lanes,
    pub d_vg: Lanes,
    pub d_vd: Lanes,
    pub d_vs: Lanes,
}

/// `(softplus(h), logistic(h))` on every lane with the vectorised kernels (the same formulas as
/// [`softplus_logistic`]; `ROUGH`: the starting-point kernels).
#[inline(always)]
fn softplus_logistic_lanes<const ROUGH: bool>(h: &Lanes) -> (Lanes, Lanes) {
    let mut na = [0.0; LANES];
    for i in 0..LANES {
        na[i] = -h[i].abs();
    }
    let e = if ROUGH {
        maths::exp_start(&na)
    } else {
        maths::exp(&na)
    };
    // As the scalar form, lane by lane: the short series below 0.01 (deep weak inversion), the
    // kernel otherwise (computed only when some lane needs it). Each lane's value depends on
    // that lane alone.
    let full = if ROUGH {
        maths::ln_1p_start
    } else {
        maths::ln_1p
    };
    let lp = maths::cheap_where_near(&e, ln_1p_small, |x| x < 0.01 || x.is_nan(), full);
    let mut s = [0.0; LANES];
    let mut l = [0.0; LANES];
    for i in 0..LANES {
        s[i] = h[i].max(0.0) + lp[i];
        let inv = 1.0 / (1.0 + e[i]);
        l[i] = if h[i] >= 0.0 { inv } else { e[i] * inv };
    }
    (s, l)
}

/// [`Mos::eval_lanes`] drops the reverse part when, in every lane, `h_r <= -24` and `h_r - h_f <=
/// -24` (`h = (v_p - V)/(2 U_T)` at source and drain). Then `s_r <= e^(h_r)` and `s_f >=
/// ln 2 min(1, e^(h_f))` (`ln(1 + x) >= x ln 2` on [0, 1]), so `s_r/s_f <= e^-24/ln 2 = 5.5e-11`:
/// the current `I_S (s_f^2 - s_r^2)` changes by under 3.1e-21 relative, and the reverse term of each
/// derivative (`s_r l_r` beside `s_f l_f`, `l_r/l_f <= 2 e^-24`) by under 5e-21 relative to the
/// forward one. Below the last bit of a double: the same result as the full expression within
/// its rounding (tested below). A saturated output transistor with its drain 1.24 V (48 U_T) above
/// its source takes this path.
const REVERSE_NEGLIGIBLE: f64 = 24.0;

/// Folded EKV constants of one device.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Mos {
    /// Specific current I_S, A.
    pub is: f64,
    /// ln I_S (I_S in A), for the closed-form starts.
    pub ln_is: f64,
    /// Threshold magnitude V_T0, V.
    pub vt0: f64,
    /// 1/n.
    pub inv_n: f64,
    /// Drain coupling eta.
    pub eta: f64,
    /// 1/U_T, 1/V.
    pub inv_ut: f64,
    /// +1 NMOS, -1 PMOS.
    pub sign: f64,
}

/// `ln(1 + e)` for |e| < 0.01 by the series e - e^2/2 + e^3/3 - ... (nine terms).
#[inline]
fn ln_1p_small(e: f64) -> f64 {
    let p = 1.0 / 9.0;
    let p = 1.0 / 8.0 - e * p;
    let p = 1.0 / 7.0 - e * p;
    let p = 1.0 / 6.0 - e * p;
    let p = 1.0 / 5.0 - e * p;
    let p = 0.25 - e * p;
    let p = 1.0 / 3.0 - e * p;
    let p = 0.5 - e * p;
    let p = 1.0 - e * p;
    e * p
}

#[inline]
fn softplus_logistic(h: f64) -> (f64, f64) {
    let e = (-h.abs()).exp();
    // ln(1 + e) by its alternating series for e < 0.01 (nine terms: truncation below e^10/10,
    // under 1e-16 relative), cheaper than a library call; `ln_1p` above.
    let s = h.max(0.0) + if e < 0.01 { ln_1p_small(e) } else { e.ln_1p() };
    let l = if h >= 0.0 {
        1.0 / (1.0 + e)
    } else {
        e / (1.0 + e)
    };
    (s, l)
}

impl Mos {
    /// Fold an [`Ekv`] device.
    pub fn new(d: &Ekv) -> Mos {
        Mos {
            is: d.specific_current(),
            ln_is: d.specific_current().ln(),
            vt0: d.vt0,
            inv_n: 1.0 / d.n,
            eta: d.eta,
            inv_ut: 1.0 / d.ut,
            sign: d.polarity.sign(),
        }
    }

    /// Slope factor n.
    #[inline]
    pub fn n(&self) -> f64 {
        1.0 / self.inv_n
    }

    /// Thermal voltage U_T.
    #[inline]
    pub fn ut(&self) -> f64 {
        1.0 / self.inv_ut
    }

    /// Drain current only (bulk-referred voltages).
    #[inline]
    pub fn id(&self, vg: f64, vd: f64, vs: f64) -> f64 {
        self.eval(vg, vd, vs).id
    }

    /// Drain current and partial derivatives (bulk-referred voltages), as [`Ekv::eval`].
    #[inline]
    pub fn eval(&self, vg: f64, vd: f64, vs: f64) -> EkvEval {
        let p = self.sign;
        let (vg, vd, vs) = (p * vg, p * vd, p * vs);
        let vp = (vg - self.vt0 + self.eta * (vd - vs)) * self.inv_n;
        let hf = 0.5 * (vp - vs) * self.inv_ut;
        let hr = 0.5 * (vp - vd) * self.inv_ut;
        let (sf, lf) = softplus_logistic(hf);
        let (sr, lr) = softplus_logistic(hr);
        // hf - hr = (V_D - V_S)/(2 U_T), taken directly so that it keeps full relative precision.
        let dh = 0.5 * (vd - vs) * self.inv_ut;
        let ds = if dh.abs() < 0.5 {
            let q = lr * dh.exp_m1();
            if q.abs() < 0.01 {
                ln_1p_small(q)
            } else {
                q.ln_1p()
            }
        } else {
            sf - sr
        };
        let id = self.is * ds * (sf + sr);
        // F'(x) = s(x/2) logistic(x/2).
        let (gf, gr) = (sf * lf, sr * lr);
        let en = self.eta * self.inv_n;
        let kp = self.is * self.inv_ut * p;
        EkvEval {
            id,
            d_vg: kp * self.inv_n * (gf - gr),
            d_vd: kp * (gf * en - gr * (en - 1.0)),
            d_vs: kp * (gf * (-en - 1.0) + gr * en),
        }
    }

    /// [`Mos::eval`] at [`LANES`] operating points with the vectorised kernels of
    /// [`crate::maths`] (each within a few ulp of the library functions, so the result is
    /// within about 1e-15 relative of [`Mos::eval`]; tested below).
    #[inline(always)]
    pub fn eval_lanes(&self, vg: &Lanes, vd: &Lanes, vs: &Lanes) -> EkvLanes {
        ekv_lanes::<Mos, false>(self, vg, vd, vs)
    }

    /// [`Mos::eval_lanes`] with the starting-point kernels (about 1e-5 relative), for starting
    /// points.
    #[inline(always)]
    pub fn eval_lanes_start(&self, vg: &Lanes, vd: &Lanes, vs: &Lanes) -> EkvLanes {
        ekv_lanes::<Mos, true>(self, vg, vd, vs)
    }
}

/// The folded constants a lane evaluation reads: the same for every lane ([`Mos`]) or one device
/// per lane ([`MosLanes`]).
trait LaneParams {
    fn sign(&self) -> f64;
    fn is(&self, i: usize) -> f64;
    fn vt0(&self, i: usize) -> f64;
    fn inv_n(&self, i: usize) -> f64;
    fn eta(&self, i: usize) -> f64;
    fn inv_ut(&self, i: usize) -> f64;
}

impl LaneParams for Mos {
    #[inline(always)]
    fn sign(&self) -> f64 {
        self.sign
    }
    #[inline(always)]
    fn is(&self, _: usize) -> f64 {
        self.is
    }
    #[inline(always)]
    fn vt0(&self, _: usize) -> f64 {
        self.vt0
    }
    #[inline(always)]
    fn inv_n(&self, _: usize) -> f64 {
        self.inv_n
    }
    #[inline(always)]
    fn eta(&self, _: usize) -> f64 {
        self.eta
    }
    #[inline(always)]
    fn inv_ut(&self, _: usize) -> f64 {
        self.inv_ut
    }
}

/// One device per lane (devices of one polarity), gathered from a circuit's per-line devices
/// for a lane-wise evaluation where each decision looks at a different line.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MosLanes {
    pub is: Lanes,
    pub vt0: Lanes,
    pub inv_n: Lanes,
    pub eta: Lanes,
    pub inv_ut: Lanes,
    /// +1 NMOS, -1 PMOS (the same for every lane).
    pub sign: f64,
}

impl LaneParams for MosLanes {
    #[inline(always)]
    fn sign(&self) -> f64 {
        self.sign
    }
    #[inline(always)]
    fn is(&self, i: usize) -> f64 {
        self.is[i]
    }
    #[inline(always)]
    fn vt0(&self, i: usize) -> f64 {
        self.vt0[i]
    }
    #[inline(always)]
    fn inv_n(&self, i: usize) -> f64 {
        self.inv_n[i]
    }
    #[inline(always)]
    fn eta(&self, i: usize) -> f64 {
        self.eta[i]
    }
    #[inline(always)]
    fn inv_ut(&self, i: usize) -> f64 {
        self.inv_ut[i]
    }
}

impl MosLanes {
    /// Lane i takes `devices[pick[i]]` (all of one polarity: the sign is the first's).
    #[inline(always)]
    pub fn gather(devices: &[Mos], pick: &[usize; LANES]) -> MosLanes {
        let d = |i: usize| &devices[pick[i]];
        MosLanes {
            is: std::array::from_fn(|i| d(i).is),
            vt0: std::array::from_fn(|i| d(i).vt0),
            inv_n: std::array::from_fn(|i| d(i).inv_n),
            eta: std::array::from_fn(|i| d(i).eta),
            inv_ut: std::array::from_fn(|i| d(i).inv_ut),
            sign: d(0).sign,
        }
    }

    /// [`Mos::eval_lanes_start`], lane i with its own device.
    #[inline(always)]
    pub fn eval_start(&self, vg: &Lanes, vd: &Lanes, vs: &Lanes) -> EkvLanes {
        ekv_lanes::<MosLanes, true>(self, vg, vd, vs)
    }
}

/// The lane evaluation behind [`Mos::eval_lanes`] (`ROUGH`: the starting-point kernels).
#[inline(always)]
fn ekv_lanes<P: LaneParams, const ROUGH: bool>(
    d: &P,
    vg: &Lanes,
    vd: &Lanes,
    vs: &Lanes,
) -> EkvLanes {
    let p = d.sign();
    let mut hf = [0.0; LANES];
    let mut hr = [0.0; LANES];
    let mut dh = [0.0; LANES];
    let mut en = [0.0; LANES];
    let mut kp = [0.0; LANES];
    for i in 0..LANES {
        let (g, dr, s) = (p * vg[i], p * vd[i], p * vs[i]);
        let vp = (g - d.vt0(i) + d.eta(i) * (dr - s)) * d.inv_n(i);
        hf[i] = 0.5 * (vp - s) * d.inv_ut(i);
        hr[i] = 0.5 * (vp - dr) * d.inv_ut(i);
        dh[i] = 0.5 * (dr - s) * d.inv_ut(i);
        en[i] = d.eta(i) * d.inv_n(i);
        kp[i] = d.is(i) * d.inv_ut(i) * p;
    }
    let mut forward_only = [false; LANES];
    for i in 0..LANES {
        forward_only[i] = hr[i] <= -REVERSE_NEGLIGIBLE && hr[i] - hf[i] <= -REVERSE_NEGLIGIBLE;
    }
    let mut out = EkvLanes {
        id: [0.0; LANES],
        d_vg: [0.0; LANES],
        d_vd: [0.0; LANES],
        d_vs: [0.0; LANES],
    };
    if forward_only.iter().all(|&f| f) {
        // Saturated in every lane, the reverse part below the last bit (`REVERSE_NEGLIGIBLE`):
        // the forward part alone (the same per-lane formula as below).
        let (sf, lf) = softplus_logistic_lanes::<ROUGH>(&hf);
        for i in 0..LANES {
            out.id[i] = d.is(i) * sf[i] * sf[i];
            let gf = sf[i] * lf[i];
            out.d_vg[i] = kp[i] * d.inv_n(i) * gf;
            out.d_vd[i] = kp[i] * (gf * en[i]);
            out.d_vs[i] = kp[i] * (gf * (-en[i] - 1.0));
        }
        return out;
    }
    let (sf, lf) = softplus_logistic_lanes::<ROUGH>(&hf);
    let (sr, lr) = softplus_logistic_lanes::<ROUGH>(&hr);
    // The folded difference only where some lane has drain and source close.
    let mut lq = [0.0; LANES];
    if dh.iter().any(|d| d.abs() < 0.5) {
        let em = if ROUGH {
            maths::exp_m1_start(&dh)
        } else {
            maths::exp_m1_small(&dh)
        };
        let mut q = [0.0; LANES];
        for i in 0..LANES {
            q[i] = lr[i] * em[i];
        }
        lq = if ROUGH {
            maths::ln_1p_start(&q)
        } else {
            maths::ln_1p(&q)
        };
    }
    for i in 0..LANES {
        if forward_only[i] {
            // Lane by lane the same value as the all-saturated path above.
            out.id[i] = d.is(i) * sf[i] * sf[i];
            let gf = sf[i] * lf[i];
            out.d_vg[i] = kp[i] * d.inv_n(i) * gf;
            out.d_vd[i] = kp[i] * (gf * en[i]);
            out.d_vs[i] = kp[i] * (gf * (-en[i] - 1.0));
            continue;
        }
        // As in `Mos::eval`: the folded difference when drain and source are close.
        let ds = if dh[i].abs() < 0.5 {
            lq[i]
        } else {
            sf[i] - sr[i]
        };
        out.id[i] = d.is(i) * ds * (sf[i] + sr[i]);
        let (gf, gr) = (sf[i] * lf[i], sr[i] * lr[i]);
        out.d_vg[i] = kp[i] * d.inv_n(i) * (gf - gr);
        out.d_vd[i] = kp[i] * (gf * en[i] - gr * (en[i] - 1.0));
        out.d_vs[i] = kp[i] * (gf * (-en[i] - 1.0) + gr * en[i]);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::device::Polarity;
    use approx::assert_relative_eq;

    fn dev(p: Polarity) -> Ekv {
        Ekv {
            polarity: p,
            vt0: 0.45,
            n: 1.35,
            beta: 3e-4,
            eta: 0.02,
            ut: crate::physics::thermal_voltage(300.0),
        }
    }

    /// Same equations as the reference EKV implementation in `device::ekv` (Enz, Krummenacher,
    /// Vittoz 1995) over weak to strong inversion, forward and reverse, both polarities.
    #[test]
    fn matches_reference_ekv() {
        for p in [Polarity::Nmos, Polarity::Pmos] {
            let d = dev(p);
            let m = Mos::new(&d);
            let s = p.sign();
            for &vg in &[0.0, 0.2, 0.45, 0.7, 1.5] {
                for &vd in &[0.0, 0.001, 0.02, 0.3, 1.8] {
                    for &vs in &[0.0, 0.01, 0.25] {
                        let a = d.eval(s * vg, s * vd, s * vs);
                        let b = m.eval(s * vg, s * vd, s * vs);
                        let scale = a.id.abs().max(1e-30);
                        assert!((a.id - b.id).abs() <= 1e-9 * scale, "{a:?} {b:?}");
                        for (x, y) in [(a.d_vg, b.d_vg), (a.d_vd, b.d_vd), (a.d_vs, b.d_vs)] {
                            assert!((x - y).abs() <= 1e-9 * x.abs().max(1e-25), "{a:?} {b:?}");
                        }
                    }
                }
            }
        }
    }

    /// The lane evaluation equals the scalar one within a few ulp of the vectorised kernels
    /// (reference: `Mos::eval`, itself checked against `device::ekv` above), over weak to
    /// strong inversion, forward, reverse and V_DS ~ 0, both polarities.
    #[test]
    fn lanes_match_scalar_eval() {
        use rand::{Rng, SeedableRng};
        let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        for p in [Polarity::Nmos, Polarity::Pmos] {
            let m = Mos::new(&dev(p));
            let s = p.sign();
            for _ in 0..2000 {
                let mut v = [[0.0; LANES]; 3];
                for lane in 0..LANES {
                    let vs = r.gen_range(0.0..0.6);
                    let vd = if r.gen_bool(0.3) {
                        vs + r.gen_range(-1e-3..1e-3) * 10f64.powi(-r.gen_range(0..12))
                    } else {
                        r.gen_range(0.0..1.8)
                    };
                    v[0][lane] = s * r.gen_range(-0.2..1.8);
                    v[1][lane] = s * vd;
                    v[2][lane] = s * vs;
                }
                let b = m.eval_lanes(&v[0], &v[1], &v[2]);
                for lane in 0..LANES {
                    let a = m.eval(v[0][lane], v[1][lane], v[2][lane]);
                    let id_close = (a.id - b.id[lane]).abs() <= 1e-13 * a.id.abs().max(1e-300);
                    assert!(id_close, "{a:?} {b:?} {lane}");
                    // Derivatives are differences of two terms: compared on the largest one's
                    // scale (both forms round the same cancellation).
                    let scale = a.d_vg.abs().max(a.d_vd.abs()).max(a.d_vs.abs()).max(1e-300);
                    for (x, y) in [
                        (a.d_vg, b.d_vg[lane]),
                        (a.d_vd, b.d_vd[lane]),
                        (a.d_vs, b.d_vs[lane]),
                    ] {
                        assert!((x - y).abs() <= 1e-13 * scale, "{a:?} {b:?} {lane}");
                    }
                }
            }
        }
    }

    /// Saturated lanes (every lane's drain 1.4 V or more above its source, the forward part
    /// in weak to moderate inversion) take the forward-only path; it equals the scalar evaluation
    /// (`Mos::eval`, the full expression) within 1e-13 relative, and keeps the precision of a
    /// gate far below threshold. Reference as above.
    #[test]
    fn saturated_lanes_match_scalar_eval() {
        use rand::{Rng, SeedableRng};
        let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        for p in [Polarity::Nmos, Polarity::Pmos] {
            let d = dev(p);
            let m = Mos::new(&d);
            let s = p.sign();
            for _ in 0..2000 {
                let mut v = [[0.0; LANES]; 3];
                for lane in 0..LANES {
                    let vs = r.gen_range(0.0..0.4);
                    // v_p <= (0.6 - V_T0 + eta 2.5)/n < 0.15 V, so h_r <= -24 in every lane.
                    v[0][lane] = s * r.gen_range(-0.4..0.6);
                    v[1][lane] = s * (vs + r.gen_range(1.4..2.5));
                    v[2][lane] = s * vs;
                }
                let b = m.eval_lanes(&v[0], &v[1], &v[2]);
                for lane in 0..LANES {
                    let a = m.eval(v[0][lane], v[1][lane], v[2][lane]);
                    assert!(
                        (a.id - b.id[lane]).abs() <= 1e-13 * a.id.abs(),
                        "{a:?} {b:?}"
                    );
                    for (x, y) in [
                        (a.d_vg, b.d_vg[lane]),
                        (a.d_vd, b.d_vd[lane]),
                        (a.d_vs, b.d_vs[lane]),
                    ] {
                        assert!((x - y).abs() <= 1e-13 * x.abs(), "{a:?} {b:?} {lane}");
                    }
                }
            }
        }
    }

    /// The starting-point lane evaluation stays within 2e-5 relative of the full scalar one (its
    /// kernels' bounds, `maths` module table: exp_start 4e-6 and exp_m1_start 1e-5 relative,
    /// ln_1p_start 4e-8 absolute, compounded through the EKV expression), both with one device
    /// for all lanes (`Mos::eval_lanes_start`) and with a device per lane (`MosLanes`, devices
    /// of different thresholds, slope factors, drain couplings and specific currents), over
    /// weak to strong inversion, forward, reverse and V_DS ~ 0, both polarities. Reference:
    /// `Mos::eval`.
    #[test]
    fn start_lanes_stay_near_eval() {
        use rand::{Rng, SeedableRng};
        let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(6);
        for p in [Polarity::Nmos, Polarity::Pmos] {
            let devices: Vec<Mos> = (0..5)
                .map(|j| {
                    Mos::new(&Ekv {
                        vt0: 0.40 + 0.02 * j as f64,
                        n: 1.3 + 0.03 * j as f64,
                        eta: 0.01 + 0.005 * j as f64,
                        beta: 3e-4 * (1.0 + 0.1 * j as f64),
                        ..dev(p)
                    })
                })
                .collect();
            let s = p.sign();
            for _ in 0..3000 {
                let mut v = [[0.0; LANES]; 3];
                for lane in 0..LANES {
                    let vs = r.gen_range(0.0..0.6);
                    let vd = if r.gen_bool(0.3) {
                        vs + r.gen_range(-1e-3..1e-3) * 10f64.powi(-r.gen_range(0..12))
                    } else {
                        r.gen_range(0.0..1.8)
                    };
                    v[0][lane] = s * r.gen_range(-0.2..1.8);
                    v[1][lane] = s * vd;
                    v[2][lane] = s * vs;
                }
                let pick: [usize; LANES] = std::array::from_fn(|_| r.gen_range(0..devices.len()));
                let per_lane = MosLanes::gather(&devices, &pick).eval_start(&v[0], &v[1], &v[2]);
                let shared = devices[0].eval_lanes_start(&v[0], &v[1], &v[2]);
                for lane in 0..LANES {
                    for (m, b) in [(&devices[pick[lane]], &per_lane), (&devices[0], &shared)] {
                        let a = m.eval(v[0][lane], v[1][lane], v[2][lane]);
                        let ok = (a.id - b.id[lane]).abs() <= 2e-5 * a.id.abs().max(1e-300);
                        assert!(ok, "{a:?} {b:?} {lane}");
                        let scale = a.d_vg.abs().max(a.d_vd.abs()).max(a.d_vs.abs()).max(1e-300);
                        for (x, y) in [
                            (a.d_vg, b.d_vg[lane]),
                            (a.d_vd, b.d_vd[lane]),
                            (a.d_vs, b.d_vs[lane]),
                        ] {
                            assert!((x - y).abs() <= 2e-5 * scale, "{a:?} {b:?} {lane}");
                        }
                    }
                }
            }
        }
    }

    /// The series for ln(1 + e) matches the library ln_1p to 1e-16 relative below 0.01.
    #[test]
    fn small_log_series() {
        for &e in &[
            0.0, 1e-300, 1e-12, 1e-6, 1e-4, 3e-3, 0.0099999, -1e-9, -0.0099999,
        ] {
            let (a, b) = (ln_1p_small(e), f64::ln_1p(e));
            assert!((a - b).abs() <= 2e-16 * b.abs(), "{e}: {a} vs {b}");
        }
    }

    /// For V_DS << U_T the channel is a conductance: I_D ≈ g V_DS with g = I_S F'(v_p - v_s)/U_T
    /// (first-order expansion of the EKV current, Enz et al. 1995); the folded form keeps full
    /// precision where a plain difference of F values loses it.
    #[test]
    fn tiny_drain_source_voltage_keeps_precision() {
        let d = dev(Polarity::Nmos);
        let m = Mos::new(&d);
        let vds = 1e-12;
        let at0 = m.eval(0.3, 0.0, 0.0);
        let g = at0.d_vd;
        // Both sides are ~1e-19 A: compare with epsilon = 0 so approx's absolute floor (2.2e-16)
        // cannot make the check pass trivially.
        assert_relative_eq!(
            m.id(0.3, vds, 0.0),
            g * vds,
            max_relative = 1e-6,
            epsilon = 0.0
        );
    }
}
