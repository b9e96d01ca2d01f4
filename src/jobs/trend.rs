//! The trend job: the fundamental, RMS, THD and any harmonic's amplitude and phase of every
//! periodic segment of an archive, over time, from the stored coefficients alone.
//!
//! A segment's spectrum here is the decoder's, before rounding to the output type: its kept
//! bins (zero beyond the order), plus the orthonormal DFT of its polynomial part (basis
//! `fourier_trend`), plus its protected bins' refinements. No sample is synthesized. For a
//! segment coded in angle (warp) the bins are those of the angle-domain segment: harmonics
//! are then orders of the tracked speed.
//!
//! Does not: read sources or rebuild samples (that is `decode`).

use rayon::prelude::*;
use serde::Serialize;

use crate::archive::reader::block_spans;
use crate::archive::series::read_block;
use crate::archive::Archive;
use crate::codec::decode::{fourier_coeffs, trend_basis, Prev};
use crate::codec::encode::THD_MAX_HARMONIC;
use crate::codec::frame::{Block, SegmentRecord};
use crate::error::{Error, Result};
use crate::model::Basis;
use crate::signal::{amplitude_phase, half_len, thd, weight, Transform, C64};

/// What to trend.
#[derive(Debug, Clone, Default)]
pub struct TrendQuery {
    /// Only these channels (all when empty).
    pub channels: Vec<String>,
    /// Segments starting at or after this time (ns since the epoch).
    pub from: Option<i64>,
    /// Segments starting before this time (ns since the epoch).
    pub to: Option<i64>,
    /// Harmonics to report (1 = the fundamental).
    pub harmonics: Vec<usize>,
}

/// One harmonic of one segment.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct HarmonicPoint {
    /// Harmonic number (1 = the fundamental).
    pub harmonic: usize,
    /// Peak amplitude (channel units); 0 where the order dropped the bin.
    pub amplitude: f64,
    /// Phase (radians, of a cosine at the segment's start).
    pub phase: f64,
}

/// One periodic segment's figures.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrendPoint {
    /// Channel.
    pub channel: String,
    /// Time of the segment's first sample (ns since the epoch).
    pub start_ns: i64,
    /// Samples.
    pub samples: usize,
    /// Basis.
    pub basis: &'static str,
    /// Fundamental (Hz): whole cycles over the segment's ideal length.
    pub fundamental_hz: f64,
    /// RMS of the decoder's output (before rounding), by Parseval.
    pub rms: f64,
    /// THD (IEEE 519: harmonics 2 … 50 below Nyquist over the fundamental).
    pub thd: Option<f64>,
    /// The requested harmonics; harmonics at or above Nyquist are left out.
    pub harmonics: Vec<HarmonicPoint>,
}

/// The trend of an archive.
#[derive(Debug, Clone, Serialize)]
pub struct TrendReport {
    /// The archive.
    pub archive: String,
    /// The harmonics asked for.
    pub harmonics: Vec<usize>,
    /// One point per periodic segment, per channel in time order.
    pub points: Vec<TrendPoint>,
    /// Selected segments with no harmonics to report (time-domain, lossless or not
    /// periodic).
    pub skipped_segments: usize,
}

/// Trend the selected segments of an archive.
pub fn trend(archive: &Archive, q: &TrendQuery, fft: &dyn Transform) -> Result<TrendReport> {
    for c in &q.channels {
        if !archive.meta.channels.iter().any(|m| &m.name == c) {
            return Err(Error::InvalidOption {
                name: "channel".into(),
                reason: format!("{}: no channel `{c}`", archive.path.display()),
            });
        }
    }
    if let Some(h) = q.harmonics.iter().find(|&&h| h == 0) {
        return Err(Error::InvalidOption {
            name: "harmonics".into(),
            reason: format!("harmonic {h}: harmonics count from 1 (the fundamental)"),
        });
    }
    let wanted = |ch: &str| q.channels.is_empty() || q.channels.iter().any(|c| c == ch);
    let spans: Vec<_> = block_spans(&archive.rows)
        .into_iter()
        .filter(|s| wanted(&archive.rows[s.start].channel))
        .collect();
    let per_block: Vec<(Vec<TrendPoint>, usize)> = spans
        .into_par_iter()
        .map(|s| {
            let channel = archive.rows[s.start].channel.clone();
            let (block, _) = read_block(archive, s).map_err(|reason| Error::Damaged {
                file: archive.path.clone(),
                reason,
            })?;
            block_points(&block, &channel, q, fft).map_err(|reason| Error::Damaged {
                file: archive.path.clone(),
                reason: format!("channel `{channel}`: {reason}"),
            })
        })
        .collect::<Result<_>>()?;
    let mut points = Vec::new();
    let mut skipped = 0;
    for (p, s) in per_block {
        points.extend(p);
        skipped += s;
    }
    // Blocks are in file order (time order within a channel); group by channel, stably.
    points.sort_by(|a, b| {
        let ca = archive
            .meta
            .channels
            .iter()
            .position(|m| m.name == a.channel);
        let cb = archive
            .meta
            .channels
            .iter()
            .position(|m| m.name == b.channel);
        ca.cmp(&cb).then(a.start_ns.cmp(&b.start_ns))
    });
    Ok(TrendReport {
        archive: archive.path.display().to_string(),
        harmonics: q.harmonics.clone(),
        points,
        skipped_segments: skipped,
    })
}

/// Trend several archives (a committed plan's parts) as one: their points by channel (in the
/// order channels are first met), then time.
pub fn trend_union(
    label: &str,
    archives: &[Archive],
    q: &TrendQuery,
    fft: &dyn Transform,
) -> Result<TrendReport> {
    for c in &q.channels {
        if !archives
            .iter()
            .any(|a| a.meta.channels.iter().any(|m| &m.name == c))
        {
            return Err(Error::InvalidOption {
                name: "channel".into(),
                reason: format!("{label}: no channel `{c}`"),
            });
        }
    }
    let mut order: Vec<String> = Vec::new();
    let mut points = Vec::new();
    let mut skipped = 0;
    for a in archives {
        let mut sub = q.clone();
        sub.channels
            .retain(|c| a.meta.channels.iter().any(|m| &m.name == c));
        if !q.channels.is_empty() && sub.channels.is_empty() {
            continue;
        }
        let r = trend(a, &sub, fft)?;
        for m in &a.meta.channels {
            if !order.contains(&m.name) {
                order.push(m.name.clone());
            }
        }
        points.extend(r.points);
        skipped += r.skipped_segments;
    }
    let rank = |c: &str| order.iter().position(|o| o == c);
    points.sort_by(|a, b| {
        rank(&a.channel)
            .cmp(&rank(&b.channel))
            .then(a.start_ns.cmp(&b.start_ns))
    });
    Ok(TrendReport {
        archive: label.to_string(),
        harmonics: q.harmonics.clone(),
        points,
        skipped_segments: skipped,
    })
}

fn block_points(
    block: &Block,
    channel: &str,
    q: &TrendQuery,
    fft: &dyn Transform,
) -> std::result::Result<(Vec<TrendPoint>, usize), String> {
    let fs = 1e9 / block.times.step_ns;
    let mut prev: Option<Prev> = None;
    let mut offset = 0usize;
    let mut points = Vec::new();
    let mut skipped = 0;
    for (j, seg) in block.segments.iter().enumerate() {
        let start_ns = block.times.time(offset);
        offset += seg.len;
        let fourier = matches!(seg.basis, Basis::Fourier | Basis::Trend);
        // Coefficients are needed for the prediction of the next segment, selected or not.
        let coeffs = if fourier {
            let codes = match seg.trend {
                Some(t) => &seg.codes[(t.degree as usize).min(seg.codes.len())..],
                None => &seg.codes[..],
            };
            let c = fourier_coeffs(seg, codes, prev.as_ref())
                .map_err(|e| format!("segment {j}: {e}"))?;
            prev = Some(Prev {
                coeffs: c.clone(),
                n: seg.len,
                ideal: seg.ideal_len as f64,
            });
            c
        } else {
            Vec::new()
        };
        let selected = q.from.is_none_or(|f| start_ns >= f) && q.to.is_none_or(|t| start_ns < t);
        if !selected {
            continue;
        }
        if !fourier || seg.cycles == 0 || !(fs.is_finite() && fs > 0.0) {
            skipped += 1;
            continue;
        }
        let spectrum = decoded_spectrum(seg, coeffs, fft);
        points.push(point(seg, &spectrum, channel, start_ns, fs, &q.harmonics));
    }
    Ok((points, skipped))
}

/// The decoder's one-sided orthonormal spectrum of a Fourier segment, before rounding.
fn decoded_spectrum(seg: &SegmentRecord, coeffs: Vec<C64>, fft: &dyn Transform) -> Vec<C64> {
    let n = seg.len;
    let mut s = coeffs;
    s.resize(half_len(n), C64::new(0.0, 0.0));
    if let (Some(t), Basis::Trend) = (seg.trend, seg.basis) {
        let d = (t.degree as usize).min(seg.codes.len());
        if let Some(basis) = trend_basis(n, d) {
            for (&q, u) in seg.codes[..d].iter().zip(&basis) {
                let beta = q as f64 * t.step as f64;
                for (sk, uk) in s.iter_mut().zip(fft.forward(u)) {
                    *sk += uk * beta;
                }
            }
        }
    }
    // Refinements are added in time; in angle (warp) their bins are not the segment's.
    if let (Some(p), None) = (&seg.protect, seg.warp) {
        for (j, &k) in p.bins.iter().enumerate() {
            let (qr, qi) = (
                p.codes.get(2 * j).copied().unwrap_or(0),
                p.codes.get(2 * j + 1).copied().unwrap_or(0),
            );
            if let Some(sk) = s.get_mut(k as usize) {
                *sk += C64::new(qr as f64, qi as f64) * p.step as f64;
            }
        }
    }
    s
}

fn point(
    seg: &SegmentRecord,
    s: &[C64],
    channel: &str,
    start_ns: i64,
    fs: f64,
    harmonics: &[usize],
) -> TrendPoint {
    let n = seg.len;
    let k = seg.cycles as usize;
    let energy: f64 = s
        .iter()
        .enumerate()
        .map(|(b, c)| weight(b, n) * c.norm_sqr())
        .sum();
    let ideal = if seg.ideal_len > 0.0 {
        seg.ideal_len as f64
    } else {
        n as f64
    };
    TrendPoint {
        channel: channel.to_string(),
        start_ns,
        samples: n,
        basis: seg.basis.name(),
        fundamental_hz: k as f64 * fs / ideal,
        rms: (energy / n as f64).sqrt(),
        thd: thd(s, k, n, THD_MAX_HARMONIC),
        harmonics: harmonics
            .iter()
            .filter(|&&h| h * k < half_len(n))
            .map(|&h| {
                let (amplitude, phase) = amplitude_phase(s[h * k], h * k, n);
                HarmonicPoint {
                    harmonic: h,
                    amplitude,
                    phase,
                }
            })
            .collect(),
    }
}

/// The trend as Parquet columns: `channel`, `time` (timestamp, ns, UTC), `samples`, `basis`,
/// `fundamental_hz`, `rms`, `thd`, and `h{N}_amplitude`, `h{N}_phase` per requested
/// harmonic (null where a segment's Nyquist is below it).
pub fn trend_columns(r: &TrendReport) -> Vec<(String, arrow::array::ArrayRef)> {
    use arrow::array::{
        ArrayRef, Float64Array, StringArray, TimestampNanosecondArray, UInt32Array,
    };
    use std::sync::Arc;
    let p = &r.points;
    let mut cols: Vec<(String, ArrayRef)> = vec![
        (
            "channel".into(),
            Arc::new(StringArray::from_iter_values(
                p.iter().map(|x| x.channel.as_str()),
            )),
        ),
        (
            "time".into(),
            Arc::new(
                TimestampNanosecondArray::from_iter_values(p.iter().map(|x| x.start_ns))
                    .with_timezone("UTC"),
            ),
        ),
        (
            "samples".into(),
            Arc::new(UInt32Array::from_iter_values(
                p.iter().map(|x| x.samples as u32),
            )),
        ),
        (
            "basis".into(),
            Arc::new(StringArray::from_iter_values(p.iter().map(|x| x.basis))),
        ),
        (
            "fundamental_hz".into(),
            Arc::new(Float64Array::from_iter_values(
                p.iter().map(|x| x.fundamental_hz),
            )),
        ),
        (
            "rms".into(),
            Arc::new(Float64Array::from_iter_values(p.iter().map(|x| x.rms))),
        ),
        (
            "thd".into(),
            Arc::new(p.iter().map(|x| x.thd).collect::<Float64Array>()),
        ),
    ];
    for &h in &r.harmonics {
        let of = |x: &TrendPoint| x.harmonics.iter().find(|q| q.harmonic == h).copied();
        cols.push((
            format!("h{h}_amplitude"),
            Arc::new(
                p.iter()
                    .map(|x| of(x).map(|q| q.amplitude))
                    .collect::<Float64Array>(),
            ),
        ));
        cols.push((
            format!("h{h}_phase"),
            Arc::new(
                p.iter()
                    .map(|x| of(x).map(|q| q.phase))
                    .collect::<Float64Array>(),
            ),
        ));
    }
    cols
}
