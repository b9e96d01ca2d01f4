//! The survey job: what budget to use on each channel of a source, and what it will save.
//!
//! Per channel it measures the noise floor, encodes a sample of the source with the real
//! encoder at a grid of absolute budgets around that floor, and reads each archive's bytes
//! back: the ratio-versus-budget curve, its knee, a recommended budget and what that budget
//! keeps.
//!
//! - **Sample.** Up to [`SURVEY_WINDOWS`] windows spread evenly over the source's time span
//!   (the same windows for every channel), each at least [`SURVEY_WINDOW_SECONDS`], four of
//!   the planner's longest segments ([`LONGEST_SEGMENT_SECONDS`]) and two of its trial
//!   stretches long; a source no longer than the windows together is surveyed whole, and
//!   its curve is then exactly what `encode --channels C` writes with each budget. Each
//!   channel is encoded alone, as that command would. A sampled channel's bytes are taken as
//!   a fixed part (the archive of its first [`SNIPPET_SECONDS`] alone, less that archive's
//!   payload), a part per run (the first segment, coded without a predecessor, and the last,
//!   cut short) and a part per sample: the sample and its windows' first halves have the
//!   same runs and differ in samples only, which gives the part per sample; the whole
//!   channel is then its fixed part, its runs and its samples. The source is read twice,
//!   streaming: once for each channel's span, samples, runs and RMS, once for the windows.
//! - **Noise floor.** Per window: the Hann-windowed periodogram (orthonormal DFT), whose
//!   ordinates on white noise of variance σ² are exponential with mean σ²·Σw²/N, so their
//!   median is ln 2 times that (a χ² variable with 2 degrees of freedom; Brockwell & Davis,
//!   *Time Series: Theory and Methods*, §10.3, from memory). The median over all bins is
//!   robust to the few bins that hold harmonics, and the Hann window keeps their leakage
//!   out of the rest. The channel's floor is the median over its windows.
//! - **Knee.** The Kneedle rule (Satopää et al., "Finding a 'Kneedle' in a Haystack", ICDCS
//!   Workshops 2011) on log ratio over log budget: the grid point farthest above the chord.
//! - **Recommendation.** [`RECOMMEND_OVER_NOISE`] × the noise floor: the budget then sits just
//!   above the noise, so the coder drops the noise and keeps what stands above it (common
//!   practice); the knee where the floor is zero.
//!
//! Does not: write archives the user keeps (its archives live in a temporary folder).

use std::collections::HashMap;
use std::path::Path;

use serde::Serialize;

use crate::archive::schema::{column_class, ColumnClass};
use crate::archive::{segment_list, Archive, DigestPolicy};
use crate::codec::params::{first_match, Budget, MAX_BUDGET, MIN_POSITIVE_BUDGET};
use crate::codec::segment::TRIAL_MAX_SAMPLES;
use crate::error::{Error, Result};
use crate::jobs::control::JobControl;
use crate::jobs::encode::encode_file;
use crate::jobs::trend::{trend, TrendQuery};
use crate::model::{ChannelInfo, ChannelSeries};
use crate::options::Settings;
use crate::signal::{fill_non_finite, RealFft, Transform};
use crate::source::assemble::{ChannelAssembler, RunEvent, StreamError};
use crate::source::{assemble, write_decoded, ChannelSamples, Source};

/// Windows of a sampled survey.
pub const SURVEY_WINDOWS: usize = 8;
/// Shortest window (s). A window is also at least four of the longest segments the planner
/// cuts ([`LONGEST_SEGMENT_SECONDS`]) and twice the planner's trial stretch
/// ([`crate::codec::segment::TRIAL_MAX_SAMPLES`] samples), so that half a window is still
/// planned and cut as the whole source would be.
pub const SURVEY_WINDOW_SECONDS: f64 = 16.0;
/// The longest segment the planner picks: 64 × its 0.2 s base duration.
pub const LONGEST_SEGMENT_SECONDS: f64 = 12.8;
/// The stretch of a channel (s) encoded alone to measure what an archive costs whatever its
/// length (footer, metadata, column headers): at least [`SNIPPET_MIN_SAMPLES`] samples.
pub const SNIPPET_SECONDS: f64 = 0.2;
/// Fewest samples of the fixed-cost snippet.
pub const SNIPPET_MIN_SAMPLES: usize = 256;
/// The recommended budget over the noise floor.
pub const RECOMMEND_OVER_NOISE: f64 = 1.25;
/// Budgets on the curve: from a tenth of the floor to ten times it, five per decade.
const GRID: std::ops::RangeInclusive<i32> = -5..=5;

/// One point of a channel's curve.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct CurvePoint {
    /// Absolute budget (channel units, RMS).
    pub budget_rms: f64,
    /// Raw f32 bytes (4 per sample) over the estimated archive bytes of the channel.
    pub ratio: f64,
    /// Estimated archive bytes of the channel (encoded alone).
    pub archive_bytes: f64,
}

/// What the recommended budget keeps.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Keeps {
    /// Harmonics kept, median over the sample's periodic segments (⌊(L − 1)/K⌋).
    pub harmonics_up_to: Option<u32>,
    /// THD of the source, median over the sample's periodic segments.
    pub thd_source: Option<f64>,
    /// THD of the archive (from its coefficients), median over the same segments.
    pub thd_archive: Option<f64>,
}

/// One channel's survey.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChannelSurvey {
    /// Channel.
    pub channel: String,
    /// Samples in the source.
    pub samples: usize,
    /// Samples the curve was measured on.
    pub sampled_samples: usize,
    /// Windows the sample was taken in (1 when surveyed whole).
    pub sampled_windows: usize,
    /// RMS of the source's finite values.
    pub rms: f64,
    /// Noise floor (RMS, channel units).
    pub noise_rms: f64,
    /// How the floor was estimated.
    pub noise_estimator: &'static str,
    /// The knee of the curve (Kneedle).
    pub knee_budget_rms: Option<f64>,
    /// Recommended budget.
    pub recommended_budget_rms: f64,
    /// Estimated ratio at the recommended budget.
    pub recommended_ratio: f64,
    /// The rule that chose it.
    pub rule: String,
    /// What it keeps.
    pub keeps: Keeps,
    /// Ratio against budget, by increasing budget.
    pub curve: Vec<CurvePoint>,
}

/// The survey of a source.
#[derive(Debug, Clone, Serialize)]
pub struct SurveyReport {
    /// The source.
    pub source: String,
    /// One entry per channel, in the source's order.
    pub channels: Vec<ChannelSurvey>,
}

/// Survey a source with the given settings (mapping, channels; the budgets are the survey's).
pub fn survey(source: &Path, settings: &Settings) -> Result<SurveyReport> {
    let scans = scan(source, settings)?;
    let infos: Vec<ChannelInfo> = scans.iter().map(|c| c.info.clone()).collect();
    let Some((t0, t1)) = scans
        .iter()
        .filter_map(|c| c.span)
        .reduce(|(a, b), (x, y)| (a.min(x), b.max(y)))
    else {
        return Err(Error::Empty {
            file: source.to_path_buf(),
        });
    };
    let fs = scans
        .iter()
        .filter_map(|c| c.rate)
        .fold(f64::INFINITY, f64::min);
    let span = (t1 - t0) as f64;
    let window_ns = 1e9
        * SURVEY_WINDOW_SECONDS
            .max(4.0 * LONGEST_SEGMENT_SECONDS)
            .max(2.0 * TRIAL_MAX_SAMPLES as f64 / fs);
    let windows: Vec<(i64, i64)> = if span <= window_ns * SURVEY_WINDOWS as f64 {
        vec![(t0, t1.saturating_add(1))]
    } else {
        (0..SURVEY_WINDOWS)
            .map(|i| {
                let a = t0 + ((span - window_ns) * i as f64 / (SURVEY_WINDOWS - 1) as f64) as i64;
                (a, a + window_ns as i64)
            })
            .collect()
    };
    let whole = windows.len() == 1;
    let sampled = read_windows(source, settings, &infos, &windows)?;
    let runs: Vec<usize> = scans.iter().map(|c| c.runs).collect();
    let series = &sampled;

    let fft = RealFft::shared();
    let noise: Vec<f64> = series
        .iter()
        .map(|s| noise_floor(s, &windows, fft))
        .collect();
    let rms: Vec<f64> = scans.iter().map(Scan::rms).collect();
    let dir = tempfile::tempdir().map_err(|e| Error::Write {
        file: std::env::temp_dir(),
        source: e,
    })?;
    // The sample (and the fixed-cost snippets) as Parquet sources of the source's layout.
    let halves: Vec<(i64, i64)> = windows.iter().map(|&(a, b)| (a, a + (b - a) / 2)).collect();
    let halved: Vec<ChannelSeries> = series.iter().map(|s| sample_of(s, &halves)).collect();
    let (sample_path, sampled_extra) = if whole {
        (source.to_path_buf(), None)
    } else {
        let schema = Source::open(source, &settings.source)?.schema;
        let write = |name: &str, series: &[ChannelSeries]| -> Result<std::path::PathBuf> {
            let p = dir.path().join(name);
            write_decoded(&p, &schema, &infos, series, &[])?;
            Ok(p)
        };
        let snippets: Vec<ChannelSeries> = sampled.iter().map(snippet_of).collect();
        (
            write("sample.parquet", &sampled)?,
            Some((
                write("half.parquet", &halved)?,
                write("snippet.parquet", &snippets)?,
            )),
        )
    };
    // Each channel's grid around its own floor; the recommendation is the last point.
    let base: Vec<f64> = noise
        .iter()
        .zip(&rms)
        .map(|(&n, &r)| {
            if n > 0.0 {
                n
            } else {
                (r * 1e-3).max(f64::MIN_POSITIVE)
            }
        })
        .collect();
    let mut budgets: Vec<Vec<f64>> = base
        .iter()
        .map(|&b| GRID.map(|i| b * 10f64.powf(i as f64 / 5.0)).collect())
        .collect();
    for (b, &n) in budgets.iter_mut().zip(&noise) {
        if n > 0.0 {
            b.push(recommend(n));
        }
    }
    let mut bytes: Vec<Vec<f64>> = vec![Vec::new(); series.len()];
    let mut recommended_archive: Vec<Option<Archive>> = Vec::new();
    for (ci, c) in series.iter().enumerate() {
        let n_all = scans[ci].samples as f64;
        let mut last = None;
        for (i, &budget) in budgets[ci].iter().enumerate() {
            let at = |path: &Path, tag: &str| -> Result<Archive> {
                let out = dir.path().join(format!("{tag}-{ci}-{i}.cyclarc.parquet"));
                encode_file(
                    path,
                    &out,
                    &alone(settings, &c.name, budget),
                    &JobControl { progress: false },
                )?;
                Archive::open(&out, DigestPolicy::Skip)
            };
            let a = at(&sample_path, "sample")?;
            let est = match &sampled_extra {
                None => a.file_bytes as f64,
                Some((half, snippet)) => {
                    let h = at(half, "half")?;
                    let snip = at(snippet, "snippet")?;
                    let fixed = snip.file_bytes.saturating_sub(payload_bytes(&snip)) as f64;
                    extrapolate(
                        fixed,
                        (a.file_bytes as f64, sampled[ci].times.len() as f64),
                        (h.file_bytes as f64, halved[ci].times.len() as f64),
                        windows.len() as f64,
                        (runs[ci] as f64, n_all),
                    )
                }
            };
            bytes[ci].push(est);
            last = Some(a);
        }
        recommended_archive.push(last);
    }
    let mut out = Vec::new();
    for (ci, c) in series.iter().enumerate() {
        let n = scans[ci].samples;
        let ratio = |b: f64| if b > 0.0 { 4.0 * n as f64 / b } else { 0.0 };
        let grid_len = GRID.count();
        let mut curve: Vec<CurvePoint> = budgets[ci]
            .iter()
            .zip(&bytes[ci])
            .map(|(&budget_rms, &b)| CurvePoint {
                budget_rms,
                ratio: ratio(b),
                archive_bytes: b,
            })
            .collect();
        let knee = kneedle(&curve[..grid_len.min(curve.len())]);
        let (recommended, rule) = if noise[ci] > 0.0 {
            (
                recommend(noise[ci]),
                format!("{RECOMMEND_OVER_NOISE} × the noise floor"),
            )
        } else {
            (
                knee.unwrap_or(base[ci]),
                "the knee (no noise floor measured)".to_string(),
            )
        };
        let recommended_ratio = curve
            .iter()
            .find(|p| p.budget_rms == recommended)
            .map_or(f64::NAN, |p| p.ratio);
        curve.sort_by(|a, b| a.budget_rms.total_cmp(&b.budget_rms));
        curve.dedup_by(|a, b| a.budget_rms == b.budget_rms);
        let keeps = match (&recommended_archive[ci], noise[ci] > 0.0) {
            (Some(a), true) => keeps(a, &c.name)?,
            _ => Keeps {
                harmonics_up_to: None,
                thd_source: None,
                thd_archive: None,
            },
        };
        out.push(ChannelSurvey {
            channel: c.name.clone(),
            samples: n,
            sampled_samples: sampled[ci].times.len(),
            sampled_windows: windows.len(),
            rms: rms[ci],
            noise_rms: noise[ci],
            noise_estimator: "median of the Hann-windowed periodogram / ln 2",
            knee_budget_rms: knee,
            recommended_budget_rms: recommended,
            recommended_ratio,
            rule,
            keeps,
            curve,
        });
    }
    Ok(SurveyReport {
        source: source.display().to_string(),
        channels: out,
    })
}

/// The recommended budget for a noise floor: [`RECOMMEND_OVER_NOISE`] times it, to three
/// significant digits (a number a person writes in a job file).
fn recommend(noise: f64) -> f64 {
    let v = noise * RECOMMEND_OVER_NOISE;
    let scale = 10f64.powi(2 - v.log10().floor() as i32);
    ((v * scale).round() / scale).clamp(MIN_POSITIVE_BUDGET, MAX_BUDGET)
}

/// The settings `encode --channels C --budget-rms B` would resolve to: only channel `C`, whose
/// budget is `B`.
fn alone(settings: &Settings, channel: &str, budget: f64) -> Settings {
    let mut s = settings.clone();
    s.budget_from_survey = false;
    s.source.channels = Some(vec![channel.to_string()]);
    s.codec.budget = Budget::Absolute(budget);
    s.codec.budget_rules.clear();
    s
}

/// A channel's archive bytes from its sample: an archive is its fixed part, a cost per run
/// (the first segment, coded without a predecessor, and the last, cut short) and a cost per
/// sample. The sample (`full`: bytes, samples) and its windows' first halves (`half`) have
/// the same runs and differ in samples only, which gives the cost per sample; the rest over
/// the windows is the cost per run; `whole` is the channel's (runs, samples).
fn extrapolate(
    fixed: f64,
    full: (f64, f64),
    half: (f64, f64),
    windows: f64,
    whole: (f64, f64),
) -> f64 {
    let per_sample = if full.1 > half.1 {
        ((full.0 - half.0) / (full.1 - half.1)).max(0.0)
    } else {
        full.0 / full.1.max(1.0)
    };
    let per_run = ((full.0 - fixed - per_sample * full.1) / windows.max(1.0)).max(0.0);
    fixed + per_run * whole.0 + per_sample * whole.1
}

/// Bytes of an archive's payload column (the frames and their CRC-32s).
fn payload_bytes(a: &Archive) -> u64 {
    a.column_bytes
        .iter()
        .filter(|(n, _)| column_class(n) == Some(ColumnClass::Payload))
        .map(|(_, b)| *b)
        .sum()
}

/// The start of a sampled channel that [`SNIPPET_SECONDS`] span (at least
/// [`SNIPPET_MIN_SAMPLES`] samples).
fn snippet_of(s: &ChannelSeries) -> ChannelSeries {
    let end = s.times.first().map_or(0, |&t0| {
        let by_time = s
            .times
            .partition_point(|&t| ((t - t0) as f64) < SNIPPET_SECONDS * 1e9);
        by_time.max(SNIPPET_MIN_SAMPLES).min(s.times.len())
    });
    ChannelSeries {
        name: s.name.clone(),
        times: s.times[..end].to_vec(),
        values: s.values[..end].to_vec(),
        specials: s.specials.iter().copied().filter(|x| x.0 < end).collect(),
        ..Default::default()
    }
}

/// What one streaming pass over the source tells of a channel.
struct Scan {
    info: ChannelInfo,
    /// Samples (rows) of the channel.
    samples: usize,
    /// Runs (stretches between holes), as the encoder cuts them.
    runs: usize,
    /// Sample rate (Hz), when known.
    rate: Option<f64>,
    /// First and last time (ns).
    span: Option<(i64, i64)>,
    /// Finite values and the sum of their squares.
    finite: usize,
    sum_sq: f64,
}

impl Scan {
    /// RMS of the finite values.
    fn rms(&self) -> f64 {
        if self.finite == 0 {
            0.0
        } else {
            (self.sum_sq / self.finite as f64).sqrt()
        }
    }
}

/// One pass over the source: per channel its samples, runs, rate, span and RMS, holding no
/// more than a batch (the encoder's streaming assembler counts the runs). A channel whose
/// times go backwards is assembled whole in memory, as the encoder would.
fn scan(source: &Path, settings: &Settings) -> Result<Vec<Scan>> {
    /// How a channel is being read.
    enum Reading {
        /// Streamed through the assembler; whether a run is open.
        Stream(Box<ChannelAssembler>, bool),
        /// Times went backwards: every sample of the channel, read again from the start.
        Whole(ChannelSamples),
    }
    fn add_finite(scan: &mut Scan, values: &[f64]) {
        for &v in values.iter().filter(|v| v.is_finite()) {
            scan.finite += 1;
            scan.sum_sq += v * v;
        }
    }
    fn count(scan: &mut Scan, open: &mut bool, events: Vec<RunEvent>) {
        for e in events {
            match e {
                RunEvent::Samples(r) => {
                    if !*open {
                        scan.runs += 1;
                        *open = true;
                    }
                    add_finite(scan, &r.values);
                }
                RunEvent::End => *open = false,
            }
        }
    }
    let rate = settings.source.sample_rate_hz;
    let mut src = Source::open(source, &settings.source)?;
    let mut state: HashMap<usize, (Scan, Reading)> = HashMap::new();
    while let Some(chunks) = src.next_chunks() {
        for c in chunks? {
            let info = &src.schema.channels[c.channel];
            let (scan, reading) = state.entry(c.channel).or_insert_with(|| {
                (
                    Scan {
                        info: info.clone(),
                        samples: 0,
                        runs: 0,
                        rate: None,
                        span: None,
                        finite: 0,
                        sum_sq: 0.0,
                    },
                    Reading::Stream(
                        Box::new(ChannelAssembler::new(source, &info.name, rate)),
                        false,
                    ),
                )
            });
            let Reading::Stream(asm, open) = reading else {
                continue;
            };
            let s = c.samples;
            scan.samples += s.len();
            if let (Some(&a), Some(&b)) = (s.times.iter().min(), s.times.iter().max()) {
                scan.span = Some(scan.span.map_or((a, b), |(x, y)| (x.min(a), y.max(b))));
            }
            match asm.push(s) {
                Ok(events) => count(scan, open, events),
                Err(StreamError::Fatal(e)) => return Err(e),
                Err(StreamError::NeedsSort) => {
                    let mut again = Source::open(source, &settings.source)?;
                    let mut all = ChannelSamples::default();
                    while let Some(chunks) = again.next_chunks() {
                        for d in chunks?.into_iter().filter(|d| d.channel == c.channel) {
                            all.extend(d);
                        }
                    }
                    *reading = Reading::Whole(all);
                }
            }
        }
    }
    let mut order: Vec<usize> = state.keys().copied().collect();
    order.sort_unstable();
    let mut out = Vec::new();
    for ci in order {
        let Some((mut scan, reading)) = state.remove(&ci) else {
            continue;
        };
        match reading {
            Reading::Whole(all) => {
                scan.samples = all.len();
                scan.span = all.times.iter().fold(None, |s, &t| {
                    Some(s.map_or((t, t), |(a, b): (i64, i64)| (a.min(t), b.max(t))))
                });
                let ch = assemble(source, scan.info.clone(), all, rate)?;
                scan.runs = ch.runs.len();
                scan.rate = ch.sample_rate;
                (scan.finite, scan.sum_sq) = (0, 0.0);
                for r in &ch.runs {
                    add_finite(&mut scan, &r.values);
                }
            }
            Reading::Stream(mut asm, mut open) => {
                let events = asm.finish();
                count(&mut scan, &mut open, events);
                scan.rate = asm.sample_rate();
            }
        }
        out.push(scan);
    }
    Ok(out)
}

/// `settings` with the survey's budgets in place of the default budget: one absolute rule per
/// surveyed channel that none of the user's rules matches, after the user's rules.
pub fn with_survey_budgets(settings: &Settings, survey: &SurveyReport) -> Settings {
    let mut s = settings.clone();
    for c in &survey.channels {
        if first_match(&settings.codec.budget_rules, &c.channel).is_none() {
            s.codec.budget_rules.push((
                glob::Pattern::escape(&c.channel),
                Budget::Absolute(c.recommended_budget_rms),
            ));
        }
    }
    s
}

/// A second pass: each channel's samples inside the windows, assembled as the encoder would
/// (sorted, holes between windows), in the order of `infos`.
fn read_windows(
    source: &Path,
    settings: &Settings,
    infos: &[ChannelInfo],
    windows: &[(i64, i64)],
) -> Result<Vec<ChannelSeries>> {
    let inside = |t: i64| {
        let i = windows.partition_point(|w| w.1 <= t);
        windows.get(i).is_some_and(|w| w.0 <= t)
    };
    let mut src = Source::open(source, &settings.source)?;
    let mut samples: HashMap<usize, ChannelSamples> = HashMap::new();
    while let Some(chunks) = src.next_chunks() {
        for c in chunks? {
            let part = c.samples.retain_times(inside);
            if part.is_empty() {
                continue;
            }
            samples.entry(c.channel).or_default().extend_samples(part);
        }
    }
    let mut out = Vec::new();
    for info in infos {
        let index = src.schema.channels.iter().position(|c| c.name == info.name);
        let s = index.and_then(|i| samples.remove(&i)).unwrap_or_default();
        let ch = assemble(source, info.clone(), s, settings.source.sample_rate_hz)?;
        out.push(ChannelSeries::joined(&info.name, ch.runs));
    }
    Ok(out)
}

/// The part of a sampled channel inside the windows.
fn sample_of(s: &ChannelSeries, windows: &[(i64, i64)]) -> ChannelSeries {
    let mut out = ChannelSeries {
        name: s.name.clone(),
        ..Default::default()
    };
    let mut sp = s.specials.iter().peekable();
    for &(a, b) in windows {
        let lo = s.times.partition_point(|&t| t < a);
        let hi = s.times.partition_point(|&t| t < b);
        while sp.peek().is_some_and(|x| x.0 < lo) {
            sp.next();
        }
        let base = out.times.len();
        while let Some(&&(i, k)) = sp.peek().filter(|x| x.0 < hi) {
            out.specials.push((i - lo + base, k));
            sp.next();
        }
        out.times.extend_from_slice(&s.times[lo..hi]);
        out.values.extend_from_slice(&s.values[lo..hi]);
    }
    out
}

/// The noise floor of a channel: the median over windows of each window's estimate.
fn noise_floor(s: &ChannelSeries, windows: &[(i64, i64)], fft: &dyn Transform) -> f64 {
    let mut per: Vec<f64> = windows
        .iter()
        .filter_map(|&(a, b)| {
            let lo = s.times.partition_point(|&t| t < a);
            let hi = s.times.partition_point(|&t| t < b);
            window_noise(&s.values[lo..hi], fft)
        })
        .collect();
    if per.is_empty() {
        return 0.0;
    }
    per.sort_by(f64::total_cmp);
    per[per.len() / 2]
}

/// Noise RMS of one stretch: median Hann periodogram ordinate / (ln 2 · Σw²/N).
pub fn window_noise(x: &[f64], fft: &dyn Transform) -> Option<f64> {
    let n = x.len();
    if n < 64 {
        return None;
    }
    let mut y = x.to_vec();
    if fill_non_finite(&mut y) < n / 2 {
        return None;
    }
    let mean = y.iter().sum::<f64>() / n as f64;
    let w = |m: usize| {
        let s = (std::f64::consts::PI * m as f64 / n as f64).sin();
        s * s
    };
    let mut sw2 = 0.0;
    for (m, v) in y.iter_mut().enumerate() {
        *v = (*v - mean) * w(m);
        sw2 += w(m) * w(m);
    }
    let c = fft.forward(&y);
    let mut p: Vec<f64> = c[1..c.len() - 1].iter().map(|z| z.norm_sqr()).collect();
    if p.is_empty() {
        return None;
    }
    let mid = p.len() / 2;
    let (_, med, _) = p.select_nth_unstable_by(mid, f64::total_cmp);
    let var = *med / std::f64::consts::LN_2 * n as f64 / sw2;
    Some(var.sqrt())
}

/// The Kneedle knee of a curve: on log budget and log ratio, each scaled to [0, 1], the point
/// farthest from the chord between the ends.
pub fn kneedle(curve: &[CurvePoint]) -> Option<f64> {
    let pts: Vec<(f64, f64, f64)> = curve
        .iter()
        .filter(|p| p.budget_rms > 0.0 && p.ratio > 0.0)
        .map(|p| (p.budget_rms.ln(), p.ratio.ln(), p.budget_rms))
        .collect();
    if pts.len() < 3 {
        return None;
    }
    let (x0, x1) = (pts[0].0, pts[pts.len() - 1].0);
    let (y0, y1) = pts
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| {
            (a.min(p.1), b.max(p.1))
        });
    if !(x1 > x0 && y1 > y0) {
        return None;
    }
    let norm = |p: &(f64, f64, f64)| ((p.0 - x0) / (x1 - x0), (p.1 - y0) / (y1 - y0));
    let (a, b) = (norm(&pts[0]), norm(&pts[pts.len() - 1]));
    let best = pts
        .iter()
        .map(|p| {
            let (x, y) = norm(p);
            // Signed distance above the chord from the first point to the last.
            let d = ((b.0 - a.0) * (y - a.1) - (b.1 - a.1) * (x - a.0))
                / ((b.0 - a.0).hypot(b.1 - a.1));
            (d, p.2)
        })
        .max_by(|p, q| p.0.total_cmp(&q.0))?;
    (best.0 > 0.0).then_some(best.1)
}

fn median(mut v: Vec<f64>) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    Some(v[v.len() / 2])
}

/// What the archive at the recommended budget keeps of one channel.
fn keeps(a: &Archive, channel: &str) -> Result<Keeps> {
    let segs = segment_list(a)?;
    let mut h: Vec<u32> = segs
        .iter()
        .filter(|s| s.channel == channel)
        .filter_map(|s| Some(s.order?.saturating_sub(1) / s.cycles?))
        .collect();
    h.sort_unstable();
    let q = TrendQuery {
        channels: vec![channel.to_string()],
        ..Default::default()
    };
    let t = trend(a, &q, RealFft::shared())?;
    let thd_source = median(
        a.rows
            .iter()
            .filter(|r| r.channel == channel)
            .filter_map(|r| r.thd.map(f64::from))
            .collect(),
    );
    Ok(Keeps {
        harmonics_up_to: h.get(h.len() / 2).copied(),
        thd_source,
        thd_archive: median(t.points.iter().filter_map(|p| p.thd).collect()),
    })
}
