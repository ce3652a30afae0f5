//! EKV parameters from I-V sweeps (DEVELOPERS.md model notes §3 and "Calibration").
//!
//! Model (C. Enz, F. Krummenacher, E. Vittoz, Analog Integrated Circuits and Signal Processing
//! 8, 1995), NMOS, voltages bulk referred, at temperature T:
//!
//! ```text
//! I_D = I_S [F((V_P - V_S)/U_T) - F((V_P - V_D)/U_T)],  V_P = (V_G - V_T0(T) + eta (V_D - V_S)) / n
//! I_S = 2 n mu_Cox (W/L) (T/T_ref)^b U_T^2,            V_T0(T) = V_T0 + c (T - T_ref)
//! ```
//!
//! Fitted: V_T0, n, mu C_ox, eta, and with sweeps at two or more temperatures c (V/K) and b.
//! Objective: least squares of ln(I_D,model) - ln(I_D,measured) over the points inside the
//! stated region of forward inversion coefficient IC = F((V_P - V_S)/U_T) (weak to moderate
//! inversion, IC <= 10, by default), each point weighted equally in log current (i.e. by
//! relative error). Start: n from the steepest subthreshold slope (dV_G/d ln I_D = n U_T), the
//! specific current and V_T0 from the moderate-inversion knee where g_m/I_D has fallen to half
//! its weak-inversion value; the region is re-selected with the fitted parameters and the fit
//! repeated. Numerical core: no I/O.

use thiserror::Error;

use super::lm::{minimize, LmOptions};
use crate::device::ekv::{ekv_f, logistic, softplus};
use crate::physics::thermal_voltage;

/// One measured (or simulated) point of an NMOS device; SI units, NMOS sign convention (I_D > 0
/// flows into the drain with V_D > V_S).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct IvPoint {
    pub vg: f64,
    pub vd: f64,
    pub vs: f64,
    pub vb: f64,
    pub id: f64,
    pub temperature: f64,
    pub w: f64,
    pub l: f64,
    /// Line of the point in its file (for messages), 0 when not from a file.
    pub line: usize,
}

/// Fitted (or given) EKV parameters at the reference temperature.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EkvParams {
    pub vt0: f64,
    pub n: f64,
    /// mu C_ox, A/V^2.
    pub mu_cox: f64,
    pub eta: f64,
    /// dV_T0/dT, V/K.
    pub vt0_tempco: f64,
    /// beta ∝ (T/T_ref)^beta_temp_exponent.
    pub beta_temp_exponent: f64,
}

impl EkvParams {
    /// Drain current of a point's device at its bias and temperature.
    pub fn id(&self, p: &IvPoint, t_ref: f64) -> f64 {
        let ut = thermal_voltage(p.temperature);
        let is = self.specific_current(p, t_ref);
        let vt = self.vt0 + self.vt0_tempco * (p.temperature - t_ref);
        let (vg, vd, vs) = (p.vg - p.vb, p.vd - p.vb, p.vs - p.vb);
        let vp = (vg - vt + self.eta * (vd - vs)) / self.n;
        is * (ekv_f((vp - vs) / ut) - ekv_f((vp - vd) / ut))
    }

    /// Specific current I_S of a point's device at its temperature, A.
    pub fn specific_current(&self, p: &IvPoint, t_ref: f64) -> f64 {
        let ut = thermal_voltage(p.temperature);
        2.0 * self.n
            * self.mu_cox
            * (p.w / p.l)
            * (p.temperature / t_ref).powf(self.beta_temp_exponent)
            * ut
            * ut
    }

    /// Forward inversion coefficient IC = F((V_P - V_S)/U_T) of a point.
    pub fn inversion(&self, p: &IvPoint, t_ref: f64) -> f64 {
        let ut = thermal_voltage(p.temperature);
        let vt = self.vt0 + self.vt0_tempco * (p.temperature - t_ref);
        let (vg, vd, vs) = (p.vg - p.vb, p.vd - p.vb, p.vs - p.vb);
        let vp = (vg - vt + self.eta * (vd - vs)) / self.n;
        ekv_f((vp - vs) / ut)
    }
}

/// The inversion-coefficient window the objective uses.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Region {
    pub ic_min: f64,
    pub ic_max: f64,
}

impl Region {
    /// Weak to moderate inversion: IC <= 10 (our default; IC = 0.1 and 10 are the usual
    /// borders of moderate inversion, common practice, no source).
    pub fn weak_to_moderate() -> Region {
        Region {
            ic_min: 0.0,
            ic_max: 10.0,
        }
    }
}

/// Fit options.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FitOptions {
    pub region: Region,
    /// Temperature the parameters refer to, K (the process's nominal temperature).
    pub t_ref: f64,
    /// Points with |I_D| below this are left out (leakage, measurement floor), A.
    pub current_floor: f64,
    /// Temperature laws used when only one temperature is given (not fitted then).
    pub vt0_tempco: f64,
    pub beta_temp_exponent: f64,
}

impl Default for FitOptions {
    fn default() -> Self {
        FitOptions {
            region: Region::weak_to_moderate(),
            t_ref: 300.0,
            current_floor: 1e-13,
            // -1 mV/K and -1.5: common practice, no source (as the generic presets).
            vt0_tempco: -1e-3,
            beta_temp_exponent: -1.5,
        }
    }
}

/// Residual statistics of one region (ln-current error, i.e. relative error for small values).
#[derive(Clone, Debug, PartialEq)]
pub struct RegionResidual {
    pub name: &'static str,
    pub ic_min: f64,
    pub ic_max: f64,
    pub points: usize,
    /// Root mean square of ln(I_model/I_measured).
    pub rms_ln: f64,
    /// Largest |ln(I_model/I_measured)|.
    pub max_ln: f64,
}

/// A fit's outcome.
#[derive(Clone, Debug, PartialEq)]
pub struct EkvFit {
    pub params: EkvParams,
    pub t_ref: f64,
    /// Whether the temperature laws were fitted (two or more temperatures).
    pub temperature_fitted: bool,
    /// Points used in the objective.
    pub points_used: usize,
    pub iterations: usize,
    /// RMS of ln error over the points used.
    pub rms_ln: f64,
    /// Residuals over every point above the floor, by region (weak IC < 0.1, moderate
    /// 0.1..10, strong > 10, with the fitted parameters).
    pub by_region: Vec<RegionResidual>,
}

/// Why a fit could not be made.
#[derive(Debug, Error, PartialEq)]
pub enum FitError {
    #[error("no points above the current floor {floor:e} A: check the id column's units (A) and sign (positive into the drain)")]
    NoPoints { floor: f64 },
    #[error("no gate sweep with 3 or more points in weak inversion: give Id-Vg sweeps reaching down to the subthreshold region")]
    NoSubthreshold,
    #[error("the region IC = {ic_min} to {ic_max} holds {found} point(s) (of {total}); at least {needed} are needed for the {needed} parameters: widen the region or add points")]
    EmptyRegion {
        ic_min: f64,
        ic_max: f64,
        found: usize,
        total: usize,
        needed: usize,
    },
    #[error("the fit did not converge after {iterations} iterations (RMS ln error {rms_ln:.3e}); check the data or narrow the region")]
    NotConverged { iterations: usize, rms_ln: f64 },
    #[error("the fit ended outside where the model holds ({what}); check the data")]
    OutOfRange { what: String },
}

/// Half-point of g_m/I_D in saturation: the v = (V_P - V_S)/U_T where F'(v)/F(v) = 1/2 (found by
/// bisection; F'/F falls monotonically from 1 in weak inversion).
fn knee() -> f64 {
    let ratio = |v: f64| logistic(0.5 * v) / softplus(0.5 * v);
    let (mut lo, mut hi) = (-20.0, 40.0);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if ratio(mid) > 0.5 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Start values from the data (module docs).
fn start(points: &[IvPoint], opts: &FitOptions) -> Result<EkvParams, FitError> {
    // Gate sweeps: consecutive points with the same vd, vs, vb, T, W, L; keep the one with the
    // largest V_DS (saturation) at the temperature closest to t_ref.
    let mut sweeps: Vec<Vec<IvPoint>> = Vec::new();
    for p in points {
        match sweeps.last_mut() {
            Some(s)
                if s.last().is_some_and(|q| {
                    q.vd == p.vd
                        && q.vs == p.vs
                        && q.vb == p.vb
                        && q.temperature == p.temperature
                        && q.w == p.w
                        && q.l == p.l
                        && q.vg != p.vg
                        // One sweep runs one way: a step back starts another device's sweep.
                        && (s.len() < 2 || (p.vg - q.vg).signum() == (s[1].vg - s[0].vg).signum())
                }) =>
            {
                s.push(*p)
            }
            _ => sweeps.push(vec![*p]),
        }
    }
    let best = sweeps
        .iter()
        .filter(|s| s.len() >= 3)
        .min_by(|a, b| {
            let ka = ((a[0].temperature - opts.t_ref).abs(), -(a[0].vd - a[0].vs));
            let kb = ((b[0].temperature - opts.t_ref).abs(), -(b[0].vd - b[0].vs));
            ka.partial_cmp(&kb).unwrap_or(std::cmp::Ordering::Equal)
        })
        .ok_or(FitError::NoSubthreshold)?;
    let mut s: Vec<IvPoint> = best
        .iter()
        .copied()
        .filter(|p| p.id > opts.current_floor)
        .collect();
    s.sort_by(|a, b| a.vg.total_cmp(&b.vg));
    if s.len() < 3 {
        return Err(FitError::NoSubthreshold);
    }
    let ut = thermal_voltage(s[0].temperature);
    // Slopes d ln I / d V_G between neighbours; the steepest is the subthreshold slope.
    let slopes: Vec<f64> = s
        .windows(2)
        .map(|w| (w[1].id.ln() - w[0].id.ln()) / (w[1].vg - w[0].vg))
        .collect();
    let max_slope = slopes.iter().copied().fold(0.0, f64::max);
    if max_slope <= 0.0 || max_slope.is_nan() {
        return Err(FitError::NoSubthreshold);
    }
    let n = (1.0 / (max_slope * ut)).clamp(1.01, 4.0);
    // Knee: first interval (above the steepest) where the slope is half the steepest.
    let imax = slopes
        .iter()
        .position(|&x| x == max_slope)
        .unwrap_or_default();
    let k = (imax..slopes.len())
        .find(|&i| slopes[i] <= 0.5 * max_slope)
        .unwrap_or(slopes.len() - 1);
    let p = s[k];
    let v = knee();
    let is = p.id / ekv_f(v);
    let mu_cox = is / (2.0 * n * (p.w / p.l) * ut * ut);
    let vt0 = (p.vg - p.vb) - n * (v * ut + (p.vs - p.vb));
    Ok(EkvParams {
        vt0,
        n,
        mu_cox,
        eta: 0.0,
        vt0_tempco: opts.vt0_tempco,
        beta_temp_exponent: opts.beta_temp_exponent,
    })
}

const REGIONS: [(&str, f64, f64); 3] = [
    ("weak", 0.0, 0.1),
    ("moderate", 0.1, 10.0),
    ("strong", 10.0, f64::INFINITY),
];

/// Fit EKV parameters to `points` (module docs).
pub fn fit_ekv(points: &[IvPoint], opts: &FitOptions) -> Result<EkvFit, FitError> {
    let usable: Vec<IvPoint> = points
        .iter()
        .copied()
        .filter(|p| p.id > opts.current_floor)
        .collect();
    if usable.is_empty() {
        return Err(FitError::NoPoints {
            floor: opts.current_floor,
        });
    }
    let temps = {
        let mut t: Vec<f64> = usable.iter().map(|p| p.temperature).collect();
        t.sort_by(f64::total_cmp);
        t.dedup_by(|a, b| (*a - *b).abs() < 1e-9);
        t.len()
    };
    let fit_t = temps >= 2;
    let np = if fit_t { 6 } else { 4 };
    let t_ref = opts.t_ref;
    let pack = |e: &EkvParams| -> Vec<f64> {
        let mut v = vec![e.vt0, e.n, e.mu_cox.ln(), e.eta];
        if fit_t {
            v.push(e.vt0_tempco);
            v.push(e.beta_temp_exponent);
        }
        v
    };
    let unpack = |x: &[f64]| EkvParams {
        vt0: x[0],
        n: x[1],
        mu_cox: x[2].exp(),
        eta: x[3],
        vt0_tempco: if fit_t { x[4] } else { opts.vt0_tempco },
        beta_temp_exponent: if fit_t { x[5] } else { opts.beta_temp_exponent },
    };
    let mut params = start(&usable, opts)?;
    let mut iterations = 0;
    let mut used = Vec::new();
    // Select the region with the current parameters, fit, and once more with the fitted ones.
    for _pass in 0..3 {
        used = usable
            .iter()
            .copied()
            .filter(|p| {
                let ic = params.inversion(p, t_ref);
                ic >= opts.region.ic_min && ic <= opts.region.ic_max
            })
            .collect::<Vec<_>>();
        if used.len() < np + 1 {
            return Err(FitError::EmptyRegion {
                ic_min: opts.region.ic_min,
                ic_max: opts.region.ic_max,
                found: used.len(),
                total: usable.len(),
                needed: np + 1,
            });
        }
        let x0 = pack(&params);
        let scale = vec![0.1, 0.1, 1.0, 0.01, 1e-3, 1.0][..np].to_vec();
        let res = minimize(
            |x, r| {
                let e = unpack(x);
                if !(e.n > 0.5 && e.n < 10.0 && e.mu_cox.is_finite()) {
                    return false;
                }
                for (ri, p) in r.iter_mut().zip(&used) {
                    let i = e.id(p, t_ref);
                    if !(i > 0.0 && i.is_finite()) {
                        return false;
                    }
                    *ri = i.ln() - p.id.ln();
                }
                true
            },
            &x0,
            &scale,
            used.len(),
            &LmOptions::default(),
        );
        iterations += res.iterations;
        if !res.converged {
            return Err(FitError::NotConverged {
                iterations,
                rms_ln: (res.cost / used.len() as f64).sqrt(),
            });
        }
        let new = unpack(&res.x);
        let same = pack(&new)
            .iter()
            .zip(pack(&params))
            .all(|(a, b)| (a - b).abs() <= 1e-12 * (1.0 + b.abs()));
        params = new;
        if same {
            break;
        }
    }
    if !(params.n > 1.0 && params.n <= 5.0) {
        return Err(FitError::OutOfRange {
            what: format!("slope factor n = {}", params.n),
        });
    }
    let lnerr = |p: &IvPoint| params.id(p, t_ref).ln() - p.id.ln();
    let rms_ln = (used.iter().map(|p| lnerr(p).powi(2)).sum::<f64>() / used.len() as f64).sqrt();
    let by_region = REGIONS
        .iter()
        .map(|&(name, lo, hi)| {
            let e: Vec<f64> = usable
                .iter()
                .filter(|p| {
                    let ic = params.inversion(p, t_ref);
                    ic >= lo && ic < hi
                })
                .map(lnerr)
                .collect();
            RegionResidual {
                name,
                ic_min: lo,
                ic_max: hi,
                points: e.len(),
                rms_ln: if e.is_empty() {
                    f64::NAN
                } else {
                    (e.iter().map(|x| x * x).sum::<f64>() / e.len() as f64).sqrt()
                },
                max_ln: e.iter().map(|x| x.abs()).fold(0.0, f64::max),
            }
        })
        .collect();
    Ok(EkvFit {
        params,
        t_ref,
        temperature_fitted: fit_t,
        points_used: used.len(),
        iterations,
        rms_ln,
        by_region,
    })
}

/// Threshold of one device with every other parameter held at `params`: the V_T0 that
/// minimises the ln-current error over the device's points inside `opts.region` (for Pelgrom
/// fits). Returns the fitted V_T0 and the points used.
pub fn fit_vt0_only(
    points: &[IvPoint],
    params: &EkvParams,
    opts: &FitOptions,
) -> Result<(f64, usize), FitError> {
    let used: Vec<IvPoint> = points
        .iter()
        .copied()
        .filter(|p| p.id > opts.current_floor)
        .filter(|p| {
            let ic = params.inversion(p, opts.t_ref);
            ic >= opts.region.ic_min && ic <= opts.region.ic_max
        })
        .collect();
    if used.len() < 2 {
        return Err(FitError::EmptyRegion {
            ic_min: opts.region.ic_min,
            ic_max: opts.region.ic_max,
            found: used.len(),
            total: points.len(),
            needed: 2,
        });
    }
    let res = minimize(
        |x, r| {
            let e = EkvParams {
                vt0: x[0],
                ..*params
            };
            for (ri, p) in r.iter_mut().zip(&used) {
                let i = e.id(p, opts.t_ref);
                if !(i > 0.0 && i.is_finite()) {
                    return false;
                }
                *ri = i.ln() - p.id.ln();
            }
            true
        },
        &[params.vt0],
        &[0.1],
        used.len(),
        &LmOptions::default(),
    );
    if !res.converged {
        return Err(FitError::NotConverged {
            iterations: res.iterations,
            rms_ln: (res.cost / used.len() as f64).sqrt(),
        });
    }
    Ok((res.x[0], used.len()))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Curves generated with the EKV equations themselves (Enz, Krummenacher, Vittoz 1995) at
    /// three drain voltages and three temperatures: the fit recovers every parameter to 1e-6
    /// relative (sanity check of the fitter; the outside check is the BSIM3 fit in
    /// tests/calibration.rs).
    #[test]
    fn recovers_ekv_parameters() {
        let truth = EkvParams {
            vt0: 0.45,
            n: 1.32,
            mu_cox: 280e-6,
            eta: 0.02,
            vt0_tempco: -1.2e-3,
            beta_temp_exponent: -1.4,
        };
        let mut pts = Vec::new();
        for t in [260.0, 300.0, 350.0] {
            for vd in [0.1, 0.5, 1.0] {
                for k in 0..=60 {
                    let mut p = IvPoint {
                        vg: 0.01 * k as f64,
                        vd,
                        vs: 0.0,
                        vb: 0.0,
                        id: 0.0,
                        temperature: t,
                        w: 2e-6,
                        l: 1e-6,
                        line: 0,
                    };
                    p.id = truth.id(&p, 300.0);
                    pts.push(p);
                }
            }
        }
        let fit = fit_ekv(&pts, &FitOptions::default()).unwrap();
        assert!(fit.temperature_fitted);
        let f = fit.params;
        for (got, want) in [
            (f.vt0, truth.vt0),
            (f.n, truth.n),
            (f.mu_cox, truth.mu_cox),
            (f.eta, truth.eta),
            (f.vt0_tempco, truth.vt0_tempco),
            (f.beta_temp_exponent, truth.beta_temp_exponent),
        ] {
            approx::assert_relative_eq!(got, want, max_relative = 1e-6);
        }
        assert!(fit.rms_ln < 1e-8, "{}", fit.rms_ln);
    }

    #[test]
    fn empty_region_is_an_error() {
        let truth = EkvParams {
            vt0: 0.45,
            n: 1.32,
            mu_cox: 280e-6,
            eta: 0.02,
            vt0_tempco: -1.2e-3,
            beta_temp_exponent: -1.4,
        };
        let pts: Vec<IvPoint> = (0..=60)
            .map(|k| {
                let mut p = IvPoint {
                    vg: 0.01 * k as f64,
                    vd: 1.0,
                    vs: 0.0,
                    vb: 0.0,
                    id: 0.0,
                    temperature: 300.0,
                    w: 2e-6,
                    l: 1e-6,
                    line: k + 2,
                };
                p.id = truth.id(&p, 300.0);
                p
            })
            .collect();
        let opts = FitOptions {
            region: Region {
                ic_min: 1e6,
                ic_max: 1e7,
            },
            ..FitOptions::default()
        };
        let e = fit_ekv(&pts, &opts).unwrap_err();
        assert!(matches!(e, FitError::EmptyRegion { found: 0, .. }), "{e}");
    }
}
