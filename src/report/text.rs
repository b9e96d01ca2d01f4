//! The commands' plain-text tables and CSV, rendered from what the jobs measured.

use crate::jobs::survey::SurveyReport;
use crate::jobs::trend::TrendReport;
use crate::jobs::{EncodeSummary, VerifyReport};

use super::inspect::Inspect;

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
