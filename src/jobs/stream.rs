//! The streaming scheduler of a file job: channels fed as their samples arrive, runs planned
//! incrementally, finished blocks fitted on the thread pool while reading goes on, and
//! blocks written in canonical order (start time, then channel) behind a watermark.
//!
//! Every block depends only on its own samples and settings, so the archive is the same
//! whatever the thread count, batch size or row-group sizes.

use std::collections::BTreeMap;
use std::path::Path;
use std::sync::Arc;

use rayon::prelude::*;

use crate::archive::{ArchiveMeta, ArchiveWriter, ChannelMeta, SourceMeta};
use crate::codec::encode::{block_ranges, encode_block_of, EncodedBlock, RunParams};
use crate::codec::events::EventDetector;
use crate::codec::fit::FitPlan;
use crate::codec::segment::{FundamentalSetting, PlannedSegment, Planner};
use crate::error::{Error, Result};
use crate::jobs::control::{progress_bar, EncodeSummary, JobControl};
use crate::model::{ChannelInfo, Run, ValueType};
use crate::options::Settings;
use crate::source::{
    sort_channel, Batch, ChannelAssembler, ChannelSamples, Prefetch, RunEvent, Source, StreamError,
};

/// Samples of finished blocks fitted together in one parallel batch.
pub const FIT_BATCH_SAMPLES: usize = 1 << 21;

/// A block ready to be fitted: its own copy of the samples and its segments (starts relative
/// to the block).
pub(crate) struct BlockJob {
    channel: usize,
    run: Run,
    segs: Vec<PlannedSegment>,
}

/// The run of a channel being encoded.
pub(crate) struct RunState {
    /// Samples of the run from run index `base` on.
    buf: Run,
    base: usize,
    planner: Planner,
    pending: Vec<PlannedSegment>,
    /// Event capture's memory of the run.
    events: EventDetector,
}

/// One channel being encoded as its samples arrive.
pub(crate) struct ChannelEncoder {
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
            asm: ChannelAssembler::new(source, &info.name, settings.source.sample_rate_hz),
            meta: ChannelMeta {
                budget: Some(settings.codec.budget_for(&info.name)),
                peak_max: settings.codec.peak_for(&info.name),
                protection: settings.codec.protection_for(&info.name).cloned(),
                event_budget_factor: settings
                    .codec
                    .events
                    .then_some(crate::codec::events::EVENT_BUDGET_FACTOR),
                ..ChannelMeta::new(&info, None, 0, 0, false)
            },
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
                    let p = RunParams::new(
                        &self.info.name,
                        self.info.value_type,
                        rate,
                        &settings.codec,
                    );
                    let run = self.run.get_or_insert_with(|| {
                        let mut seg = settings.codec.segment_settings(rate.unwrap_or(1.0));
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
                            events: EventDetector::default(),
                        }
                    });
                    let off = run.buf.times.len();
                    run.buf.times.extend(r.times);
                    run.buf.values.extend(r.values);
                    run.buf
                        .specials
                        .extend(r.specials.into_iter().map(|(i, k)| (i + off, k)));
                    advance_run(ci, run, false, settings, &p, jobs);
                }
                RunEvent::End => {
                    if let Some(mut run) = self.run.take() {
                        let p = RunParams::new(
                            &self.info.name,
                            self.info.value_type,
                            self.asm.sample_rate(),
                            &settings.codec,
                        );
                        advance_run(ci, &mut run, true, settings, &p, jobs);
                        self.meta.runs += 1;
                        self.meta.note_plan(&run.planner.into_plan(Vec::new()));
                    }
                }
            }
        }
    }
}

/// Plan what the run's new samples allow, hand out finished blocks, drop consumed samples.
pub(crate) fn advance_run(
    ci: usize,
    run: &mut RunState,
    complete: bool,
    settings: &Settings,
    arbiter: &RunParams<'_>,
    jobs: &mut Vec<BlockJob>,
) {
    let mut segs = run
        .planner
        .advance(&run.buf.values, run.base, complete, Some(arbiter));
    if arbiter.events {
        for s in &mut segs {
            let at = s.start - run.base;
            s.event = run.events.mark(&run.buf.values[at..at + s.len]);
        }
    }
    run.pending.extend(segs);
    // Group into blocks exactly as `block_ranges` does; the last group waits for more
    // segments unless the run is complete.
    loop {
        let ranges = block_ranges(
            &run.pending,
            settings.codec.block_segments,
            settings.codec.block_samples,
        );
        let Some(first) = ranges.first().cloned() else {
            break;
        };
        if ranges.len() == 1 && !complete {
            // Is the single group already full?
            let n: usize = run.pending.iter().map(|s| s.len).sum();
            let full = run.pending.len() >= settings.codec.block_segments
                || n >= settings.codec.block_samples;
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
pub(crate) type Ordered = BTreeMap<(i64, String), EncodedBlock>;

/// The parameters of a block's channel, owned, for fitting on another thread.
pub(crate) struct JobChannel {
    name: String,
    value_type: ValueType,
    sample_rate: Option<f64>,
}

/// A batch of blocks being fitted on the thread pool while the caller reads on. Dropped
/// unfinished (an early return), it still waits for the batch, so no work outlives the job.
pub(crate) struct InFlight {
    handle: Option<Fitting>,
    /// Every block handed out after this batch starts at or after this time.
    watermark: i64,
}

impl InFlight {
    fn new(handle: Fitting, watermark: i64) -> Self {
        InFlight {
            handle: Some(handle),
            watermark,
        }
    }

    /// Wait for the batch and file its blocks in canonical order.
    fn finish(mut self, ordered: &mut Ordered) -> Result<()> {
        let done = match self.handle.take() {
            None => return Ok(()),
            Some(Fitting::Done(r)) => r?,
            Some(Fitting::Running(h)) => {
                h.join().unwrap_or_else(|p| std::panic::resume_unwind(p))?
            }
        };
        for b in done {
            if let Some(s) = b.segments.first() {
                ordered.insert((s.start_ns, b.channel.clone()), b);
            }
        }
        Ok(())
    }
}

impl Drop for InFlight {
    fn drop(&mut self) {
        if let Some(Fitting::Running(h)) = self.handle.take() {
            let _ = h.join();
        }
    }
}

/// Whether a pass keeps to its calling thread (a pool of one thread, `--threads 1`: a
/// one-core task, such as a shard on a one-core executor, expects one core) or overlaps
/// reading, planning and fitting on threads of their own. Decided once per pass.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Concurrency {
    /// Read, plan and fit on the calling thread.
    Inline,
    /// Read one batch ahead on a thread of its own; fit on the pool beside the planner.
    Overlapped,
}

impl Concurrency {
    /// From the current rayon pool.
    pub(crate) fn of_pool() -> Self {
        if rayon::current_num_threads() <= 1 {
            Concurrency::Inline
        } else {
            Concurrency::Overlapped
        }
    }
}

/// A batch of blocks being fitted on the pool, or already fitted on the caller's thread.
pub(crate) enum Fitting {
    /// Fitting on the pool, from a thread of its own.
    Running(std::thread::JoinHandle<Result<Vec<EncodedBlock>>>),
    /// Fitted on the calling thread ([`Concurrency::Inline`]).
    Done(Result<Vec<EncodedBlock>>),
}

/// Hand the waiting blocks to the thread pool without waiting for them. The same blocks as
/// [`fit_jobs`] (each depends only on its own samples and settings). [`Concurrency::Inline`]
/// fits them here and now.
pub(crate) fn start_fit(
    source: &Path,
    jobs: &mut Vec<BlockJob>,
    channels: &[ChannelEncoder],
    settings: &Arc<Settings>,
    concurrency: Concurrency,
) -> Fitting {
    let work: Vec<(BlockJob, JobChannel)> = std::mem::take(jobs)
        .into_iter()
        .map(|j| {
            let c = &channels[j.channel];
            let jc = JobChannel {
                name: c.info.name.clone(),
                value_type: c.info.value_type,
                sample_rate: c.asm.sample_rate(),
            };
            (j, jc)
        })
        .collect();
    let settings = Arc::clone(settings);
    let file = source.to_path_buf();
    let fit = move |(j, c): (BlockJob, JobChannel)| {
        let p = RunParams::new(&c.name, c.value_type, c.sample_rate, &settings.codec);
        encode_block_of(&j.run, &j.segs, &p).map_err(|e| Error::Codec {
            file: file.clone(),
            source: e,
        })
    };
    if concurrency == Concurrency::Inline {
        return Fitting::Done(work.into_iter().map(fit).collect());
    }
    Fitting::Running(std::thread::spawn(move || {
        work.into_par_iter().map(fit).collect()
    }))
}

/// Fit the waiting blocks in parallel and file them in canonical order: [`start_fit`] and
/// wait for it.
pub(crate) fn fit_jobs(
    source: &Path,
    jobs: &mut Vec<BlockJob>,
    channels: &[ChannelEncoder],
    settings: &Arc<Settings>,
    concurrency: Concurrency,
    ordered: &mut Ordered,
) -> Result<()> {
    InFlight::new(
        start_fit(source, jobs, channels, settings, concurrency),
        i64::MAX,
    )
    .finish(ordered)
}

/// Write the blocks that start before `watermark` (all when `None`), in order.
pub(crate) fn flush(
    ordered: &mut Ordered,
    watermark: Option<i64>,
    writer: &mut ArchiveWriter,
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

/// Samples of a sorted channel handed to its encoder at a time.
const SORTED_PIECE: usize = 1 << 20;

/// How a pass reads the source.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Reading {
    /// Channel by channel as the rows come, with bounded memory.
    Stream,
    /// Every channel gathered in memory and sorted by time first.
    Sort,
}

/// How a pass ended.
pub(crate) enum PassOutcome {
    /// The archive is written.
    Done(EncodeSummary),
    /// Streaming found a channel's times going backwards: read again with [`Reading::Sort`].
    NeedsSort,
}

/// Feed each channel its samples of this batch. Channels are independent: their assembly,
/// planning and tracking run on up to one OS thread per pool thread, in contiguous groups of
/// channels, beside the pool that fits earlier batches (a pool task would queue behind that
/// fitting and leave the reader waiting). Results come back in channel order, so the blocks
/// join the batch in channel order and the first failure in channel order is the one
/// reported.
fn push_channels(
    channels: &mut [ChannelEncoder],
    arrived: Vec<Vec<ChannelSamples>>,
    settings: &Settings,
) -> Vec<std::result::Result<Vec<BlockJob>, StreamError>> {
    let push = |ci: usize, ch: &mut ChannelEncoder, samples: Vec<ChannelSamples>| {
        let mut out = Vec::new();
        for s in samples {
            ch.push(ci, s, settings, &mut out)?;
        }
        Ok(out)
    };
    let busy = arrived.iter().filter(|a| !a.is_empty()).count();
    let workers = rayon::current_num_threads().min(busy);
    let n = arrived.len().min(channels.len());
    if workers <= 1 {
        return channels
            .iter_mut()
            .zip(arrived)
            .enumerate()
            .map(|(ci, (ch, samples))| push(ci, ch, samples))
            .collect();
    }
    let per = n.div_ceil(workers);
    let mut arrived = arrived;
    arrived.truncate(n);
    let mut groups: Vec<Vec<Vec<ChannelSamples>>> = Vec::new();
    while !arrived.is_empty() {
        let rest = arrived.split_off(per.min(arrived.len()));
        groups.push(std::mem::replace(&mut arrived, rest));
    }
    std::thread::scope(|scope| {
        let handles: Vec<_> = channels[..n]
            .chunks_mut(per)
            .zip(groups)
            .enumerate()
            .map(|(g, (chs, group))| {
                scope.spawn(move || {
                    chs.iter_mut()
                        .zip(group)
                        .enumerate()
                        .map(|(i, (ch, samples))| push(g * per + i, ch, samples))
                        .collect::<Vec<_>>()
                })
            })
            .collect();
        handles
            .into_iter()
            .flat_map(|h| h.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
            .collect()
    })
}

/// One pass over the source into `out`, streaming or gathering every channel to sort it
/// first.
pub(crate) fn encode_pass(
    source: &Path,
    out: &Path,
    settings: &Settings,
    control: &JobControl,
    source_meta: &SourceMeta,
    reading: Reading,
) -> Result<PassOutcome> {
    let src = Source::open(source, &settings.source)?;
    let total_rows = src.total_rows;
    // The channels known from the schema (wide layout); a long layout's arrive with batches.
    let mut infos: Vec<ChannelInfo> = src.schema.channels.clone();
    let concurrency = Concurrency::of_pool();
    let mut reader = match concurrency {
        Concurrency::Inline => Prefetch::inline(src),
        Concurrency::Overlapped => Prefetch::start(src),
    };
    let mut writer = ArchiveWriter::create(out, settings.codec.events)?;
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
        total_rows,
        if reading == Reading::Sort {
            "sorting"
        } else {
            "encoding"
        },
    );
    while let Some(Batch {
        chunks,
        new_channels,
    }) = reader.next_batch()
    {
        crate::stop::check()?;
        infos.extend(new_channels);
        // This batch's samples per channel, in arrival order.
        let mut arrived: Vec<Vec<ChannelSamples>> = Vec::new();
        for c in chunks? {
            bar.inc(c.samples.len() as u64);
            while channels.len() <= c.channel {
                let info = infos[channels.len()].clone();
                channels.push(ChannelEncoder::new(source, info, settings));
                gathered.push(ChannelSamples::default());
            }
            let ci = c.channel;
            let mut s = ChannelSamples::default();
            s.extend(c);
            if reading == Reading::Sort {
                gathered[ci].extend_samples(s);
                continue;
            }
            // A channel whose first rows come before blocks already written: not time-ordered.
            let fresh = channels[ci].last_time.is_none()
                && arrived
                    .get(ci)
                    .is_none_or(|a| a.iter().all(|s| s.times.is_empty()));
            if fresh && last_written.is_some_and(|w| s.times.first().is_some_and(|&t| t < w)) {
                return Ok(PassOutcome::NeedsSort);
            }
            if arrived.len() <= ci {
                arrived.resize_with(ci + 1, Vec::new);
            }
            arrived[ci].push(s);
        }
        for r in push_channels(&mut channels, arrived, settings) {
            match r {
                Ok(mut js) => jobs.append(&mut js),
                Err(StreamError::NeedsSort) => return Ok(PassOutcome::NeedsSort),
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
            let handle = start_fit(source, &mut jobs, &channels, &shared_settings, concurrency);
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
    let src = reader.finish();
    if let Some(prev) = in_flight.take() {
        prev.finish(&mut ordered)?;
    }
    bar.finish_and_clear();
    if reading == Reading::Sort {
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
                    fit_jobs(
                        source,
                        &mut jobs,
                        &channels,
                        &shared_settings,
                        concurrency,
                        &mut ordered,
                    )?;
                }
            }
            channels[ci].finish(ci, settings, &mut jobs);
        }
    }
    for (ci, c) in channels.iter_mut().enumerate().filter(|(_, c)| !c.finished) {
        c.finish(ci, settings, &mut jobs);
    }
    crate::stop::check()?;
    fit_jobs(
        source,
        &mut jobs,
        &channels,
        &shared_settings,
        concurrency,
        &mut ordered,
    )?;
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
    if let Some(wanted) = &settings.source.channels {
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
        serde_json::to_value(settings).unwrap_or_default(),
        src.schema.clone(),
        channel_meta.clone(),
    );
    crate::stop::check()?;
    let (archive_bytes, archive_sha256) = writer.finish(&meta)?;
    Ok(PassOutcome::Done(EncodeSummary {
        source: source.to_path_buf(),
        archive: out.to_path_buf(),
        rows: rows_read,
        channels: channel_meta.len(),
        segments,
        source_bytes: source_meta.bytes,
        archive_bytes,
        archive_sha256,
        worst_error_over_budget: worst,
        fundamentals: channel_meta,
    }))
}
