//! # cyclarc
//!
//! Archives periodic sensor logs (vibration, motor current) as truncated Fourier series with
//! a per-segment RMS error bound that the decoder is checked against.
//!
//! The pipeline has one module per stage:
//!
//! ```text
//! encode:  read → assemble → segment → fit → pack → archive (write)
//! decode:  archive (read) → pack (unpack) → decode (rebuild) → verify
//! ```
//!
//! [`job`] drives one source file through the stages, [`pipeline`] drives many (manifest,
//! reruns), [`report`] renders tables and JSON, and [`options`] is the one options type that
//! both the command line and `pipelines/*.toml` fill.
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
//! ([`fit::error_by_order`]). The encoder picks the least L whose energy meets the segment's
//! target, synthesizes the decoder's output, measures the true error and only records a segment
//! whose error, widened by a floating-point margin (see [`fit`]), stays within the budget.
//!
//! **Budgets.** Per segment, in the channel's units: absolute (`--budget-rms`), or relative to
//! the segment's own RMS with an absolute floor (`--budget-rel`, `--budget-floor`). A budget
//! of 0 means lossless. Resolved budgets are stored as f32, rounded down; an absolute budget
//! no f32 holds (above `f32::MAX`, or positive below the least positive f32) is refused, and
//! so is a relative one that resolves above `f32::MAX`. Errors are recorded as f32 rounded
//! up, and measured at a power-of-two scale when their squares would leave f64's range, so
//! a tiny error is never recorded as 0 ([`signal::rms_of`]).
//!
//! **Archive.** One Parquet file, one row per segment; the schema, its columns and the version
//! rules are in [`archive`] and in the README. Every row of the source comes back: timestamps
//! exactly, and NaN, ±Inf and null values exactly where they were.
//!
//! **Determinism.** The same input and settings give a byte-identical archive on one thread or
//! many: blocks of segments are fitted in parallel but their content never depends on the
//! thread count or on the input's row-group sizes.
#![warn(missing_docs)]
// Comparisons like `!(x > 0.0)` are deliberate: they are true for NaN, which must fail them.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

pub mod archive;
pub mod assemble;
pub mod baseline;
pub mod decode;
pub mod error;
pub mod fit;
pub mod job;
pub mod options;
pub mod pack;
pub mod pipeline;
pub mod read;
pub mod report;
pub mod segment;
pub mod signal;
pub mod stop;
pub mod verify;
pub mod write;

pub use error::{Error, Result};
