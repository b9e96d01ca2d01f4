//! Helpers shared by the integration tests: run construction and the library's defaults.
#![allow(dead_code)]

use cyclarc::assemble::Run;
use cyclarc::options::{EncodeOptions, Settings};
use cyclarc::pack::SpecialKind;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

/// A run from values at sample rate `fs`, starting at an arbitrary fixed epoch.
pub fn run_of(values: &[f64], fs: f64) -> Run {
    let t0: i64 = 1_767_225_600_000_000_000; // 2026-01-01T00:00:00Z
    let times = (0..values.len())
        .map(|i| t0 + (i as f64 * 1e9 / fs).round() as i64)
        .collect();
    let specials = values
        .iter()
        .enumerate()
        .filter(|(_, v)| !v.is_finite())
        .map(|(i, v)| {
            (
                i,
                if v.is_nan() {
                    SpecialKind::Nan(v.to_bits())
                } else if *v > 0.0 {
                    SpecialKind::PosInf
                } else {
                    SpecialKind::NegInf
                },
            )
        })
        .collect();
    Run {
        times,
        values: values.to_vec(),
        specials,
    }
}

/// Settings from options (panics on invalid test options).
pub fn settings(o: EncodeOptions) -> Settings {
    o.resolve().expect("valid test options")
}

/// Fixed-seed generator.
pub fn rng(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}

/// Clean three-phase motor current, phase `phase` (0, 1, 2): fundamental `f0` Hz at
/// amplitude 100, 5th/7th/11th/13th harmonics at 4/3/2/1.5 %, Gaussian noise 60 dB below the
/// fundamental's RMS.
pub fn three_phase(phase: usize, f0: f64, fs: f64, n: usize, seed: u64) -> Vec<f64> {
    use rand_distr::{Distribution, Normal};
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
