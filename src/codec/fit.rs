//! Fit: per segment, the orthonormal FFT, the exact error of every order, the quantizer step
//! and least order, and the choice of basis (Fourier coefficients, time-domain samples, or
//! lossless). The result is a [`FitPlan`] (plain data, comparable in tests) plus the integer
//! codes that `frame` turns into bytes.
//!
//! The error recorded for a segment is the error of what the decoder outputs: after choosing
//! step and order from the Parseval energies, the encoder synthesizes the segment exactly as
//! [`crate::codec::decode`] does, rounds to the output type, and measures. Because rustfft picks
//! AVX, SSE or scalar kernels at run time, another machine may reconstruct values that differ
//! in the last bits. The encoder therefore widens the measured error by a margin before
//! comparing with the budget: each reconstructed value may move by
//! `τ = FP_MARGIN_REL · max|y| ` ([`FP_MARGIN_REL`] = 1e-9, some six orders of magnitude above
//! the FFT's own rounding error); for f64 output the RMS may grow by τ, and for rounded output
//! types every sample whose rounding could flip within ±τ is charged its worse outcome.
//! A segment is kept only when that widened error is within budget.
//!
//! Does not: produce bytes (that is `frame`), or know about files and channels.

use serde::Serialize;

use crate::codec::decode::{synthesize, synthesize_trend, trend_basis, Prev};
use crate::codec::quant::{cost_bits, delta_codes, round_away};
use crate::codec::search::HEADER_BITS;
pub use crate::codec::search::{
    choose_step_order, error_by_order, quantize, SEARCH_PATIENCE, STEPS_PER_OCTAVE,
};
use crate::codec::warp::{estimate_warp, synthesize_warped, to_angle};
use crate::model::{Basis, Trend, ValueType};
use crate::signal::{fill_non_finite, half_len, predict, square_scale, weight, Transform, C64};

/// Relative floating-point margin on reconstructed values (see the module docs).
pub const FP_MARGIN_REL: f64 = 1e-9;

/// How many times the target is tightened when the synthesized output misses the budget.
const MAX_TIGHTEN: usize = 8;

/// Values beyond this magnitude are stored losslessly (their squares would overflow).
pub const MAX_LOSSY_MAGNITUDE: f64 = 1e150;

/// The decision made for one segment: plain data.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FitPlan {
    /// Chosen representation.
    pub basis: Basis,
    /// Truncation order L (Fourier only).
    pub order: Option<u32>,
    /// Quantizer step Δ (orthonormal-coefficient units for Fourier, channel units for
    /// samples; 0 for lossless). Stored exactly as f32.
    pub step: f32,
    /// Whether the codes are residuals from a prediction (previous segment for Fourier,
    /// previous sample for samples and lossless integers).
    pub predicted: bool,
    /// The RMS target that order and step were chosen against (≤ budget).
    pub target_rms: f64,
    /// The resolved budget (channel units, RMS).
    pub budget_rms: f64,
    /// RMS error of the decoder's output over the finite values, as measured here.
    pub error_rms: f64,
    /// `error_rms` widened by the floating-point margin; never above `budget_rms`.
    pub bound_rms: f64,
    /// Estimated coded size in bits (the proxy the choice minimized).
    pub cost_bits: f64,
    /// The polynomial part ([`Basis::Trend`] only).
    pub trend: Option<Trend>,
    /// The warp `a` of a Fourier segment coded in angle ([`crate::codec::warp`]), stored
    /// exactly as f32.
    pub warp: Option<f32>,
}

/// A fitted segment: the plan, the integer codes, and the decoder's reconstruction.
#[derive(Debug, Clone)]
pub struct Fitted {
    /// The decision.
    pub plan: FitPlan,
    /// Integer codes: Fourier — quantized residuals of bins 0 … L−1, real part then imaginary
    /// part (DC and Nyquist real only); samples — quantized samples (or their first
    /// differences when predicted); lossless integers — values (or differences).
    pub codes: Vec<i64>,
    /// Lossless floats: the bit patterns of the values (f64 bits, or f32 bits widened).
    pub raw: Vec<u64>,
    /// The decoder's output for every sample (non-finite positions hold the fill).
    pub output: Vec<f64>,
    /// Reconstructed coefficients of bins 0 … L−1 (Fourier), for the next prediction.
    pub coeffs: Vec<C64>,
    /// Coefficients of the decoded segment for derived columns (Fourier: as stored; other
    /// bases: the source's spectrum).
    pub spectrum: Vec<C64>,
}

/// Refine the ideal length Λ of the previous segment, which the prediction of the next one
/// uses, from the measured phase advance of the fundamental (bin `cycles` of the next
/// segment `x`) over the previous segment's reconstruction. A slightly wrong period turns
/// into a phase error of h·K·ΔP/P on harmonic h, which the residuals would otherwise have to
/// carry. Returns `None` when the fundamental is too weak to measure or the correction is
/// implausibly large (more than [`MAX_IDEAL_CORRECTION`] relative).
pub fn refine_ideal(x: &[f64], cycles: u32, prev: &Prev) -> Option<f64> {
    let k = cycles as usize;
    let n = x.len();
    if k == 0 || k >= half_len(n) || k >= prev.coeffs.len() || prev.n == 0 {
        return None;
    }
    let mut filled = x.to_vec();
    if fill_non_finite(&mut filled) == 0 {
        return None;
    }
    // One DFT bin by rotation: Σ x_m e^(−2πi·k·m/n).
    let w = C64::from_polar(1.0, -2.0 * std::f64::consts::PI * k as f64 / n as f64);
    let (mut acc, mut rot) = (C64::new(0.0, 0.0), C64::new(1.0, 0.0));
    let mut energy = 0.0;
    for &v in &filled {
        acc += rot * v;
        rot *= w;
        energy += v * v;
    }
    let c = acc / (n as f64).sqrt();
    let p = prev.coeffs[k];
    // The fundamental must carry a fair share of the segment (its weight-2 energy ≥ 10 %).
    if !(2.0 * c.norm_sqr() >= 0.1 * energy) || p.norm() == 0.0 {
        return None;
    }
    let phi = (c / p).arg() / (2.0 * std::f64::consts::PI);
    let frac0 = (prev.n as f64 - prev.ideal) / prev.ideal;
    let kf = k as f64 * frac0;
    let mut d = (phi - kf).rem_euclid(1.0);
    if d > 0.5 {
        d -= 1.0;
    }
    // Keep the planned length when the correction is within the measurement's own noise:
    // everything else in the segment, taken as noise in the bin, bounds the phase error.
    let other = (energy - 2.0 * c.norm_sqr()).max(0.0) / n as f64;
    let sigma = (other.sqrt() / c.norm()) / (2.0 * std::f64::consts::PI);
    if d.abs() <= 3.0 * sigma {
        return None;
    }
    let frac = frac0 + d / k as f64;
    let ideal = prev.n as f64 / (1.0 + frac);
    ((ideal / prev.ideal - 1.0).abs() <= MAX_IDEAL_CORRECTION).then_some(ideal)
}

/// Largest relative correction [`refine_ideal`] makes to a planned ideal length.
pub const MAX_IDEAL_CORRECTION: f64 = 1e-3;

/// Everything the fitter needs to know about one segment.
#[derive(Debug, Clone, Copy)]
pub struct SegmentInput<'a> {
    /// Source values; NaN/±Inf/null positions hold any non-finite value.
    pub values: &'a [f64],
    /// The output type.
    pub value_type: ValueType,
    /// Resolved RMS budget in channel units (0 = lossless).
    pub budget_rms: f64,
}

/// RMS error of `output` against `source` over finite source values, and the error widened
/// by the floating-point margin `tau` (see the module docs). `raw_y` is the unrounded
/// reconstruction when the output went through an FFT (None when exact).
pub(crate) fn measure(
    source: &[f64],
    output: &[f64],
    raw_y: Option<&[f64]>,
    value_type: ValueType,
) -> (f64, f64) {
    let tau = raw_y.map(|y| {
        let peak = y.iter().fold(0.0f64, |a, v| a.max(v.abs()));
        FP_MARGIN_REL * peak + f64::MIN_POSITIVE
    });
    // Sums of the squares of (term · s), the count, and the largest |term|; one loop per
    // kind of output, so that no branch but the finiteness test runs per sample.
    let pass = |s: f64| match (tau, raw_y) {
        (Some(tau), Some(_)) if value_type == ValueType::F64 => {
            error_pass(source, output, s, |e| e.abs() + tau)
        }
        (Some(tau), Some(y)) => match value_type {
            ValueType::F32 => rounded_pass(source, output, y, s, tau, |v| v as f32 as f64),
            _ => rounded_pass(source, output, y, s, tau, |v| value_type.round(v)),
        },
        _ => error_pass(source, output, s, f64::abs),
    };
    let (mut sum, mut worst, count, peak) = pass(1.0);
    if count == 0 {
        return (0.0, 0.0);
    }
    // Errors so small (or large) that their squares leave f64's range are summed again at
    // a power-of-two scale, so that a tiny error is never recorded as 0.
    let s = square_scale(peak);
    if s != 1.0 {
        (sum, worst, _, _) = pass(s);
    }
    let n = count as f64;
    ((sum / n).sqrt() / s, (worst / n).sqrt() / s)
}

/// [`measure`]'s sums where the widened error of a sample is `widen(e)` from its error `e`:
/// (Σ (e·s)², Σ (widened·s)², count, largest widened).
fn error_pass(
    source: &[f64],
    output: &[f64],
    s: f64,
    widen: impl Fn(f64) -> f64,
) -> (f64, f64, usize, f64) {
    let (mut sum, mut worst, mut count, mut peak) = (0.0, 0.0, 0usize, 0.0f64);
    for (&x, &o) in source.iter().zip(output) {
        if !x.is_finite() {
            continue;
        }
        count += 1;
        let e = o - x;
        let w = widen(e);
        peak = peak.max(w);
        let (es, ws) = (e * s, w * s);
        sum += es * es;
        worst += ws * ws;
    }
    (sum, worst, count, peak)
}

/// [`measure`]'s sums for an output rounded to an integer or f32 type from the unrounded
/// `y`: the widened error of a sample is the worst of its output and of `round(y ± tau)`.
fn rounded_pass(
    source: &[f64],
    output: &[f64],
    y: &[f64],
    s: f64,
    tau: f64,
    round: impl Fn(f64) -> f64,
) -> (f64, f64, usize, f64) {
    let (mut sum, mut worst, mut count, mut peak) = (0.0, 0.0, 0usize, 0.0f64);
    for ((&x, &o), &y) in source.iter().zip(output).zip(y) {
        if !x.is_finite() {
            continue;
        }
        count += 1;
        let e = o - x;
        let lo = round(y - tau) - x;
        let hi = round(y + tau) - x;
        peak = peak.max(e.abs()).max(lo.abs()).max(hi.abs());
        let (es, lo, hi) = (e * s, lo * s, hi * s);
        sum += es * es;
        worst += (lo * lo).max(hi * hi).max(es * es);
    }
    (sum, worst, count, peak)
}

/// Fit one segment. `prev` is the previous Fourier segment of the same block, if any.
pub fn fit_segment(input: SegmentInput<'_>, prev: Option<&Prev>, fft: &dyn Transform) -> Fitted {
    let SegmentInput {
        values,
        value_type,
        budget_rms,
    } = input;
    let n = values.len();
    let mut filled = values.to_vec();
    let n_finite = fill_non_finite(&mut filled);
    let huge = filled.iter().any(|v| v.abs() > MAX_LOSSY_MAGNITUDE);
    let spectrum = if n > 0 && !huge {
        fft.forward(&filled)
    } else {
        Vec::new()
    };
    let lossless = lossless_fit(values, &filled, value_type, budget_rms, spectrum.clone());
    if !(budget_rms > 0.0) || n_finite == 0 || huge {
        return lossless;
    }
    let scale = filled.iter().fold(0.0f64, |a, v| a.max(v.abs()));
    let round_mse = value_type.rounding_mse(scale);
    let mut best = lossless;
    let fourier = fit_fourier(
        values,
        &spectrum,
        n_finite,
        value_type,
        budget_rms,
        round_mse,
        prev,
        fft,
        Synthesis::Plain,
        f64::INFINITY,
    );
    let fourier_order = fourier
        .as_ref()
        .and_then(|f| f.plan.order)
        .map(|o| o as usize);
    if let Some(f) = fourier {
        if f.plan.cost_bits < best.plan.cost_bits {
            best = f;
        }
    }
    // After the Fourier fit, so that on a periodic segment the samples' codes are only
    // counted, never synthesized and measured.
    let beat = best.plan.cost_bits;
    if let Some(s) = fit_samples_beating(values, &filled, value_type, budget_rms, round_mse, beat) {
        best = Fitted {
            spectrum: spectrum.clone(),
            ..s
        };
    }
    if let Some(order) = fourier_order {
        let warp = WarpInput {
            filled: &filled,
            spectrum: &spectrum,
            n_finite,
            round_mse,
            order,
            beat: best.plan.cost_bits,
        };
        if let Some(f) = fit_warped(values, value_type, budget_rms, &warp, prev, fft) {
            if f.plan.cost_bits < best.plan.cost_bits {
                best = f;
            }
        }
    }
    if jumps(&filled, budget_rms) {
        let trend = TrendInput {
            spectrum: &spectrum,
            n_finite,
            round_mse,
            fourier_order,
            beat: best.plan.cost_bits,
        };
        if let Some(f) = fit_trend(values, value_type, budget_rms, &trend, prev, fft) {
            if f.plan.cost_bits < best.plan.cost_bits {
                best = f;
            }
        }
    }
    best
}

/// What the warped fit shares with the plain fits of the same segment.
struct WarpInput<'a> {
    filled: &'a [f64],
    spectrum: &'a [C64],
    n_finite: usize,
    round_mse: f64,
    /// The plain Fourier fit's order.
    order: usize,
    /// The cost of the best fit so far: a warped fit that cannot beat it is not synthesized.
    beat: f64,
}

/// Bits a warped segment carries besides its coefficients (the warp, as f32).
const WARP_BITS: f64 = 32.0;

/// The warped fit ([`crate::codec::warp`]): the warp estimated from the strongest bin's phase
/// over the segment's thirds, tried when it would move the highest kept bin by more than
/// [`WARP_MIN_DRIFT`] of a cycle across the segment; the segment resampled in angle and coded
/// as [`fit_fourier`] codes a segment, with the decoder's warped synthesis. The synthesis
/// (N·L terms) only runs when the step and order search on the warped spectrum says the fit
/// can beat `w.beat`.
fn fit_warped(
    values: &[f64],
    value_type: ValueType,
    budget_rms: f64,
    w: &WarpInput<'_>,
    prev: Option<&Prev>,
    fft: &dyn Transform,
) -> Option<Fitted> {
    let spectrum = w.spectrum;
    let bin = (1..spectrum.len())
        .max_by(|&a, &b| spectrum[a].norm_sqr().total_cmp(&spectrum[b].norm_sqr()))?;
    if w.order * WARP_MAX_ORDER_FRACTION > w.filled.len() {
        return None;
    }
    let a = estimate_warp(w.filled, bin)? as f32;
    if !((a as f64).abs() * w.order as f64 / 4.0 > WARP_MIN_DRIFT) {
        return None;
    }
    let spec = fft.forward(&to_angle(w.filled, a as f64));
    let mut f = fit_fourier(
        values,
        &spec,
        w.n_finite,
        value_type,
        budget_rms,
        w.round_mse,
        prev,
        fft,
        Synthesis::Warp(a as f64),
        w.beat - WARP_BITS,
    )?;
    f.plan.warp = Some(a);
    f.plan.cost_bits += WARP_BITS;
    Some(f)
}

/// A warp is tried only on segments whose plain order is at most 1/this of their samples:
/// the cubic resampling is accurate well below the Nyquist frequency only, and near it its
/// loss (which the warped spectrum does not show) makes a broadband segment look cheaper in
/// angle than it is, to be found out only by the N·L synthesis.
pub const WARP_MAX_ORDER_FRACTION: usize = 8;

/// A warp is tried when it moves the highest kept bin by more than this many cycles.
pub const WARP_MIN_DRIFT: f64 = 0.05;

/// How a Fourier fit's coefficients become samples.
#[derive(Clone, Copy)]
enum Synthesis<'a> {
    /// The inverse DFT.
    Plain,
    /// The inverse DFT plus a polynomial.
    Trend(&'a [f64]),
    /// The series evaluated at warped angles.
    Warp(f64),
}

/// Whether the periodic extension of a segment jumps: its first sample against its last
/// extrapolated by one step differs by more than [`TREND_JUMP_BUDGETS`] budgets (a ramp's
/// sawtooth, which the trend basis removes; a whole-cycle segment joins smoothly).
fn jumps(x: &[f64], budget_rms: f64) -> bool {
    let n = x.len();
    n >= MIN_TREND_SAMPLES
        && (x[0] - (2.0 * x[n - 1] - x[n - 2])).abs() > TREND_JUMP_BUDGETS * budget_rms
}

/// Fewest samples a trend segment has.
pub const MIN_TREND_SAMPLES: usize = 16;

/// The jump (in budgets) above which the trend basis is tried.
pub const TREND_JUMP_BUDGETS: f64 = 4.0;

/// What the trend fit shares with the plain Fourier fit of the same segment.
struct TrendInput<'a> {
    spectrum: &'a [C64],
    n_finite: usize,
    round_mse: f64,
    /// The plain Fourier fit's order, where the polynomial is first fitted.
    fourier_order: Option<usize>,
    /// The cost of the best fit so far: a trend fit that cannot beat it is not synthesized.
    beat: f64,
}

/// Bits a trend segment carries besides its codes (degree and step).
const TREND_BITS: f64 = 40.0;

/// Coefficients β of the polynomial columns `u` (spectra `us`) that minimize the energy
/// left outside bins 0 … l−1: the least squares of the columns projected on the dropped
/// bins, G·β = b with G_ij = Σ_{k≥l} w_k Re(conj(U_ik)·U_jk) and b_i the same with the
/// segment's spectrum `c` (Gram–Schmidt of the extra columns against the kept Fourier
/// terms, in closed form for one or two columns). `None` when the system is singular.
fn projected_ls(c: &[C64], us: &[Vec<C64>], l: usize, n: usize) -> Option<Vec<f64>> {
    let dot = |a: &[C64], b: &[C64]| -> f64 {
        (l..a.len().min(b.len()))
            .map(|k| weight(k, n) * (a[k].re * b[k].re + a[k].im * b[k].im))
            .sum()
    };
    match us {
        [u] => {
            let g = dot(u, u);
            (g > 1e-12).then(|| vec![dot(u, c) / g])
        }
        [u, v] => {
            let (a, b, d) = (dot(u, u), dot(u, v), dot(v, v));
            let det = a * d - b * b;
            if !(det > 1e-12 * a.max(d).max(1e-300).powi(2)) {
                return None;
            }
            let (r1, r2) = (dot(u, c), dot(v, c));
            Some(vec![(d * r1 - b * r2) / det, (a * r2 - b * r1) / det])
        }
        _ => None,
    }
}

/// The Fourier-plus-trend fit: for degree 1 (ramp) and 2 (ramp and parabola), the
/// polynomial that leaves the least energy outside the plain fit's order (then again at the
/// order that fit found), quantized on the orthonormal discrete polynomials with a step of
/// ε·√N/8 (each coefficient's rounding costs at most 1/256 of the budget's energy); what it
/// leaves is coded as Fourier coefficients, exactly as [`fit_fourier`] codes a segment. The
/// error is the error of that output (Parseval on the residual, then measured after
/// synthesis), so the bound holds as for any Fourier segment.
fn fit_trend(
    values: &[f64],
    value_type: ValueType,
    budget_rms: f64,
    t: &TrendInput<'_>,
    prev: Option<&Prev>,
    fft: &dyn Transform,
) -> Option<Fitted> {
    let n = values.len();
    let m = t.spectrum.len();
    let step = (budget_rms * (t.n_finite as f64).sqrt() / 8.0) as f32;
    if !(step > 0.0 && step.is_finite()) {
        return None;
    }
    let mut best: Option<Fitted> = None;
    let all = trend_basis(n, 2)?;
    let all_us: Vec<Vec<C64>> = all.iter().map(|u| fft.forward(u)).collect();
    for degree in 1..=2usize {
        let (basis, us) = (&all[..degree], &all_us[..degree]);
        let mut l = t.fourier_order.unwrap_or(m / 2).clamp(1, m);
        for _ in 0..2 {
            let Some(beta) = projected_ls(t.spectrum, us, l, n) else {
                break;
            };
            let q: Vec<i64> = beta
                .iter()
                .map(|&b| (b / step as f64).round() as i64)
                .collect();
            let mut rest = t.spectrum.to_vec();
            let mut shape = vec![0.0; n];
            for ((&qj, u), uj) in q.iter().zip(us).zip(basis) {
                let b = qj as f64 * step as f64;
                for (r, &uk) in rest.iter_mut().zip(u) {
                    *r -= uk * b;
                }
                for (s, &v) in shape.iter_mut().zip(uj) {
                    *s += b * v;
                }
            }
            let extra = cost_bits(&q) + TREND_BITS;
            let beat = best
                .as_ref()
                .map_or(t.beat, |b| b.plan.cost_bits.min(t.beat));
            let Some(mut f) = fit_fourier(
                values,
                &rest,
                t.n_finite,
                value_type,
                budget_rms,
                t.round_mse,
                prev,
                fft,
                Synthesis::Trend(&shape),
                beat - extra,
            ) else {
                break;
            };
            let mut codes = q.clone();
            codes.extend_from_slice(&f.codes);
            f.codes = codes;
            f.plan.basis = Basis::Trend;
            f.plan.trend = Some(Trend {
                degree: degree as u8,
                step,
            });
            f.plan.cost_bits += extra;
            let order = f.plan.order.unwrap_or(0) as usize;
            if best
                .as_ref()
                .is_none_or(|b| f.plan.cost_bits < b.plan.cost_bits)
            {
                best = Some(f);
            }
            if order == l {
                break;
            }
            l = order.max(1);
        }
    }
    best
}

/// The lossless representation (always meets any budget).
/// The lossless fit of a segment (what the peak guard falls back to when no correction can
/// meet its limit); `spectrum` is kept for the derived columns.
pub fn fit_lossless(input: SegmentInput<'_>, spectrum: Vec<C64>) -> Fitted {
    let mut filled = input.values.to_vec();
    fill_non_finite(&mut filled);
    lossless_fit(
        input.values,
        &filled,
        input.value_type,
        input.budget_rms,
        spectrum,
    )
}

fn lossless_fit(
    values: &[f64],
    filled: &[f64],
    value_type: ValueType,
    budget_rms: f64,
    spectrum: Vec<C64>,
) -> Fitted {
    let finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    let (codes, raw, predicted, bits) = if value_type.is_integer() {
        let plain: Vec<i64> = finite.iter().map(|&v| v as i64).collect();
        let delta = delta_codes(&plain);
        let (cp, cd) = (cost_bits(&plain), cost_bits(&delta));
        if cd < cp {
            (delta, Vec::new(), true, cd)
        } else {
            (plain, Vec::new(), false, cp)
        }
    } else {
        let width = if value_type == ValueType::F32 {
            32.0
        } else {
            64.0
        };
        let raw: Vec<u64> = finite
            .iter()
            .map(|&v| match value_type {
                ValueType::F32 => (v as f32).to_bits() as u64,
                _ => v.to_bits(),
            })
            .collect();
        let bits = width * raw.len() as f64;
        (Vec::new(), raw, false, bits)
    };
    Fitted {
        plan: FitPlan {
            basis: Basis::Lossless,
            order: None,
            step: 0.0,
            predicted,
            target_rms: 0.0,
            budget_rms,
            error_rms: 0.0,
            bound_rms: 0.0,
            cost_bits: bits + HEADER_BITS,
            trend: None,
            warp: None,
        },
        codes,
        raw,
        output: filled.to_vec(),
        coeffs: Vec::new(),
        spectrum,
    }
}

/// The error-bounded time-domain quantizer: step √12·ε (uniform quantization error has
/// variance Δ²/12), shrunk until the output meets the budget. Also the benchmark's baseline.
pub fn fit_samples(
    values: &[f64],
    filled: &[f64],
    value_type: ValueType,
    budget_rms: f64,
    round_mse: f64,
) -> Option<Fitted> {
    fit_samples_beating(
        values,
        filled,
        value_type,
        budget_rms,
        round_mse,
        f64::INFINITY,
    )
}

/// [`fit_samples`], given up as soon as a step's codes cost `beat` bits or more: a smaller
/// step only adds bits, so such a fit cannot win and is never synthesized or measured.
fn fit_samples_beating(
    values: &[f64],
    filled: &[f64],
    value_type: ValueType,
    budget_rms: f64,
    round_mse: f64,
    beat: f64,
) -> Option<Fitted> {
    let eff = budget_rms * budget_rms - round_mse;
    if !(eff > 0.0) {
        return None;
    }
    let mut step = (12.0 * eff).sqrt() as f32;
    if beat.is_finite() && sampled_bits(filled, step as f64) > SAMPLED_MARGIN * beat {
        return None;
    }
    for _ in 0..MAX_TIGHTEN * 2 {
        if !(step > 0.0 && step.is_finite()) {
            return None;
        }
        let s = step as f64;
        let q: Vec<i64> = filled.iter().map(|&v| round_away(v / s) as i64).collect();
        let delta = delta_codes(&q);
        let (cp, cd) = (cost_bits(&q), cost_bits(&delta));
        if !(cp.min(cd) + HEADER_BITS < beat) {
            return None;
        }
        let output: Vec<f64> = q.iter().map(|&v| value_type.round(v as f64 * s)).collect();
        let (err, bound) = measure(values, &output, None, value_type);
        if bound <= budget_rms {
            let (codes, predicted, bits) = if cd < cp {
                (delta, true, cd)
            } else {
                (q, false, cp)
            };
            return Some(Fitted {
                plan: FitPlan {
                    basis: Basis::Samples,
                    order: None,
                    step,
                    predicted,
                    target_rms: (eff.sqrt()),
                    budget_rms,
                    error_rms: err,
                    bound_rms: bound,
                    cost_bits: bits + HEADER_BITS,
                    trend: None,
                    warp: None,
                },
                codes,
                raw: Vec::new(),
                output,
                coeffs: Vec::new(),
                spectrum: Vec::new(),
            });
        }
        step *= 0.84;
    }
    None
}

/// Every this many samples one is quantized by [`sampled_bits`].
const SAMPLED_STRIDE: usize = 16;

/// A samples fit is skipped when [`sampled_bits`] is more than this many times the cost it
/// would have to beat.
const SAMPLED_MARGIN: f64 = 2.0;

/// A quick estimate of the bits of the samples fit's codes at step `step` (without the
/// code table [`cost_bits`] adds): the order-0 entropy of the codes of every [`SAMPLED_STRIDE`]th sample and of their differences to the
/// sample before (the cheaper of the two), times the samples. A plug-in entropy from a
/// sample of the codes is biased low, so on a periodic segment whose Fourier fit costs a
/// fraction of a bit per sample a margin of [`SAMPLED_MARGIN`] never skips a samples fit that
/// would win. Segments shorter than 64 strides are not estimated (0).
fn sampled_bits(filled: &[f64], step: f64) -> f64 {
    let n = filled.len();
    if n < 64 * SAMPLED_STRIDE {
        return 0.0;
    }
    let q = |i: usize| round_away(filled[i] / step) as i64;
    let (plain, delta): (Vec<i64>, Vec<i64>) = (1..n)
        .step_by(SAMPLED_STRIDE)
        .map(|i| {
            let v = q(i);
            (v, v.wrapping_sub(q(i - 1)))
        })
        .unzip();
    entropy_per_code(plain).min(entropy_per_code(delta)) * n as f64
}

/// The empirical order-0 entropy (bits per code) of `codes`.
fn entropy_per_code(mut codes: Vec<i64>) -> f64 {
    codes.sort_unstable();
    let total = codes.len() as f64;
    codes
        .chunk_by(|a, b| a == b)
        .map(|run| {
            let c = run.len() as f64;
            c * (total / c).log2()
        })
        .sum::<f64>()
        / total
}

/// The Fourier fit of `spectrum`, synthesized as `synthesis` says.
#[allow(clippy::too_many_arguments)]
fn fit_fourier(
    values: &[f64],
    spectrum: &[C64],
    n_finite: usize,
    value_type: ValueType,
    budget_rms: f64,
    round_mse: f64,
    prev: Option<&Prev>,
    fft: &dyn Transform,
    synthesis: Synthesis<'_>,
    beat: f64,
) -> Option<Fitted> {
    let n = values.len();
    let m = spectrum.len();
    let pred = prev.map(|p| predict(&p.coeffs, p.n, p.ideal, n, m));
    let mut target2 = budget_rms * budget_rms - round_mse;
    for _ in 0..MAX_TIGHTEN {
        if !(target2 > 0.0) {
            return None;
        }
        let energy = target2 * n_finite as f64;
        let plain = choose_step_order(spectrum, None, n, energy);
        let predicted = pred
            .as_deref()
            .and_then(|p| choose_step_order(spectrum, Some(p), n, energy));
        let (use_pred, (step, l, bits)) = match (plain, predicted) {
            (Some(a), Some(b)) if b.2 < a.2 => (true, b),
            (Some(a), _) => (false, a),
            (None, Some(b)) => (true, b),
            (None, None) => return None,
        };
        // Tightening only adds bits: a fit whose estimate cannot beat `beat` is not
        // synthesized.
        if !(bits < beat) {
            return None;
        }
        let p = if use_pred { pred.as_deref() } else { None };
        let (codes, coeffs) = quantize(spectrum, p, step as f64, n, l);
        let (y, output) = match synthesis {
            Synthesis::Trend(shape) => synthesize_trend(&coeffs, shape, value_type, fft),
            Synthesis::Warp(a) => synthesize_warped(&coeffs, n, a, value_type),
            Synthesis::Plain => synthesize(&coeffs, n, value_type, fft),
        };
        let (err, bound) = measure(values, &output, Some(&y), value_type);
        if bound <= budget_rms {
            return Some(Fitted {
                plan: FitPlan {
                    basis: Basis::Fourier,
                    order: Some(l as u32),
                    step,
                    predicted: use_pred,
                    target_rms: target2.sqrt(),
                    budget_rms,
                    error_rms: err,
                    bound_rms: bound,
                    cost_bits: bits,
                    trend: None,
                    warp: None,
                },
                codes,
                raw: Vec::new(),
                output,
                spectrum: coeffs.clone(),
                coeffs,
            });
        }
        // Missed after rounding: aim lower, in proportion to the miss.
        let shrink = (budget_rms / bound).powi(2).clamp(0.25, 0.9);
        target2 *= shrink;
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::signal::RealFft;

    #[test]
    fn zero_budget_is_lossless() {
        let x: Vec<f64> = (0..100).map(|i| (i as f64 * 0.1).sin()).collect();
        let f = fit_segment(
            SegmentInput {
                values: &x,
                value_type: ValueType::F64,
                budget_rms: 0.0,
            },
            None,
            RealFft::shared(),
        );
        assert_eq!(f.plan.basis, Basis::Lossless);
        assert_eq!(f.output, x);
    }
}
