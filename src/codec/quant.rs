//! Quantization and the integer codes: rounding a bin to a step, the codes' count and cost,
//! ZigZag and delta coding, and the f32 rounding of recorded budgets (down) and errors (up).

use crate::signal::{is_real_bin, weight, C64};

/// Number of integer codes for order `l` on an `n`-sample segment.
pub fn code_count(l: usize, n: usize) -> usize {
    (0..l).map(|k| if is_real_bin(k, n) { 1 } else { 2 }).sum()
}

/// `x` rounded to the nearest integer, ties to even: IEEE 754 addition of 1.5·2⁵² rounds in
/// the current mode (round to nearest even, which Rust never changes) on any machine, without
/// the libm call that `f64::round` costs where SSE4.1 is not assumed. Magnitudes of 2⁵¹
/// and above are integers already.
#[inline]
pub fn round_even(x: f64) -> f64 {
    const SHIFT: f64 = 6_755_399_441_055_744.0; // 1.5 · 2^52
    if x.abs() < 2_251_799_813_685_248.0 {
        // 2^51
        (x + SHIFT) - SHIFT
    } else {
        x
    }
}

/// `x.round()` (ties away from zero) without the libm call it costs where SSE4.1 is not
/// assumed: the integer part by conversion, then the exact fraction decides. Magnitudes of
/// 2⁵² and above (and non-finite values) are returned as they are, as `round` does.
#[inline]
pub fn round_away(x: f64) -> f64 {
    if x.abs() < 4_503_599_627_370_496.0 {
        // 2^52: the fraction x − trunc(x) is exact.
        let t = x as i64 as f64;
        let f = x - t;
        if f >= 0.5 {
            t + 1.0
        } else if f <= -0.5 {
            t - 1.0
        } else {
            t
        }
    } else {
        x
    }
}

/// `x.floor() as isize` without the libm call (see [`round_away`]); the same for every `x`.
#[inline]
pub fn floor_index(x: f64) -> isize {
    let i = x as isize;
    if (i as f64) > x {
        i.saturating_sub(1)
    } else {
        i
    }
}

/// Quantize residual `c − p` with step Δ (`inv` = 1/Δ); returns (code_re, code_im, error
/// energy of the bin with weight). The code is the nearest multiple of Δ to within the
/// rounding of `r·inv`; the error is computed from the code as chosen, so it is exact for
/// whatever code results.
#[inline]
pub(crate) fn quantize_bin(
    c: C64,
    p: C64,
    step: f64,
    inv: f64,
    k: usize,
    n: usize,
) -> (i64, i64, f64) {
    let r = c - p;
    let qr = round_even(r.re * inv);
    let qi = if is_real_bin(k, n) {
        0.0
    } else {
        round_even(r.im * inv)
    };
    let er = r.re - qr * step;
    let ei = if is_real_bin(k, n) {
        r.im
    } else {
        r.im - qi * step
    };
    (qr as i64, qi as i64, weight(k, n) * (er * er + ei * ei))
}

/// Reconstruct one bin from prediction and codes (shared by encoder and decoder).
#[inline]
pub fn dequantize_bin(p: C64, qr: i64, qi: i64, step: f64, k: usize, n: usize) -> C64 {
    if is_real_bin(k, n) {
        C64::new(p.re + step * qr as f64, 0.0)
    } else {
        C64::new(p.re + step * qr as f64, p.im + step * qi as f64)
    }
}

/// Estimated coded size in bits of a sequence of integer codes: its empirical order-0
/// entropy, plus a table cost per distinct symbol; magnitudes of 256 and above are escaped.
pub fn cost_bits(codes: &[i64]) -> f64 {
    CostCounter::new().bits(codes)
}

/// [`cost_bits`] with its histogram kept between calls (cleared by touching only the
/// symbols seen), for the step search that costs many short code lists.
pub struct CostCounter {
    hist: Box<[u32; 512]>,
    seen: Vec<u16>,
}

impl Default for CostCounter {
    fn default() -> Self {
        Self::new()
    }
}

impl CostCounter {
    /// An empty counter.
    pub fn new() -> Self {
        CostCounter {
            hist: Box::new([0; 512]),
            seen: Vec::with_capacity(64),
        }
    }

    /// [`cost_bits`] of `codes`: symbols are summed in increasing order, as there.
    pub fn bits(&mut self, codes: &[i64]) -> f64 {
        if codes.is_empty() {
            return 0.0;
        }
        let mut escaped_bits = 0.0;
        for &q in codes {
            let z = zigzag(q);
            let slot = if z < 511 {
                z as usize
            } else {
                escaped_bits += 2.0 * (64 - z.leading_zeros()) as f64;
                511
            };
            if self.hist[slot] == 0 {
                self.seen.push(slot as u16);
            }
            self.hist[slot] += 1;
        }
        self.seen.sort_unstable();
        let n = codes.len() as f64;
        let mut bits = escaped_bits;
        for &slot in &self.seen {
            let h = self.hist[slot as usize] as f64;
            bits += h * (n / h).log2() + 6.0;
            self.hist[slot as usize] = 0;
        }
        self.seen.clear();
        bits
    }
}

/// ZigZag map of a signed integer.
#[inline]
pub fn zigzag(v: i64) -> u64 {
    ((v << 1) ^ (v >> 63)) as u64
}

/// Inverse of [`zigzag`].
#[inline]
pub fn unzigzag(z: u64) -> i64 {
    ((z >> 1) as i64) ^ -((z & 1) as i64)
}

/// Round a budget to the f32 that is not above it (budgets are stored as f32).
pub fn budget_to_f32(b: f64) -> f64 {
    let f = b as f32;
    if (f as f64) > b {
        f32_next_down(f) as f64
    } else {
        f as f64
    }
}

/// A non-negative `v` rounded up to `bits` (1–24) significant bits: `v` itself when it has
/// no more, is 0 or is not finite, or when rounding up would overflow.
pub fn round_up_bits(v: f32, bits: u32) -> f32 {
    if !v.is_finite() || v <= 0.0 {
        return v;
    }
    let mask = (1u32 << 24u32.saturating_sub(bits.max(1))) - 1;
    let b = v.to_bits();
    if b & mask == 0 {
        return v;
    }
    let r = f32::from_bits((b | mask).wrapping_add(1));
    if r.is_finite() {
        r
    } else {
        v
    }
}

/// Round a recorded error up to the f32 that is not below it.
pub fn error_to_f32(e: f64) -> f32 {
    let f = e as f32;
    if (f as f64) < e {
        f32_next_up(f)
    } else {
        f
    }
}

fn f32_next_down(f: f32) -> f32 {
    if f.is_nan() || f == f32::NEG_INFINITY {
        return f;
    }
    if f == 0.0 {
        return -f32::from_bits(1);
    }
    let b = f.to_bits();
    f32::from_bits(if f > 0.0 { b - 1 } else { b + 1 })
}

fn f32_next_up(f: f32) -> f32 {
    if f.is_nan() || f == f32::INFINITY {
        return f;
    }
    if f == 0.0 {
        return f32::from_bits(1);
    }
    let b = f.to_bits();
    f32::from_bits(if f > 0.0 { b + 1 } else { b - 1 })
}

/// First differences (the first value kept as is).
pub fn delta_codes(q: &[i64]) -> Vec<i64> {
    let mut prev = 0i64;
    q.iter()
        .map(|&v| {
            let d = v.wrapping_sub(prev);
            prev = v;
            d
        })
        .collect()
}

/// Inverse of [`delta_codes`].
pub fn undelta_codes(d: &[i64]) -> Vec<i64> {
    let mut acc = 0i64;
    d.iter()
        .map(|&v| {
            acc = acc.wrapping_add(v);
            acc
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zigzag_round_trips_extremes() {
        for v in [0i64, 1, -1, 63, -64, i64::MAX, i64::MIN] {
            assert_eq!(unzigzag(zigzag(v)), v);
        }
    }

    #[test]
    fn round_away_and_floor_index_agree_with_the_standard_library() {
        let mut v: Vec<f64> = vec![
            0.0,
            -0.0,
            0.5,
            -0.5,
            1.5,
            -1.5,
            2.5,
            -2.5,
            0.49999999999999994,
            -0.49999999999999994,
            4503599627370495.5,
            -4503599627370495.5,
            4503599627370496.0,
            1e300,
            -1e300,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::NAN,
            f64::MIN_POSITIVE,
            -f64::MIN_POSITIVE,
        ];
        let mut x = 0.123_456_789f64;
        for i in 0..20_000 {
            x = (x * 3.7 + 0.1).fract();
            v.push((x - 0.5) * 10f64.powi(i % 18 - 3));
            v.push((i as f64 - 10_000.0) / 4.0);
        }
        for x in v {
            let (a, b) = (round_away(x), x.round());
            assert!(
                a == b || (a.is_nan() && b.is_nan()),
                "round {x}: {a} vs {b}"
            );
            assert_eq!(floor_index(x), x.floor() as isize, "floor {x}");
        }
    }

    #[test]
    fn round_even_rounds_to_nearest_with_ties_to_even() {
        // IEEE 754-2019 §4.3.1 roundTiesToEven.
        for (x, want) in [
            (0.5, 0.0),
            (1.5, 2.0),
            (2.5, 2.0),
            (-0.5, -0.0),
            (-1.5, -2.0),
            (0.49999999999999994, 0.0),
            (1e300, 1e300),
            (-3.7, -4.0),
        ] {
            assert_eq!(round_even(x), want, "{x}");
        }
        for i in -1000..1000 {
            let x = i as f64 * 0.37;
            assert!((round_even(x) - x).abs() <= 0.5, "{x}");
        }
    }

    #[test]
    fn delta_round_trips_with_wrapping() {
        let q = vec![i64::MAX, i64::MIN, 0, 5, -7];
        assert_eq!(undelta_codes(&delta_codes(&q)), q);
    }

    #[test]
    fn budget_rounding_never_loosens_and_error_never_tightens() {
        for b in [0.1f64, 1.0 / 3.0, 1e-30, 12345.678] {
            assert!(budget_to_f32(b) <= b);
            assert!(error_to_f32(b) as f64 >= b);
        }
    }
}
