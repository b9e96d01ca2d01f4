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

use rayon::prelude::*;
use serde::Serialize;

use crate::codec::estimate::{candidates, refine, track, Candidate, MIN_ESTIMATE_SAMPLES};
pub use crate::codec::estimate::{estimate_fundamental, Estimate, DEFAULT_MIN_CONFIDENCE};

/// Segments span at least this long by default: the harmonic measurement window of
/// IEC 61000-4-7 (10 cycles at 50 Hz, 12 at 60 Hz).
pub const DEFAULT_MIN_SEGMENT_SECONDS: f64 = 0.2;

/// Length of the fixed blocks used when a run has no periodicity.
pub const DEFAULT_FALLBACK_SEGMENT_SECONDS: f64 = 0.2;

/// Highest fundamental the automatic estimate looks for: shaft rates and line frequencies of
/// rotating machines lie well below it (give the frequency for anything faster).
pub const MAX_AUTO_FUNDAMENTAL_HZ: f64 = 1000.0;

/// Tracking windows span at least this many estimated cycles.
pub const TRACK_MIN_CYCLES: f64 = 8.0;

/// Tracking windows span at least this long.
pub const TRACK_MIN_SECONDS: f64 = 0.5;

/// How far (relative) the fundamental may move from one tracking window to the next.
pub const TRACK_REL: f64 = 0.04;

/// Candidates the trial coder prices at the start of a run.
pub const FINALISTS: usize = 6;

/// The trial stretch spans this many segments of the slowest candidate (if the run allows).
pub const TRIAL_SEGMENTS: usize = 3;

/// The trial stretch spans at most this many samples.
pub const TRIAL_MAX_SAMPLES: usize = 1 << 16;

/// The candidates' spectra look at most this many samples (drift within a longer stretch
/// would smear the high harmonics); a run that is slower is looked at whole as well.
pub const ESTIMATE_SAMPLES: usize = 1 << 15;

/// Trial prices within this factor of the cheapest count as equal.
pub const TIE_MARGIN: f64 = 1.01;

/// A longer duration for the winner is taken while its trial price is within this factor of
/// the shorter one's: the trial is a fraction of a block, and what longer segments save
/// further on (fewer headers, fewer restarts of the prediction) does not show in it
/// (measured on 10⁷ samples of clean motor current at 5 %: 0.8 s segments priced 1.2 %
/// above 0.2 s ones in the trial and coded 27 % smaller over the whole file).
pub const LONGER_MARGIN: f64 = 1.03;

/// The multiples of the winner's least duration it is also priced at.
pub const LONGER_MULTIPLES: [f64; 5] = [2.0, 4.0, 8.0, 16.0, 64.0];

/// Fixed blocks must code this much smaller than the best periodic cut to be chosen over it
/// (a periodic cut keeps the harmonic columns meaningful).
pub const PERIODIC_MARGIN: f64 = 0.9;

/// Fixed blocks that hold the estimated fundamental's whole cycles to within this many
/// cycles are cut as periodic segments of those cycles (the harmonics then sit on bins
/// K·h, so the harmonic columns are meaningful): harmonic 40 then slips by at most 0.4 of a
/// bin over a block (common practice: a tolerance of our own, not a published one).
pub const WHOLE_CYCLES_TOLERANCE: f64 = 0.01;

/// No segment is longer than this many samples.
pub const MAX_SEGMENT_SAMPLES: usize = 1 << 20;

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
    /// Whether event capture marked the segment ([`crate::codec::events`]); the planner
    /// leaves it false.
    pub event: bool,
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

/// What the planner chose at the start of a run.
#[derive(Debug, Clone, Copy)]
struct Choice {
    estimate: Option<Estimate>,
    runner_up: Option<(Estimate, f64)>,
    periodic: bool,
    /// Segment duration (periodic: the least; else the block length), seconds.
    seconds: f64,
    /// Fixed blocks that hold whole cycles of the runner-up estimate: the fundamental
    /// they give (fs·K/L) and K (see [`WHOLE_CYCLES_TOLERANCE`]).
    whole: Option<(Estimate, u32)>,
}

/// Prices a trial cut for the planner: the coded bytes of `x` cut into `segments` (whole
/// segments tiling a prefix of `x`, all values finite), or `None` if it cannot be coded.
pub trait Arbiter: Sync {
    /// Coded bytes of the trial.
    fn trial_bytes(&self, x: &[f64], segments: &[PlannedSegment]) -> Option<usize>;
}

/// The segmentation of one run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SegmentPlan {
    /// Segments in order, tiling the run.
    pub segments: Vec<PlannedSegment>,
    /// The first estimate (or the given value) for the run.
    pub fundamental: Option<Estimate>,
    /// The candidate that came second (estimated runs only), and its trial bytes per sample
    /// over the winner's (1 when no trial coder arbitrated).
    pub runner_up: Option<(Estimate, f64)>,
    /// How it was found.
    pub source: FundamentalSource,
    /// Lowest and highest tracked fundamental (Hz).
    pub tracked_range: Option<(f64, f64)>,
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

/// Plan the segments of one whole run of samples (non-finite values allowed; they are
/// ignored by estimation, which uses the longest finite stretch of each window); `arbiter`
/// prices the candidate fundamentals by their coded size (without one, the best-scored
/// candidate that correlates enough wins). Equivalent to feeding the run to a [`Planner`] in
/// any number of pieces.
pub fn plan_segments(
    x: &[f64],
    settings: &SegmentSettings,
    arbiter: Option<&dyn Arbiter>,
) -> SegmentPlan {
    let mut p = Planner::new(*settings);
    let segments = p.advance(x, 0, true, arbiter);
    p.into_plan(segments)
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

/// Blocks (s) whose RMS [`steady_part`] compares.
pub const STEADY_BLOCK_SECONDS: f64 = 0.5;

/// A block is steady when its RMS is within this factor of the stretch's median block RMS.
pub const STEADY_FACTOR: f64 = 3.0;

/// The steady part must keep at least this share of the stretch.
pub const STEADY_MIN_SHARE: f64 = 0.25;

/// The stretch a run's fundamental is estimated on: `x` less a start-up. A run that begins
/// before its machine does (sensor noise, then a start's inrush or a run-up, then steady
/// running) would have the estimate and the trial coder's prices bent by what comes first;
/// the steady part is where every [`STEADY_BLOCK_SECONDS`] block from there to the end has
/// an RMS within [`STEADY_FACTOR`] of the median block's. When the start is steady already,
/// or the steady part is shorter than [`STEADY_MIN_SHARE`] of `x` (a trip, bursts, beats
/// that vary more than that), `x` is kept whole.
pub fn steady_part(x: &[f64], fs: f64) -> &[f64] {
    let block = (STEADY_BLOCK_SECONDS * fs).round() as usize;
    if block < 16 || x.len() < 4 * block {
        return x;
    }
    let rms: Vec<f64> = x
        .chunks_exact(block)
        .map(|c| (c.iter().map(|v| v * v).sum::<f64>() / block as f64).sqrt())
        .collect();
    let mut sorted = rms.clone();
    sorted.sort_by(f64::total_cmp);
    let median = sorted[sorted.len() / 2];
    if !(median > 0.0) {
        return x;
    }
    let steady = |r: f64| r <= STEADY_FACTOR * median && r * STEADY_FACTOR >= median;
    // The first block from which every block to the end is steady.
    let from = rms.iter().rposition(|&r| !steady(r)).map_or(0, |i| i + 1);
    let kept = x.len() - from * block;
    if from == 0 || (kept as f64) < STEADY_MIN_SHARE * x.len() as f64 {
        return x;
    }
    &x[from * block..]
}

/// Samples the first (global) estimate of a run looks at.
pub const GLOBAL_ESTIMATE_SAMPLES: usize = 1 << 17;

#[derive(Debug, Clone)]
enum Mode {
    /// Waiting for enough samples for the global estimate.
    Start,
    /// Fixed-length blocks of `len`.
    Fixed { len: usize },
    /// Given fundamental: segments of ideal length `ideal` (K = `k`).
    Given { ideal: f64, k: u32 },
    /// Tracked fundamental.
    Tracked {
        window: usize,
        f_cur: f64,
        /// The current tracking block, once estimated.
        block: Option<TrackBlock>,
    },
}

/// A tracking block: the fundamental estimated at its centre and at the next block's, and
/// the cycles per segment.
#[derive(Debug, Clone, Copy)]
struct TrackBlock {
    end: usize,
    k: u32,
    /// (centre, Hz) of this block's window and of the next one's.
    here: (f64, f64),
    next: (f64, f64),
    /// The look-ahead estimate: (window start, end, the frequency it started from, result),
    /// reused by the next block when its window and starting frequency are the same.
    ahead: (usize, usize, f64, Option<f64>),
}

impl TrackBlock {
    /// The fundamental at sample position `t`, linear between the two window centres.
    /// Beyond the centres the line is extended, but never below half the lower of the two
    /// or above twice the higher (a segment longer than a window reaches far past them).
    fn hz_at(&self, t: f64) -> f64 {
        let (c0, f0) = self.here;
        let (c1, f1) = self.next;
        if c1 > c0 {
            let f = f0 + (f1 - f0) * (t - c0) / (c1 - c0);
            f.clamp(0.5 * f0.min(f1), 2.0 * f0.max(f1))
        } else {
            f0
        }
    }
}

/// Incremental segmentation of one run: feed the samples as they arrive; the segments it
/// returns depend only on the run's samples, never on how they were split into pieces.
#[derive(Debug, Clone)]
pub struct Planner {
    settings: SegmentSettings,
    mode: Mode,
    /// Position (fractional sample index) of the next boundary.
    phi: f64,
    /// Start of the current tracking block.
    block_start: usize,
    estimate: Option<Estimate>,
    runner_up: Option<(Estimate, f64)>,
    source: FundamentalSource,
    range: Option<(f64, f64)>,
}

impl Planner {
    /// A planner for a new run.
    pub fn new(settings: SegmentSettings) -> Self {
        let fs = settings.sample_rate;
        let (mode, source, estimate, range) = match settings.fundamental {
            FundamentalSetting::None => (
                Mode::Fixed {
                    len: fixed_len(&settings),
                },
                FundamentalSource::NotPeriodic,
                None,
                None,
            ),
            FundamentalSetting::Hz(f0) => {
                let period = fs / f0;
                if !(period >= 2.0) || period > MAX_SEGMENT_SAMPLES as f64 {
                    (
                        Mode::Fixed {
                            len: fixed_len(&settings),
                        },
                        FundamentalSource::NotPeriodic,
                        None,
                        None,
                    )
                } else {
                    let k = cycles_per_segment(&settings, period);
                    (
                        Mode::Given {
                            ideal: k as f64 * period,
                            k,
                        },
                        FundamentalSource::Given,
                        Some(Estimate {
                            hz: f0,
                            confidence: 1.0,
                        }),
                        Some((f0, f0)),
                    )
                }
            }
            FundamentalSetting::Auto => (Mode::Start, FundamentalSource::NotPeriodic, None, None),
        };
        Planner {
            settings,
            mode,
            phi: 0.0,
            block_start: 0,
            estimate,
            runner_up: None,
            source,
            range,
        }
    }

    /// The first run index the planner may still read (samples before it can be dropped).
    pub fn keep_from(&self) -> usize {
        match self.mode {
            Mode::Start => 0,
            Mode::Tracked { window, .. } => {
                let c = self.block_start + window / 2;
                (c.saturating_sub(window / 2)).min(self.phi.round() as usize)
            }
            _ => self.phi.round() as usize,
        }
    }

    /// Feed samples: `x` holds the run's samples from index `base` on; `complete` says the
    /// run ends after them; `arbiter` prices the candidates at the start of the run (see
    /// [`plan_segments`]). Returns the segments that are now final.
    pub fn advance(
        &mut self,
        x: &[f64],
        base: usize,
        complete: bool,
        arbiter: Option<&dyn Arbiter>,
    ) -> Vec<PlannedSegment> {
        let avail = base + x.len();
        let at = |i: usize| i - base;
        let mut out = Vec::new();
        if let Mode::Start = self.mode {
            if !complete && avail < GLOBAL_ESTIMATE_SAMPLES {
                return out;
            }
            let head = longest_finite(&x[at(0)..at(avail.min(GLOBAL_ESTIMATE_SAMPLES))]);
            let choice = self.choose(head, arbiter);
            self.runner_up = choice.runner_up;
            if choice.periodic {
                self.settings.min_segment_seconds = choice.seconds;
            } else {
                self.settings.fallback_segment_seconds = choice.seconds;
            }
            self.mode = match choice.estimate.filter(|_| choice.periodic) {
                None => match choice.whole {
                    None => Mode::Fixed {
                        len: fixed_len(&self.settings),
                    },
                    Some((g, k)) => {
                        self.estimate = Some(g);
                        self.source = FundamentalSource::Estimated;
                        self.range = Some((g.hz, g.hz));
                        Mode::Given {
                            ideal: fixed_len(&self.settings) as f64,
                            k,
                        }
                    }
                },
                Some(g) => {
                    self.estimate = Some(g);
                    self.source = FundamentalSource::Estimated;
                    self.range = Some((g.hz, g.hz));
                    self.tracked_mode(g.hz)
                }
            };
        }
        loop {
            let start = self.phi.round() as usize;
            if start >= avail {
                break;
            }
            let (ideal, k) = match &mut self.mode {
                Mode::Start => unreachable!("the global estimate was made above"),
                Mode::Fixed { len } => (*len as f64, 0),
                Mode::Given { ideal, k } => (*ideal, *k),
                Mode::Tracked {
                    window,
                    f_cur,
                    block,
                } => {
                    let w = *window;
                    let mut ahead = None;
                    if let Some(tb) = *block {
                        if start >= tb.end {
                            // The block holding `start`: a segment longer than a window
                            // can step past several.
                            self.block_start = tb.end + (start - tb.end) / w * w;
                            ahead = Some(tb.ahead);
                            *block = None;
                        }
                    }
                    if block.is_none() {
                        // The block and its estimation window must be fully available.
                        let bs = self.block_start;
                        if !complete && avail < bs + 2 * w {
                            break;
                        }
                        let block_end = (bs + w).min(avail);
                        let c = (bs + block_end) / 2;
                        let a = c.saturating_sub(w / 2);
                        let b = (a + w).min(avail);
                        let fs = self.settings.sample_rate;
                        let estimate = |a: usize, b: usize, f: f64| -> Option<f64> {
                            let local = longest_finite(&x[at(a)..at(b)]);
                            (local.len() >= w / 2)
                                .then(|| track(local, fs, f, TRACK_REL))
                                .flatten()
                        };
                        let here = match ahead {
                            Some((a0, b0, f0, r)) if (a0, b0, f0) == (a, b, *f_cur) => r,
                            _ => estimate(a, b, *f_cur),
                        };
                        if let Some(f) = here {
                            *f_cur = f;
                        }
                        // The next block's window, looked at ahead (it is estimated the
                        // same way when its turn comes), so the period can follow the
                        // speed between the two centres instead of stepping at the edge.
                        let c1 = block_end + w / 2;
                        let (a1, b1) = (c1.saturating_sub(w / 2), (c1 + w / 2).min(avail));
                        let from = *f_cur;
                        let looked = (a1 < b1).then(|| estimate(a1, b1, from)).flatten();
                        let f_next = looked.unwrap_or(from);
                        if let Some((lo, hi)) = &mut self.range {
                            *lo = lo.min(*f_cur);
                            *hi = hi.max(*f_cur);
                        }
                        let k = cycles_per_segment(&self.settings, fs / *f_cur);
                        *block = Some(TrackBlock {
                            end: block_end,
                            k,
                            here: (c as f64, *f_cur),
                            next: (c1 as f64, f_next),
                            ahead: (a1, b1, from, looked),
                        });
                    }
                    match *block {
                        Some(tb) => {
                            let fs = self.settings.sample_rate;
                            // The period at the segment's middle (one step of refinement).
                            let guess = tb.k as f64 * fs / tb.hz_at(self.phi);
                            let hz = tb.hz_at(self.phi + 0.5 * guess);
                            (tb.k as f64 * fs / hz, tb.k)
                        }
                        None => (1.0, 0),
                    }
                }
            };
            let next = self.phi + ideal;
            let e_full = (next.round() as usize).max(start + 1);
            if e_full > avail && !complete {
                break;
            }
            let e = e_full.min(avail);
            let whole = e == e_full;
            out.push(PlannedSegment {
                start,
                len: e - start,
                cycles: if whole { k } else { 0 },
                ideal_len: if whole {
                    ideal as f32
                } else {
                    (e - start) as f32
                },
                event: false,
            });
            self.phi = if whole { next } else { e as f64 };
        }
        out
    }

    /// Tracking from a fundamental of `hz`.
    fn tracked_mode(&self, hz: f64) -> Mode {
        let fs = self.settings.sample_rate;
        Mode::Tracked {
            window: ((TRACK_MIN_CYCLES * fs / hz).max(TRACK_MIN_SECONDS * fs) as usize)
                .clamp(MIN_ESTIMATE_SAMPLES * 4, GLOBAL_ESTIMATE_SAMPLES),
            f_cur: hz,
            block: None,
        }
    }

    /// How to cut a run, from its first finite stretch `head`: the candidates
    /// ([`candidates`] of the first 2¹³ and 2¹⁵ samples and of the whole head; those scoring
    /// below half the best and correlating below 0.3 are dropped), each refined on a trial
    /// stretch and priced by `arbiter` as bytes per sample of whole segments. All are priced
    /// at their own least duration, after sub-multiples of better-scored candidates are
    /// dropped (they would gain only from longer segments); the winner is then priced at
    /// [`LONGER_MULTIPLES`] of that duration (unless cycles per segment are given; a longer
    /// one is kept while within [`LONGER_MARGIN`] of the cheapest shorter one), and fixed
    /// blocks at 1, 4, 16 and 64 times the fallback length (at the periodic duration when
    /// cycles are given). Durations that do not fit twice in the trial are not priced. Without an arbiter: the best-scored candidate
    /// whose autocorrelation reaches the minimum confidence.
    fn choose(&self, head: &[f64], arbiter: Option<&dyn Arbiter>) -> Choice {
        let fs = self.settings.sample_rate;
        let f_min = 2.0 * fs / MAX_SEGMENT_SAMPLES as f64;
        let mut cands: Vec<Candidate> = Vec::new();
        // Candidates come from the steady part (a start-up must not bend them); the trial
        // coder below prices them on the run's start as the run will be cut.
        let steady = steady_part(head, fs);
        for w in [1usize << 13, ESTIMATE_SAMPLES, usize::MAX] {
            let stretch = &steady[..steady.len().min(w)];
            if w != 1 << 13 && stretch.len() <= (1 << 13).min(steady.len()) && !cands.is_empty() {
                continue;
            }
            for c in candidates(stretch, fs, f_min, MAX_AUTO_FUNDAMENTAL_HZ, FINALISTS) {
                if cands.iter().all(|o| (c.hz / o.hz - 1.0).abs() > 0.01) {
                    cands.push(c);
                }
            }
        }
        cands.retain(|c| c.hz.is_finite() && c.hz > 0.0 && fs / c.hz >= 2.0);
        cands.sort_by(|a, b| b.score.total_cmp(&a.score).then(b.hz.total_cmp(&a.hz)));
        let top = cands.first().map_or(0.0, |c| c.score);
        cands.retain(|c| c.score >= 0.5 * top || c.confidence >= 0.3);
        // A sub-multiple of a candidate that scores at least as well adds nothing but longer
        // segments (which the duration search below offers the winner anyway).
        let all = cands.clone();
        cands.retain(|c| {
            !all.iter().any(|o| {
                let d = o.hz / c.hz;
                o.score >= c.score - 0.02 && d >= 1.5 && (d - d.round()).abs() < 0.01 * d
            })
        });
        cands.truncate(FINALISTS);
        let fixed = fixed_len(&self.settings) as f64 / fs;
        let Some(arbiter) = arbiter else {
            let mut ok = cands
                .into_iter()
                .filter(|c| c.confidence >= self.settings.min_confidence);
            let best = ok.next().map(|c| c.estimate());
            return Choice {
                periodic: best.is_some(),
                estimate: best,
                runner_up: ok.next().map(|c| (c.estimate(), 1.0)),
                seconds: if best.is_some() {
                    self.settings.min_segment_seconds
                } else {
                    fixed
                },
                whole: None,
            };
        };
        let given_k = self.settings.cycles_per_segment.is_some();
        let natural = |f: f64| cycles_per_segment(&self.settings, fs / f) as f64 / f;
        let longest = cands
            .iter()
            .map(|c| natural(c.hz))
            .fold(self.settings.min_segment_seconds.max(fixed), f64::max);
        let t = ((128.0 * longest * fs).ceil() as usize)
            .min(TRIAL_MAX_SAMPLES)
            .min(head.len());
        let trial = &head[..t];
        let price = |setting: FundamentalSetting, seconds: f64| -> Option<f64> {
            let mut s = self.settings;
            s.fundamental = setting;
            s.min_segment_seconds = seconds;
            s.fallback_segment_seconds = seconds;
            let mut planner = Planner::new(s);
            // A periodic candidate is tracked from its frequency, as the run would be.
            if let FundamentalSetting::Hz(hz) = setting {
                planner.mode = planner.tracked_mode(hz);
            }
            // The whole trial as a complete run (tracking windows then need not fit twice),
            // less its tail: the first segment short of whole cycles, or a short last block.
            let mut segs = planner.advance(trial, 0, true, None);
            if setting == FundamentalSetting::None {
                if segs.len() > 1 && segs[segs.len() - 1].len < segs[0].len {
                    segs.pop();
                }
            } else if let Some(i) = segs.iter().position(|p| p.cycles == 0) {
                segs.truncate(i);
            }
            let covered: usize = segs.iter().map(|p| p.len).sum();
            if segs.len() < 2 {
                return None;
            }
            let bytes = arbiter.trial_bytes(&trial[..covered], &segs)?;
            Some(bytes as f64 / covered as f64)
        };
        // The trials are independent: priced on the pool (the run's start, before any block
        // is fitted), collected in candidate order.
        let mut priced: Vec<(Estimate, f64)> = cands
            .par_iter()
            .filter_map(|c| {
                let hz = refine(steady, fs, c.hz, 0.01).unwrap_or(c.hz);
                let e = Estimate {
                    hz,
                    confidence: c.confidence,
                };
                price(
                    FundamentalSetting::Hz(hz),
                    self.settings.min_segment_seconds,
                )
                .map(|b| (e, b))
            })
            .collect();
        // The best-scored candidate unless another codes clearly smaller (prices within
        // TIE_MARGIN count as equal: refinement moves each candidate a little).
        let cheapest = priced.iter().map(|p| p.1).fold(f64::INFINITY, f64::min);
        if let Some(i) = priced.iter().position(|p| p.1 <= cheapest * TIE_MARGIN) {
            let first = priced.remove(i);
            priced.sort_by(|a, b| a.1.total_cmp(&b.1));
            priced.insert(0, first);
        }
        let mut seconds = self.settings.min_segment_seconds;
        if let Some((best, b)) = priced.first_mut() {
            if !given_k {
                let base = natural(best.hz);
                let hz = best.hz;
                let longer: Vec<Option<f64>> = LONGER_MULTIPLES
                    .par_iter()
                    .map(|&m| price(FundamentalSetting::Hz(hz), m * base))
                    .collect();
                // Against the cheapest price so far, so that margins do not compound.
                let mut cheapest = *b;
                for (m, p) in LONGER_MULTIPLES.into_iter().zip(longer) {
                    if let Some(p) = p {
                        if p <= cheapest * LONGER_MARGIN {
                            (*b, seconds) = (p, m * base);
                        }
                        cheapest = cheapest.min(p);
                    }
                }
            }
        }
        // With cycles per segment given, blocks compete at the periodic segments' duration.
        let block_seconds: Vec<f64> = match (given_k, priced.first()) {
            (true, Some((best, _))) => vec![natural(best.hz)],
            _ => [1.0, 4.0, 16.0, 64.0].iter().map(|m| m * fixed).collect(),
        };
        let (none, none_s) = block_seconds
            .par_iter()
            .filter_map(|&d| price(FundamentalSetting::None, d).map(|b| (b, d)))
            .collect::<Vec<_>>()
            .into_iter()
            .min_by(|a, b| a.0.total_cmp(&b.0))
            .unwrap_or((f64::INFINITY, fixed));
        // A harmonic of the best-scored candidate that codes smaller cuts the same segments
        // (its refinement was the sharper one): keep its precision, report the fundamental.
        if let (Some(first), Some(top)) = (priced.first_mut(), cands.first()) {
            let d = first.0.hz / top.hz;
            if d >= 1.5 && (d - d.round()).abs() < 0.01 * d {
                first.0 = Estimate {
                    hz: first.0.hz / d.round(),
                    confidence: top.confidence,
                };
            }
        }
        let mut it = priced.into_iter();
        match it.next() {
            Some((best, b)) if PERIODIC_MARGIN * b <= none => Choice {
                estimate: Some(best),
                runner_up: it.next().map(|(e, r)| (e, r / b)),
                periodic: true,
                seconds,
                whole: None,
            },
            best => {
                // Blocks that happen to hold whole cycles of a priced candidate (the
                // cheapest such, of at least the minimum confidence) are its periodic segments: an exact number of samples per
                // cycle, as in a test signal or a line locked to the sampling clock.
                let len = fixed_len(&SegmentSettings {
                    fallback_segment_seconds: none_s,
                    ..self.settings
                });
                let priced: Vec<(Estimate, f64)> = best.into_iter().chain(it).collect();
                let fits = |e: &Estimate| {
                    if e.confidence < self.settings.min_confidence {
                        return None;
                    }
                    let cycles = len as f64 * e.hz / fs;
                    let k = cycles.round();
                    (k >= 1.0 && (cycles - k).abs() <= WHOLE_CYCLES_TOLERANCE).then_some(k)
                };
                let (at, whole) = match priced
                    .iter()
                    .enumerate()
                    .find_map(|(i, (e, _))| fits(e).map(|k| (i, e, k)))
                {
                    Some((i, e, k)) => {
                        let hz = fs * k / len as f64;
                        (Some(i), Some((Estimate { hz, ..*e }, k as u32)))
                    }
                    None => (None, None),
                };
                // The runner-up: the cheapest candidate the blocks do not carry.
                let runner_up = priced
                    .iter()
                    .enumerate()
                    .find(|&(i, _)| Some(i) != at)
                    .map(|(_, p)| *p);
                Choice {
                    estimate: None,
                    runner_up: runner_up.map(|(e, b)| (e, b / none)),
                    periodic: false,
                    seconds: none_s,
                    whole,
                }
            }
        }
    }

    /// The plan summary with the segments collected by the caller.
    pub fn into_plan(self, segments: Vec<PlannedSegment>) -> SegmentPlan {
        SegmentPlan {
            segments,
            fundamental: self.estimate,
            runner_up: self.runner_up,
            source: self.source,
            tracked_range: self.range,
        }
    }

    /// How the fundamental was found so far.
    pub fn summary(&self) -> (Option<Estimate>, FundamentalSource, Option<(f64, f64)>) {
        (self.estimate, self.source, self.range)
    }
}

fn fixed_len(settings: &SegmentSettings) -> usize {
    ((settings.fallback_segment_seconds * settings.sample_rate).round() as usize)
        .clamp(16, MAX_SEGMENT_SAMPLES)
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
        let plan = plan_segments(&vec![0.0; n], &s, None);
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
    fn planner_fed_in_pieces_equals_the_whole_run_plan() {
        // A drifting tone: the tracked plan must not depend on how samples arrive.
        let fs = 5_000.0;
        let n = 400_000;
        let mut ph = 0.0f64;
        let x: Vec<f64> = (0..n)
            .map(|i| {
                let f = 50.0 * (1.0 + 0.1 * i as f64 / n as f64);
                ph += 2.0 * std::f64::consts::PI * f / fs;
                ph.sin() + 0.2 * (3.0 * ph).sin()
            })
            .collect();
        let s = SegmentSettings::new(fs);
        let whole = plan_segments(&x, &s, None);
        assert_eq!(whole.source, FundamentalSource::Estimated);
        for piece in [1_000usize, 77_777, 150_000] {
            let mut p = Planner::new(s);
            let mut segs = Vec::new();
            let mut base = 0;
            let mut fed = 0;
            while fed < n {
                fed = (fed + piece).min(n);
                let keep = p.keep_from().max(base);
                segs.extend(p.advance(&x[keep..fed], keep, fed == n, None));
                base = keep;
            }
            assert_eq!(p.into_plan(segs), whole, "pieces of {piece}");
        }
    }

    #[test]
    fn noise_falls_back_to_fixed_blocks() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        let x: Vec<f64> = (0..20_000).map(|_| rng.random::<f64>() - 0.5).collect();
        let plan = plan_segments(&x, &SegmentSettings::new(10_000.0), None);
        assert_eq!(plan.source, FundamentalSource::NotPeriodic);
        assert!(tiles(&plan, x.len()));
    }
}
