//! The FFT path against the definition of the DFT, and the default decoder against rustfft's
//! scalar kernels.
//!
//! Oracle: a naive O(N²) DFT written here from the definition X_k = Σ x_n e^(−2πikn/N)
//! (Oppenheim & Schafer, *Discrete-Time Signal Processing*), scaled by 1/√N as the crate docs
//! define. RustFFT's own accuracy tests (`src/test_utils.rs`, `tests/accuracy.rs`) compare
//! every algorithm with a naive DFT the same way, against a fixed loose threshold; here the
//! tolerance is the standard FFT error bound c·ε·log₂N·‖x‖ ([`support::codec::fft_rel_bound`],
//! Higham) plus the error of the naive oracle itself (bounded below).
use crate::support::codec::*;
use crate::support::signals::*;
use cyclarc::baseline::time_domain_bytes;
use cyclarc::codec::fit::FP_MARGIN_REL;
use cyclarc::codec::synthesize;
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::Basis;
use cyclarc::model::ValueType;
use cyclarc::options::{Budget, EncodeOptions};
use cyclarc::signal::{half_len, RealFft, ScalarFft, Transform, C64};
use rand::Rng;
use rand_distr::StandardNormal;

/// Lengths: N = 1, 2, 3, 4, small primes and odd lengths, powers of two, and 4000, 4001
/// (prime), 4099 (prime).
const LENGTHS: [usize; 22] = [
    1, 2, 3, 4, 5, 6, 7, 8, 9, 11, 13, 16, 17, 31, 97, 100, 127, 360, 1024, 4000, 4001, 4099,
];

/// e^(−2πi·m/N) for m = 0 … N−1. Angles are formed for m ≤ N/2 only (θ ≤ π) and mirrored by
/// conjugation, so each twiddle is accurate to [`TWIDDLE_ERR`].
fn twiddles(n: usize) -> Vec<C64> {
    let mut w = vec![C64::new(1.0, 0.0); n];
    for (m, v) in w.iter_mut().enumerate().take(n / 2 + 1) {
        let th = 2.0 * std::f64::consts::PI * m as f64 / n as f64;
        *v = C64::new(th.cos(), -th.sin());
    }
    for m in n / 2 + 1..n {
        w[m] = w[n - m].conj();
    }
    w
}

/// Absolute error of one twiddle: θ = 2π·m/N carries three roundings (relative 3u, so at
/// most 3πu absolute for θ ≤ π), and cos/sin each add at most an ulp (2u) at magnitude ≤ 1.
const TWIDDLE_ERR: f64 = (3.0 * std::f64::consts::PI + 2.0 * std::f64::consts::SQRT_2) * U;

/// Relative 2-norm error of the naive oracle: each term x_n·w carries the twiddle error plus
/// two product roundings, |e_kn| ≤ (TWIDDLE_ERR + 2u)·|x_n|, so the error matrix has operator
/// norm ≤ its Frobenius norm ≤ N·(TWIDDLE_ERR + 2u), i.e. √N·(TWIDDLE_ERR + 2u) after the 1/√N
/// scaling; the compensated (Neumaier) sum adds 2u·|S_k| per output and the final scaling u.
fn oracle_rel_bound(n: usize) -> f64 {
    (TWIDDLE_ERR + 2.0 * U) * (n as f64).sqrt() + 3.0 * U + 2.0 * n as f64 * U * U
}

/// Neumaier's compensated sum.
#[derive(Default)]
struct Sum {
    s: f64,
    c: f64,
}

impl Sum {
    fn add(&mut self, v: f64) {
        let t = self.s + v;
        if self.s.abs() >= v.abs() {
            self.c += (self.s - t) + v;
        } else {
            self.c += (v - t) + self.s;
        }
        self.s = t;
    }
    fn get(&self) -> f64 {
        self.s + self.c
    }
}

/// Orthonormal one-sided DFT by the definition: c_k = (1/√N) Σ_n x_n e^(−2πikn/N).
fn naive_forward(x: &[f64]) -> Vec<C64> {
    let n = x.len();
    let w = twiddles(n);
    let s = 1.0 / (n as f64).sqrt();
    (0..half_len(n))
        .map(|k| {
            let (mut re, mut im) = (Sum::default(), Sum::default());
            for (j, &v) in x.iter().enumerate() {
                let t = w[(k * j) % n];
                re.add(v * t.re);
                im.add(v * t.im);
            }
            C64::new(re.get() * s, im.get() * s)
        })
        .collect()
}

/// Inverse by the definition: x_n = (1/√N) Σ_k C_k e^(+2πikn/N) over the Hermitian extension
/// C_{N−k} = conj(c_k) of the one-sided spectrum.
fn naive_inverse(c: &[C64], n: usize) -> Vec<f64> {
    let w = twiddles(n);
    let s = 1.0 / (n as f64).sqrt();
    let full: Vec<C64> = (0..n)
        .map(|k| {
            if k < half_len(n) {
                c[k]
            } else {
                c[n - k].conj()
            }
        })
        .collect();
    (0..n)
        .map(|j| {
            let mut acc = Sum::default();
            for (k, ck) in full.iter().enumerate() {
                // Re(C_k · conj(w_kj)).
                let t = w[(k * j) % n];
                acc.add(ck.re * t.re);
                acc.add(ck.im * t.im);
            }
            acc.get() * s
        })
        .collect()
}

fn norm_c(c: &[C64]) -> f64 {
    c.iter().map(|v| v.norm_sqr()).sum::<f64>().sqrt()
}

fn norm_r(x: &[f64]) -> f64 {
    x.iter().map(|v| v * v).sum::<f64>().sqrt()
}

fn transforms() -> Vec<(&'static str, Box<dyn Transform>)> {
    vec![
        ("RealFft", Box::new(RealFft::default())),
        ("ScalarFft", Box::new(ScalarFft::default())),
    ]
}

#[test]
fn forward_transforms_match_the_naive_dft_within_the_fft_error_bound() {
    let mut worst: f64 = 0.0;
    for (name, fft) in transforms() {
        for (i, &n) in LENGTHS.iter().enumerate() {
            let mut r = rng(100 + i as u64);
            // Zero-mean noise, and the same on a large offset (a DC bin 300× the rest).
            for offset in [0.0, 300.0] {
                let x: Vec<f64> = (0..n)
                    .map(|_| offset + r.sample::<f64, _>(StandardNormal))
                    .collect();
                let got = fft.forward(&x);
                let want = naive_forward(&x);
                assert_eq!(got.len(), half_len(n), "{name} N={n}: one-sided length");
                // One-sided error ≤ full two-sided error ≤ (FFT bound + oracle bound)·‖x‖.
                let diff: Vec<C64> = got.iter().zip(&want).map(|(a, b)| a - b).collect();
                let tol = (fft_rel_bound(n) + oracle_rel_bound(n)) * norm_r(&x);
                let err = norm_c(&diff);
                worst = worst.max(err / tol);
                assert!(
                    err <= tol,
                    "{name} forward N={n} offset {offset}: ‖Δc‖ = {err:e} > {tol:e}"
                );
            }
        }
    }
    eprintln!("forward: worst error / bound = {worst:.2e}");
}

#[test]
fn inverse_transforms_match_the_naive_dft_within_the_fft_error_bound() {
    let mut worst: f64 = 0.0;
    for (name, fft) in transforms() {
        for (i, &n) in LENGTHS.iter().enumerate() {
            let mut r = rng(200 + i as u64);
            // A random Hermitian spectrum: DC (and Nyquist for even N) real.
            let c: Vec<C64> = (0..half_len(n))
                .map(|k| {
                    let re = r.sample::<f64, _>(StandardNormal);
                    let im = r.sample::<f64, _>(StandardNormal);
                    let real = k == 0 || (n % 2 == 0 && k == n / 2);
                    C64::new(re, if real { 0.0 } else { im })
                })
                .collect();
            let got = fft.inverse(&c, n);
            let want = naive_inverse(&c, n);
            assert_eq!(got.len(), n);
            let diff: Vec<f64> = got.iter().zip(&want).map(|(a, b)| a - b).collect();
            // ‖x‖ = two-sided ‖C‖ (orthonormal, Parseval).
            let norm: f64 = c
                .iter()
                .enumerate()
                .map(|(k, v)| cyclarc::signal::weight(k, n) * v.norm_sqr())
                .sum::<f64>()
                .sqrt();
            let tol = (fft_rel_bound(n) + oracle_rel_bound(n)) * norm;
            let err = norm_r(&diff);
            worst = worst.max(err / tol);
            assert!(err <= tol, "{name} inverse N={n}: ‖Δx‖ = {err:e} > {tol:e}");
            // And the round trip through the same transform: two FFT passes.
            let back = fft.forward(&got);
            let rt: Vec<C64> = back.iter().zip(&c).map(|(a, b)| a - b).collect();
            let tol2 = 2.0 * fft_rel_bound(n) * norm;
            assert!(norm_c(&rt) <= tol2, "{name} round trip N={n}");
        }
    }
    eprintln!("inverse: worst error / bound = {worst:.2e}");
}

#[test]
fn textbook_dft_examples_cosine_on_a_bin_and_leakage_of_eight_and_a_half_cycles() {
    for (name, fft) in transforms() {
        // Real cosine of amplitude A on integer bin k0: |X[k0]| = A·N/2 (REFERENCE-FACTS,
        // [derived] from the DFT definition), i.e. |c_k0| = A·√N/2.
        let (n, k0, a) = (64usize, 5usize, 3.0);
        let x: Vec<f64> = (0..n)
            .map(|i| a * (2.0 * std::f64::consts::PI * (k0 * i) as f64 / n as f64 + 0.4).cos())
            .collect();
        let c = fft.forward(&x);
        let want = a * n as f64 / 2.0;
        let got = c[k0].norm() * (n as f64).sqrt();
        let tol = fft_rel_bound(n) * norm_r(&x) * (n as f64).sqrt();
        assert!((got - want).abs() <= tol, "{name}: |X[k0]| {got} vs {want}");

        // Lyons, *Understanding DSP* 2nd ed. pp. 69–71: N = 32, 8.5 cycles of a unit sine;
        // the book quotes ≈ 10.17, the exact values are |X[8]| = 10.153170 and
        // |X[9]| = 10.251902 ([derived], REFERENCE-FACTS). Printed to 6 decimals: ±5e-7.
        // The exact values are recomputed here from the Dirichlet kernel of both the positive
        // and the negative frequency (Sundararajan, *The DFT*, "Leakage effect"):
        // sin θn = (e^{iθn} − e^{−iθn})/2i, Σ_n e^{i2π(l−k)n/N} = (1 − e^{i2π(l−k)})/(1 − e^{i2π(l−k)/N}).
        let n = 32usize;
        let l = 8.5;
        let x: Vec<f64> = (0..n)
            .map(|i| (2.0 * std::f64::consts::PI * l * i as f64 / n as f64).sin())
            .collect();
        let c = fft.forward(&x);
        let geometric = |d: f64| -> C64 {
            // Σ_{n<N} e^{i2π·d·n/N}
            let z = C64::from_polar(1.0, 2.0 * std::f64::consts::PI * d / n as f64);
            (C64::new(1.0, 0.0) - z.powu(n as u32)) / (C64::new(1.0, 0.0) - z)
        };
        for (k, book) in [(8usize, 10.153170), (9, 10.251902)] {
            let kf = k as f64;
            let exact = ((geometric(l - kf) - geometric(-l - kf)) / C64::new(0.0, 2.0)).norm();
            assert!(
                (exact - book).abs() <= 5e-7,
                "Lyons X[{k}]: {exact} vs {book}"
            );
            let got = c[k].norm() * (n as f64).sqrt();
            let tol = fft_rel_bound(n) * norm_r(&x) * (n as f64).sqrt();
            assert!(
                (got - exact).abs() <= tol,
                "{name} X[{k}] = {got}, exact {exact}"
            );
        }
    }
}

/// One encoding case of the decoder comparison.
struct Case {
    name: &'static str,
    values: Vec<f64>,
    fs: f64,
    value_type: ValueType,
    options: EncodeOptions,
}

fn decoder_cases() -> Vec<Case> {
    let fs_i = 20_000.0;
    let n_i = 100_000;
    let current = three_phase(0, 50.0, fs_i, n_i, 11);
    let rel = |f: f64| EncodeOptions {
        budget_rel: Some(f),
        ..Default::default()
    };
    let abs = |e: f64| EncodeOptions {
        budget_rms: Some(e),
        ..Default::default()
    };
    let fs_v = 25_600.0;
    let n_v = 76_800;
    let vib = vibration(fs_v, n_v, 0.02, 5);
    // f32 vibration with NaN, +Inf and −Inf in it: errors count finite values only.
    let mut vib32: Vec<f64> = vib.iter().map(|&v| v as f32 as f64).collect();
    for i in (1000..n_v).step_by(7919) {
        vib32[i] = f64::NAN;
        vib32[i + 1] = f64::INFINITY;
        vib32[i + 2] = f64::NEG_INFINITY;
    }
    vec![
        Case {
            name: "three-phase current f64, 0.5 % RMS",
            values: current.clone(),
            fs: fs_i,
            value_type: ValueType::F64,
            options: rel(0.005),
        },
        Case {
            name: "three-phase current f32, 0.5 % RMS",
            values: current.iter().map(|&v| v as f32 as f64).collect(),
            fs: fs_i,
            value_type: ValueType::F32,
            options: rel(0.005),
        },
        Case {
            name: "three-phase current i16 counts (×200), 0.5 % RMS",
            values: current.iter().map(|&v| (v * 200.0).round()).collect(),
            fs: fs_i,
            value_type: ValueType::I16,
            options: rel(0.005),
        },
        Case {
            name: "three-phase current i16 counts (×200), 0.4 counts",
            values: current.iter().map(|&v| (v * 200.0).round()).collect(),
            fs: fs_i,
            value_type: ValueType::I16,
            options: abs(0.4),
        },
        Case {
            name: "vibration f64, 0.03 g",
            values: vib.clone(),
            fs: fs_v,
            value_type: ValueType::F64,
            options: abs(0.03),
        },
        Case {
            name: "vibration f32 with NaN/±Inf, 2 % RMS",
            values: vib32,
            fs: fs_v,
            value_type: ValueType::F32,
            options: rel(0.02),
        },
        Case {
            name: "vibration i16 counts (mg), 30 counts",
            values: vib.iter().map(|&v| (v * 1000.0).round()).collect(),
            fs: fs_v,
            value_type: ValueType::I16,
            options: abs(30.0),
        },
    ]
}

#[test]
fn scalar_decoder_meets_every_budget_of_archives_written_with_the_default_planner() {
    let scalar = ScalarFft::default();
    for case in decoder_cases() {
        let s = settings(case.options.clone());
        let run = run_of(&case.values, case.fs);
        let p = RunParams::new("x", case.value_type, Some(case.fs), &s.codec);
        let enc = encode_run(&run, &p).unwrap();
        let by_default = decode_run(&enc, RealFft::shared());
        let by_scalar = decode_run(&enc, &scalar);
        let (mut fourier, mut worst_ratio, mut worst_kernel) = (0usize, 0.0f64, 0.0f64);
        for (d, e) in by_default.iter().zip(&by_scalar) {
            let n = d.record.len;
            let x = &run.values[d.start..d.start + n];
            let budget = d.plan.budget_rms;
            // The budget is what the README promises, stored as f32 rounded down.
            let promised = promised_budget(s.codec.budget, x);
            assert!(
                is_f32_rounded_down(budget, promised),
                "{}: budget {budget} vs promised {promised}",
                case.name
            );
            let err_default = rms_error(x, &d.values);
            let err_scalar = rms_error(x, &e.values);
            assert!(
                err_default <= budget && err_scalar <= budget,
                "{} segment at {}: errors {err_default:e} / {err_scalar:e} over budget {budget:e}",
                case.name,
                d.start
            );
            // The encoder's widened bound covers any kernel within ±τ.
            assert!(
                err_scalar <= d.plan.bound_rms,
                "{}: scalar error above bound",
                case.name
            );
            // Same kernels as the encoder: the recorded error is the decoded one.
            assert!(
                (err_default - d.plan.error_rms).abs() <= 8.0 * U * budget,
                "{}: decoded {err_default:e} vs recorded {:e}",
                case.name,
                d.plan.error_rms
            );
            if budget > 0.0 {
                worst_ratio = worst_ratio.max(err_scalar / budget);
            }
            if d.record.basis == Basis::Fourier {
                fourier += 1;
                assert_eq!(d.coeffs, e.coeffs, "dequantization does not use the FFT");
                let (y_d, _) = synthesize(&d.coeffs, n, ValueType::F64, RealFft::shared());
                let (y_s, _) = synthesize(&e.coeffs, n, ValueType::F64, &scalar);
                let peak = y_d.iter().fold(0.0f64, |a, v| a.max(v.abs()));
                let tau = FP_MARGIN_REL * peak;
                let dmax = y_d
                    .iter()
                    .zip(&y_s)
                    .fold(0.0f64, |a, (u, v)| a.max((u - v).abs()));
                // Each decoder is within fft_rel_bound·‖y‖₂ of the exact inverse.
                let kernel_bound = 2.0 * fft_rel_bound(n) * norm_r(&y_d);
                assert!(
                    dmax <= kernel_bound,
                    "{}: kernels differ by {dmax:e}",
                    case.name
                );
                // …and that bound is far below the margin the encoder reserves.
                assert!(
                    kernel_bound <= tau / 100.0,
                    "{}: kernel bound {kernel_bound:e} not ≪ margin {tau:e}",
                    case.name
                );
                worst_kernel = worst_kernel.max(dmax / tau);
            }
        }
        assert!(fourier > 0, "{}: no Fourier segments to compare", case.name);
        eprintln!(
            "{}: {} segments ({} Fourier), worst scalar error/budget {:.3}, \
             worst |Δy| between kernels / margin τ {:.1e}",
            case.name,
            by_default.len(),
            fourier,
            worst_ratio,
            worst_kernel
        );
    }
}

#[test]
fn noisy_vibration_above_its_noise_floor_codes_below_the_time_domain_quantizer() {
    // Budget 1.5× the broadband noise RMS (README, "Budgets": a budget above the noise floor
    // keeps the harmonics and drops the noise).
    let fs = 25_600.0;
    let sigma = 0.02;
    let x = vibration(fs, 256_000, sigma, 21);
    let s = settings(EncodeOptions {
        budget_rms: Some(1.5 * sigma),
        ..Default::default()
    });
    let run = run_of(&x, fs);
    let p = RunParams::new("accel", ValueType::F32, Some(fs), &s.codec);
    let run = cyclarc::model::Run {
        values: run.values.iter().map(|&v| v as f32 as f64).collect(),
        ..run
    };
    let enc = encode_run(&run, &p).unwrap();
    assert_eq!(s.codec.budget, Budget::Absolute(1.5 * sigma));
    for d in decode_run(&enc, RealFft::shared()) {
        let x = &run.values[d.start..d.start + d.record.len];
        assert!(is_f32_rounded_down(d.plan.budget_rms, 1.5 * sigma));
        assert!(rms_error(x, &d.values) <= d.plan.budget_rms);
    }
    let ours = enc.payload_bytes();
    let theirs = time_domain_bytes(&run, &p);
    let raw_f32 = 4 * x.len();
    eprintln!(
        "vibration (σ_noise {sigma} g, budget {} g): cyclarc {ours} B, time-domain quantizer \
         + zstd-19 {theirs} B (ratio {:.2}), raw f32 {raw_f32} B (ratio {:.1})",
        1.5 * sigma,
        theirs as f64 / ours as f64,
        raw_f32 as f64 / ours as f64
    );
    assert!(
        ours <= theirs,
        "payload {ours} B above the time-domain baseline {theirs} B"
    );
}
