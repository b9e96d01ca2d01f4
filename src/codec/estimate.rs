//! Estimate a channel's fundamental from a stretch of samples, and follow it as it drifts.
//!
//! Candidates come from three places, so that no single one has to be right: the strongest
//! spectral peaks and their sub-multiples; the spacings between strong peaks (a missing
//! fundamental, or sidebands around a gear mesh, are spaced by it); and the highest peak of the
//! autocorrelation after its first zero crossing (the time-domain period). Each is scored by
//! its harmonic comb, in the spirit of subharmonic summation (D. J. Hermes, J. Acoust. Soc.
//! Am. 83(1), 1988): the share of the signal's power that lies within a main lobe of one of
//! its harmonics, less the share such bands would catch by chance (their coverage of the
//! band). A strong high harmonic (a gear mesh, a blade pass) explains only its own line, so
//! it loses to the shaft rate whose comb holds it and everything else; a sub-multiple of the
//! truth explains no more power than the truth but covers twice the band, so it loses too.
//!
//! The comb score ranks candidates; the segment planner lets the coded size of a trial
//! stretch decide between the finalists (`segment`). Tracking refines the current fundamental
//! within a few per cent by the peak of the comb's summed power on a fine grid.
//!
//! Spectra are of the mean-removed, Hann-windowed stretch, zero-padded to at least twice its
//! length; peaks are refined by parabolic interpolation of the log magnitude (J. O. Smith,
//! "Spectral Audio Signal Processing", quadratic interpolation of spectral peaks).
//!
//! Does not: cut segments (that is `segment`).

use serde::Serialize;

use crate::signal::{RealFft, Transform};

/// Below this autocorrelation at the period a candidate is not tried when no trial coder
/// arbitrates (with one, bytes decide).
pub const DEFAULT_MIN_CONFIDENCE: f64 = 0.5;

/// Fewest samples a window needs for an estimate.
pub(crate) const MIN_ESTIMATE_SAMPLES: usize = 64;

/// Spectral peaks taken as candidate sources.
const PEAKS: usize = 8;

/// Sub-multiples tried of each peak.
const SUB_MULTIPLES: usize = 8;

/// Highest harmonic the tracking comb sums.
const TRACK_HARMONICS: usize = 40;

/// An estimate of the fundamental.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Estimate {
    /// Frequency (Hz).
    pub hz: f64,
    /// Normalized autocorrelation at the period (1 = perfectly periodic).
    pub confidence: f64,
}

/// A candidate fundamental.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Candidate {
    /// Frequency (Hz).
    pub hz: f64,
    /// Share of the power its harmonics' lines hold.
    pub score: f64,
    /// Normalized autocorrelation at the period.
    pub confidence: f64,
}

impl Candidate {
    /// The candidate as an estimate.
    pub fn estimate(&self) -> Estimate {
        Estimate {
            hz: self.hz,
            confidence: self.confidence,
        }
    }
}

/// A bin is part of a line above this many times the local noise floor (the median power
/// of its block); white noise exceeds it in about one bin of a thousand (power is
/// exponentially distributed: P = 2^−10).
const LINE_OVER_FLOOR: f64 = 10.0;

/// Bins per block of the local noise floor.
const FLOOR_BLOCK: usize = 64;

/// The power spectrum of a stretch: mean removed, Hann window, zero-padded.
struct Spectrum {
    power: Vec<f64>,
    /// Running sums of the line measure: `line_sum[k]` = Σ_{j<k} ln(power_j / local floor)
    /// over line bins (others count 0; see [`Spectrum::score`]).
    line_sum: Vec<f64>,
    /// Hz per padded bin.
    bin_hz: f64,
    /// Padded length over the stretch's length (≥ 2).
    pad: f64,
    fs: f64,
}

impl Spectrum {
    fn new(x: &[f64], fs: f64) -> Option<Spectrum> {
        let n = x.len();
        if n < MIN_ESTIMATE_SAMPLES || !x.iter().all(|v| v.is_finite()) {
            return None;
        }
        let mean = x.iter().sum::<f64>() / n as f64;
        let m = (2 * n).next_power_of_two();
        let mut buf = vec![0.0; m];
        with_hann(n, |w| {
            for ((b, v), w) in buf.iter_mut().zip(x).zip(w) {
                *b = (v - mean) * w;
            }
        });
        let power: Vec<f64> = RealFft::shared()
            .forward(&buf)
            .iter()
            .map(|c| c.norm_sqr())
            .collect();
        let total: f64 = power.iter().sum();
        // The local floor: the median power of each block of FLOOR_BLOCK bins.
        let mut line = vec![0.0; power.len()];
        // Powers are finite and not negative, so their bit patterns sort as they do: the
        // median is selected on integers.
        let mut sorted: Vec<u64> = Vec::with_capacity(FLOOR_BLOCK);
        for (lb, pb) in line.chunks_mut(FLOOR_BLOCK).zip(power.chunks(FLOOR_BLOCK)) {
            sorted.clear();
            sorted.extend(pb.iter().map(|p| p.to_bits()));
            let mid = sorted.len() / 2;
            let floor = f64::from_bits(*sorted.select_nth_unstable(mid).1);
            for (l, &p) in lb.iter_mut().zip(pb) {
                if p > LINE_OVER_FLOOR * floor {
                    *l = (p / floor).ln();
                }
            }
        }
        let mut line_sum = Vec::with_capacity(line.len() + 1);
        let mut acc = 0.0;
        line_sum.push(acc);
        for l in line {
            acc += l;
            line_sum.push(acc);
        }
        (total > 0.0 && total.is_finite()).then_some(Spectrum {
            line_sum,
            power,
            bin_hz: fs / m as f64,
            pad: m as f64 / n as f64,
            fs,
        })
    }

    /// Highest frequency the combs look at.
    fn top_hz(&self) -> f64 {
        0.45 * self.fs
    }

    /// Power at frequency `f`, linearly interpolated between padded bins.
    fn at(&self, f: f64) -> f64 {
        let b = f / self.bin_hz;
        // `b` is not negative: truncation is its floor (and no libm call).
        let k = b as usize;
        if k + 1 >= self.power.len() {
            return 0.0;
        }
        let t = b - k as f64;
        self.power[k] * (1.0 - t) + self.power[k + 1] * t
    }

    /// Summed power at the first harmonics of `f` (at most `max_h`, below the top).
    fn comb_power(&self, f: f64, max_h: usize) -> f64 {
        (1..=max_h)
            .map(|h| h as f64 * f)
            .take_while(|&hf| hf <= self.top_hz())
            .map(|hf| self.at(hf))
            .sum()
    }

    /// The comb score of `f` (a harmonic sieve): of the spectrum's line bins (bins above
    /// [`LINE_OVER_FLOOR`] times the local noise floor, each weighted by the log of its
    /// height over that floor), the share within ±1 unpadded bin of a harmonic of `f`, less
    /// the share the same sieve would catch by chance (the fraction of the band it covers).
    /// Heights over the local floor, not power, so that neither a slow wander nor a strong
    /// high harmonic outweighs the rest of the lines: a sub-multiple of the truth catches
    /// the same lines with twice the coverage; a strong harmonic misses the lines between its
    /// own.
    fn score(&self, f: f64) -> f64 {
        let half = self.pad.ceil() as usize;
        let lo = half;
        let hi = ((self.top_hz() / self.bin_hz) as usize).min(self.power.len() - 1);
        if lo >= hi {
            return 0.0;
        }
        // Σ of the line measure over bins a ..= b.
        let lines_in = |a: usize, b: usize| self.line_sum[b + 1] - self.line_sum[a];
        let lines = lines_in(lo, hi);
        if !(lines > 0.0) {
            return 0.0;
        }
        let (mut caught, mut covered, mut next) = (0.0, 0usize, lo);
        let mut h = 1.0;
        loop {
            let c = (h * f / self.bin_hz).round() as usize;
            if c > hi {
                break;
            }
            let a = c.saturating_sub(half).max(next);
            let b = (c + half).min(hi);
            if a <= b {
                caught += lines_in(a, b);
                covered += b + 1 - a;
                next = b + 1;
            }
            h += 1.0;
        }
        (caught - lines * covered as f64 / (hi + 1 - lo) as f64) / lines
    }

    /// Local maxima of the power in `[f_lo, top]`, strongest first, refined below a bin.
    fn peaks(&self, f_lo: f64, count: usize) -> Vec<f64> {
        let k_lo = ((f_lo / self.bin_hz).ceil() as usize).max(1);
        let k_hi = ((self.top_hz() / self.bin_hz) as usize).min(self.power.len() - 2);
        let mut peaks: Vec<usize> = (k_lo..=k_hi)
            .filter(|&k| self.power[k] >= self.power[k - 1] && self.power[k] > self.power[k + 1])
            .collect();
        let order = |a: &usize, b: &usize| self.power[*b].total_cmp(&self.power[*a]).then(a.cmp(b));
        if peaks.len() > count && count > 0 {
            peaks.select_nth_unstable_by(count - 1, order);
        }
        peaks.truncate(count);
        peaks.sort_by(order);
        peaks
            .into_iter()
            .map(|k| refine_peak(&self.power, k) * self.bin_hz)
            .collect()
    }
}

/// Candidate fundamentals of `x` sampled at `fs` within `[f_lo, f_hi]` Hz, best comb score
/// first, none within 1 % of a better one; at most `limit`.
pub fn candidates(x: &[f64], fs: f64, f_lo: f64, f_hi: f64, limit: usize) -> Vec<Candidate> {
    let n = x.len();
    let Some(spec) = Spectrum::new(x, fs) else {
        return Vec::new();
    };
    let top = spec.top_hz();
    // At least four cycles in the stretch, so that the sieve's windows do not touch.
    let f_lo = f_lo.max(4.0 * fs / n as f64);
    let f_hi = f_hi.min(top);
    if !(f_lo < f_hi) {
        return Vec::new();
    }
    let in_range = |f: f64| f >= f_lo && f <= f_hi;
    // The first difference's spectrum too: it lifts harmonics over slow wander (a baseline
    // drift holds the largest peaks of an ECG, its beats' harmonics do not).
    let diff_x: Vec<f64> = x.windows(2).map(|w| w[1] - w[0]).collect();
    let specs: Vec<Spectrum> = std::iter::once(spec)
        .chain(Spectrum::new(&diff_x, fs))
        .collect();
    let mut raw: Vec<f64> = Vec::new();
    for sp in &specs {
        let peaks = sp.peaks(f_lo.min(f_hi), PEAKS);
        for &p in &peaks {
            raw.extend(
                (1..=SUB_MULTIPLES)
                    .map(|d| p / d as f64)
                    .filter(|&f| in_range(f)),
            );
        }
        for (i, &a) in peaks.iter().enumerate().take(6) {
            for &b in peaks.iter().take(6).skip(i + 1) {
                let d = (a - b).abs();
                if in_range(d) {
                    raw.push(d);
                }
            }
        }
    }
    let mean = x.iter().sum::<f64>() / n as f64;
    let xc: Vec<f64> = x.iter().map(|v| v - mean).collect();
    let diff: Vec<f64> = xc.windows(2).map(|w| w[1] - w[0]).collect();
    let m = (2 * n).next_power_of_two();
    // The energy envelope of the difference: impulsive signals (heart beats, bearing
    // impacts) repeat in it even when their waveform varies from beat to beat.
    let env_mean = diff.iter().map(|v| v * v).sum::<f64>() / diff.len().max(1) as f64;
    let env: Vec<f64> = diff.iter().map(|v| v * v - env_mean).collect();
    let acfs = [normalized_acf(&xc, m), normalized_acf(&diff, m)];
    let lag_lo = ((fs / f_hi).floor() as usize).max(1);
    let lag_hi = ((fs / f_lo).ceil() as usize).min(n / 2);
    raw.extend(
        acfs.iter()
            .chain(std::iter::once(&normalized_acf(&env, m)))
            .filter_map(|acf| acf_period(acf, lag_lo, lag_hi).map(|l| fs / l)),
    );
    // Confidence: the signal's own correlation at the period; the difference's when slow
    // wander keeps the signal from correlating anywhere.
    let corr = |f: f64| (interpolate(&acfs[0], fs / f), interpolate(&acfs[1], fs / f));
    let raw_best = raw
        .iter()
        .map(|&f| corr(f).0)
        .fold(f64::NEG_INFINITY, f64::max);
    let use_diff = raw_best < DEFAULT_MIN_CONFIDENCE;
    let mut scored: Vec<Candidate> = raw
        .into_iter()
        .map(|f| {
            let (r, d) = corr(f);
            Candidate {
                hz: f,
                score: specs[0].score(f),
                confidence: (if use_diff { r.max(d) } else { r }).clamp(-1.0, 1.0),
            }
        })
        .collect();
    // Equal scores (a sub-multiple explaining no more): the higher frequency first.
    scored.sort_by(|a, b| b.score.total_cmp(&a.score).then(b.hz.total_cmp(&a.hz)));
    let mut out: Vec<Candidate> = Vec::new();
    for c in scored {
        if out.len() >= limit {
            break;
        }
        if out.iter().all(|o| (c.hz / o.hz - 1.0).abs() > 0.01) {
            out.push(c);
        }
    }
    out
}

/// The best candidate of `x` within `[f_lo, f_hi]`, refined on the comb.
pub fn estimate_fundamental(x: &[f64], fs: f64, f_lo: f64, f_hi: f64) -> Option<Estimate> {
    let best = *candidates(x, fs, f_lo, f_hi, 1).first()?;
    let hz = refine(x, fs, best.hz, 0.01).unwrap_or(best.hz);
    Some(Estimate {
        hz,
        confidence: best.confidence,
    })
}

/// The frequency within `f0·(1 ± rel)` whose harmonics hold the most power in `x`: first
/// the peak of the comb's summed power (harmonics up to 40, below 0.45·fs) on a grid fine
/// enough that the highest harmonic moves a quarter of a bin per step; then each harmonic's
/// own spectral peak next to it, refined below a bin, and their frequencies over h averaged
/// with weights power·h² (the precision of a line's frequency over h grows with h). `None`
/// when `x` is too short or has no power there.
pub fn refine(x: &[f64], fs: f64, f0: f64, rel: f64) -> Option<f64> {
    refine_on(&Spectrum::new(x, fs)?, x.len(), f0, rel)
}

/// [`refine`] on the spectrum of an `n`-sample stretch.
fn refine_on(spec: &Spectrum, n: usize, f0: f64, rel: f64) -> Option<f64> {
    let fs = spec.fs;
    let h_max = ((spec.top_hz() / f0) as usize).clamp(1, TRACK_HARMONICS);
    let step = (fs / n as f64) / (4.0 * h_max as f64);
    let points = ((2.0 * rel * f0 / step).ceil() as usize).clamp(8, 4000);
    let lo = f0 * (1.0 - rel);
    let step = 2.0 * rel * f0 / points as f64;
    let (i, best) = (0..=points)
        .map(|i| (i, spec.comb_power(lo + i as f64 * step, h_max)))
        .max_by(|a, b| a.1.total_cmp(&b.1).then(b.0.cmp(&a.0)))?;
    if !(best > 0.0) {
        return None;
    }
    let f1 = lo + i as f64 * step;
    // Each harmonic's peak within two padded bins of h·f1.
    let (mut num, mut den) = (0.0, 0.0);
    for h in 1..=h_max {
        let c = (h as f64 * f1 / spec.bin_hz).round() as usize;
        if c < 3 || c + 3 >= spec.power.len() {
            break;
        }
        let k = (c - 2..=c + 2)
            .max_by(|&a, &b| spec.power[a].total_cmp(&spec.power[b]).then(b.cmp(&a)))
            .unwrap_or(c);
        if spec.power[k] < spec.power[k - 1] || spec.power[k] <= spec.power[k + 1] {
            continue;
        }
        let fh = refine_peak(&spec.power, k) * spec.bin_hz / h as f64;
        let w = spec.power[k] * (h * h) as f64;
        num += w * fh;
        den += w;
    }
    let f = if den > 0.0 { num / den } else { f1 };
    (f.is_finite() && (f / f0 - 1.0).abs() <= rel).then_some(f)
}

/// Follow a drifting fundamental: [`refine`] within `f_cur·(1 ± rel)`, accepted when the
/// comb there still explains a fair share of the window (score ≥ 0.2).
pub fn track(x: &[f64], fs: f64, f_cur: f64, rel: f64) -> Option<f64> {
    let spec = Spectrum::new(x, fs)?;
    let f = refine_on(&spec, x.len(), f_cur, rel)?;
    (spec.score(f) >= 0.2).then_some(f)
}

/// The highest peak of a normalized autocorrelation after its first zero crossing, within
/// `[lag_lo, lag_hi)`, refined by a parabola through its neighbours.
fn acf_period(acf: &[f64], lag_lo: usize, lag_hi: usize) -> Option<f64> {
    let hi = lag_hi.min(acf.len().saturating_sub(1));
    let zero = (1..hi).find(|&l| acf[l] <= 0.0)?;
    let lo = zero.max(lag_lo);
    let l = (lo..hi).max_by(|&a, &b| acf[a].total_cmp(&acf[b]))?;
    if l <= lo || l + 1 >= hi {
        return None;
    }
    let (a, b, c) = (acf[l - 1], acf[l], acf[l + 1]);
    let den = a - 2.0 * b + c;
    let d = if den.abs() > 0.0 {
        (0.5 * (a - c) / den).clamp(-0.5, 0.5)
    } else {
        0.0
    };
    Some(l as f64 + d)
}

/// Normalized, unbiased autocorrelation r(l)/r(0)·n/(n−l) of a zero-mean signal for lags
/// 0 … n−1, through a zero-padded FFT of length `m ≥ 2n` (Wiener–Khinchin).
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

/// Run `f` on the [`hann`] window of length `n`, kept per thread for the last length asked
/// (tracking windows of a run share their length), so its values are computed once.
fn with_hann<R>(n: usize, f: impl FnOnce(&[f64]) -> R) -> R {
    thread_local! {
        static WINDOW: std::cell::RefCell<Vec<f64>> = const { std::cell::RefCell::new(Vec::new()) };
    }
    WINDOW.with(|w| {
        let mut w = w.borrow_mut();
        if w.len() != n {
            *w = (0..n).map(|i| hann(i, n)).collect();
        }
        f(&w)
    })
}

/// Parabolic interpolation of the log power around bin k; returns the fractional bin.
fn refine_peak(power: &[f64], k: usize) -> f64 {
    if k == 0 || k + 1 >= power.len() {
        return k as f64;
    }
    let (a, b, c) = (
        power[k - 1].max(1e-300).ln(),
        power[k].max(1e-300).ln(),
        power[k + 1].max(1e-300).ln(),
    );
    let den = a - 2.0 * b + c;
    if den.abs() < 1e-300 {
        return k as f64;
    }
    k as f64 + (0.5 * (a - c) / den).clamp(-0.5, 0.5)
}
