//! Quantization order inflation on the clean three-phase current at 0.5 % of RMS: how far the
//! least order with quantization exceeds the least order of pure truncation.
//!
//! The inequality. The error energy of order L with step Δ and prediction p is
//! E(L) = Σ_{k<L} w_k|c_k − p_k − Δq_k|² + Σ_{k≥L} w_k|c_k|² (crate docs, "Error"); its tail
//! is the Parseval truncation error T(L) = Σ_{k≥L} w_k|c_k|² and its head is ≥ 0, so
//! E(L) ≥ T(L) for every L, step and prediction (the prediction only enters the head). If
//! the encoder's order L_q meets the target, E(L_q) ≤ target, then T(L_q) ≤ target, hence
//! L_q ≥ L_t, the least L with T(L) ≤ target. This holds for predicted segments too; with the
//! budget in place of the (tightened) target it holds a fortiori, since target ≤ budget.
//!
//! Measured (printed): no inflation on this signal, L_q = L_t on all 144 segments. Its
//! spectrum falls from the 13th harmonic at 1.5 % straight to white noise 60 dB below the
//! fundamental, so T(L) drops by a large step at the last harmonic that must be kept, and
//! the slack left under the target holds the quantizer's error without another bin. (On
//! the 1/n spectra of the closed-form tests, `closed_forms.rs`, the encoder does take
//! orders above the truncation order when that is cheaper for its step.)
use crate::support::codec::*;
use crate::support::signals::*;
use cyclarc::baseline::time_domain_bytes;
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::Basis;
use cyclarc::model::ValueType;
use cyclarc::options::EncodeOptions;
use cyclarc::signal::{fill_non_finite, weight, RealFft, Transform};

/// Least L with T(L) = Σ_{k≥L} w_k|c_k|² ≤ energy.
fn truncation_order(c: &[cyclarc::signal::C64], n: usize, energy: f64) -> usize {
    let mut tail: f64 = c
        .iter()
        .enumerate()
        .map(|(k, v)| weight(k, n) * v.norm_sqr())
        .sum();
    for (l, v) in c.iter().enumerate() {
        if tail <= energy {
            return l;
        }
        tail -= weight(l, n) * v.norm_sqr();
    }
    c.len()
}

#[test]
fn quantized_order_is_never_below_the_truncation_order_on_the_clean_current() {
    let fs = 20_000.0;
    // 10 cycles per segment (the IEC 61000-4-7 window) pinned, so that the run has
    // many segments to compare (the trial coder would otherwise choose longer ones).
    let s = settings(EncodeOptions {
        budget_rel: Some(0.005),
        cycles_per_segment: Some(10),
        ..Default::default()
    });
    let (mut ours, mut theirs) = (0usize, 0usize);
    let mut rows = Vec::new(); // (predicted, K, L_q, L_t(target), L_t(budget))
    for ph in 0..3 {
        let x = three_phase(ph, 50.0, fs, 200_000, 11);
        let run = run_of(&x, fs);
        let p = RunParams::new("i", ValueType::F64, Some(fs), &s.codec);
        let enc = encode_run(&run, &p).unwrap();
        ours += enc.payload_bytes();
        theirs += time_domain_bytes(&run, &p);
        for d in decode_run(&enc, RealFft::shared()) {
            let n = d.record.len;
            let seg = &run.values[d.start..d.start + n];
            assert!(rms_error(seg, &d.values) <= d.plan.budget_rms);
            if d.record.basis != Basis::Fourier {
                continue;
            }
            let mut filled = seg.to_vec();
            let nf = fill_non_finite(&mut filled) as f64;
            let c = RealFft::shared().forward(&filled);
            // The tail is summed here in another order than the library's: allow 2m·u of
            // the total energy when comparing with the target.
            let total: f64 = c
                .iter()
                .enumerate()
                .map(|(k, v)| weight(k, n) * v.norm_sqr())
                .sum();
            let slack = 2.0 * c.len() as f64 * U * total;
            let lt_target = truncation_order(&c, n, d.plan.target_rms.powi(2) * nf + slack);
            let lt_budget = truncation_order(&c, n, d.plan.budget_rms.powi(2) * nf);
            let lq = d.record.order as usize;
            assert!(lt_budget <= lt_target);
            assert!(
                lq >= lt_target,
                "segment at {} (predicted {}): order {lq} below the truncation order {lt_target}",
                d.start,
                d.record.predicted
            );
            rows.push((
                d.record.predicted,
                d.record.cycles as usize,
                lq,
                lt_target,
                lt_budget,
            ));
        }
    }
    assert!(rows.len() >= 100);
    assert!(
        rows.iter().any(|r| r.0) && rows.iter().any(|r| !r.0),
        "both kinds present"
    );
    let summary = |pred: Option<bool>| {
        let sel: Vec<_> = rows
            .iter()
            .filter(|r| pred.is_none_or(|p| r.0 == p))
            .collect();
        let inf: Vec<f64> = sel.iter().map(|r| (r.2 - r.3) as f64).collect();
        let infb: Vec<f64> = sel.iter().map(|r| (r.2 - r.4) as f64).collect();
        let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
        let max = |v: &[f64]| v.iter().cloned().fold(0.0, f64::max);
        let k = sel[0].1 as f64;
        format!(
            "{} segments: L_q − L_t(target) mean {:.1} max {} bins; L_q − L_t(budget) mean {:.1} \
             max {} bins ({:.2} / {:.2} harmonics at K = {k}); mean L_q {:.1}, L_t(target) \
             {:.1}, L_t(budget) {:.1}",
            sel.len(),
            mean(&inf),
            max(&inf),
            mean(&infb),
            max(&infb),
            mean(&inf) / k,
            mean(&infb) / k,
            mean(&sel.iter().map(|r| r.2 as f64).collect::<Vec<_>>()),
            mean(&sel.iter().map(|r| r.3 as f64).collect::<Vec<_>>()),
            mean(&sel.iter().map(|r| r.4 as f64).collect::<Vec<_>>()),
        )
    };
    eprintln!("all: {}", summary(None));
    eprintln!("predicted: {}", summary(Some(true)));
    eprintln!("not predicted: {}", summary(Some(false)));
    eprintln!(
        "clean three-phase current at 0.5 %: cyclarc {ours} B, time-domain quantizer + zstd-19 \
         {theirs} B, ratio {:.2}",
        theirs as f64 / ours as f64
    );
    assert!(ours <= theirs);
}
