//! Library-level helpers of the codec tests: run construction, the library's defaults,
//! decoding an encoded run block by block, and the error bounds the checks are held to.

use super::T0;
use cyclarc::model::Run;
use cyclarc::model::SpecialKind;
use cyclarc::options::{EncodeOptions, Settings};

/// A one-channel reference file through cyclarc's reader and assembler: (channel name, its one
/// run, sample rate, value type).
pub fn read_reference(path: &str) -> (String, Run, f64, cyclarc::model::ValueType) {
    use cyclarc::source::{assemble, ChannelSamples, Source};
    let path = std::path::Path::new(path);
    let s = settings(EncodeOptions::default());
    let mut src = Source::open(path, &s.source).expect("reference file opens");
    let mut samples = ChannelSamples::default();
    while let Some(chunks) = src.next_chunks() {
        for c in chunks.expect("reference file reads") {
            assert_eq!(c.channel, 0, "one channel");
            samples.extend(c);
        }
    }
    // Long layout: channels are known once read.
    assert_eq!(src.schema.channels.len(), 1);
    let info = src.schema.channels[0].clone();
    let ch = assemble(path, info.clone(), samples, None).expect("assembles");
    assert_eq!(ch.runs.len(), 1, "one run without holes");
    let run = ch.runs.into_iter().next().unwrap();
    (info.name, run, ch.sample_rate.unwrap(), info.value_type)
}

/// A run from values at sample rate `fs`, starting at [`T0`].
pub fn run_of(values: &[f64], fs: f64) -> Run {
    let times = (0..values.len())
        .map(|i| T0 + (i as f64 * 1e9 / fs).round() as i64)
        .collect();
    let specials = values
        .iter()
        .enumerate()
        .filter(|(_, v)| !v.is_finite())
        .map(|(i, v)| {
            (
                i,
                if v.is_nan() {
                    SpecialKind::Nan(v.to_bits())
                } else if *v > 0.0 {
                    SpecialKind::PosInf
                } else {
                    SpecialKind::NegInf
                },
            )
        })
        .collect();
    Run {
        times,
        values: values.to_vec(),
        specials,
    }
}

/// Settings from options (panics on invalid test options).
pub fn settings(o: EncodeOptions) -> Settings {
    o.resolve().expect("valid test options")
}

use cyclarc::codec::fit::FitPlan;
use cyclarc::codec::frame::SegmentRecord;
use cyclarc::codec::parse::decode_block;
use cyclarc::codec::RunEncoding;
use cyclarc::options::Budget;
use cyclarc::signal::Transform;

/// Unit roundoff of f64 (half the machine epsilon).
pub const U: f64 = f64::EPSILON / 2.0;

/// Relative 2-norm error bound of an orthonormal FFT of length `n`, ‖ŷ − y‖₂ ≤ bound·‖x‖₂.
///
/// Higham, *Accuracy and Stability of Numerical Algorithms* (2nd ed.), Thm 24.2 (theorem
/// number from memory): a radix-2 Cooley–Tukey FFT of t = log₂N stages with twiddles accurate
/// to μ has ‖ŷ − y‖/‖y‖ ≤ t·η/(1 − t·η), η = μ + γ₄(√2 + μ), γ₄ = 4u/(1 − 4u). rustfft
/// precomputes its twiddles with sin/cos (μ ≈ u). A prime or awkward length is done by
/// Bluestein's algorithm (three passes of a power-of-two FFT of at most 4N points, plus chirp
/// products) or by Rader's (two passes of N − 1 points), and realfft adds one post-processing
/// stage for even N; t = 3·(⌈log₂N⌉ + 2) + 1 stages covers every case. This is the
/// c·ε·log₂N form of the standard FFT error analysis. (RustFFT's own accuracy tests,
/// `tests/accuracy.rs`, make the same comparison with a naive DFT against a fixed threshold
/// of 0.1 mean absolute error; the tests here hold the transforms to this bound instead.)
pub fn fft_rel_bound(n: usize) -> f64 {
    let mu = U;
    let gamma4 = 4.0 * U / (1.0 - 4.0 * U);
    let eta = mu + gamma4 * (std::f64::consts::SQRT_2 + mu);
    let log2n = (n.max(2) as f64).log2().ceil();
    let t = 3.0 * (log2n + 2.0) + 1.0;
    t * eta / (1.0 - t * eta)
}

/// RMS over the finite source values of (decoded − source).
pub fn rms_error(source: &[f64], decoded: &[f64]) -> f64 {
    assert_eq!(source.len(), decoded.len());
    let (s, n) = source
        .iter()
        .zip(decoded)
        .filter(|(x, _)| x.is_finite())
        .fold((0.0, 0usize), |(s, n), (x, y)| {
            (s + (y - x) * (y - x), n + 1)
        });
    if n == 0 {
        0.0
    } else {
        (s / n as f64).sqrt()
    }
}

/// RMS over the finite values (computed here, independently of the library).
pub use super::series::finite_rms as finite_rms_of;

/// The budget the README promises for a segment: absolute ε, or max(fraction · RMS, floor).
pub fn promised_budget(b: Budget, x: &[f64]) -> f64 {
    match b {
        Budget::Absolute(e) => e,
        Budget::Relative { fraction, floor } => (fraction * finite_rms_of(x)).max(floor),
    }
}

/// One segment of an encoded run after decoding its block from the frame bytes.
pub struct Decoded {
    /// First sample of the segment in the run.
    pub start: usize,
    /// The fit decision recorded by the encoder.
    pub plan: FitPlan,
    /// The segment as unpacked from the frame.
    pub record: SegmentRecord,
    /// The previous segment of the same block, if it is a Fourier segment: its
    /// reconstructed coefficients, length and ideal length (what the prediction uses).
    pub prev: Option<(Vec<cyclarc::signal::C64>, usize, f64)>,
    /// Decoder output (value type applied; NaN at non-finite positions).
    pub values: Vec<f64>,
    /// Reconstructed coefficients (Fourier only).
    pub coeffs: Vec<cyclarc::signal::C64>,
    /// The segment's archive row as the encoder made it.
    pub row: cyclarc::codec::SegmentSummary,
}

/// Unpack every block of `enc` from its frame bytes and rebuild it with `fft`; segments in
/// run order, with their plans. Panics when the encoding is inconsistent with its plan.
pub fn decode_run(enc: &RunEncoding, fft: &dyn Transform) -> Vec<Decoded> {
    let mut out = Vec::new();
    let mut planned = enc.plan.segments.iter();
    for b in &enc.blocks {
        let block = decode_block(&b.frame).expect("frame decodes");
        let segs = cyclarc::codec::rebuild_block(&block, fft).expect("block rebuilds");
        assert_eq!(segs.len(), b.fits.len());
        assert_eq!(segs.len(), b.segments.len());
        let mut prev = None;
        for (((rec, seg), plan), row) in block
            .segments
            .iter()
            .zip(segs)
            .zip(&b.fits)
            .zip(&b.segments)
        {
            let p = planned.next().expect("as many segments as planned");
            assert_eq!(p.len, rec.len);
            let here = matches!(
                rec.basis,
                cyclarc::model::Basis::Fourier | cyclarc::model::Basis::Trend
            )
            .then(|| (seg.coeffs.clone(), rec.len, rec.ideal_len as f64));
            out.push(Decoded {
                start: p.start,
                plan: plan.clone(),
                record: rec.clone(),
                prev: prev.take(),
                values: seg.values,
                coeffs: seg.coeffs,
                row: row.clone(),
            });
            prev = here;
        }
    }
    assert!(planned.next().is_none(), "every planned segment is encoded");
    out
}

/// Whether `budget` is `promised` stored as f32 rounded down (README, "Budgets are stored as
/// f32 rounded down"): an f32 value, not above `promised`, whose next f32 is above it.
pub fn is_f32_rounded_down(budget: f64, promised: f64) -> bool {
    if budget.is_nan() || budget < 0.0 || budget > promised || budget as f32 as f64 != budget {
        return false;
    }
    let next = f32::from_bits((budget as f32).to_bits() + 1) as f64;
    next > promised
}
