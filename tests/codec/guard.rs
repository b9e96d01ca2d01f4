//! Peak guard (`peak_max`): on impulsive signals no decoded sample differs from its source
//! by more than the limit, on every segment, recomputed here from the decoded frames; the
//! RMS budget still holds; and the guard is what holds the limit (the same signals coded
//! without it exceed it). The largest absolute error is the L∞ norm of the error, computed
//! directly (common practice: the "maximum absolute error" of error-bounded coding).
use crate::support::codec::*;
use crate::support::signals::*;
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::{Basis, ValueType};
use cyclarc::options::{Budget, EncodeOptions};
use cyclarc::signal::RealFft;
use rand::Rng;

const FS: f64 = 25_600.0;

/// A 29.5 Hz shaft signal with noise, plus decaying 4 kHz rings at random times and
/// single-sample spikes at random places (invented test signal).
fn impulsive(n: usize, seed: u64) -> Vec<f64> {
    let mut x = wave(n, FS, 29.5, 1.0, 0.01, seed);
    let mut r = rng(seed + 1);
    for _ in 0..12 {
        let at = r.random_range(0..n - 2000);
        let a = r.random_range(0.5..2.0);
        for (j, v) in x[at..at + 2000].iter_mut().enumerate() {
            let t = j as f64 / FS;
            *v += a * (-t * 700.0).exp() * (std::f64::consts::TAU * 4000.0 * t).sin();
        }
    }
    for _ in 0..40 {
        let at = r.random_range(0..n);
        x[at] += r.random_range(-3.0..3.0);
    }
    x
}

/// Largest |decoded − source| over each segment's finite source values.
fn peaks(source: &[f64], decoded: &[Decoded]) -> Vec<f64> {
    decoded
        .iter()
        .map(|d| {
            d.values
                .iter()
                .zip(&source[d.start..d.start + d.values.len()])
                .filter(|(_, x)| x.is_finite())
                .fold(0.0f64, |m, (y, x)| m.max((y - x).abs()))
        })
        .collect()
}

fn encoded(x: &[f64], value_type: ValueType, rel: f64, peak: Option<f64>) -> (Vec<Decoded>, usize) {
    let s = settings(EncodeOptions {
        budget_rel: Some(rel),
        peak_max: peak,
        ..Default::default()
    });
    let run = run_of(x, FS);
    let p = RunParams::new("fh.g", value_type, Some(FS), &s.codec);
    let enc = encode_run(&run, &p).unwrap();
    let bytes = enc.payload_bytes();
    (decode_run(&enc, RealFft::shared()), bytes)
}

#[test]
fn every_sample_of_an_impulsive_signal_comes_back_within_the_peak_limit() {
    let x = impulsive(200_000, 31);
    let limit = 0.05;
    let (plain, plain_bytes) = encoded(&x, ValueType::F64, 0.05, None);
    let worst_plain = peaks(&x, &plain).into_iter().fold(0.0, f64::max);
    // Without the guard the 5 % budget smears the spikes: the limit is exceeded, so the
    // check below is about the guard, not about a budget that happened to be tight.
    assert!(worst_plain > 4.0 * limit, "unguarded worst {worst_plain}");
    let (guarded, guarded_bytes) = encoded(&x, ValueType::F64, 0.05, Some(limit));
    let mut corrected = 0;
    for (d, peak) in guarded.iter().zip(peaks(&x, &guarded)) {
        let seg = &x[d.start..d.start + d.values.len()];
        assert!(peak <= limit, "segment at {}: {peak} > {limit}", d.start);
        if let Some(g) = &d.record.guard {
            assert!(
                peak <= g.peak as f64,
                "claimed {} < measured {peak}",
                g.peak
            );
            assert!(g.peak as f64 <= limit);
            corrected += g.at.len();
        } else {
            assert_eq!(d.record.basis, Basis::Lossless);
        }
        let budget = promised_budget(
            Budget::Relative {
                fraction: 0.05,
                floor: 0.0,
            },
            seg,
        );
        assert!(rms_error(seg, &d.values) <= budget);
    }
    assert!(corrected > 0);
    println!(
        "peak guard at {limit}: {corrected} samples corrected, payload {plain_bytes} -> \
         {guarded_bytes} B"
    );
}

#[test]
fn an_integer_channel_holds_a_limit_of_whole_counts_and_below_one_count_is_lossless() {
    let x: Vec<f64> = impulsive(60_000, 7)
        .iter()
        .map(|v| (v * 400.0).round())
        .collect();
    let (guarded, _) = encoded(&x, ValueType::I16, 0.05, Some(3.0));
    for (d, peak) in guarded.iter().zip(peaks(&x, &guarded)) {
        assert!(peak <= 3.0, "segment at {}: {peak}", d.start);
    }
    // One count of margin for rounding that may flip between machines leaves nothing under
    // a limit below one count: every segment is stored exactly.
    let (exact, _) = encoded(&x, ValueType::I16, 0.05, Some(0.9));
    for (d, peak) in exact.iter().zip(peaks(&x, &exact)) {
        assert_eq!(d.record.basis, Basis::Lossless);
        assert_eq!(peak, 0.0);
    }
}
