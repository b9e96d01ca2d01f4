//! Frame: a block of consecutive segments of one channel run ↔ one zstd frame.
//!
//! Blocks decode independently (prediction restarts at each block), so a reader can fetch a
//! time range by blocks. Inside a block the bytes are laid out by kind so zstd sees the
//! redundancy: block header, segment headers, timestamp residuals, non-finite values, integer
//! codes (one range-coded stream with adaptive contexts, [`crate::codec::entropy`]; LEB128
//! varints of ZigZag values in block format 1), then raw lossless bits byte-plane by byte-plane.
//! Every frame carries zstd's content checksum; the archive adds a CRC-32 of the compressed
//! frame and of the block's rows, so damage is detected before decompression.
//!
//! A block is self-contained: every quantity needed to decode it (lengths, orders, steps,
//! timestamps) is inside the checksummed frame; the archive's other columns are copies for
//! queries and are cross-checked against it.
//!
//! Does not: decide anything about the signal (that is `fit`), or know about Parquet.

use integer_encoding::VarInt;

pub use crate::codec::bands::Protected;
use crate::codec::entropy::{CodeWriter, Family};
pub use crate::codec::guard::Guard;
use crate::codec::quant::{code_count, zigzag};
use crate::model::{Basis, Trend, ValueType};
pub use crate::model::{Special, SpecialKind};

/// Block layout 2: the integer codes range-coded (archive format 3.0), still read.
pub const BLOCK_FORMAT: u8 = 2;

/// The first block layout (integer codes as LEB128 varints), still read.
pub const BLOCK_FORMAT_VARINT: u8 = 1;

/// Layout 2 with peak-guard corrections ([`crate::codec::guard`]) and protected bins
/// ([`crate::codec::bands`]) (archive format 3.1), still read.
pub const BLOCK_FORMAT_GUARDED: u8 = 3;

/// The layout this build writes (archive format 3.2): layout 3's sections with compact
/// segment headers — a segment's length and order as differences from the previous
/// segment's in the block, its ideal length as the difference of its f32 bits from those of
/// its length, and a step on the search grid ([`crate::codec::search::grid_step`]) as the
/// difference of its grid index from the previous grid step's (any other step as its f32
/// bits after an escape). Older builds refuse it by its layout number.
pub const BLOCK_FORMAT_COMPACT: u8 = 4;

/// Layout 4 with varint codes (layout 1's codes section), written where that is smaller
/// ([`VARINT_TRIAL_BYTES`]); like layout 1, without peak guards or protected bins.
pub const BLOCK_FORMAT_COMPACT_VARINT: u8 = 5;

/// Whether a layout writes its integer codes as varints.
pub(crate) fn varint_codes(format: u8) -> bool {
    format == BLOCK_FORMAT_VARINT || format == BLOCK_FORMAT_COMPACT_VARINT
}

/// Whether a layout has compact segment headers.
pub(crate) fn compact_headers(format: u8) -> bool {
    format == BLOCK_FORMAT_COMPACT || format == BLOCK_FORMAT_COMPACT_VARINT
}

/// Whether a layout may hold peak guards and protected bins.
pub(crate) fn guards_allowed(format: u8) -> bool {
    format == BLOCK_FORMAT_GUARDED || format == BLOCK_FORMAT_COMPACT
}

/// Segment tag bit: the segment carries a peak guard (layout 3 only).
pub(crate) const TAG_GUARD: u8 = 0x40;

/// Segment tag bit: the segment carries protected bins (layout 3 only).
pub(crate) const TAG_PROTECT: u8 = 0x80;

/// Magic bytes at the start of a decompressed block.
pub(crate) const MAGIC: &[u8; 2] = b"CB";

/// Largest decompressed block accepted (a damaged length cannot make the reader allocate more).
pub const MAX_BLOCK_BYTES: usize = 1 << 30;

/// What is wrong with a frame that does not decode: small and typed; the archive reader
/// wraps it once with the file and the block.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum FrameError {
    /// zstd refused the frame (its content checksum included).
    #[error("zstd: {0}")]
    Zstd(String),
    /// The decompressed block is larger than [`MAX_BLOCK_BYTES`].
    #[error("block larger than the format allows")]
    TooLarge,
    /// Not a block of this program.
    #[error("not a cyclarc block (bad magic)")]
    BadMagic,
    /// A block format this build does not read.
    #[error("block format {0} is not supported")]
    UnsupportedFormat(u8),
    /// A section ends before its contents.
    #[error("{section} section at byte {at}: truncated")]
    Truncated {
        /// The section.
        section: &'static str,
        /// Byte offset in the section.
        at: usize,
    },
    /// A value in a section is out of range or out of order.
    #[error("{section} section at byte {at}: {what}")]
    Malformed {
        /// The section.
        section: &'static str,
        /// Byte offset in the section.
        at: usize,
        /// What is wrong.
        what: &'static str,
    },
    /// The range-coded integer codes do not decode.
    #[error("codes section: {0}")]
    Codes(String),
    /// The sections disagree with each other.
    #[error("{0}")]
    Inconsistent(&'static str),
    /// A segment cannot be rebuilt from what the block holds.
    #[error("segment {index} of block: {what}")]
    Segment {
        /// The segment's index in the block.
        index: usize,
        /// What is wrong.
        what: &'static str,
    },
}

/// One segment as stored in a block.
#[derive(Debug, Clone, PartialEq)]
pub struct SegmentRecord {
    /// Number of samples.
    pub len: usize,
    /// Ideal length Λ = K·P (samples), used by the prediction.
    pub ideal_len: f32,
    /// Whole cycles K (0 when not periodic).
    pub cycles: u32,
    /// Representation.
    pub basis: Basis,
    /// Order L (Fourier; 0 otherwise).
    pub order: u32,
    /// Quantizer step (Fourier, samples).
    pub step: f32,
    /// Whether codes are prediction residuals.
    pub predicted: bool,
    /// Integer codes (see [`crate::codec::fit::Fitted::codes`]).
    pub codes: Vec<i64>,
    /// Lossless float bits.
    pub raw: Vec<u64>,
    /// Non-finite and null values, by index.
    pub specials: Vec<Special>,
    /// The polynomial part ([`Basis::Trend`] only); its codes come first.
    pub trend: Option<Trend>,
    /// The warp of a Fourier segment coded in angle ([`crate::codec::warp`]).
    pub warp: Option<f32>,
    /// The peak guard's corrections and claimed peak error ([`crate::codec::guard`]).
    pub guard: Option<Guard>,
    /// Protected bins' refinements ([`crate::codec::bands`]).
    pub protect: Option<Protected>,
}

impl SegmentRecord {
    /// How many integer codes the segment has.
    pub fn expected_codes(&self, value_type: ValueType) -> usize {
        code_layout(self, value_type)
            .into_iter()
            .flatten()
            .map(|p| p.1)
            .sum()
    }

    /// How many raw words the segment has.
    pub fn expected_raw(&self, value_type: ValueType) -> usize {
        match self.basis {
            Basis::Lossless if !value_type.is_integer() => self.len - self.specials.len(),
            _ => 0,
        }
    }
}

/// Timestamps of a block: grid `start + round(i·step)` plus exact residuals.
#[derive(Debug, Clone, PartialEq)]
pub struct BlockTimes {
    /// Time of the block's first sample (ns since the epoch).
    pub start_ns: i64,
    /// Grid step (ns per sample).
    pub step_ns: f64,
    /// Departure of each sample's time from the grid (ns); empty when all are zero.
    pub residuals: Vec<i64>,
}

impl BlockTimes {
    /// Fit a grid to a block's timestamps (first to last) and keep the residuals.
    pub fn from_times(times: &[i64]) -> BlockTimes {
        let start_ns = times.first().copied().unwrap_or(0);
        let step_ns = if times.len() > 1 {
            (times[times.len() - 1] as i128 - start_ns as i128) as f64 / (times.len() - 1) as f64
        } else {
            0.0
        };
        let mut residuals: Vec<i64> = times
            .iter()
            .enumerate()
            .map(|(i, &t)| t.wrapping_sub(grid_time(start_ns, step_ns, i)))
            .collect();
        if residuals.iter().all(|&r| r == 0) {
            residuals.clear();
        }
        BlockTimes {
            start_ns,
            step_ns,
            residuals,
        }
    }

    /// The timestamp of sample `i` of the block.
    pub fn time(&self, i: usize) -> i64 {
        let g = grid_time(self.start_ns, self.step_ns, i);
        match self.residuals.get(i) {
            Some(&r) => g.wrapping_add(r),
            None => g,
        }
    }
}

/// Grid time of sample i: `start + round(i·step)` in IEEE f64 (exactly reproducible).
#[inline]
pub fn grid_time(start: i64, step: f64, i: usize) -> i64 {
    start.wrapping_add((i as f64 * step).round() as i64)
}

/// A block: consecutive segments of one run of one channel.
#[derive(Debug, Clone, PartialEq)]
pub struct Block {
    /// Value type of the channel.
    pub value_type: ValueType,
    /// The segments in order.
    pub segments: Vec<SegmentRecord>,
    /// Timestamps of all samples of the block.
    pub times: BlockTimes,
}

impl Block {
    /// Total samples.
    pub fn samples(&self) -> usize {
        self.segments.iter().map(|s| s.len).sum()
    }

    /// Whether a segment carries a peak guard or protected bins (block layout 3).
    pub fn guarded(&self) -> bool {
        self.segments
            .iter()
            .any(|s| s.guard.is_some() || s.protect.is_some())
    }
}

fn vt_tag(v: ValueType) -> u8 {
    match v {
        ValueType::F64 => 0,
        ValueType::F32 => 1,
        ValueType::I16 => 2,
        ValueType::I32 => 3,
    }
}

pub(crate) fn vt_from_tag(t: u8) -> Option<ValueType> {
    Some(match t {
        0 => ValueType::F64,
        1 => ValueType::F32,
        2 => ValueType::I16,
        3 => ValueType::I32,
        _ => return None,
    })
}

fn put<V: VarInt>(out: &mut Vec<u8>, v: V) {
    let mut buf = [0u8; 10];
    let n = v.encode_var(&mut buf);
    out.extend_from_slice(&buf[..n]);
}

/// A count, then increasing indices as gaps from 0 (read back by the parser's `indices`).
fn put_gaps(out: &mut Vec<u8>, at: &[u32]) {
    put(out, at.len() as u64);
    let mut last = 0u32;
    for &i in at {
        put(out, (i - last) as u64);
        last = i;
    }
}

/// Serialize a block (before compression) in this build's layout, [`BLOCK_FORMAT_COMPACT`].
pub fn serialize_block(b: &Block) -> Vec<u8> {
    serialize_block_as(b, BLOCK_FORMAT_COMPACT)
}

/// What the compact segment headers of a block predict from the segment before.
#[derive(Default)]
pub(crate) struct HeaderContext {
    /// The previous segment's length (0 before the first).
    pub len: usize,
    /// The previous Fourier or trend segment's order.
    pub order: u32,
    /// The previous step's grid index.
    pub grid: i32,
}

/// A compact header's step: the grid index's difference from the previous one (ZigZag),
/// shifted left by one; or 1 followed by the f32 bits for a step off the grid.
fn put_step(out: &mut Vec<u8>, step: f32, ctx: &mut HeaderContext) {
    match crate::codec::search::grid_index(step) {
        Some(k) => {
            put(out, zigzag(k as i64 - ctx.grid as i64) << 1);
            ctx.grid = k;
        }
        None => {
            put(out, 1u64);
            out.extend_from_slice(&step.to_le_bytes());
        }
    }
}

/// Serialize a block in layout `format` (any layout this build reads; the older ones for
/// the tests that read them).
fn serialize_block_as(b: &Block, format: u8) -> Vec<u8> {
    assert!(
        !b.guarded() || guards_allowed(format),
        "a layout without guards"
    );
    let compact = compact_headers(format);
    let mut ctx = HeaderContext::default();
    let mut head = Vec::new();
    head.extend_from_slice(MAGIC);
    head.push(format);
    head.push(vt_tag(b.value_type));
    put(&mut head, b.segments.len() as u64);
    put(&mut head, b.times.start_ns);
    head.extend_from_slice(&b.times.step_ns.to_le_bytes());

    let mut segs = Vec::new();
    let mut specials = Vec::new();
    // The range coder's models (some 100 kB) are set up only for the layout that uses them.
    let mut coded = (!varint_codes(format)).then(CodeWriter::new);
    let mut varints = Vec::new();
    let mut raw_words: Vec<(u64, usize)> = Vec::new();
    for s in &b.segments {
        segs.push(
            s.basis.tag()
                | if s.predicted { 0x10 } else { 0 }
                | if s.warp.is_some() { 0x20 } else { 0 }
                | if s.guard.is_some() { TAG_GUARD } else { 0 }
                | if s.protect.is_some() { TAG_PROTECT } else { 0 },
        );
        if compact {
            put(&mut segs, s.len as i64 - ctx.len as i64);
            put(&mut segs, s.cycles as u64);
            let bits = |x: f32| x.to_bits() as i32 as i64;
            put(&mut segs, bits(s.ideal_len) - bits(s.len as f32));
            ctx.len = s.len;
        } else {
            put(&mut segs, s.len as u64);
            put(&mut segs, s.cycles as u64);
            segs.extend_from_slice(&s.ideal_len.to_le_bytes());
        }
        if let Some(a) = s.warp {
            segs.extend_from_slice(&a.to_le_bytes());
        }
        match s.basis {
            Basis::Fourier | Basis::Trend if compact => {
                put(&mut segs, s.order as i64 - ctx.order as i64);
                ctx.order = s.order;
                put_step(&mut segs, s.step, &mut ctx);
            }
            Basis::Samples if compact => put_step(&mut segs, s.step, &mut ctx),
            Basis::Fourier | Basis::Trend => {
                put(&mut segs, s.order as u64);
                segs.extend_from_slice(&s.step.to_le_bytes());
            }
            Basis::Samples => segs.extend_from_slice(&s.step.to_le_bytes()),
            Basis::Lossless => {}
        }
        if s.basis == Basis::Trend {
            let t = s.trend.unwrap_or(Trend {
                degree: 1,
                step: 0.0,
            });
            segs.push(t.degree);
            segs.extend_from_slice(&t.step.to_le_bytes());
        }
        if let Some(g) = &s.guard {
            segs.extend_from_slice(&g.peak.to_le_bytes());
            segs.extend_from_slice(&g.step.to_le_bytes());
            put_gaps(&mut segs, &g.at);
        }
        if let Some(p) = &s.protect {
            segs.extend_from_slice(&p.step.to_le_bytes());
            put_gaps(&mut segs, &p.bins);
        }
        put(&mut specials, s.specials.len() as u64);
        let mut last = 0u32;
        for sp in &s.specials {
            put(&mut specials, (sp.index - last) as u64);
            last = sp.index;
            match sp.kind {
                SpecialKind::Null => specials.push(0),
                SpecialKind::Nan(bits) => {
                    specials.push(1);
                    put(&mut specials, bits);
                }
                SpecialKind::PosInf => specials.push(2),
                SpecialKind::NegInf => specials.push(3),
            }
        }
        match coded.as_mut() {
            None => {
                for &c in &s.codes {
                    put(&mut varints, c);
                }
            }
            Some(coded) => {
                let mut at = 0;
                for (family, n) in code_layout(s, b.value_type).into_iter().flatten() {
                    let end = (at + n).min(s.codes.len());
                    coded.segment(family, &s.codes[at..end]);
                    at = end;
                }
                if let Some(g) = &s.guard {
                    coded.segment(Family::Correction, &g.codes);
                }
                if let Some(p) = &s.protect {
                    coded.segment(Family::Protected, &p.codes);
                }
            }
        }
        let width = if b.value_type == ValueType::F32 { 4 } else { 8 };
        raw_words.extend(s.raw.iter().map(|&w| (w, width)));
    }
    let mut times = Vec::new();
    if b.times.residuals.is_empty() {
        times.push(0);
    } else {
        let nonzero = b.times.residuals.iter().filter(|&&r| r != 0).count();
        if nonzero * 4 < b.times.residuals.len() {
            times.push(1);
            put(&mut times, nonzero as u64);
            let mut last = 0usize;
            for (i, &r) in b.times.residuals.iter().enumerate().filter(|p| *p.1 != 0) {
                put(&mut times, (i - last) as u64);
                last = i;
                put(&mut times, r);
            }
        } else {
            times.push(2);
            let mut prev = 0i64;
            for &r in &b.times.residuals {
                put(&mut times, r.wrapping_sub(prev));
                prev = r;
            }
        }
    }
    // Raw words byte plane by byte plane (most significant first), which lets zstd find the
    // repeated sign/exponent bytes of slowly varying values.
    let width = if b.value_type == ValueType::F32 { 4 } else { 8 };
    let mut raw = Vec::with_capacity(raw_words.len() * width);
    for plane in (0..width).rev() {
        raw.extend(raw_words.iter().map(|&(w, _)| (w >> (8 * plane)) as u8));
    }

    let codes = match coded {
        None => varints,
        Some(coded) => coded.finish(),
    };
    let mut out = Vec::with_capacity(head.len() + segs.len() + codes.len() + raw.len() + 40);
    for part in [&head, &segs, &times, &specials, &codes, &raw] {
        put(&mut out, part.len() as u64);
        out.extend_from_slice(part);
    }
    out
}

/// How a segment's codes divide by what they are, in stream order: a trend segment's
/// polynomial codes come before its Fourier bins. Unused parts are `None` (an empty part
/// is not the same as none: it would still move the family's neighbour history).
pub(crate) type CodeLayout = [Option<(Family, usize)>; 2];

/// The [`CodeLayout`] of a segment.
pub(crate) fn code_layout(s: &SegmentRecord, value_type: ValueType) -> CodeLayout {
    let fourier = if s.predicted {
        Family::FourierPredicted
    } else {
        Family::Fourier
    };
    let bins = code_count(s.order as usize, s.len);
    match s.basis {
        Basis::Fourier => [Some((fourier, bins)), None],
        Basis::Trend => {
            let degree = s.trend.map_or(0, |t| t.degree as usize);
            [Some((Family::Trend, degree)), Some((fourier, bins))]
        }
        Basis::Samples => [Some((Family::Samples, s.len)), None],
        Basis::Lossless if value_type.is_integer() => {
            [Some((Family::Integer, s.len - s.specials.len())), None]
        }
        Basis::Lossless => [None, None],
    }
}

/// Compress a serialized block into a zstd frame with its content checksum.
pub fn compress(bytes: &[u8], level: i32) -> std::io::Result<Vec<u8>> {
    let mut c = zstd::bulk::Compressor::new(level)?;
    c.set_parameter(zstd::zstd_safe::CParameter::ChecksumFlag(true))?;
    c.compress(bytes)
}

/// Blocks whose range-coded frame is smaller than this (bytes) are also tried with varint
/// codes ([`BLOCK_FORMAT_VARINT`]), and the smaller frame is kept: where codes are few or
/// nearly all zero, zstd's matches over the varints can beat the range coder, which spends a
/// few dozen bits per context learning what a long run of zeros has to say.
pub const VARINT_TRIAL_BYTES: usize = 4096;

/// Serialized blocks at least this long (bytes) are first compressed at level 1, and kept so
/// when that saves less than [`PROBE_MIN_SAVING`]: a block of range-coded codes (broadband
/// vibration) is as good as incompressible, and zstd's slow levels spend a sixth of the
/// encoder's time finding that out; blocks that level 1 shrinks get the level asked for.
pub const PROBE_BYTES: usize = 4096;

/// The share of its bytes that level 1 must save for a block to be compressed at the level
/// asked for ([`PROBE_BYTES`]).
pub const PROBE_MIN_SAVING: f64 = 0.03;

/// [`compress`] at `level`, or at level 1 where that already shows the bytes are nearly
/// incompressible ([`PROBE_BYTES`]).
fn compress_frame(bytes: &[u8], level: i32) -> std::io::Result<Vec<u8>> {
    if level > 1 && bytes.len() >= PROBE_BYTES {
        let fast = compress(bytes, 1)?;
        if fast.len() as f64 > (1.0 - PROBE_MIN_SAVING) * bytes.len() as f64 {
            return Ok(fast);
        }
    }
    compress(bytes, level)
}

/// Encode a block to a compressed frame.
pub fn encode_block(b: &Block, level: i32) -> std::io::Result<Vec<u8>> {
    let frame = compress_frame(&serialize_block(b), level)?;
    // Varint codes have no room for the guards' and protected bins' codes.
    if frame.len() >= VARINT_TRIAL_BYTES || b.guarded() {
        return Ok(frame);
    }
    let varint = compress_frame(&serialize_block_as(b, BLOCK_FORMAT_COMPACT_VARINT), level)?;
    Ok(if varint.len() < frame.len() {
        varint
    } else {
        frame
    })
}

/// CRC-32 (IEEE) of a compressed frame, as stored in the archive.
pub fn checksum(frame: &[u8]) -> u32 {
    crc32fast::hash(frame)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::codec::parse::{decode_block, parse_block};

    fn sample_block() -> Block {
        Block {
            value_type: ValueType::F32,
            segments: vec![
                SegmentRecord {
                    len: 5,
                    ideal_len: 5.0,
                    cycles: 0,
                    basis: Basis::Lossless,
                    order: 0,
                    step: 0.0,
                    predicted: false,
                    codes: vec![],
                    raw: vec![1.5f32.to_bits() as u64, 2, 3, 4],
                    specials: vec![Special {
                        index: 2,
                        kind: SpecialKind::Nan(0x7fc0_0001),
                    }],
                    trend: None,
                    warp: None,
                    guard: None,
                    protect: None,
                },
                SegmentRecord {
                    len: 8,
                    ideal_len: 7.75,
                    cycles: 2,
                    basis: Basis::Fourier,
                    order: 3,
                    step: 0.25,
                    predicted: true,
                    codes: vec![1, -2, 3, 0, -70000],
                    raw: vec![],
                    specials: vec![],
                    trend: None,
                    warp: Some(-0.003),
                    guard: None,
                    protect: None,
                },
                SegmentRecord {
                    len: 6,
                    ideal_len: 6.0,
                    cycles: 1,
                    basis: Basis::Trend,
                    order: 2,
                    // Off the step grid: a compact header escapes it.
                    step: 0.3,
                    predicted: false,
                    codes: vec![40, -3, 7, 1, -1],
                    raw: vec![],
                    specials: vec![],
                    trend: Some(Trend {
                        degree: 2,
                        step: 0.125,
                    }),
                    warp: None,
                    guard: None,
                    protect: None,
                },
            ],
            times: BlockTimes::from_times(&[
                0, 10, 20, 31, 40, 50, 60, 70, 80, 90, 100, 110, 120, 130, 140, 150, 160, 170, 180,
            ]),
        }
    }

    #[test]
    fn block_round_trips() {
        let b = sample_block();
        let frame = encode_block(&b, 3).unwrap();
        assert_eq!(decode_block(&frame).unwrap(), b);
        for i in 0..13 {
            let expect = [0, 10, 20, 31, 40, 50, 60, 70, 80, 90, 100, 110, 120][i];
            assert_eq!(b.times.time(i), expect);
        }
    }

    fn guarded_block() -> Block {
        let mut b = sample_block();
        b.segments[2].guard = Some(Guard {
            peak: 0.25,
            step: 0.5,
            at: vec![0, 4],
            codes: vec![-3, 9],
        });
        b.segments[1].protect = Some(Protected {
            step: 0.125,
            bins: vec![1, 4],
            codes: vec![5, -6, 0, 7],
        });
        b
    }

    #[test]
    fn blocks_round_trip_in_every_layout_this_build_reads() {
        // The header's length (one byte here), the magic, then the layout number.
        assert_eq!(serialize_block(&guarded_block())[3], BLOCK_FORMAT_COMPACT);
        assert_eq!(serialize_block(&sample_block())[3], BLOCK_FORMAT_COMPACT);
        for format in [
            BLOCK_FORMAT_VARINT,
            BLOCK_FORMAT,
            BLOCK_FORMAT_GUARDED,
            BLOCK_FORMAT_COMPACT,
            BLOCK_FORMAT_COMPACT_VARINT,
        ] {
            let b = sample_block();
            let bytes = serialize_block_as(&b, format);
            assert_eq!(bytes[3], format);
            assert_eq!(parse_block(&bytes).unwrap(), b, "layout {format}");
            if guards_allowed(format) {
                let g = guarded_block();
                assert_eq!(parse_block(&serialize_block_as(&g, format)).unwrap(), g);
            }
        }
        let g = guarded_block();
        assert_eq!(decode_block(&encode_block(&g, 3).unwrap()).unwrap(), g);
    }

    #[test]
    fn compact_headers_refuse_guards_in_the_varint_layout() {
        let mut bytes = serialize_block_as(&guarded_block(), BLOCK_FORMAT_COMPACT);
        bytes[3] = BLOCK_FORMAT_COMPACT_VARINT;
        assert!(parse_block(&bytes).is_err());
    }

    #[test]
    fn every_truncation_of_a_block_is_an_error_not_a_panic() {
        for b in [sample_block(), guarded_block()] {
            let bytes = serialize_block(&b);
            for cut in 0..bytes.len() {
                assert!(parse_block(&bytes[..cut]).is_err());
            }
        }
    }

    /// [`sample_block`] with a lossless segment of `n` f32 words from `word`.
    fn block_with_raw(n: usize, word: impl Fn(usize) -> u64) -> Block {
        let mut b = sample_block();
        b.segments[0].len = n + 1;
        b.segments[0].raw = (0..n).map(word).collect();
        let times: Vec<i64> = (0..b.segments.iter().map(|s| s.len).sum::<usize>() as i64)
            .map(|i| 10 * i)
            .collect();
        b.times = BlockTimes::from_times(&times);
        b
    }

    #[test]
    fn incompressible_and_compressible_blocks_round_trip_through_the_level_probe() {
        // SplitMix64 (Steele, Lea and Flood, OOPSLA 2014) words: as incompressible as
        // range-coded codes.
        let mix = |i: usize| {
            let mut z = (i as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15);
            z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
            (z ^ (z >> 31)) & 0xffff_ffff
        };
        let noisy = block_with_raw(4096, mix);
        let bytes = serialize_block(&noisy);
        assert!(bytes.len() >= PROBE_BYTES);
        let frame = encode_block(&noisy, 19).unwrap();
        assert_eq!(frame, compress(&bytes, 1).unwrap());
        assert_eq!(decode_block(&frame).unwrap(), noisy);
        // Words from a short cycle: level 1 saves far more than 3 %, so level 19 is used
        // (and the varint layout too, when that frame is smaller still).
        let cyclic = block_with_raw(4096, |i| mix(i % 16));
        let bytes = serialize_block(&cyclic);
        let frame = encode_block(&cyclic, 19).unwrap();
        assert!(frame.len() <= compress(&bytes, 19).unwrap().len());
        assert!(frame.len() < compress(&bytes, 1).unwrap().len());
        assert_eq!(decode_block(&frame).unwrap(), cyclic);
    }

    #[test]
    fn flipped_frame_bytes_are_detected() {
        let frame = encode_block(&sample_block(), 3).unwrap();
        let crc = checksum(&frame);
        for i in 0..frame.len() {
            let mut f = frame.clone();
            f[i] ^= 0x40;
            assert_ne!(checksum(&f), crc);
            // Decoding may fail or not, but must not panic.
            let _ = decode_block(&f);
        }
    }
}
