//! Deterministic compression ratios on fixed synthetic signals (not timing tests).
use crate::support::codec::*;
use crate::support::signals::*;
use cyclarc::baseline::time_domain_bytes;
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::ValueType;
use cyclarc::options::EncodeOptions;

#[test]
fn clean_three_phase_current_codes_8x_smaller_than_time_domain_quantizer() {
    let fs = 20_000.0;
    let s = settings(EncodeOptions {
        budget_rel: Some(0.005),
        ..Default::default()
    });
    let (mut ours, mut theirs) = (0usize, 0usize);
    for ph in 0..3 {
        let x = three_phase(ph, 50.0, fs, 200_000, 11);
        let run = run_of(&x, fs);
        let p = RunParams::new("i", ValueType::F64, Some(fs), &s.codec);
        let enc = encode_run(&run, &p).unwrap();
        let orders: Vec<u32> = enc.fits().filter_map(|f| f.order).collect();
        eprintln!(
            "phase {ph}: plan {:?} segs {} orders {:?}",
            enc.plan.fundamental,
            enc.plan.segments.len(),
            &orders[..orders.len().min(12)]
        );
        let b: std::collections::BTreeMap<String, usize> =
            enc.fits().fold(Default::default(), |mut m, f| {
                *m.entry(f.basis.name().to_string()).or_default() += 1;
                m
            });
        eprintln!("basis {b:?}");
        ours += enc.payload_bytes();
        theirs += time_domain_bytes(&run, &p);
    }
    let ratio = theirs as f64 / ours as f64;
    eprintln!("cyclarc {ours} B, time-domain quantizer + zstd-19 {theirs} B, ratio {ratio:.1}");
    assert!(ratio >= 8.0, "ratio {ratio:.2}");
}

#[test]
fn a_steady_tone_costs_a_few_bytes_a_segment() {
    // A 49.97 Hz line with a 5th harmonic at 5 kHz (100.06 samples a period, so segment
    // lengths and ideal lengths vary from segment to segment) under a swinging load, 10
    // cycles a segment, 1 % budget: a segment holds two harmonics' worth of codes, so what
    // it costs is mostly its header. Measured: layout 3's headers (ideal length and step as
    // bare f32, length and order as plain varints) 7.83 B a segment; layout 4's compact
    // headers (differences from the previous segment, steps by grid index) 4.65 B.
    let fs = 5_000.0;
    let x: Vec<f64> = (0..200_000)
        .map(|i| {
            let t = i as f64 / fs;
            let w = std::f64::consts::TAU * 49.97 * t;
            // The load swings by ±20 % every 20 s: each segment's RMS, budget and step move.
            let a = 1.0 + 0.2 * (std::f64::consts::TAU * 0.05 * t).sin();
            a * (w.sin() + 0.1 * (5.0 * w + 0.4).sin())
        })
        .collect();
    let s = settings(EncodeOptions {
        budget_rel: Some(0.01),
        fundamental: Some("49.97".into()),
        cycles_per_segment: Some(10),
        ..Default::default()
    });
    let run = run_of(&x, fs);
    let p = RunParams::new("i", ValueType::F64, Some(fs), &s.codec);
    let enc = encode_run(&run, &p).unwrap();
    let per_segment = enc.payload_bytes() as f64 / enc.plan.segments.len() as f64;
    eprintln!(
        "{} segments, {} B: {per_segment:.2} B a segment",
        enc.plan.segments.len(),
        enc.payload_bytes()
    );
    assert!(per_segment <= 5.5, "{per_segment:.2} B a segment");
}
