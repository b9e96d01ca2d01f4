//! Search: the exact error of every truncation order from one spectrum (Parseval), the
//! integer codes of an order and step, and the cheapest (step, order) pair for a target error
//! energy. Plain arithmetic on one segment's coefficients; `fit` decides what to do with it.
//!
//! Does not: synthesize or measure output (that is `fit`), or produce bytes (that is `frame`).

use crate::codec::quant::{dequantize_bin, quantize_bin, CostCounter};
use crate::signal::{is_real_bin, weight, C64};

/// Quantizer steps are searched on a grid of this many steps per octave.
pub const STEPS_PER_OCTAVE: f64 = 4.0;

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
/// The grid runs from √(12·E) (one code's rounding spends the whole target) down by
/// [`STEPS_PER_OCTAVE`] per octave to where every kept code's rounding is far below it. The
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
    let ratio = 2f64.powf(-1.0 / STEPS_PER_OCTAVE);
    let mut grid = Vec::new();
    let mut s = hi;
    while s >= lo {
        grid.push(s as f32);
        s *= ratio;
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
