//! Entropy coding of a block's integer codes: one range-coded stream per block, with
//! adaptive probabilities in contexts.
//!
//! Each code is ZigZag-mapped and split into its *class* (the bit length of the ZigZag value:
//! 0 for 0, 1 for 1, c for 2^(c−1) … 2^c − 1), the bit below the leading one, and the bits
//! below that. The class is coded with an adaptive distribution chosen by the code's
//! *family* (what the codes are: Fourier bins, prediction residuals of Fourier bins,
//! polynomial trend coefficients, time-domain samples, integer lossless differences) and by
//! its *context*, the expected class from its neighbours: the two codes before it in the
//! family's stream and, for Fourier bins, the same bin of the family's previous segment
//! (`(c₁ + c₂ + 2·c_prev + 2) / 4`). Each context's distribution starts peaked at its own
//! expected class, so a short block does not pay for learning what its context already says.
//! The bits below the leading one are coded one by one, each with an adaptive binary
//! distribution per family, class and bit position (so a steady value or a skewed magnitude
//! costs little); bits beyond the 24th below the leading one are coded uniformly.
//!
//! Time-domain codes of consecutive segments continue one stream (their neighbours run across
//! the segment boundary), so fallback segments are coded as one signal, not piece by piece.
//!
//! Adaptation: after each symbol s the cumulative distribution moves a fraction 2^−rate of
//! the way toward the one that puts all free mass on s, keeping every symbol's probability at
//! least 2^−24 (the CDF adaptation of the AV1 bitstream's symbol coder, AV1 specification
//! §8.2.6, "from memory": `rate = 3 + [count > 15] + [count > 31] + min(⌊log₂ A⌋, 2)` for an
//! A-symbol alphabet). Integer arithmetic only: encoder and decoder compute the same
//! probabilities on any machine. The range coder itself is the `constriction` crate's.
//!
//! Does not: choose codes (that is `fit`), or know the block's other sections (that is
//! `frame` and `parse`).

use std::borrow::Borrow;
use std::num::NonZeroU32;

use constriction::stream::model::{DecoderModel, EncoderModel, EntropyModel, UniformModel};
use constriction::stream::queue::{DefaultRangeDecoder, DefaultRangeEncoder};
use constriction::stream::{Decode, Encode};

use crate::codec::quant::{unzigzag, zigzag};

/// Bits of probability precision of the range coder.
const PRECISION: usize = 24;

/// Total probability mass of a distribution.
const TOTAL: u32 = 1 << PRECISION;

/// Classes coded directly; larger classes are escaped.
const DIRECT_CLASSES: usize = 25;

/// The class alphabet: the direct classes and the escape.
const CLASS_SYMBOLS: usize = DIRECT_CLASSES + 1;

/// Classes above the direct ones (25 … 64), coded uniformly after the escape.
const ESCAPED_CLASSES: usize = CLASSES - DIRECT_CLASSES;

/// Contexts per family (expected class 0 … 24).
const CONTEXTS: usize = DIRECT_CLASSES;

/// Most bits coded in one uniform symbol.
const UNIFORM_CHUNK: u32 = 16;

/// Bits below a code's leading one that have adaptive distributions; the rest are uniform.
const MODELLED_BITS: usize = 24;

/// Classes a ZigZag value can have (0 … 64).
const CLASSES: usize = 65;

/// What a run of codes is; each family has its own distributions and neighbour history.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Family {
    /// Fourier bins (real and imaginary parts by bin), not predicted.
    Fourier = 0,
    /// Fourier bins as residuals from the previous segment's.
    FourierPredicted = 1,
    /// Polynomial trend coefficients.
    Trend = 2,
    /// Time-domain samples (quantized), or their differences.
    Samples = 3,
    /// Integer lossless values as differences.
    Integer = 4,
    /// Peak-guard corrections ([`crate::codec::guard`]).
    Correction = 5,
    /// Protected bins' refinements ([`crate::codec::bands`]).
    Protected = 6,
}

const FAMILIES: usize = 7;

/// What went wrong decoding a code stream.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
pub enum EntropyError {
    /// The range decoder met bytes no encoder writes.
    #[error("range-coded stream is invalid")]
    Invalid,
    /// The stream's length is not a whole number of 32-bit words.
    #[error("range-coded stream is not a whole number of words")]
    Length,
    /// A decoded class is beyond 64 bits.
    #[error("code wider than 64 bits")]
    Overflow,
}

/// An adaptive distribution over `N` symbols (`cdf[0] = 0`, `cdf[N] = TOTAL`, every symbol
/// at least 1).
#[derive(Clone)]
struct Adaptive<const N: usize> {
    cdf: [u32; N],
    count: u32,
}

impl<const N: usize> Adaptive<N> {
    /// Symbols of the alphabet (`N` is the CDF's interior length plus one).
    const SYMBOLS: usize = N;

    /// A distribution proportional to `weight(s)` (each at least 1 after scaling).
    fn from_weights(weight: impl Fn(usize) -> u64) -> Self {
        let w: Vec<u64> = (0..N).map(&weight).collect();
        let sum: u64 = w.iter().sum::<u64>().max(1);
        let free = (TOTAL as u64) - N as u64;
        let mut p: Vec<u64> = w.iter().map(|&x| 1 + x * free / sum).collect();
        let used: u64 = p.iter().sum();
        // The rounding remainder goes to the most likely symbol.
        let mode = (0..N)
            .max_by_key(|&i| (w[i], std::cmp::Reverse(i)))
            .unwrap_or(0);
        p[mode] += TOTAL as u64 - used;
        let mut cdf = [0u32; N];
        let mut acc = 0u64;
        for i in 0..N {
            cdf[i] = acc as u32;
            acc += p[i];
        }
        Adaptive { cdf, count: 0 }
    }

    fn uniform() -> Self {
        Self::from_weights(|_| 1)
    }

    fn bounds(&self, s: usize) -> (u32, u32) {
        let hi = if s + 1 < N { self.cdf[s + 1] } else { TOTAL };
        (self.cdf[s], hi)
    }

    fn update(&mut self, s: usize) {
        let log2 = (usize::BITS - 1 - Self::SYMBOLS.leading_zeros()).min(2);
        let rate = 3 + u32::from(self.count > 15) + u32::from(self.count > 31) + log2;
        self.count = (self.count + 1).min(32);
        // cdf[i] is the mass below symbol i: it falls toward its floor i for i ≤ s and rises
        // toward its ceiling TOTAL − (N − i) for i > s.
        for i in 1..N {
            let c = self.cdf[i];
            if i <= s {
                self.cdf[i] = c - ((c - i as u32) >> rate);
            } else {
                let ceil = TOTAL - (N - i) as u32;
                self.cdf[i] = c + ((ceil - c) >> rate);
            }
        }
    }
}

impl<const N: usize> EntropyModel<PRECISION> for &Adaptive<N> {
    type Symbol = usize;
    type Probability = u32;
}

impl<const N: usize> EncoderModel<PRECISION> for &Adaptive<N> {
    fn left_cumulative_and_probability(
        &self,
        symbol: impl Borrow<usize>,
    ) -> Option<(u32, NonZeroU32)> {
        let s = *symbol.borrow();
        if s >= N {
            return None;
        }
        let (lo, hi) = self.bounds(s);
        NonZeroU32::new(hi - lo).map(|p| (lo, p))
    }
}

impl<const N: usize> DecoderModel<PRECISION> for &Adaptive<N> {
    fn quantile_function(&self, quantile: u32) -> (usize, u32, NonZeroU32) {
        // The last symbol whose lower bound is not above the quantile.
        let s = self.cdf.partition_point(|&c| c <= quantile).max(1) - 1;
        let (lo, hi) = self.bounds(s);
        // Every symbol has probability ≥ 1 by construction.
        (s, lo, NonZeroU32::new(hi - lo).unwrap_or(NonZeroU32::MIN))
    }
}

/// Class of a ZigZag value: its bit length.
#[inline]
fn class_of(z: u64) -> usize {
    (64 - z.leading_zeros()) as usize
}

/// The distributions and neighbour histories of one block's code stream.
struct Contexts {
    classes: Vec<Adaptive<CLASS_SYMBOLS>>,
    /// Per family, class and bit position below the leading one.
    bits: Vec<Adaptive<2>>,
    /// Per family: the last two classes of its stream.
    recent: [(usize, usize); FAMILIES],
    /// Per family: the classes of its previous segment (Fourier families).
    previous: [Vec<u8>; FAMILIES],
    /// The classes of the segment being coded.
    current: Vec<u8>,
}

impl Contexts {
    fn new() -> Self {
        let classes = (0..FAMILIES * CONTEXTS)
            .map(|i| {
                let m = i % CONTEXTS;
                // Peaked at the expected class: weight halves per class of distance.
                Adaptive::from_weights(|c| {
                    let d = if c == DIRECT_CLASSES {
                        12
                    } else {
                        c.abs_diff(m)
                    };
                    1u64 << (2 * (12 - d.min(12)))
                })
            })
            .collect();
        Contexts {
            classes,
            bits: vec![Adaptive::uniform(); FAMILIES * CLASSES * MODELLED_BITS],
            recent: [(0, 0); FAMILIES],
            previous: Default::default(),
            current: Vec::new(),
        }
    }

    /// The context of code `j` of a segment of family `f`.
    fn context(&self, f: usize, j: usize) -> usize {
        let (c1, c2) = self.recent[f];
        let cp = self.previous[f].get(j).map_or(c1, |&c| c as usize);
        ((c1 + c2 + 2 * cp + 2) / 4).min(CONTEXTS - 1)
    }

    fn begin_segment(&mut self, f: Family) {
        self.current.clear();
        let f = f as usize;
        if matches!(f, 0 | 1) {
            // A Fourier segment starts from the previous one's first bins.
            let p = &self.previous[f];
            let c0 = p.first().map_or(0, |&c| c as usize);
            self.recent[f] = (c0, c0);
        }
    }

    fn end_segment(&mut self, f: Family) {
        let f = f as usize;
        if matches!(f, 0 | 1) {
            std::mem::swap(&mut self.previous[f], &mut self.current);
        }
    }

    fn record(&mut self, f: usize, c: usize) {
        let (c1, _) = self.recent[f];
        self.recent[f] = (c.min(64), c1);
        self.current.push(c.min(255) as u8);
    }
}

/// Encodes the codes of a block, segment by segment, into one range-coded stream.
pub struct CodeWriter {
    coder: DefaultRangeEncoder,
    ctx: Contexts,
}

impl Default for CodeWriter {
    fn default() -> Self {
        Self::new()
    }
}

impl CodeWriter {
    /// An empty stream.
    pub fn new() -> Self {
        CodeWriter {
            coder: DefaultRangeEncoder::new(),
            ctx: Contexts::new(),
        }
    }

    /// Append one segment's codes of family `f`.
    pub fn segment(&mut self, f: Family, codes: &[i64]) {
        self.ctx.begin_segment(f);
        let fi = f as usize;
        for (j, &q) in codes.iter().enumerate() {
            let z = zigzag(q);
            let c = class_of(z);
            let k = self.ctx.context(fi, j);
            let model = &mut self.ctx.classes[fi * CONTEXTS + k];
            let s = c.min(DIRECT_CLASSES);
            encode(&mut self.coder, s, &*model);
            model.update(s);
            if s == DIRECT_CLASSES {
                encode_uniform(
                    &mut self.coder,
                    (c - DIRECT_CLASSES) as u64,
                    ESCAPED_CLASSES,
                );
            }
            if c >= 2 {
                let below = c - 1;
                let modelled = below.min(MODELLED_BITS);
                let base = (fi * CLASSES + c) * MODELLED_BITS;
                for j in 0..modelled {
                    let b = ((z >> (below - 1 - j)) & 1) as usize;
                    let model = &mut self.ctx.bits[base + j];
                    encode(&mut self.coder, b, &*model);
                    model.update(b);
                }
                encode_bits(&mut self.coder, z, (below - modelled) as u32);
            }
            self.ctx.record(fi, c);
        }
        self.ctx.end_segment(f);
    }

    /// The stream's bytes (32-bit words, little-endian).
    pub fn finish(self) -> Vec<u8> {
        let words = self.coder.into_compressed().unwrap_or_default();
        words.iter().flat_map(|w| w.to_le_bytes()).collect()
    }
}

fn encode<M: EncoderModel<PRECISION, Probability = u32>>(
    coder: &mut DefaultRangeEncoder,
    s: M::Symbol,
    model: M,
) {
    // Every symbol of every model here has a nonzero probability, and the Vec backend
    // cannot fail: an error is a bug in this module.
    coder
        .encode_symbol(s, model)
        .expect("every symbol is codable");
}

fn encode_uniform(coder: &mut DefaultRangeEncoder, v: u64, range: usize) {
    encode(
        coder,
        v as usize,
        UniformModel::<u32, PRECISION>::new(range),
    );
}

/// The low `n` bits of `z`, most significant chunk first.
fn encode_bits(coder: &mut DefaultRangeEncoder, z: u64, mut n: u32) {
    while n > 0 {
        let k = n.min(UNIFORM_CHUNK);
        n -= k;
        encode_uniform(coder, (z >> n) & ((1u64 << k) - 1), 1 << k);
    }
}

/// Decodes a block's code stream segment by segment, in the order it was written.
pub struct CodeReader {
    coder: DefaultRangeDecoder,
    ctx: Contexts,
}

impl CodeReader {
    /// A reader of a stream written by [`CodeWriter::finish`].
    pub fn new(bytes: &[u8]) -> Result<Self, EntropyError> {
        if !bytes.len().is_multiple_of(4) {
            return Err(EntropyError::Length);
        }
        let words: Vec<u32> = bytes
            .chunks_exact(4)
            .map(|c| u32::from_le_bytes([c[0], c[1], c[2], c[3]]))
            .collect();
        let coder =
            DefaultRangeDecoder::from_compressed(words).map_err(|_| EntropyError::Invalid)?;
        Ok(CodeReader {
            coder,
            ctx: Contexts::new(),
        })
    }

    /// The next segment's `n` codes of family `f`.
    pub fn segment(&mut self, f: Family, n: usize) -> Result<Vec<i64>, EntropyError> {
        self.ctx.begin_segment(f);
        let fi = f as usize;
        let mut out = Vec::with_capacity(n);
        for j in 0..n {
            let k = self.ctx.context(fi, j);
            let model = &mut self.ctx.classes[fi * CONTEXTS + k];
            let s = decode(&mut self.coder, &*model)?;
            model.update(s);
            let c = if s == DIRECT_CLASSES {
                DIRECT_CLASSES + decode_uniform(&mut self.coder, ESCAPED_CLASSES)? as usize
            } else {
                s
            };
            let z = match c {
                0 => 0,
                1 => 1,
                65.. => return Err(EntropyError::Overflow),
                _ => {
                    let below = c - 1;
                    let modelled = below.min(MODELLED_BITS);
                    let base = (fi * CLASSES + c) * MODELLED_BITS;
                    let mut z = 1u64;
                    for j in 0..modelled {
                        let model = &mut self.ctx.bits[base + j];
                        let b = decode(&mut self.coder, &*model)?;
                        model.update(b);
                        z = (z << 1) | b as u64;
                    }
                    let rest_bits = (below - modelled) as u32;
                    let rest = decode_bits(&mut self.coder, rest_bits)?;
                    if rest_bits > 0 {
                        z = (z << rest_bits) | rest;
                    }
                    z
                }
            };
            self.ctx.record(fi, c);
            out.push(unzigzag(z));
        }
        self.ctx.end_segment(f);
        Ok(out)
    }
}

fn decode<M: DecoderModel<PRECISION, Probability = u32>>(
    coder: &mut DefaultRangeDecoder,
    model: M,
) -> Result<M::Symbol, EntropyError> {
    coder
        .decode_symbol(model)
        .map_err(|_| EntropyError::Invalid)
}

fn decode_uniform(coder: &mut DefaultRangeDecoder, range: usize) -> Result<u64, EntropyError> {
    decode(coder, UniformModel::<u32, PRECISION>::new(range)).map(|v| v as u64)
}

fn decode_bits(coder: &mut DefaultRangeDecoder, mut n: u32) -> Result<u64, EntropyError> {
    let mut z = 0u64;
    while n > 0 {
        let k = n.min(UNIFORM_CHUNK);
        n -= k;
        z = (z << k) | decode_uniform(coder, 1 << k)?;
    }
    Ok(z)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn round_trip(segments: &[(Family, Vec<i64>)]) -> usize {
        let mut w = CodeWriter::new();
        for (f, c) in segments {
            w.segment(*f, c);
        }
        let bytes = w.finish();
        let mut r = CodeReader::new(&bytes).unwrap();
        for (f, c) in segments {
            assert_eq!(&r.segment(*f, c.len()).unwrap(), c);
        }
        bytes.len()
    }

    #[test]
    fn extremes_round_trip() {
        let all = vec![
            0,
            1,
            -1,
            2,
            -2,
            3,
            1 << 24,
            -(1 << 30),
            i64::MAX,
            i64::MIN,
            12345,
        ];
        round_trip(&[
            (Family::Fourier, all.clone()),
            (Family::FourierPredicted, all.clone()),
            (Family::Trend, vec![]),
            (Family::Samples, all.clone()),
            (Family::Integer, all),
        ]);
    }

    #[test]
    fn every_symbol_keeps_a_nonzero_probability() {
        let mut a = Adaptive::<CLASS_SYMBOLS>::uniform();
        for _ in 0..10_000 {
            a.update(3);
        }
        for s in 0..CLASS_SYMBOLS {
            let (lo, hi) = a.bounds(s);
            assert!(hi > lo, "symbol {s}");
        }
        assert_eq!(a.cdf[0], 0);
    }

    #[test]
    fn a_skewed_stream_costs_near_its_entropy() {
        // Codes 0 with probability 0.9, ±1 otherwise: order-0 entropy
        // H = −0.9·log₂0.9 − 2·0.05·log₂0.05 ≈ 0.569 bits per code (Shannon's definition).
        let mut state = 12345u64;
        let codes: Vec<i64> = (0..20_000)
            .map(|_| {
                state = state
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                match (state >> 33) % 20 {
                    0 => 1,
                    1 => -1,
                    _ => 0,
                }
            })
            .collect();
        let bytes = round_trip(&[(Family::Samples, codes)]);
        let bits_per_code = bytes as f64 * 8.0 / 20_000.0;
        assert!(bits_per_code < 0.569 * 1.05, "{bits_per_code}");
    }

    #[test]
    fn damaged_streams_are_errors_or_codes_never_panics() {
        let mut w = CodeWriter::new();
        w.segment(Family::Fourier, &[100, -3, 7, 0, 0, 1, -1, 5000]);
        let bytes = w.finish();
        for i in 0..bytes.len() {
            for bit in [0x01u8, 0x80] {
                let mut b = bytes.clone();
                b[i] ^= bit;
                if let Ok(mut r) = CodeReader::new(&b) {
                    let _ = r.segment(Family::Fourier, 8);
                    let _ = r.segment(Family::Samples, 100);
                }
            }
        }
        assert!(CodeReader::new(&bytes[..bytes.len() - 1]).is_err());
    }
}
