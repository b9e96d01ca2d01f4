//! Job: one source file through the stages — read, assemble, segment, fit, pack, write — and
//! one archive back to a decoded Parquet file. [`encode_run`] is the in-memory heart (one run
//! of one channel → blocks), used by the file job, the tests and the benchmark alike.
//!
//! Blocks are fitted in parallel with rayon; each block's content depends only on its own
//! samples and settings, so archives are byte-identical whatever the thread count.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use rayon::prelude::*;
use serde::Serialize;

use crate::archive::{self, ArchiveMeta, ChannelMeta, SegmentRow, SourceMeta};
use crate::assemble::{assemble, ChannelSamples, Run};
use crate::error::{Error, Result};
use crate::fit::{error_to_f32, fit_segment, Basis, FitPlan, Prev, SegmentInput};
use crate::options::{Budget, Settings};
use crate::pack::{encode_block, Block, BlockTimes, SegmentRecord, Special};
use crate::read::Source;
use crate::segment::{plan_segments, FundamentalSetting, PlannedSegment, SegmentPlan};
use crate::signal::{amplitude_phase, thd, RealFft, Transform, ValueType};

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

/// RMS over the finite values.
pub fn finite_rms(x: &[f64]) -> f64 {
    let (s, n) = x
        .iter()
        .filter(|v| v.is_finite())
        .fold((0.0, 0usize), |(s, n), v| (s + v * v, n + 1));
    if n == 0 {
        0.0
    } else {
        (s / n as f64).sqrt()
    }
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
        let budget = p.budget.resolve(rms);
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

/// Encode one Parquet source into an archive.
pub fn encode_file(
    source: &Path,
    out: &Path,
    settings: &Settings,
    control: &JobControl,
) -> Result<EncodeSummary> {
    archive::refuse_same_file(source, out)?;
    let source_meta = SourceMeta::of(source)?;
    let mut src = Source::open(source, settings)?;
    let mut samples: BTreeMap<usize, ChannelSamples> = BTreeMap::new();
    let bar = progress_bar(control, src.total_rows, "reading");
    while let Some(chunks) = src.next_chunks() {
        for c in chunks? {
            bar.inc(c.times.len() as u64);
            samples.entry(c.channel).or_default().extend(c);
        }
    }
    bar.finish_and_clear();
    let rows_read: u64 = samples.values().map(|s| s.len() as u64).sum();
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
    // Channels in name order: the archive's row order does not depend on the source's.
    let mut order: Vec<usize> = samples.keys().copied().collect();
    order.sort_by(|&a, &b| {
        src.schema.channels[a]
            .name
            .cmp(&src.schema.channels[b].name)
    });
    let fft = RealFft::shared();
    let mut blocks: Vec<EncodedBlock> = Vec::new();
    let mut channel_meta = Vec::new();
    let bar = progress_bar(control, rows_read, "encoding");
    for ci in order {
        let info = src.schema.channels[ci].clone();
        let Some(s) = samples.remove(&ci) else {
            continue;
        };
        let n = s.len() as u64;
        let ch = assemble(source, info.clone(), s, settings.sample_rate_hz)?;
        let params = RunParams {
            channel: &info.name,
            value_type: info.value_type,
            sample_rate: ch.sample_rate,
            budget: settings.budget_for(&info.name),
            settings,
            fft,
        };
        let mut meta = ChannelMeta::new(&info, ch.sample_rate, ch.runs.len(), n, ch.was_sorted);
        for run in &ch.runs {
            let enc = encode_run(run, &params)?;
            meta.note_plan(&enc.plan);
            blocks.extend(enc.blocks);
        }
        bar.inc(n);
        channel_meta.push(meta);
    }
    bar.finish_and_clear();
    let segments = blocks.iter().map(|b| b.rows.len()).sum();
    let worst = blocks
        .iter()
        .flat_map(|b| b.fits.iter())
        .filter(|f| f.budget_rms > 0.0)
        .map(|f| f.error_rms / f.budget_rms)
        .fold(0.0, f64::max);
    let meta = ArchiveMeta::new(
        source_meta,
        settings,
        src.schema.clone(),
        channel_meta.clone(),
    );
    let archive_bytes = archive::write_archive(out, &meta, blocks)?;
    Ok(EncodeSummary {
        source: source.to_path_buf(),
        archive: out.to_path_buf(),
        rows: rows_read,
        channels: channel_meta.len(),
        segments,
        source_bytes: meta.source.bytes,
        archive_bytes,
        worst_error_over_budget: worst,
        fundamentals: channel_meta,
    })
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
}

/// Decode an archive (or some channels, or a time range) to Parquet in the source's layout,
/// column names, time type and value types.
pub fn decode_file(
    archive_path: &Path,
    out: &Path,
    channels: &[String],
    from: Option<i64>,
    to: Option<i64>,
) -> Result<DecodeSummary> {
    archive::refuse_same_file(archive_path, out)?;
    let archive = archive::read_archive(archive_path)?;
    for c in channels {
        if !archive.meta.channels.iter().any(|m| &m.name == c) {
            return Err(Error::InvalidOption {
                name: "channel".into(),
                reason: format!("{}: no channel `{c}`", archive_path.display()),
            });
        }
    }
    let series = crate::decode::decode_channels(&archive, channels, from, to, RealFft::shared())?;
    let rows = crate::write::write_decoded(out, &archive.meta, &series)?;
    Ok(DecodeSummary {
        archive: archive_path.to_path_buf(),
        out: out.to_path_buf(),
        rows,
        channels: series.len(),
    })
}
