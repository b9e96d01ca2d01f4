//! Report: what `inspect` shows (per channel: segments, samples, order spread, basis mix,
//! bytes, ratio against raw f32, worst error over budget; and how the file's bytes split
//! between payload, metadata and derived columns), and the plain-text tables of the other
//! commands. JSON output serializes the same structs.
//!
//! Does not: compute results (it only formats what other stages measured).

use std::collections::BTreeMap;

use serde::Serialize;

use crate::archive::schema::{column_class, ColumnClass};
use crate::archive::{Archive, SegmentInfo};
use crate::jobs::survey::SurveyReport;
use crate::jobs::trend::{TrendPoint, TrendReport};
use crate::jobs::{EncodeSummary, VerifyReport};
use crate::plot::{Marker, Panel, Series};

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

/// Render a table: a header row and rows of cells, columns padded; numbers right-aligned.
pub fn table(header: &[&str], rows: &[Vec<String>]) -> String {
    let n = header.len();
    let mut width: Vec<usize> = header.iter().map(|h| h.chars().count()).collect();
    for r in rows {
        for (i, c) in r.iter().enumerate().take(n) {
            width[i] = width[i].max(c.chars().count());
        }
    }
    let numeric = |s: &str| {
        s.chars()
            .next()
            .is_some_and(|c| c.is_ascii_digit() || c == '-' || c == '.')
    };
    let line = |cells: Vec<&str>| -> String {
        let mut out = String::new();
        for (i, c) in cells.iter().enumerate() {
            let pad = width[i] - c.chars().count();
            if i > 0 {
                out.push_str("  ");
            }
            if i > 0 && numeric(c) {
                out.push_str(&" ".repeat(pad));
                out.push_str(c);
            } else {
                out.push_str(c);
                out.push_str(&" ".repeat(pad));
            }
        }
        out.trim_end().to_string() + "\n"
    };
    let mut s = line(header.to_vec());
    s.push_str(&line(
        width
            .iter()
            .map(|w| "─".repeat(*w))
            .collect::<Vec<_>>()
            .iter()
            .map(String::as_str)
            .collect(),
    ));
    for r in rows {
        s.push_str(&line(r.iter().map(String::as_str).collect()));
    }
    s
}

/// Human-readable byte count.
pub fn bytes(n: u64) -> String {
    let n = n as f64;
    if n >= 1e9 {
        format!("{:.2} GB", n / 1e9)
    } else if n >= 1e6 {
        format!("{:.2} MB", n / 1e6)
    } else if n >= 1e3 {
        format!("{:.1} kB", n / 1e3)
    } else {
        format!("{n} B")
    }
}

/// Text for `inspect`.
pub fn inspect_text(i: &Inspect) -> String {
    let rows: Vec<Vec<String>> = i
        .channels
        .iter()
        .map(|c| {
            vec![
                c.channel.clone(),
                c.value_type.clone(),
                c.segments.to_string(),
                c.samples.to_string(),
                c.order
                    .map_or("-".into(), |(a, m, b)| format!("{a}/{m}/{b}")),
                c.basis
                    .iter()
                    .map(|(k, v)| format!("{k} {v}"))
                    .collect::<Vec<_>>()
                    .join(", "),
                bytes(c.bytes),
                format!("{:.1}", c.ratio_vs_f32),
                format!("{:.3}", c.worst_error_over_budget),
                c.fundamental.clone(),
            ]
        })
        .collect();
    let mut s = format!(
        "archive format {} ({}), source {} ({})\n\n",
        i.format,
        i.writer,
        i.source,
        bytes(i.source_bytes)
    );
    s.push_str(&table(
        &[
            "channel",
            "type",
            "segments",
            "samples",
            "order min/med/max",
            "basis",
            "bytes",
            "×f32",
            "err/budget",
            "fundamental",
        ],
        &rows,
    ));
    for c in &i.channels {
        if let Some(limit) = c.peak_max {
            s.push_str(&format!(
                "peak guard on {}: every sample within {limit} (largest claimed {}), {} \
                 samples corrected\n",
                c.channel,
                c.worst_peak.map_or("-".into(), |p| format!("{p:.4e}")),
                c.corrected_samples.unwrap_or(0)
            ));
        }
    }
    for c in &i.channels {
        if let Some(ev) = &c.events {
            let shown: Vec<String> = ev.iter().take(5).map(|t| t.to_string()).collect();
            s.push_str(&format!(
                "events on {}: {} event row(s){}{}\n",
                c.channel,
                ev.len(),
                if ev.is_empty() {
                    ""
                } else {
                    ", starting (ns) "
                },
                shown.join(", ") + if ev.len() > 5 { ", …" } else { "" }
            ));
        }
        if let Some(bands) = c.protected_bands {
            s.push_str(&format!(
                "protected bands on {}: {bands} band(s), {} bin(s) kept within 1 % of their \
                 amplitude over the segments\n",
                c.channel,
                c.protected_bins.unwrap_or(0)
            ));
        }
    }
    let b = &i.bytes;
    let pct = |x: u64| 100.0 * x as f64 / b.total.max(1) as f64;
    s.push_str(&format!(
        "\nbytes: {} in all — payload {} ({:.1} %), metadata columns {} ({:.1} %), derived \
         columns {} ({:.1} %), Parquet structure {} ({:.1} %)\n",
        bytes(b.total),
        bytes(b.payload),
        pct(b.payload),
        bytes(b.metadata),
        pct(b.metadata),
        bytes(b.derived),
        pct(b.derived),
        bytes(b.file_overhead),
        pct(b.file_overhead)
    ));
    if let Some(segs) = &i.segments {
        let rows: Vec<Vec<String>> = segs
            .iter()
            .map(|g| {
                let opt = |v: Option<u32>| v.map_or("-".into(), |v| v.to_string());
                vec![
                    g.channel.clone(),
                    g.start_ns.to_string(),
                    g.samples.to_string(),
                    g.basis.to_string(),
                    opt(g.order),
                    opt(g.cycles),
                    g.row.to_string(),
                ]
            })
            .collect();
        s.push('\n');
        s.push_str(&table(
            &[
                "channel",
                "start (ns)",
                "samples",
                "basis",
                "order",
                "cycles",
                "row",
            ],
            &rows,
        ));
    }
    s
}

/// Text for an encode summary.
pub fn encode_text(e: &EncodeSummary) -> String {
    let mut notes = String::new();
    for c in &e.fundamentals {
        match (c.fundamental.as_str(), c.fundamental_hz, c.confidence) {
            ("not_periodic", _, _) => {
                notes.push_str(&format!("  {}: cut into fixed-length blocks", c.name));
                if let Some((hz, r)) = c.runner_up_hz {
                    notes.push_str(&format!(
                        " (the best periodic cut, {hz:.4} Hz, coded {r:.2}× their bytes)"
                    ));
                }
                notes.push('\n');
            }
            ("estimated", Some(hz), Some(r)) => {
                notes.push_str(&format!(
                    "  {}: fundamental estimated at {hz:.4} Hz (autocorrelation {r:.2} at its period)",
                    c.name
                ));
                if let Some((hz2, r2)) = c.runner_up_hz {
                    notes.push_str(&format!("; runner-up {hz2:.4} Hz at {r2:.2}× the bytes"));
                }
                notes.push('\n');
            }
            ("mixed", _, _) => notes.push_str(&format!(
                "  {}: some runs periodic, some cut into fixed segments\n",
                c.name
            )),
            _ => {}
        }
    }
    format!(
        "{} → {}: {} rows, {} channels, {} segments; {} → {} ({:.1}× smaller than the source \
         file); worst error/budget {:.3}\n",
        e.source.display(),
        e.archive.display(),
        e.rows,
        e.channels,
        e.segments,
        bytes(e.source_bytes),
        bytes(e.archive_bytes),
        e.source_bytes as f64 / e.archive_bytes.max(1) as f64,
        e.worst_error_over_budget
    ) + &notes
}

/// Text for a verify report.
pub fn verify_text(v: &VerifyReport) -> String {
    let rows: Vec<Vec<String>> = v
        .channels
        .iter()
        .map(|c| {
            vec![
                c.channel.clone(),
                c.segments.to_string(),
                c.samples.to_string(),
                format!("{:.4e}", c.worst_error_rms),
                format!("{:.3}", c.worst_error_over_budget),
                match c.peak_max {
                    Some(limit) => format!("{:.4e} ≤ {limit:.4e}", c.max_abs_error),
                    None => format!("{:.4e}", c.max_abs_error),
                },
            ]
        })
        .collect();
    let mut s = table(
        &[
            "channel",
            "segments",
            "samples",
            "worst rms err",
            "err/budget",
            "max |err| (≤ peak limit where guarded)",
        ],
        &rows,
    );
    s.push_str(&format!("digest: {}\n", v.digest));
    if v.passed() {
        s.push_str("verify: PASS — every segment within budget, every row and timestamp back\n");
    } else {
        for f in &v.findings {
            s.push_str(&format!(
                "problem: {}{}{}\n",
                f.channel
                    .as_deref()
                    .map_or(String::new(), |c| format!("channel {c}: ")),
                f.start_ns
                    .map_or(String::new(), |t| format!("segment at {t} ns: ")),
                f.what
            ));
        }
        s.push_str(&format!("verify: FAIL — {} problem(s)\n", v.findings.len()));
    }
    s
}

/// A time (ns since the epoch) as UTC RFC 3339 with milliseconds; the integer when out of
/// range.
pub fn utc(ns: i64) -> String {
    arrow::temporal_conversions::timestamp_ns_to_datetime(ns).map_or(ns.to_string(), |t| {
        t.format("%Y-%m-%dT%H:%M:%S%.3fZ").to_string()
    })
}

/// `trend`'s table: one line per segment.
pub fn trend_text(r: &TrendReport) -> String {
    let mut header = vec![
        "channel".to_string(),
        "time (UTC)".into(),
        "f0 (Hz)".into(),
        "RMS".into(),
        "THD (%)".into(),
    ];
    header.extend(r.harmonics.iter().map(|h| format!("h{h} amp")));
    let rows: Vec<Vec<String>> = r
        .points
        .iter()
        .map(|p| {
            let mut row = vec![
                p.channel.clone(),
                utc(p.start_ns),
                format!("{:.3}", p.fundamental_hz),
                format!("{:.4}", p.rms),
                p.thd.map_or("-".into(), |t| format!("{:.2}", t * 100.0)),
            ];
            row.extend(r.harmonics.iter().map(|&h| {
                p.harmonics
                    .iter()
                    .find(|q| q.harmonic == h)
                    .map_or("-".into(), |q| format!("{:.4}", q.amplitude))
            }));
            row
        })
        .collect();
    let header: Vec<&str> = header.iter().map(String::as_str).collect();
    let mut s = table(&header, &rows);
    if r.skipped_segments > 0 {
        s.push_str(&format!(
            "{} segment(s) without harmonics (time-domain, lossless or not periodic) left out\n",
            r.skipped_segments
        ));
    }
    s
}

/// `trend --csv`: the columns of [`crate::jobs::trend::trend_columns`], with the time in
/// RFC 3339 and in ns.
pub fn trend_csv(r: &TrendReport) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header = vec![
        "channel".to_string(),
        "time".into(),
        "time_ns".into(),
        "samples".into(),
        "basis".into(),
        "fundamental_hz".into(),
        "rms".into(),
        "thd".into(),
    ];
    for h in &r.harmonics {
        header.push(format!("h{h}_amplitude"));
        header.push(format!("h{h}_phase"));
    }
    // Writing CSV into memory cannot fail.
    let _ = w.write_record(&header);
    for p in &r.points {
        let mut rec = vec![
            p.channel.clone(),
            utc(p.start_ns),
            p.start_ns.to_string(),
            p.samples.to_string(),
            p.basis.to_string(),
            p.fundamental_hz.to_string(),
            p.rms.to_string(),
            p.thd.map_or(String::new(), |t| t.to_string()),
        ];
        for &h in &r.harmonics {
            match p.harmonics.iter().find(|q| q.harmonic == h) {
                Some(q) => {
                    rec.push(q.amplitude.to_string());
                    rec.push(q.phase.to_string());
                }
                None => rec.extend([String::new(), String::new()]),
            }
        }
        let _ = w.write_record(&rec);
    }
    String::from_utf8(w.into_inner().unwrap_or_default()).unwrap_or_default()
}

/// `trend --svg`: one panel per quantity (fundamental, RMS, THD, each harmonic's
/// amplitude), one line per channel, time from the first point on x (in s, min or h).
pub fn trend_panels(r: &TrendReport) -> Vec<Panel> {
    let t0 = r.points.iter().map(|p| p.start_ns).min().unwrap_or(0);
    let t1 = r.points.iter().map(|p| p.start_ns).max().unwrap_or(0);
    // Seconds, minutes or hours on x, whichever keeps the span's numbers readable.
    let (unit_ns, unit) = match (t1 - t0) as f64 / 1e9 {
        s if s < 300.0 => (1e9, "s"),
        s if s < 3.0 * 3600.0 => (60e9, "min"),
        _ => (3.6e12, "h"),
    };
    let since = |ns: i64| (ns - t0) as f64 / unit_ns;
    let mut channels: Vec<&str> = Vec::new();
    for p in &r.points {
        if !channels.contains(&p.channel.as_str()) {
            channels.push(&p.channel);
        }
    }
    let unit_list = "channel units";
    let x_label = format!("time since {} ({unit})", utc(t0));
    let panel =
        |title: String, y_label: String, value: &dyn Fn(&TrendPoint) -> Option<f64>| Panel {
            title,
            x_label: x_label.clone(),
            y_label,
            log_x: false,
            log_y: false,
            series: channels
                .iter()
                .map(|c| Series {
                    name: c.to_string(),
                    points: r
                        .points
                        .iter()
                        .filter(|p| p.channel == *c)
                        .filter_map(|p| value(p).map(|v| (since(p.start_ns), v)))
                        .collect(),
                })
                .collect(),
            markers: Vec::new(),
            bars: false,
            points_only: false,
        };
    let mut out = vec![
        panel("Fundamental".into(), "frequency (Hz)".into(), &|p| {
            Some(p.fundamental_hz)
        }),
        panel("RMS".into(), format!("RMS ({unit_list})"), &|p| Some(p.rms)),
        panel("THD (IEEE 519)".into(), "THD (%)".into(), &|p| {
            p.thd.map(|t| t * 100.0)
        }),
    ];
    for &h in &r.harmonics {
        out.push(panel(
            format!("Harmonic {h}"),
            format!("peak amplitude ({unit_list})"),
            &move |p| {
                p.harmonics
                    .iter()
                    .find(|q| q.harmonic == h)
                    .map(|q| q.amplitude)
            },
        ));
    }
    out
}

/// `survey`'s text: per channel the floor, the recommendation and what it keeps, then the
/// curves.
pub fn survey_text(r: &SurveyReport) -> String {
    let g = |v: f64| format!("{v:.4}");
    let rows: Vec<Vec<String>> = r
        .channels
        .iter()
        .map(|c| {
            vec![
                c.channel.clone(),
                g(c.rms),
                g(c.noise_rms),
                c.knee_budget_rms.map_or("-".into(), g),
                g(c.recommended_budget_rms),
                format!("{:.1}", c.recommended_ratio),
                c.keeps
                    .harmonics_up_to
                    .map_or("-".into(), |h| h.to_string()),
                match (c.keeps.thd_source, c.keeps.thd_archive) {
                    (Some(a), Some(b)) => format!("{:.2} → {:.2}", a * 100.0, b * 100.0),
                    _ => "-".into(),
                },
                if c.sampled_windows > 1 {
                    format!("{} in {} windows", c.sampled_samples, c.sampled_windows)
                } else {
                    format!("all {}", c.sampled_samples)
                },
            ]
        })
        .collect();
    let mut s = format!("survey of {}\n\n", r.source);
    s.push_str(&table(
        &[
            "channel",
            "RMS",
            "noise",
            "knee",
            "recommended",
            "ratio",
            "harmonics",
            "THD % src → arc",
            "samples measured",
        ],
        &rows,
    ));
    if let Some(c) = r.channels.first() {
        s.push_str(&format!(
            "\nnoise: {}; recommended: {}\n",
            c.noise_estimator, c.rule
        ));
    }
    for c in &r.channels {
        s.push_str(&format!(
            "\n{}: ratio against budget (RMS, channel units)\n",
            c.channel
        ));
        let rows: Vec<Vec<String>> = c
            .curve
            .iter()
            .map(|p| {
                vec![
                    g(p.budget_rms),
                    format!("{:.2}", p.budget_rms / c.noise_rms.max(f64::MIN_POSITIVE)),
                    format!("{:.1}", p.ratio),
                    bytes(p.archive_bytes.round() as u64),
                ]
            })
            .collect();
        s.push_str(&table(&["budget", "× noise", "ratio", "bytes"], &rows));
    }
    s
}

/// `survey --svg`: one panel per channel, ratio against budget on log axes, the noise floor
/// and the recommendation marked.
pub fn survey_panels(r: &SurveyReport) -> Vec<Panel> {
    r.channels
        .iter()
        .map(|c| Panel {
            title: format!("{}: ratio against budget", c.channel),
            x_label: "budget, RMS (channel units)".into(),
            y_label: "ratio vs raw f32 (×)".into(),
            log_x: true,
            log_y: true,
            series: vec![Series {
                name: "estimated ratio".into(),
                points: c.curve.iter().map(|p| (p.budget_rms, p.ratio)).collect(),
            }],
            markers: [
                (c.noise_rms > 0.0).then(|| Marker {
                    x: c.noise_rms,
                    label: format!("noise floor {:.4}", c.noise_rms),
                }),
                Some(Marker {
                    x: c.recommended_budget_rms,
                    label: format!("recommended {:.4}", c.recommended_budget_rms),
                }),
            ]
            .into_iter()
            .flatten()
            .collect(),
            bars: false,
            points_only: false,
        })
        .collect()
}
