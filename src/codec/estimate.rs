//! Estimate a channel's fundamental from a stretch of samples: spectral peaks and their
//! sub-multiples as candidates, scored by the autocorrelation of the signal and of its first
//! difference at the candidate period, then refined by the phase advance of a windowed DTFT.
//!
//! Does not: cut segments (that is `segment`).

use serde::Serialize;

use rustfft::num_complex::Complex;

use crate::signal::{RealFft, Transform};

/// Below this autocorrelation at the estimated period a run counts as not periodic.
pub const DEFAULT_MIN_CONFIDENCE: f64 = 0.5;

/// Spectral peaks considered as fundamental candidates (each with its sub-multiples).
const PEAK_CANDIDATES: usize = 5;

/// Fewest samples a window needs for an estimate.
pub(crate) const MIN_ESTIMATE_SAMPLES: usize = 64;

/// An estimate of the fundamental.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Estimate {
    /// Frequency (Hz).
    pub hz: f64,
    /// Normalized autocorrelation at the period (1 = perfectly periodic).
    pub confidence: f64,
}

/// Estimate the fundamental of `x` sampled at `fs`, searching `[f_lo, f_hi]` Hz.
pub fn estimate_fundamental(x: &[f64], fs: f64, f_lo: f64, f_hi: f64) -> Option<Estimate> {
    let n = x.len();
    if n < MIN_ESTIMATE_SAMPLES || !x.iter().all(|v| v.is_finite()) {
        return None;
    }
    let mean = x.iter().sum::<f64>() / n as f64;
    let xc: Vec<f64> = x.iter().map(|v| v - mean).collect();
    let energy: f64 = xc.iter().map(|v| v * v).sum();
    if !(energy > 0.0) || !energy.is_finite() {
        return None;
    }
    // Hann window, zero-padded to ≥ 2n for a smooth peak.
    let m = (2 * n).next_power_of_two();
    let mut buf = vec![0.0; m];
    for (i, v) in xc.iter().enumerate() {
        buf[i] = v * hann(i, n);
    }
    let spec = RealFft::shared().forward(&buf);
    let mag: Vec<f64> = spec.iter().map(|c| c.norm()).collect();
    let bin_hz = fs / m as f64;
    // At least two cycles in the window.
    let f_lo = f_lo.max(2.0 * fs / n as f64);
    let f_hi = f_hi.min(0.45 * fs);
    let k_lo = ((f_lo / bin_hz).ceil() as usize).max(1);
    let k_hi = ((f_hi / bin_hz).floor() as usize).min(mag.len().saturating_sub(2));
    if k_lo >= k_hi {
        return None;
    }
    // Normalized autocorrelation for every lag of the signal and of its first difference, from
    // their power spectra (Wiener–Khinchin), zero-padded so the circular correlation does not
    // wrap. The difference removes slow wander that would otherwise dominate; a signal
    // periodic in P has both correlate at P.
    let diff: Vec<f64> = xc.windows(2).map(|w| w[1] - w[0]).collect();
    let acfs = [normalized_acf(&xc, m), normalized_acf(&diff, m)];
    let corr =
        |lag: f64| -> (f64, f64) { (interpolate(&acfs[0], lag), interpolate(&acfs[1], lag)) };
    // Candidates: the strongest few spectral peaks and their sub-multiples (the fundamental
    // may be weaker than a harmonic, and a slow drift may hold the largest peak).
    let mut peaks: Vec<usize> = (k_lo..=k_hi)
        .filter(|&k| mag[k] >= mag[k - 1] && mag[k] > mag[k + 1])
        .collect();
    peaks.sort_by(|&a, &b| mag[b].total_cmp(&mag[a]).then(a.cmp(&b)));
    peaks.truncate(PEAK_CANDIDATES);
    let mut cands: Vec<(f64, (f64, f64))> = Vec::new();
    // The half-length Hann window, computed once for every peak's phase refinement.
    let half_window: Vec<f64> = (0..n / 2).map(|i| hann(i, n / 2)).collect();
    for &k in &peaks {
        let peak_hz = refine_peak(&mag, k) * bin_hz;
        let peak_hz = refine_by_phase(&xc, fs, peak_hz, &half_window).unwrap_or(peak_hz);
        for d in 1..=6 {
            let f = peak_hz / d as f64;
            if f >= f_lo * 0.999 {
                cands.push((f, corr(fs / f)));
            }
        }
    }
    // And each autocorrelation's own highest peak after its first zero crossing (the classic
    // time-domain period estimate), refined by a parabola through its neighbours.
    let lag_lo = ((fs / f_hi).floor() as usize).max(1);
    let lag_hi = ((fs / f_lo).ceil() as usize).min(n / 2);
    for acf in &acfs {
        let hi = lag_hi.min(acf.len().saturating_sub(1));
        let Some(zero) = (1..hi).find(|&l| acf[l] <= 0.0) else {
            continue;
        };
        let lo = zero.max(lag_lo);
        if let Some(l) = (lo..hi).max_by(|&a, &b| acf[a].total_cmp(&acf[b])) {
            if l > lo && l + 1 < hi {
                let (a, b, c) = (acf[l - 1], acf[l], acf[l + 1]);
                let den = a - 2.0 * b + c;
                let d = if den.abs() > 0.0 {
                    (0.5 * (a - c) / den).clamp(-0.5, 0.5)
                } else {
                    0.0
                };
                let f = fs / (l as f64 + d);
                cands.push((f, corr(fs / f)));
            }
        }
    }
    // Score by the signal's own correlation; only when nothing correlates there (slow wander
    // hiding the period) by the difference's as well.
    let raw_best = cands
        .iter()
        .map(|c| c.1 .0)
        .fold(f64::NEG_INFINITY, f64::max);
    let use_diff = raw_best < DEFAULT_MIN_CONFIDENCE;
    let cands: Vec<(f64, f64)> = cands
        .iter()
        .map(|&(f, (r, d))| (f, if use_diff { r.max(d) } else { r }))
        .collect();
    let best = cands.iter().map(|c| c.1).fold(f64::NEG_INFINITY, f64::max);
    if !(best > 0.0) {
        return None;
    }
    // The best-correlated candidate, unless a near-integer multiple of it correlates almost as
    // well: a signal periodic in P also correlates at 2P, 3P, …, and the shortest such period
    // is the fundamental's.
    let (fb, cb) = cands
        .iter()
        .copied()
        .max_by(|a, b| a.1.total_cmp(&b.1).then(a.0.total_cmp(&b.0)))?;
    let (hz, conf) = cands
        .iter()
        .copied()
        .filter(|&(f, c)| {
            let m = f / fb;
            c >= 0.9 * cb && m >= 1.5 && (m - m.round()).abs() < 0.03 * m.round()
        })
        .max_by(|a, b| a.0.total_cmp(&b.0))
        .unwrap_or((fb, cb));
    (hz.is_finite() && hz > 0.0).then_some(Estimate {
        hz,
        confidence: conf.clamp(-1.0, 1.0),
    })
}

/// Normalized, unbiased autocorrelation r(l)/r(0)·n/(n−l) of a zero-mean signal for lags
/// 0 … n−1, through a zero-padded FFT of length `m ≥ 2n`.
fn normalized_acf(x: &[f64], m: usize) -> Vec<f64> {
    let n = x.len();
    let mut padded = vec![0.0; m];
    padded[..n].copy_from_slice(x);
    let power: Vec<_> = RealFft::shared()
        .forward(&padded)
        .iter()
        .map(|c| rustfft::num_complex::Complex::new(c.norm_sqr(), 0.0))
        .collect();
    let acf = RealFft::shared().inverse(&power, m);
    let r0 = acf[0];
    if !(r0 > 0.0) {
        return vec![f64::NEG_INFINITY; n];
    }
    (0..n)
        .map(|l| acf[l] / r0 * n as f64 / (n - l) as f64)
        .collect()
}

/// Linear interpolation of `a` at a fractional index (−∞ outside).
fn interpolate(a: &[f64], at: f64) -> f64 {
    if !(at >= 1.0) || at as usize + 1 >= a.len() {
        return f64::NEG_INFINITY;
    }
    let l0 = at.floor() as usize;
    let t = at - l0 as f64;
    a[l0] * (1.0 - t) + a[l0 + 1] * t
}

fn hann(i: usize, n: usize) -> f64 {
    let t = std::f64::consts::PI * (i as f64 + 0.5) / n as f64;
    t.sin().powi(2)
}

/// Parabolic interpolation of the log magnitude around bin k; returns the fractional bin.
fn refine_peak(mag: &[f64], k: usize) -> f64 {
    if k == 0 || k + 1 >= mag.len() {
        return k as f64;
    }
    let (a, b, c) = (
        mag[k - 1].max(1e-300).ln(),
        mag[k].max(1e-300).ln(),
        mag[k + 1].max(1e-300).ln(),
    );
    let den = a - 2.0 * b + c;
    if den.abs() < 1e-300 {
        return k as f64;
    }
    k as f64 + (0.5 * (a - c) / den).clamp(-0.5, 0.5)
}

/// Refine a tone frequency by the phase advance of its DTFT between the two halves of `x`;
/// `window` is the Hann window of the half length, `hann(i, x.len() / 2)`.
fn refine_by_phase(x: &[f64], fs: f64, f: f64, window: &[f64]) -> Option<f64> {
    let h = x.len() / 2;
    debug_assert_eq!(window.len(), h);
    if h < MIN_ESTIMATE_SAMPLES / 2 {
        return None;
    }
    let w = 2.0 * std::f64::consts::PI * f / fs;
    // Σ a_i·e^(−iωi) by a rotating phasor, re-anchored from the exact angle every
    // `REANCHOR` samples so that its rounding cannot build up: no libm call per sample.
    const REANCHOR: usize = 256;
    let turn = Complex::from_polar(1.0, -w);
    let dtft = |seg: &[f64]| {
        let mut acc = Complex::new(0.0, 0.0);
        let mut z = Complex::new(1.0, 0.0);
        for (i, (v, wi)) in seg.iter().zip(window).enumerate() {
            if i % REANCHOR == 0 {
                z = Complex::from_polar(1.0, -w * i as f64);
            }
            acc += z * (v * wi);
            z *= turn;
        }
        acc
    };
    let za = dtft(&x[..h]);
    let zb = dtft(&x[h..2 * h]);
    if za.norm() == 0.0 || zb.norm() == 0.0 {
        return None;
    }
    let measured = (zb / za).arg();
    let expected = w * h as f64;
    let two_pi = 2.0 * std::f64::consts::PI;
    let mut d = (measured - expected) % two_pi;
    if d > std::f64::consts::PI {
        d -= two_pi;
    } else if d < -std::f64::consts::PI {
        d += two_pi;
    }
    let refined = f + d * fs / (two_pi * h as f64);
    // Only accept a correction within the half-window's resolution.
    ((refined - f).abs() < fs / (2.0 * h as f64) && refined > 0.0).then_some(refined)
}
