//! Job: one source file through the stages — read, assemble, segment, fit, pack, write — and
//! one archive back to a decoded Parquet file. [`encode_run`] is the in-memory heart (one run
//! of one channel → blocks), used by the file job, the tests and the benchmark alike.
//!
//! Blocks are fitted in parallel with rayon; each block's content depends only on its own
//! samples and settings, so archives are byte-identical whatever the thread count.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use rayon::prelude::*;
use serde::Serialize;

use crate::archive::{self, ArchiveMeta, ChannelMeta, SegmentRow, SourceMeta};
use crate::assemble::{sort_channel, ChannelAssembler, ChannelSamples, Run, RunEvent, StreamError};
use crate::error::{Error, Result};
use crate::fit::{error_to_f32, fit_segment, refine_ideal, Basis, FitPlan, Prev, SegmentInput};
use crate::options::{Budget, Settings};
use crate::pack::{encode_block, Block, BlockTimes, SegmentRecord, Special};
use crate::read::{ChannelInfo, Source};
use crate::segment::{plan_segments, FundamentalSetting, PlannedSegment, Planner, SegmentPlan};
use crate::signal::{amplitude_phase, rms_of, thd, RealFft, Transform, ValueType};

/// Harmonics whose amplitude and phase become derived columns.
pub const DERIVED_HARMONICS: usize = 3;

/// Highest harmonic counted in the THD column (IEEE 519 counts up to the 50th).
pub const THD_MAX_HARMONIC: usize = 50;

/// One encoded block: its frame and the rows of its segments.
#[derive(Debug, Clone)]
pub struct EncodedBlock {
    /// The compressed frame.
    pub frame: Vec<u8>,
    /// The archive rows (the first carries the payload).
    pub rows: Vec<SegmentRow>,
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
    /// Settings.
    pub settings: &'a Settings,
    /// Transform.
    pub fft: &'a dyn Transform,
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
    let mut seg = p.settings.segment_settings(p.sample_rate.unwrap_or(1.0));
    if p.sample_rate.is_none() {
        seg.fundamental = FundamentalSetting::None;
    }
    plan_segments(&run.values, &seg)
}

/// Encode one run: segment, fit and pack; blocks in parallel.
pub fn encode_run(run: &Run, p: &RunParams<'_>) -> Result<RunEncoding> {
    let plan = plan_run(run, p);
    let ranges = block_ranges(
        &plan.segments,
        p.settings.block_segments,
        p.settings.block_samples,
    );
    let blocks = ranges
        .into_par_iter()
        .map(|r| encode_block_of(run, &plan.segments[r], p))
        .collect::<Result<Vec<_>>>()?;
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

fn encode_block_of(run: &Run, segs: &[PlannedSegment], p: &RunParams<'_>) -> Result<EncodedBlock> {
    let first = segs[0].start;
    let last = segs[segs.len() - 1].start + segs[segs.len() - 1].len;
    let times = BlockTimes::from_times(&run.times[first..last]);
    let sp_lo = run.specials.partition_point(|s| s.0 < first);
    let sp_hi = run.specials.partition_point(|s| s.0 < last);
    let specials = &run.specials[sp_lo..sp_hi];
    let mut prev: Option<Prev> = None;
    let mut records = Vec::with_capacity(segs.len());
    let mut rows = Vec::with_capacity(segs.len());
    let mut fits = Vec::with_capacity(segs.len());
    let fs = p.sample_rate.unwrap_or(0.0);
    for s in segs {
        let x = &run.values[s.start..s.start + s.len];
        let rms = finite_rms(x);
        let budget = p.budget.resolve(rms).map_err(|budget| Error::BudgetRange {
            file: PathBuf::new(),
            channel: p.channel.to_string(),
            time_ns: run.times[s.start],
            budget,
        })?;
        // Tune the previous segment's stored ideal length to the measured phase advance, so
        // that this segment's prediction lines up (the decoder reads it from that segment).
        if let (Some(pv), Some(rec), Some(row)) =
            (prev.as_mut(), records.last_mut(), rows.last_mut())
        {
            if let Some(ideal) = refine_ideal(x, s.cycles, pv) {
                let stored = ideal as f32;
                let last: &mut SegmentRecord = rec;
                let last_row: &mut SegmentRow = row;
                last.ideal_len = stored;
                pv.ideal = stored as f64;
                if last.cycles > 0 {
                    last_row.fundamental_hz =
                        Some((fs * last.cycles as f64 / stored as f64) as f32);
                }
            }
        }
        let fitted = fit_segment(
            SegmentInput {
                values: x,
                value_type: p.value_type,
                budget_rms: budget,
            },
            prev.as_ref(),
            p.fft,
        );
        prev = (fitted.plan.basis == Basis::Fourier).then(|| Prev {
            coeffs: fitted.coeffs.clone(),
            n: s.len,
            ideal: s.ideal_len as f64,
        });
        let seg_specials: Vec<Special> = specials
            .iter()
            .filter(|sp| sp.0 >= s.start && sp.0 < s.start + s.len)
            .map(|&(i, kind)| Special {
                index: (i - s.start) as u32,
                kind,
            })
            .collect();
        let k = s.cycles as usize;
        let harmonic = |h: usize| -> Option<(f32, f32)> {
            if k == 0 || h * k > s.len / 2 {
                return None;
            }
            let c = fitted.spectrum.get(h * k).copied().unwrap_or_default();
            let (a, ph) = amplitude_phase(c, h * k, s.len);
            Some((compact(a), compact(ph)))
        };
        rows.push(SegmentRow {
            channel: p.channel.to_string(),
            start_ns: run.times[s.start],
            samples: s.len as u32,
            basis: fitted.plan.basis,
            order: fitted.plan.order,
            cycles: (k > 0).then_some(s.cycles),
            budget_rms: budget as f32,
            error_rms: error_to_f32(fitted.plan.error_rms),
            sample_rate_hz: fs as f32,
            fundamental_hz: s.fundamental_hz(fs).map(|f| f as f32),
            rms: compact(rms),
            harmonics: (1..=DERIVED_HARMONICS).map(harmonic).collect(),
            thd: if k > 0 {
                thd(&fitted.spectrum, k, s.len, THD_MAX_HARMONIC).map(compact)
            } else {
                None
            },
            block: 0,
            payload: None,
            checksum: None,
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
        });
        fits.push(fitted.plan);
    }
    let block = Block {
        value_type: p.value_type,
        segments: records,
        times,
    };
    let frame = encode_block(&block, p.settings.zstd_level).map_err(|e| Error::InvalidOption {
        name: "zstd-level".into(),
        reason: e.to_string(),
    })?;
    Ok(EncodedBlock { frame, rows, fits })
}

/// What an encode did, for the summary.
#[derive(Debug, Clone, Serialize)]
pub struct EncodeSummary {
    /// Source file.
    pub source: PathBuf,
    /// Archive written.
    pub archive: PathBuf,
    /// Rows read.
    pub rows: u64,
    /// Channels.
    pub channels: usize,
    /// Segments.
    pub segments: usize,
    /// Source file size (bytes).
    pub source_bytes: u64,
    /// Archive size (bytes).
    pub archive_bytes: u64,
    /// Worst error/budget ratio over lossy segments.
    pub worst_error_over_budget: f64,
    /// Per channel: how the fundamental was found.
    pub fundamentals: Vec<ChannelMeta>,
}

/// Options of a file job that are not encode settings.
#[derive(Debug, Clone, Default)]
pub struct JobControl {
    /// Show progress bars (when stderr is a terminal).
    pub progress: bool,
}

/// Samples of a sorted channel handed to its encoder at a time.
const SORTED_PIECE: usize = 1 << 20;

/// Samples of finished blocks fitted together in one parallel batch.
pub const FIT_BATCH_SAMPLES: usize = 1 << 21;

/// A block ready to be fitted: its own copy of the samples and its segments (starts relative
/// to the block).
struct BlockJob {
    channel: usize,
    run: Run,
    segs: Vec<PlannedSegment>,
}

/// The run of a channel being encoded.
struct RunState {
    /// Samples of the run from run index `base` on.
    buf: Run,
    base: usize,
    planner: Planner,
    pending: Vec<PlannedSegment>,
}

/// One channel being encoded as its samples arrive.
struct ChannelEncoder {
    info: ChannelInfo,
    asm: ChannelAssembler,
    run: Option<RunState>,
    meta: ChannelMeta,
    last_time: Option<i64>,
    finished: bool,
}

impl ChannelEncoder {
    fn new(source: &Path, info: ChannelInfo, settings: &Settings) -> Self {
        ChannelEncoder {
            asm: ChannelAssembler::new(source, &info.name, settings.sample_rate_hz),
            meta: ChannelMeta::new(&info, None, 0, 0, false),
            info,
            run: None,
            last_time: None,
            finished: false,
        }
    }

    /// Earliest time a block of this channel not yet handed out can start.
    fn front_time(&self) -> i64 {
        if self.finished {
            return i64::MAX;
        }
        let held = self.asm.held_first_time();
        let buf = self.run.as_ref().and_then(|r| r.buf.times.first().copied());
        match (held, buf) {
            (Some(a), Some(b)) => a.min(b),
            (Some(a), None) | (None, Some(a)) => a,
            (None, None) => self.last_time.map_or(i64::MIN, |t| t.saturating_add(1)),
        }
    }

    fn push(
        &mut self,
        ci: usize,
        samples: ChannelSamples,
        settings: &Settings,
        jobs: &mut Vec<BlockJob>,
    ) -> std::result::Result<(), StreamError> {
        self.meta.rows += samples.len() as u64;
        self.last_time = samples.times.last().copied().or(self.last_time);
        let events = self.asm.push(samples)?;
        self.handle(ci, events, settings, jobs);
        Ok(())
    }

    fn finish(&mut self, ci: usize, settings: &Settings, jobs: &mut Vec<BlockJob>) {
        let events = self.asm.finish();
        self.handle(ci, events, settings, jobs);
        self.meta.sample_rate_hz = self.asm.sample_rate();
        self.finished = true;
    }

    fn handle(
        &mut self,
        ci: usize,
        events: Vec<RunEvent>,
        settings: &Settings,
        jobs: &mut Vec<BlockJob>,
    ) {
        for e in events {
            match e {
                RunEvent::Samples(r) => {
                    let rate = self.asm.sample_rate();
                    let run = self.run.get_or_insert_with(|| {
                        let mut seg = settings.segment_settings(rate.unwrap_or(1.0));
                        if rate.is_none() {
                            seg.fundamental = FundamentalSetting::None;
                        }
                        RunState {
                            buf: Run {
                                times: Vec::new(),
                                values: Vec::new(),
                                specials: Vec::new(),
                            },
                            base: 0,
                            planner: Planner::new(seg),
                            pending: Vec::new(),
                        }
                    });
                    let off = run.buf.times.len();
                    run.buf.times.extend(r.times);
                    run.buf.values.extend(r.values);
                    run.buf
                        .specials
                        .extend(r.specials.into_iter().map(|(i, k)| (i + off, k)));
                    advance_run(ci, run, false, settings, jobs);
                }
                RunEvent::End => {
                    if let Some(mut run) = self.run.take() {
                        advance_run(ci, &mut run, true, settings, jobs);
                        self.meta.runs += 1;
                        self.meta.note_plan(&run.planner.into_plan(Vec::new()));
                    }
                }
            }
        }
    }
}

/// Plan what the run's new samples allow, hand out finished blocks, drop consumed samples.
fn advance_run(
    ci: usize,
    run: &mut RunState,
    complete: bool,
    settings: &Settings,
    jobs: &mut Vec<BlockJob>,
) {
    let segs = run.planner.advance(&run.buf.values, run.base, complete);
    run.pending.extend(segs);
    // Group into blocks exactly as `block_ranges` does; the last group waits for more
    // segments unless the run is complete.
    loop {
        let ranges = block_ranges(
            &run.pending,
            settings.block_segments,
            settings.block_samples,
        );
        let Some(first) = ranges.first().cloned() else {
            break;
        };
        if ranges.len() == 1 && !complete {
            // Is the single group already full?
            let n: usize = run.pending.iter().map(|s| s.len).sum();
            let full = run.pending.len() >= settings.block_segments || n >= settings.block_samples;
            if !full {
                break;
            }
        }
        let group: Vec<PlannedSegment> = run.pending.drain(first).collect();
        let lo = group[0].start - run.base;
        let hi = group[group.len() - 1].start + group[group.len() - 1].len - run.base;
        let sp_lo = run.buf.specials.partition_point(|s| s.0 < lo);
        let sp_hi = run.buf.specials.partition_point(|s| s.0 < hi);
        jobs.push(BlockJob {
            channel: ci,
            run: Run {
                times: run.buf.times[lo..hi].to_vec(),
                values: run.buf.values[lo..hi].to_vec(),
                specials: run.buf.specials[sp_lo..sp_hi]
                    .iter()
                    .map(|&(i, k)| (i - lo, k))
                    .collect(),
            },
            segs: group
                .iter()
                .map(|s| PlannedSegment {
                    start: s.start - group[0].start,
                    ..*s
                })
                .collect(),
        });
    }
    // Drop samples no one needs any more.
    let keep = run
        .pending
        .first()
        .map_or(usize::MAX, |s| s.start)
        .min(run.planner.keep_from())
        .min(run.base + run.buf.times.len());
    let drop = keep.saturating_sub(run.base);
    if drop > 0 {
        run.buf.times.drain(..drop);
        run.buf.values.drain(..drop);
        let sp = run.buf.specials.partition_point(|s| s.0 < drop);
        run.buf.specials.drain(..sp);
        run.buf.specials.iter_mut().for_each(|s| s.0 -= drop);
        run.base += drop;
    }
}

/// Blocks waiting to be written in canonical order: by start time, then channel name.
type Ordered = BTreeMap<(i64, String), EncodedBlock>;

/// Encode one Parquet source into an archive. Time-ordered sources stream with bounded
/// memory; a source whose times go backwards within a channel is read again and sorted in
/// memory. Both ways give the same bytes.
pub fn encode_file(
    source: &Path,
    out: &Path,
    settings: &Settings,
    control: &JobControl,
) -> Result<EncodeSummary> {
    archive::refuse_same_file(source, out)?;
    archive::check_output(out)?;
    archive::check_output(&archive::digest_path(out))?;
    let source_meta = SourceMeta::of(source)?;
    let pass = |sort| {
        encode_pass(source, out, settings, control, &source_meta, sort)
            .map_err(|e| e.in_file(source))
    };
    match pass(false)? {
        Some(summary) => Ok(summary),
        None => pass(true)?.ok_or_else(|| Error::Layout {
            file: source.to_path_buf(),
            reason: "could not order the rows by time".into(),
        }),
    }
}

/// One pass over the source. `sort`: gather every channel in memory and sort it first.
/// Returns `None` when streaming found rows out of time order.
fn encode_pass(
    source: &Path,
    out: &Path,
    settings: &Settings,
    control: &JobControl,
    source_meta: &SourceMeta,
    sort: bool,
) -> Result<Option<EncodeSummary>> {
    let mut src = Source::open(source, settings)?;
    let mut writer = archive::ArchiveWriter::create(out)?;
    let mut channels: Vec<ChannelEncoder> = Vec::new();
    let mut gathered: Vec<ChannelSamples> = Vec::new();
    let mut jobs: Vec<BlockJob> = Vec::new();
    let mut ordered: Ordered = BTreeMap::new();
    let mut last_written: Option<i64> = None;
    let mut fits: Vec<FitPlan> = Vec::new();
    let shared_settings = Arc::new(settings.clone());
    let mut in_flight: Option<InFlight> = None;
    let bar = progress_bar(
        control,
        src.total_rows,
        if sort { "sorting" } else { "encoding" },
    );
    while let Some(chunks) = src.next_chunks() {
        crate::stop::check()?;
        for c in chunks? {
            bar.inc(c.times.len() as u64);
            while channels.len() <= c.channel {
                let info = src.schema.channels[channels.len()].clone();
                channels.push(ChannelEncoder::new(source, info, settings));
                gathered.push(ChannelSamples::default());
            }
            let ci = c.channel;
            let mut s = ChannelSamples::default();
            s.extend(c);
            if sort {
                gathered[ci].extend_samples(s);
                continue;
            }
            // A channel whose first rows come before blocks already written: not time-ordered.
            if channels[ci].last_time.is_none()
                && last_written.is_some_and(|w| s.times.first().is_some_and(|&t| t < w))
            {
                return Ok(None);
            }
            match channels[ci].push(ci, s, settings, &mut jobs) {
                Ok(()) => {}
                Err(StreamError::NeedsSort) => return Ok(None),
                Err(StreamError::Fatal(e)) => return Err(e),
            }
        }
        if jobs.iter().map(|j| j.run.times.len()).sum::<usize>() >= FIT_BATCH_SAMPLES {
            // Fit this batch on the pool while the next one is read and planned; then write
            // what the previous batch completed.
            let batch_start = jobs
                .iter()
                .filter_map(|j| j.run.times.first())
                .min()
                .copied();
            let handle = start_fit(&mut jobs, &channels, &shared_settings);
            let watermark = channels
                .iter()
                .map(|c| c.front_time())
                .min()
                .unwrap_or(i64::MAX);
            if let Some(prev) = in_flight.replace(InFlight::new(handle, watermark)) {
                let prev_watermark = prev.watermark;
                prev.finish(&mut ordered)?;
                // Every block not yet filed starts at or after all three: the previous
                // batch's watermark, this batch's first block, and what the channels hold
                // now (a channel may have appeared since).
                let limit = prev_watermark
                    .min(batch_start.unwrap_or(i64::MAX))
                    .min(watermark);
                flush(
                    &mut ordered,
                    Some(limit),
                    &mut writer,
                    &mut fits,
                    &mut last_written,
                )?;
            }
        }
    }
    if let Some(prev) = in_flight.take() {
        prev.finish(&mut ordered)?;
    }
    bar.finish_and_clear();
    if sort {
        for (ci, s) in gathered.into_iter().enumerate() {
            if s.is_empty() {
                continue;
            }
            let name = channels[ci].info.name.clone();
            channels[ci].meta.sorted_on_read = !s.times.windows(2).all(|w| w[0] < w[1]);
            let sorted = sort_channel(source, &name, s)?;
            // Feed the sorted channel in pieces, fitting as blocks fill up, so that working
            // copies stay small next to the sorted samples.
            for at in (0..sorted.len()).step_by(SORTED_PIECE) {
                crate::stop::check()?;
                let piece = sorted.slice(at..(at + SORTED_PIECE).min(sorted.len()));
                match channels[ci].push(ci, piece, settings, &mut jobs) {
                    Ok(()) => {}
                    Err(StreamError::NeedsSort) => {
                        unreachable!("a sorted channel never goes back in time")
                    }
                    Err(StreamError::Fatal(e)) => return Err(e),
                }
                if jobs.iter().map(|j| j.run.times.len()).sum::<usize>() >= FIT_BATCH_SAMPLES {
                    fit_jobs(&mut jobs, &channels, &shared_settings, &mut ordered)?;
                }
            }
            channels[ci].finish(ci, settings, &mut jobs);
        }
    }
    for (ci, c) in channels.iter_mut().enumerate().filter(|(_, c)| !c.finished) {
        c.finish(ci, settings, &mut jobs);
    }
    crate::stop::check()?;
    fit_jobs(&mut jobs, &channels, &shared_settings, &mut ordered)?;
    flush(
        &mut ordered,
        None,
        &mut writer,
        &mut fits,
        &mut last_written,
    )?;
    let rows_read: u64 = channels.iter().map(|c| c.meta.rows).sum();
    if rows_read == 0 {
        return Err(Error::Empty {
            file: source.to_path_buf(),
        });
    }
    if let Some(wanted) = &settings.channels {
        for w in wanted {
            if !src.schema.channels.iter().any(|c| &c.name == w) {
                return Err(Error::InvalidOption {
                    name: "channels".into(),
                    reason: format!("{}: no channel `{w}`", source.display()),
                });
            }
        }
    }
    let mut channel_meta: Vec<ChannelMeta> = channels
        .into_iter()
        .filter(|c| c.meta.rows > 0)
        .map(|c| c.meta)
        .collect();
    channel_meta.sort_by(|a, b| a.name.cmp(&b.name));
    let segments = fits.len();
    let worst = fits
        .iter()
        .filter(|f| f.budget_rms > 0.0)
        .map(|f| f.error_rms / f.budget_rms)
        .fold(0.0, f64::max);
    let meta = ArchiveMeta::new(
        source_meta.clone(),
        settings,
        src.schema.clone(),
        channel_meta.clone(),
    );
    crate::stop::check()?;
    let archive_bytes = writer.finish(&meta)?;
    Ok(Some(EncodeSummary {
        source: source.to_path_buf(),
        archive: out.to_path_buf(),
        rows: rows_read,
        channels: channel_meta.len(),
        segments,
        source_bytes: source_meta.bytes,
        archive_bytes,
        worst_error_over_budget: worst,
        fundamentals: channel_meta,
    }))
}

/// The parameters of a block's channel, owned, for fitting on another thread.
struct JobChannel {
    name: String,
    value_type: ValueType,
    sample_rate: Option<f64>,
    budget: Budget,
}

/// A batch of blocks being fitted on the thread pool while the caller reads on. Dropped
/// unfinished (an early return), it still waits for the batch, so no work outlives the job.
struct InFlight {
    handle: Option<std::thread::JoinHandle<Result<Vec<EncodedBlock>>>>,
    /// Every block handed out after this batch starts at or after this time.
    watermark: i64,
}

impl InFlight {
    fn new(handle: std::thread::JoinHandle<Result<Vec<EncodedBlock>>>, watermark: i64) -> Self {
        InFlight {
            handle: Some(handle),
            watermark,
        }
    }

    /// Wait for the batch and file its blocks in canonical order.
    fn finish(mut self, ordered: &mut Ordered) -> Result<()> {
        let Some(h) = self.handle.take() else {
            return Ok(());
        };
        let done = h.join().unwrap_or_else(|p| std::panic::resume_unwind(p))?;
        for b in done {
            if let Some(r) = b.rows.first() {
                ordered.insert((r.start_ns, r.channel.clone()), b);
            }
        }
        Ok(())
    }
}

impl Drop for InFlight {
    fn drop(&mut self) {
        if let Some(h) = self.handle.take() {
            let _ = h.join();
        }
    }
}

/// Hand the waiting blocks to the thread pool without waiting for them. The same blocks as
/// [`fit_jobs`] (each depends only on its own samples and settings).
fn start_fit(
    jobs: &mut Vec<BlockJob>,
    channels: &[ChannelEncoder],
    settings: &Arc<Settings>,
) -> std::thread::JoinHandle<Result<Vec<EncodedBlock>>> {
    let work: Vec<(BlockJob, JobChannel)> = std::mem::take(jobs)
        .into_iter()
        .map(|j| {
            let c = &channels[j.channel];
            let jc = JobChannel {
                name: c.info.name.clone(),
                value_type: c.info.value_type,
                sample_rate: c.asm.sample_rate(),
                budget: settings.budget_for(&c.info.name),
            };
            (j, jc)
        })
        .collect();
    let settings = Arc::clone(settings);
    std::thread::spawn(move || {
        work.into_par_iter()
            .map(|(j, c)| {
                let p = RunParams {
                    channel: &c.name,
                    value_type: c.value_type,
                    sample_rate: c.sample_rate,
                    budget: c.budget,
                    settings: &settings,
                    fft: RealFft::shared(),
                };
                encode_block_of(&j.run, &j.segs, &p)
            })
            .collect()
    })
}

/// Fit the waiting blocks in parallel and file them in canonical order: [`start_fit`] and
/// wait for it.
fn fit_jobs(
    jobs: &mut Vec<BlockJob>,
    channels: &[ChannelEncoder],
    settings: &Arc<Settings>,
    ordered: &mut Ordered,
) -> Result<()> {
    InFlight::new(start_fit(jobs, channels, settings), i64::MAX).finish(ordered)
}

/// Write the blocks that start before `watermark` (all when `None`), in order.
fn flush(
    ordered: &mut Ordered,
    watermark: Option<i64>,
    writer: &mut archive::ArchiveWriter,
    fits: &mut Vec<FitPlan>,
    last_written: &mut Option<i64>,
) -> Result<()> {
    let keep = match watermark {
        Some(w) => ordered.split_off(&(w, String::new())),
        None => BTreeMap::new(),
    };
    for ((start, _), b) in std::mem::replace(ordered, keep) {
        *last_written = Some(start);
        fits.extend(b.fits.iter().cloned());
        writer.push(b)?;
    }
    Ok(())
}

/// A progress bar on stderr, drawn only when it is a terminal and progress is on.
pub fn progress_bar(control: &JobControl, len: u64, what: &'static str) -> indicatif::ProgressBar {
    use std::io::IsTerminal;
    if !control.progress || !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let bar = indicatif::ProgressBar::new(len);
    if let Ok(style) =
        indicatif::ProgressStyle::with_template("{msg:>9} [{bar:40}] {percent:>3}% {eta}")
    {
        bar.set_style(style.progress_chars("=> "));
    }
    bar.set_message(what);
    bar
}

/// What a decode wrote.
#[derive(Debug, Clone, Serialize)]
pub struct DecodeSummary {
    /// Archive read.
    pub archive: PathBuf,
    /// File written.
    pub out: PathBuf,
    /// Rows written.
    pub rows: u64,
    /// Channels written.
    pub channels: usize,
    /// With `salvage`: the blocks left out and the channels whose rows do not add up.
    pub holes: Vec<archive::Hole>,
}

/// Decode an archive (or some channels, or a time range) to Parquet in the source's layout,
/// column names, time type and value types. `salvage`: decode what is intact — a digest
/// mismatch, a missing, repeated or damaged block are reported in [`DecodeSummary::holes`]
/// instead of refusing the archive (the caller exits 1 when there are holes).
pub fn decode_file(
    archive_path: &Path,
    out: &Path,
    channels: &[String],
    from: Option<i64>,
    to: Option<i64>,
    salvage: bool,
) -> Result<DecodeSummary> {
    archive::refuse_same_file(archive_path, out)?;
    archive::check_output(out)?;
    if let (Some(f), Some(t)) = (from, to) {
        if f >= t {
            return Err(Error::InvalidOption {
                name: "from".into(),
                reason: format!("--from ({f} ns) must be before --to ({t} ns)"),
            });
        }
    }
    // The digest beside the archive covers every byte, the Parquet footer and cyclarc's
    // metadata included, which nothing inside the file checksums: a mismatch is damage.
    let mut holes = Vec::new();
    if archive::check_digest(archive_path)? == Some(false) {
        let reason = format!(
            "its SHA-256 differs from the digest recorded in {} (the file changed after it \
             was written)",
            archive::digest_path(archive_path).display()
        );
        if !salvage {
            return Err(Error::Damaged {
                file: archive_path.to_path_buf(),
                reason,
            });
        }
        holes.push(archive::Hole {
            channel: None,
            block: None,
            what: reason,
        });
    }
    let archive = archive::read_archive(archive_path)?;
    for c in channels {
        if !archive.meta.channels.iter().any(|m| &m.name == c) {
            return Err(Error::InvalidOption {
                name: "channel".into(),
                reason: format!("{}: no channel `{c}`", archive_path.display()),
            });
        }
    }
    let fft = RealFft::shared();
    let series = if salvage {
        let s = crate::decode::decode_salvage(&archive, channels, from, to, fft)?;
        holes.extend(s.holes);
        s.series
    } else {
        crate::decode::decode_channels(&archive, channels, from, to, fft)?
    };
    let rows = crate::write::write_decoded(out, &archive.meta, &series, channels)?;
    Ok(DecodeSummary {
        archive: archive_path.to_path_buf(),
        out: out.to_path_buf(),
        rows,
        channels: series.len(),
        holes,
    })
}
