//! The fundamental: signals whose truth is known by construction (a gear mesh, a blade pass,
//! a missing fundamental, a hole), and a real ECG whose heart rate is counted here from its
//! R peaks, independently of the estimator.
//!
//! Each synthetic case is the textbook trap for a peak picker: the largest spectral line is
//! a harmonic (gear mesh at 23× shaft, blade pass at 7×), or the fundamental has no line at
//! all (a "missing fundamental", the residue pitch of Schouten; Hermes, J. Acoust. Soc. Am.
//! 83(1), 1988, designed subharmonic summation for it).
use std::f64::consts::TAU;
use std::path::Path;

use rand_distr::{Distribution, Normal};

use crate::support::codec::*;
use crate::support::signals::rng;
use cyclarc::codec::segment::{estimate_fundamental, steady_part, FundamentalSource};
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::ValueType;
use cyclarc::options::EncodeOptions;
use cyclarc::source::{assemble, ChannelSamples, Source};

/// Sum of sines (order × f0, amplitude, phase) plus white noise.
fn lines(fs: f64, n: usize, f0: f64, lines: &[(f64, f64, f64)], noise: f64, seed: u64) -> Vec<f64> {
    let mut r = rng(seed);
    let g = Normal::new(0.0, noise).unwrap();
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            lines
                .iter()
                .map(|&(h, a, p)| a * (TAU * h * f0 * t + p).sin())
                .sum::<f64>()
                + g.sample(&mut r)
        })
        .collect()
}

/// Within `rel` of the truth.
fn near(hz: f64, truth: f64, rel: f64) -> bool {
    (hz / truth - 1.0).abs() <= rel
}

#[test]
fn a_gear_mesh_three_times_the_shaft_line_does_not_win() {
    // Shaft 15 Hz (0.3), 2× (0.1), mesh 23× (1.0) with ±1× sidebands (0.2): the mesh holds
    // 86 % of the power. The shaft rate's harmonics include every line.
    let fs = 12_800.0;
    let x = lines(
        fs,
        1 << 15,
        15.0,
        &[
            (1.0, 0.3, 0.0),
            (2.0, 0.1, 0.5),
            (22.0, 0.2, -0.4),
            (23.0, 1.0, 0.2),
            (24.0, 0.2, 1.1),
        ],
        0.01,
        1,
    );
    let e = estimate_fundamental(&x, fs, 1.0, 1000.0).expect("an estimate");
    assert!(near(e.hz, 15.0, 1e-3), "estimated {} Hz", e.hz);
}

#[test]
fn a_blade_pass_stronger_than_the_shaft_does_not_win() {
    // Fan: shaft 24.8 Hz (0.4), 2× (0.15), blade pass 7× (0.8): 78 % of the power at 7×.
    let fs = 10_000.0;
    let x = lines(
        fs,
        1 << 15,
        24.8,
        &[(1.0, 0.4, 0.0), (2.0, 0.15, 1.0), (7.0, 0.8, -0.3)],
        0.01,
        2,
    );
    let e = estimate_fundamental(&x, fs, 1.0, 1000.0).expect("an estimate");
    assert!(near(e.hz, 24.8, 1e-3), "estimated {} Hz", e.hz);
}

#[test]
fn a_missing_fundamental_is_found_from_its_harmonics() {
    // Harmonics 2…6 of 40 Hz, no line at 40 Hz: the period is still 25 ms.
    let fs = 8_000.0;
    let x = lines(
        fs,
        1 << 15,
        40.0,
        &[
            (2.0, 1.0, 0.0),
            (3.0, 0.8, 0.7),
            (4.0, 0.6, -0.2),
            (5.0, 0.5, 1.9),
            (6.0, 0.4, 0.4),
        ],
        0.01,
        3,
    );
    let e = estimate_fundamental(&x, fs, 1.0, 1000.0).expect("an estimate");
    assert!(near(e.hz, 40.0, 1e-3), "estimated {} Hz", e.hz);
}

#[test]
fn a_nan_run_at_the_start_of_a_run_does_not_bend_the_estimate() {
    // 49.97 Hz current whose first 0.3 s hold a NaN run (a logger's dropout): the run's
    // estimate and its tracked range stay on the line frequency, and the plan is periodic.
    let fs = 10_000.0;
    let mut x = lines(
        fs,
        60_000,
        49.97,
        &[(1.0, 10.0, 0.0), (5.0, 0.4, 0.7), (7.0, 0.3, -1.1)],
        0.01,
        4,
    );
    x.iter_mut().take(3_000).for_each(|v| *v = f64::NAN);
    let s = settings(EncodeOptions {
        budget_rel: Some(0.005),
        ..Default::default()
    });
    let run = run_of(&x, fs);
    let p = RunParams::new("ia", ValueType::F64, Some(fs), &s.codec);
    let enc = encode_run(&run, &p).unwrap();
    assert_eq!(
        enc.plan.source,
        FundamentalSource::Estimated,
        "{:?} {:?}",
        enc.plan.fundamental,
        enc.plan.runner_up
    );
    let e = enc.plan.fundamental.expect("an estimate");
    assert!(near(e.hz, 49.97, 1e-3), "estimated {} Hz", e.hz);
    let (lo, hi) = enc.plan.tracked_range.expect("tracked");
    assert!(
        near(lo, 49.97, 2e-3) && near(hi, 49.97, 2e-3),
        "{lo}–{hi} Hz"
    );
}

/// A direct-on-line start as a current logger sees it, in ADC counts (20 an ampere), `secs`
/// long at 7,680 Hz: 1 s of sensor noise with the motor off (when `start`); then the
/// contactor closes into 6× the running current, held for about a second before it falls (a
/// logistic knee at 1.1 s), with a switch-on DC offset decaying in 45 ms and the supply
/// sagging 0.15 Hz 0.3 s after the start; then steady running at 80 A on a 60 Hz line that
/// wanders ±0.05 Hz, with 5th and 7th harmonics (the shape of an induction motor's start,
/// from memory). Without `start`, the same running current throughout.
fn motor_start(secs: usize, start: bool) -> (Vec<f64>, f64) {
    let fs = 7_680.0;
    let mut r = rng(9);
    let noise = Normal::new(0.0, 0.35).unwrap();
    let logistic = |x: f64| 1.0 / (1.0 + (-(1.1 - x) / 0.18).exp());
    let mut phase = 0.0;
    let mut at_close: Option<f64> = None;
    let x = (0..secs * 7_680)
        .map(|i| {
            let t = i as f64 / fs;
            let on = if start { t - 1.0 } else { 10.0 + t };
            let sag = if on > 0.0 {
                0.15 * (on / 0.3) * (1.0 - on / 0.3).exp()
            } else {
                0.0
            };
            let f =
                60.0 + 0.032 * (TAU * t / 6.7).sin() + 0.018 * (TAU * t / 2.3 + 1.9).sin() - sag;
            phase += TAU * f / fs;
            let amps = if on < 0.0 {
                0.0
            } else {
                let multiple = 1.0 + 5.0 * logistic(on) / logistic(0.0);
                // The phase whose switch-on offset is largest of three (120° from the first).
                let w = phase + 2.0;
                let w0 = *at_close.get_or_insert(w);
                let peak = std::f64::consts::SQRT_2 * 80.0;
                peak * multiple
                    * (w.sin() + 0.035 * (5.0 * w + 0.6).sin() + 0.022 * (7.0 * w - 1.1).sin())
                    - peak * 6.0 * w0.sin() * (-on / 0.045).exp()
            };
            ((amps + noise.sample(&mut r)) * 20.0 + 1.0).round()
        })
        .collect();
    (x, fs)
}

#[test]
fn the_estimate_looks_past_a_start_up_and_keeps_steady_signals_whole() {
    // The motor start: the stretch estimated on begins once the inrush is within 3× of the
    // running current (1.2 s after the contactor closes, by construction), at a 0.5 s block.
    let (x, fs) = motor_start(11, true);
    let part = steady_part(&x, fs);
    let from = (x.len() - part.len()) as f64 / fs;
    assert!(
        (2.0..=3.0).contains(&from),
        "the steady part starts at {from} s"
    );
    // The same current without its start, and a real ECG (beats vary the RMS of half a
    // second, but not by 3×): kept whole.
    let (y, fs) = motor_start(11, false);
    assert_eq!(steady_part(&y, fs).len(), y.len());
    let (ecg, fs) = read_reference("tests/data/ecg-mitbih-208.parquet");
    assert_eq!(steady_part(&ecg, fs).len(), ecg.len());
}

#[test]
fn a_motor_start_before_steady_running_does_not_bend_the_estimate() {
    // 11 s, as a run cut short by a logger's gap: the run's estimate is the line, not a line
    // of the noise or of the inrush.
    let (x, fs) = motor_start(11, true);
    let s = settings(EncodeOptions {
        budget_rel: Some(0.005),
        budget_floor: Some(1.0),
        ..Default::default()
    });
    let run = run_of(&x, fs);
    let p = RunParams::new("ic", ValueType::I16, Some(fs), &s.codec);
    let enc = encode_run(&run, &p).unwrap();
    assert_eq!(
        enc.plan.source,
        FundamentalSource::Estimated,
        "{:?}",
        enc.plan
    );
    let e = enc.plan.fundamental.expect("an estimate");
    assert!(near(e.hz, 60.0, 2e-3), "estimated {} Hz", e.hz);
}

/// Heart rate (Hz) from R peaks, counted independently of the estimator: the squared first
/// difference smoothed over 100 ms (the energy envelope of Pan & Tompkins, IEEE Trans.
/// Biomed. Eng. 32(3), 1985, without their band-pass), its local maxima above half the
/// 99th percentile and at least 250 ms apart (a refractory period, common practice); the
/// rate is (beats − 1) over the time from the first to the last.
fn heart_rate_from_r_peaks(x: &[f64], fs: f64) -> f64 {
    let d2: Vec<f64> = x.windows(2).map(|w| (w[1] - w[0]).powi(2)).collect();
    let w = (0.1 * fs) as usize;
    let mut env = vec![0.0; d2.len()];
    let mut acc = 0.0;
    for i in 0..d2.len() {
        acc += d2[i];
        if i >= w {
            acc -= d2[i - w];
        }
        env[i] = acc;
    }
    let mut sorted = env.clone();
    sorted.sort_by(f64::total_cmp);
    let thr = 0.5 * sorted[(0.99 * sorted.len() as f64) as usize];
    let gap = (0.25 * fs) as usize;
    let mut peaks: Vec<usize> = Vec::new();
    for i in 1..env.len() - 1 {
        if env[i] > thr && env[i] >= env[i - 1] && env[i] > env[i + 1] {
            match peaks.last() {
                Some(&p) if i - p < gap => {
                    if env[i] > env[p] {
                        *peaks.last_mut().unwrap() = i;
                    }
                }
                _ => peaks.push(i),
            }
        }
    }
    assert!(peaks.len() >= 10, "{} beats found", peaks.len());
    (peaks.len() - 1) as f64 * fs / (peaks[peaks.len() - 1] - peaks[0]) as f64
}

/// The first channel of a reference file through cyclarc's reader: (values, rate).
fn read_reference(path: &str) -> (Vec<f64>, f64) {
    let path = Path::new(path);
    let s = settings(EncodeOptions::default());
    let mut src = Source::open(path, &s.source).expect("reference file opens");
    let mut samples = ChannelSamples::default();
    while let Some(chunks) = src.next_chunks() {
        for c in chunks.expect("reference file reads") {
            samples.extend(c);
        }
    }
    let info = src.schema.channels[0].clone();
    let ch = assemble(path, info, samples, None).expect("assembles");
    let run = ch.runs.into_iter().next().expect("one run");
    (run.values, ch.sample_rate.expect("a rate"))
}

#[test]
fn the_plux_ecg_estimate_is_its_heart_rate() {
    // `tests/data/ecg-plux-1000hz.parquet`: single-lead ECG, 1 kHz, raw 16-bit ADC codes,
    // shipped in the biosignalsnotebooks 0.6.14 wheel (MIT licence); provenance in the
    // README's "Reference data". Over the first 32.768 s (the estimator's window), the
    // rate counted from R peaks and the estimate agree within 3 % (heart rate varies from
    // beat to beat; 3 % is about two beats per minute at 75 bpm).
    let (x, fs) = read_reference("tests/data/ecg-plux-1000hz.parquet");
    let head = &x[..1 << 15];
    let truth = heart_rate_from_r_peaks(head, fs);
    let e = estimate_fundamental(head, fs, 0.3, 1000.0).expect("an estimate");
    assert!(
        near(e.hz, truth, 0.03),
        "estimated {} Hz, R peaks {truth} Hz",
        e.hz
    );
}
