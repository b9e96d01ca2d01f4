//! Sample grids and test signals. Every signal here is invented (harmonics of a fundamental,
//! Gaussian noise from fixed ChaCha8 seeds); they serve round-trip, behaviour and reference
//! checks, not claims about real plants.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

use super::T0;

/// Fixed-seed generator.
pub fn rng(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}

/// Sample times `T0 + round(i·1e9/fs)` ns.
pub fn grid(n: usize, fs: f64) -> Vec<i64> {
    (0..n)
        .map(|i| T0 + (i as f64 * 1e9 / fs).round() as i64)
        .collect()
}

/// Harmonics 1–3 of `f0` (amplitudes `amp`·[1, 0.2, 0.05], fixed phases, no noise) sampled
/// at `fs`, n samples.
pub fn clean_wave(n: usize, fs: f64, f0: f64, amp: f64) -> Vec<f64> {
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let w = std::f64::consts::TAU * f0 * t;
            amp * (w.cos() + 0.2 * (2.0 * w + 0.4).cos() + 0.05 * (3.0 * w + 1.1).cos())
        })
        .collect()
}

/// Harmonics 1–5 of `f0` (amplitudes `amp`·[1, 0.3, 0.15, 0.08, 0.04], random phases) plus
/// Gaussian noise of standard deviation `noise`, sampled at `fs` (n samples).
pub fn wave(n: usize, fs: f64, f0: f64, amp: f64, noise: f64, seed: u64) -> Vec<f64> {
    let mut r = rng(seed);
    let rel = [1.0, 0.3, 0.15, 0.08, 0.04];
    let phases: Vec<f64> = rel
        .iter()
        .map(|_| r.random::<f64>() * std::f64::consts::TAU)
        .collect();
    let nd = Normal::new(0.0, noise).expect("valid normal");
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let mut v = 0.0;
            for (h, (&a, &p)) in rel.iter().zip(&phases).enumerate() {
                let h = (h + 1) as f64;
                v += amp * a * (std::f64::consts::TAU * h * f0 * t + p).cos();
            }
            v + nd.sample(&mut r)
        })
        .collect()
}

/// Clean three-phase motor current, phase `phase` (0, 1, 2): fundamental `f0` Hz at
/// amplitude 100, 5th/7th/11th/13th harmonics at 4/3/2/1.5 %, Gaussian noise 60 dB below the
/// fundamental's RMS.
pub fn three_phase(phase: usize, f0: f64, fs: f64, n: usize, seed: u64) -> Vec<f64> {
    let mut r = rng(seed + phase as u64);
    let a1 = 100.0;
    let noise = Normal::new(0.0, a1 / 2f64.sqrt() * 1e-3).expect("valid normal");
    let shift = -2.0 * std::f64::consts::PI / 3.0 * phase as f64;
    let harm = [
        (1.0, 1.0),
        (5.0, 0.04),
        (7.0, 0.03),
        (11.0, 0.02),
        (13.0, 0.015),
    ];
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let mut v = 0.0;
            for &(h, a) in &harm {
                v += a1 * a * (2.0 * std::f64::consts::PI * h * f0 * t + h * shift + 0.3 * h).cos();
            }
            v + noise.sample(&mut r)
        })
        .collect()
}

/// Shaft vibration at `fs`: shaft rate 29.5 Hz with harmonics 1–8, a bearing defect's
/// decaying impacts at BPFO = 3.585·f_r ringing at 3.1 kHz, and white Gaussian noise of RMS
/// `noise_rms`. Units g; the shaft components total about 0.5 g RMS.
pub fn vibration(fs: f64, n: usize, noise_rms: f64, seed: u64) -> Vec<f64> {
    use std::f64::consts::PI;
    let mut r = rng(seed);
    let noise = Normal::new(0.0, noise_rms).expect("valid normal");
    let fr = 29.5;
    let bpfo = 3.585 * fr;
    let amps = [0.6, 0.3, 0.15, 0.1, 0.06, 0.04, 0.03, 0.02];
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let mut v = 0.0;
            for (h, a) in amps.iter().enumerate() {
                let h = (h + 1) as f64;
                v += a * (2.0 * PI * h * fr * t + 0.7 * h).sin();
            }
            // Time since the last impact, and the impact's ring-down.
            let since = t - (t * bpfo).floor() / bpfo;
            v += 0.4 * (-since * 900.0).exp() * (2.0 * PI * 3100.0 * since).sin();
            v + noise.sample(&mut r)
        })
        .collect()
}
