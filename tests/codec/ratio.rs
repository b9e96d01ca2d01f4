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
