//! Warp: code a segment in the shaft's angle rather than in time (computed order tracking,
//! K. R. Fyfe & E. D. S. Munck, Mech. Syst. Signal Process. 11(2), 1997).
//!
//! A segment whose speed changes while it lasts holds its harmonics at a frequency that
//! slides; harmonic h of a K-cycle segment then spreads over several bins. With the speed
//! linear in time over the segment, the angle (in segment fractions) is a quadratic of time:
//! `θ(s) = s + a·(s² − s)` for `s = m/N`, so `θ(0) = 0`, `θ(1) = 1` and the rate runs from
//! `1 − a` to `1 + a`. The encoder resamples the segment at equal angle steps (Keys cubic
//! convolution, IEEE Trans. ASSP 29(6), 1981) and codes that with the Fourier machinery;
//! the decoder evaluates the kept Fourier series exactly at each sample's angle `N·θ(m/N)`
//! (a trigonometric polynomial needs no interpolation on the way back). The error is
//! measured on that output, in time, like any segment's.
//!
//! Does not: choose between warped and plain (that is `fit`).

use crate::model::ValueType;
use crate::signal::{is_real_bin, C64};

/// Largest |a| a segment may carry (the rate stays within ±25 %).
pub const MAX_WARP: f64 = 0.25;

/// Angle fraction of time fraction `s`.
pub fn angle(a: f64, s: f64) -> f64 {
    s + a * (s * s - s)
}

/// Time fraction of angle fraction `u` (the inverse of [`angle`] on [0, 1], |a| < 1).
pub fn time(a: f64, u: f64) -> f64 {
    let b = 1.0 - a;
    // Root of a·s² + (1 − a)·s − u = 0 in the form without cancellation.
    2.0 * u / (b + (b * b + 4.0 * a * u).max(0.0).sqrt())
}

/// Keys cubic convolution (a = −½) of `x` at fractional index `t`, edge samples repeated.
fn cubic(x: &[f64], t: f64) -> f64 {
    let n = x.len() as isize;
    let i = crate::codec::quant::floor_index(t);
    let f = t - i as f64;
    let at = |j: isize| x[j.clamp(0, n - 1) as usize];
    let (p0, p1, p2, p3) = (at(i - 1), at(i), at(i + 1), at(i + 2));
    p1 + 0.5
        * f
        * (p2 - p0 + f * (2.0 * p0 - 5.0 * p1 + 4.0 * p2 - p3 + f * (3.0 * (p1 - p2) + p3 - p0)))
}

/// The segment resampled at N equal angle steps: `y_j = x(N·time(a, j/N))`.
pub fn to_angle(x: &[f64], a: f64) -> Vec<f64> {
    let n = x.len();
    (0..n)
        .map(|j| cubic(x, n as f64 * time(a, j as f64 / n as f64)))
        .collect()
}

/// The decoder's output of a warped Fourier segment: the series of the kept bins (orthonormal
/// DFT scaling, weight 2 off DC and Nyquist) evaluated at each sample's angle, then rounded to
/// the output type. Returns (unrounded, rounded). With `a = 0` this is the inverse DFT.
pub fn synthesize_warped(
    coeffs: &[C64],
    n: usize,
    a: f64,
    value_type: ValueType,
) -> (Vec<f64>, Vec<f64>) {
    let mut y = vec![0.0; n];
    let (lanes, rest) = y.as_chunks_mut::<LANES>();
    for (i, out) in lanes.iter_mut().enumerate() {
        *out = warped_values(coeffs, n, a, i * LANES);
    }
    let first = n - rest.len();
    for (j, v) in rest.iter_mut().enumerate() {
        *v = warped_values::<1>(coeffs, n, a, first + j)[0];
    }
    let out = y.iter().map(|&v| value_type.round(v)).collect();
    (y, out)
}

/// Samples [`synthesize_warped`] evaluates side by side: each sample's sum is a chain of
/// dependent rotations, so several chains in one loop keep the processor busy. Every sample
/// gets the same operations in the same order as alone, so the values do not depend on it.
const LANES: usize = 8;

/// Bins between re-anchorings of the rotation in [`synthesize_warped`]: after 256 complex
/// multiplications the rotation's relative error is of order 256·2⁻⁵³ ≈ 3·10⁻¹⁴, far inside
/// the decoder's floating-point margin (`fit::FP_MARGIN_REL`, 10⁻⁹), and the exact angle's
/// sine and cosine are a quarter as many as re-anchoring every 64 bins cost.
const ANCHOR_BINS: usize = 256;

/// The warped series at samples `m0 … m0 + L − 1` (see [`synthesize_warped`]).
fn warped_values<const L: usize>(coeffs: &[C64], n: usize, a: f64, m0: usize) -> [f64; L] {
    let scale = 1.0 / (n as f64).sqrt();
    let two_pi = 2.0 * std::f64::consts::PI;
    let u: [f64; L] = std::array::from_fn(|j| n as f64 * angle(a, (m0 + j) as f64 / n as f64));
    let turn: [C64; L] = std::array::from_fn(|j| C64::from_polar(1.0, two_pi * u[j] / n as f64));
    // Real and imaginary parts in arrays of their own (so the lanes vectorize); the
    // arithmetic is `C64`'s multiplication written out, term for term.
    let (tr, ti) = (turn.map(|t| t.re), turn.map(|t| t.im));
    let (mut zr, mut zi) = ([1.0f64; L], [0.0f64; L]);
    let mut acc = [0.0f64; L];
    for (k, c) in coeffs.iter().enumerate() {
        let w = if is_real_bin(k, n) { 1.0 } else { 2.0 };
        for j in 0..L {
            acc[j] += w * (c.re * zr[j] - c.im * zi[j]);
            let (r, i) = (zr[j] * tr[j] - zi[j] * ti[j], zr[j] * ti[j] + zi[j] * tr[j]);
            (zr[j], zi[j]) = (r, i);
        }
        // Re-anchor from the exact angle every ANCHOR_BINS bins, so rounding cannot build up.
        if (k + 1) % ANCHOR_BINS == 0 {
            for j in 0..L {
                let z = C64::from_polar(1.0, two_pi * u[j] * (k + 1) as f64 / n as f64);
                (zr[j], zi[j]) = (z.re, z.im);
            }
        }
    }
    acc.map(|v| v * scale)
}

/// Estimate the warp of a segment from the phase of its strongest harmonic `bin` over its
/// thirds: for `θ(s) = s + a(s² − s)` the phase of bin b at the thirds' centres
/// (s = 1/6, 1/2, 5/6) has the second difference `2π·b·a·(2/9)`. `None` when the bin is too
/// weak or the estimate is beyond [`MAX_WARP`].
pub fn estimate_warp(x: &[f64], bin: usize) -> Option<f64> {
    let n = x.len();
    if bin == 0 || n < 48 {
        return None;
    }
    let two_pi = 2.0 * std::f64::consts::PI;
    let w = C64::from_polar(1.0, -two_pi * bin as f64 / n as f64);
    let third = n / 3;
    let phase = |lo: usize, hi: usize| -> C64 {
        let mut z = C64::from_polar(1.0, -two_pi * bin as f64 * lo as f64 / n as f64);
        let mut acc = C64::new(0.0, 0.0);
        for &v in &x[lo..hi] {
            acc += z * v;
            z *= w;
        }
        acc
    };
    let (p0, p1, p2) = (
        phase(0, third),
        phase(third, 2 * third),
        phase(2 * third, 3 * third),
    );
    if p0.norm() == 0.0 || p1.norm() == 0.0 || p2.norm() == 0.0 {
        return None;
    }
    // Second difference of the phases without unwrapping: arg(p2·p0 / p1²).
    let d2 = (p2 * p0 / (p1 * p1)).arg();
    let a = d2 * 9.0 / (2.0 * two_pi * bin as f64);
    (a.is_finite() && a.abs() <= MAX_WARP).then_some(a)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::signal::{RealFft, Transform};

    #[test]
    fn angle_and_time_are_inverse() {
        for a in [-0.2, -0.01, 0.0, 0.003, 0.2] {
            for i in 0..=100 {
                let s = i as f64 / 100.0;
                assert!((time(a, angle(a, s)) - s).abs() < 1e-12, "a {a} s {s}");
            }
        }
    }

    #[test]
    fn unwarped_synthesis_is_the_inverse_dft() {
        let n = 37;
        let x: Vec<f64> = (0..n).map(|i| ((i * i) as f64 * 0.37).sin()).collect();
        let c = RealFft::shared().forward(&x);
        let (y, _) = synthesize_warped(&c, n, 0.0, ValueType::F64);
        for (a, b) in x.iter().zip(&y) {
            assert!((a - b).abs() < 1e-12);
        }
    }
}

#[cfg(test)]
mod chirp {
    use super::*;
    use crate::codec::fit::{fit_segment, SegmentInput};
    use crate::signal::RealFft;

    /// Six harmonics (amplitude 1/h) of a segment of six cycles whose angle is θ(s) with
    /// warp `a`: the rate runs from 1 − a to 1 + a.
    fn chirp(n: usize, a: f64) -> Vec<f64> {
        (0..n)
            .map(|m| {
                let th = angle(a, m as f64 / n as f64);
                (1..=6)
                    .map(|h| (std::f64::consts::TAU * 6.0 * h as f64 * th).sin() / h as f64)
                    .sum()
            })
            .collect()
    }

    #[test]
    fn the_warp_of_a_chirp_is_estimated_from_its_phase() {
        // The phase of bin 6 over the thirds follows 2π·6·a(s² − s) [derived above]; the
        // other harmonics leak a little into each third's DTFT: within 5 %.
        for a in [-0.02, 0.005, 0.01] {
            let est = estimate_warp(&chirp(2048, a), 6).expect("an estimate");
            assert!((est / a - 1.0).abs() < 0.05, "a {a}: estimated {est}");
        }
    }

    #[test]
    fn a_chirping_segment_is_coded_in_angle_with_its_harmonics_only() {
        // In angle the segment is six whole cycles of six harmonics: order 6·6 + 1 = 37 (one
        // more bin for the interpolation's residue), where in time each harmonic spreads
        // over neighbouring bins.
        let x = chirp(2048, 0.01);
        let f = fit_segment(
            SegmentInput {
                values: &x,
                value_type: ValueType::F64,
                budget_rms: 1e-3,
            },
            None,
            RealFft::shared(),
        );
        assert!(f.plan.warp.is_some(), "{:?}", f.plan);
        assert!(f.plan.order.unwrap() <= 38, "order {:?}", f.plan.order);
        let err = (x
            .iter()
            .zip(&f.output)
            .map(|(a, b)| (a - b).powi(2))
            .sum::<f64>()
            / x.len() as f64)
            .sqrt();
        assert!(err <= 1e-3, "error {err}");
    }
}
