//! Elementary functions on lanes of `f64` for the batched DC solve (several decisions of one
//! chip in lockstep, struct-of-arrays: one array entry per decision).
//!
//! Each kernel is a branch-free scalar function (selects instead of branches, the exponent
//! handled by integer operations on the bits, no library call) applied by a plain loop over a
//! [`Lanes`] array, so LLVM vectorises it on stable Rust for whatever vector width the target
//! has (two lanes with the x86-64 baseline SSE2, four with AVX2). Only `+ - * /`, `sqrt`,
//! `min`/`max`, comparisons and bit operations are used: the results are the same on every
//! x86-64 machine and do not depend on the vector width (no fused multiply-add is formed).
//!
//! Error bounds (measured against the standard library, which calls the platform's libm, by the
//! tests below over the whole range each kernel is used on; the libm reference is itself within
//! 1 ulp of the exact value):
//!
//! | kernel | range | method | max error vs `std` |
//! |---|---|---|---|
//! | [`exp`] | `[-708.39, 709.78]` (below: a smooth fall to 0 through the subnormals, 0 under -745.2; above: +inf) | Cody–Waite reduction `x = n ln 2 + r`, `|r| <= ln2/2`, Taylor polynomial of degree 13 (truncation < 1e-17 relative) by Estrin's scheme, `2^n` as two exponent-bit factors | 2 ulp |
//! | [`ln`] | every positive `f64`, subnormals included; 0 -> -inf, < 0 or NaN -> NaN, +inf -> +inf | `x = 2^k m`, `m` in `[sqrt(1/2), sqrt 2)`, `ln m = 2 atanh(s)`, `s = (m-1)/(m+1)`, atanh series to `s^21` (truncation < 1e-18 relative) by Estrin's scheme | 2 ulp |
//! | [`ln_1p`] | `(-1, +inf)`; -1 -> -inf | `ln(u) + (x - (u - 1))/u` with `u = 1 + x` (the rounding of `u` corrected to first order) | 3 ulp |
//! | [`exp_m1_small`] | `[-0.5, 0.5]` only | Taylor polynomial of degree 15 (truncation < 2e-18 relative) by Estrin's scheme | 2 ulp |
//! | [`exp_start`] (starting points only) | as [`exp`] | [`exp`]'s reduction, Taylor degree 5 | 4e-6 relative |
//! | [`ln_start`] (starting points only) | as [`ln`] | [`ln`]'s reduction, atanh series to `s^7` | 4e-8 absolute |
//! | [`ln_1p_start`] (starting points only) | as [`ln_1p`] | [`ln_1p`]'s correction on [`ln_start`] | 4e-8 absolute |
//! | [`exp_m1_start`] (starting points only) | `[-700, 709]` | Taylor degree 7 for `|x| <= 0.5`, else [`exp_start`] - 1 | 1e-5 relative |
//! | [`exp_mostly_small`] | as [`exp`] | [`exp`]'s polynomial alone where `|x| <= 0.34` (no reduction needed), [`exp`] elsewhere | bit for bit [`exp`] |
//! | [`ln_mostly_near_1`] | as [`ln`] | [`ln`]'s series alone on `[0.7072, 1.414)` (no reduction needed), [`ln`] elsewhere | bit for bit [`ln`] |
//! | [`lambert_w_start`] (starting points only) | `ln z` in `[-700, 700]` | two Newton steps on `ln w + w = ln z` from `ln(1 + z)` | 1e-3 relative (measured 4.9e-4) |
//!
//! The series are the Taylor series of `e^x` and of `atanh` (`ln((1+s)/(1-s)) = 2 Σ s^(2j+1) /
//! (2j+1)`, M. Abramowitz, I. Stegun, Handbook of Mathematical Functions, 1964, ch. 4); the
//! reduction `x = n ln 2 + r` with `ln 2` split in a high part exact in `n ln2_hi` and a low part
//! is W. J. Cody, W. Waite, Software Manual for the Elementary Functions, 1980. The long
//! polynomials are evaluated by Estrin's scheme (G. Estrin, Proc. Western Joint Computer
//! Conference, 1960): pairs `c_i + c_(i+1) x` combined with `x^2`, `x^4`, `x^8`, a dependency chain
//! of about 8 operations instead of Horner's 26, so the vector units are not left waiting on
//! one chain (the same error bounds, tested below).
//!
//! Numerical core: no I/O, no printing.

/// Number of decisions solved in lockstep by the batched DC solve: four AVX2 vectors per
/// quantity, enough independent work to hide the latency of the kernels' operation chains (16
/// measured faster than 8 and 4 in the pipeline bench; the answers do not depend on it).
pub const LANES: usize = 16;

/// One value per lane.
pub type Lanes = [f64; LANES];

/// `1.5 * 2^52`: adding it to `|y| < 2^51` rounds `y` to the nearest integer, held in the low
/// bits of the sum.
const ROUND_MAGIC: f64 = 6_755_399_441_055_744.0;
/// `2^52`, the exponent trick for a small unsigned integer to `f64`.
const TWO_52: f64 = 4_503_599_627_370_496.0;
const LOG2_E: f64 = std::f64::consts::LOG2_E;
/// `ln 2` split (Cody–Waite): `LN2_HI` has 32 significant bits, so `n * LN2_HI` is exact for
/// `|n| < 2^20`; `LN2_HI + LN2_LO` is `ln 2` to about 2^-85. Bit patterns of fdlibm's e_exp.c.
const LN2_HI: f64 = f64::from_bits(0x3fe6_2e42_fee0_0000);
const LN2_LO: f64 = f64::from_bits(0x3dea_39ef_3579_3c76);
/// Below this `exp` returns 0 (the exact value is under half the smallest subnormal).
const EXP_ZERO_BELOW: f64 = -745.2;
/// Above this `exp` returns +inf (`ln f64::MAX` = 709.782...).
const EXP_INF_ABOVE: f64 = 709.782_712_893_384;

/// `2^n` as the product of two normal powers of two, for `-1076 <= n <= 1025` held as a
/// two's-complement `u64` (wrapping arithmetic keeps everything in vectorisable integer ops).
#[inline(always)]
fn pow2_split(n: u64) -> (f64, f64) {
    // n1 = floor((n + 2048) / 2) - 1024 by a logical shift (no arithmetic 64-bit shift in SSE2).
    let n1 = (n.wrapping_add(2048) >> 1).wrapping_sub(1024);
    let n2 = n.wrapping_sub(n1);
    (
        f64::from_bits(n1.wrapping_add(1023) << 52),
        f64::from_bits(n2.wrapping_add(1023) << 52),
    )
}

/// `e^r` on the reduced range as `1 + r + r^2 T(r)`, `T(r) = Σ_{i=2..13} r^(i-2)/i!` by
/// Estrin's scheme (Taylor to r^13).
#[inline(always)]
fn exp_reduced(r: f64) -> f64 {
    let r2 = r * r;
    let r4 = r2 * r2;
    let r8 = r4 * r4;
    let a0 = 1.0 / 2.0 + r * (1.0 / 6.0);
    let a1 = 1.0 / 24.0 + r * (1.0 / 120.0);
    let a2 = 1.0 / 720.0 + r * (1.0 / 5_040.0);
    let a3 = 1.0 / 40_320.0 + r * (1.0 / 362_880.0);
    let a4 = 1.0 / 3_628_800.0 + r * (1.0 / 39_916_800.0);
    let a5 = 1.0 / 479_001_600.0 + r * (1.0 / 6_227_020_800.0);
    let b0 = a0 + a1 * r2;
    let b1 = a2 + a3 * r2;
    let b2 = a4 + a5 * r2;
    let t = (b0 + b1 * r4) + b2 * r8;
    1.0 + (r + r2 * t)
}

/// `e^x`, one lane (module table for the error bound).
#[inline(always)]
pub fn exp1(x: f64) -> f64 {
    // e^r, |r| <= 0.3466 (+ rounding): Taylor to r^13, remainder < r^14/14! e^r < 1e-17 e^r,
    // as 1 + r + r^2 T(r) with T evaluated by Estrin's scheme (independent pairs combined
    // with r^2, r^4, r^8: a dependency chain of 8 operations instead of Horner's 26, so the
    // vector units are not left waiting on one long chain).
    exp_by(x, exp_reduced)
}

/// `e^x` from `e^r` on the reduced range (`poly`): Cody–Waite reduction `x = n ln 2 + r`,
/// `2^n` as two exponent-bit factors, the ends (0 below -745.2, +inf above 709.78, NaN kept).
#[inline(always)]
fn exp_by(x: f64, poly: impl Fn(f64) -> f64) -> f64 {
    let xc = x.clamp(EXP_ZERO_BELOW, EXP_INF_ABOVE);
    let t = xc * LOG2_E + ROUND_MAGIC;
    let nf = t - ROUND_MAGIC;
    let n = t.to_bits().wrapping_sub(ROUND_MAGIC.to_bits());
    let r = (xc - nf * LN2_HI) - nf * LN2_LO;
    let p = poly(r);
    let (s1, s2) = pow2_split(n);
    let y = p * s1 * s2;
    let y = if x < EXP_ZERO_BELOW { 0.0 } else { y };
    let y = if x > EXP_INF_ABOVE { f64::INFINITY } else { y };
    if x.is_nan() {
        x
    } else {
        y
    }
}

/// `2 atanh(s) - 2 s = s R(s^2)` part: `R(z) = Σ_{j=1..10} 2 z^j / (2j+1)`.
#[inline(always)]
fn atanh_tail(z: f64) -> f64 {
    // Estrin's scheme (as `exp_reduced`).
    let z2 = z * z;
    let z4 = z2 * z2;
    let z8 = z4 * z4;
    let a0 = 2.0 / 3.0 + z * (2.0 / 5.0);
    let a1 = 2.0 / 7.0 + z * (2.0 / 9.0);
    let a2 = 2.0 / 11.0 + z * (2.0 / 13.0);
    let a3 = 2.0 / 15.0 + z * (2.0 / 17.0);
    let a4 = 2.0 / 19.0 + z * (2.0 / 21.0);
    let b0 = a0 + a1 * z2;
    let b1 = a2 + a3 * z2;
    z * ((b0 + b1 * z4) + a4 * z8)
}

/// Natural logarithm, one lane (module table for the error bound).
#[inline(always)]
pub fn ln1(x: f64) -> f64 {
    ln_by(x, atanh_tail)
}

/// `ln x` with `tail(s^2)` for `2 atanh(s) - 2 s` over `s` (`tail`: [`atanh_tail`] or a shorter
/// series): the reduction `x = 2^k m`, `m` in `[sqrt(1/2), sqrt 2)`, subnormals scaled by 2^54,
/// and the special values (0 -> -inf, < 0 or NaN -> NaN, +inf -> +inf).
#[inline(always)]
fn ln_by(x: f64, tail: impl Fn(f64) -> f64) -> f64 {
    let sub = x < f64::MIN_POSITIVE;
    // Subnormals scaled into the normal range by 2^54.
    let xs = if sub { x * 18_014_398_509_481_984.0 } else { x };
    let extra = if sub { 54.0 } else { 0.0 };
    // Shift the mantissa range to [sqrt(1/2), sqrt(2)) (the exponent absorbs the rest).
    let ix = xs
        .to_bits()
        .wrapping_add((0x3ff0_0000_u64 - 0x3fe6_a09e_u64) << 32);
    let kb = ix >> 52;
    let m = f64::from_bits((ix & 0x000f_ffff_ffff_ffff).wrapping_add(0x3fe6_a09e_u64 << 32));
    let k = (f64::from_bits(0x4330_0000_0000_0000 | kb) - TWO_52) - 1023.0 - extra;
    let f = m - 1.0;
    let s = f / (2.0 + f);
    let hfsq = 0.5 * f * f;
    let tail = tail(s * s);
    let y = k * LN2_HI + ((f - hfsq + s * (hfsq + tail)) + k * LN2_LO);
    let y = if x == 0.0 { f64::NEG_INFINITY } else { y };
    let y = if x == f64::INFINITY { x } else { y };
    if x < 0.0 || x.is_nan() {
        f64::NAN
    } else {
        y
    }
}

/// `ln(1 + x)`, one lane (module table for the error bound).
#[inline(always)]
pub fn ln_1p1(x: f64) -> f64 {
    ln_1p_by(x, ln1)
}

/// `ln(1 + x)` through `ln` of `u = 1 + x` with the rounding of `u` corrected, and the special
/// values (-1 -> -inf, < -1 or NaN -> NaN, +inf -> +inf).
#[inline(always)]
fn ln_1p_by(x: f64, ln: impl Fn(f64) -> f64) -> f64 {
    let u = 1.0 + x;
    // (u - 1) is exact (Sterbenz) for u in [0.5, 2]; the correction is the rounding of u,
    // first order: ln(1 + x) = ln(u) + (1 + x - u)/u.
    let c = (x - (u - 1.0)) / u;
    let y = ln(u) + c;
    let y = if x == -1.0 { f64::NEG_INFINITY } else { y };
    let y = if x == f64::INFINITY { x } else { y };
    if x < -1.0 || x.is_nan() {
        f64::NAN
    } else {
        y
    }
}

/// `e^x - 1` for `|x| <= 0.5` only (Taylor to x^15), one lane.
#[inline(always)]
pub fn exp_m1_small1(x: f64) -> f64 {
    // x + x^2 P(x), P(x) = Σ_{i=2..15} x^(i-2)/i! by Estrin's scheme (as `exp_reduced`).
    let x2 = x * x;
    let x4 = x2 * x2;
    let x8 = x4 * x4;
    let a0 = 1.0 / 2.0 + x * (1.0 / 6.0);
    let a1 = 1.0 / 24.0 + x * (1.0 / 120.0);
    let a2 = 1.0 / 720.0 + x * (1.0 / 5_040.0);
    let a3 = 1.0 / 40_320.0 + x * (1.0 / 362_880.0);
    let a4 = 1.0 / 3_628_800.0 + x * (1.0 / 39_916_800.0);
    let a5 = 1.0 / 479_001_600.0 + x * (1.0 / 6_227_020_800.0);
    let a6 = 1.0 / 87_178_291_200.0 + x * (1.0 / 1_307_674_368_000.0);
    let b0 = a0 + a1 * x2;
    let b1 = a2 + a3 * x2;
    let b2 = a4 + a5 * x2;
    let c0 = b0 + b1 * x4;
    let c1 = b2 + a6 * x4;
    let p = c0 + c1 * x8;
    x + x * (x * p)
}

/// `e^x - 1` for any `x`: the small-argument polynomial for `|x| <= 0.5`, `exp(x) - 1`
/// otherwise (there `e^x - 1` loses at most about 1.6 bits: 3 ulp).
#[inline(always)]
pub fn exp_m1_1(x: f64) -> f64 {
    exp_m1_select(x, exp_m1_small1, exp1)
}

/// `small(x)` for `|x| <= 0.5`, `big(x) - 1` otherwise, both computed (branch-free).
#[inline(always)]
fn exp_m1_select(x: f64, small: impl Fn(f64) -> f64, big: impl Fn(f64) -> f64) -> f64 {
    let small = small(x);
    let big = big(x) - 1.0;
    if x.abs() <= 0.5 {
        small
    } else {
        big
    }
}

/// Low-accuracy `e^x`, one lane, for starting points only: the reduction of [`exp1`] and a
/// Taylor polynomial of degree 5 (remainder `|r|^6/6! e^|r| < 3.5e-6` relative for `|r| <=
/// 0.3466`). Relative error within 4e-6 of `std` over `[-708.39, 709.78]` (tested); the same
/// ends (0 below -745.2, +inf above 709.78, NaN kept). About half the polynomial work of
/// [`exp1`].
#[inline(always)]
pub fn exp_start1(x: f64) -> f64 {
    exp_by(x, |r| {
        let p = 1.0 / 120.0;
        let p = 1.0 / 24.0 + r * p;
        let p = 1.0 / 6.0 + r * p;
        let p = 0.5 + r * p;
        let p = 1.0 + r * p;
        1.0 + r * p
    })
}

/// Low-accuracy natural logarithm, one lane, for starting points only: the reduction of
/// [`ln1`] and the atanh series to `s^7` (remainder `2 Σ_{j>=4} s^(2j+1)/(2j+1) < 3.1e-8` for
/// `|s| <= 0.1716`). Absolute error within 4e-8 of `std` on every positive `f64` (tested); the
/// same special values as [`ln1`].
#[inline(always)]
pub fn ln_start1(x: f64) -> f64 {
    ln_by(x, |z| z * (2.0 / 3.0 + z * (2.0 / 5.0 + z * (2.0 / 7.0))))
}

/// Low-accuracy `ln(1 + x)`, one lane: [`ln_1p1`]'s rounding correction on [`ln_start1`].
/// Absolute error within 4e-8 of `std` on `(-1, +inf)` (tested).
#[inline(always)]
pub fn ln_1p_start1(x: f64) -> f64 {
    ln_1p_by(x, ln_start1)
}

/// The Taylor polynomial of [`exp_m1_start1`] (`|x| <= 0.5`).
#[inline(always)]
fn exp_m1_start_small(x: f64) -> f64 {
    let p = 1.0 / 5_040.0;
    let p = 1.0 / 720.0 + x * p;
    let p = 1.0 / 120.0 + x * p;
    let p = 1.0 / 24.0 + x * p;
    let p = 1.0 / 6.0 + x * p;
    let p = 0.5 + x * p;
    x + x * (x * p)
}

/// Low-accuracy `e^x - 1`, one lane: Taylor to `x^7` for `|x| <= 0.5` (remainder `|x|^8/8!
/// e^|x| < 6.4e-8 |x|` relative to `|e^x - 1| >= 0.78 |x|`), [`exp_start1`]`(x) - 1` otherwise.
/// Relative error within 1e-5 of `std` for `1e-300 <= |x|`, `-700 <= x <= 709` (tested; the
/// largest near `|x| = 0.5`, where `e^x - 1` divides [`exp_start1`]'s error by `1 - e^-|x|`).
#[inline(always)]
pub fn exp_m1_start1(x: f64) -> f64 {
    exp_m1_select(x, exp_m1_start_small, exp_start1)
}

macro_rules! lanes_fn {
    ($(#[$doc:meta])* $name:ident, $one:ident) => {
        $(#[$doc])*
        #[inline(always)]
        pub fn $name(x: &Lanes) -> Lanes {
            let mut y = [0.0; LANES];
            for i in 0..LANES {
                y[i] = $one(x[i]);
            }
            y
        }
    };
}

lanes_fn!(
    /// [`exp1`] on every lane.
    exp,
    exp1
);
lanes_fn!(
    /// [`ln1`] on every lane.
    ln,
    ln1
);
lanes_fn!(
    /// [`ln_1p1`] on every lane.
    ln_1p,
    ln_1p1
);
lanes_fn!(
    /// [`exp_m1_small1`] on every lane (`|x| <= 0.5`).
    exp_m1_small,
    exp_m1_small1
);
/// On every lane `cheap(x)` where `near(x)`, and `full(x)` elsewhere, the lanes' `full` computed
/// only when some lane is not `near`: each lane's value depends on that lane alone. The shape of
/// every kernel below with a cheap form on part of its range.
#[inline(always)]
pub(crate) fn cheap_where_near(
    x: &Lanes,
    cheap: impl Fn(f64) -> f64,
    near: impl Fn(f64) -> bool,
    full: impl Fn(&Lanes) -> Lanes,
) -> Lanes {
    let mut y = [0.0; LANES];
    for i in 0..LANES {
        y[i] = cheap(x[i]);
    }
    if x.iter().any(|&v| !near(v)) {
        let f = full(x);
        for i in 0..LANES {
            if !near(x[i]) {
                y[i] = f[i];
            }
        }
    }
    y
}

/// `|x| <= 0.34`: the reduction of [`exp1`] leaves such an `x` as it is (`n = 0`, `r = x`,
/// scale 1), so [`exp_reduced`] alone gives [`exp1`]'s bits (false for NaN).
#[inline(always)]
fn unreduced_exp(x: f64) -> bool {
    x.abs() <= 0.34
}

/// [`exp`] for arguments that are mostly small (Newton steps near convergence): where
/// `|x| <= 0.34` the reduced-range polynomial alone, bit for bit [`exp1`]'s value there; [`exp`]
/// computed only when some lane is beyond it, and selected lane by lane.
#[inline(always)]
pub fn exp_mostly_small(x: &Lanes) -> Lanes {
    cheap_where_near(x, exp_reduced, unreduced_exp, exp)
}

/// `x` in `[0.7072, 1.414)`, inside `[sqrt(1/2), sqrt 2)`: [`ln1`]'s reduction leaves such an
/// `x` as it is (`k = 0`, `m = x`), so its tail alone gives [`ln1`]'s bits (false for NaN).
#[inline(always)]
fn unreduced_ln(x: f64) -> bool {
    (0.7072..1.414).contains(&x)
}

/// `ln x` at `k = 0` of [`ln_by`]: `f = x - 1`, `s = f/(2 + f)`, the same tail and sum.
#[inline(always)]
fn ln_unreduced(x: f64) -> f64 {
    let f = x - 1.0;
    let s = f / (2.0 + f);
    let hfsq = 0.5 * f * f;
    (f - hfsq + s * (hfsq + atanh_tail(s * s))) + 0.0
}

/// [`ln`] for arguments that are mostly near 1 (residual ratios near convergence): where `x` is
/// in `[0.7072, 1.414)` the series without the reduction, bit for bit [`ln1`]'s value there;
/// [`ln`] computed only when some lane is beyond it, and selected lane by lane.
#[inline(always)]
pub fn ln_mostly_near_1(x: &Lanes) -> Lanes {
    cheap_where_near(x, ln_unreduced, unreduced_ln, ln)
}

/// `|x| <= 0.5` (false for NaN, which then takes the `exp` path, as in [`exp_m1_1`]).
#[inline(always)]
fn within_half(x: f64) -> bool {
    x.abs() <= 0.5
}

/// `e^x - 1` on every lane: `small` where `|x| <= 0.5`, `big(x) - 1` elsewhere, `big` computed
/// only when some lane needs it.
#[inline(always)]
fn exp_m1_by(x: &Lanes, small: impl Fn(f64) -> f64, big: impl Fn(&Lanes) -> Lanes) -> Lanes {
    cheap_where_near(x, small, within_half, |x| big(x).map(|e| e - 1.0))
}

/// [`exp_m1_1`] on every lane: the small-argument polynomial, and [`exp`] only when some lane
/// is beyond it (each lane's value as [`exp_m1_1`] gives it).
#[inline(always)]
pub fn exp_m1(x: &Lanes) -> Lanes {
    exp_m1_by(x, exp_m1_small1, exp)
}

lanes_fn!(
    /// [`exp_start1`] on every lane (starting points only).
    exp_start,
    exp_start1
);
lanes_fn!(
    /// [`ln_start1`] on every lane (starting points only).
    ln_start,
    ln_start1
);
lanes_fn!(
    /// [`ln_1p_start1`] on every lane (starting points only).
    ln_1p_start,
    ln_1p_start1
);
/// [`exp_m1_start1`] on every lane (starting points only): the short polynomial, and
/// [`exp_start`] only when some lane is beyond it (each lane's value as [`exp_m1_start1`]
/// gives it).
#[inline(always)]
pub fn exp_m1_start(x: &Lanes) -> Lanes {
    exp_m1_by(x, exp_m1_start_small, exp_start)
}

/// Lambert's W (the root `w >= 0` of `w e^w = z`, z >= 0) on every lane from `ln z`, so that z
/// itself may be far beyond the range of a double; starting points only. Returns `(ln W, W)`.
/// From `ln(1 + z)`, an upper bound of W on z >= 0, two Newton steps on the convex and
/// increasing `ln w + w = ln z` in `ln w`, which therefore fall monotonically onto the root;
/// the starting-point kernels throughout. `ln z` below -700 is taken as -700 (W = z there to
/// far below a starting point's accuracy). Error bound in the module table.
#[inline(always)]
pub fn lambert_w_start(ln_z: &Lanes) -> (Lanes, Lanes) {
    let mut lz = [0.0; LANES];
    let mut nz = [0.0; LANES];
    for l in 0..LANES {
        lz[l] = ln_z[l].max(-700.0);
        nz[l] = -lz[l].abs();
    }
    // ln(1 + z) = softplus(ln z).
    let ez = exp_start(&nz);
    let lp = ln_1p_start(&ez);
    let mut w = [0.0; LANES];
    for l in 0..LANES {
        w[l] = lz[l].max(0.0) + lp[l];
    }
    let mut tau = ln_start(&w);
    for _ in 0..2 {
        for l in 0..LANES {
            tau[l] -= (tau[l] + w[l] - lz[l]) / (1.0 + w[l]);
        }
        w = exp_start(&tau);
    }
    (tau, w)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};

    /// Distance in units in the last place between two finite f64 of the same sign (0 when
    /// both are the same value, infinities and NaNs compared by identity).
    fn ulps(a: f64, b: f64) -> u64 {
        if a == b || (a.is_nan() && b.is_nan()) {
            return 0;
        }
        if a.is_nan() || b.is_nan() || a.is_infinite() || b.is_infinite() {
            return u64::MAX;
        }
        let key = |x: f64| {
            let i = x.to_bits() as i64;
            if i < 0 {
                i64::MIN - i
            } else {
                i
            }
        };
        key(a).abs_diff(key(b))
    }

    /// Largest ulp error of `f` against the reference `g` (the standard library: the
    /// platform's libm, itself within 1 ulp of exact) over `xs`, applied through the lanes.
    fn max_ulps(xs: &[f64], f: fn(&Lanes) -> Lanes, g: fn(f64) -> f64) -> (u64, f64) {
        let mut worst = (0, f64::NAN);
        for chunk in xs.chunks(LANES) {
            let mut x = [0.0; LANES];
            x[..chunk.len()].copy_from_slice(chunk);
            let y = f(&x);
            for (i, &xi) in chunk.iter().enumerate() {
                let u = ulps(y[i], g(xi));
                if u > worst.0 {
                    worst = (u, xi);
                }
            }
        }
        worst
    }

    /// Uniform points of [lo, hi], plus the ends and a fine grid.
    fn uniform(lo: f64, hi: f64, n: usize, seed: u64) -> Vec<f64> {
        let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        let mut v: Vec<f64> = (0..n).map(|_| r.gen_range(lo..=hi)).collect();
        v.extend((0..=1000).map(|i| lo + (hi - lo) * i as f64 / 1000.0));
        v
    }

    /// Random bit patterns of positive f64 in [lo, hi] (log-uniform over the binades).
    fn log_uniform(lo: f64, hi: f64, n: usize, seed: u64) -> Vec<f64> {
        let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        (0..n)
            .map(|_| f64::from_bits(r.gen_range(lo.to_bits()..=hi.to_bits())))
            .collect()
    }

    // Reference: the standard library (libm). Maximum errors stated in the module table and in
    // DEVELOPERS.md (batched DC decisions).
    #[test]
    fn exp_within_2_ulp_of_std_over_its_range() {
        let mut xs = uniform(-708.39, 709.78, 400_000, 1);
        xs.extend(uniform(-1.0, 1.0, 100_000, 2));
        xs.extend(uniform(-40.0, 2.0, 100_000, 3));
        let (u, at) = max_ulps(&xs, exp, f64::exp);
        assert!(u <= 2, "exp: {u} ulp at {at}");
        // Subnormal results: absolute error within 2 of the smallest subnormal.
        for x in uniform(-745.1, -708.4, 20_000, 4) {
            let (a, b) = (exp(&[x; LANES])[0], x.exp());
            assert!((a - b).abs() <= 2.0 * 4.9e-324, "{x}: {a:e} vs {b:e}");
        }
        for (x, want) in [
            (-746.0, 0.0),
            (f64::NEG_INFINITY, 0.0),
            (710.0, f64::INFINITY),
            (f64::INFINITY, f64::INFINITY),
            (0.0, 1.0),
        ] {
            assert_eq!(exp(&[x; LANES])[0], want, "exp({x})");
        }
        assert!(exp(&[f64::NAN; LANES])[0].is_nan());
    }

    #[test]
    fn ln_within_2_ulp_of_std_over_all_positive_doubles() {
        let mut xs = log_uniform(f64::MIN_POSITIVE, f64::MAX, 400_000, 5);
        xs.extend(log_uniform(5e-324, f64::MIN_POSITIVE, 20_000, 6));
        xs.extend(uniform(0.5, 2.0, 200_000, 7));
        xs.extend(uniform(1e-30, 1e-3, 50_000, 8));
        let (u, at) = max_ulps(&xs, ln, f64::ln);
        assert!(u <= 2, "ln: {u} ulp at {at}");
        assert_eq!(ln(&[0.0; LANES])[0], f64::NEG_INFINITY);
        assert_eq!(ln(&[1.0; LANES])[0], 0.0);
        assert_eq!(ln(&[f64::INFINITY; LANES])[0], f64::INFINITY);
        assert!(ln(&[-1.0; LANES])[0].is_nan());
        assert!(ln(&[f64::NAN; LANES])[0].is_nan());
    }

    #[test]
    fn ln_1p_within_3_ulp_of_std_over_its_range() {
        let mut xs = uniform(-1.0 + 1e-16, 1.0, 200_000, 9);
        xs.extend(log_uniform(1e-300, 1e300, 200_000, 10));
        xs.extend(
            log_uniform(1e-300, 1.0 - 1e-16, 200_000, 11)
                .iter()
                .map(|x| -x),
        );
        xs.extend(uniform(-0.02, 0.02, 100_000, 12));
        let (u, at) = max_ulps(&xs, ln_1p, f64::ln_1p);
        assert!(u <= 3, "ln_1p: {u} ulp at {at}");
        assert_eq!(ln_1p(&[-1.0; LANES])[0], f64::NEG_INFINITY);
        assert_eq!(ln_1p(&[0.0; LANES])[0], 0.0);
        assert!(ln_1p(&[-1.5; LANES])[0].is_nan());
    }

    #[test]
    fn exp_m1_within_2_ulp_of_std_on_small_arguments_and_3_elsewhere() {
        let mut xs = uniform(-0.5, 0.5, 400_000, 13);
        xs.extend(log_uniform(1e-300, 0.5, 100_000, 14));
        xs.extend(log_uniform(1e-300, 0.5, 100_000, 15).iter().map(|x| -x));
        let (u, at) = max_ulps(&xs, exp_m1_small, f64::exp_m1);
        assert!(u <= 2, "exp_m1_small: {u} ulp at {at}");
        let mut ys = uniform(0.5, 709.0, 200_000, 16);
        ys.extend(uniform(-700.0, -0.5, 200_000, 17));
        ys.extend(xs);
        let (u, at) = max_ulps(&ys, exp_m1, f64::exp_m1);
        assert!(u <= 3, "exp_m1: {u} ulp at {at}");
    }

    /// Largest error of `f` against the reference `g` (the standard library) over `xs`:
    /// relative when `relative`, else absolute.
    fn max_err(
        xs: &[f64],
        f: fn(&Lanes) -> Lanes,
        g: fn(f64) -> f64,
        relative: bool,
    ) -> (f64, f64) {
        let mut worst = (0.0, f64::NAN);
        for chunk in xs.chunks(LANES) {
            let mut x = [0.0; LANES];
            x[..chunk.len()].copy_from_slice(chunk);
            let y = f(&x);
            for (i, &xi) in chunk.iter().enumerate() {
                let want = g(xi);
                // Relative error, absolute where the exact value is 0 (exp_m1 at 0).
                let e = if relative && want != 0.0 {
                    ((y[i] - want) / want).abs()
                } else {
                    (y[i] - want).abs()
                };
                // A NaN error counts as the worst.
                if e.is_nan() || e > worst.0 {
                    worst = (e, xi);
                }
            }
        }
        worst
    }

    // The starting-point kernels against the standard library (libm, within 1 ulp of exact)
    // over the ranges the full kernels are tested on: the bounds stated in their docs and in
    // the module table. The batched solve's start needs about 1e-2 (issue figure); these keep
    // four orders of magnitude below that.
    /// The shortcuts for small arguments give the full kernels' bits on every input: around
    /// their range limits, across the whole range, and at the special values.
    #[test]
    fn shortcut_kernels_are_the_full_kernels_bit_for_bit() {
        let mut rng = rand::rngs::StdRng::seed_from_u64(5);
        let mut xs: Vec<f64> = vec![
            0.0,
            -0.0,
            0.34,
            -0.34,
            0.34f64.next_up(),
            0.7072,
            0.7072f64.next_down(),
            1.414,
            1.414f64.next_down(),
            1.0,
            f64::NAN,
            f64::INFINITY,
            f64::NEG_INFINITY,
            -1.0,
            1e-300,
            5e-324,
        ];
        for _ in 0..20_000 {
            xs.push(rng.gen_range(-1.0..2.0));
            xs.push(rng.gen_range(-1e-3..1e-3));
            xs.push(rng.gen_range(-700.0f64..700.0));
        }
        for chunk in xs.chunks(LANES) {
            let mut x = [1.0; LANES];
            x[..chunk.len()].copy_from_slice(chunk);
            let (a, b) = (exp_mostly_small(&x), exp(&x));
            let (c, d) = (ln_mostly_near_1(&x), ln(&x));
            for l in 0..LANES {
                assert_eq!(a[l].to_bits(), b[l].to_bits(), "exp at {}", x[l]);
                assert!(
                    c[l].to_bits() == d[l].to_bits() || (c[l].is_nan() && d[l].is_nan()),
                    "ln at {}",
                    x[l]
                );
            }
        }
    }

    /// Lambert's W (starting points) against published values and its definition: W(1) is
    /// the omega constant 0.567143290409783873 (OEIS A030178, from memory), W(e) = 1 and
    /// W(2 e^2) = 2 from `W e^W = z`; over ln z in [-700, 700] the relative error against W
    /// solved to convergence (Newton steps in libm until they stop moving) stays within the
    /// module table's 1e-3.
    #[test]
    fn lambert_w_start_within_its_bound() {
        let reference = |lz: f64| -> f64 {
            let mut w = if lz > 0.0 {
                lz + (-lz).exp().ln_1p()
            } else {
                lz.exp().ln_1p()
            };
            let mut t = w.ln();
            for _ in 0..200 {
                t -= (t + w - lz) / (1.0 + w);
                w = t.exp();
            }
            w
        };
        for (lz, exact) in [
            (0.0, 0.567_143_290_409_784),
            (1.0, 1.0),
            (2.0f64.ln() + 2.0, 2.0),
        ] {
            assert!((reference(lz) - exact).abs() <= 1e-15 * exact);
            let (tau, w) = lambert_w_start(&[lz; LANES]);
            assert!(
                (w[0] / exact - 1.0).abs() <= 1e-3,
                "W at ln z = {lz}: {}",
                w[0]
            );
            assert!((tau[0] - w[0].ln()).abs() <= 1e-6);
        }
        let mut worst = 0.0f64;
        let xs: Vec<f64> = (0..=14_000).map(|j| -700.0 + 0.1 * j as f64).collect();
        for chunk in xs.chunks(LANES) {
            let mut x = [0.0; LANES];
            x[..chunk.len()].copy_from_slice(chunk);
            let (_, w) = lambert_w_start(&x);
            for (l, &lz) in chunk.iter().enumerate() {
                worst = worst.max((w[l] / reference(lz) - 1.0).abs());
            }
        }
        assert!(worst <= 1e-3, "largest relative error {worst:e}");
    }

    #[test]
    fn start_kernels_within_their_stated_bounds_of_std() {
        let mut xs = uniform(-708.39, 709.78, 400_000, 21);
        xs.extend(uniform(-1.0, 1.0, 100_000, 22));
        xs.extend(uniform(-40.0, 2.0, 100_000, 23));
        let (e, at) = max_err(&xs, exp_start, f64::exp, true);
        assert!(e <= 4e-6, "exp_start: {e:e} relative at {at}");
        for (x, want) in [(-746.0, 0.0), (710.0, f64::INFINITY), (0.0, 1.0)] {
            assert_eq!(exp_start(&[x; LANES])[0], want, "exp_start({x})");
        }
        assert!(exp_start(&[f64::NAN; LANES])[0].is_nan());

        let mut ps = log_uniform(f64::MIN_POSITIVE, f64::MAX, 400_000, 24);
        ps.extend(log_uniform(5e-324, f64::MIN_POSITIVE, 20_000, 25));
        ps.extend(uniform(0.5, 2.0, 200_000, 26));
        let (e, at) = max_err(&ps, ln_start, f64::ln, false);
        assert!(e <= 4e-8, "ln_start: {e:e} absolute at {at}");
        assert_eq!(ln_start(&[0.0; LANES])[0], f64::NEG_INFINITY);
        assert_eq!(ln_start(&[1.0; LANES])[0], 0.0);
        assert!(ln_start(&[-1.0; LANES])[0].is_nan());

        let mut qs = uniform(-1.0 + 1e-16, 1.0, 200_000, 27);
        qs.extend(log_uniform(1e-300, 1e300, 200_000, 28));
        qs.extend(
            log_uniform(1e-300, 1.0 - 1e-16, 200_000, 29)
                .iter()
                .map(|x| -x),
        );
        let (e, at) = max_err(&qs, ln_1p_start, f64::ln_1p, false);
        assert!(e <= 4e-8, "ln_1p_start: {e:e} absolute at {at}");
        assert_eq!(ln_1p_start(&[-1.0; LANES])[0], f64::NEG_INFINITY);

        let mut ms = uniform(-0.5, 0.5, 200_000, 30);
        ms.extend(log_uniform(1e-300, 0.5, 100_000, 31));
        ms.extend(log_uniform(1e-300, 0.5, 100_000, 32).iter().map(|x| -x));
        ms.extend(uniform(0.5, 709.0, 200_000, 33));
        ms.extend(uniform(-700.0, -0.5, 200_000, 34));
        let (e, at) = max_err(&ms, exp_m1_start, f64::exp_m1, true);
        assert!(e <= 1e-5, "exp_m1_start: {e:e} relative at {at}");
    }
}
