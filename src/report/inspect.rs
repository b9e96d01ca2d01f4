//! What `inspect` shows, as data: per channel its segments, samples, order spread, basis mix,
//! bytes, ratio against raw f32 and worst error over budget, and how the file's bytes split
//! between payload, metadata and derived columns; one plan's parts added up as one archive.

use std::collections::BTreeMap;

use serde::Serialize;

use crate::archive::schema::{column_class, ColumnClass};
use crate::archive::{Archive, SegmentInfo};

/// One channel in `inspect`.
#[derive(Debug, Clone, Serialize)]
pub struct ChannelInspect {
    /// Name.
    pub channel: String,
    /// Value type.
    pub value_type: String,
    /// Segments.
    pub segments: usize,
    /// Samples.
    pub samples: u64,
    /// Order: min, median, max over Fourier segments.
    pub order: Option<(u32, u32, u32)>,
    /// Segments per basis.
    pub basis: BTreeMap<String, usize>,
    /// Bytes attributed to the channel (its payload plus its share of the other columns).
    pub bytes: u64,
    /// Raw f32 bytes (4 per sample) over `bytes`.
    pub ratio_vs_f32: f64,
    /// Largest recorded error over budget (lossy segments).
    pub worst_error_over_budget: f64,
    /// Fundamental: how found, and value (Hz).
    pub fundamental: String,
    /// The channel's peak limit (peak guard), if any.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub peak_max: Option<f64>,
    /// The largest peak error its guarded segments claim.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub worst_peak: Option<f64>,
    /// Samples the peak guard corrected.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub corrected_samples: Option<usize>,
    /// Protected bands of the channel, if any.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub protected_bands: Option<usize>,
    /// Protected bins kept, summed over segments.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub protected_bins: Option<usize>,
    /// Start times (ns) of the channel's event rows (event capture only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub events: Option<Vec<i64>>,
}

/// How the archive's bytes split.
#[derive(Debug, Clone, Serialize)]
pub struct ByteSplit {
    /// Payload and checksum columns.
    pub payload: u64,
    /// Derived columns (fundamental, RMS, harmonics, THD).
    pub derived: u64,
    /// All other columns.
    pub metadata: u64,
    /// Parquet footer, headers and file metadata.
    pub file_overhead: u64,
    /// Whole file.
    pub total: u64,
}

/// `inspect`'s result.
#[derive(Debug, Clone, Serialize)]
pub struct Inspect {
    /// Archive format.
    pub format: String,
    /// Writer.
    pub writer: String,
    /// Source name.
    pub source: String,
    /// Source bytes.
    pub source_bytes: u64,
    /// Channels.
    pub channels: Vec<ChannelInspect>,
    /// Byte split.
    pub bytes: ByteSplit,
    /// Every segment (`inspect --segments`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub segments: Option<Vec<SegmentInfo>>,
}

/// `inspect` of a committed plan: its parts' results as one archive's — a channel met in
/// several parts (cut by time, or in several sources) adds up; the byte split adds up; each
/// source counts once.
pub fn inspect_union(parts: Vec<Inspect>) -> Inspect {
    let mut sources: Vec<(String, u64)> = Vec::new();
    let mut channels: Vec<ChannelInspect> = Vec::new();
    let mut bytes = ByteSplit {
        payload: 0,
        derived: 0,
        metadata: 0,
        file_overhead: 0,
        total: 0,
    };
    let mut segments: Option<Vec<SegmentInfo>> = None;
    let (format, writer) = parts
        .first()
        .map(|p| (p.format.clone(), p.writer.clone()))
        .unwrap_or_default();
    for p in parts {
        if !sources.iter().any(|s| s.0 == p.source) {
            sources.push((p.source.clone(), p.source_bytes));
        }
        bytes.payload += p.bytes.payload;
        bytes.derived += p.bytes.derived;
        bytes.metadata += p.bytes.metadata;
        bytes.file_overhead += p.bytes.file_overhead;
        bytes.total += p.bytes.total;
        if let Some(list) = p.segments {
            segments.get_or_insert_with(Vec::new).extend(list);
        }
        for c in p.channels {
            let Some(m) = channels.iter_mut().find(|m| m.channel == c.channel) else {
                channels.push(c);
                continue;
            };
            // The median order of the merged channel: that of the part with more segments.
            m.order = match (m.order, c.order) {
                (Some(a), Some(b)) => Some((
                    a.0.min(b.0),
                    if c.segments > m.segments { b.1 } else { a.1 },
                    a.2.max(b.2),
                )),
                (a, b) => a.or(b),
            };
            m.segments += c.segments;
            m.samples += c.samples;
            for (k, v) in c.basis {
                *m.basis.entry(k).or_insert(0) += v;
            }
            m.bytes += c.bytes;
            m.ratio_vs_f32 = 4.0 * m.samples as f64 / m.bytes.max(1) as f64;
            m.worst_error_over_budget = m.worst_error_over_budget.max(c.worst_error_over_budget);
            if m.fundamental != c.fundamental {
                m.fundamental = format!("{}; {}", m.fundamental, c.fundamental);
            }
            m.peak_max = m.peak_max.or(c.peak_max);
            m.worst_peak = match (m.worst_peak, c.worst_peak) {
                (Some(a), Some(b)) => Some(a.max(b)),
                (a, b) => a.or(b),
            };
            m.corrected_samples = match (m.corrected_samples, c.corrected_samples) {
                (Some(a), Some(b)) => Some(a + b),
                (a, b) => a.or(b),
            };
            m.protected_bands = m.protected_bands.or(c.protected_bands);
            m.protected_bins = match (m.protected_bins, c.protected_bins) {
                (Some(a), Some(b)) => Some(a + b),
                (a, b) => a.or(b),
            };
            if let Some(e) = c.events {
                m.events.get_or_insert_with(Vec::new).extend(e);
            }
        }
    }
    Inspect {
        format,
        writer,
        source: sources
            .iter()
            .map(|s| s.0.as_str())
            .collect::<Vec<_>>()
            .join(", "),
        source_bytes: sources.iter().map(|s| s.1).sum(),
        channels,
        bytes,
        segments,
    }
}

/// Build the `inspect` result from an archive and its segments (see
/// [`crate::archive::segment_list`]); `list` keeps the segments in the result.
pub fn inspect(a: &Archive, segments: Vec<SegmentInfo>, list: bool) -> Inspect {
    // Columns this build does not write (a newer minor version's) count as metadata.
    let sum_cols = |class: ColumnClass| -> u64 {
        a.column_bytes
            .iter()
            .filter(|(n, _)| column_class(n) == Some(class))
            .map(|(_, b)| *b)
            .sum()
    };
    let payload = sum_cols(ColumnClass::Payload);
    let derived = sum_cols(ColumnClass::Derived);
    let all: u64 = a.column_bytes.iter().map(|(_, b)| *b).sum();
    let metadata = all - payload - derived;
    let split = ByteSplit {
        payload,
        derived,
        metadata,
        file_overhead: a.file_bytes.saturating_sub(all),
        total: a.file_bytes,
    };
    let mut channels = Vec::new();
    for cm in &a.meta.channels {
        let rows: Vec<_> = a.rows.iter().filter(|r| r.channel == cm.name).collect();
        let segs: Vec<&SegmentInfo> = segments.iter().filter(|s| s.channel == cm.name).collect();
        let mut orders: Vec<u32> = segs.iter().filter_map(|s| s.order).collect();
        orders.sort_unstable();
        let mut basis = BTreeMap::new();
        for s in &segs {
            *basis.entry(s.basis.to_string()).or_insert(0) += 1;
        }
        let bytes = a.channel_bytes(&cm.name);
        let samples: u64 = rows.iter().map(|r| r.samples as u64).sum();
        let worst = rows.iter().map(|r| r.budget_use as f64).fold(0.0, f64::max);
        let guarded = cm.peak_max.is_some() || segs.iter().any(|s| s.peak.is_some());
        let worst_peak = segs
            .iter()
            .filter_map(|s| s.peak)
            .map(f64::from)
            .fold(None, |m: Option<f64>, p| Some(m.map_or(p, |m| m.max(p))));
        channels.push(ChannelInspect {
            channel: cm.name.clone(),
            value_type: cm.value_type.name().into(),
            segments: segs.len(),
            samples,
            order: (!orders.is_empty()).then(|| {
                (
                    orders[0],
                    orders[orders.len() / 2],
                    orders[orders.len() - 1],
                )
            }),
            basis,
            bytes,
            ratio_vs_f32: if bytes > 0 {
                samples as f64 * 4.0 / bytes as f64
            } else {
                0.0
            },
            worst_error_over_budget: worst,
            fundamental: {
                let sure = match (cm.fundamental.as_str(), cm.confidence) {
                    ("estimated", Some(c)) => format!(", r = {c:.2}"),
                    _ => String::new(),
                };
                match (cm.fundamental.as_str(), cm.fundamental_hz) {
                    ("not_periodic", _) | (_, None) => cm.fundamental.replace('_', " "),
                    (kind, Some(hz)) => match cm.tracked_hz {
                        Some((lo, hi)) if (hi - lo) > 1e-6 * hi => {
                            format!("{kind} {lo:.3}–{hi:.3} Hz{sure}")
                        }
                        _ => format!("{kind} {hz:.3} Hz{sure}"),
                    },
                }
            },
            peak_max: cm.peak_max,
            worst_peak,
            corrected_samples: guarded
                .then(|| segs.iter().filter_map(|s| s.corrected).sum::<usize>()),
            events: cm.event_budget_factor.map(|_| {
                rows.iter()
                    .filter(|r| r.event == Some(true))
                    .map(|r| r.start_ns)
                    .collect()
            }),
            protected_bands: cm.protection.as_ref().map(|p| p.bands.len()),
            protected_bins: cm
                .protection
                .as_ref()
                .map(|_| segs.iter().filter_map(|s| s.protected_bins).sum::<usize>()),
        });
    }
    Inspect {
        format: a.meta.format.clone(),
        writer: a.meta.writer.clone(),
        source: a.meta.source.name.clone(),
        source_bytes: a.meta.source.bytes,
        channels,
        bytes: split,
        segments: list.then_some(segments),
    }
}
