//! Segment: find the fundamental (given, or estimated and tracked through speed drift) and cut
//! a run of samples into segments of K whole cycles. The result is a [`SegmentPlan`], plain
//! data that tests compare without running the rest.
//!
//! Estimation: the spectral peak of a Hann-windowed, zero-padded window, refined below one bin
//! by parabolic interpolation of the log magnitude (J. O. Smith, "Spectral Audio Signal
//! Processing", quadratic interpolation of spectral peaks) and then by the phase advance of
//! the peak between the window's two halves; the peak is checked against the normalized
//! autocorrelation at multiples of its period, so that a strong harmonic is not taken for the
//! fundamental. The confidence reported is that autocorrelation at the chosen period.
//!
//! Boundaries: with P = fs/f0 samples per cycle (not an integer in general) a segment spans
//! K·P samples and boundaries sit at round(φ_j), φ_{j+1} = φ_j + K·P_j with P_j the local
//! period, so lengths differ by a sample. A run with no periodicity is cut into fixed-length
//! blocks. The tail shorter than a segment is a segment of its own: nothing is dropped.
//!
//! Does not: transform segments (that is `fit`).

use serde::Serialize;

use crate::signal::{RealFft, Transform};

/// Segments span at least this long by default: the harmonic measurement window of
/// IEC 61000-4-7 (10 cycles at 50 Hz, 12 at 60 Hz).
pub const DEFAULT_MIN_SEGMENT_SECONDS: f64 = 0.2;

/// Length of the fixed blocks used when a run has no periodicity.
pub const DEFAULT_FALLBACK_SEGMENT_SECONDS: f64 = 0.2;

/// Below this autocorrelation at the estimated period a run counts as not periodic.
pub const DEFAULT_MIN_CONFIDENCE: f64 = 0.5;

/// Tracking windows span at least this many estimated cycles.
pub const TRACK_MIN_CYCLES: f64 = 8.0;

/// Tracking windows span at least this long.
pub const TRACK_MIN_SECONDS: f64 = 0.5;

/// No segment is longer than this many samples.
pub const MAX_SEGMENT_SAMPLES: usize = 1 << 20;

/// Fewest samples a window needs for an estimate.
const MIN_ESTIMATE_SAMPLES: usize = 64;

/// How the fundamental is found.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub enum FundamentalSetting {
    /// Given in Hz; used as is, without tracking.
    Hz(f64),
    /// Estimated from the data and tracked per window.
    Auto,
    /// No periodic model: fixed-length blocks.
    None,
}

/// Segmentation settings (resolved).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SegmentSettings {
    /// Sample rate (Hz).
    pub sample_rate: f64,
    /// Fundamental setting.
    pub fundamental: FundamentalSetting,
    /// Whole cycles per segment; `None`: fewest spanning `min_segment_seconds`.
    pub cycles_per_segment: Option<u32>,
    /// Minimum segment duration when K is chosen automatically.
    pub min_segment_seconds: f64,
    /// Block length (seconds) when not periodic.
    pub fallback_segment_seconds: f64,
    /// Minimum confidence for an estimate to count.
    pub min_confidence: f64,
}

impl SegmentSettings {
    /// Defaults for a sample rate.
    pub fn new(sample_rate: f64) -> Self {
        SegmentSettings {
            sample_rate,
            fundamental: FundamentalSetting::Auto,
            cycles_per_segment: None,
            min_segment_seconds: DEFAULT_MIN_SEGMENT_SECONDS,
            fallback_segment_seconds: DEFAULT_FALLBACK_SEGMENT_SECONDS,
            min_confidence: DEFAULT_MIN_CONFIDENCE,
        }
    }
}

/// An estimate of the fundamental.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Estimate {
    /// Frequency (Hz).
    pub hz: f64,
    /// Normalized autocorrelation at the period (1 = perfectly periodic).
    pub confidence: f64,
}

/// One planned segment.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct PlannedSegment {
    /// First sample (index into the run).
    pub start: usize,
    /// Number of samples.
    pub len: usize,
    /// Whole cycles K (0 when not periodic).
    pub cycles: u32,
    /// Ideal length Λ = K·P in samples, rounded to f32 (the value stored in the archive);
    /// equals `len` when not periodic.
    pub ideal_len: f32,
}

impl PlannedSegment {
    /// Fundamental of the segment in Hz, if periodic.
    pub fn fundamental_hz(&self, fs: f64) -> Option<f64> {
        (self.cycles > 0).then(|| fs * self.cycles as f64 / self.ideal_len as f64)
    }
}

/// How the fundamental of a run was found.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum FundamentalSource {
    /// Given by the user.
    Given,
    /// Estimated from the data.
    Estimated,
    /// Not periodic (fixed blocks), or not enough data to estimate.
    NotPeriodic,
}

/// The segmentation of one run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SegmentPlan {
    /// Segments in order, tiling the run.
    pub segments: Vec<PlannedSegment>,
    /// The first estimate (or the given value) for the run.
    pub fundamental: Option<Estimate>,
    /// How it was found.
    pub source: FundamentalSource,
    /// Lowest and highest tracked fundamental (Hz).
    pub tracked_range: Option<(f64, f64)>,
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
    let k = (k_lo..=k_hi).max_by(|&a, &b| mag[a].total_cmp(&mag[b]))?;
    let peak_hz = refine_peak(&mag, k) * bin_hz;
    let peak_hz = refine_by_phase(&xc, fs, peak_hz).unwrap_or(peak_hz);
    // Octave check: the fundamental may be the peak divided by m.
    let r: Vec<(usize, f64)> = (1..=6)
        .map(|d| (d, peak_hz / d as f64))
        .filter(|&(_, f)| f >= f_lo * 0.999)
        .map(|(d, f)| (d, autocorrelation(&xc, energy, fs / f)))
        .collect();
    let best = r.iter().map(|p| p.1).fold(f64::NEG_INFINITY, f64::max);
    let &(d, conf) = r.iter().find(|p| p.1 >= 0.9 * best)?;
    let hz = peak_hz / d as f64;
    (hz.is_finite() && hz > 0.0).then_some(Estimate {
        hz,
        confidence: conf.clamp(-1.0, 1.0),
    })
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

/// Refine a tone frequency by the phase advance of its DTFT between the two halves of `x`.
fn refine_by_phase(x: &[f64], fs: f64, f: f64) -> Option<f64> {
    let h = x.len() / 2;
    if h < MIN_ESTIMATE_SAMPLES / 2 {
        return None;
    }
    let w = 2.0 * std::f64::consts::PI * f / fs;
    let dtft = |seg: &[f64]| {
        let (mut re, mut im) = (0.0, 0.0);
        for (i, v) in seg.iter().enumerate() {
            let a = v * hann(i, h);
            let ph = w * i as f64;
            re += a * ph.cos();
            im -= a * ph.sin();
        }
        rustfft::num_complex::Complex::new(re, im)
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

/// Normalized autocorrelation of a zero-mean signal at a fractional lag (linear
/// interpolation between the neighbouring integer lags).
pub fn autocorrelation(x: &[f64], energy: f64, lag: f64) -> f64 {
    let n = x.len();
    if !(lag >= 1.0) || lag as usize >= n {
        return f64::NEG_INFINITY;
    }
    let r = |l: usize| -> f64 {
        if l >= n {
            return 0.0;
        }
        let s: f64 = x[..n - l].iter().zip(&x[l..]).map(|(a, b)| a * b).sum();
        // Unbiased for the overlap, normalized by the energy.
        s / energy * n as f64 / (n - l) as f64
    };
    let l0 = lag.floor() as usize;
    let t = lag - l0 as f64;
    r(l0) * (1.0 - t) + r(l0 + 1) * t
}

/// Cycles per segment: the given K, or the fewest whole cycles spanning `min_seconds`,
/// capped so that a segment stays within [`MAX_SEGMENT_SAMPLES`].
pub fn cycles_per_segment(settings: &SegmentSettings, period: f64) -> u32 {
    let k = match settings.cycles_per_segment {
        Some(k) => k.max(1),
        None => {
            let cycle_s = period / settings.sample_rate;
            ((settings.min_segment_seconds / cycle_s) - 1e-9)
                .ceil()
                .max(1.0) as u32
        }
    };
    let cap = ((MAX_SEGMENT_SAMPLES as f64 / period).floor() as u32).max(1);
    k.min(cap)
}

/// Plan the segments of one run of samples (non-finite values allowed; they are ignored by
/// estimation, which then uses the longest finite stretch of each window).
pub fn plan_segments(x: &[f64], settings: &SegmentSettings) -> SegmentPlan {
    let fs = settings.sample_rate;
    let n = x.len();
    match settings.fundamental {
        FundamentalSetting::None => fixed_blocks(n, settings, FundamentalSource::NotPeriodic, None),
        FundamentalSetting::Hz(f0) => {
            let period = fs / f0;
            if !(period >= 2.0) || period > MAX_SEGMENT_SAMPLES as f64 {
                return fixed_blocks(n, settings, FundamentalSource::NotPeriodic, None);
            }
            let k = cycles_per_segment(settings, period);
            let segs = cut(0, n, 0.0, k, period);
            SegmentPlan {
                segments: segs,
                fundamental: Some(Estimate {
                    hz: f0,
                    confidence: 1.0,
                }),
                source: FundamentalSource::Given,
                tracked_range: Some((f0, f0)),
            }
        }
        FundamentalSetting::Auto => plan_tracked(x, settings),
    }
}

/// Longest run of finite values in `x` (as a slice).
fn longest_finite(x: &[f64]) -> &[f64] {
    let (mut best, mut cur) = ((0, 0), 0);
    for (i, v) in x.iter().enumerate() {
        if v.is_finite() {
            if i + 1 - cur > best.1 - best.0 {
                best = (cur, i + 1);
            }
        } else {
            cur = i + 1;
        }
    }
    &x[best.0..best.1]
}

fn plan_tracked(x: &[f64], settings: &SegmentSettings) -> SegmentPlan {
    let fs = settings.sample_rate;
    let n = x.len();
    // Global estimate on the first stretch (up to 2^17 samples).
    let head = longest_finite(&x[..n.min(1 << 17)]);
    let f_min = 2.0 * fs / MAX_SEGMENT_SAMPLES as f64;
    let global = estimate_fundamental(head, fs, f_min, fs / 2.0)
        .filter(|e| e.confidence >= settings.min_confidence && fs / e.hz >= 2.0);
    let Some(global) = global else {
        return fixed_blocks(n, settings, FundamentalSource::NotPeriodic, None);
    };
    let window = ((TRACK_MIN_CYCLES * fs / global.hz).max(TRACK_MIN_SECONDS * fs) as usize)
        .clamp(MIN_ESTIMATE_SAMPLES * 4, 1 << 17);
    let mut f_cur = global.hz;
    let (mut lo, mut hi) = (f_cur, f_cur);
    let mut segs = Vec::new();
    let mut phi = 0.0f64;
    let mut block_start = 0usize;
    while block_start < n {
        let block_end = (block_start + window).min(n);
        // Estimate on a window centred on this block, searching near the current estimate.
        let c = (block_start + block_end) / 2;
        let a = c.saturating_sub(window / 2);
        let b = (a + window).min(n);
        let local = longest_finite(&x[a..b]);
        if local.len() >= window / 2 {
            if let Some(e) = estimate_fundamental(local, fs, f_cur / 1.25, f_cur * 1.25) {
                if e.confidence >= settings.min_confidence && (e.hz / f_cur - 1.0).abs() < 0.2 {
                    f_cur = e.hz;
                }
            }
        }
        lo = lo.min(f_cur);
        hi = hi.max(f_cur);
        let period = fs / f_cur;
        let k = cycles_per_segment(settings, period);
        let ideal = k as f64 * period;
        // Cut segments that start inside this block.
        while (phi.round() as usize) < block_end {
            let s = phi.round() as usize;
            let next = phi + ideal;
            let e_full = next.round() as usize;
            let e = e_full.min(n);
            if e <= s {
                break;
            }
            let whole = e == e_full;
            segs.push(PlannedSegment {
                start: s,
                len: e - s,
                cycles: if whole { k } else { 0 },
                ideal_len: if whole { ideal as f32 } else { (e - s) as f32 },
            });
            phi = next;
            if e == n {
                break;
            }
        }
        block_start = block_end;
    }
    SegmentPlan {
        segments: segs,
        fundamental: Some(global),
        source: FundamentalSource::Estimated,
        tracked_range: Some((lo, hi)),
    }
}

/// Cut `[start, end)` into K-cycle segments of ideal length K·P starting at phase `phi0`.
/// The final partial segment (shorter than K cycles) is marked as not periodic.
fn cut(start: usize, end: usize, phi0: f64, k: u32, period: f64) -> Vec<PlannedSegment> {
    let ideal = k as f64 * period;
    let mut out = Vec::new();
    let mut j = 0u64;
    loop {
        let s = start + (phi0 + j as f64 * ideal).round() as usize;
        if s >= end {
            break;
        }
        let e_full = start + (phi0 + (j + 1) as f64 * ideal).round() as usize;
        let e = e_full.min(end);
        let whole = e == e_full;
        out.push(PlannedSegment {
            start: s,
            len: e - s,
            cycles: if whole { k } else { 0 },
            ideal_len: if whole { ideal as f32 } else { (e - s) as f32 },
        });
        j += 1;
    }
    out
}

fn fixed_blocks(
    n: usize,
    settings: &SegmentSettings,
    source: FundamentalSource,
    estimate: Option<Estimate>,
) -> SegmentPlan {
    let len = ((settings.fallback_segment_seconds * settings.sample_rate).round() as usize)
        .clamp(16, MAX_SEGMENT_SAMPLES);
    let segments = (0..n)
        .step_by(len)
        .map(|s| {
            let l = len.min(n - s);
            PlannedSegment {
                start: s,
                len: l,
                cycles: 0,
                ideal_len: l as f32,
            }
        })
        .collect();
    SegmentPlan {
        segments,
        fundamental: estimate,
        source,
        tracked_range: None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tiles(plan: &SegmentPlan, n: usize) -> bool {
        let mut pos = 0;
        for s in &plan.segments {
            if s.start != pos || s.len == 0 {
                return false;
            }
            pos += s.len;
        }
        pos == n
    }

    #[test]
    fn iec_window_gives_10_cycles_at_50_hz_and_12_at_60_hz() {
        // IEC 61000-4-7: 10 cycles at 50 Hz, 12 at 60 Hz (≈ 200 ms).
        let s = SegmentSettings::new(10_240.0);
        assert_eq!(cycles_per_segment(&s, 10_240.0 / 50.0), 10);
        assert_eq!(cycles_per_segment(&s, 10_240.0 / 60.0), 12);
    }

    #[test]
    fn given_fundamental_tiles_the_run_with_lengths_differing_by_one() {
        let mut s = SegmentSettings::new(25_600.0);
        s.fundamental = FundamentalSetting::Hz(29.5);
        let n = 100_000;
        let plan = plan_segments(&vec![0.0; n], &s);
        assert!(tiles(&plan, n));
        let whole: Vec<usize> = plan
            .segments
            .iter()
            .filter(|p| p.cycles > 0)
            .map(|p| p.len)
            .collect();
        let (mn, mx) = (whole.iter().min().unwrap(), whole.iter().max().unwrap());
        assert!(mx - mn <= 1, "{mn} {mx}");
    }

    #[test]
    fn noise_falls_back_to_fixed_blocks() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let x: Vec<f64> = (0..20_000).map(|_| rng.random::<f64>() - 0.5).collect();
        let plan = plan_segments(&x, &SegmentSettings::new(10_000.0));
        assert_eq!(plan.source, FundamentalSource::NotPeriodic);
        assert!(tiles(&plan, x.len()));
    }
}
