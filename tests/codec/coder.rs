//! The entropy coder against Shannon's bound: on real recordings, whose codes are most of the
//! payload, the coded blocks (codes, segment headers and timestamps together) are no larger
//! than 1.03 × the empirical order-0 entropy of the integer codes they hold,
//! H₀ = Σ_v n_v · log₂(n / n_v) bits (C. E. Shannon, "A Mathematical Theory of
//! Communication", Bell Syst. Tech. J. 27, 1948, §6), computed here from the decoded codes.
//! Contexts let the coder go below H₀; 3 % above it is the most it may cost.
use crate::support::codec::*;
use cyclarc::codec::parse::decode_block;
use cyclarc::codec::{encode_run, RunParams};
use cyclarc::options::EncodeOptions;

/// (frame bytes, order-0 entropy of the codes in bytes) of one reference file at a budget.
fn frames_and_entropy(path: &str, budget_rel: f64) -> (usize, f64) {
    let (name, run, fs, vt) = read_reference(path);
    let s = settings(EncodeOptions {
        budget_rel: Some(budget_rel),
        ..Default::default()
    });
    let p = RunParams::new(&name, vt, Some(fs), &s.codec);
    let enc = encode_run(&run, &p).unwrap();
    let mut hist = std::collections::BTreeMap::<i64, u64>::new();
    let mut frames = 0;
    for b in &enc.blocks {
        frames += b.frame.len();
        for seg in decode_block(&b.frame).unwrap().segments {
            for c in seg.codes {
                *hist.entry(c).or_default() += 1;
            }
        }
    }
    let n: u64 = hist.values().sum();
    let bits: f64 = hist
        .values()
        .map(|&k| k as f64 * (n as f64 / k as f64).log2())
        .sum();
    (frames, bits / 8.0)
}

#[test]
fn coded_blocks_stay_within_3_percent_of_the_order0_entropy_of_their_codes() {
    // Provenance of both files: README, "Reference data".
    for (path, budget) in [
        ("tests/data/bearing-force-ladisk.parquet", 0.01),
        ("tests/data/bearing-force-ladisk.parquet", 0.05),
        ("tests/data/ecg-mitbih-208.parquet", 0.01),
        ("tests/data/ecg-mitbih-208.parquet", 0.05),
    ] {
        let (frames, h0) = frames_and_entropy(path, budget);
        let ratio = frames as f64 / h0;
        eprintln!("{path} at {budget}: frames {frames} B, H0 {h0:.0} B, ratio {ratio:.3}");
        // The codes must be most of what is coded, or the check says nothing of the coder.
        assert!(
            h0 >= 0.5 * frames as f64,
            "{path}: codes are not most of the payload"
        );
        assert!(ratio <= 1.03, "{path} at {budget}: {ratio:.3} × H0");
    }
}
