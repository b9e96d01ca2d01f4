//! Speed drift: a machine running up by ±10 % about its mean speed over the run. Tracking
//! the fundamental (`fundamental = auto`) against a fixed period taken from the start speed
//! (`FundamentalSetting::Hz(f_start)`), on the same signal and budget.
use std::f64::consts::PI;

use crate::support::codec::*;
use crate::support::signals::*;
use cyclarc::baseline::time_domain_bytes;
use cyclarc::codec::segment::FundamentalSource;
use cyclarc::codec::{encode_run, RunEncoding, RunParams};
use cyclarc::model::Basis;
use cyclarc::model::ValueType;
use cyclarc::options::EncodeOptions;
use cyclarc::signal::RealFft;
use rand_distr::{Distribution, Normal};

const FS: f64 = 10_240.0;
const SECONDS: f64 = 20.0;
const F_MID: f64 = 30.0;
/// Relative noise RMS (to the fundamental's amplitude 1).
const NOISE: f64 = 1e-3;
const BUDGET_REL: f64 = 0.01;

/// Shaft harmonics 1–6 with speed f(t) = f_mid·(0.9 + 0.2·t/T) (linear run-up from −10 % to
/// +10 %); the phase is 2π∫f dt. With `drift = false`, constant speed f_mid.
fn run_up(drift: bool) -> Vec<f64> {
    let n = (FS * SECONDS) as usize;
    let mut r = rng(606);
    let noise = Normal::new(0.0, NOISE).unwrap();
    let amps = [1.0, 0.5, 0.3, 0.2, 0.1, 0.05];
    (0..n)
        .map(|i| {
            let t = i as f64 / FS;
            let cycles = if drift {
                F_MID * (0.9 * t + 0.1 * t * t / SECONDS)
            } else {
                F_MID * t
            };
            let mut v = 0.0;
            for (h, a) in amps.iter().enumerate() {
                let h = (h + 1) as f64;
                v += a * (2.0 * PI * h * cycles + 0.5 * h).sin();
            }
            v + noise.sample(&mut r)
        })
        .collect()
}

fn encode(x: &[f64], fundamental: &str) -> (RunEncoding, usize) {
    // Six cycles per segment (0.2 s at 30 Hz) for every case, so that drift is compared at
    // one segment duration (the trial coder would give the steady machine longer ones).
    let s = settings(EncodeOptions {
        budget_rel: Some(BUDGET_REL),
        fundamental: Some(fundamental.into()),
        cycles_per_segment: Some(6),
        ..Default::default()
    });
    let run = run_of(x, FS);
    let p = RunParams::new("shaft", ValueType::F64, Some(FS), &s.codec);
    let enc = encode_run(&run, &p).unwrap();
    for d in decode_run(&enc, RealFft::shared()) {
        let x = &run.values[d.start..d.start + d.record.len];
        let err = rms_error(x, &d.values);
        let promised = promised_budget(s.codec.budget, x);
        assert!(is_f32_rounded_down(d.plan.budget_rms, promised));
        assert!(
            err <= d.plan.budget_rms,
            "{fundamental}: segment at {}",
            d.start
        );
    }
    let baseline = time_domain_bytes(&run, &p);
    (enc, baseline)
}

/// Mean order of the Fourier segments starting in [from, to), their count, and the mean
/// cost (bits, the encoder's proxy) of all segments there, whatever their basis.
fn window_stats(enc: &RunEncoding, from: usize, to: usize) -> (f64, usize, f64) {
    let inside: Vec<_> = enc
        .plan
        .segments
        .iter()
        .zip(enc.fits())
        .filter(|(s, _)| s.start >= from && s.start < to)
        .map(|(_, f)| f)
        .collect();
    let orders: Vec<f64> = inside
        .iter()
        .filter(|f| f.basis == Basis::Fourier)
        .filter_map(|f| f.order.map(|o| o as f64))
        .collect();
    let cost = inside.iter().map(|f| f.cost_bits).sum::<f64>() / inside.len().max(1) as f64;
    (
        orders.iter().sum::<f64>() / orders.len().max(1) as f64,
        orders.len(),
        cost,
    )
}

#[test]
fn tracking_the_run_up_costs_less_than_a_fixed_period_and_both_meet_the_budget() {
    let x = run_up(true);
    let f_start = 0.9 * F_MID;
    let f_end = 1.1 * F_MID;
    let (tracked, base_t) = encode(&x, "auto");
    let (fixed, base_f) = encode(&x, &format!("{f_start}"));
    assert_eq!(tracked.plan.source, FundamentalSource::Estimated);
    // The tracked range follows the drift law of the input, f_start … f_end, to within the
    // change of speed over one tracking window (0.5 s: 0.5 s · 6 Hz / 20 s = 0.15 Hz).
    let (lo, hi) = tracked.plan.tracked_range.unwrap();
    let window_drift = 0.5 * (f_end - f_start) / SECONDS;
    assert!(
        (lo - f_start).abs() <= window_drift && (hi - f_end).abs() <= window_drift,
        "tracked {lo:.3} … {hi:.3} Hz for a run-up {f_start} … {f_end} Hz"
    );

    let (pt, pf) = (tracked.payload_bytes(), fixed.payload_bytes());
    let n = x.len();
    let first = (0, (FS * 1.0) as usize);
    let last = (n - (FS * 5.0) as usize, n);
    let (t_first, _, tc_first) = window_stats(&tracked, first.0, first.1);
    let (f_first, _, fc_first) = window_stats(&fixed, first.0, first.1);
    let (t_last, t_last_n, tc_last) = window_stats(&tracked, last.0, last.1);
    let (f_last, f_last_n, fc_last) = window_stats(&fixed, last.0, last.1);
    eprintln!(
        "run-up ±10 %: tracked {pt} B ({} segments), fixed P at {f_start} Hz {pf} B ({} \
         segments): fixed/tracked = {:.2}; time-domain quantizer {base_t} B (tracked ratio \
         {:.2}, fixed ratio {:.2})",
        tracked.plan.segments.len(),
        fixed.plan.segments.len(),
        pf as f64 / pt as f64,
        base_t as f64 / pt as f64,
        base_f as f64 / pf as f64,
    );
    eprintln!(
        "first second: mean order tracked {t_first:.1}, fixed {f_first:.1}; mean cost \
         {tc_first:.0} / {fc_first:.0} bits. Last 5 s: mean order tracked {t_last:.1} \
         ({t_last_n} Fourier), fixed {f_last:.1} ({f_last_n} Fourier); mean cost \
         {tc_last:.0} / {fc_last:.0} bits"
    );
    // Where the fixed period is right (the start), both need about the same order: harmonic
    // 6 of a K-cycle segment is bin 6K (K = 6 at 27 Hz, 7 at 30 Hz), so order ≈ 6K + 1.
    assert!(
        f_first <= 1.5 * t_first,
        "fixed {f_first} vs tracked {t_first} at the start"
    );
    // Where it is wrong (the end, 22 % fast): harmonic h of the true speed falls at bin
    // h·K·f/f_start, a fractional bin; its leakage (Dirichlet kernel, Sundararajan, *The
    // DFT*, "Leakage effect") puts sin²(πδ)/(π²(k − l)²) of the tone's energy in bin k for an
    // offset δ, so the energy beyond ±B bins is about 2·sin²(πδ)/(π²B). A 1 % RMS budget
    // leaves 10⁻⁴ of the energy: B ≈ 2·10⁴·sin²(πδ)/π², about 1500 bins for δ = ⅓, more than
    // the segment's ⌊N/2⌋ + 1 ≈ 1100 bins. So at the end a fixed-period segment must keep
    // most of its bins, fall back to the samples basis, or take the trend basis (whose ramp
    // removes the jump of the periodic extension but not the curvature and the wrong
    // harmonic spacing): several times the tracked cost. Measured 2.8×; asserted 2×.
    assert!(
        fc_last >= 2.0 * tc_last,
        "cost per segment at the end: fixed {fc_last} vs tracked {tc_last} bits"
    );
    // Over the run the mismatch grows linearly from 0 to 22 %, so the fixed-period payload
    // is dominated by its leakage-bound segments. Measured: fixed/tracked = 1.9 (printed
    // above; 3.5 before the trend basis took part of the fixed period's leakage); 1.5× is
    // asserted, which any regression towards parity (tracking lost, or segments no longer
    // whole cycles) breaks.
    assert!(
        pf as f64 >= 1.5 * pt as f64,
        "tracking saves too little: tracked {pt} B, fixed {pf} B"
    );
    // Neither is above the time-domain quantizer on the same segments and budgets.
    assert!(pt <= base_t && pf <= base_f);
}

#[test]
fn drift_loss_of_tracking_against_the_same_machine_at_constant_speed() {
    let x = run_up(true);
    let (drifting, _) = encode(&x, "auto");
    let (fixed, _) = encode(&x, &format!("{}", 0.9 * F_MID));
    let (steady, _) = encode(&run_up(false), "auto");
    let (pd, pf, ps) = (
        drifting.payload_bytes(),
        fixed.payload_bytes(),
        steady.payload_bytes(),
    );
    let loss = pd as f64 / ps as f64;
    let fixed_loss = pf as f64 / ps as f64;
    eprintln!(
        "payload: constant speed {ps} B; run-up tracked {pd} B (drift loss {loss:.3}×), \
         run-up with a fixed period {pf} B ({fixed_loss:.2}×)"
    );
    // Tracking holds each segment to whole cycles of its local speed; what it cannot follow
    // is the speed change inside a segment (0.3 Hz/s: 0.06 Hz in 200 ms, so harmonic 6 moves
    // 0.36 Hz against a 5 Hz bin) and the estimate's lag over a 0.5 s window; both leak
    // energy out of the harmonic bins, where the steady machine's segments are predicted
    // almost exactly from the previous one. Measured: 11.9× (22.8× before the trend basis;
    // the gap that resampling to the shaft angle is to close), against 22.8× for the fixed
    // period. Asserted: below two thirds of the fixed period's loss.
    assert!(
        1.5 * loss < fixed_loss,
        "drift loss {loss} vs fixed-period loss {fixed_loss}"
    );
}

#[test]
fn segments_longer_than_the_tracking_window_follow_the_speed_in_order() {
    // A shaft at 25 Hz whose speed runs up and down ±10 % (a triangle, 10 s each way) for
    // 200 s, cut at 23 cycles per segment (about 0.9 s) against a 0.5 s tracking window: each
    // segment steps past a window. The cut must stay contiguous and follow the speed of the
    // signal's own definition, f(t) = 25·(1 + 0.1·tri(t/10 s)). (A cut that fell one window
    // further behind the tracker at every segment once extrapolated the speed below zero and
    // sent boundaries backwards, two minutes into such a run.)
    let fs = 2_000.0;
    let n = (200.0 * fs) as usize;
    let tri = |t: f64| {
        let u = (t / 10.0) % 2.0;
        if u < 1.0 {
            2.0 * u - 1.0
        } else {
            3.0 - 2.0 * u
        }
    };
    let speed = |t: f64| 25.0 * (1.0 + 0.1 * tri(t));
    let mut phase = 0.0f64;
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let v = phase.sin() + 0.3 * (2.0 * phase + 0.9).sin();
            phase += 2.0 * PI * speed(i as f64 / fs) / fs;
            v
        })
        .collect();
    let s = settings(EncodeOptions {
        budget_rel: Some(BUDGET_REL),
        cycles_per_segment: Some(23),
        ..Default::default()
    });
    let run = run_of(&x, fs);
    let p = RunParams::new("shaft", ValueType::F64, Some(fs), &s.codec);
    let enc = encode_run(&run, &p).unwrap();
    let segs = &enc.plan.segments;
    let mut at = 0;
    for seg in segs {
        assert_eq!(seg.start, at, "contiguous");
        at += seg.len;
        if seg.cycles == 23 {
            let mid = (seg.start as f64 + 0.5 * seg.len as f64) / fs;
            let f_cut = 23.0 * fs / seg.len as f64;
            assert!(
                (f_cut / speed(mid) - 1.0).abs() < 0.05,
                "segment at {}: cut at {f_cut:.2} Hz, speed {:.2} Hz",
                seg.start,
                speed(mid)
            );
        }
    }
    assert_eq!(at, x.len(), "the cut covers the run");
    assert!(segs.iter().filter(|s| s.cycles == 23).count() > 150);
}
