//! Real data: MIT-BIH Arrhythmia Database record 208, lead MLII, 360 Hz (Moody & Mark, IEEE
//! EMB Magazine 2001; PhysioNet, Open Data Commons Attribution). Credit: "MIT-BIH Arrhythmia
//! Database, PhysioNet". Provenance of `tests/data/ecg-mitbih-208.parquet`: README,
//! "Reference data" (scipy 1.9.3 `scipy/misc/ecg.dat`, mV = (raw − 1024)/200).
//!
//! Quasi-periodic (heartbeats at a varying rate), with premature beats, artifacts and mains
//! interference: a hard case for a periodic model, so every bound is checked on it.
use crate::support::codec::*;
use cyclarc::baseline::time_domain_bytes;
use cyclarc::codec::fit::fit_samples;
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::model::ValueType;
use cyclarc::options::EncodeOptions;
use cyclarc::signal::{fill_non_finite, RealFft, ScalarFft};

const ECG: &str = "tests/data/ecg-mitbih-208.parquet";

/// The record through cyclarc's reader and assembler: (values, sample rate, value type).
fn read_ecg() -> (cyclarc::model::Run, f64, ValueType) {
    let (name, run, fs, vt) = read_reference(ECG);
    assert_eq!(name, "ecg_mlii");
    (run, fs, vt)
}

#[test]
fn ecg_reference_file_has_the_published_length_rate_and_moments() {
    let (run, fs, vt) = read_ecg();
    // REFERENCE-FACTS: 108,000 samples (300 s) at 360 Hz, f64 mV; mean −0.16510875 mV and
    // std 0.5992474 mV [src: computed from the bundled file] (population std, printed to
    // 8 and 7 decimals: ±5e-9 and ±5e-8).
    assert_eq!(run.values.len(), 108_000);
    // The file's timestamps are whole nanoseconds, so the median step is 1e9/360 ns rounded
    // (2 777 778 ns): the rate is 360 Hz within 360 · 0.5 ns / 2 777 778 ns.
    assert!((fs - 360.0).abs() <= 360.0 * 0.5 / 2_777_778.0, "rate {fs}");
    assert_eq!(vt, ValueType::F64);
    assert!(run.values.iter().all(|v| v.is_finite()));
    let n = run.values.len() as f64;
    let mean = run.values.iter().sum::<f64>() / n;
    let var = run.values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n;
    assert!((mean - -0.16510875).abs() <= 5e-9, "mean {mean}");
    assert!((var.sqrt() - 0.5992474).abs() <= 5e-8, "std {}", var.sqrt());
    // mV = (raw − 1024)/200 with integer raw: every value is a multiple of 5 µV.
    assert!(run.values.iter().all(|v| {
        let raw = v * 200.0 + 1024.0;
        (raw - raw.round()).abs() < 1e-9
    }));
}

#[test]
fn ecg_meets_every_budget_and_codes_below_the_time_domain_quantizer() {
    let (run, fs, vt) = read_ecg();
    let cases: [(&str, EncodeOptions); 3] = [
        (
            "1 % of RMS",
            EncodeOptions {
                budget_rel: Some(0.01),
                ..Default::default()
            },
        ),
        (
            "5 % of RMS",
            EncodeOptions {
                budget_rel: Some(0.05),
                ..Default::default()
            },
        ),
        (
            "0.01 mV",
            EncodeOptions {
                budget_rms: Some(0.01),
                ..Default::default()
            },
        ),
    ];
    let scalar = ScalarFft::default();
    for (name, o) in cases {
        let s = settings(o);
        let p = RunParams::new("ecg_mlii", vt, Some(fs), &s.codec);
        let enc = encode_run(&run, &p).unwrap();
        let mut bases = std::collections::BTreeMap::<&str, usize>::new();
        for (d, e) in decode_run(&enc, RealFft::shared())
            .iter()
            .zip(decode_run(&enc, &scalar))
        {
            let n = d.record.len;
            let x = &run.values[d.start..d.start + n];
            let promised = promised_budget(s.codec.budget, x);
            let budget = d.plan.budget_rms;
            assert!(is_f32_rounded_down(budget, promised));
            let err = rms_error(x, &d.values);
            let err_s = rms_error(x, &e.values);
            assert!(
                err <= budget && err_s <= budget,
                "{name}: segment at {}: error {err:e} / {err_s:e} > budget {budget:e}",
                d.start
            );
            // The chosen basis never costs more than the time-domain quantizer on the same
            // segment and budget (its cost proxy, bits).
            let mut filled = x.to_vec();
            fill_non_finite(&mut filled);
            let round = vt.rounding_mse(filled.iter().fold(0.0f64, |a, v| a.max(v.abs())));
            if let Some(samples) = fit_samples(x, &filled, vt, budget, round) {
                assert!(
                    d.plan.cost_bits <= samples.plan.cost_bits,
                    "{name}: segment at {}: {} costs {} bits > samples {}",
                    d.start,
                    d.plan.basis.name(),
                    d.plan.cost_bits,
                    samples.plan.cost_bits
                );
            }
            *bases.entry(d.plan.basis.name()).or_default() += 1;
        }
        let ours = enc.payload_bytes();
        let theirs = time_domain_bytes(&run, &p);
        eprintln!(
            "ECG {name}: fundamental {:?} ({:?}), {} segments {bases:?}; cyclarc {ours} B, \
             time-domain quantizer + zstd-19 {theirs} B, ratio {:.2}; raw f32 ratio {:.1}",
            enc.plan.fundamental.map(|e| e.hz),
            enc.plan.source,
            enc.plan.segments.len(),
            theirs as f64 / ours as f64,
            (4 * run.values.len()) as f64 / ours as f64
        );
        assert!(
            ours <= theirs,
            "{name}: payload {ours} B > time-domain {theirs} B"
        );
    }
}
