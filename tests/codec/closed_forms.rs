//! Closed forms: square, triangle and sawtooth waves against their handbook Fourier series.
//!
//! Sources (see REFERENCE-FACTS): Spiegel, *Mathematical Handbook of Formulas and Tables*
//! (1968) §23 for the series; Blagouchine & Moreau, IEEE Trans. Commun. 59(9), 2011 for the
//! THD of square and triangle; Nagle, Saff & Snider, *Fundamentals of Differential
//! Equations*, ch. 10 for the Gibbs peak; the truncation-error table is [derived] by Parseval
//! and recomputed here two ways.
//!
//! Sampling. A waveform sampled with M samples per period has the DFT coefficients of its
//! continuous series folded by aliasing (Poisson summation): ĉ_k = Σ_m F_{k+mM}, with
//! ĉ_k = (1/M) Σ_j f(2πj/M) e^(−2πikj/M) and F_n the complex Fourier coefficients; at a jump
//! the sample takes the midpoint, which is where the series converges (Dirichlet). The
//! aliasing sums have closed forms through Euler's partial fractions
//! Σ_m 1/(z + m) = π·cot(πz) (symmetric summation) and Σ_m 1/(z + m)² = π²/sin²(πz)
//! (Abramowitz & Stegun 4.3.91–92, equation numbers from memory):
//!
//! - square sign(sin x), b_n = 4/(nπ), n odd, so F_n = −2i/(nπ):
//!   ĉ_k = −(2i/M)·cot(πk/M) for odd k, 0 for even k (M even);
//! - triangle (2/π)·arcsin(sin x), b_n = 8(−1)^((n−1)/2)/(π²n²), n odd, so
//!   F_n = −4i·sin(nπ/2)/(π²n²): ĉ_k = −4i·sin(kπ/2)/(M²·sin²(πk/M)) (M a multiple of 4);
//! - sawtooth x/π on (−π, π), b_n = 2(−1)^(n+1)/(nπ), so F_n = i(−1)^n/(nπ):
//!   ĉ_k = i(−1)^k·cot(πk/M)/M, ĉ_0 = 0 (M even).
//!
//! A segment of K whole periods (N = K·M samples) has cyclarc coefficient c_{kK} = √N·ĉ_k
//! and zero elsewhere. The closed forms are cross-checked against partial aliasing sums of
//! the handbook coefficients with a bounded tail, then cyclarc is checked against them.
use std::f64::consts::PI;

use crate::support::codec::*;
use cyclarc::codec::fit::{error_by_order, fit_segment, SegmentInput};
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::Basis;
use cyclarc::model::ValueType;
use cyclarc::options::EncodeOptions;
use cyclarc::signal::{half_len, thd, weight, RealFft, Transform, C64};

#[derive(Clone, Copy, Debug, PartialEq)]
enum Wave {
    Square,
    Triangle,
    Sawtooth,
}

const WAVES: [Wave; 3] = [Wave::Square, Wave::Triangle, Wave::Sawtooth];

impl Wave {
    /// Sample j of M per period (x = 2πj/M), midpoint at jumps.
    fn sample(self, j: usize, m: usize) -> f64 {
        let j = j % m;
        let (jf, mf) = (j as f64, m as f64);
        match self {
            Wave::Square => {
                if j == 0 || 2 * j == m {
                    0.0
                } else if 2 * j < m {
                    1.0
                } else {
                    -1.0
                }
            }
            Wave::Triangle => {
                // Piecewise linear through (0, 0), (M/4, 1), (3M/4, −1), (M, 0).
                if 4 * j <= m {
                    4.0 * jf / mf
                } else if 4 * j <= 3 * m {
                    2.0 - 4.0 * jf / mf
                } else {
                    4.0 * jf / mf - 4.0
                }
            }
            Wave::Sawtooth => {
                if 2 * j == m {
                    0.0
                } else if 2 * j < m {
                    2.0 * jf / mf
                } else {
                    2.0 * jf / mf - 2.0
                }
            }
        }
    }

    /// `periods` periods of M samples each.
    fn samples(self, m: usize, periods: usize) -> Vec<f64> {
        (0..m * periods).map(|j| self.sample(j, m)).collect()
    }

    /// Handbook sine coefficient b_n (Spiegel §23).
    fn b(self, n: u64) -> f64 {
        let nf = n as f64;
        match self {
            Wave::Square if n % 2 == 1 => 4.0 / (nf * PI),
            Wave::Triangle if n % 2 == 1 => {
                let s = if ((n - 1) / 2).is_multiple_of(2) {
                    1.0
                } else {
                    -1.0
                };
                8.0 * s / (PI * PI * nf * nf)
            }
            Wave::Sawtooth => {
                let s = if n % 2 == 1 { 1.0 } else { -1.0 };
                2.0 * s / (nf * PI)
            }
            _ => 0.0,
        }
    }

    /// Complex coefficient F_n of the continuous series, any integer n (sine series:
    /// F_n = b_n/(2i), F_−n = −F_n).
    fn f(self, n: i64) -> C64 {
        if n == 0 {
            return C64::new(0.0, 0.0);
        }
        let v = C64::new(0.0, -self.b(n.unsigned_abs()) / 2.0);
        if n > 0 {
            v
        } else {
            -v
        }
    }

    /// Mean square of the continuous wave (REFERENCE-FACTS table: 1, 1/3, 1/3).
    fn mean_square(self) -> f64 {
        match self {
            Wave::Square => 1.0,
            Wave::Triangle | Wave::Sawtooth => 1.0 / 3.0,
        }
    }

    /// Closed-form aliased coefficient ĉ_k of the sampled wave (module docs).
    fn sampled(self, k: usize, m: usize) -> C64 {
        let (kf, mf) = (k as f64, m as f64);
        if k.is_multiple_of(m) {
            return C64::new(0.0, 0.0);
        }
        let th = PI * kf / mf;
        match self {
            Wave::Square if k % 2 == 1 => C64::new(0.0, -2.0 / (mf * th.tan())),
            Wave::Square => C64::new(0.0, 0.0),
            Wave::Triangle => {
                let s = (kf * PI / 2.0).sin();
                // sin(kπ/2) is exactly 0, ±1 for integer k; avoid its rounding.
                let s = s.round();
                C64::new(0.0, -4.0 * s / (mf * mf * th.sin().powi(2)))
            }
            Wave::Sawtooth => {
                let s = if k.is_multiple_of(2) { 1.0 } else { -1.0 };
                C64::new(0.0, s / (mf * th.tan()))
            }
        }
    }

    /// Continuous THD to the fundamental (REFERENCE-FACTS): square √(π²/8 − 1) and triangle
    /// √(π⁴/96 − 1) [src] Blagouchine & Moreau 2011; sawtooth √(π²/6 − 1) [derived].
    fn thd(self) -> f64 {
        match self {
            Wave::Square => (PI * PI / 8.0 - 1.0).sqrt(),
            Wave::Triangle => (PI.powi(4) / 96.0 - 1.0).sqrt(),
            Wave::Sawtooth => (PI * PI / 6.0 - 1.0).sqrt(),
        }
    }

    /// Continuous truncation error E_L (mean square left after harmonics n ≤ L), by the
    /// polygamma closed forms of REFERENCE-FACTS.
    fn tail_polygamma(self, l: u64) -> f64 {
        match self {
            Wave::Square => {
                let k = l.div_ceil(2) as f64;
                2.0 / (PI * PI) * trigamma(k + 0.5)
            }
            Wave::Triangle => {
                let k = l.div_ceil(2) as f64;
                tetragamma3(k + 0.5) / (3.0 * PI.powi(4))
            }
            Wave::Sawtooth => 2.0 / (PI * PI) * trigamma(l as f64 + 1.0),
        }
    }

    /// The same by Parseval: mean square − Σ_{n≤L} b_n²/2.
    fn tail_parseval(self, l: u64) -> f64 {
        self.mean_square() - (1..=l).map(|n| self.b(n).powi(2) / 2.0).sum::<f64>()
    }
}

/// ψ₁(z) (trigamma): recurrence ψ₁(z) = ψ₁(z + 1) + 1/z² up to z ≥ 30, then the asymptotic
/// series 1/z + 1/(2z²) + Σ B₂ₖ/z^(2k+1) (Abramowitz & Stegun 6.4.12); next term < 1e-16.
fn trigamma(z: f64) -> f64 {
    let (mut s, mut w) = (0.0, z);
    while w < 30.0 {
        s += 1.0 / (w * w);
        w += 1.0;
    }
    s + 1.0 / w + 1.0 / (2.0 * w * w) + 1.0 / (6.0 * w.powi(3)) - 1.0 / (30.0 * w.powi(5))
        + 1.0 / (42.0 * w.powi(7))
        - 1.0 / (30.0 * w.powi(9))
}

/// ψ₃(z): recurrence ψ₃(z) = ψ₃(z + 1) + 6/z⁴, then the second derivative of the series
/// above: 2/z³ + 3/z⁴ + 2/z⁵ − 1/z⁷ + 4/(3z⁹) − 3/z¹¹.
fn tetragamma3(z: f64) -> f64 {
    let (mut s, mut w) = (0.0, z);
    while w < 30.0 {
        s += 6.0 / w.powi(4);
        w += 1.0;
    }
    s + 2.0 / w.powi(3) + 3.0 / w.powi(4) + 2.0 / w.powi(5) - 1.0 / w.powi(7)
        + 4.0 / (3.0 * w.powi(9))
        - 3.0 / w.powi(11)
}

/// Half a unit in the last printed decimal of a table value.
fn half_ulp_printed(s: &str) -> f64 {
    let decimals = s.split('.').nth(1).map_or(0, str::len);
    0.5 * 10f64.powi(-(decimals as i32))
}

/// Error of evaluating the closed forms in floating point, relative to ‖x‖ (the samples'
/// 2-norm; ‖x‖/√N per-sample units). θ = πk/M carries 3u relative error. cot θ then moves by
/// ≤ csc²θ·3uθ ≤ (π²/4)·3u/θ (sin θ ≥ 2θ/π on (0, π/2]), i.e. by ≤ 7.4u times the size
/// 2/(πk) = 2/(Mθ) of the continuous coefficient; csc²θ moves by 2θ·cot θ·3u ≤ 6u of
/// itself; cot/sin and the products add ≤ 4u. So each value is within 11.4u of the
/// continuous coefficient's magnitude, whose one-sided vector has norm ≤ √(mean square)
/// (Parseval). For M ≥ 4 the samples' mean square is at least 3/8 of the continuous one
/// (the worst is the sawtooth at M = 4: 1/8 against 1/3), so 11.4u·√(8/3) < 19u of ‖x‖.
const CLOSED_FORM_REL: f64 = 19.0 * U;

#[test]
fn closed_forms_are_the_aliased_handbook_series() {
    // Partial aliasing sums of Spiegel's coefficients, Σ_{|m| ≤ R} F_{k+mM}, against the
    // closed forms, 0 ≤ k ≤ M/2. Tail after R (pairs m, −m):
    // - 1/n (square, sawtooth): |1/(k+mM) + 1/(k−mM)| = 2k/(m²M² − k²) ≤ (2k/M²)/(m² − ¼)
    //   (k² ≤ M²/4), and Σ_{m>R} 1/(m² − ¼) = 1/(R + ½) (telescoping); times the prefactor
    //   2/π (square) or 1/π (sawtooth);
    // - 1/n² (triangle): |F_n| ≤ 4/(π²n²) and |k + mM| ≥ (|m| − ½)M, so the tail is
    //   ≤ 2·(4/(π²M²))·Σ_{m>R} 1/(m − ½)² ≤ (8/(π²M²))/(R − ½) (integral bound).
    let r_max: i64 = 20_000;
    for wave in WAVES {
        for m in [4usize, 8, 16, 64, 256] {
            for k in 0..=m / 2 {
                let mut s = C64::new(0.0, 0.0);
                let mut abs_sum = 0.0;
                for mm in -r_max..=r_max {
                    let f = wave.f(k as i64 + mm * m as i64);
                    s += f;
                    abs_sum += f.norm();
                }
                let (kf, mf, r) = (k as f64, m as f64, r_max as f64);
                let tail = match wave {
                    Wave::Square => 2.0 / PI * (2.0 * kf / (mf * mf)) / (r + 0.5),
                    Wave::Sawtooth => 1.0 / PI * (2.0 * kf / (mf * mf)) / (r + 0.5),
                    Wave::Triangle => 8.0 / (PI * PI * mf * mf) / (r - 0.5),
                };
                // Recursive summation of 2R + 1 terms: ≤ 2R·u·Σ|terms| (Higham, ch. 4), each
                // term carries ≤ 4u of its own; the closed form CLOSED_FORM_REL.
                let want = wave.sampled(k, m);
                let rounding = (2.0 * r + 4.0) * U * abs_sum + CLOSED_FORM_REL * want.norm();
                assert!(
                    (s - want).norm() <= tail + rounding,
                    "{wave:?} M={m} k={k}: alias sum {s} vs closed form {want}"
                );
            }
        }
    }
}

#[test]
fn cyclarc_coefficients_of_sampled_waves_equal_the_closed_forms() {
    let periods = 3;
    for wave in WAVES {
        for m in [4usize, 8, 16, 64, 256, 1024, 4096] {
            let x = wave.samples(m, periods);
            let n = x.len();
            let c = RealFft::shared().forward(&x);
            let want: Vec<C64> = (0..half_len(n))
                .map(|b| {
                    if b % periods == 0 {
                        wave.sampled(b / periods, m) * (n as f64).sqrt()
                    } else {
                        C64::new(0.0, 0.0)
                    }
                })
                .collect();
            let err = c
                .iter()
                .zip(&want)
                .map(|(a, b)| (a - b).norm_sqr())
                .sum::<f64>()
                .sqrt();
            let norm = x.iter().map(|v| v * v).sum::<f64>().sqrt();
            let tol = (fft_rel_bound(n) + CLOSED_FORM_REL) * norm;
            assert!(
                err <= tol,
                "{wave:?} M={m}: ‖c − closed form‖ {err:e} > {tol:e}"
            );
        }
    }
}

#[test]
fn truncation_error_table_matches_parseval_and_polygamma_forms() {
    // REFERENCE-FACTS, "RMS error left after keeping harmonics n ≤ L" [derived].
    let ls = [1u64, 3, 5, 9, 15, 31, 63];
    let table: [(Wave, [&str; 7]); 3] = [
        (
            Wave::Square,
            [
                "0.435236", "0.315226", "0.258736", "0.200986", "0.159052", "0.112521", "0.079574",
            ],
        ),
        (
            Wave::Triangle,
            [
                "0.0694399",
                "0.0276804",
                "0.0155108",
                "0.0073276",
                "0.0036420",
                "0.0012914",
                "0.00045690",
            ],
        ),
        (
            Wave::Sawtooth,
            [
                "0.361512", "0.239822", "0.191686", "0.145983", "0.114320", "0.080203", "0.056490",
            ],
        ),
    ];
    for (wave, row) in table {
        for (&l, s) in ls.iter().zip(row) {
            let printed: f64 = s.parse().unwrap();
            let by_parseval = wave.tail_parseval(l);
            let by_polygamma = wave.tail_polygamma(l);
            // Parseval sums at most 63 terms: ≤ 64u relative; the series are good to 1e-16.
            assert!(
                (by_parseval - by_polygamma).abs() <= 64.0 * U * wave.mean_square() + 1e-16,
                "{wave:?} L={l}: Parseval {by_parseval} vs polygamma {by_polygamma}"
            );
            assert!(
                (by_polygamma.sqrt() - printed).abs() <= half_ulp_printed(s),
                "{wave:?} L={l}: √E_L = {} vs table {s}",
                by_polygamma.sqrt()
            );
        }
    }
}

/// Mean square left in the sampled wave after harmonics h ≤ H (closed form, one-sided
/// weights: 1 at the Nyquist harmonic M/2, else 2).
fn sampled_tail(wave: Wave, m: usize, h: usize) -> f64 {
    (h + 1..=m / 2)
        .map(|k| {
            let w = if 2 * k == m { 1.0 } else { 2.0 };
            w * wave.sampled(k, m).norm_sqr()
        })
        .sum()
}

#[test]
fn least_order_is_the_one_predicted_by_the_truncation_error_after_aliasing() {
    // Budgets between two rows of the table: the geometric mean of E_L at L = a and L = b.
    let cases: [(Wave, u64, u64); 6] = [
        (Wave::Square, 9, 15),
        (Wave::Square, 3, 5),
        (Wave::Triangle, 5, 9),
        (Wave::Triangle, 1, 3),
        (Wave::Sawtooth, 3, 5),
        (Wave::Sawtooth, 9, 15),
    ];
    let periods = 3usize;
    let tiny_step = 1e-9;
    let mut shown = Vec::new();
    let mut clear_cases = std::collections::BTreeMap::<String, usize>::new();
    for (wave, a, b) in cases {
        let target = (wave.tail_polygamma(a) * wave.tail_polygamma(b))
            .sqrt()
            .sqrt();
        let t2 = target * target;
        // Continuous prediction: least H with E_H ≤ target².
        let h_cont = (0..).find(|&h| wave.tail_polygamma(h) <= t2).unwrap() as usize;
        for m in [16usize, 64, 256, 1024, 4096] {
            let x = wave.samples(m, periods);
            let n = x.len();
            let c = RealFft::shared().forward(&x);
            let err = error_by_order(&c, None, tiny_step, n);
            // err[L]/N against the closed-form sampled tail, harmonics h·K < L kept.
            // Tolerance: tiny-step quantization ≤ Σ_{k<L} w_k·2·(Δ/2)² ≤ L·Δ², plus the FFT's
            // rounding on energies |‖a‖² − ‖b‖²| ≤ δ(2‖x‖ + δ), δ = (bound + closed form)·‖x‖.
            let norm = x.iter().map(|v| v * v).sum::<f64>().sqrt();
            let delta = (fft_rel_bound(n) + CLOSED_FORM_REL) * norm;
            for (l, &e) in err.iter().enumerate() {
                let kept_h = if l == 0 {
                    None
                } else {
                    Some((l - 1) / periods)
                };
                let want = match kept_h {
                    None => x.iter().map(|v| v * v).sum::<f64>() / n as f64,
                    Some(h) => sampled_tail(wave, m, h),
                };
                let tol =
                    (l as f64 * tiny_step * tiny_step + delta * (2.0 * norm + delta)) / n as f64;
                assert!(
                    (e / n as f64 - want).abs() <= tol,
                    "{wave:?} M={m} L={l}: error_by_order/N {} vs closed form {want}",
                    e / n as f64
                );
            }
            // Sampled prediction: least H whose closed-form sampled tail meets the target,
            // so that the least order is H·K + 1 (harmonic H is bin H·K).
            let h_samp = (0..=m / 2)
                .find(|&h| sampled_tail(wave, m, h) <= t2)
                .unwrap();
            let target_energy = t2 * n as f64;
            let least = err.iter().position(|&e| e <= target_energy).unwrap();
            assert_eq!(
                least,
                h_samp * periods + 1,
                "{wave:?} M={m} target {target}: least order vs sampled prediction H={h_samp}"
            );
            // The continuous prediction, with an allowance for aliasing computed from M
            // alone. Two-sided, E^s_H = MS_s − Σ_{|k|≤H}|ĉ_k|² and E^c_H = MS_c − Σ_{|k|≤H}|F_k|²,
            // so |E^s_H − E^c_H| ≤ |MS_s − MS_c| + 2·Σ_{k=1..H} α_k(2|F_k| + α_k), where MS_s is
            // the samples' mean square and α_k ≥ |ĉ_k − F_k| = |Σ_{m≠0} F_{k+mM}| bounds the
            // folded terms (pairs m, −m as in the tail bounds above): square (2/π)·(2k/M²)·
            // Σ_{m≥1} 1/(m² − ¼) = 8k/(πM²); sawtooth 4k/(πM²); triangle
            // 2·(4/π²)·Σ_{m≥1} 1/((m − ½)²M²) = 4/M².
            let ms_s = x[..m].iter().map(|v| v * v).sum::<f64>() / m as f64;
            let alpha = |k: usize| -> f64 {
                let (kf, mf) = (k as f64, m as f64);
                match wave {
                    Wave::Square => 8.0 * kf / (PI * mf * mf),
                    Wave::Sawtooth => 4.0 * kf / (PI * mf * mf),
                    Wave::Triangle => 4.0 / (mf * mf),
                }
            };
            let allowance = |h: usize| -> f64 {
                (ms_s - wave.mean_square()).abs()
                    + 2.0
                        * (1..=h)
                            .map(|k| alpha(k) * (2.0 * wave.f(k as i64).norm() + alpha(k)))
                            .sum::<f64>()
            };
            let clear = 2 * h_cont < m
                && t2 - wave.tail_polygamma(h_cont as u64) > allowance(h_cont)
                && (h_cont == 0
                    || wave.tail_polygamma(h_cont as u64 - 1) - t2 > allowance(h_cont - 1));
            if clear {
                // The handbook's truncation errors alone predict the least order.
                assert_eq!(
                    least,
                    h_cont * periods + 1,
                    "{wave:?} M={m}: least order vs the continuous prediction H={h_cont}"
                );
                *clear_cases.entry(format!("{wave:?}")).or_insert(0) += 1;
            }
            // cyclarc's own choice at that budget: at least the truncation order, and least
            // for the step it picked.
            let fitted = fit_segment(
                SegmentInput {
                    values: &x,
                    value_type: ValueType::F64,
                    budget_rms: target,
                },
                None,
                RealFft::shared(),
            );
            let plan = &fitted.plan;
            if plan.basis == Basis::Fourier {
                let l = plan.order.unwrap() as usize;
                let own = error_by_order(&c, None, plan.step as f64, n);
                let own_t = plan.target_rms * plan.target_rms * n as f64;
                let own_least = own.iter().position(|&e| e <= own_t).unwrap();
                assert_eq!(l, own_least, "{wave:?} M={m}: order least for its step");
                assert!(l > h_samp * periods);
            }
            shown.push(format!(
                "{wave:?} M={m} ε={target:.4}: H_cont={h_cont} H_sampled={h_samp} \
                 (aliasing {}), least order at a tiny step {least}; fit_segment: {} order {:?}",
                if clear {
                    "within allowance"
                } else {
                    "may decide"
                },
                plan.basis.name(),
                plan.order
            ));
        }
    }
    eprintln!("{}", shown.join("\n"));
    // The continuous prediction was tested for every waveform.
    assert_eq!(clear_cases.len(), 3, "{clear_cases:?}");
}

/// THD interval from coefficient-level error bounds: numerator A ± dA over fundamental
/// B ± dB (amplitudes w_k·|c_k|).
fn thd_interval(a: f64, da: f64, b: f64, db: f64) -> (f64, f64) {
    ((a - da).max(0.0) / (b + db), (a + da) / (b - db))
}

#[test]
fn thd_of_cyclarc_coefficients_is_the_sampled_closed_form_and_tends_to_the_continuous_one() {
    let periods = 3usize;
    for wave in WAVES {
        let mut last_gap = f64::INFINITY;
        let mut gaps = Vec::new();
        for m in [16usize, 64, 256, 1024, 4096] {
            let x = wave.samples(m, periods);
            let n = x.len();
            let c = RealFft::shared().forward(&x);
            // All harmonics present in the sampled wave: h ≤ M/2.
            let got = thd(&c, periods, n, m / 2).unwrap();
            let amp = |k: usize| {
                let w = if 2 * k == m { 1.0 } else { 2.0 };
                w * wave.sampled(k, m).norm()
            };
            let a = (2..=m / 2).map(|k| amp(k).powi(2)).sum::<f64>().sqrt();
            let b = amp(1);
            // Coefficient errors: ‖Δc‖ ≤ δ/√N per-sample units; amplitudes weigh by ≤ 2.
            let norm = x.iter().map(|v| v * v).sum::<f64>().sqrt();
            let d = 2.0 * (fft_rel_bound(n) + CLOSED_FORM_REL) * norm / (n as f64).sqrt();
            let (lo, hi) = thd_interval(a, d, b, d);
            assert!(
                got >= lo && got <= hi,
                "{wave:?} M={m}: THD {got} outside the closed form's [{lo}, {hi}]"
            );
            // Towards the continuous value √(π²/8 − 1) etc. (REFERENCE-FACTS).
            let gap = (got - wave.thd()).abs();
            assert!(gap < last_gap, "{wave:?}: THD gap grows at M={m}");
            last_gap = gap;
            gaps.push(gap);
        }
        // At least first order in 1/M: 256× more samples, ≥ 100× closer.
        assert!(gaps[4] <= gaps[0] / 100.0, "{wave:?}: THD gaps {gaps:?}");
        eprintln!(
            "{wave:?}: continuous THD {:.9}; |THD(M) − THD| for M = 16 … 4096: {}",
            wave.thd(),
            gaps.iter()
                .map(|g| format!("{g:.2e}"))
                .collect::<Vec<_>>()
                .join(", ")
        );
    }
    // The printed values (REFERENCE-FACTS, 9 decimals).
    for (wave, printed) in [
        (Wave::Square, "0.483425848"),
        (Wave::Triangle, "0.121152927"),
        (Wave::Sawtooth, "0.803077871"),
    ] {
        let v: f64 = printed.parse().unwrap();
        assert!(
            (wave.thd() - v).abs() <= half_ulp_printed(printed),
            "{wave:?}"
        );
    }
}

#[test]
fn thd_from_stored_coefficients_is_the_closed_form_over_the_kept_harmonics() {
    // Analysis: a stored Fourier coefficient is the sampled wave's coefficient (√N·ĉ_k)
    // quantized with step Δ, directly or as a residual from a prediction; either way each
    // component is within Δ/2 (real bins: the real part only). So the stored THD (harmonics
    // 2 … 50 with h·K < L, IEEE 519 counts to the 50th) is the closed form over the same
    // harmonics within the interval those errors allow, widened by the FFT's rounding. The
    // errors are also bounded together: their weighted energy is what the recorded error
    // leaves after the truncation tail (Parseval); the tighter of the two bounds is used.
    let m = 256usize;
    let f0 = 50.0;
    let fs = f0 * m as f64;
    // Budgets where the Fourier basis is the cheapest (a square wave's three sample values
    // are cheap in the time domain; its 1/n series is not).
    for (wave, rels) in [
        (Wave::Square, [0.1, 0.05]),
        (Wave::Triangle, [0.01, 0.001]),
        (Wave::Sawtooth, [0.05, 0.02]),
    ] {
        for rel in rels {
            let x = wave.samples(m, 100);
            let s = settings(EncodeOptions {
                budget_rel: Some(rel),
                fundamental: Some(format!("{f0}")),
                ..Default::default()
            });
            let run = run_of(&x, fs);
            let p = RunParams::new("w", ValueType::F64, Some(fs), &s.codec);
            let enc = encode_run(&run, &p).unwrap();
            let rows: Vec<_> = enc.blocks.iter().flat_map(|b| b.segments.iter()).collect();
            let mut checked = 0;
            let mut first = None;
            for (d, row) in decode_run(&enc, RealFft::shared()).iter().zip(rows) {
                let k = d.record.cycles as usize;
                if d.record.basis != Basis::Fourier || k == 0 {
                    continue;
                }
                let n = d.record.len;
                assert_eq!(n, k * m, "whole periods");
                let l = d.record.order as usize;
                let got = thd(&d.coeffs, k, n, 50).unwrap();
                let step = d.record.step as f64;
                let sq = (n as f64).sqrt();
                // Harmonics present in the stored coefficients.
                let present: Vec<usize> = (2..=50).filter(|&h| h * k < l && h <= m / 2).collect();
                let amp = |h: usize| weight(h * k, n) * (wave.sampled(h, m) * sq).norm();
                let a = present.iter().map(|&h| amp(h).powi(2)).sum::<f64>().sqrt();
                let b = amp(1);
                let q = step / 2.0 * std::f64::consts::SQRT_2;
                let norm = x[..n].iter().map(|v| v * v).sum::<f64>().sqrt();
                let r = (fft_rel_bound(n) + CLOSED_FORM_REL) * norm;
                // Collectively, by Parseval: N·error² = Σ_{k<L} w_k|δ_k|² + the closed-form
                // tail beyond L, so ‖δ‖_w² ≤ N·error² − N·tail (+ the synthesis rounding).
                let tail: f64 = (1..=m / 2)
                    .filter(|&h| h * k >= l)
                    .map(|h| {
                        let w = if 2 * h == m { 1.0 } else { 2.0 };
                        w * wave.sampled(h, m).norm_sqr()
                    })
                    .sum::<f64>()
                    * n as f64;
                let e2 = d.plan.error_rms.powi(2) * n as f64;
                let ry = fft_rel_bound(n) * norm;
                let dw = (e2 - tail + ry * (2.0 * e2.sqrt() + ry)).max(0.0).sqrt();
                // Amplitudes weigh a bin by w ≤ 2: Σ w²|δ|² ≤ 2‖δ‖_w².
                let da = (2.0 * q * (present.len() as f64).sqrt()).min(2f64.sqrt() * dw) + 2.0 * r;
                let db = (2.0 * q).min(2f64.sqrt() * dw) + 2.0 * r;
                let (lo, hi) = thd_interval(a, da, b, db);
                assert!(
                    got >= lo && got <= hi,
                    "{wave:?} {rel}: stored THD {got} outside [{lo}, {hi}] (L={l}, Δ={step})"
                );
                // The archive's `thd` column: the same, kept to 16 significant bits.
                let col = row.thd.expect("thd column") as f64;
                assert!((col - got).abs() <= got * (2f64.powi(-16) + 2f64.powi(-24)));
                // The `h1_amp` and `h1_phase` columns against the handbook's fundamental,
                // aliased: peak amplitude 2|ĉ_1| (b_1 = 4/π, 8/π², 2/π before aliasing) and
                // cosine phase −π/2 (all three are sine series, arg ĉ_1 = −π/2). The stored
                // bin is within db/2 of √N·ĉ_1 (amplitudes scale by w/√N), the phase within
                // asin(that / |c|), and the columns keep 16 significant bits.
                let (amp, phase) = row.harmonics[0].expect("h1 columns");
                let c1 = wave.sampled(1, m);
                let want_amp = 2.0 * c1.norm();
                let d_amp = db / sq;
                let rel16 = 2f64.powi(-16) + 2f64.powi(-24);
                assert!(
                    (amp as f64 - want_amp).abs() <= d_amp + want_amp * rel16,
                    "{wave:?} {rel}: h1_amp {amp} vs 2|ĉ_1| = {want_amp}"
                );
                let d_phase = (d_amp / want_amp).min(1.0).asin();
                assert!(
                    (phase as f64 - c1.arg()).abs() <= d_phase + PI * rel16,
                    "{wave:?} {rel}: h1_phase {phase} vs {}",
                    c1.arg()
                );
                checked += 1;
                first.get_or_insert((got, lo, hi, present.len() + 1));
            }
            let bases: Vec<&str> = enc.fits().map(|f| f.basis.name()).collect();
            assert!(
                checked > 0,
                "{wave:?} {rel}: no Fourier segments: {bases:?}"
            );
            let (got, lo, hi, harmonics) = first.expect("a checked segment");
            eprintln!(
                "{wave:?} at {rel}: {checked} Fourier segments; first: stored THD {got:.6} in \
                 closed-form interval [{lo:.6}, {hi:.6}] over {harmonics} kept harmonics \
                 (continuous {:.6})",
                wave.thd()
            );
        }
    }
}

/// Si(x) = Σ (−1)^k x^(2k+1)/((2k+1)·(2k+1)!) (the power series of the sine integral).
fn si(x: f64) -> f64 {
    let mut term = x; // x^(2k+1)/(2k+1)!
    let mut s = 0.0;
    for k in 0..40 {
        s += term / (2 * k + 1) as f64;
        term *= -x * x / (((2 * k + 2) * (2 * k + 3)) as f64);
    }
    s
}

#[test]
fn gibbs_peak_of_truncated_square_wave_sits_at_pi_over_2n_with_the_tabled_values() {
    // Nagle, Saff & Snider, ch. 10: the partial sum S_{2n−1}(x) = (4/π) Σ_{j≤n} sin((2j−1)x)/(2j−1)
    // peaks at x = π/(2n); values for n = 2, 3, 5, 10, 100 (REFERENCE-FACTS, [derived]), tending
    // to (2/π)·Si(π) = 1.178979744, Si(π) = 1.851937052 (OEIS A036792).
    let si_pi = si(PI);
    assert!((si_pi - 1.851937052).abs() <= 5e-10, "Si(π) = {si_pi}");
    let limit = 2.0 / PI * si_pi;
    assert!((limit - 1.178979744).abs() <= 5e-10);

    // One period, M a multiple of 4n for every n so that π/(2n) is a sample.
    let m = 120_000usize;
    let x = Wave::Square.samples(m, 1);
    let c = RealFft::shared().forward(&x);
    let norm = (x.iter().map(|v| v * v).sum::<f64>()).sqrt();
    let mut last = f64::INFINITY;
    for (nn, printed) in [
        (2usize, "1.200422"),
        (3, "1.188357"),
        (5, "1.182328"),
        (10, "1.179814"),
        (100, "1.178988"),
    ] {
        let at = PI / (2.0 * nn as f64);
        let s_cont: f64 = (1..=nn)
            .map(|j| {
                let h = (2 * j - 1) as f64;
                4.0 / PI * (h * at).sin() / h
            })
            .sum();
        assert!((s_cont - printed.parse::<f64>().unwrap()).abs() <= half_ulp_printed(printed));
        // The same partial sum of the sampled wave: coefficients (4/M)·cot(πh/M) in place of
        // 4/(πh) (module docs). Their gap: x·cot x = 1 − x²/3 − x⁴/45 − …, so
        // |4/(πh) − (4/M)cot(πh/M)| ≤ (4/(πh))·(πh/M)²·(1/3 + (πh/M)²/30) summed over odd
        // h ≤ 2n−1 (Σh = n²).
        let s_samp: f64 = (1..=nn)
            .map(|j| {
                let h = (2 * j - 1) as f64;
                4.0 / m as f64 / (PI * h / m as f64).tan() * (h * at).sin()
            })
            .sum();
        let xm = PI * (2 * nn - 1) as f64 / m as f64;
        let alias = 4.0 * PI / (m as f64).powi(2) * (nn * nn) as f64 * (1.0 / 3.0 + xm * xm / 30.0);
        assert!(
            (s_samp - s_cont).abs() <= alias,
            "n={nn}: aliasing {}",
            s_samp - s_cont
        );

        // cyclarc: keep bins 0 … 2n−1 (harmonics ≤ 2n−1, K = 1), zero the rest, synthesize.
        let mut kept = c.clone();
        kept.iter_mut()
            .skip(2 * nn)
            .for_each(|v| *v = C64::new(0.0, 0.0));
        let (y, _) =
            cyclarc::codec::synthesize(&kept[..2 * nn], m, ValueType::F64, RealFft::shared());
        // Location: the maximum over (0, π/2] (the partial sum is symmetric about π/2).
        let idx = (1..=m / 4).max_by(|&a, &b| y[a].total_cmp(&y[b])).unwrap();
        assert_eq!(idx, m / (4 * nn), "n={nn}: peak at sample {idx}");
        // Value: forward and inverse rounding, each ≤ fft_rel_bound·‖x‖ in 2-norm.
        let tol = 2.0 * fft_rel_bound(m) * norm;
        assert!(
            (y[idx] - s_samp).abs() <= tol,
            "n={nn}: peak {} vs sampled closed form {s_samp}",
            y[idx]
        );
        assert!(
            (y[idx] - s_cont).abs() <= alias + tol,
            "n={nn}: peak {} vs Nagle–Saff–Snider {s_cont}",
            y[idx]
        );
        // Decreasing towards (2/π)·Si(π) from above.
        assert!(
            y[idx] > limit && y[idx] < last,
            "n={nn}: {} not in ({limit}, {last})",
            y[idx]
        );
        last = y[idx];
        eprintln!(
            "n={nn}: peak {:.7} at x = π/{} (limit {limit:.9})",
            y[idx],
            2 * nn
        );
    }
}
