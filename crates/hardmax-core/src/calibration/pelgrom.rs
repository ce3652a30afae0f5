//! Pelgrom constant A_VT from threshold deviations of many devices at several sizes
//! (M. Pelgrom, A. Duinmaijer, A. Welbers, IEEE JSSC 24(5), 1989; DEVELOPERS.md model notes §3).
//!
//! For a matched pair sigma^2(dV_T) = A_VT^2 / (W L); one device's own deviation from its size's
//! mean has variance A_VT^2 / (2 W L). Per size i with m_i devices the sample variance s_i^2 has
//! (m_i - 1) s_i^2 / sigma_i^2 ~ chi^2(m_i - 1). Regressing s_i^2 on x_i = 1/(2 W_i L_i) through
//! the origin, weighted by the inverse variance of each estimate (var s_i^2 = 2 sigma_i^4 /
//! (m_i - 1), sigma_i^2 ∝ x_i) gives the pooled estimate
//! `A^2 = sum (m_i - 1) s_i^2 / x_i / sum (m_i - 1)`, and since
//! `sum (m_i - 1) s_i^2 / x_i / A^2 ~ chi^2(D)`, D = sum (m_i - 1), an exact confidence interval
//! from the chi-square quantiles. Numerical core: no I/O.

use thiserror::Error;

/// One size's threshold deviations (device deviations, V).
#[derive(Clone, Debug, PartialEq)]
pub struct SizeGroup {
    pub w: f64,
    pub l: f64,
    pub dvt: Vec<f64>,
}

/// A Pelgrom fit.
#[derive(Clone, Debug, PartialEq)]
pub struct PelgromFit {
    /// A_VT of a matched pair, V·m.
    pub a_vt_pair: f64,
    /// Confidence interval of A_VT, V·m.
    pub a_vt_lo: f64,
    pub a_vt_hi: f64,
    pub confidence: f64,
    /// Degrees of freedom pooled.
    pub dof: usize,
    /// Per size: (W, L, devices, device sigma, A_VT from that size alone).
    pub per_size: Vec<(f64, f64, usize, f64, f64)>,
}

#[derive(Debug, Error, PartialEq)]
pub enum PelgromError {
    #[error("size W = {w:e} m, L = {l:e} m has {m} device(s); a variance needs at least 2")]
    TooFew { w: f64, l: f64, m: usize },
    #[error("no sizes given")]
    Empty,
    #[error("confidence {0} must be between 0 and 1")]
    Confidence(f64),
}

/// ln Gamma(x) for x > 0 (Lanczos approximation, g = 7, 9 terms; P. Godfrey's coefficients as in
/// Numerical Recipes 3rd ed. §6.1, relative error below 1e-14).
fn ln_gamma(x: f64) -> f64 {
    const C: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        let pi = std::f64::consts::PI;
        return (pi / (pi * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let mut a = C[0];
    let t = x + 7.5;
    for (i, c) in C.iter().enumerate().skip(1) {
        a += c / (x + i as f64);
    }
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + a.ln()
}

/// Regularised lower incomplete gamma P(a, x) (series below a + 1, continued fraction above;
/// Numerical Recipes 3rd ed. §6.2).
fn gamma_p(a: f64, x: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    let lnpre = a * x.ln() - x - ln_gamma(a);
    if x < a + 1.0 {
        let (mut sum, mut term, mut ap) = (1.0 / a, 1.0 / a, a);
        for _ in 0..10_000 {
            ap += 1.0;
            term *= x / ap;
            sum += term;
            if term.abs() < sum.abs() * 1e-16 {
                break;
            }
        }
        sum * lnpre.exp()
    } else {
        let tiny = 1e-300;
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / tiny;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..10_000 {
            let an = -(i as f64) * (i as f64 - a);
            b += 2.0;
            d = an * d + b;
            if d.abs() < tiny {
                d = tiny;
            }
            c = b + an / c;
            if c.abs() < tiny {
                c = tiny;
            }
            d = 1.0 / d;
            let del = d * c;
            h *= del;
            if (del - 1.0).abs() < 1e-16 {
                break;
            }
        }
        1.0 - lnpre.exp() * h
    }
}

/// Quantile of the chi-square distribution with `k` degrees of freedom: the x with
/// P(chi^2_k <= x) = p (bisection on the regularised incomplete gamma function).
pub fn chi_square_quantile(p: f64, k: f64) -> f64 {
    let cdf = |x: f64| gamma_p(0.5 * k, 0.5 * x);
    let (mut lo, mut hi) = (0.0, k.max(1.0));
    while cdf(hi) < p {
        hi *= 2.0;
    }
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if cdf(mid) < p {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Fit A_VT (pair constant) with a two-sided interval at `confidence` (module docs).
pub fn fit_pelgrom(groups: &[SizeGroup], confidence: f64) -> Result<PelgromFit, PelgromError> {
    if !(confidence > 0.0 && confidence < 1.0) {
        return Err(PelgromError::Confidence(confidence));
    }
    if groups.is_empty() {
        return Err(PelgromError::Empty);
    }
    let mut num = 0.0;
    let mut dof = 0usize;
    let mut per_size = Vec::new();
    for g in groups {
        let m = g.dvt.len();
        if m < 2 {
            return Err(PelgromError::TooFew { w: g.w, l: g.l, m });
        }
        let mean = g.dvt.iter().sum::<f64>() / m as f64;
        let s2 = g.dvt.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (m - 1) as f64;
        let x = 1.0 / (2.0 * g.w * g.l);
        num += (m - 1) as f64 * s2 / x;
        dof += m - 1;
        per_size.push((g.w, g.l, m, s2.sqrt(), (s2 / x).sqrt()));
    }
    let a2 = num / dof as f64;
    let alpha = 1.0 - confidence;
    let q_hi = chi_square_quantile(1.0 - 0.5 * alpha, dof as f64);
    let q_lo = chi_square_quantile(0.5 * alpha, dof as f64);
    Ok(PelgromFit {
        a_vt_pair: a2.sqrt(),
        a_vt_lo: (num / q_hi).sqrt(),
        a_vt_hi: (num / q_lo).sqrt(),
        confidence,
        dof,
        per_size,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Chi-square critical values from the NIST/SEMATECH e-Handbook of Statistical Methods,
    /// table 1.3.6.7.4 (upper and lower critical values), k = 10 and k = 100.
    #[test]
    fn chi_square_quantiles_match_tables() {
        approx::assert_relative_eq!(
            chi_square_quantile(0.975, 10.0),
            20.483,
            max_relative = 1e-4
        );
        approx::assert_relative_eq!(chi_square_quantile(0.025, 10.0), 3.247, max_relative = 1e-3);
        approx::assert_relative_eq!(
            chi_square_quantile(0.95, 100.0),
            124.342,
            max_relative = 1e-4
        );
        approx::assert_relative_eq!(
            chi_square_quantile(0.05, 100.0),
            77.929,
            max_relative = 1e-4
        );
    }

    #[test]
    fn too_few_devices_is_an_error() {
        let g = [SizeGroup {
            w: 1e-6,
            l: 1e-6,
            dvt: vec![0.001],
        }];
        assert!(matches!(
            fit_pelgrom(&g, 0.95),
            Err(PelgromError::TooFew { m: 1, .. })
        ));
    }
}
