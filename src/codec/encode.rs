//! Encode: one run of one channel, in memory, to coded blocks — plan the segments, fit each
//! one, pack consecutive segments into blocks. Blocks are fitted in parallel with rayon;
//! each block's content depends only on its own samples and parameters, so the result is the
//! same whatever the thread count. Used by the file job, the tests and the benchmark alike.
//!
//! Does not: read or write files.

use rayon::prelude::*;

use crate::codec::bands::{
    add_refinement, Protected, Protection, SegmentFrame, AMPLITUDE_TOLERANCE,
};
use crate::codec::decode::segment_raw;
use crate::codec::decode::Prev;
use crate::codec::events::{EventDetector, EVENT_BUDGET_FACTOR};
use crate::codec::fit::measure;
use crate::codec::fit::{fit_lossless, fit_segment, refine_ideal, FitPlan, Fitted, SegmentInput};
use crate::codec::frame::{encode_block, Block, BlockTimes, SegmentRecord, Special};
use crate::codec::guard;
use crate::codec::params::{Budget, CodecParams};
use crate::codec::quant::error_to_f32;
use crate::codec::segment::{
    plan_segments, Arbiter, FundamentalSetting, PlannedSegment, SegmentPlan,
};

use crate::model::{Basis, Run, ValueType};
use crate::signal::{amplitude_phase, fill_non_finite, is_real_bin, rms_of, thd, Transform, C64};

/// Harmonics whose amplitude is summarized per archive row (`h1_amp`).
pub const DERIVED_HARMONICS: usize = 1;

/// Highest harmonic counted in the THD column (IEEE 519 counts up to the 50th).
pub const THD_MAX_HARMONIC: usize = 50;

/// Why the codec could not encode a block.
#[derive(Debug, thiserror::Error)]
pub enum CodecError {
    /// A segment's resolved budget is larger than an archive row can record (f32).
    #[error(
        "channel `{channel}`, segment at {time_ns} ns: its budget {budget:e} is larger than an \
         archive can record ({:e}); give an absolute budget (--budget-rms) or rescale the values",
        f32::MAX
    )]
    BudgetRange {
        /// The channel.
        channel: String,
        /// The segment's first time (ns since the epoch).
        time_ns: i64,
        /// The resolved budget.
        budget: f64,
    },
    /// The block compressor failed (an internal failure, e.g. out of memory).
    #[error("channel `{channel}`: compressing a block failed: {reason}")]
    Compress {
        /// The channel.
        channel: String,
        /// What zstd said.
        reason: String,
    },
}

impl CodecError {
    /// The exit code: 2 for settings the data cannot meet, 3 for a failed compression
    /// (nothing was published).
    pub fn exit_code(&self) -> i32 {
        match self {
            CodecError::BudgetRange { .. } => 2,
            CodecError::Compress { .. } => 3,
        }
    }
}

/// What the codec says about one coded segment: where it starts, what it kept, its budget
/// and recorded error, and derived figures (RMS, harmonics, THD) for trending.
#[derive(Debug, Clone, PartialEq)]
pub struct SegmentSummary {
    /// First sample's time (ns).
    pub start_ns: i64,
    /// Samples.
    pub samples: u32,
    /// Basis.
    pub basis: Basis,
    /// Order (Fourier).
    pub order: Option<u32>,
    /// Whole cycles (periodic segments).
    pub cycles: Option<u32>,
    /// Budget (f32, rounded down).
    pub budget_rms: f32,
    /// Recorded error (f32, rounded up).
    pub error_rms: f32,
    /// Fundamental.
    pub fundamental_hz: Option<f32>,
    /// Source RMS.
    pub rms: f32,
    /// (amplitude, phase) of harmonics 1 … [`DERIVED_HARMONICS`].
    pub harmonics: Vec<Option<(f32, f32)>>,
    /// THD.
    pub thd: Option<f32>,
    /// Whether event capture marked the segment (`None` without event capture).
    pub event: Option<bool>,
}

/// One encoded block of one channel: its frame and a summary of each of its segments.
#[derive(Debug, Clone)]
pub struct EncodedBlock {
    /// The channel.
    pub channel: String,
    /// The compressed frame.
    pub frame: Vec<u8>,
    /// One summary per segment, in order.
    pub segments: Vec<SegmentSummary>,
    /// The fit decisions, one per segment.
    pub fits: Vec<FitPlan>,
}

/// A run of one channel, encoded.
#[derive(Debug, Clone)]
pub struct RunEncoding {
    /// The segmentation.
    pub plan: SegmentPlan,
    /// The blocks.
    pub blocks: Vec<EncodedBlock>,
}

impl RunEncoding {
    /// Payload bytes of all blocks.
    pub fn payload_bytes(&self) -> usize {
        self.blocks.iter().map(|b| b.frame.len()).sum()
    }
    /// All fit decisions in order.
    pub fn fits(&self) -> impl Iterator<Item = &FitPlan> {
        self.blocks.iter().flat_map(|b| b.fits.iter())
    }
}

/// The parameters of encoding one run.
#[derive(Clone, Copy)]
pub struct RunParams<'a> {
    /// Channel name.
    pub channel: &'a str,
    /// Value type.
    pub value_type: ValueType,
    /// Sample rate (Hz); `None` for a single-sample channel.
    pub sample_rate: Option<f64>,
    /// Budget rule.
    pub budget: Budget,
    /// Peak limit ([`crate::codec::guard`]), channel units.
    pub peak_max: Option<f64>,
    /// Protected bands ([`crate::codec::bands`]).
    pub protection: Option<&'a Protection>,
    /// Event capture ([`crate::codec::events`]).
    pub events: bool,
    /// Codec parameters.
    pub params: &'a CodecParams,
    /// Transform.
    pub fft: &'a dyn Transform,
}

impl<'a> RunParams<'a> {
    /// The parameters of a channel: its budget by the channel rules of `params`, and the
    /// shared FFT.
    pub fn new(
        channel: &'a str,
        value_type: ValueType,
        sample_rate: Option<f64>,
        params: &'a CodecParams,
    ) -> Self {
        RunParams {
            channel,
            value_type,
            sample_rate,
            budget: params.budget_for(channel),
            peak_max: params.peak_for(channel),
            protection: params.protection_for(channel),
            events: params.events,
            params,
            fft: crate::signal::RealFft::shared(),
        }
    }
}

/// Group planned segments into blocks (≤ `max_segments` and ≤ `max_samples` each, at least
/// one segment).
pub fn block_ranges(
    segs: &[PlannedSegment],
    max_segments: usize,
    max_samples: usize,
) -> Vec<std::ops::Range<usize>> {
    let mut out = Vec::new();
    let mut start = 0;
    let mut samples = 0;
    for (i, s) in segs.iter().enumerate() {
        if i > start && (i - start >= max_segments || samples + s.len > max_samples) {
            out.push(start..i);
            start = i;
            samples = 0;
        }
        samples += s.len;
    }
    if start < segs.len() {
        out.push(start..segs.len());
    }
    out
}

/// Plan one run: segmentation with the run's sample rate.
pub fn plan_run(run: &Run, p: &RunParams<'_>) -> SegmentPlan {
    let mut seg = p.params.segment_settings(p.sample_rate.unwrap_or(1.0));
    if p.sample_rate.is_none() {
        seg.fundamental = FundamentalSetting::None;
    }
    plan_segments(&run.values, &seg, Some(p))
}

/// The trial coder of the planner: the exact bytes of the block frame the encoder would
/// write for the stretch (times one nanosecond apart, the same for every candidate).
impl Arbiter for RunParams<'_> {
    fn trial_bytes(&self, x: &[f64], segments: &[PlannedSegment]) -> Option<usize> {
        let run = Run {
            times: (0..x.len() as i64).collect(),
            values: x.to_vec(),
            specials: Vec::new(),
        };
        // Without protected bands: order bands fall only on periodic segments, so pricing
        // them would steer the planner away from the very segmentation that protects them
        // (measured: order-protected clean current was planned in fixed blocks, 0 bins kept).
        let p = RunParams {
            protection: None,
            ..*self
        };
        encode_block_of(&run, segments, &p)
            .ok()
            .map(|b| b.frame.len())
    }
}

/// Encode one run: segment, fit and pack; blocks in parallel.
pub fn encode_run(run: &Run, p: &RunParams<'_>) -> Result<RunEncoding, CodecError> {
    let mut plan = plan_run(run, p);
    if p.events {
        let mut d = EventDetector::default();
        for s in &mut plan.segments {
            s.event = d.mark(&run.values[s.start..s.start + s.len]);
        }
    }
    let ranges = block_ranges(
        &plan.segments,
        p.params.block_segments,
        p.params.block_samples,
    );
    let blocks = ranges
        .into_par_iter()
        .map(|r| encode_block_of(run, &plan.segments[r], p))
        .collect::<Result<Vec<_>, _>>()?;
    Ok(RunEncoding { plan, blocks })
}

/// RMS over the finite values (without overflow or underflow, see [`rms_of`]).
pub fn finite_rms(x: &[f64]) -> f64 {
    rms_of(x.len(), |i| Some(x[i]).filter(|v| v.is_finite()))
}

/// Keep 16 significant bits of a derived value (relative rounding ≤ 2⁻¹⁶), so the low
/// byte plane of derived columns is zero and compresses away.
pub fn compact(v: f64) -> f32 {
    let f = v as f32;
    if !f.is_finite() {
        return f;
    }
    let b = f.to_bits();
    let r = f32::from_bits(b.wrapping_add(0x80) & !0xff);
    if r.is_finite() {
        r
    } else {
        f
    }
}

/// Targets tried under a peak limit X besides the budget, as fractions of X: a tighter fit
/// needs fewer corrections, and the cheaper of the candidates (by the fit's estimated bits
/// plus the corrections') is kept.
const GUARD_TARGETS: [f64; 2] = [0.5, 0.25];

/// Corrected samples (per sample of the segment) below which the tighter targets of
/// [`GUARD_TARGETS`] are not tried: a few corrections cost less than any refit saves.
const GUARD_REFIT_SHARE: f64 = 0.01;

/// Fit a segment under a peak limit: the budget's fit with corrections, or a fit at a
/// tighter target with fewer, whichever is estimated smaller; lossless where no correction
/// can meet the limit.
fn fit_guarded(
    input: SegmentInput<'_>,
    prev: Option<&Prev>,
    fft: &dyn crate::signal::Transform,
    limit: f64,
) -> (Fitted, Option<guard::Guard>) {
    let guarded = |fitted: Fitted| -> (f64, Fitted, Option<guard::Guard>) {
        if fitted.plan.basis == Basis::Lossless {
            return (fitted.plan.cost_bits, fitted, None);
        }
        let synthesized = matches!(fitted.plan.basis, Basis::Fourier | Basis::Trend);
        let margin = guard::margin(&fitted.output, input.value_type, synthesized);
        match guard::guard_segment(
            input.values,
            &fitted.output,
            input.value_type,
            limit,
            margin,
        ) {
            Some(g) => (fitted.plan.cost_bits + g.cost_bits(), fitted, Some(g)),
            None => {
                let f = fit_lossless(input, fitted.spectrum);
                (f.plan.cost_bits, f, None)
            }
        }
    };
    let mut best = guarded(fit_segment(input, prev, fft));
    let corrected = best.2.as_ref().map_or(0, |g| g.at.len());
    if (corrected as f64) < GUARD_REFIT_SHARE * input.values.len() as f64 {
        return (best.1, best.2);
    }
    for share in GUARD_TARGETS {
        let target = crate::codec::quant::budget_to_f32(share * limit);
        if !(target > 0.0 && target < input.budget_rms) {
            continue;
        }
        let tighter = SegmentInput {
            budget_rms: target,
            ..input
        };
        let trial = guarded(fit_segment(tighter, prev, fft));
        if trial.0 < best.0 {
            best = trial;
        }
    }
    (best.1, best.2)
}

/// An event segment's budget: the segment's budget × [`EVENT_BUDGET_FACTOR`], rounded down
/// to f32 as every budget is.
pub fn event_budget(budget: f64) -> f64 {
    crate::codec::quant::budget_to_f32(budget * EVENT_BUDGET_FACTOR)
}

/// What a protected segment must keep besides its budget.
struct Promises<'a> {
    protection: &'a Protection,
    frame: SegmentFrame,
    peak_max: Option<f64>,
    specials: &'a [Special],
    ideal_len: f32,
    cycles: u32,
}

/// Bits of a protected segment's spectrum that are compared: the spectrum of `y` with the
/// source's non-finite positions filled as `verify` fills them.
fn filled_spectrum(y: &[f64], source: &[f64], fft: &dyn crate::signal::Transform) -> Vec<C64> {
    let mut f: Vec<f64> = y
        .iter()
        .zip(source)
        .map(|(&v, &x)| if x.is_finite() { v } else { f64::NAN })
        .collect();
    fill_non_finite(&mut f);
    fft.forward(&f)
}

/// Keep a segment's protected bins ([`crate::codec::bands`]): refine each bin's coefficient
/// with a step fine enough for its amplitude tolerance, apply the peak guard on top, and
/// check on the decoder's own output that every protected amplitude and the budget hold,
/// halving the step until they do; lossless when they cannot.
fn protect_segment(
    input: SegmentInput<'_>,
    mut fitted: Fitted,
    guard: Option<guard::Guard>,
    prev: Option<&Prev>,
    fft: &dyn crate::signal::Transform,
    w: &Promises<'_>,
) -> (Fitted, Option<guard::Guard>, Option<Protected>) {
    let bins = w.protection.bins(w.frame);
    if bins.is_empty() || fitted.plan.basis == Basis::Lossless {
        return (fitted, guard, None);
    }
    let (x, vt) = (input.values, input.value_type);
    let n = x.len();
    let c_src = filled_spectrum(x, x, fft);
    let floor_c = w.protection.floor * (n as f64).sqrt() / 2.0;
    let tol: Vec<f64> = bins
        .iter()
        .map(|&k| (AMPLITUDE_TOLERANCE * c_src[k as usize].norm()).max(floor_c))
        .collect();
    let min_tol = tol.iter().copied().fold(f64::INFINITY, f64::min);
    let record = SegmentRecord {
        len: n,
        ideal_len: w.ideal_len,
        cycles: w.cycles,
        basis: fitted.plan.basis,
        order: fitted.plan.order.unwrap_or(0),
        step: fitted.plan.step,
        predicted: fitted.plan.predicted,
        codes: fitted.codes.clone(),
        raw: fitted.raw.clone(),
        specials: w.specials.to_vec(),
        trend: fitted.plan.trend,
        warp: fitted.plan.warp,
        guard: None,
        protect: None,
    };
    if let Ok(raw) = segment_raw(&record, prev, vt, fft) {
        let c_raw = filled_spectrum(&raw.values, x, fft);
        // Component errors of at most step/2 keep a bin's amplitude within step/√2; half of
        // that leaves room for the rounding to the output type.
        let mut step =
            crate::codec::guard::short_down((0.5 * std::f64::consts::SQRT_2 * min_tol) as f32);
        for _ in 0..PROTECT_HALVINGS {
            if !(step > 0.0 && step.is_finite()) {
                break;
            }
            let q = |v: f64| (v / step as f64).round() as i64;
            let codes = bins
                .iter()
                .flat_map(|&k| {
                    let r = c_src[k as usize] - c_raw[k as usize];
                    [
                        q(r.re),
                        if is_real_bin(k as usize, n) {
                            0
                        } else {
                            q(r.im)
                        },
                    ]
                })
                .collect();
            let prot = Protected {
                step,
                bins: bins.clone(),
                codes,
            };
            let mut y = raw.values.clone();
            add_refinement(&mut y, &prot);
            let out: Vec<f64> = y.iter().map(|&v| vt.round(v)).collect();
            let (_, bound) = measure(x, &out, Some(&y), vt);
            if !(bound <= input.budget_rms) {
                break;
            }
            let mut last = out.clone();
            let mut g = None;
            if let Some(limit) = w.peak_max {
                let margin = guard::margin(&out, vt, true);
                match guard::guard_segment(x, &out, vt, limit, margin) {
                    Some(gg) => {
                        guard::apply(&mut last, &gg, vt);
                        g = Some(gg);
                    }
                    None => break,
                }
            }
            let c_out = filled_spectrum(&last, x, fft);
            let holds = bins.iter().zip(&tol).all(|(&k, &t)| {
                let k = k as usize;
                (c_out[k].norm() - c_src[k].norm()).abs() <= t
            });
            if holds {
                let (err, _) = measure(x, &last, None, vt);
                fitted.plan.error_rms = err;
                fitted.plan.bound_rms = bound.max(err);
                return (fitted, g, Some(prot));
            }
            step = crate::codec::guard::short_down(step / 2.0);
        }
    }
    (fit_lossless(input, fitted.spectrum), None, None)
}

/// How many times a protected segment's refinement step is halved before it is stored
/// losslessly.
const PROTECT_HALVINGS: usize = 8;

pub(crate) fn encode_block_of(
    run: &Run,
    segs: &[PlannedSegment],
    p: &RunParams<'_>,
) -> Result<EncodedBlock, CodecError> {
    let first = segs[0].start;
    let last = segs[segs.len() - 1].start + segs[segs.len() - 1].len;
    let times = BlockTimes::from_times(&run.times[first..last]);
    let sp_lo = run.specials.partition_point(|s| s.0 < first);
    let sp_hi = run.specials.partition_point(|s| s.0 < last);
    let specials = &run.specials[sp_lo..sp_hi];
    let mut prev: Option<Prev> = None;
    let mut records = Vec::with_capacity(segs.len());
    let mut summaries = Vec::with_capacity(segs.len());
    let mut fits = Vec::with_capacity(segs.len());
    let fs = p.sample_rate.unwrap_or(0.0);
    for s in segs {
        let x = &run.values[s.start..s.start + s.len];
        let rms = finite_rms(x);
        let budget = p
            .budget
            .resolve(rms)
            .map_err(|budget| CodecError::BudgetRange {
                channel: p.channel.to_string(),
                time_ns: run.times[s.start],
                budget,
            })?;
        let budget = if s.event {
            event_budget(budget)
        } else {
            budget
        };
        // Tune the previous segment's stored ideal length to the measured phase advance, so
        // that this segment's prediction lines up (the decoder reads it from that segment).
        if let (Some(pv), Some(rec), Some(row)) =
            (prev.as_mut(), records.last_mut(), summaries.last_mut())
        {
            if let Some(ideal) = refine_ideal(x, s.cycles, pv) {
                let stored = ideal as f32;
                let last: &mut SegmentRecord = rec;
                let last_row: &mut SegmentSummary = row;
                last.ideal_len = stored;
                pv.ideal = stored as f64;
                if last.cycles > 0 {
                    last_row.fundamental_hz =
                        Some((fs * last.cycles as f64 / stored as f64) as f32);
                }
            }
        }
        let input = SegmentInput {
            values: x,
            value_type: p.value_type,
            budget_rms: budget,
        };
        let (fitted, guard) = match p.peak_max {
            None => (fit_segment(input, prev.as_ref(), p.fft), None),
            Some(limit) => fit_guarded(input, prev.as_ref(), p.fft, limit),
        };
        let seg_specials: Vec<Special> = specials
            .iter()
            .filter(|sp| sp.0 >= s.start && sp.0 < s.start + s.len)
            .map(|&(i, kind)| Special {
                index: (i - s.start) as u32,
                kind,
            })
            .collect();
        let (fitted, guard, protect) = match p.protection {
            None => (fitted, guard, None),
            Some(protection) => {
                let frame = SegmentFrame {
                    len: s.len,
                    sample_rate: fs,
                    cycles: s.cycles,
                    ideal_len: s.ideal_len as f64,
                };
                let w = Promises {
                    protection,
                    frame,
                    peak_max: p.peak_max,
                    specials: &seg_specials,
                    ideal_len: s.ideal_len,
                    cycles: s.cycles,
                };
                protect_segment(input, fitted, guard, prev.as_ref(), p.fft, &w)
            }
        };
        prev = matches!(fitted.plan.basis, Basis::Fourier | Basis::Trend).then(|| Prev {
            coeffs: fitted.coeffs.clone(),
            n: s.len,
            ideal: s.ideal_len as f64,
        });
        let k = s.cycles as usize;
        let harmonic = |h: usize| -> Option<(f32, f32)> {
            if k == 0 || h * k > s.len / 2 {
                return None;
            }
            let c = fitted.spectrum.get(h * k).copied().unwrap_or_default();
            let (a, ph) = amplitude_phase(c, h * k, s.len);
            Some((compact(a), compact(ph)))
        };
        summaries.push(SegmentSummary {
            start_ns: run.times[s.start],
            samples: s.len as u32,
            basis: fitted.plan.basis,
            order: fitted.plan.order,
            cycles: (k > 0).then_some(s.cycles),
            budget_rms: budget as f32,
            error_rms: error_to_f32(fitted.plan.error_rms),
            fundamental_hz: s.fundamental_hz(fs).map(|f| f as f32),
            rms: compact(rms),
            harmonics: (1..=DERIVED_HARMONICS).map(harmonic).collect(),
            thd: if k > 0 {
                thd(&fitted.spectrum, k, s.len, THD_MAX_HARMONIC).map(compact)
            } else {
                None
            },
            event: p.events.then_some(s.event),
        });
        records.push(SegmentRecord {
            len: s.len,
            ideal_len: s.ideal_len,
            cycles: s.cycles,
            basis: fitted.plan.basis,
            order: fitted.plan.order.unwrap_or(0),
            step: fitted.plan.step,
            predicted: fitted.plan.predicted,
            codes: fitted.codes,
            raw: fitted.raw,
            specials: seg_specials,
            trend: fitted.plan.trend,
            warp: fitted.plan.warp,
            guard,
            protect,
        });
        fits.push(fitted.plan);
    }
    let block = Block {
        value_type: p.value_type,
        segments: records,
        times,
    };
    let frame = encode_block(&block, p.params.zstd_level).map_err(|e| CodecError::Compress {
        channel: p.channel.to_string(),
        reason: e.to_string(),
    })?;
    Ok(EncodedBlock {
        channel: p.channel.to_string(),
        frame,
        segments: summaries,
        fits,
    })
}
