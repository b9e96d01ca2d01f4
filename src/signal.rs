//! Shared signal primitives: value types and their rounding, the orthonormal real FFT with
//! plans cached per length, bin weights, and the prediction of one segment's coefficients
//! from the previous one (the same function serves the encoder and the decoder).
//!
//! Nothing here decides anything; `fit` and `decode` both build on it.

use std::collections::HashMap;
use std::sync::{Arc, Mutex, OnceLock};

use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};
use rustfft::num_complex::Complex;
use rustfft::{Fft, FftPlannerScalar};

/// Complex f64.
pub type C64 = Complex<f64>;

/// A power of two that keeps the squares of values up to `peak` inside f64's normal range:
/// 1 for ordinary magnitudes (2⁻⁴⁰⁰ … 2⁴⁰⁰), so ordinary sums of squares are unchanged;
/// otherwise the scale that brings `peak` near 1. Scaling by a power of two is exact.
pub fn square_scale(peak: f64) -> f64 {
    const SAFE: f64 = f64::from_bits((1023 - 400) << 52); // 2⁻⁴⁰⁰
    if !peak.is_finite() || peak == 0.0 || (SAFE..1.0 / SAFE).contains(&peak) {
        return 1.0;
    }
    let e = (peak.log2().floor() as i32).clamp(-1000, 1000);
    2f64.powi(-e)
}

/// RMS of the values `term(i)` for `i < n` that are `Some`, without overflow or underflow:
/// summed as they are, and only when the largest magnitude needs it, summed again at its
/// [`square_scale`]. 0 when none.
pub fn rms_of(n: usize, term: impl Fn(usize) -> Option<f64>) -> f64 {
    let sum_at = |s: f64| {
        let (mut sum, mut count, mut peak) = (0.0, 0usize, 0.0f64);
        for v in (0..n).filter_map(&term) {
            peak = peak.max(v.abs());
            let v = v * s;
            sum += v * v;
            count += 1;
        }
        (sum, count, peak)
    };
    let (mut sum, count, peak) = sum_at(1.0);
    if count == 0 {
        return 0.0;
    }
    let s = square_scale(peak);
    if s != 1.0 {
        sum = sum_at(s).0;
    }
    (sum / count as f64).sqrt() / s
}

/// Number of one-sided bins of an N-sample real DFT: ⌊N/2⌋ + 1.
#[inline]
pub fn half_len(n: usize) -> usize {
    n / 2 + 1
}

/// Weight of bin k of an N-sample real DFT in the error energy: 1 for DC and Nyquist, else 2.
#[inline]
pub fn weight(k: usize, n: usize) -> f64 {
    if k == 0 || (n.is_multiple_of(2) && k == n / 2) {
        1.0
    } else {
        2.0
    }
}

/// Whether bin k of an N-sample real DFT is purely real (DC, and Nyquist for even N).
#[inline]
pub fn is_real_bin(k: usize, n: usize) -> bool {
    k == 0 || (n.is_multiple_of(2) && k == n / 2)
}

/// An orthonormal real DFT of any length: forward gives `c_k = X_k/√N` for `k = 0 … ⌊N/2⌋`,
/// inverse is its exact inverse for Hermitian spectra.
pub trait Transform: Sync + Send {
    /// Orthonormal one-sided spectrum of `x`.
    fn forward(&self, x: &[f64]) -> Vec<C64>;
    /// Real signal of length `n` from the one-sided spectrum `c` (`c.len() == n/2 + 1`).
    fn inverse(&self, c: &[C64], n: usize) -> Vec<f64>;
}

/// The default transform: realfft on rustfft's run-time-selected (AVX/SSE/scalar) kernels,
/// with plans cached per length and shared by all threads.
#[derive(Default)]
pub struct RealFft {
    planner: Mutex<RealFftPlanner<f64>>,
    forward: Mutex<HashMap<usize, Arc<dyn RealToComplex<f64>>>>,
    inverse: Mutex<HashMap<usize, Arc<dyn ComplexToReal<f64>>>>,
}

impl RealFft {
    /// A process-wide shared instance.
    pub fn shared() -> &'static RealFft {
        static SHARED: OnceLock<RealFft> = OnceLock::new();
        SHARED.get_or_init(RealFft::default)
    }

    fn plan_forward(&self, n: usize) -> Arc<dyn RealToComplex<f64>> {
        let mut cache = lock(&self.forward);
        cache
            .entry(n)
            .or_insert_with(|| lock(&self.planner).plan_fft_forward(n))
            .clone()
    }

    fn plan_inverse(&self, n: usize) -> Arc<dyn ComplexToReal<f64>> {
        let mut cache = lock(&self.inverse);
        cache
            .entry(n)
            .or_insert_with(|| lock(&self.planner).plan_fft_inverse(n))
            .clone()
    }
}

fn lock<T>(m: &Mutex<T>) -> std::sync::MutexGuard<'_, T> {
    // A poisoned cache only means another thread panicked while inserting a plan; the map
    // itself is still valid.
    m.lock().unwrap_or_else(|p| p.into_inner())
}

impl Transform for RealFft {
    fn forward(&self, x: &[f64]) -> Vec<C64> {
        let n = x.len();
        if n == 0 {
            return Vec::new();
        }
        let plan = self.plan_forward(n);
        let mut input = x.to_vec();
        let mut out = plan.make_output_vec();
        let mut scratch = plan.make_scratch_vec();
        // Lengths come from the plan itself, so process cannot fail.
        let _ = plan.process_with_scratch(&mut input, &mut out, &mut scratch);
        let s = 1.0 / (n as f64).sqrt();
        out.iter_mut().for_each(|c| *c *= s);
        out
    }

    fn inverse(&self, c: &[C64], n: usize) -> Vec<f64> {
        if n == 0 {
            return Vec::new();
        }
        let plan = self.plan_inverse(n);
        let mut input = c.to_vec();
        input.resize(half_len(n), C64::new(0.0, 0.0));
        input[0].im = 0.0;
        if n.is_multiple_of(2) {
            input[n / 2].im = 0.0;
        }
        let mut out = plan.make_output_vec();
        let mut scratch = plan.make_scratch_vec();
        let _ = plan.process_with_scratch(&mut input, &mut out, &mut scratch);
        let s = 1.0 / (n as f64).sqrt();
        out.iter_mut().for_each(|v| *v *= s);
        out
    }
}

/// A reference transform on rustfft's scalar-only planner (`FftPlannerScalar`), as a full
/// complex FFT. Slower; used to check that archives decode within bound whatever SIMD the
/// decoding machine has.
pub struct ScalarFft {
    planner: Mutex<FftPlannerScalar<f64>>,
}

impl Default for ScalarFft {
    fn default() -> Self {
        ScalarFft {
            planner: Mutex::new(FftPlannerScalar::new()),
        }
    }
}

impl ScalarFft {
    fn plan(&self, n: usize, forward: bool) -> Arc<dyn Fft<f64>> {
        let mut p = lock(&self.planner);
        if forward {
            p.plan_fft_forward(n)
        } else {
            p.plan_fft_inverse(n)
        }
    }
}

impl Transform for ScalarFft {
    fn forward(&self, x: &[f64]) -> Vec<C64> {
        let n = x.len();
        if n == 0 {
            return Vec::new();
        }
        let mut buf: Vec<C64> = x.iter().map(|&v| C64::new(v, 0.0)).collect();
        self.plan(n, true).process(&mut buf);
        let s = 1.0 / (n as f64).sqrt();
        buf.truncate(half_len(n));
        buf.iter_mut().for_each(|c| *c *= s);
        buf
    }

    fn inverse(&self, c: &[C64], n: usize) -> Vec<f64> {
        if n == 0 {
            return Vec::new();
        }
        let h = half_len(n);
        let mut buf = vec![C64::new(0.0, 0.0); n];
        for k in 0..h.min(c.len()) {
            let v = if is_real_bin(k, n) {
                C64::new(c[k].re, 0.0)
            } else {
                c[k]
            };
            buf[k] = v;
            if k != 0 && n - k != k {
                buf[n - k] = v.conj();
            }
        }
        self.plan(n, false).process(&mut buf);
        let s = 1.0 / (n as f64).sqrt();
        buf.iter().map(|v| v.re * s).collect()
    }
}

/// Predict segment j's coefficients from the decoder's reconstruction of segment j−1.
///
/// `prev` holds the previous segment's kept coefficients (length = its order), `prev_n` its
/// length and `prev_ideal` its ideal length Λ = K·P in samples (P the period). For a signal
/// of period P, moving the segment start by `prev_n` samples advances the phase of bin k by
/// `2π·k·prev_n/Λ` (≡ `2π·k·(prev_n − Λ)/Λ` for integer k), and the orthonormal magnitude
/// scales by `√(n/prev_n)`. Returns `len` predicted bins (zero beyond `prev.len()`).
pub fn predict(prev: &[C64], prev_n: usize, prev_ideal: f64, n: usize, len: usize) -> Vec<C64> {
    let mut out = vec![C64::new(0.0, 0.0); len];
    if prev_n == 0 || !(prev_ideal > 0.0) {
        return out;
    }
    let scale = (n as f64 / prev_n as f64).sqrt();
    let frac = (prev_n as f64 - prev_ideal) / prev_ideal;
    let step = C64::from_polar(1.0, 2.0 * std::f64::consts::PI * frac);
    let mut rot = C64::new(scale, 0.0);
    let m = prev.len().min(len);
    for k in 0..m {
        let v = prev[k] * rot;
        out[k] = if is_real_bin(k, n) {
            C64::new(v.re, 0.0)
        } else {
            v
        };
        rot *= step;
    }
    out
}

/// Replace non-finite values by linear interpolation between the nearest finite neighbours
/// (nearest finite value at the edges; 0 when the slice has none). Returns the number of
/// finite values.
pub fn fill_non_finite(x: &mut [f64]) -> usize {
    let n = x.len();
    let finite = x.iter().filter(|v| v.is_finite()).count();
    if finite == n {
        return n;
    }
    if finite == 0 {
        x.iter_mut().for_each(|v| *v = 0.0);
        return 0;
    }
    let mut last: Option<usize> = None;
    let mut i = 0;
    while i < n {
        if x[i].is_finite() {
            last = Some(i);
            i += 1;
            continue;
        }
        let start = i;
        while i < n && !x[i].is_finite() {
            i += 1;
        }
        let next = if i < n { Some(i) } else { None };
        match (last, next) {
            (Some(a), Some(b)) => {
                let (va, vb) = (x[a], x[b]);
                for (j, slot) in x.iter_mut().enumerate().take(b).skip(start) {
                    let t = (j - a) as f64 / (b - a) as f64;
                    *slot = va + (vb - va) * t;
                }
            }
            (Some(a), None) => {
                let va = x[a];
                x[start..].iter_mut().for_each(|v| *v = va);
            }
            (None, Some(b)) => {
                let vb = x[b];
                x[start..b].iter_mut().for_each(|v| *v = vb);
            }
            (None, None) => {}
        }
    }
    finite
}

/// Amplitude (peak, channel units) and phase (radians, cosine at the segment start) of bin k
/// of an N-sample segment from its orthonormal coefficient.
pub fn amplitude_phase(c: C64, k: usize, n: usize) -> (f64, f64) {
    let a = c.norm() * weight(k, n) / (n as f64).sqrt();
    (a, c.arg())
}

/// Total harmonic distortion relative to the fundamental (IEEE 519: RMS of harmonics
/// 2 … `max_harmonic` over the fundamental) of a K-cycle segment from its one-sided
/// orthonormal coefficients (bins beyond `c.len()` count as zero). `None` when the fundamental
/// is zero or not represented.
pub fn thd(c: &[C64], cycles: usize, n: usize, max_harmonic: usize) -> Option<f64> {
    if cycles == 0 || cycles >= c.len() {
        return None;
    }
    let fund = c[cycles].norm() * weight(cycles, n);
    if !(fund > 0.0) {
        return None;
    }
    let mut sum = 0.0;
    for h in 2..=max_harmonic {
        let k = h * cycles;
        if k >= half_len(n) {
            break;
        }
        if k < c.len() {
            let a = c[k].norm() * weight(k, n);
            sum += a * a;
        }
    }
    Some(sum.sqrt() / fund)
}
