//! Property tests (proptest, fixed seed, no failure files): random periodic signals with
//! noise, random lengths 1 … 10⁵, random budgets (absolute and relative), frequencies, block
//! sizes and value types f64/f32/i16.
//!
//! Properties, each against a definition outside the code under test:
//! - the decoded error (RMS over the finite values, in the value type) is within the budget
//!   the README promises (absolute, or max(fraction · segment RMS, floor), stored as f32
//!   rounded down), decoded with the default kernels and with rustfft's scalar ones;
//! - the order is least for its step: with the segment's own step and prediction, the
//!   Parseval energy (crate docs, "Error") of order L meets the target and that of L − 1
//!   does not. The energies are recomputed here from the decoded coefficients
//!   (Σ_{k<L} w_k|c_k − ĉ_k|² + Σ_{k≥L} w_k|c_k|², quantization of a bin does not depend on L),
//!   and cross-checked with `fit::error_by_order`; predicted segments included, with the
//!   prediction rebuilt from the previous decoded segment by `signal::predict` as the
//!   decoder does;
//! - the bytes do not depend on the thread count (DEVELOPERS, "Determinism").
use crate::support::codec::*;
use crate::support::signals::*;
use cyclarc::codec::fit::error_by_order;
use cyclarc::codec::{encode_run, RunEncoding, RunParams};
use cyclarc::model::Basis;
use cyclarc::model::ValueType;
use cyclarc::options::EncodeOptions;
use cyclarc::signal::{fill_non_finite, predict, weight, RealFft, Transform};
use proptest::prelude::*;
use proptest::test_runner::{Config, RngAlgorithm, RngSeed};
use rand::Rng;
use rand_distr::{Distribution, Normal};

fn config(cases: u32, seed: u64) -> Config {
    Config {
        cases,
        failure_persistence: None,
        rng_algorithm: RngAlgorithm::ChaCha,
        rng_seed: RngSeed::Fixed(seed),
        max_shrink_iters: 64,
        ..Config::default()
    }
}

#[derive(Debug, Clone, Copy)]
enum BudgetKind {
    /// Absolute, as a fraction of the whole signal's RMS.
    Abs(f64),
    /// Relative fraction, with a floor as a fraction of the signal's RMS.
    Rel(f64, f64),
    Lossless,
}

#[derive(Debug, Clone, Copy)]
enum Fundamental {
    Auto,
    /// Given, with a relative error from the true one.
    Given(f64),
    None,
}

#[derive(Debug, Clone)]
struct Case {
    n: usize,
    fs: f64,
    /// Samples per period of the true fundamental.
    period: f64,
    /// Harmonic amplitudes (harmonic 1, 2, …).
    harmonics: Vec<f64>,
    /// Noise RMS relative to amplitude 1.
    noise: f64,
    /// Magnitude of the signal (amplitude 1 → `scale` units).
    scale: f64,
    offset: f64,
    value_type: ValueType,
    budget: BudgetKind,
    fundamental: Fundamental,
    block_segments: Option<usize>,
    /// A non-finite value (NaN, +∞, −∞ in turn; null for integers) every this many samples.
    nan_every: Option<usize>,
    /// A run of missing values: (start, length) as fractions of the signal.
    burst: Option<(f64, f64)>,
    seed: u64,
}

fn case() -> impl Strategy<Value = Case> {
    // Lengths log-uniform over 1 … 10⁵.
    let n = (0.0f64..5.0).prop_map(|e| 10f64.powf(e).round() as usize);
    let fs = prop_oneof![Just(1_000.0), Just(10_240.0), Just(25_600.0)];
    let period = (2.5f64..2_000.0).prop_map(|p| p.max(2.5));
    let harmonics = prop::collection::vec(0.0f64..1.0, 0..7);
    let noise = prop_oneof![Just(0.0), 1e-4f64..0.3];
    let scale = (-6.0f64..8.0).prop_map(|e| 10f64.powf(e));
    let vt = prop_oneof![
        Just(ValueType::F64),
        Just(ValueType::F32),
        Just(ValueType::I16)
    ];
    let budget = prop_oneof![
        4 => (1e-4f64..0.3).prop_map(BudgetKind::Abs),
        4 => ((1e-4f64..0.3), prop_oneof![Just(0.0), 1e-4f64..0.05])
            .prop_map(|(f, fl)| BudgetKind::Rel(f, fl)),
        1 => Just(BudgetKind::Lossless),
    ];
    let fundamental = prop_oneof![
        3 => Just(Fundamental::Auto),
        2 => (-0.01f64..0.01).prop_map(Fundamental::Given),
        1 => Just(Fundamental::None),
    ];
    let blocks = prop_oneof![Just(None), Just(Some(1)), Just(Some(3)), Just(Some(16))];
    let nan_every = prop_oneof![3 => Just(None), 1 => (50usize..5_000).prop_map(Some)];
    let burst = prop_oneof![4 => Just(None), 1 => (0.0f64..1.0, 0.0f64..0.5).prop_map(Some)];
    // Mostly a small offset; sometimes a DC far above the swing (f32 rounding at the DC's
    // magnitude then dominates).
    let offset = prop_oneof![3 => -1.0f64..1.0, 1 => -1_000.0f64..1_000.0];
    (
        (n, fs, period, harmonics, noise, scale, burst),
        (
            vt,
            budget,
            fundamental,
            blocks,
            nan_every,
            any::<u64>(),
            offset,
        ),
    )
        .prop_map(
            |(
                (n, fs, period, harmonics, noise, scale, burst),
                (value_type, budget, fundamental, block_segments, nan_every, seed, offset),
            )| Case {
                n: n.max(1),
                fs,
                period,
                harmonics,
                noise,
                scale,
                offset,
                value_type,
                budget,
                fundamental,
                block_segments,
                nan_every,
                burst,
                seed,
            },
        )
}

/// The signal of a case, in its value type (i16 scaled into range and rounded).
fn signal(c: &Case) -> Vec<f64> {
    let mut r = rng(c.seed);
    let noise = Normal::new(0.0, c.noise.max(1e-300)).unwrap();
    let phases: Vec<f64> = c
        .harmonics
        .iter()
        .map(|_| r.random::<f64>() * std::f64::consts::TAU)
        .collect();
    let peak: f64 = c.offset.abs() + 1.0 + c.harmonics.iter().sum::<f64>() + 5.0 * c.noise;
    let scale = match c.value_type {
        // Counts: keep |value| ≤ 30 000 and at least a few counts of swing.
        ValueType::I16 => (c.scale.clamp(2.0, 30_000.0)) / peak,
        _ => c.scale,
    };
    (0..c.n)
        .map(|i| {
            let t = i as f64 / c.period;
            let mut v = c.offset;
            for (h, (&a, &ph)) in c.harmonics.iter().zip(&phases).enumerate() {
                v += a * (2.0 * std::f64::consts::PI * (h + 1) as f64 * t + ph).cos();
            }
            if c.noise > 0.0 {
                v += noise.sample(&mut r);
            }
            let v = v * scale;
            let v = match c.value_type {
                ValueType::F64 => v,
                ValueType::F32 => v as f32 as f64,
                _ => v.round().clamp(-32_768.0, 32_767.0),
            };
            let in_burst = c.burst.is_some_and(|(a, l)| {
                let f = i as f64 / c.n as f64;
                f >= a && f < a + l
            });
            match c.nan_every {
                _ if in_burst => f64::NAN,
                Some(k) if i % k == k / 2 => {
                    if c.value_type.is_integer() {
                        f64::NAN
                    } else {
                        [f64::NAN, f64::INFINITY, f64::NEG_INFINITY][(i / k) % 3]
                    }
                }
                _ => v,
            }
        })
        .collect()
}

fn options(c: &Case, x: &[f64]) -> EncodeOptions {
    // A silent signal gets budgets scaled from 1e-30: archives record budgets as f32, whose
    // least positive value is 1.4e-45 (IEEE 754 binary32), and refuse smaller ones.
    let rms = finite_rms_of(x).max(1e-30);
    let mut o = EncodeOptions {
        block_segments: c.block_segments,
        fundamental: Some(match c.fundamental {
            Fundamental::Auto => "auto".to_string(),
            Fundamental::None => "none".to_string(),
            Fundamental::Given(e) => format!("{}", c.fs / c.period * (1.0 + e)),
        }),
        ..Default::default()
    };
    match c.budget {
        BudgetKind::Abs(f) => o.budget_rms = Some(f * rms),
        BudgetKind::Rel(f, fl) => {
            o.budget_rel = Some(f);
            o.budget_floor = Some(fl * rms);
        }
        BudgetKind::Lossless => o.budget_rms = Some(0.0),
    }
    o
}

fn encode(c: &Case, x: &[f64]) -> (cyclarc::model::Run, cyclarc::options::Settings) {
    let mut run = run_of(x, c.fs);
    // An integer column has nulls, not NaN.
    if c.value_type.is_integer() {
        for sp in &mut run.specials {
            sp.1 = cyclarc::model::SpecialKind::Null;
        }
    }
    (run, settings(options(c, x)))
}

fn params<'a>(c: &Case, s: &'a cyclarc::options::Settings) -> RunParams<'a> {
    RunParams::new("p", c.value_type, Some(c.fs), &s.codec)
}

/// Check budgets and least orders of one encoding; returns (segments, Fourier, predicted).
fn check(
    run: &cyclarc::model::Run,
    s: &cyclarc::options::Settings,
    enc: &RunEncoding,
) -> Result<(usize, usize, usize), TestCaseError> {
    let (mut fourier, mut predicted) = (0, 0);
    let decoded = decode_run(enc, RealFft::shared());
    // And with rustfft's scalar kernels, as a decoding machine without SIMD would.
    let scalar = decode_run(enc, &cyclarc::signal::ScalarFft::default());
    for (d, e) in decoded.iter().zip(&scalar) {
        let n = d.record.len;
        let x = &run.values[d.start..d.start + n];
        // Budget: as promised, and met by the decoded output.
        let promised = promised_budget(s.codec.budget, x);
        let budget = d.plan.budget_rms;
        prop_assert!(
            is_f32_rounded_down(budget, promised),
            "budget {} vs promised {}",
            budget,
            promised
        );
        let err = rms_error(x, &d.values);
        prop_assert!(
            err <= budget,
            "segment at {}: error {:e} > budget {:e}",
            d.start,
            err,
            budget
        );
        let err_s = rms_error(x, &e.values);
        prop_assert!(
            err_s <= d.plan.bound_rms && d.plan.bound_rms <= budget,
            "scalar decoder: error {:e}, bound {:e}, budget {:e}",
            err_s,
            d.plan.bound_rms,
            budget
        );
        if promised == 0.0 {
            prop_assert_eq!(err, 0.0);
        }
        // The archive row: budget as stored, recorded error rounded up to f32 and still
        // within the stored budget (README, "Conventions"; what `verify` relies on).
        prop_assert_eq!(d.row.budget_rms as f64, budget);
        prop_assert!(
            d.row.error_rms as f64 >= err,
            "recorded error below the decoded one"
        );
        prop_assert!(d.row.error_rms <= d.row.budget_rms);
        prop_assert_eq!(d.row.samples as usize, n);
        // Orders of angle-coded segments refer to the resampled segment (crate docs, "Warp"):
        // the least-order check below is on the time-domain spectrum.
        if d.record.basis != Basis::Fourier || d.record.warp.is_some() {
            continue;
        }
        fourier += 1;
        // Least order for the plan's step and prediction.
        let mut filled = x.to_vec();
        let n_finite = fill_non_finite(&mut filled);
        let spec = RealFft::shared().forward(&filled);
        let pred = if d.record.predicted {
            predicted += 1;
            let (pc, pn, pideal) = d
                .prev
                .as_ref()
                .expect("predicted segment has a previous one");
            Some(predict(pc, *pn, *pideal, n, spec.len()))
        } else {
            None
        };
        let l = d.record.order as usize;
        prop_assert_eq!(d.coeffs.len(), l);
        let energy = |order: usize| -> f64 {
            let head: f64 = (0..order)
                .map(|k| weight(k, n) * (spec[k] - d.coeffs[k]).norm_sqr())
                .sum();
            let tail: f64 = (order..spec.len())
                .map(|k| weight(k, n) * spec[k].norm_sqr())
                .sum();
            head + tail
        };
        // Rounding allowance between this sum and the library's: the library forms
        // (c − p) − Δq, this test c − (p + Δq); each differs from the exact residual e_k by
        // δ_k ≤ 4u(|c_k| + |p_k| + |ĉ_k|), changing w|e|² by ≤ w(2|e|δ + δ²); summing m
        // non-negative terms in another order moves the sum by ≤ 2m·u of itself.
        let zero = cyclarc::signal::C64::new(0.0, 0.0);
        let slack = |order: usize, e: f64| -> f64 {
            let per_bin: f64 = (0..order)
                .map(|k| {
                    let p = pred.as_ref().map_or(zero, |p| p[k]);
                    let dk = 4.0 * U * (spec[k].norm() + p.norm() + d.coeffs[k].norm());
                    let ek = (spec[k] - d.coeffs[k]).norm();
                    weight(k, n) * (2.0 * ek * dk + dk * dk)
                })
                .sum();
            per_bin + 2.0 * spec.len() as f64 * U * e
        };
        // target_rms is √(target²): squaring it back is within 3u of the library's target.
        let target = d.plan.target_rms.powi(2) * n_finite as f64;
        let t_slack = 4.0 * U * target;
        let e_l = energy(l);
        prop_assert!(
            e_l <= target + t_slack + slack(l, e_l),
            "order {} misses its target: {:e} > {:e}",
            l,
            e_l,
            target
        );
        if l > 0 {
            let e_m = energy(l - 1);
            prop_assert!(
                e_m > target - t_slack - slack(l - 1, e_m),
                "order {} − 1 already meets the target: {:e} ≤ {:e}",
                l,
                e_m,
                target
            );
        }
        // The library's own energies agree, and give the same least order.
        let by_lib = error_by_order(&spec, pred.as_deref(), d.record.step as f64, n);
        prop_assert!((by_lib[l] - e_l).abs() <= slack(l, e_l.max(by_lib[l])));
        let least = by_lib.iter().position(|&e| e <= target + t_slack);
        prop_assert_eq!(least, Some(l));
    }
    Ok((decoded.len(), fourier, predicted))
}

#[test]
fn decoded_error_is_within_budget_and_order_is_least_for_its_step() {
    let mut runner = proptest::test_runner::TestRunner::new(config(1000, 0x5EED_C1C1));
    let totals = std::cell::Cell::new((0usize, 0usize, 0usize, 0usize));
    runner
        .run(&case(), |c| {
            let x = signal(&c);
            let (run, s) = encode(&c, &x);
            let enc = encode_run(&run, &params(&c, &s)).expect("encodes");
            let (segs, f, p) = check(&run, &s, &enc)?;
            let t = totals.get();
            totals.set((t.0 + 1, t.1 + segs, t.2 + f, t.3 + p));
            Ok(())
        })
        .unwrap();
    let totals = totals.get();
    eprintln!(
        "{} cases, {} segments, {} Fourier ({} predicted) checked",
        totals.0, totals.1, totals.2, totals.3
    );
    // The generator must reach the interesting paths.
    assert!(totals.2 > 20 && totals.3 > 5, "{totals:?}");
}

#[test]
fn bytes_are_identical_on_one_thread_and_many() {
    let one = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    let four = rayon::ThreadPoolBuilder::new()
        .num_threads(4)
        .build()
        .unwrap();
    let mut runner = proptest::test_runner::TestRunner::new(config(24, 0xD1CE_0004));
    // Many blocks per run, so that the blocks really are spread over the threads.
    let strategy = case().prop_map(|mut c| {
        c.block_segments = Some(2);
        c.n = c.n.max(20_000);
        c
    });
    runner
        .run(&strategy, |c| {
            let x = signal(&c);
            let (run, s) = encode(&c, &x);
            let p = params(&c, &s);
            let a = one.install(|| encode_run(&run, &p)).expect("encodes");
            let b = four.install(|| encode_run(&run, &p)).expect("encodes");
            prop_assert_eq!(a.blocks.len(), b.blocks.len());
            for (x, y) in a.blocks.iter().zip(&b.blocks) {
                prop_assert!(x.frame == y.frame, "frames differ");
                prop_assert_eq!(&x.fits, &y.fits);
            }
            prop_assert_eq!(a.plan, b.plan);
            Ok(())
        })
        .unwrap();
}
