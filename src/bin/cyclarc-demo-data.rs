//! `cyclarc-demo-data`: writes small, invented, fully deterministic demo logs.
//!
//! The scenario is the fictional Fennick Hollow municipal water pump station,
//! which has two end-suction pumps, FH-P1 and FH-P2, each driven by an
//! induction motor running at about 1770 rpm. Two Parquet files are written:
//!
//! * `fennick-hollow-vibration.parquet` uses the long layout (`time`,
//!   `channel`, `value`). It holds three accelerometer channels in g at
//!   25.6 kHz, one of them with a developing outer-race bearing defect, plus a
//!   NaN dropout and a few nulls.
//! * `fennick-hollow-motor-current.parquet` uses the wide layout (`time`, `ia`,
//!   `ib`, `ic`). It holds FH-P1's three phase currents as Int16 ADC counts at
//!   7680 Hz: a direct-on-line start, steady running with harmonics, a
//!   two-second logger gap and a short run of nulls.
//!
//! Every random stream comes from `ChaCha8Rng` with a fixed seed, and the
//! start instant is a constant, so two runs write byte-identical files. This
//! binary does not use the `cyclarc` library crate.

use std::f64::consts::{PI, TAU};
use std::fs::{self, File};
use std::path::{Path, PathBuf};
use std::sync::Arc;

use anyhow::{anyhow, ensure, Context, Result};
use arrow::array::{ArrayRef, Float32Array, Int16Array, StringArray, TimestampNanosecondArray};
use arrow::datatypes::{DataType, Field, Schema, TimeUnit};
use arrow::record_batch::RecordBatch;
use clap::Parser;
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, Encoding, ZstdLevel};
use parquet::file::metadata::{KeyValue, SortingColumn};
use parquet::file::properties::WriterProperties;
use parquet::schema::types::ColumnPath;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

// ---------------------------------------------------------------------------
// Common settings
// ---------------------------------------------------------------------------

/// File-name prefix of the invented station.
const STATION_SLUG: &str = "fennick-hollow";

/// Start of both recordings: 2026-11-30T02:00:00 as nanoseconds since the
/// Unix epoch. The vibration file marks it as UTC; the motor-current logger
/// writes the same wall-clock reading without any zone.
const START_NS: i64 = unix_ns(2026, 11, 30, 2, 0, 0);

/// Rows per Parquet row group.
const ROW_GROUP_ROWS: usize = 65_536;

/// zstd level used for every column.
const ZSTD_LEVEL: i32 = 3;

/// Days from 1970-01-01 to the given proleptic Gregorian date (the
/// era-based algorithm: 400-year eras of 146097 days, years starting in March).
const fn days_from_civil(year: i64, month: i64, day: i64) -> i64 {
    let y = if month <= 2 { year - 1 } else { year };
    let era = if y >= 0 { y } else { y - 399 } / 400;
    let year_of_era = y - era * 400;
    let month_from_march = (month + 9) % 12;
    let day_of_year = (153 * month_from_march + 2) / 5 + day - 1;
    let day_of_era = year_of_era * 365 + year_of_era / 4 - year_of_era / 100 + day_of_year;
    era * 146_097 + day_of_era - 719_468
}

/// Nanoseconds since the Unix epoch for a calendar date and time of day.
const fn unix_ns(year: i64, month: i64, day: i64, hour: i64, minute: i64, second: i64) -> i64 {
    let days = days_from_civil(year, month, day);
    ((days * 24 + hour) * 60 + minute) * 60 * 1_000_000_000 + second * 1_000_000_000
}

/// Offset of sample `n` from the start in whole nanoseconds:
/// `round(n * 1e9 / fs)`, computed in integers (halves round up).
fn sample_offset_ns(n: usize, fs_hz: u32) -> i64 {
    let num = 2 * (n as u128) * 1_000_000_000 + u128::from(fs_hz);
    // The quotient is below n * 1e9 / fs + 1, far inside i64 for these sizes.
    (num / (2 * u128::from(fs_hz))) as i64
}

/// Seconds from the start for sample `n` (used by the signal models).
fn sample_time_s(n: usize, fs_hz: u32) -> f64 {
    n as f64 / f64::from(fs_hz)
}

/// A zero-mean normal distribution with standard deviation `sd`.
fn normal(sd: f64) -> Result<Normal<f64>> {
    Normal::new(0.0, sd).map_err(|e| anyhow!("normal distribution with sd {sd}: {e}"))
}

// ---------------------------------------------------------------------------
// Vibration file (long layout)
// ---------------------------------------------------------------------------

/// Accelerometer sample rate in Hz.
const VIB_FS: u32 = 25_600;

/// Samples per vibration channel: 4 s at 25.6 kHz.
const VIB_SAMPLES: usize = 4 * VIB_FS as usize;

/// Rolling-element bearing geometry used for the defect frequency.
struct BearingGeometry {
    /// Number of rolling elements N.
    rolling_elements: u32,
    /// Rolling-element diameter d in mm.
    element_diameter_mm: f64,
    /// Pitch diameter D in mm.
    pitch_diameter_mm: f64,
    /// Contact angle alpha in degrees.
    contact_angle_deg: f64,
}

impl BearingGeometry {
    /// Ball-pass frequency of the outer race:
    /// BPFO = 1/2 * N * f_r * (1 - (d/D) * cos(alpha)).
    fn bpfo_hz(&self, shaft_hz: f64) -> f64 {
        let ratio = self.element_diameter_mm / self.pitch_diameter_mm;
        let cos_alpha = self.contact_angle_deg.to_radians().cos();
        0.5 * f64::from(self.rolling_elements) * shaft_hz * (1.0 - ratio * cos_alpha)
    }
}

/// FH-P1 drive-end bearing (invented deep-groove ball bearing).
const P1_DE_BEARING: BearingGeometry = BearingGeometry {
    rolling_elements: 9,
    element_diameter_mm: 12.7,
    pitch_diameter_mm: 60.0,
    contact_angle_deg: 0.0,
};

/// A localised outer-race defect: one decaying ring-down per ball pass.
struct OuterRaceDefect {
    geometry: &'static BearingGeometry,
    /// Structural resonance excited by each impact, Hz.
    resonance_hz: f64,
    /// Exponential decay time constant of the ringing, s.
    decay_s: f64,
    /// Impact peak amplitude at the start and at the end of the record, g.
    /// The defect grows linearly between the two.
    amplitude_start_g: f64,
    amplitude_end_g: f64,
    /// Each impact interval is 1/BPFO times (1 + u), u uniform in +-slip.
    slip: f64,
    /// Each impact amplitude is scaled by (1 + v), v uniform in +-jitter.
    amplitude_jitter: f64,
}

/// One accelerometer channel and everything that shapes its signal.
struct VibChannel {
    /// Tag-like channel name written to the `channel` column.
    name: &'static str,
    /// Shaft rotation frequency, Hz.
    shaft_hz: f64,
    /// (amplitude g, phase rad) of the 1x, 2x and 3x shaft harmonics.
    harmonics: [(f64, f64); 3],
    /// Impeller vane count; blade pass = vanes * shaft rate.
    vanes: u32,
    /// (amplitude g, phase rad) of the blade-pass component.
    blade_pass: (f64, f64),
    /// Standard deviation of the broadband noise, g.
    noise_sd_g: f64,
    /// Seed of the noise stream (the defect uses `seed + 1`).
    seed: u64,
    defect: Option<OuterRaceDefect>,
    /// Sample range replaced by NaN (a sensor dropout).
    nan_run: Option<(usize, usize)>,
    /// Sample indices written as null.
    nulls: &'static [usize],
}

/// Sample indices of FH-P1 NDE written as null: isolated ones plus a run of 3.
const P1_NDE_NULLS: [usize; 6] = [9_000, 33_333, 33_334, 33_335, 76_800, 95_001];

/// FH-P2 drive end loses signal for 50 ms (1280 samples) from t = 2.25 s.
const P2_DE_NAN_RUN: (usize, usize) = (57_600, 57_600 + 1_280);

/// The three accelerometer channels, sorted by name.
fn vibration_channels() -> Vec<VibChannel> {
    vec![
        VibChannel {
            name: "fh.p1.de.accel",
            shaft_hz: 29.5,
            harmonics: [(0.110, 0.30), (0.045, 1.70), (0.018, -2.10)],
            vanes: 5,
            blade_pass: (0.070, 0.90),
            noise_sd_g: 0.020,
            seed: 0x4648_5031_4445, // "FHP1DE"
            defect: Some(OuterRaceDefect {
                geometry: &P1_DE_BEARING,
                resonance_hz: 3_400.0,
                decay_s: 0.35e-3,
                amplitude_start_g: 0.25,
                amplitude_end_g: 0.90,
                slip: 0.015,
                amplitude_jitter: 0.25,
            }),
            nan_run: None,
            nulls: &[],
        },
        VibChannel {
            name: "fh.p1.nde.accel",
            shaft_hz: 29.5,
            harmonics: [(0.080, 0.75), (0.030, 2.40), (0.012, -0.60)],
            vanes: 5,
            blade_pass: (0.050, -1.20),
            noise_sd_g: 0.018,
            seed: 0x4648_5031_4e44, // "FHP1ND"
            defect: None,
            nan_run: None,
            nulls: &P1_NDE_NULLS,
        },
        VibChannel {
            name: "fh.p2.de.accel",
            shaft_hz: 29.4,
            harmonics: [(0.090, -0.40), (0.035, 0.95), (0.010, 2.80)],
            vanes: 5,
            blade_pass: (0.060, 2.20),
            noise_sd_g: 0.019,
            seed: 0x4648_5032_4445, // "FHP2DE"
            defect: None,
            nan_run: Some(P2_DE_NAN_RUN),
            nulls: &[],
        },
    ]
}

/// Adds the outer-race impacts of `defect` to `signal` (in g).
fn add_outer_race_impacts(
    signal: &mut [f64],
    shaft_hz: f64,
    defect: &OuterRaceDefect,
    rng: &mut ChaCha8Rng,
) {
    let period_s = 1.0 / defect.geometry.bpfo_hz(shaft_hz);
    let duration_s = signal.len() as f64 / f64::from(VIB_FS);
    // The ringing is negligible after ten time constants.
    let window = (10.0 * defect.decay_s * f64::from(VIB_FS)).ceil() as usize;
    let omega = TAU * defect.resonance_hz;

    // First impact somewhere within the first ball-pass period.
    let mut impact_s = rng.random_range(0.0..period_s);
    while impact_s < duration_s {
        let progress = impact_s / duration_s;
        let base = defect.amplitude_start_g
            + (defect.amplitude_end_g - defect.amplitude_start_g) * progress;
        let amplitude =
            base * (1.0 + rng.random_range(-defect.amplitude_jitter..=defect.amplitude_jitter));

        // Samples from the first one at or after the impact, over the window.
        let first = (impact_s * f64::from(VIB_FS)).ceil() as usize;
        let last = (first + window).min(signal.len());
        for (n, sample) in signal.iter_mut().enumerate().take(last).skip(first) {
            let dt = sample_time_s(n, VIB_FS) - impact_s;
            *sample += amplitude * (-dt / defect.decay_s).exp() * (omega * dt).sin();
        }

        impact_s += period_s * (1.0 + rng.random_range(-defect.slip..=defect.slip));
    }
}

/// Generates one channel's samples; `None` is a null, NaN a dropout.
fn generate_vibration(channel: &VibChannel) -> Result<Vec<Option<f32>>> {
    let mut noise_rng = ChaCha8Rng::seed_from_u64(channel.seed);
    let noise = normal(channel.noise_sd_g)?;

    let blade_hz = f64::from(channel.vanes) * channel.shaft_hz;
    let mut signal: Vec<f64> = (0..VIB_SAMPLES)
        .map(|n| {
            let t = sample_time_s(n, VIB_FS);
            let shaft: f64 = channel
                .harmonics
                .iter()
                .enumerate()
                .map(|(k, &(amp, phase))| {
                    let order = (k + 1) as f64;
                    amp * (TAU * order * channel.shaft_hz * t + phase).sin()
                })
                .sum();
            let (bp_amp, bp_phase) = channel.blade_pass;
            let blade = bp_amp * (TAU * blade_hz * t + bp_phase).sin();
            shaft + blade + noise.sample(&mut noise_rng)
        })
        .collect();

    if let Some(defect) = &channel.defect {
        let mut defect_rng = ChaCha8Rng::seed_from_u64(channel.seed + 1);
        add_outer_race_impacts(&mut signal, channel.shaft_hz, defect, &mut defect_rng);
    }

    let mut values: Vec<Option<f32>> = signal.iter().map(|&v| Some(v as f32)).collect();
    if let Some((start, end)) = channel.nan_run {
        for v in &mut values[start..end] {
            *v = Some(f32::NAN);
        }
    }
    for &n in channel.nulls {
        values[n] = None;
    }
    Ok(values)
}

/// Writes the long-layout vibration file and returns its row count.
fn write_vibration(path: &Path) -> Result<usize> {
    let channels = vibration_channels();
    ensure!(
        channels.windows(2).all(|w| w[0].name < w[1].name),
        "vibration channels must be listed in name order"
    );

    for channel in &channels {
        if let Some(defect) = &channel.defect {
            println!(
                "  {}: outer-race defect, BPFO = {:.3} Hz ({:.4} x shaft rate)",
                channel.name,
                defect.geometry.bpfo_hz(channel.shaft_hz),
                defect.geometry.bpfo_hz(channel.shaft_hz) / channel.shaft_hz
            );
        }
    }

    let per_channel: Vec<Vec<Option<f32>>> = channels
        .iter()
        .map(generate_vibration)
        .collect::<Result<_>>()?;

    // Rows sorted by time, then by channel: the channels interleave.
    let rows = VIB_SAMPLES * channels.len();
    let mut times = Vec::with_capacity(rows);
    let mut names = Vec::with_capacity(rows);
    let mut values = Vec::with_capacity(rows);
    for n in 0..VIB_SAMPLES {
        let t = START_NS + sample_offset_ns(n, VIB_FS);
        for (channel, samples) in channels.iter().zip(&per_channel) {
            times.push(t);
            names.push(channel.name);
            values.push(samples[n]);
        }
    }

    let schema = Arc::new(Schema::new(vec![
        Field::new(
            "time",
            DataType::Timestamp(TimeUnit::Nanosecond, Some("UTC".into())),
            false,
        ),
        Field::new("channel", DataType::Utf8, false),
        Field::new("value", DataType::Float32, true),
    ]));
    let columns: Vec<ArrayRef> = vec![
        Arc::new(TimestampNanosecondArray::from(times).with_timezone("UTC")),
        Arc::new(StringArray::from(names)),
        Arc::new(Float32Array::from(values)),
    ];
    let batch = RecordBatch::try_new(schema, columns).context("building vibration batch")?;

    let metadata = vec![
        kv("station", "Fennick Hollow pump station (invented)"),
        kv("layout", "long: time, channel, value"),
        kv("value.unit", "g"),
        kv("sample_rate_hz", &VIB_FS.to_string()),
        kv("synthetic", "true"),
    ];
    let sorting = vec![sorted_asc(0), sorted_asc(1)];
    write_parquet(path, &batch, metadata, sorting)?;
    Ok(rows)
}

// ---------------------------------------------------------------------------
// Motor-current file (wide layout)
// ---------------------------------------------------------------------------

/// Current logger sample rate in Hz: 128 samples per 60 Hz cycle.
const MC_FS: u32 = 7_680;

/// Samples the logger would have taken over the 20 s log.
const MC_SPAN_SAMPLES: usize = 20 * MC_FS as usize;

/// Nominal line frequency, Hz.
const LINE_HZ: f64 = 60.0;

/// ADC counts per ampere (1 count = 0.05 A).
const COUNTS_PER_AMP: f64 = 20.0;

/// Rated motor current, A rms.
const RATED_A_RMS: f64 = 80.0;

/// The contactor closes at this time from the start of the log, s.
const MOTOR_START_S: f64 = 1.0;

/// Inrush multiple of rated current right after the contactor closes.
const INRUSH_MULTIPLE: f64 = 6.0;

/// The inrush falls through half its excess at this time after the start, s,
/// over a logistic width of `INRUSH_WIDTH_S`.
const INRUSH_KNEE_S: f64 = 1.1;
const INRUSH_WIDTH_S: f64 = 0.18;

/// Time constant of the decaying DC offset of the switch-on transient, s.
const DC_DECAY_S: f64 = 0.045;

/// Depth (Hz) and time constant (s) of the supply-frequency sag at start-up.
const START_SAG_HZ: f64 = 0.15;
const START_SAG_S: f64 = 0.30;

/// Slow line-frequency wander: (amplitude Hz, period s, phase rad); the
/// amplitudes add up to 0.05 Hz.
const WANDER: [(f64, f64, f64); 2] = [(0.032, 6.7, 0.4), (0.018, 2.3, 1.9)];

/// Current harmonics: (order, fraction of fundamental, phase rad).
const HARMONICS: [(f64, f64, f64); 4] = [
    (5.0, 0.035, 0.6),
    (7.0, 0.022, -1.1),
    (11.0, 0.011, 2.0),
    (13.0, 0.007, -2.6),
];

/// Per-phase amplitude scale (slight imbalance), phase error (rad) and ADC
/// offset (counts) for phases a, b and c.
const PHASES: [(f64, f64, f64); 3] = [
    (1.000, 0.0, 3.0),
    (0.988, -2.0 * PI / 3.0 + 0.004, -2.0),
    (1.009, 2.0 * PI / 3.0 - 0.003, 1.0),
];

/// Standard deviation of the measurement noise, A.
const MC_NOISE_SD_A: f64 = 0.35;

/// The logger stopped for 2 s, from t = 12 s to t = 14 s: no rows.
const MC_GAP: (usize, usize) = (12 * MC_FS as usize, 14 * MC_FS as usize);

/// Phase b reads null for 25 ms (192 samples) from t = 16.5 s.
const IB_NULL_RUN: (usize, usize) = (126_720, 126_720 + 192);

/// Seed of the current noise stream.
const MC_SEED: u64 = 0x4648_4d43_4331; // "FHMCC1"

/// Multiple of rated current at `tau` seconds after the contactor closes.
fn current_multiple(tau: f64) -> f64 {
    let excess = INRUSH_MULTIPLE - 1.0;
    // Normalised so the multiple is exactly INRUSH_MULTIPLE at tau = 0.
    let logistic = |x: f64| 1.0 / (1.0 + (-(INRUSH_KNEE_S - x) / INRUSH_WIDTH_S).exp());
    1.0 + excess * logistic(tau) / logistic(0.0)
}

/// Supply frequency at `t` seconds from the start of the log.
fn line_frequency_hz(t: f64) -> f64 {
    let wander: f64 = WANDER
        .iter()
        .map(|&(amp, period, phase)| amp * (TAU * t / period + phase).sin())
        .sum();
    let tau = t - MOTOR_START_S;
    // A sag that peaks START_SAG_S after the start and then recovers.
    let sag = if tau > 0.0 {
        let x = tau / START_SAG_S;
        START_SAG_HZ * x * (1.0 - x).exp()
    } else {
        0.0
    };
    LINE_HZ + wander - sag
}

/// Converts amperes to ADC counts, rejecting values outside Int16.
fn to_counts(amps: f64, offset_counts: f64) -> Result<i16> {
    let counts = (amps * COUNTS_PER_AMP + offset_counts).round();
    ensure!(
        (f64::from(i16::MIN)..=f64::from(i16::MAX)).contains(&counts),
        "current {amps:.1} A does not fit in Int16 counts"
    );
    Ok(counts as i16)
}

/// Writes the wide-layout motor-current file and returns its row count.
fn write_motor_current(path: &Path) -> Result<usize> {
    let mut rng = ChaCha8Rng::seed_from_u64(MC_SEED);
    let noise = normal(MC_NOISE_SD_A)?;
    let peak_rated = RATED_A_RMS * 2f64.sqrt();

    let rows = MC_SPAN_SAMPLES - (MC_GAP.1 - MC_GAP.0);
    let mut times = Vec::with_capacity(rows);
    let mut phase_counts: [Vec<Option<i16>>; 3] = std::array::from_fn(|_| Vec::with_capacity(rows));

    // Supply phase angle, integrated sample by sample so that frequency
    // changes bend the waveform smoothly; it keeps running through the gap.
    let mut theta = 0.0_f64;
    let mut theta_at_start: Option<f64> = None;
    for n in 0..MC_SPAN_SAMPLES {
        let t = sample_time_s(n, MC_FS);
        let tau = t - MOTOR_START_S;
        if tau >= 0.0 && theta_at_start.is_none() {
            theta_at_start = Some(theta);
        }
        let logging = !(MC_GAP.0..MC_GAP.1).contains(&n);

        if logging {
            times.push(START_NS + sample_offset_ns(n, MC_FS));
            for (k, &(scale, phase_shift, offset)) in PHASES.iter().enumerate() {
                let mut amps = noise.sample(&mut rng);
                if let Some(theta0) = theta_at_start {
                    let amplitude = peak_rated * scale * current_multiple(tau);
                    let angle = theta + phase_shift;
                    amps += amplitude * angle.sin();
                    amps += HARMONICS
                        .iter()
                        .map(|&(order, frac, ph)| amplitude * frac * (order * angle + ph).sin())
                        .sum::<f64>();
                    // Switch-on DC offset: cancels the fundamental at tau = 0.
                    let initial = peak_rated * scale * INRUSH_MULTIPLE;
                    amps -= initial * (theta0 + phase_shift).sin() * (-tau / DC_DECAY_S).exp();
                }
                let counts = to_counts(amps, offset)?;
                let is_null = k == 1 && (IB_NULL_RUN.0..IB_NULL_RUN.1).contains(&n);
                phase_counts[k].push(if is_null { None } else { Some(counts) });
            }
        }

        theta = (theta + TAU * line_frequency_hz(t) / f64::from(MC_FS)).rem_euclid(TAU);
    }
    ensure!(times.len() == rows, "motor-current row count mismatch");

    let schema = Arc::new(Schema::new(vec![
        Field::new(
            "time",
            DataType::Timestamp(TimeUnit::Nanosecond, None),
            false,
        ),
        Field::new("ia", DataType::Int16, true),
        Field::new("ib", DataType::Int16, true),
        Field::new("ic", DataType::Int16, true),
    ]));
    let [ia, ib, ic] = phase_counts;
    let columns: Vec<ArrayRef> = vec![
        Arc::new(TimestampNanosecondArray::from(times)),
        Arc::new(Int16Array::from(ia)),
        Arc::new(Int16Array::from(ib)),
        Arc::new(Int16Array::from(ic)),
    ];
    let batch = RecordBatch::try_new(schema, columns).context("building motor-current batch")?;

    let metadata = vec![
        kv("station", "Fennick Hollow pump station (invented)"),
        kv("layout", "wide: time, ia, ib, ic"),
        kv("value.unit", "ADC counts, 1 count = 0.05 A"),
        kv("sample_rate_hz", &MC_FS.to_string()),
        kv("line_frequency_hz", "60"),
        kv("synthetic", "true"),
    ];
    write_parquet(path, &batch, metadata, vec![sorted_asc(0)])?;
    Ok(rows)
}

// ---------------------------------------------------------------------------
// Parquet output
// ---------------------------------------------------------------------------

/// A file-level key/value metadata entry.
fn kv(key: &str, value: &str) -> KeyValue {
    KeyValue::new(key.to_string(), value.to_string())
}

/// An ascending sort declaration for column `idx` (no nulls in it).
fn sorted_asc(idx: i32) -> SortingColumn {
    SortingColumn {
        column_idx: idx,
        descending: false,
        nulls_first: false,
    }
}

/// Writes `batch` as zstd-compressed Parquet in row groups of
/// `ROW_GROUP_ROWS`; the `time` column is delta-encoded.
fn write_parquet(
    path: &Path,
    batch: &RecordBatch,
    metadata: Vec<KeyValue>,
    sorting: Vec<SortingColumn>,
) -> Result<()> {
    let time = ColumnPath::from("time");
    let props = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(ZSTD_LEVEL)?))
        .set_max_row_group_row_count(Some(ROW_GROUP_ROWS))
        .set_column_dictionary_enabled(time.clone(), false)
        .set_column_encoding(time, Encoding::DELTA_BINARY_PACKED)
        .set_key_value_metadata(Some(metadata))
        .set_sorting_columns(Some(sorting))
        .build();

    let file = File::create(path).with_context(|| format!("creating {}", path.display()))?;
    let mut writer = ArrowWriter::try_new(file, batch.schema(), Some(props))
        .with_context(|| format!("opening Parquet writer for {}", path.display()))?;
    writer
        .write(batch)
        .with_context(|| format!("writing {}", path.display()))?;
    writer
        .close()
        .with_context(|| format!("finishing {}", path.display()))?;
    Ok(())
}

// ---------------------------------------------------------------------------
// Entry point
// ---------------------------------------------------------------------------

/// Writes the invented Fennick Hollow pump-station demo logs.
#[derive(Parser)]
#[command(version, about)]
struct Args {
    /// Folder to write the Parquet files into (created if missing).
    #[arg(default_value = "demo-data")]
    out_dir: PathBuf,
}

fn main() -> Result<()> {
    let args = Args::parse();
    fs::create_dir_all(&args.out_dir)
        .with_context(|| format!("creating {}", args.out_dir.display()))?;

    let vib_path = args
        .out_dir
        .join(format!("{STATION_SLUG}-vibration.parquet"));
    let vib_rows = write_vibration(&vib_path)?;
    report(&vib_path, vib_rows)?;

    let mc_path = args
        .out_dir
        .join(format!("{STATION_SLUG}-motor-current.parquet"));
    let mc_rows = write_motor_current(&mc_path)?;
    report(&mc_path, mc_rows)?;
    Ok(())
}

/// Prints a one-line summary of a written file.
fn report(path: &Path, rows: usize) -> Result<()> {
    let bytes = fs::metadata(path)
        .with_context(|| format!("reading size of {}", path.display()))?
        .len();
    println!("wrote {} ({rows} rows, {bytes} bytes)", path.display());
    Ok(())
}
