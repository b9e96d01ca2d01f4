//! Event capture (`events`): on a current with injected impact bursts and a trip at known
//! times, exactly those segments are marked, none on the clean stretches, and the marked
//! ones come back within a tenth of the budget, recomputed here from the decoded frames.
//! Crest factor and kurtosis as impact indicators: Randall, Vibration-based Condition
//! Monitoring (2011), ch. 5 (kurtosis 3 for Gaussian noise).
use crate::support::codec::*;
use crate::support::signals::*;
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::ValueType;
use cyclarc::options::EncodeOptions;
use cyclarc::signal::RealFft;
use rand_distr::{Distribution, Normal};

const FS: f64 = 10_000.0;
/// 10 cycles of 50 Hz (the IEC 61000-4-7 window): 2000 samples per segment.
const SEG: usize = 2000;

#[test]
fn injected_impacts_and_a_trip_are_marked_and_come_back_at_the_tighter_budget() {
    let segments = 60;
    let mut r = rng(61);
    let noise = Normal::new(0.0, 0.2).expect("normal");
    let bursts = [15usize, 30, 45];
    let trip = 52usize;
    let x: Vec<f64> = (0..segments * SEG)
        .map(|m| {
            let t = m as f64 / FS;
            let seg = m / SEG;
            let on = if seg >= trip { 0.01 } else { 1.0 };
            let mut v = on * 100.0 * (std::f64::consts::TAU * 50.0 * t).cos();
            if bursts.contains(&seg) {
                // Three decaying 2 kHz rings in the middle of the segment (invented).
                for k in 0..3 {
                    let since = (m % SEG) as f64 - (600 + 300 * k) as f64;
                    if since >= 0.0 {
                        let s = since / FS;
                        v += 150.0
                            * (-s * 2000.0).exp()
                            * (std::f64::consts::TAU * 2000.0 * s).sin();
                    }
                }
            }
            v + noise.sample(&mut r)
        })
        .collect();
    let s = settings(EncodeOptions {
        budget_rel: Some(0.01),
        fundamental: Some("50".into()),
        cycles_per_segment: Some(10),
        events: Some(true),
        ..Default::default()
    });
    let run = run_of(&x, FS);
    let p = RunParams::new("ia", ValueType::F64, Some(FS), &s.codec);
    let enc = encode_run(&run, &p).unwrap();
    let decoded = decode_run(&enc, RealFft::shared());
    assert_eq!(decoded.len(), segments);
    let marked: Vec<usize> = decoded
        .iter()
        .enumerate()
        .filter(|(_, d)| d.row.event == Some(true))
        .map(|(i, _)| i)
        .collect();
    for b in bursts {
        assert!(
            marked.contains(&b),
            "burst in segment {b} not marked: {marked:?}"
        );
    }
    assert!(
        marked.contains(&trip),
        "trip at segment {trip} not marked: {marked:?}"
    );
    // Nothing on the clean stretches; after the trip the RMS history takes a few segments
    // to follow (the rule compares with the median of the previous 8).
    for (i, _) in decoded.iter().enumerate() {
        if !bursts.contains(&i) && i < trip {
            assert!(!marked.contains(&i), "clean segment {i} marked: {marked:?}");
        }
    }
    for &i in &marked {
        let d = &decoded[i];
        let src = &x[d.start..d.start + d.values.len()];
        let budget = 0.01 * finite_rms_of(src);
        let err = rms_error(src, &d.values);
        assert!(
            err <= 0.1 * budget,
            "event segment {i}: {err} > {}",
            0.1 * budget
        );
    }
    println!("events marked: {marked:?}");
}
