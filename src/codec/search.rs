//! Search: the exact error of every truncation order from one spectrum (Parseval), the
//! integer codes of an order and step, and the cheapest (step, order) pair for a target error
//! energy. Plain arithmetic on one segment's coefficients; `fit` decides what to do with it.
//!
//! Does not: synthesize or measure output (that is `fit`), or produce bytes (that is `frame`).

use crate::codec::quant::{dequantize_bin, quantize_bin, CostCounter};
use crate::signal::{is_real_bin, weight, C64};

/// The mantissas of the step grid, 2^(j/4) for j = 0 … 3, as the f32 values every build
/// uses (decoders rebuild a step from its grid index with them, never with `powf`).
const GRID_MANTISSAS: [f32; 4] = [1.0, 1.189_207_1, std::f32::consts::SQRT_2, 1.681_792_8];

/// Grid steps per octave: one per mantissa.
const GRID_PER_OCTAVE: i32 = GRID_MANTISSAS.len() as i32;

/// Quantizer steps are searched on a grid of this many steps per octave.
pub const STEPS_PER_OCTAVE: f64 = GRID_PER_OCTAVE as f64;

/// The quantizer step of grid index `k`: 2^(k/4), exactly the f32
/// `GRID_MANTISSAS[k mod 4]·2^⌊k/4⌋` (the power of two is put in the exponent field, so no
/// rounding happens anywhere); `None` outside f32's normal range.
pub fn grid_step(k: i32) -> Option<f32> {
    let e = k.div_euclid(GRID_PER_OCTAVE);
    let m = GRID_MANTISSAS[k.rem_euclid(GRID_PER_OCTAVE) as usize];
    // Every mantissa's biased exponent is 127: the step's is 127 + e.
    (-126..=127)
        .contains(&e)
        .then(|| f32::from_bits((m.to_bits() as i64 + ((e as i64) << 23)) as u32))
}

/// The grid index of `step` when it is exactly a grid step ([`grid_step`]), else `None`.
pub fn grid_index(step: f32) -> Option<i32> {
    if !(step.is_normal() && step > 0.0) {
        return None;
    }
    let e = ((step.to_bits() >> 23) as i32) - 127;
    let m = f32::from_bits((step.to_bits() & 0x007f_ffff) | (127 << 23));
    let j = GRID_MANTISSAS.iter().position(|&g| g == m)? as i32;
    Some(GRID_PER_OCTAVE * e + j)
}

/// The largest grid index whose step is at most `x` (x > 0, finite), or `None` when no
/// grid step is.
fn grid_floor(x: f64) -> Option<i32> {
    let mut k = (STEPS_PER_OCTAVE * x.log2()).floor() as i32;
    // log2 may round either way near a grid step: settle on the exact comparison.
    while grid_step(k + 1).is_some_and(|s| s as f64 <= x) {
        k += 1;
    }
    while grid_step(k).is_some_and(|s| s as f64 > x) {
        k -= 1;
    }
    grid_step(k).map(|_| k)
}

/// Exact error energy (summed over the N samples, before output rounding) of every order
/// L = 0 … ⌊N/2⌋+1 for coefficients `c`, optional prediction `pred` and step Δ:
/// `E(L) = Σ_{k<L} w_k |c_k − p_k − Δ·q_k|² + Σ_{k≥L} w_k |c_k|²`.
pub fn error_by_order(c: &[C64], pred: Option<&[C64]>, step: f64, n: usize) -> Vec<f64> {
    let m = c.len();
    let tail = tail_energies(c, n);
    let mut out = Vec::with_capacity(m + 1);
    let mut head = 0.0;
    out.push(tail[0]);
    for k in 0..m {
        let p = pred.map_or(C64::new(0.0, 0.0), |p| {
            p.get(k).copied().unwrap_or_default()
        });
        head += quantize_bin(c[k], p, step, 1.0 / step, k, n).2;
        out.push(head + tail[k + 1]);
    }
    out
}

/// Energies of the dropped bins, `T(L) = Σ_{k≥L} w_k |c_k|²` for L = 0 … m: the part of
/// [`error_by_order`] that does not depend on the step.
fn tail_energies(c: &[C64], n: usize) -> Vec<f64> {
    let m = c.len();
    let mut tail = vec![0.0; m + 1];
    for k in (0..m).rev() {
        tail[k] = tail[k + 1] + weight(k, n) * c[k].norm_sqr();
    }
    tail
}

/// The codes of order `l`, step Δ, optional prediction; and the reconstructed coefficients.
pub fn quantize(
    c: &[C64],
    pred: Option<&[C64]>,
    step: f64,
    n: usize,
    l: usize,
) -> (Vec<i64>, Vec<C64>) {
    let mut codes = Vec::with_capacity(2 * l);
    let mut rec = Vec::with_capacity(l);
    let inv = 1.0 / step;
    for (k, &ck) in c.iter().enumerate().take(l) {
        let p = pred.map_or(C64::new(0.0, 0.0), |p| {
            p.get(k).copied().unwrap_or_default()
        });
        let (qr, qi, _) = quantize_bin(ck, p, step, inv, k, n);
        codes.push(qr);
        if !is_real_bin(k, n) {
            codes.push(qi);
        }
        rec.push(dequantize_bin(p, qr, qi, step, k, n));
    }
    (codes, rec)
}

/// Header cost proxy (bits) of a segment in each basis.
pub const HEADER_BITS: f64 = 24.0;

/// The cheapest (step, order) on the step grid for a target energy, with or without
/// prediction: returns (step, order, cost bits).
///
/// The grid ([`grid_step`], [`STEPS_PER_OCTAVE`] steps per octave, the same for every
/// segment so that a block stores a step as its index) runs from the largest step at most
/// √(12·E) (one code's rounding spends the whole target) down to where every kept code's
/// rounding is far below it. The
/// cost along it falls while coarser steps still force a high order, then rises as finer steps
/// buy nothing but longer codes; the search samples every other grid step from the coarse end,
/// stops [`SEARCH_PATIENCE`] samples past the cheapest, and then tries that one's two grid
/// neighbours. Each trial quantizes the bins once, stopping at its least order: the least L
/// whose error energy `E(L)` (exactly as [`error_by_order`] computes it, from the same sums in
/// the same order) is at most the target; it costs the codes with a reused histogram.
pub fn choose_step_order(
    c: &[C64],
    pred: Option<&[C64]>,
    n: usize,
    target_energy: f64,
) -> Option<(f32, usize, f64)> {
    let m = c.len();
    if m == 0 || !(target_energy > 0.0) {
        return None;
    }
    let hi = (12.0 * target_energy).sqrt();
    let lo = (12.0 * target_energy / (2.0 * m as f64)).sqrt() / 2.0;
    let mut grid = Vec::new();
    if hi.is_finite() {
        let mut k = grid_floor(hi)?;
        while let Some(s) = grid_step(k).filter(|&s| s as f64 >= lo) {
            grid.push(s);
            k -= 1;
        }
    }
    // The dropped bins' energy is the same at every step: summed once; so are the residuals.
    let tail = tail_energies(c, n);
    let resid: Vec<C64> = match pred {
        Some(p) => c
            .iter()
            .enumerate()
            .map(|(k, &ck)| ck - p.get(k).copied().unwrap_or_default())
            .collect(),
        None => c.to_vec(),
    };
    let zero = C64::new(0.0, 0.0);
    let mut codes: Vec<i64> = Vec::with_capacity(2 * m);
    let mut counter = CostCounter::new();
    let mut trial = |step: f32| -> Option<(usize, f64)> {
        let sd = step as f64;
        if !(sd > 0.0) {
            return None;
        }
        codes.clear();
        let l = if tail[0] <= target_energy {
            0
        } else {
            let (inv, mut head, mut found) = (1.0 / sd, 0.0, None);
            for (k, &r) in resid.iter().enumerate() {
                let (qr, qi, e) = quantize_bin(r, zero, sd, inv, k, n);
                codes.push(qr);
                if !is_real_bin(k, n) {
                    codes.push(qi);
                }
                head += e;
                if head + tail[k + 1] <= target_energy {
                    found = Some(k + 1);
                    break;
                }
                // The kept bins' error only grows with the order: no order meets the
                // target once it alone exceeds it.
                if head > target_energy {
                    break;
                }
            }
            found?
        };
        Some((l, counter.bits(&codes) + HEADER_BITS))
    };
    // (bits, grid index, order) of the cheapest trial; ties go to the coarser step.
    let mut best: Option<(f64, usize, usize)> = None;
    let mut consider = |i: usize, best: &mut Option<(f64, usize, usize)>| -> Option<bool> {
        let (l, bits) = trial(grid[i])?;
        let better = best.is_none_or(|b| bits < b.0 || (bits == b.0 && i < b.1));
        if better {
            *best = Some((bits, i, l));
        }
        Some(better)
    };
    let mut worse = 0;
    for i in (0..grid.len()).step_by(2) {
        match consider(i, &mut best) {
            Some(true) => worse = 0,
            Some(false) => worse += 1,
            None => {}
        }
        if worse >= SEARCH_PATIENCE {
            break;
        }
    }
    // The coarse pass tried even indices only: the cheapest one's neighbours are new.
    let (_, at, _) = best?;
    for i in [at.wrapping_sub(1), at + 1] {
        if i < grid.len() {
            consider(i, &mut best);
        }
    }
    best.map(|(bits, i, l)| (grid[i], l, bits))
}

/// Samples past the cheapest after which the step search stops.
pub const SEARCH_PATIENCE: usize = 3;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grid_steps_are_fourth_roots_of_two_and_give_back_their_index() {
        for k in -500..=500 {
            let s = grid_step(k).unwrap();
            // Within f32 rounding of 2^(k/4) computed in f64 (the mantissas are f32
            // roundings of 2^(j/4), and the power of two is exact).
            let want = 2f64.powf(k as f64 / 4.0);
            assert!(
                ((s as f64) / want - 1.0).abs() < 1e-7,
                "k {k}: {s} vs {want}"
            );
            assert_eq!(grid_index(s), Some(k));
            if k % 4 == 0 {
                assert_eq!(s as f64, want, "powers of two are exact");
            }
        }
        assert_eq!(grid_step(-505), None);
        assert_eq!(grid_step(512), None);
        assert_eq!(grid_index(0.3), None);
        assert_eq!(grid_index(0.0), None);
        assert_eq!(grid_index(-1.0), None);
    }

    #[test]
    fn grid_floor_is_the_largest_step_not_above() {
        for x in [1e-30, 0.001, 0.7, 1.0, 1.189_207_1, 3.9, 1e12] {
            let k = grid_floor(x).unwrap();
            assert!(grid_step(k).unwrap() as f64 <= x);
            assert!(grid_step(k + 1).unwrap() as f64 > x);
        }
    }
}
