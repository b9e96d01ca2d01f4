//! The trend-augmented basis against closed forms: a ramp's periodic extension is a
//! sawtooth, whose truncation error falls only slowly with the order (REFERENCE-FACTS,
//! "RMS error left after keeping harmonics n ≤ L": Spiegel, Mathematical Handbook §23.9);
//! a ramp plus a sine needs one polynomial term and one harmonic instead.
use std::f64::consts::{PI, TAU};

use crate::support::codec::*;
use crate::support::signals::rng;
use cyclarc::codec::decode::trend_basis;
use cyclarc::codec::fit::{error_by_order, fit_segment, SegmentInput};
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::{Basis, ValueType};
use cyclarc::options::EncodeOptions;
use cyclarc::signal::{RealFft, Transform};
use rand_distr::{Distribution, Normal};

/// The sawtooth x/π on (−π, π) sampled at N points: −1 + 2m/N.
fn sawtooth(n: usize) -> Vec<f64> {
    (0..n).map(|m| -1.0 + 2.0 * m as f64 / n as f64).collect()
}

/// Mean-square error of the sampled sawtooth after keeping bins 0 … L [derived: its DFT is
/// a geometric sum, |X_k| = 1/sin(πk/N) for k ≠ 0, and by Parseval the dropped bins
/// L+1 … N−L−1 leave (1/N²)·Σ 1/sin²(πk/N)].
fn sampled_sawtooth_mse(n: usize, l: usize) -> f64 {
    (l + 1..n - l)
        .map(|k| 1.0 / (PI * k as f64 / n as f64).sin().powi(2))
        .sum::<f64>()
        / (n * n) as f64
}

#[test]
fn the_ramps_truncation_error_is_the_sawtooths() {
    // The codec's Parseval error of every order on a sampled ramp equals the closed form of
    // the sampled sawtooth, and that tends to the continuous table: RMS 0.239822, 0.145983,
    // 0.114320, 0.080203, 0.056490 after L = 3, 9, 15, 31, 63 harmonics [src: Spiegel §23.9,
    // via REFERENCE-FACTS]. The sampled series drops the harmonics above N/2 and bends the
    // kept ones by (πk/N)²; both shift the error by a relative amount below 4L/N.
    let n = 1 << 14;
    let x = sawtooth(n);
    let c = RealFft::shared().forward(&x);
    // A step far below every coefficient: the error is the truncation alone.
    let e = error_by_order(&c, None, 1e-12, n);
    for (l, table) in [
        (3, 0.239822),
        (9, 0.145983),
        (15, 0.114320),
        (31, 0.080203),
        (63, 0.056490),
    ] {
        let ours = (e[l + 1] / n as f64).sqrt();
        let closed = sampled_sawtooth_mse(n, l).sqrt();
        assert!(
            (ours / closed - 1.0).abs() < 1e-9,
            "L = {l}: {ours} vs {closed}"
        );
        assert!(
            (closed / table - 1.0).abs() < 4.0 * l as f64 / n as f64,
            "L = {l}: sampled {closed} vs continuous {table}"
        );
    }
}

#[test]
fn the_discrete_polynomials_are_orthonormal_and_orthogonal_to_a_constant() {
    // By direct summation (the Gram polynomials' defining property).
    for n in [16usize, 17, 1000] {
        let b = trend_basis(n, 2).expect("long enough");
        let dot = |a: &[f64], c: &[f64]| a.iter().zip(c).map(|(x, y)| x * y).sum::<f64>();
        for (i, u) in b.iter().enumerate() {
            assert!((dot(u, u) - 1.0).abs() < 1e-12, "n {n}: |u{i}|²");
            assert!(u.iter().sum::<f64>().abs() < 1e-9, "n {n}: Σu{i}");
        }
        assert!(dot(&b[0], &b[1]).abs() < 1e-12, "n {n}: u1·u2");
    }
}

#[test]
fn a_ramp_plus_a_sine_takes_one_term_and_one_harmonic() {
    // x = 0.5 + (unit sawtooth ramp) + sin(one cycle). Fourier alone must keep the
    // sawtooth's harmonics until its error meets the budget: the least L with the sampled
    // sawtooth's error (closed form above) below the budget, so order L + 1. With the ramp
    // term, what is left is the offset and the one cycle: order 2 (bins 0 and 1).
    let n = 2_000;
    let budget = 0.08;
    let x: Vec<f64> = sawtooth(n)
        .iter()
        .enumerate()
        .map(|(m, r)| 0.5 + r + (TAU * m as f64 / n as f64).sin())
        .collect();
    let l_saw = (0..n / 2)
        .find(|&l| sampled_sawtooth_mse(n, l).sqrt() <= budget)
        .expect("some order");
    assert!(l_saw > 31, "the table: 31 harmonics leave 0.0802 > 0.08");
    let c = RealFft::shared().forward(&x);
    let e = error_by_order(&c, None, 1e-12, n);
    let fourier_only = (0..e.len())
        .find(|&l| e[l] <= budget * budget * n as f64)
        .expect("some order");
    assert_eq!(
        fourier_only,
        l_saw + 1,
        "Fourier alone needs the sawtooth's order"
    );
    let f = fit_segment(
        SegmentInput {
            values: &x,
            value_type: ValueType::F64,
            budget_rms: budget,
        },
        None,
        RealFft::shared(),
    );
    assert_eq!(f.plan.basis, Basis::Trend);
    let t = f.plan.trend.expect("a trend");
    assert_eq!(t.degree, 1, "a ramp");
    assert!(f.plan.order.unwrap() <= 2, "order {:?}", f.plan.order);
    assert!(rms_error(&x, &f.output) <= budget);
}

#[test]
fn a_weekly_series_with_a_trend_codes_well_below_the_time_domain_quantizer() {
    // 2,000 weekly values (38 years): a linear trend, a yearly cycle of 52.1775 weeks with
    // a second harmonic, and noise (a series of our own; common practice for a load or
    // temperature record). At 1 % of each segment's RMS the bound holds on every segment,
    // trend segments are chosen, and the payload is at most half the time-domain
    // quantizer's (measured: 3.4×).
    let n = 2_000;
    let mut r = rng(77);
    let g = Normal::new(0.0, 0.05).unwrap();
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let w = TAU * i as f64 / 52.1775;
            10.0 + 0.004 * i as f64 + 2.0 * w.sin() + 0.5 * (2.0 * w + 0.7).sin() + g.sample(&mut r)
        })
        .collect();
    let fs = 1.0 / (7.0 * 86_400.0);
    let s = settings(EncodeOptions {
        budget_rel: Some(0.01),
        ..Default::default()
    });
    let run = run_of(&x, fs);
    let p = RunParams::new("site.load.weekly", ValueType::F64, Some(fs), &s.codec);
    let enc = encode_run(&run, &p).unwrap();
    let mut trend = 0;
    for d in decode_run(&enc, RealFft::shared()) {
        let seg = &x[d.start..d.start + d.record.len];
        assert!(rms_error(seg, &d.values) <= d.plan.budget_rms);
        trend += usize::from(d.plan.basis == Basis::Trend);
    }
    assert!(trend > 0, "no trend segment");
    let ours = enc.payload_bytes();
    let theirs = cyclarc::baseline::time_domain_bytes(&run, &p);
    assert!(
        2 * ours <= theirs,
        "payload {ours} B vs time-domain {theirs} B"
    );
}
