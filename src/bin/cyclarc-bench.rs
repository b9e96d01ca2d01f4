//! `cyclarc-bench`: the trade side by side in one run — speed, memory and archive size of
//! cyclarc against what a user would do instead, on deterministic synthetic logs.
//!
//! ```text
//! cargo run --release --bin cyclarc-bench -- [--quick|--full] [--json] [--svg PATH] [--out-dir DIR]
//! ```
//!
//! Inputs (fixed ChaCha8 seeds, long layout `time` Timestamp(ns, UTC) / `channel` / `value`
//! Float32, written with the parquet crate, zstd level 3):
//!
//! * `motor-current`: three phases, 49.97 Hz (a 50 Hz grid slightly off nominal) at 20 kHz, 5th/7th/11th/13th harmonics at
//!   4/3/1.5/1 %, white noise 60 dB below the RMS;
//! * `vibration`: one accelerometer at 25 kHz, shaft 29.5 Hz with 2×, 3× and 7× (vane pass),
//!   broadband noise at 3 % of the RMS, and decaying 3.3 kHz impacts at 3.58× shaft
//!   (an outer-race defect) with random amplitude and ±1 % timing jitter;
//! * `speed-drift`: shaft harmonics at 20 kHz whose speed runs up and down ±10 % around 25 Hz
//!   (triangle, 20 s period), noise 60 dB down;
//! * `aperiodic`: AR(1) Gaussian process (ρ = 0.9) at 10 kHz, sensor noise 60 dB down.
//!
//! Measured: encode and decode through `cyclarc::job::encode_file` / `decode_file` (what the
//! CLI calls); the time of a bare scan of the same file (parquet crate, batches of 65 536
//! rows, every value summed) and of writing the same rows with the parquet crate; archive
//! bytes against raw f32, lossless Parquet, the time-domain quantizer + zstd -19 and the
//! Gaussian rate-distortion bound; peak memory of the `cyclarc` binary as a child process
//! (its `VmHWM`, polled); one thread against all.
//!
//! Nothing here is asserted: the targets are reported as met or missed, with the numbers.

use std::fs::File;
use std::hint::black_box;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::Arc;
use std::time::Instant;

use anyhow::{anyhow, bail, Context, Result};
use arrow::array::{AsArray, Float32Array, RecordBatch, StringArray, TimestampNanosecondArray};
use arrow::datatypes::{DataType, Field, Float32Type, Schema, TimeUnit, TimestampNanosecondType};
use clap::Parser;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::properties::WriterProperties;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use rayon::prelude::*;
use serde::Serialize;

use cyclarc::baseline::{lossless_parquet_bytes, rate_distortion_bytes, time_domain_bytes};
use cyclarc::codec::RunParams;
use cyclarc::fsio::digest_path;
use cyclarc::model::{Run, ValueType};
use cyclarc::options::{EncodeOptions, Settings};
use cyclarc::signal::RealFft;
use cyclarc::{decode_file, encode_file, Archive, DigestPolicy, JobControl};

/// 2026-01-01T00:00:00Z in ns since the epoch: the first sample of every input.
const START_NS: i64 = 1_767_225_600_000_000_000;

/// Rows per batch when scanning and writing (the library's read batch).
const BATCH_ROWS: usize = 65_536;

/// Base seed of every random stream.
const SEED: u64 = 0x000c_7c1a_4c00;

/// The relative budgets of the sweep (fractions of each segment's RMS).
const REL_BUDGETS: [f64; 4] = [0.001, 0.005, 0.01, 0.05];

/// The budget of the throughput and memory measurements (the library's default).
const DEFAULT_REL: f64 = 0.005;

/// The absolute budget below the noise floor, as a multiple of the generated noise RMS.
const BELOW_FLOOR: f64 = 0.3;

#[derive(Parser)]
#[command(
    name = "cyclarc-bench",
    about = "Speed, memory and archive size of cyclarc against the alternatives, on synthetic logs"
)]
struct Cli {
    /// Small sizes: about a minute in total.
    #[arg(long, conflicts_with = "full")]
    quick: bool,
    /// Sizes from 10⁶ to 10⁸ samples: some ten minutes.
    #[arg(long)]
    full: bool,
    /// Print the results as JSON on stdout (the table goes to stderr).
    #[arg(long)]
    json: bool,
    /// Write an SVG plot of compression ratio against budget, per dataset.
    #[arg(long)]
    svg: Option<PathBuf>,
    /// Keep inputs and archives in this folder (default: a temporary folder, removed after).
    #[arg(long)]
    out_dir: Option<PathBuf>,
    /// Only write one input (DATASET:SAMPLES, e.g. `motor-current:10000000`) into the
    /// out-dir and stop: an input for profiling `cyclarc encode`.
    #[arg(long, value_name = "DATASET:SAMPLES")]
    write_input: Option<String>,
}

// ---------------------------------------------------------------------------------------
// Inputs
// ---------------------------------------------------------------------------------------

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Dataset {
    MotorCurrent,
    Vibration,
    SpeedDrift,
    Aperiodic,
}

const DATASETS: [Dataset; 4] = [
    Dataset::MotorCurrent,
    Dataset::Vibration,
    Dataset::SpeedDrift,
    Dataset::Aperiodic,
];

/// Motor current harmonics: (order, peak amplitude in A).
const CURRENT_HARMONICS: [(f64, f64); 5] = [
    (1.0, 10.0),
    (5.0, 0.4),
    (7.0, 0.3),
    (11.0, 0.15),
    (13.0, 0.1),
];

/// Vibration shaft harmonics: (order, peak amplitude in g).
const SHAFT_HARMONICS: [(f64, f64); 4] = [(1.0, 0.5), (2.0, 0.25), (3.0, 0.1), (7.0, 0.08)];

/// Speed-drift harmonics: (order, peak amplitude in mm/s).
const DRIFT_HARMONICS: [(f64, f64); 4] = [(1.0, 1.0), (2.0, 0.3), (3.0, 0.15), (4.0, 0.05)];

/// RMS of a sum of sines with these peak amplitudes.
fn sines_rms(h: &[(f64, f64)]) -> f64 {
    (h.iter().map(|&(_, a)| a * a / 2.0).sum::<f64>()).sqrt()
}

/// The vibration's broadband noise RMS (g): 3 % of the shaft harmonics' RMS.
fn vibration_noise_rms() -> f64 {
    0.03 * sines_rms(&SHAFT_HARMONICS)
}

impl Dataset {
    fn name(self) -> &'static str {
        match self {
            Dataset::MotorCurrent => "motor-current",
            Dataset::Vibration => "vibration",
            Dataset::SpeedDrift => "speed-drift",
            Dataset::Aperiodic => "aperiodic",
        }
    }

    fn channels(self) -> &'static [&'static str] {
        match self {
            Dataset::MotorCurrent => &["m1.ia", "m1.ib", "m1.ic"],
            Dataset::Vibration => &["p1.de.accel"],
            Dataset::SpeedDrift => &["f1.vel"],
            Dataset::Aperiodic => &["v1.flow.noise"],
        }
    }

    /// Sample rate (Hz); every one is a whole number of ns per sample.
    fn fs(self) -> f64 {
        match self {
            Dataset::MotorCurrent | Dataset::SpeedDrift => 20_000.0,
            Dataset::Vibration => 25_000.0,
            Dataset::Aperiodic => 10_000.0,
        }
    }

    fn step_ns(self) -> i64 {
        (1e9 / self.fs()).round() as i64
    }

    /// RMS of the white noise added (channel units): the noise floor.
    fn noise_rms(self) -> f64 {
        match self {
            Dataset::MotorCurrent => 1e-3 * sines_rms(&CURRENT_HARMONICS),
            Dataset::Vibration => vibration_noise_rms(),
            Dataset::SpeedDrift => 1e-3 * sines_rms(&DRIFT_HARMONICS),
            Dataset::Aperiodic => 1e-3,
        }
    }

    /// Samples of channel `ch`, `n` of them, as the source stores them (f32).
    fn generate(self, ch: usize, n: usize) -> Vec<f32> {
        let fs = self.fs();
        let mut rng = ChaCha8Rng::seed_from_u64(SEED + 100 * self as u64 + ch as u64);
        let normal = |s: f64| Normal::new(0.0, s).expect("a positive standard deviation");
        let tau = std::f64::consts::TAU;
        let mut x = vec![0.0f64; n];
        match self {
            Dataset::MotorCurrent => {
                // A grid is never exactly at nominal, and the logger's clock is not locked
                // to it: 49.97 Hz, so that no whole number of samples makes a period.
                let f0 = 49.97;
                let shift = -tau / 3.0 * ch as f64;
                let phases = [0.0, 0.7, -1.1, 2.0, 0.3];
                let noise = normal(self.noise_rms());
                for (i, v) in x.iter_mut().enumerate() {
                    let w = tau * f0 * i as f64 / fs;
                    let mut s = 0.0;
                    for (&(h, a), &p) in CURRENT_HARMONICS.iter().zip(&phases) {
                        s += a * (h * (w + shift) + p).sin();
                    }
                    *v = s + noise.sample(&mut rng);
                }
            }
            Dataset::Vibration => {
                let f0 = 29.5;
                let phases = [0.4, 1.3, -0.6, 2.2];
                let noise = normal(self.noise_rms());
                for (i, v) in x.iter_mut().enumerate() {
                    let w = tau * f0 * i as f64 / fs;
                    let mut s = 0.0;
                    for (&(h, a), &p) in SHAFT_HARMONICS.iter().zip(&phases) {
                        s += a * (h * w + p).sin();
                    }
                    *v = s + noise.sample(&mut rng);
                }
                // Outer-race impacts: 3.3 kHz resonance ringing down with τ = 0.4 ms.
                let period = fs / (3.58 * f0);
                let (f_res, decay) = (3300.0, 0.4e-3 * fs);
                let len = (10.0 * decay) as usize;
                let mut t = period * rng.random_range(0.0..1.0);
                while (t as usize) < n {
                    let amp = 0.25 * rng.random_range(0.7..1.3);
                    let i0 = t.ceil() as usize;
                    for (j, v) in x.iter_mut().skip(i0).take(len).enumerate() {
                        let dt = (i0 + j) as f64 - t;
                        *v += amp * (-dt / decay).exp() * (tau * f_res * dt / fs).sin();
                    }
                    t += period * (1.0 + rng.random_range(-0.01..0.01));
                }
            }
            Dataset::SpeedDrift => {
                let (f0, half_period) = (25.0, 10.0);
                let phases = [0.0, 0.9, -0.4, 1.7];
                let noise = normal(self.noise_rms());
                let mut phase = 0.0f64;
                for (i, v) in x.iter_mut().enumerate() {
                    // Triangle between −1 and +1: up over 10 s, down over 10 s.
                    let u = (i as f64 / fs / half_period) % 2.0;
                    let tri = if u < 1.0 {
                        2.0 * u - 1.0
                    } else {
                        3.0 - 2.0 * u
                    };
                    let mut s = 0.0;
                    for (&(h, a), &p) in DRIFT_HARMONICS.iter().zip(&phases) {
                        s += a * (h * phase + p).sin();
                    }
                    *v = s + noise.sample(&mut rng);
                    phase = (phase + tau * f0 * (1.0 + 0.1 * tri) / fs) % (tau * 1e6);
                }
            }
            Dataset::Aperiodic => {
                let rho: f64 = 0.9;
                let drive = normal((1.0 - rho * rho).sqrt());
                let noise = normal(self.noise_rms());
                let mut y = drive.sample(&mut rng) / (1.0 - rho * rho).sqrt();
                for v in x.iter_mut() {
                    y = rho * y + drive.sample(&mut rng);
                    *v = y + noise.sample(&mut rng);
                }
            }
        }
        x.into_iter().map(|v| v as f32).collect()
    }
}

/// One input in memory: per channel (in name order) its f32 samples.
struct Input {
    ds: Dataset,
    data: Vec<Vec<f32>>,
}

impl Input {
    fn new(ds: Dataset, total: usize) -> Input {
        let nch = ds.channels().len();
        let per = total / nch;
        let data = (0..nch)
            .into_par_iter()
            .map(|c| ds.generate(c, per))
            .collect();
        Input { ds, data }
    }

    fn samples(&self) -> usize {
        self.data.iter().map(Vec::len).sum()
    }

    fn time(&self, i: usize) -> i64 {
        START_NS + i as i64 * self.ds.step_ns()
    }

    /// The run of channel `c` for the in-memory baselines.
    fn run(&self, c: usize) -> Run {
        let x = &self.data[c];
        Run {
            times: (0..x.len()).map(|i| self.time(i)).collect(),
            values: x.iter().map(|&v| v as f64).collect(),
            specials: Vec::new(),
        }
    }
}

fn source_schema() -> Arc<Schema> {
    Arc::new(Schema::new(vec![
        Field::new(
            "time",
            DataType::Timestamp(TimeUnit::Nanosecond, Some("UTC".into())),
            false,
        ),
        Field::new("channel", DataType::Utf8, false),
        Field::new("value", DataType::Float32, true),
    ]))
}

fn zstd_props(level: i32) -> WriterProperties {
    WriterProperties::builder()
        .set_compression(Compression::ZSTD(
            ZstdLevel::try_new(level).unwrap_or_default(),
        ))
        .build()
}

/// Write rows `(time, channel, value)` with the parquet crate; `by_time`: rows in time order
/// with the channels interleaved (a logger's file), else by channel then time (what
/// `decode` writes). Written to a temporary name, fsynced and renamed, as `decode` does.
fn write_rows(path: &Path, input: &Input, by_time: bool, level: i32) -> Result<()> {
    let schema = source_schema();
    let tmp = path.with_extension("tmp");
    let file = File::create(&tmp).with_context(|| format!("creating {}", tmp.display()))?;
    let mut w = ArrowWriter::try_new(file.try_clone()?, schema.clone(), Some(zstd_props(level)))?;
    let names = input.ds.channels();
    let nch = names.len();
    let per = input.data[0].len();
    let total = per * nch;
    let mut batch = |rows: std::ops::Range<usize>, row: &dyn Fn(usize) -> (usize, usize)| {
        let idx: Vec<(usize, usize)> = rows.map(row).collect();
        let times =
            TimestampNanosecondArray::from_iter_values(idx.iter().map(|&(i, _)| input.time(i)))
                .with_timezone("UTC");
        let chan = StringArray::from_iter_values(idx.iter().map(|&(_, c)| names[c]));
        let vals = Float32Array::from_iter_values(idx.iter().map(|&(i, c)| input.data[c][i]));
        let b = RecordBatch::try_new(
            schema.clone(),
            vec![Arc::new(times), Arc::new(chan), Arc::new(vals)],
        )?;
        w.write(&b)?;
        anyhow::Ok(())
    };
    if by_time {
        for s in (0..total).step_by(BATCH_ROWS) {
            batch(s..(s + BATCH_ROWS).min(total), &|r| (r / nch, r % nch))?;
        }
    } else {
        for c in 0..nch {
            for s in (0..per).step_by(BATCH_ROWS) {
                batch(s..(s + BATCH_ROWS).min(per), &|i| (i, c))?;
            }
        }
    }
    w.close()?;
    file.sync_all()?;
    drop(file);
    std::fs::rename(&tmp, path)?;
    Ok(())
}

/// The floor of any job that reads the file: every value read and summed.
fn bare_scan(path: &Path) -> Result<u64> {
    let reader = ParquetRecordBatchReaderBuilder::try_new(File::open(path)?)?
        .with_batch_size(BATCH_ROWS)
        .build()?;
    let (mut t_sum, mut v_sum, mut names, mut rows) = (0i64, 0.0f64, 0usize, 0u64);
    for b in reader {
        let b = b?;
        rows += b.num_rows() as u64;
        let t = b.column(0).as_primitive::<TimestampNanosecondType>();
        t_sum = t.values().iter().fold(t_sum, |a, &v| a.wrapping_add(v));
        let c = b.column(1).as_string::<i32>();
        names += c.iter().map(|s| s.map_or(0, str::len)).sum::<usize>();
        let v = b.column(2).as_primitive::<Float32Type>();
        v_sum += v.iter().map(|x| x.unwrap_or(0.0) as f64).sum::<f64>();
    }
    black_box((t_sum, v_sum, names));
    Ok(rows)
}

// ---------------------------------------------------------------------------------------
// Measurements
// ---------------------------------------------------------------------------------------

fn settings(budget: BudgetKind) -> Result<Settings> {
    let o = match budget {
        BudgetKind::Rel(r) => EncodeOptions {
            budget_rel: Some(r),
            ..Default::default()
        },
        BudgetKind::Abs(a) => EncodeOptions {
            budget_rms: Some(a),
            ..Default::default()
        },
    };
    Ok(o.resolve()?)
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(tag = "kind", content = "value", rename_all = "lowercase")]
enum BudgetKind {
    /// Fraction of each segment's RMS.
    Rel(f64),
    /// Absolute RMS (channel units).
    Abs(f64),
}

impl BudgetKind {
    fn label(self) -> String {
        match self {
            BudgetKind::Rel(r) => format!("{}%", r * 100.0),
            BudgetKind::Abs(a) => format!("{a:.3e}"),
        }
    }
}

/// Seconds of the fastest of `reps` runs of `f`.
fn timed<T>(reps: usize, mut f: impl FnMut() -> Result<T>) -> Result<(f64, T)> {
    let mut best = f64::INFINITY;
    let mut last = None;
    for _ in 0..reps.max(1) {
        let t = Instant::now();
        let v = f()?;
        best = best.min(t.elapsed().as_secs_f64());
        last = Some(v);
    }
    last.map(|v| (best, v)).ok_or_else(|| anyhow!("no run"))
}

#[derive(Debug, Clone, Serialize)]
struct SpeedRow {
    dataset: &'static str,
    samples: usize,
    source_bytes: u64,
    archive_bytes: u64,
    encode_s: f64,
    /// CPU seconds of the process during the encode over its wall time.
    encode_cpus_used: f64,
    decode_s: f64,
    scan_s: f64,
    write_s: f64,
    encode_samples_per_s: f64,
    decode_samples_per_s: f64,
    encode_over_scan: f64,
    decode_over_write: f64,
    ratio_vs_raw_f32: f64,
    worst_error_over_budget: f64,
}

#[derive(Debug, Clone, Serialize)]
struct SizeRow {
    dataset: &'static str,
    samples: usize,
    budget: BudgetKind,
    /// The budget as a fraction of the signal's RMS (for plotting; exact for `rel`).
    budget_rel_equiv: f64,
    /// Budget over the generated noise RMS.
    budget_over_noise: f64,
    raw_f32_bytes: usize,
    archive_bytes: u64,
    payload_bytes: usize,
    /// Empirical order-0 entropy of the archive's integer codes (bytes).
    code_entropy_bytes: f64,
    lossless_parquet_bytes: usize,
    time_domain_zstd19_bytes: usize,
    rate_distortion_bytes: f64,
    worst_error_over_budget: f64,
    encode_s: f64,
}

impl SizeRow {
    fn ratio(&self, bytes: f64) -> f64 {
        self.raw_f32_bytes as f64 / bytes
    }
}

#[derive(Debug, Clone, Serialize)]
struct MemoryRow {
    dataset: &'static str,
    samples: usize,
    max_rss_bytes: u64,
    wall_s: f64,
}

#[derive(Debug, Clone, Serialize)]
struct ThreadRow {
    dataset: &'static str,
    samples: usize,
    threads: usize,
    one_thread_s: f64,
    all_threads_s: f64,
    /// CPU seconds (user + system) of each child.
    one_thread_cpu_s: f64,
    all_threads_cpu_s: f64,
    speedup: f64,
    archives_identical: bool,
}

/// What the peak guard costs: the same source at the default budget, with peak limits at a
/// few multiples of the budget (in channel units, on the signal's RMS).
#[derive(Debug, Clone, Serialize)]
struct GuardRow {
    dataset: &'static str,
    samples: usize,
    /// The peak limit over the budget's RMS error (`budget_rel · signal RMS`).
    peak_over_budget: f64,
    peak_max: f64,
    unguarded_bytes: u64,
    archive_bytes: u64,
    corrected_samples: usize,
    /// Largest |error| of the unguarded archive's segments, as `verify` measures it.
    unguarded_max_abs: f64,
}

/// Peak limits of the guard table, as multiples of the default budget's RMS error.
const GUARD_MULTIPLES: [f64; 3] = [6.0, 4.0, 3.0];

#[derive(Debug, Clone, Serialize)]
struct Target {
    what: String,
    goal: String,
    measured: String,
    met: bool,
}

#[derive(Debug, Clone, Serialize)]
struct Machine {
    cpu: String,
    threads: usize,
    ram_gib: f64,
}

#[derive(Debug, Clone, Serialize)]
struct Report {
    mode: &'static str,
    machine: Machine,
    default_budget_rel: f64,
    speed: Vec<SpeedRow>,
    sizes: Vec<SizeRow>,
    memory: Vec<MemoryRow>,
    threads: Vec<ThreadRow>,
    guards: Vec<GuardRow>,
    targets: Vec<Target>,
    total_s: f64,
    /// 1-minute load average at the start and at the end of the run.
    load_average: (f64, f64),
}

fn machine() -> Machine {
    let cpu = std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split_once(':'))
                .map(|(_, v)| v.trim().to_string())
        })
        .unwrap_or_else(|| "unknown".into());
    let ram_gib = std::fs::read_to_string("/proc/meminfo")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("MemTotal:"))
                .and_then(|l| l.split_whitespace().nth(1))
                .and_then(|v| v.parse::<f64>().ok())
        })
        .map_or(0.0, |kib| kib / (1024.0 * 1024.0));
    Machine {
        cpu,
        threads: rayon::current_num_threads(),
        ram_gib,
    }
}

/// Frame bytes of an archive and the order-0 entropy (bytes) of the integer codes they hold.
fn payload_bytes(archive: &Path) -> Result<(usize, f64)> {
    let a = Archive::open(archive, DigestPolicy::Skip)?;
    let p = cyclarc::archive::payload_stats(&a)?;
    Ok((p.frame_bytes, p.order0_entropy_bytes))
}

/// The `cyclarc` binary next to this one (built first when run under cargo).
fn cyclarc_binary() -> Result<PathBuf> {
    let me = std::env::current_exe()?;
    let dir = me
        .parent()
        .ok_or_else(|| anyhow!("no folder around {}", me.display()))?;
    let bin = dir.join(format!("cyclarc{}", std::env::consts::EXE_SUFFIX));
    if let Some(cargo) = std::env::var_os("CARGO") {
        // Under `cargo run`: make sure the binary matches the library measured in-process.
        let mut cmd = Command::new(cargo);
        cmd.args(["build", "--quiet", "--bin", "cyclarc"]);
        if dir.file_name().is_some_and(|n| n == "release") {
            cmd.arg("--release");
        }
        let status = cmd.status().context("running cargo build --bin cyclarc")?;
        if !status.success() {
            bail!("cargo build --bin cyclarc failed");
        }
    }
    if !bin.exists() {
        bail!(
            "{} not found: build it with `cargo build --release --bin cyclarc`",
            bin.display()
        );
    }
    Ok(bin)
}

/// CPU seconds (user + system) used so far by this process (`RUSAGE_SELF`) or by its
/// reaped children (`RUSAGE_CHILDREN`).
fn cpu_seconds(who: libc::c_int) -> f64 {
    // SAFETY: getrusage only fills the plain-data struct it is given.
    let mut u: libc::rusage = unsafe { std::mem::zeroed() };
    if unsafe { libc::getrusage(who, &mut u) } != 0 {
        return f64::NAN;
    }
    let tv = |t: libc::timeval| t.tv_sec as f64 + t.tv_usec as f64 * 1e-6;
    tv(u.ru_utime) + tv(u.ru_stime)
}

/// The 1-minute load average (other work on the machine skews every timing).
fn load_average() -> f64 {
    std::fs::read_to_string("/proc/loadavg")
        .ok()
        .and_then(|s| s.split_whitespace().next().and_then(|v| v.parse().ok()))
        .unwrap_or(f64::NAN)
}

/// Peak resident set (VmHWM) of a live process, bytes; `None` once it has exited.
fn vm_hwm(pid: u32) -> Option<u64> {
    let s = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    let kib: u64 = s
        .lines()
        .find(|l| l.starts_with("VmHWM:"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()?;
    Some(kib * 1024)
}

/// Run the `cyclarc` binary; returns (wall seconds, CPU seconds, peak resident bytes).
///
/// The peak is the child's own `VmHWM`, polled every millisecond until it exits. (The
/// `ru_maxrss` that `wait4`/`getrusage(RUSAGE_CHILDREN)` report is no use here: Linux
/// carries the parent's high-water mark into a child spawned with a shared or copied address
/// space, so every child would show at least this benchmark's own peak.)
fn run_child(bin: &Path, args: &[&str], log: &Path) -> Result<(f64, f64, u64)> {
    let cpu0 = cpu_seconds(libc::RUSAGE_CHILDREN);
    let t = Instant::now();
    let mut child = Command::new(bin)
        .args(args)
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(File::create(log)?)
        .spawn()
        .with_context(|| format!("starting {}", bin.display()))?;
    let pid = child.id();
    let mut peak = 0u64;
    let status = loop {
        if let Some(h) = vm_hwm(pid) {
            peak = peak.max(h);
        }
        if let Some(st) = child.try_wait()? {
            break st;
        }
        std::thread::sleep(std::time::Duration::from_millis(1));
    };
    let wall = t.elapsed().as_secs_f64();
    let cpu = cpu_seconds(libc::RUSAGE_CHILDREN) - cpu0;
    if !status.success() {
        let msg = std::fs::read_to_string(log).unwrap_or_default();
        bail!("cyclarc {} failed ({status}): {msg}", args.join(" "));
    }
    Ok((wall, cpu, peak))
}

struct Bench {
    dir: PathBuf,
    log_t0: Instant,
}

impl Bench {
    fn log(&self, msg: &str) {
        eprintln!("[{:7.1} s] {msg}", self.log_t0.elapsed().as_secs_f64());
    }

    fn source_path(&self, ds: Dataset, n: usize) -> PathBuf {
        self.dir.join(format!("{}-{n}.parquet", ds.name()))
    }

    /// Throughput and overheads at the default budget.
    fn speed(&self, input: &Input, src: &Path) -> Result<SpeedRow> {
        let n = input.samples();
        let reps = if n <= 2_000_000 { 2 } else { 1 };
        let ds = input.ds;
        let arc = self.dir.join(format!("{}-{n}.cyclarc.parquet", ds.name()));
        let dec = self.dir.join(format!("{}-{n}.decoded.parquet", ds.name()));
        let written = self.dir.join(format!("{}-{n}.written.parquet", ds.name()));
        let s = settings(BudgetKind::Rel(DEFAULT_REL))?;
        let control = JobControl { progress: false };
        let (scan_s, rows) = timed(reps, || bare_scan(src))?;
        if rows as usize != n {
            bail!("{}: scanned {rows} rows, wrote {n}", src.display());
        }
        let cpu0 = cpu_seconds(libc::RUSAGE_SELF);
        let t0 = Instant::now();
        let (encode_s, summary) = timed(reps, || Ok(encode_file(src, &arc, &s, &control)?))?;
        let encode_cpus_used = (cpu_seconds(libc::RUSAGE_SELF) - cpu0) / t0.elapsed().as_secs_f64();
        let (decode_s, d) = timed(reps, || {
            Ok(decode_file(&arc, &dec, &[], None, None, false)?)
        })?;
        if d.rows as usize != n {
            bail!("{}: decoded {} rows of {n}", arc.display(), d.rows);
        }
        let (write_s, ()) = timed(reps, || write_rows(&written, input, false, 3))?;
        for p in [&dec, &written] {
            let _ = std::fs::remove_file(p);
        }
        let _ = std::fs::remove_file(digest_path(&arc));
        let _ = std::fs::remove_file(&arc);
        Ok(SpeedRow {
            dataset: ds.name(),
            samples: n,
            source_bytes: summary.source_bytes,
            archive_bytes: summary.archive_bytes,
            encode_s,
            encode_cpus_used,
            decode_s,
            scan_s,
            write_s,
            encode_samples_per_s: n as f64 / encode_s,
            decode_samples_per_s: n as f64 / decode_s,
            encode_over_scan: encode_s / scan_s,
            decode_over_write: decode_s / write_s,
            ratio_vs_raw_f32: (4 * n) as f64 / summary.archive_bytes as f64,
            worst_error_over_budget: summary.worst_error_over_budget,
        })
    }

    /// Bytes of the peak guard at [`GUARD_MULTIPLES`] of the default budget.
    fn guards(&self, input: &Input, src: &Path) -> Result<Vec<GuardRow>> {
        let ds = input.ds;
        let n = input.samples();
        let control = JobControl { progress: false };
        let arc = self
            .dir
            .join(format!("{}-{n}.guard.cyclarc.parquet", ds.name()));
        let base = settings(BudgetKind::Rel(DEFAULT_REL))?;
        let unguarded = encode_file(src, &arc, &base, &control)?;
        let fft = RealFft::shared();
        let check = cyclarc::jobs::verify(&arc, src, fft)?;
        let unguarded_max_abs = check
            .channels
            .iter()
            .map(|c| c.max_abs_error)
            .fold(0.0, f64::max);
        let budget_error = DEFAULT_REL * signal_rms(input);
        let mut rows = Vec::new();
        for m in GUARD_MULTIPLES {
            let peak_max = m * budget_error;
            let s = EncodeOptions {
                budget_rel: Some(DEFAULT_REL),
                peak_max: Some(peak_max),
                ..Default::default()
            }
            .resolve()?;
            let summary = encode_file(src, &arc, &s, &control)?;
            let check = cyclarc::jobs::verify(&arc, src, fft)?;
            if !check.passed() {
                bail!(
                    "{}: guarded archive fails verify: {:?}",
                    arc.display(),
                    check.findings
                );
            }
            let a = Archive::open(&arc, DigestPolicy::Report)?;
            let corrected = cyclarc::archive::segment_list(&a)?
                .iter()
                .filter_map(|g| g.corrected)
                .sum();
            rows.push(GuardRow {
                dataset: ds.name(),
                samples: n,
                peak_over_budget: m,
                peak_max,
                unguarded_bytes: unguarded.archive_bytes,
                archive_bytes: summary.archive_bytes,
                corrected_samples: corrected,
                unguarded_max_abs,
            });
        }
        let _ = std::fs::remove_file(digest_path(&arc));
        let _ = std::fs::remove_file(&arc);
        Ok(rows)
    }

    /// Archive size against the alternatives, for every budget.
    fn sizes(&self, input: &Input, src: &Path) -> Result<Vec<SizeRow>> {
        let ds = input.ds;
        let n = input.samples();
        let mut budgets: Vec<BudgetKind> =
            REL_BUDGETS.iter().map(|&r| BudgetKind::Rel(r)).collect();
        budgets.push(BudgetKind::Abs(BELOW_FLOOR * ds.noise_rms()));
        let control = JobControl { progress: false };
        let arc = self
            .dir
            .join(format!("{}-{n}.sweep.cyclarc.parquet", ds.name()));
        let mut rows = Vec::new();
        for &b in &budgets {
            let s = settings(b)?;
            let (encode_s, summary) = timed(1, || Ok(encode_file(src, &arc, &s, &control)?))?;
            let (payload, entropy) = payload_bytes(&arc)?;
            let (rel, over_noise) = match b {
                BudgetKind::Rel(r) => {
                    let rms = signal_rms(input);
                    (r, r * rms / ds.noise_rms())
                }
                BudgetKind::Abs(a) => (a / signal_rms(input), a / ds.noise_rms()),
            };
            rows.push(SizeRow {
                dataset: ds.name(),
                samples: n,
                budget: b,
                budget_rel_equiv: rel,
                budget_over_noise: over_noise,
                raw_f32_bytes: 4 * n,
                archive_bytes: summary.archive_bytes,
                payload_bytes: payload,
                code_entropy_bytes: entropy,
                lossless_parquet_bytes: 0,
                time_domain_zstd19_bytes: 0,
                rate_distortion_bytes: 0.0,
                worst_error_over_budget: summary.worst_error_over_budget,
                encode_s,
            });
        }
        let _ = std::fs::remove_file(digest_path(&arc));
        let _ = std::fs::remove_file(&arc);
        // The baselines, channel by channel, in parallel over (budget, channel).
        let runs: Vec<Run> = (0..input.data.len()).map(|c| input.run(c)).collect();
        let lossless: usize = runs
            .par_iter()
            .map(|r| lossless_parquet_bytes(&r.values))
            .sum();
        let fft = RealFft::shared();
        let fs = ds.fs();
        let jobs: Vec<(usize, usize)> = (0..budgets.len())
            .flat_map(|b| (0..runs.len()).map(move |c| (b, c)))
            .collect();
        let done: Vec<(usize, usize, f64)> = jobs
            .par_iter()
            .map(|&(bi, c)| {
                let s = settings(budgets[bi])?;
                let p = RunParams {
                    channel: ds.channels()[c],
                    value_type: ValueType::F32,
                    sample_rate: Some(fs),
                    budget: s.codec.budget,
                    peak_max: s.codec.peak_max,
                    protection: None,
                    events: false,
                    params: &s.codec,
                    fft,
                };
                Ok((
                    bi,
                    time_domain_bytes(&runs[c], &p),
                    rate_distortion_bytes(&runs[c], &p, fft),
                ))
            })
            .collect::<Result<_>>()?;
        for (bi, td, rd) in done {
            rows[bi].time_domain_zstd19_bytes += td;
            rows[bi].rate_distortion_bytes += rd;
        }
        for r in &mut rows {
            r.lossless_parquet_bytes = lossless;
        }
        Ok(rows)
    }
}

/// Samples actually generated for a wanted total (whole samples per channel).
fn actual(ds: Dataset, total: usize) -> usize {
    total / ds.channels().len() * ds.channels().len()
}

/// RMS of the whole input (all channels).
fn signal_rms(input: &Input) -> f64 {
    let (s, n) = input
        .data
        .iter()
        .flatten()
        .fold((0.0, 0usize), |(s, n), &v| (s + v as f64 * v as f64, n + 1));
    (s / n.max(1) as f64).sqrt()
}

// ---------------------------------------------------------------------------------------
// Output
// ---------------------------------------------------------------------------------------

fn si(x: f64) -> String {
    let a = x.abs();
    if a >= 0.9995e9 {
        format!("{:.2}G", x / 1e9)
    } else if a >= 0.9995e6 {
        format!("{:.2}M", x / 1e6)
    } else if a >= 1e3 {
        format!("{:.1}k", x / 1e3)
    } else {
        format!("{x:.0}")
    }
}

fn bytes(x: f64) -> String {
    let a = x.abs();
    if a >= 1e9 {
        format!("{:.2} GB", x / 1e9)
    } else if a >= 1e6 {
        format!("{:.2} MB", x / 1e6)
    } else if a >= 1e3 {
        format!("{:.1} kB", x / 1e3)
    } else {
        format!("{x:.0} B")
    }
}

fn render(r: &Report) -> String {
    use std::fmt::Write;
    let mut o = String::new();
    let _ = writeln!(
        o,
        "cyclarc-bench ({}) on {}, {} threads, {:.0} GiB RAM; total {:.0} s; \
         load average {:.2} at the start, {:.2} at the end",
        r.mode,
        r.machine.cpu,
        r.machine.threads,
        r.machine.ram_gib,
        r.total_s,
        r.load_average.0,
        r.load_average.1
    );
    let _ = writeln!(
        o,
        "\nSPEED at budget {} % of segment RMS (encode_file / decode_file, all threads; \
         scan and write: parquet crate, one thread)",
        r.default_budget_rel * 100.0
    );
    let _ = writeln!(
        o,
        "{:<14} {:>8} {:>10} {:>10} {:>8} {:>5} {:>8} {:>6} {:>8} {:>8} {:>6} {:>9} {:>7}",
        "dataset",
        "samples",
        "enc smp/s",
        "dec smp/s",
        "enc s",
        "CPUs",
        "scan s",
        "×scan",
        "dec s",
        "write s",
        "×write",
        "archive",
        "×f32"
    );
    for s in &r.speed {
        let _ = writeln!(
            o,
            "{:<14} {:>8} {:>10} {:>10} {:>8.3} {:>5.2} {:>8.3} {:>6.2} {:>8.3} {:>8.3} {:>6.2} {:>9} {:>7.1}",
            s.dataset,
            si(s.samples as f64),
            si(s.encode_samples_per_s),
            si(s.decode_samples_per_s),
            s.encode_s,
            s.encode_cpus_used,
            s.scan_s,
            s.encode_over_scan,
            s.decode_s,
            s.write_s,
            s.decode_over_write,
            bytes(s.archive_bytes as f64),
            s.ratio_vs_raw_f32
        );
    }
    if let Some(n) = r.sizes.first().map(|s| s.samples) {
        let _ = writeln!(
            o,
            "\nSIZE, ratio = raw f32 bytes / bytes (about {} samples per dataset). cyclarc = whole \
             archive file; (b) lossless Parquet BYTE_STREAM_SPLIT+zstd; (c) time-domain \
             quantizer step √12·ε + zstd -19; (d) Gaussian R(D), reverse water-filling; pay/H0 = \
             payload bytes over the order-0 entropy of its integer codes",
            si(n as f64)
        );
    }
    let _ = writeln!(
        o,
        "{:<14} {:>9} {:>6} {:>10} {:>7} {:>8} {:>7} {:>8} {:>8} {:>8} {:>7} {:>7} {:>7}",
        "dataset",
        "budget",
        "ε/σn",
        "archive",
        "cyclarc",
        "payload",
        "pay/H0",
        "(b)lossl",
        "(c)td19",
        "(d)R(D)",
        "(c)/arc",
        "(d)/arc",
        "err/ε"
    );
    for s in &r.sizes {
        let _ = writeln!(
            o,
            "{:<14} {:>9} {:>6.2} {:>10} {:>7.1} {:>8.1} {:>7.3} {:>8.2} {:>8.1} {:>8.1} {:>7.2} {:>7.2} {:>7.3}",
            s.dataset,
            s.budget.label(),
            s.budget_over_noise,
            bytes(s.archive_bytes as f64),
            s.ratio(s.archive_bytes as f64),
            s.ratio(s.payload_bytes as f64),
            s.payload_bytes as f64 / s.code_entropy_bytes.max(1.0),
            s.ratio(s.lossless_parquet_bytes as f64),
            s.ratio(s.time_domain_zstd19_bytes as f64),
            s.ratio(s.rate_distortion_bytes),
            s.time_domain_zstd19_bytes as f64 / s.archive_bytes as f64,
            s.rate_distortion_bytes / s.archive_bytes as f64,
            s.worst_error_over_budget
        );
    }
    let _ = writeln!(
        o,
        "\nMEMORY of `cyclarc encode` (child process, peak resident set VmHWM)"
    );
    let _ = writeln!(
        o,
        "{:<14} {:>8} {:>10} {:>8}",
        "dataset", "samples", "peak RSS", "wall s"
    );
    for m in &r.memory {
        let _ = writeln!(
            o,
            "{:<14} {:>8} {:>10} {:>8.2}",
            m.dataset,
            si(m.samples as f64),
            bytes(m.max_rss_bytes as f64),
            m.wall_s
        );
    }
    let _ = writeln!(
        o,
        "\nTHREADS: `cyclarc --threads 1 encode` against all threads"
    );
    let _ = writeln!(
        o,
        "{:<14} {:>8} {:>8} {:>8} {:>8} {:>8} {:>8} {:>8} {:>10}",
        "dataset",
        "samples",
        "threads",
        "1 thr s",
        "1 cpu s",
        "all s",
        "all cpu",
        "speedup",
        "identical"
    );
    for t in &r.threads {
        let _ = writeln!(
            o,
            "{:<14} {:>8} {:>8} {:>8.2} {:>8.2} {:>8.2} {:>8.2} {:>8.2} {:>10}",
            t.dataset,
            si(t.samples as f64),
            t.threads,
            t.one_thread_s,
            t.one_thread_cpu_s,
            t.all_threads_s,
            t.all_threads_cpu_s,
            t.speedup,
            if t.archives_identical { "yes" } else { "NO" }
        );
    }
    let _ = writeln!(
        o,
        "\nPEAK GUARD at budget {} % of segment RMS: limit = multiple × budget_rel × signal RMS \
         (verify passed on every guarded archive)",
        r.default_budget_rel * 100.0
    );
    let _ = writeln!(
        o,
        "{:<14} {:>8} {:>8} {:>11} {:>13} {:>11} {:>11} {:>8} {:>10}",
        "dataset",
        "samples",
        "× budget",
        "peak max",
        "unguarded max",
        "unguarded B",
        "guarded B",
        "cost",
        "corrected"
    );
    for g in &r.guards {
        let _ = writeln!(
            o,
            "{:<14} {:>8} {:>8.1} {:>11.4e} {:>13.4e} {:>11} {:>11} {:>7.1}% {:>10}",
            g.dataset,
            si(g.samples as f64),
            g.peak_over_budget,
            g.peak_max,
            g.unguarded_max_abs,
            g.unguarded_bytes,
            g.archive_bytes,
            100.0 * (g.archive_bytes as f64 / g.unguarded_bytes as f64 - 1.0),
            g.corrected_samples
        );
    }
    let _ = writeln!(o, "\nTARGETS");
    for t in &r.targets {
        let _ = writeln!(
            o,
            "  [{}] {}: goal {}; measured {}",
            if t.met { "met " } else { "MISS" },
            t.what,
            t.goal,
            t.measured
        );
    }
    let _ = writeln!(
        o,
        "\nR(D): T. M. Cover and J. A. Thomas, Elements of Information Theory, 2nd ed., \
         Wiley 2006, §10.3.3 (parallel Gaussian sources, reverse water-filling).\n\
         Step √12·ε: the variance Δ²/12 of uniform quantization error (B. Widrow and I. Kollár, \
         Quantization Noise, Cambridge 2008)."
    );
    o
}

fn targets(r: &Report) -> Vec<Target> {
    let mut t = Vec::new();
    let worst = |v: &mut dyn Iterator<Item = (f64, String)>| {
        v.fold((f64::NEG_INFINITY, String::new()), |a, b| {
            if b.0 > a.0 {
                b
            } else {
                a
            }
        })
    };
    let (e, at) = worst(&mut r.speed.iter().map(|s| {
        (
            s.encode_over_scan,
            format!("{} {}", s.dataset, si(s.samples as f64)),
        )
    }));
    t.push(Target {
        what: "encode time / bare-scan time".into(),
        goal: "≤ 3".into(),
        measured: format!("worst {e:.2} ({at})"),
        met: e <= 3.0,
    });
    // Where the codes are most of the payload; elsewhere segment headers and timestamps are.
    let (h, at) = worst(
        &mut r
            .sizes
            .iter()
            .filter(|s| s.code_entropy_bytes * 2.0 >= s.payload_bytes as f64)
            .map(|s| {
                (
                    s.payload_bytes as f64 / s.code_entropy_bytes,
                    format!("{} {}", s.dataset, s.budget.label()),
                )
            }),
    );
    t.push(Target {
        what: "payload / order-0 entropy of its codes (codes ≥ half the payload)".into(),
        goal: "≤ 1.03".into(),
        measured: format!("worst {h:.3} ({at})"),
        met: h <= 1.03,
    });
    let (d, at) = worst(&mut r.speed.iter().map(|s| {
        (
            s.decode_over_write,
            format!("{} {}", s.dataset, si(s.samples as f64)),
        )
    }));
    t.push(Target {
        what: "decode time / write-same-rows time".into(),
        goal: "≤ 1.5".into(),
        measured: format!("worst {d:.2} ({at})"),
        met: d <= 1.5,
    });
    let (neg_sp, at) = worst(&mut r.threads.iter().map(|s| {
        (
            -s.speedup,
            format!("{} {}", s.dataset, si(s.samples as f64)),
        )
    }));
    let threads = r.threads.first().map_or(0, |t| t.threads);
    t.push(Target {
        what: format!("speedup of {threads} threads over 1"),
        goal: "≥ 1.8".into(),
        measured: format!("worst {:.2} ({at})", -neg_sp),
        met: -neg_sp >= 1.8,
    });
    t.push(Target {
        what: "archives identical across thread counts".into(),
        goal: "all".into(),
        measured: format!(
            "{} of {}",
            r.threads.iter().filter(|t| t.archives_identical).count(),
            r.threads.len()
        ),
        met: r.threads.iter().all(|t| t.archives_identical),
    });
    if let [a, b, ..] = r.memory.as_slice() {
        let g = b.max_rss_bytes as f64 / a.max_rss_bytes as f64;
        t.push(Target {
            what: format!(
                "peak memory growth, input {}× larger",
                (b.samples as f64 / a.samples as f64).round()
            ),
            goal: "≤ 1.2×".into(),
            measured: format!(
                "{g:.2}× ({} → {})",
                bytes(a.max_rss_bytes as f64),
                bytes(b.max_rss_bytes as f64)
            ),
            met: g <= 1.2,
        });
    }
    // Clearly above the noise floor (the 0.1 % budget sits right at it on the clean sets).
    let above = |s: &&SizeRow| s.budget_over_noise > 1.5;
    let periodic_clean = ["motor-current", "speed-drift"];
    let clean: Vec<&SizeRow> = r
        .sizes
        .iter()
        .filter(|s| periodic_clean.contains(&s.dataset))
        .filter(above)
        .collect();
    if !clean.is_empty() {
        let (w, at) = worst(&mut clean.iter().map(|s| {
            (
                -(s.time_domain_zstd19_bytes as f64 / s.archive_bytes as f64),
                format!("{} {}", s.dataset, s.budget.label()),
            )
        }));
        t.push(Target {
            what: "clean periodic, budget above noise: (c) / archive".into(),
            goal: "≥ 10".into(),
            measured: format!("worst {:.2} ({at})", -w),
            met: -w >= 10.0,
        });
        let (w, at) = worst(&mut clean.iter().map(|s| {
            (
                s.archive_bytes as f64 / s.rate_distortion_bytes,
                format!("{} {}", s.dataset, s.budget.label()),
            )
        }));
        t.push(Target {
            what: "clean periodic, budget above noise: archive / (d)".into(),
            goal: "< 1".into(),
            measured: format!("worst {w:.2} ({at})"),
            met: w < 1.0,
        });
    }
    let vib: Vec<&SizeRow> = r
        .sizes
        .iter()
        .filter(|s| s.dataset == "vibration")
        .filter(above)
        .collect();
    if !vib.is_empty() {
        let (w, at) = worst(&mut vib.iter().map(|s| {
            (
                -(s.time_domain_zstd19_bytes as f64 / s.archive_bytes as f64),
                s.budget.label(),
            )
        }));
        t.push(Target {
            what: "noisy vibration, budget above noise: (c) / archive".into(),
            goal: "≥ 2".into(),
            measured: format!("worst {:.2} (vibration {at})", -w),
            met: -w >= 2.0,
        });
    }
    let (w, at) = worst(&mut r.sizes.iter().map(|s| {
        (
            s.archive_bytes as f64 / s.time_domain_zstd19_bytes as f64,
            format!("{} {}", s.dataset, s.budget.label()),
        )
    }));
    t.push(Target {
        what: "every dataset and budget: archive / (c)".into(),
        goal: "≤ 1".into(),
        measured: format!("worst {w:.2} ({at})"),
        met: w <= 1.0,
    });
    t
}

fn plot(path: &Path, r: &Report) -> Result<()> {
    use plotters::prelude::*;
    let root = SVGBackend::new(path, (1200, 900)).into_drawing_area();
    root.fill(&WHITE)?;
    let areas = root.split_evenly((2, 2));
    for (area, ds) in areas.iter().zip(DATASETS) {
        let rows: Vec<&SizeRow> = r.sizes.iter().filter(|s| s.dataset == ds.name()).collect();
        if rows.is_empty() {
            continue;
        }
        let mut pts: Vec<(f64, [f64; 4])> = rows
            .iter()
            .map(|s| {
                (
                    s.budget_rel_equiv * 100.0,
                    [
                        s.ratio(s.archive_bytes as f64),
                        s.ratio(s.time_domain_zstd19_bytes as f64),
                        s.ratio(s.lossless_parquet_bytes as f64),
                        s.ratio(s.rate_distortion_bytes),
                    ],
                )
            })
            .collect();
        pts.sort_by(|a, b| a.0.total_cmp(&b.0));
        let xs = pts.iter().map(|p| p.0);
        let ys = pts.iter().flat_map(|p| p.1).filter(|v| v.is_finite());
        let (x0, x1) = xs.fold((f64::INFINITY, 0.0f64), |(a, b), x| (a.min(x), b.max(x)));
        let (y0, y1) = ys.fold((f64::INFINITY, 0.0f64), |(a, b), y| (a.min(y), b.max(y)));
        let mut chart = ChartBuilder::on(area)
            .caption(
                format!("{} ({} samples)", ds.name(), si(rows[0].samples as f64)),
                ("sans-serif", 20),
            )
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(56)
            .build_cartesian_2d(
                ((x0 / 1.5)..(x1 * 1.5)).log_scale(),
                ((y0 / 1.5).max(0.1)..(y1 * 1.5)).log_scale(),
            )?;
        chart
            .configure_mesh()
            .x_desc("budget, % of RMS")
            .y_desc("compression ratio vs raw f32")
            .draw()?;
        let methods = [
            ("cyclarc", RED),
            ("time-domain + zstd -19", BLUE),
            ("lossless Parquet", BLACK),
            ("R(D) Gaussian", GREEN),
        ];
        for (m, (name, color)) in methods.iter().enumerate() {
            let line: Vec<(f64, f64)> = pts.iter().map(|p| (p.0, p.1[m])).collect();
            let c = *color;
            chart
                .draw_series(LineSeries::new(line.clone(), c.stroke_width(2)))?
                .label(*name)
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], c));
            chart.draw_series(line.iter().map(|&p| Circle::new(p, 3, c.filled())))?;
        }
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.8))
            .border_style(BLACK)
            .position(SeriesLabelPosition::UpperLeft)
            .draw()?;
    }
    root.present()?;
    Ok(())
}

// ---------------------------------------------------------------------------------------
// Main
// ---------------------------------------------------------------------------------------

struct Plan {
    mode: &'static str,
    /// Sizes of the speed table (total samples per dataset).
    speed_sizes: Vec<usize>,
    /// Datasets measured at the largest speed size.
    largest_for: Vec<Dataset>,
    /// Size of the budget sweep.
    sweep_size: usize,
    /// Sizes of the memory measurement (10× apart).
    memory_sizes: [usize; 2],
    /// Size of the thread comparison.
    thread_size: usize,
}

fn main() -> Result<()> {
    let cli = Cli::parse();
    let t0 = Instant::now();
    let plan = if cli.full {
        Plan {
            mode: "full",
            speed_sizes: vec![1_000_000, 10_000_000, 100_000_000],
            largest_for: vec![Dataset::MotorCurrent, Dataset::Vibration],
            sweep_size: 10_000_000,
            memory_sizes: [10_000_000, 100_000_000],
            thread_size: 10_000_000,
        }
    } else {
        Plan {
            mode: "quick",
            speed_sizes: vec![1_000_000],
            largest_for: DATASETS.to_vec(),
            sweep_size: 1_000_000,
            memory_sizes: [1_000_000, 10_000_000],
            thread_size: 1_000_000,
        }
    };
    let (dir, temporary) = match &cli.out_dir {
        Some(d) => (d.clone(), false),
        None => (
            std::env::temp_dir().join(format!("cyclarc-bench-{}", std::process::id())),
            true,
        ),
    };
    std::fs::create_dir_all(&dir).with_context(|| format!("creating {}", dir.display()))?;
    let bench = Bench {
        dir: dir.clone(),
        log_t0: t0,
    };
    if let Some(spec) = &cli.write_input {
        let (name, n) = spec
            .split_once(':')
            .ok_or_else(|| anyhow!("--write-input wants DATASET:SAMPLES, got `{spec}`"))?;
        let ds = DATASETS
            .into_iter()
            .find(|d| d.name() == name)
            .ok_or_else(|| anyhow!("no dataset `{name}`"))?;
        let n: usize = n.parse().with_context(|| format!("samples `{n}`"))?;
        let input = Input::new(ds, n);
        let src = bench.source_path(ds, input.samples());
        write_rows(&src, &input, true, 3)?;
        println!("{}", src.display());
        return Ok(());
    }
    let result = run(&cli, &plan, &bench);
    if temporary {
        let _ = std::fs::remove_dir_all(&dir);
    }
    let mut report = result?;
    report.total_s = t0.elapsed().as_secs_f64();
    let text = render(&report);
    if cli.json {
        eprint!("{text}");
        println!("{}", serde_json::to_string_pretty(&report)?);
    } else {
        print!("{text}");
    }
    if let Some(svg) = &cli.svg {
        plot(svg, &report)?;
        eprintln!("plot written to {}", svg.display());
    }
    Ok(())
}

fn run(_cli: &Cli, plan: &Plan, bench: &Bench) -> Result<Report> {
    let load0 = load_average();
    let bin = cyclarc_binary()?;
    let mut speed = Vec::new();
    let mut sizes = Vec::new();
    let mut memory = Vec::new();
    let mut threads = Vec::new();
    let mut guards = Vec::new();
    let all_threads = rayon::current_num_threads();
    let largest = plan.speed_sizes.iter().copied().max().unwrap_or(0);
    let mut wanted: Vec<usize> = plan.speed_sizes.clone();
    wanted.extend([plan.sweep_size, plan.thread_size]);
    wanted.sort_unstable();
    wanted.dedup();
    for &n in &wanted {
        for ds in DATASETS {
            if n == largest && !plan.largest_for.contains(&ds) {
                continue;
            }
            bench.log(&format!("{} {}: generating", ds.name(), si(n as f64)));
            let input = Input::new(ds, n);
            let n = input.samples();
            let src = bench.source_path(ds, n);
            write_rows(&src, &input, true, 3)?;
            if plan.speed_sizes.iter().any(|&s| actual(ds, s) == n) {
                bench.log(&format!("{} {}: speed", ds.name(), si(n as f64)));
                speed.push(bench.speed(&input, &src)?);
            }
            if actual(ds, plan.sweep_size) == n {
                bench.log(&format!("{} {}: budget sweep", ds.name(), si(n as f64)));
                sizes.extend(bench.sizes(&input, &src)?);
                if matches!(ds, Dataset::MotorCurrent | Dataset::Vibration) {
                    bench.log(&format!("{} {}: peak guard", ds.name(), si(n as f64)));
                    guards.extend(bench.guards(&input, &src)?);
                }
            }
            if actual(ds, plan.thread_size) == n {
                bench.log(&format!("{} {}: threads", ds.name(), si(n as f64)));
                let a1 = bench.dir.join("threads-1.cyclarc.parquet");
                let an = bench.dir.join("threads-n.cyclarc.parquet");
                let src_s = src.to_string_lossy().into_owned();
                let log = bench.dir.join("child.log");
                let args = |out: &Path, t: usize| -> Vec<String> {
                    vec![
                        "--threads".into(),
                        t.to_string(),
                        "encode".into(),
                        src_s.clone(),
                        "--out".into(),
                        out.to_string_lossy().into_owned(),
                        "--budget-rel".into(),
                        DEFAULT_REL.to_string(),
                    ]
                };
                let run = |out: &Path, t: usize| {
                    let a = args(out, t);
                    let a: Vec<&str> = a.iter().map(String::as_str).collect();
                    run_child(&bin, &a, &log)
                };
                let (one, one_cpu, _) = run(&a1, 1)?;
                let (all, all_cpu, _) = run(&an, all_threads)?;
                let identical = std::fs::read(&a1)? == std::fs::read(&an)?;
                threads.push(ThreadRow {
                    dataset: ds.name(),
                    samples: n,
                    threads: all_threads,
                    one_thread_s: one,
                    all_threads_s: all,
                    one_thread_cpu_s: one_cpu,
                    all_threads_cpu_s: all_cpu,
                    speedup: one / all,
                    archives_identical: identical,
                });
                for p in [&a1, &an] {
                    let _ = std::fs::remove_file(digest_path(p));
                    let _ = std::fs::remove_file(p);
                }
            }
            drop(input);
            let keep = ds == Dataset::MotorCurrent
                && plan.memory_sizes.iter().any(|&m| actual(ds, m) == n);
            if !keep {
                let _ = std::fs::remove_file(&src);
            }
        }
    }
    // Peak memory of the binary at two sizes 10× apart (motor current).
    for &m in &plan.memory_sizes {
        let ds = Dataset::MotorCurrent;
        let n = actual(ds, m);
        let src = bench.source_path(ds, n);
        if !src.exists() {
            bench.log(&format!("{} {}: generating", ds.name(), si(n as f64)));
            let input = Input::new(ds, m);
            write_rows(&src, &input, true, 3)?;
        }
        bench.log(&format!("{} {}: memory", ds.name(), si(n as f64)));
        let out = bench.dir.join("memory.cyclarc.parquet");
        let log = bench.dir.join("child.log");
        let (wall, _, rss) = run_child(
            &bin,
            &[
                "encode",
                &src.to_string_lossy(),
                "--out",
                &out.to_string_lossy(),
                "--budget-rel",
                &DEFAULT_REL.to_string(),
            ],
            &log,
        )?;
        memory.push(MemoryRow {
            dataset: ds.name(),
            samples: n,
            max_rss_bytes: rss,
            wall_s: wall,
        });
        let _ = std::fs::remove_file(digest_path(&out));
        let _ = std::fs::remove_file(&out);
        let _ = std::fs::remove_file(&src);
    }
    let mut report = Report {
        mode: plan.mode,
        machine: machine(),
        default_budget_rel: DEFAULT_REL,
        speed,
        sizes,
        memory,
        threads,
        guards,
        targets: Vec::new(),
        total_s: 0.0,
        load_average: (load0, load_average()),
    };
    report.targets = targets(&report);
    Ok(report)
}
