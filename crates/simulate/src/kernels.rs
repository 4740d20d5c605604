//! The simulator's inner loop: adding one reflector's fringe to an A-line's
//! spectrum, 2·a·V_p(z)·cos(2·k_p·z + φ_p) over every camera pixel p, with
//! cos, sin and exp written as branch-free polynomials so that the loop over
//! pixels compiles to SIMD (AVX-512 or AVX2 when the CPU has them, chosen
//! once per call in [`add_fringe`]).
//!
//! Accuracy: cos and sin reduce the argument by the nearest multiple of π
//! (π split in three parts, the first product exact up to |x| ≈ 10⁹) and evaluate the
//! Taylor series to degree 20/21 on [−π/2, π/2] (truncation below 2e-17);
//! exp reduces by ln 2 and sums the Taylor series to degree 13 on
//! [−ln2/2, ln2/2]. Plain multiplies and adds throughout (no fused
//! multiply-add), so every instruction set gives the same bits. Checked against the standard library (≤ 1e-14 absolute
//! for |x| ≤ 1e5 in cos and sin, ≤ 1e-15 relative in exp) in the tests below.
//! Must agree with: the plain formulas in `simulate::visibility`.

use std::f64::consts::PI;

/// π = PI_HI + PI_LO, PI_HI with 30 significant bits, so n·PI_HI is exact
/// for |n| < 2²³.
const PI_HI: f64 = f64::from_bits(std::f64::consts::PI.to_bits() & !((1u64 << 23) - 1));
const PI_LO: f64 = PI - PI_HI;
/// π − fl(π): the part of π below the f64 constant.
const PI_LO2: f64 = 1.224_646_799_147_353_2e-16;
const INV_PI: f64 = 1.0 / PI;
const LN2_HI: f64 = f64::from_bits(std::f64::consts::LN_2.to_bits() & !((1u64 << 23) - 1));
const LN2_LO: f64 = std::f64::consts::LN_2 - LN2_HI;
/// ln 2 − fl(ln 2).
const LN2_LO2: f64 = 2.319_046_813_846_299_6e-17;


/// Reduces x to r = x − n·π ∈ [−π/2, π/2]; returns (r, (−1)ⁿ).
/// Plain multiplies and adds (no fused multiply-add) so that every
/// instruction set gives the same bits: captures do not depend on the CPU.
#[inline(always)]
fn reduce_pi(x: f64) -> (f64, f64) {
    let n = (x * INV_PI).round_ties_even();
    let r = ((x - n * PI_HI) - n * PI_LO) - n * PI_LO2;
    // n − 2·⌊n/2⌋ is 0 or 1 exactly.
    let odd = n - 2.0 * (0.5 * n).floor();
    (r, 1.0 - 2.0 * odd)
}

/// Σ c[i]·u^i by Horner's rule.
#[inline(always)]
fn horner(c: &[f64], u: f64) -> f64 {
    let mut p = c[c.len() - 1];
    for &ci in c[..c.len() - 1].iter().rev() {
        p = p * u + ci;
    }
    p
}

/// cos r on [−π/2, π/2]: Taylor series to r²⁰, in r².
const COS_TAYLOR: [f64; 11] = [
    1.0,
    -1.0 / 2.0,
    1.0 / 24.0,
    -1.0 / 720.0,
    1.0 / 40_320.0,
    -1.0 / 3_628_800.0,
    1.0 / 479_001_600.0,
    -1.0 / 87_178_291_200.0,
    1.0 / 20_922_789_888_000.0,
    -1.0 / 6_402_373_705_728_000.0,
    1.0 / 2_432_902_008_176_640_000.0,
];

/// sin r / r on [−π/2, π/2]: Taylor series to r²⁰, in r².
const SIN_TAYLOR: [f64; 11] = [
    1.0,
    -1.0 / 6.0,
    1.0 / 120.0,
    -1.0 / 5_040.0,
    1.0 / 362_880.0,
    -1.0 / 39_916_800.0,
    1.0 / 6_227_020_800.0,
    -1.0 / 1_307_674_368_000.0,
    1.0 / 355_687_428_096_000.0,
    -1.0 / 121_645_100_408_832_000.0,
    1.0 / 51_090_942_171_709_440_000.0,
];

/// exp r on [−ln2/2, ln2/2]: Taylor series to r¹³.
const EXP_TAYLOR: [f64; 14] = [
    1.0,
    1.0,
    1.0 / 2.0,
    1.0 / 6.0,
    1.0 / 24.0,
    1.0 / 120.0,
    1.0 / 720.0,
    1.0 / 5_040.0,
    1.0 / 40_320.0,
    1.0 / 362_880.0,
    1.0 / 3_628_800.0,
    1.0 / 39_916_800.0,
    1.0 / 479_001_600.0,
    1.0 / 6_227_020_800.0,
];

/// cos x, branch-free.
#[inline(always)]
pub fn cos(x: f64) -> f64 {
    let (r, sign) = reduce_pi(x);
    sign * horner(&COS_TAYLOR, r * r)
}

/// sin x, branch-free.
#[inline(always)]
pub fn sin(x: f64) -> f64 {
    let (r, sign) = reduce_pi(x);
    sign * r * horner(&SIN_TAYLOR, r * r)
}

/// exp x for x ≤ 0 (clamped at −700), branch-free.
#[inline(always)]
pub fn exp_neg(x: f64) -> f64 {
    let x = x.clamp(-700.0, 0.0);
    let n = (x * std::f64::consts::LOG2_E).round_ties_even();
    let r = ((x - n * LN2_HI) - n * LN2_LO) - n * LN2_LO2;
    // 2ⁿ: n + 1023 + 2⁵² holds the biased exponent in its low mantissa
    // bits (an integer in [12, 1023]); shifted into the exponent field.
    let biased = (n + (1023.0 + 4_503_599_627_370_496.0)).to_bits();
    horner(&EXP_TAYLOR, r) * f64::from_bits(biased << 52)
}

/// Per-pixel tables of an A-line's optics, shared by every reflector.
pub struct FringeTables<'a> {
    /// 2·k_p, rad/µm.
    pub two_k: &'a [f64],
    /// Round-trip chirp φ_p of the unmatched glass, rad.
    pub chirp: &'a [f64],
    /// 2·σ_k² of the pixel's Gaussian spectral response (0: ideal).
    pub two_sigma2: &'a [f64],
    /// Width in k of the pixel (0: no integration).
    pub pixel_dk: &'a [f64],
    /// max_p pixel_dk[p] and max_p two_sigma2[p], to choose the loop.
    pub max_pixel_dk: f64,
    pub max_two_sigma2: f64,
    /// Whether any pixel has a spectral response or integrates (else V = 1).
    pub roll_off: bool,
}

/// When set, [`add_fringe`] uses the standard library's cos, sin and exp
/// (the plain formulas), for the bench's comparison.
static STANDARD_LIBRARY: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);

pub fn use_standard_library(on: bool) {
    STANDARD_LIBRARY.store(on, std::sync::atomic::Ordering::Relaxed);
}

/// out[p] += amplitude · V_p(z) · cos(2·k_p·z + φ_p·with_chirp), where
/// V_p(z) = exp(−2σ_k²z²)·sin(z·δk)/(z·δk) (FIELD-NOTES, roll-off).
pub fn add_fringe(t: &FringeTables<'_>, amplitude: f64, z: f64, with_chirp: bool, out: &mut [f64]) {
    if STANDARD_LIBRARY.load(std::sync::atomic::Ordering::Relaxed) {
        add_fringe_standard(t, amplitude, z, with_chirp, out);
        return;
    }
    #[cfg(target_arch = "x86_64")]
    {
        if std::is_x86_feature_detected!("avx512f") && std::is_x86_feature_detected!("fma") {
            // SAFETY: the CPU has AVX-512F.
            unsafe { add_fringe_avx512(t, amplitude, z, with_chirp, out) };
            return;
        }
        if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
            // SAFETY: the CPU has AVX2 and FMA.
            unsafe { add_fringe_avx2(t, amplitude, z, with_chirp, out) };
            return;
        }
    }
    add_fringe_portable(t, amplitude, z, with_chirp, out);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx2,fma")]
unsafe fn add_fringe_avx512(t: &FringeTables<'_>, amplitude: f64, z: f64, with_chirp: bool, out: &mut [f64]) {
    add_fringe_portable(t, amplitude, z, with_chirp, out);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn add_fringe_avx2(t: &FringeTables<'_>, amplitude: f64, z: f64, with_chirp: bool, out: &mut [f64]) {
    add_fringe_portable(t, amplitude, z, with_chirp, out);
}

#[inline(always)]
fn add_fringe_portable(t: &FringeTables<'_>, amplitude: f64, z: f64, with_chirp: bool, out: &mut [f64]) {
    let n = out.len();
    let (two_k, chirp) = (&t.two_k[..n], &t.chirp[..n]);
    let chirp_on = if with_chirp { 1.0 } else { 0.0 };
    if !t.roll_off {
        for p in 0..n {
            out[p] += amplitude * cos(two_k[p] * z + chirp_on * chirp[p]);
        }
        return;
    }
    let (s2, dk) = (&t.two_sigma2[..n], &t.pixel_dk[..n]);
    let z2 = z * z;
    if z.abs() * t.max_pixel_dk <= std::f64::consts::FRAC_PI_2 && t.max_two_sigma2 * z2 <= 0.5 * std::f64::consts::LN_2 {
        // Every |z·δk| is inside [0, π/2]: sin x / x is the polynomial in
        // x² directly, no reduction and no division; and every 2σ²z² is
        // inside [0, ln2/2], where exp_neg's reduction is the identity
        // (n = 0), so the polynomial alone gives the same bits. The common
        // case: a pixel's width and response in k times the depth stay
        // well below 1 rad.
        for p in 0..n {
            let x = z * dk[p];
            let v = horner(&EXP_TAYLOR, -s2[p] * z2) * horner(&SIN_TAYLOR, x * x);
            out[p] += amplitude * v * cos(two_k[p] * z + chirp_on * chirp[p]);
        }
        return;
    }
    if z.abs() * t.max_pixel_dk <= std::f64::consts::FRAC_PI_2 {
        // sin x / x directly as above; exp reduced.
        for p in 0..n {
            let x = z * dk[p];
            let v = exp_neg(-s2[p] * z2) * horner(&SIN_TAYLOR, x * x);
            out[p] += amplitude * v * cos(two_k[p] * z + chirp_on * chirp[p]);
        }
        return;
    }
    for p in 0..n {
        // sin|x|/|x| (even), with |x| kept ≥ 1e-300 so that x = 0 gives 1.
        let x = (z * dk[p]).abs().max(1e-300);
        let v = exp_neg(-s2[p] * z2) * (sin(x) / x);
        out[p] += amplitude * v * cos(two_k[p] * z + chirp_on * chirp[p]);
    }
}

/// The same with the standard library's functions.
fn add_fringe_standard(t: &FringeTables<'_>, amplitude: f64, z: f64, with_chirp: bool, out: &mut [f64]) {
    let chirp_on = if with_chirp { 1.0 } else { 0.0 };
    for (p, o) in out.iter_mut().enumerate() {
        let v = if t.roll_off {
            let x = z * t.pixel_dk[p];
            let sinc = if x == 0.0 { 1.0 } else { x.sin() / x };
            (-t.two_sigma2[p] * z * z).exp() * sinc
        } else {
            1.0
        };
        *o += amplitude * v * (t.two_k[p] * z + chirp_on * t.chirp[p]).cos();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cos_sin_match_the_standard_library() {
        let mut worst: f64 = 0.0;
        let mut x: f64 = -1e5;
        while x < 1e5 {
            worst = worst.max((cos(x) - x.cos()).abs()).max((sin(x) - x.sin()).abs());
            x += 0.731_234_5;
        }
        for &x in &[0.0, PI / 2.0, -PI / 2.0, PI, 1e-300, 45_000.123] {
            worst = worst.max((cos(x) - x.cos()).abs()).max((sin(x) - x.sin()).abs());
        }
        assert!(worst < 1e-14, "worst {worst:e}");
    }

    #[test]
    fn exp_matches_the_standard_library() {
        let mut worst: f64 = 0.0;
        let mut x: f64 = 0.0;
        while x > -700.0 {
            let e = x.exp();
            worst = worst.max(((exp_neg(x) - e) / e).abs());
            x -= 0.0137;
        }
        assert!(worst < 1e-15, "worst {worst:e}");
        assert_eq!(exp_neg(-1e6), (-700f64).exp());
    }

    #[test]
    fn fringe_matches_the_plain_formula() {
        let n = 300;
        let two_k: Vec<f64> = (0..n).map(|p| 2.0 * (7.0 + 0.003 * p as f64)).collect();
        let chirp: Vec<f64> = (0..n).map(|p| 0.01 * (p as f64 - 150.0).powi(2)).collect();
        let s2: Vec<f64> = (0..n).map(|p| 1e-8 * (1.0 + p as f64 / n as f64)).collect();
        let dk: Vec<f64> = vec![0.003; n];
        let t = FringeTables { two_k: &two_k, chirp: &chirp, two_sigma2: &s2, pixel_dk: &dk, max_pixel_dk: 0.003, max_two_sigma2: 2e-8, roll_off: true };
        // 812.3 µm: |z·δk| = 2.4 > π/2 (the reduced sine); 300.7 µm: 0.9
        // (the direct polynomial); 5000 µm: 2σ²z² = 0.5 > ln2/2 with
        // |z·δk| = 15 (both reduced); 500 µm with a wider response below.
        for z in [812.3f64, 300.7, -300.7, 5000.0] {
            let mut out = vec![0.0; n];
            add_fringe(&t, 2.5, z, true, &mut out);
            for p in 0..n {
                let x = z * dk[p];
                let want = 2.5 * (-s2[p] * z * z).exp() * x.sin() / x * (two_k[p] * z + chirp[p]).cos();
                assert!((out[p] - want).abs() < 1e-12, "z {z}, pixel {p}: {} vs {want}", out[p]);
            }
        }
        // 2σ²z² up to 1.0 > ln2/2 with |z·δk| = 0.15 < π/2: the direct sine, reduced exp.
        let wide: Vec<f64> = vec![2e-6; n];
        let dk_small: Vec<f64> = vec![0.0003; n];
        let t = FringeTables { two_k: &two_k, chirp: &chirp, two_sigma2: &wide, pixel_dk: &dk_small, max_pixel_dk: 0.0003, max_two_sigma2: 2e-6, roll_off: true };
        let z = 500.0f64;
        let mut out = vec![0.0; n];
        add_fringe(&t, 1.5, z, false, &mut out);
        for p in 0..n {
            let x = z * dk_small[p];
            let want = 1.5 * (-wide[p] * z * z).exp() * x.sin() / x * (two_k[p] * z).cos();
            assert!((out[p] - want).abs() < 1e-12, "wide response, pixel {p}: {} vs {want}", out[p]);
        }
    }
}
