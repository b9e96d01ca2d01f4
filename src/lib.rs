//! # cyclarc
//!
//! Archives periodic sensor logs (vibration, motor current) as truncated Fourier series with
//! a per-segment RMS error bound that the decoder is checked against.
//!
//! ## The layers
//!
//! The library is built in layers; each uses only the layers below it:
//!
//! ```text
//! main.rs, report            the command line and its tables and JSON
//! jobs                       encode, stream, decode, verify, pipeline: what the commands do
//! options                    the one options type (flags and pipelines/*.toml), resolved once
//! source        archive      Parquet sources in and decoded Parquet out | the archive file
//! codec                      samples ↔ coded blocks: params, estimate, segment, fit, quant,
//!                            entropy, frame, parse, encode, decode; never Parquet, paths or
//!                            columns
//! signal        fsio         FFT and signal maths | durable files, digests, safe Parquet open
//! model         error        the shared vocabulary | the error type and exit codes
//! ```
//!
//! Encoding a file: [`source`] reads and assembles runs, [`codec::encode`] plans, fits and
//! packs them into [`codec::EncodedBlock`]s, [`archive::ArchiveWriter`] writes them; the
//! scheduler in [`jobs::stream`] overlaps the three. Decoding: [`Archive::open`] reads and
//! checks the file, [`archive::decode_channels`] rebuilds channels with [`codec::decode`],
//! and [`source::write_decoded`] writes them in the source's layout. [`jobs::verify()`]
//! recomputes every segment's error against the source.
//!
//! ## Conventions
//!
//! **DFT scaling.** A segment x\[0..N) has the orthonormal DFT
//! `c_k = X_k / √N` with `X_k = Σ_n x_n · e^(−2πi·k·n/N)`, so that `Σ_n x_n² = Σ_k |c_k|²`
//! (Parseval) over all N bins. Only the one-sided half `k = 0 … ⌊N/2⌋` is stored; bin `k` has
//! weight `w_k = 2`, except DC (`k = 0`) and, for even N, Nyquist (`k = N/2`), which have
//! weight 1. Bin `k` sits at `k · fs / N` Hz.
//!
//! **Order.** "Order L" keeps bins `0 … L−1` (and their conjugates) and zeroes the rest, so
//! `0 ≤ L ≤ ⌊N/2⌋ + 1`. For a segment of K whole cycles the h-th harmonic of the fundamental
//! is bin `h·K`; keeping harmonics up to H therefore needs order `H·K + 1`.
//!
//! **Error.** The error of a segment is the RMS, over the segment's finite source values, of
//! (decoded output − source value), where the decoded output is what the decoder writes, in
//! the source's value type: rounding to f32, or to integer ADC counts, is part of the error.
//! With quantizer step Δ and prediction p, the error energy over the N samples of order L is
//! `Σ_{k<L} w_k |c_k − p_k − Δ·q_k|² + Σ_{k≥L} w_k |c_k|²`, computed for every L from one FFT
//! ([`codec::fit::error_by_order`]). The encoder picks the least L whose energy meets the segment's
//! target, synthesizes the decoder's output, measures the true error and only records a segment
//! whose error, widened by a floating-point margin (see [`codec::fit`]), stays within the
//! budget.
//!
//! **Trend.** A segment may also carry a polynomial (basis `fourier_trend`): coefficients
//! β₁ (ramp) and, for degree 2, β₂ (parabola) on the orthonormal discrete polynomials u₁, u₂
//! of the segment ([`codec::decode::trend_basis`]), quantized with their own step, plus the
//! Fourier coefficients of what the polynomial leaves, `d = x − Σ β̂_j u_j`. The decoder
//! outputs `Σ β̂_j u_j + (inverse DFT of the kept bins of d)`, so the error is d's Fourier
//! error and every order's error is exact by Parseval on d, as above. The encoder chooses β
//! as the least squares of the polynomial columns projected on the bins it drops (the
//! columns orthogonalized against the kept Fourier terms), and keeps the polynomial only
//! where it codes smaller.
//!
//! **Warp.** A Fourier segment may be coded in angle ([`codec::warp`]): with warp `a` its
//! samples are resampled at the angle fractions `θ(s) = s + a(s² − s)` of the time fractions
//! `s = m/N`, and the decoder evaluates the kept series at `N·θ(m/N)`. Orders, bins and
//! energies then refer to the angle-domain segment; the recorded error is, as always, that of
//! the decoder's output in time.
//!
//! **Budgets.** Per segment, in the channel's units: absolute (`--budget-rms`), or relative to
//! the segment's own RMS with an absolute floor (`--budget-rel`, `--budget-floor`). A budget
//! of 0 means lossless. Resolved budgets are f32, rounded down (the archive records the rule;
//! `verify` resolves it again on the source); an absolute budget
//! no f32 holds (above `f32::MAX`, or positive below the least positive f32) is refused, and
//! so is a relative one that resolves above `f32::MAX`. Errors are recorded as f32 rounded
//! up, and measured at a power-of-two scale when their squares would leave f64's range, so
//! a tiny error is never recorded as 0 ([`signal::rms_of`]).
//!
//! **Peak guard.** With a peak limit X (`--peak-max`), no decoded sample differs from its
//! source value by more than X: samples the fit would miss by more get sparse time-domain
//! corrections ([`codec::guard`]), aimed at X less the floating-point margin (one count on
//! integer channels). Each guarded segment records its largest error, rounded up; `verify`
//! checks every sample against the limit and that record.
//!
//! **Protected bands.** Bins inside a channel's protected bands ([`codec::bands`]; Hz or
//! orders) are refined with a step of their own so that each bin's peak amplitude
//! `2|X_k|/N` comes back within 1 % of the source's, or within the channel's floor; the
//! refinement is added to the decoder's unrounded output before rounding, and `verify`
//! recomputes every protected amplitude.
//!
//! **Events.** With event capture ([`codec::events`]) a segment whose crest factor,
//! kurtosis or RMS jumps against the previous segments of its run is coded at a tenth of the
//! budget, in rows of its own marked by the `event` column.
//!
//! **Coding.** A block's integer codes (quantized bins, trend coefficients, time-domain
//! samples) form one range-coded stream with adaptive probabilities in contexts
//! ([`codec::entropy`]); the block, that stream included, is one zstd frame. A small block
//! whose codes zstd alone packs smaller is written with varint codes instead (block layout 5).
//!
//! **Archive.** One Parquet file, one row per second of a block's segments (format 3.2); the
//! schema, its columns and the version rules are in [`archive`] and in the README. Every row of the source comes back: timestamps
//! exactly, and NaN, ±Inf and null values exactly where they were.
//!
//! **Determinism.** The same input and settings give a byte-identical archive on one thread or
//! many: blocks of segments are fitted in parallel but their content never depends on the
//! thread count or on the input's row-group sizes.
#![warn(missing_docs)]
// Comparisons like `!(x > 0.0)` are deliberate: they are true for NaN, which must fail them.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

pub mod archive;
pub mod baseline;
pub mod codec;
pub mod error;
pub mod fsio;
pub mod html;
pub mod jobs;
pub mod model;
pub mod options;
pub mod plot;
pub mod report;
pub mod signal;
pub mod source;
pub mod stop;
pub mod store;

pub use archive::{Archive, DigestPolicy};
pub use error::{Error, Result};
pub use jobs::{decode_file, encode_file, verify, JobControl};
pub use options::{EncodeOptions, Settings};
