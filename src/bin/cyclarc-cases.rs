//! `cyclarc-cases`: whole archive files against the error-bounded time-domain quantizer on
//! the modelling cases — signals with a known truth (generated with fixed seeds) and the
//! open recordings in `tests/data/`.
//!
//! ```text
//! cargo run --release --features tools --bin cyclarc-cases -- [--only NAME] [--keep DIR]
//! ```
//!
//! Per case and budget: the archive's bytes (what `cyclarc encode` writes) and its payload
//! (the frames), the segments and the bytes per segment that are not payload, the payload over
//! the order-0 entropy of the integer codes it holds (`pay/H0`; lossless raw words and headers
//! are in the payload but not in H0), the bytes of the time-domain quantizer (step √12·ε, delta, zigzag, zstd -19, on the same
//! per-segment budgets: [`cyclarc::baseline::time_domain_bytes`]) and of the Gaussian
//! rate-distortion reference, their ratios, and the fundamental each channel was coded at.
//! Nothing is asserted; the tests hold the properties, this reports the sizes.

use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use anyhow::{Context, Result};
use arrow::array::{Float32Array, RecordBatch, StringArray, TimestampNanosecondArray};
use arrow::datatypes::{DataType, Field, Schema, TimeUnit};
use clap::Parser;
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::properties::WriterProperties;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

use cyclarc::baseline::{rate_distortion_bytes, time_domain_bytes};
use cyclarc::codec::RunParams;
use cyclarc::fsio::digest_path;
use cyclarc::options::{EncodeOptions, Settings};
use cyclarc::signal::RealFft;
use cyclarc::source::{assemble, ChannelSamples, Source};
use cyclarc::{encode_file, Archive, DigestPolicy, JobControl};

/// 2026-01-05T00:00:00Z in ns since the epoch.
const START_NS: i64 = 1_767_571_200_000_000_000;

const SEED: u64 = 0x000c_7c1a_5e00;

const TAU: f64 = std::f64::consts::TAU;

#[derive(Parser)]
#[command(
    name = "cyclarc-cases",
    about = "Archive size against (c) on the modelling cases"
)]
struct Cli {
    /// Run only the cases whose name contains this.
    #[arg(long)]
    only: Option<String>,
    /// Keep the generated inputs and archives in this folder.
    #[arg(long)]
    keep: Option<PathBuf>,
}

/// One generated channel: name, samples (NaN marks a missing row).
struct Generated {
    fs: f64,
    channels: Vec<(&'static str, Vec<f64>)>,
}

fn normal(s: f64) -> Normal<f64> {
    Normal::new(0.0, s).expect("a positive standard deviation")
}

/// Clean three-phase current: exactly 50.00 Hz at 10 kHz for 6 s, 5th/7th/11th/13th
/// harmonics, white noise 60 dB below the RMS.
fn three_phase() -> Generated {
    let (fs, n) = (10_000.0, 60_000);
    let harmonics = [
        (1.0, 10.0),
        (5.0, 0.4),
        (7.0, 0.3),
        (11.0, 0.15),
        (13.0, 0.1),
    ];
    let rms = (harmonics.iter().map(|h| h.1 * h.1 / 2.0).sum::<f64>()).sqrt();
    let names = ["ia", "ib", "ic"];
    let channels = (0..3)
        .map(|c| {
            let mut rng = ChaCha8Rng::seed_from_u64(SEED + c as u64);
            let noise = normal(1e-3 * rms);
            let x = (0..n)
                .map(|i| {
                    let w = TAU * 50.0 * i as f64 / fs - TAU / 3.0 * c as f64;
                    harmonics
                        .iter()
                        .map(|&(h, a)| a * (h * w + 0.3 * h).sin())
                        .sum::<f64>()
                        + noise.sample(&mut rng)
                })
                .collect();
            (names[c], x)
        })
        .collect();
    Generated { fs, channels }
}

/// Gearbox run-up: shaft 15 → 18 Hz linearly over 8 s at 12.8 kHz, shaft 1× and 2×, a gear
/// mesh at 23× (with ±1× sidebands) stronger than the shaft line, noise 40 dB down.
fn gear_run_up() -> Generated {
    let (fs, n) = (12_800.0, 102_400);
    let mut rng = ChaCha8Rng::seed_from_u64(SEED + 10);
    let noise = normal(0.01);
    let mut phase = 0.0f64;
    let x = (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let f = 15.0 + 3.0 * t / 8.0;
            let v = 0.3 * phase.sin()
                + 0.1 * (2.0 * phase + 0.5).sin()
                + 1.0 * (23.0 * phase + 0.2).sin()
                + 0.2 * (22.0 * phase - 0.4).sin()
                + 0.2 * (24.0 * phase + 1.1).sin()
                + noise.sample(&mut rng);
            phase += TAU * f / fs;
            v
        })
        .collect();
    Generated {
        fs,
        channels: vec![("gbx.accel", x)],
    }
}

/// Fan: shaft 24.8 Hz with a blade pass at 7× stronger than the shaft line, 10 kHz for 5 s,
/// noise 1 % of the RMS, and a 0.5 s hole (rows missing) from 2.0 s.
fn fan_with_hole() -> Generated {
    let (fs, n) = (10_000.0, 50_000);
    let mut rng = ChaCha8Rng::seed_from_u64(SEED + 20);
    let noise = normal(0.01);
    let x = (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            if (2.0..2.5).contains(&t) {
                return f64::NAN;
            }
            let w = TAU * 24.8 * t;
            0.4 * w.sin()
                + 0.15 * (2.0 * w + 1.0).sin()
                + 0.8 * (7.0 * w - 0.3).sin()
                + noise.sample(&mut rng)
        })
        .collect();
    Generated {
        fs,
        channels: vec![("fan.accel", x)],
    }
}

/// Rolling-element bearing with an outer-race defect: shaft 29.5 Hz at 25 kHz for 4 s, shaft
/// harmonics, 3.3 kHz impacts at 3.58× shaft with ±1 % timing jitter, noise 3 % of the RMS.
fn bearing_impacts() -> Generated {
    let (fs, n) = (25_000.0, 100_000);
    let mut rng = ChaCha8Rng::seed_from_u64(SEED + 30);
    let noise = normal(0.012);
    let f0 = 29.5;
    let mut x: Vec<f64> = (0..n)
        .map(|i| {
            let w = TAU * f0 * i as f64 / fs;
            0.5 * w.sin()
                + 0.25 * (2.0 * w + 1.3).sin()
                + 0.1 * (3.0 * w - 0.6).sin()
                + noise.sample(&mut rng)
        })
        .collect();
    let period = fs / (3.58 * f0);
    let decay = 0.4e-3 * fs;
    let mut t = period * 0.3;
    while (t as usize) < n {
        let amp = 0.25 * rng.random_range(0.7..1.3);
        let i0 = t.ceil() as usize;
        for (j, v) in x
            .iter_mut()
            .skip(i0)
            .take((10.0 * decay) as usize)
            .enumerate()
        {
            let dt = (i0 + j) as f64 - t;
            *v += amp * (-dt / decay).exp() * (TAU * 3300.0 * dt / fs).sin();
        }
        t += period * (1.0 + rng.random_range(-0.01..0.01));
    }
    Generated {
        fs,
        channels: vec![("brg.accel", x)],
    }
}

/// A weekly series of 2,000 samples (38 years): a linear trend, a yearly cycle
/// (52.1775 weeks) with a second harmonic, and noise.
fn weekly() -> Generated {
    let n = 2_000;
    let mut rng = ChaCha8Rng::seed_from_u64(SEED + 40);
    let noise = normal(0.05);
    let x = (0..n)
        .map(|i| {
            let w = TAU * i as f64 / 52.1775;
            10.0 + 0.004 * i as f64
                + 2.0 * w.sin()
                + 0.5 * (2.0 * w + 0.7).sin()
                + noise.sample(&mut rng)
        })
        .collect();
    Generated {
        fs: 1.0 / (7.0 * 86_400.0),
        channels: vec![("site.load.weekly", x)],
    }
}

/// Write a generated input in the long layout (f32 values; NaN rows left out).
fn write(path: &Path, g: &Generated) -> Result<()> {
    let schema = Arc::new(Schema::new(vec![
        Field::new(
            "time",
            DataType::Timestamp(TimeUnit::Nanosecond, Some("UTC".into())),
            false,
        ),
        Field::new("channel", DataType::Utf8, false),
        Field::new("value", DataType::Float32, true),
    ]));
    let step = 1e9 / g.fs;
    let (mut t, mut c, mut v) = (Vec::new(), Vec::new(), Vec::new());
    for (name, x) in &g.channels {
        for (i, &s) in x.iter().enumerate() {
            if s.is_finite() {
                t.push(START_NS + (i as f64 * step).round() as i64);
                c.push(*name);
                v.push(s as f32);
            }
        }
    }
    let batch = RecordBatch::try_new(
        schema.clone(),
        vec![
            Arc::new(TimestampNanosecondArray::from(t).with_timezone("UTC")),
            Arc::new(StringArray::from(c)),
            Arc::new(Float32Array::from(v)),
        ],
    )?;
    let props = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(3)?))
        .build();
    let mut w = ArrowWriter::try_new(File::create(path)?, schema, Some(props))?;
    w.write(&batch)?;
    w.close()?;
    Ok(())
}

/// (c) and the Gaussian R(D) of a source file, with cyclarc's reader, runs and segments.
fn baselines(path: &Path, s: &Settings) -> Result<(usize, f64)> {
    let mut src = Source::open(path, &s.source)?;
    let mut per: Vec<ChannelSamples> = Vec::new();
    while let Some(chunks) = src.next_chunks() {
        for c in chunks? {
            if per.len() <= c.channel {
                per.resize_with(c.channel + 1, ChannelSamples::default);
            }
            per[c.channel].extend(c);
        }
    }
    let (mut td, mut rd) = (0usize, 0.0f64);
    for (i, samples) in per.into_iter().enumerate() {
        let info = src.schema.channels[i].clone();
        let ch = assemble(path, info.clone(), samples, None)?;
        let p = RunParams::new(&info.name, info.value_type, ch.sample_rate, &s.codec);
        for run in &ch.runs {
            td += time_domain_bytes(run, &p);
            rd += rate_distortion_bytes(run, &p, RealFft::shared());
        }
    }
    Ok((td, rd))
}

/// The archive's frame bytes, its segments, and the empirical order-0 entropy (bytes) of the
/// integer codes its frames hold.
fn payload_bytes(archive: &Path) -> Result<(usize, usize, f64)> {
    let a = Archive::open(archive, DigestPolicy::Skip)?;
    let p = cyclarc::archive::payload_stats(&a)?;
    Ok((p.frame_bytes, p.segments, p.order0_entropy_bytes))
}

fn main() -> Result<()> {
    let cli = Cli::parse();
    let dir = match &cli.keep {
        Some(d) => d.clone(),
        None => std::env::temp_dir().join(format!("cyclarc-cases-{}", std::process::id())),
    };
    std::fs::create_dir_all(&dir)?;
    let data = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data");
    type Make = fn() -> Generated;
    let generated: [(&str, Make, &[f64]); 5] = [
        ("three-phase 50 Hz", three_phase, &[0.005]),
        ("gear run-up 15-18 Hz, mesh 23x", gear_run_up, &[0.01, 0.05]),
        ("fan 24.8 Hz, blade 7x, 0.5 s hole", fan_with_hole, &[0.01]),
        ("bearing impacts", bearing_impacts, &[0.01, 0.05]),
        ("weekly trend + yearly", weekly, &[0.01, 0.05]),
    ];
    let mut cases: Vec<(String, PathBuf, Vec<f64>)> = Vec::new();
    for (name, make, budgets) in generated {
        if cli.only.as_deref().is_some_and(|o| !name.contains(o)) {
            continue;
        }
        let path = dir.join(format!(
            "{}.parquet",
            name.split(' ').next().unwrap_or(name)
        ));
        write(&path, &make())?;
        cases.push((name.to_string(), path, budgets.to_vec()));
    }
    for (name, file, budgets) in [
        (
            "bearing force (LADISK)",
            "bearing-force-ladisk.parquet",
            &[0.01, 0.05][..],
        ),
        ("ECG MIT-BIH 208", "ecg-mitbih-208.parquet", &[0.01, 0.05]),
        ("ECG PLUX 1 kHz", "ecg-plux-1000hz.parquet", &[0.01, 0.05]),
        (
            "respiration PLUX",
            "respiration-plux-1000hz.parquet",
            &[0.01, 0.05],
        ),
    ] {
        if cli.only.as_deref().is_some_and(|o| !name.contains(o)) {
            continue;
        }
        cases.push((name.to_string(), data.join(file), budgets.to_vec()));
    }
    println!(
        "{:<36} {:>6} {:>10} {:>10} {:>6} {:>9} {:>7} {:>10} {:>7} {:>7} {:>8}  fundamental (Hz, confidence)",
        "case",
        "budget",
        "archive B",
        "payload B",
        "segs",
        "other B/s",
        "pay/H0",
        "(c) B",
        "(c)/arc",
        "(c)/pay",
        "pay/R(D)"
    );
    for (name, src, budgets) in cases {
        for b in budgets {
            let s = EncodeOptions {
                budget_rel: Some(b),
                ..Default::default()
            }
            .resolve()?;
            let arc = dir.join("case.cyclarc.parquet");
            let summary = encode_file(&src, &arc, &s, &JobControl { progress: false })
                .with_context(|| format!("encoding {}", src.display()))?;
            let (payload, segments, h0) = payload_bytes(&arc)?;
            let (td, rd) = baselines(&src, &s)?;
            let f: Vec<String> = summary
                .fundamentals
                .iter()
                .map(|c| match (c.fundamental_hz, c.confidence, c.tracked_hz) {
                    (Some(f), Some(r), Some((lo, hi))) if hi - lo > 1e-3 * f => {
                        format!("{f:.3} ({r:.2}, {lo:.2}-{hi:.2})")
                    }
                    (Some(f), Some(r), _) => format!("{f:.3} ({r:.2})"),
                    _ => c.fundamental.clone(),
                })
                .collect();
            println!(
                "{:<36} {:>5.1}% {:>10} {:>10} {:>6} {:>9.2} {:>7.3} {:>10} {:>6.2}x {:>6.2}x {:>7.2}x  {}",
                name,
                100.0 * b,
                summary.archive_bytes,
                payload,
                segments,
                (summary.archive_bytes as f64 - payload as f64) / segments.max(1) as f64,
                payload as f64 / h0.max(1.0),
                td,
                td as f64 / summary.archive_bytes as f64,
                td as f64 / payload as f64,
                payload as f64 / rd,
                f.join("; ")
            );
            let _ = std::fs::remove_file(digest_path(&arc));
            if cli.keep.is_none() {
                let _ = std::fs::remove_file(&arc);
            }
        }
    }
    if cli.keep.is_none() {
        let _ = std::fs::remove_dir_all(&dir);
    }
    Ok(())
}
