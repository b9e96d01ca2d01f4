//! Parse: a zstd frame back into a [`Block`] — decompression with a size limit, then every
//! section read with bounds checks. Never panics on malformed input: every failure is a
//! [`FrameError`].

use integer_encoding::VarInt;

use crate::codec::entropy::{CodeReader, Family};
use crate::codec::frame::{
    code_layout, vt_from_tag, Block, BlockTimes, CodeLayout, FrameError, Guard, Protected,
    SegmentRecord, BLOCK_FORMAT, BLOCK_FORMAT_COMPACT, BLOCK_FORMAT_COMPACT_VARINT,
    BLOCK_FORMAT_GUARDED, BLOCK_FORMAT_VARINT, MAGIC, MAX_BLOCK_BYTES, TAG_GUARD, TAG_PROTECT,
};
use crate::codec::frame::{compact_headers, guards_allowed, varint_codes, HeaderContext};
use crate::codec::quant::unzigzag;
use crate::codec::search::grid_step;
use crate::codec::segment::MAX_SEGMENT_SAMPLES;
use crate::model::{Basis, Special, SpecialKind, Trend, ValueType};

/// Decompress a frame (checking zstd's content checksum) with a size limit.
pub fn decompress(frame: &[u8]) -> Result<Vec<u8>, FrameError> {
    use std::io::Read;
    let mut dec =
        zstd::stream::read::Decoder::new(frame).map_err(|e| FrameError::Zstd(e.to_string()))?;
    let mut out = Vec::new();
    (&mut dec)
        .take(MAX_BLOCK_BYTES as u64 + 1)
        .read_to_end(&mut out)
        .map_err(|e| FrameError::Zstd(e.to_string()))?;
    if out.len() > MAX_BLOCK_BYTES {
        return Err(FrameError::TooLarge);
    }
    Ok(out)
}

/// Decode a compressed frame back into a block.
pub fn decode_block(frame: &[u8]) -> Result<Block, FrameError> {
    parse_block(&decompress(frame)?)
}

struct Cursor<'a> {
    buf: &'a [u8],
    pos: usize,
    what: &'static str,
}

impl<'a> Cursor<'a> {
    fn new(buf: &'a [u8], what: &'static str) -> Self {
        Cursor { buf, pos: 0, what }
    }
    fn err(&self, what: &'static str) -> FrameError {
        FrameError::Malformed {
            section: self.what,
            at: self.pos,
            what,
        }
    }
    fn truncated(&self) -> FrameError {
        FrameError::Truncated {
            section: self.what,
            at: self.pos,
        }
    }
    fn var<V: VarInt>(&mut self) -> Result<V, FrameError> {
        let (v, n) = V::decode_var(&self.buf[self.pos.min(self.buf.len())..])
            .ok_or_else(|| self.truncated())?;
        self.pos += n;
        Ok(v)
    }
    fn byte(&mut self) -> Result<u8, FrameError> {
        let b = *self.buf.get(self.pos).ok_or_else(|| self.truncated())?;
        self.pos += 1;
        Ok(b)
    }
    fn bytes(&mut self, n: usize) -> Result<&'a [u8], FrameError> {
        let end = self.pos.checked_add(n).filter(|&e| e <= self.buf.len());
        let end = end.ok_or_else(|| self.truncated())?;
        let s = &self.buf[self.pos..end];
        self.pos = end;
        Ok(s)
    }
    fn f32(&mut self) -> Result<f32, FrameError> {
        let b = self.bytes(4)?;
        Ok(f32::from_le_bytes([b[0], b[1], b[2], b[3]]))
    }
    fn f64(&mut self) -> Result<f64, FrameError> {
        let b = self.bytes(8)?;
        let mut a = [0u8; 8];
        a.copy_from_slice(b);
        Ok(f64::from_le_bytes(a))
    }
    fn done(&self) -> Result<(), FrameError> {
        if self.pos == self.buf.len() {
            Ok(())
        } else {
            Err(self.err("trailing bytes"))
        }
    }
    /// `n` strictly increasing indices in `lowest .. end`, stored as gaps from 0 (the
    /// writer's `put_gaps`); `what` names them in errors.
    fn indices(
        &mut self,
        n: usize,
        lowest: u64,
        end: usize,
        what: &'static str,
    ) -> Result<Vec<u32>, FrameError> {
        let mut out = Vec::with_capacity(n);
        let mut at = 0u64;
        for i in 0..n {
            let d: u64 = self.var()?;
            if i > 0 && d == 0 {
                return Err(self.err(what));
            }
            at = at.checked_add(d).ok_or_else(|| self.err(what))?;
            if at < lowest || at >= end as u64 {
                return Err(self.err(what));
            }
            out.push(at as u32);
        }
        Ok(out)
    }

    /// A compact header's value: `base` plus a signed varint difference, which must land in
    /// `range`.
    fn delta(
        &mut self,
        base: i64,
        range: std::ops::RangeInclusive<i64>,
        what: &'static str,
    ) -> Result<i64, FrameError> {
        let d: i64 = self.var()?;
        base.checked_add(d)
            .filter(|v| range.contains(v))
            .ok_or_else(|| self.err(what))
    }

    fn count(&mut self, limit: usize) -> Result<usize, FrameError> {
        let v: u64 = self.var()?;
        if v as u128 > limit as u128 {
            return Err(self.err("count out of range"));
        }
        Ok(v as usize)
    }
}

/// Most integer codes a block may hold (as many as [`MAX_BLOCK_BYTES`] holds 64-bit values):
/// a damaged count cannot make the reader allocate more.
const MAX_BLOCK_CODES: usize = MAX_BLOCK_BYTES / 8;

/// Where a block's integer codes come from: varints (block layout 1) or the range-coded
/// stream (block layout 2).
enum Codes<'a> {
    Varint(Cursor<'a>),
    Range(Box<CodeReader>),
}

impl Codes<'_> {
    /// The `n` integer codes of the next segment, laid out as `layout`.
    fn read(&mut self, n: usize, layout: CodeLayout) -> Result<Vec<i64>, FrameError> {
        match self {
            Codes::Varint(cc) => {
                if n > cc.buf.len() - cc.pos.min(cc.buf.len()) {
                    return Err(cc.err("more codes than bytes"));
                }
                (0..n).map(|_| cc.var::<i64>()).collect()
            }
            Codes::Range(r) => {
                let mut out = Vec::with_capacity(n);
                for (family, count) in layout.into_iter().flatten() {
                    let part = r
                        .segment(family, count)
                        .map_err(|e| FrameError::Codes(e.to_string()))?;
                    out.extend_from_slice(&part);
                }
                Ok(out)
            }
        }
    }
}

/// A compact header's step (see [`crate::codec::frame`]'s `put_step`).
fn compact_step(sc: &mut Cursor<'_>, ctx: &mut HeaderContext) -> Result<f32, FrameError> {
    let u: u64 = sc.var()?;
    if u == 1 {
        return sc.f32();
    }
    if u & 1 == 1 {
        return Err(sc.err("unknown step escape"));
    }
    let k = (ctx.grid as i64)
        .checked_add(unzigzag(u >> 1))
        .and_then(|k| i32::try_from(k).ok())
        .ok_or_else(|| sc.err("step grid index out of range"))?;
    let step = grid_step(k).ok_or_else(|| sc.err("step grid index out of range"))?;
    ctx.grid = k;
    Ok(step)
}

/// Parse a decompressed block. Never panics on malformed input.
pub fn parse_block(bytes: &[u8]) -> Result<Block, FrameError> {
    let mut outer = Cursor::new(bytes, "block");
    let mut parts = Vec::with_capacity(6);
    for _ in 0..6 {
        let n = outer.count(bytes.len())?;
        parts.push(outer.bytes(n)?);
    }
    outer.done()?;
    let mut h = Cursor::new(parts[0], "header");
    if h.bytes(2)? != MAGIC {
        return Err(FrameError::BadMagic);
    }
    let fmt = h.byte()?;
    if ![
        BLOCK_FORMAT,
        BLOCK_FORMAT_VARINT,
        BLOCK_FORMAT_GUARDED,
        BLOCK_FORMAT_COMPACT,
        BLOCK_FORMAT_COMPACT_VARINT,
    ]
    .contains(&fmt)
    {
        return Err(FrameError::UnsupportedFormat(fmt));
    }
    let value_type = vt_from_tag(h.byte()?).ok_or_else(|| h.err("unknown value type"))?;
    let nseg = h.count(parts[1].len())?;
    let start_ns: i64 = h.var()?;
    let step_ns = h.f64()?;
    h.done()?;

    let mut sc = Cursor::new(parts[1], "segment headers");
    let mut sp = Cursor::new(parts[3], "specials");
    let compact = compact_headers(fmt);
    let mut ctx = HeaderContext::default();
    let mut codes = if varint_codes(fmt) {
        Codes::Varint(Cursor::new(parts[4], "codes"))
    } else {
        let r = CodeReader::new(parts[4]).map_err(|e| FrameError::Codes(e.to_string()))?;
        Codes::Range(Box::new(r))
    };
    let mut codes_total = 0usize;
    let width = if value_type == ValueType::F32 { 4 } else { 8 };
    let raw_bytes = parts[5];
    if raw_bytes.len() % width != 0 {
        return Err(FrameError::Inconsistent(
            "raw section length is not a whole number of values",
        ));
    }
    let raw_total = raw_bytes.len() / width;
    let mut raw_taken = 0usize;
    let mut segments = Vec::with_capacity(nseg);
    let mut total = 0usize;
    for _ in 0..nseg {
        let tag = sc.byte()?;
        let basis = Basis::from_tag(tag & 0x0f).ok_or_else(|| sc.err("unknown basis"))?;
        let predicted = tag & 0x10 != 0;
        let len = if compact {
            let max = MAX_SEGMENT_SAMPLES as i64;
            ctx.len = sc.delta(ctx.len as i64, 0..=max, "segment length out of range")? as usize;
            ctx.len
        } else {
            sc.count(MAX_SEGMENT_SAMPLES)?
        };
        if tag & (TAG_GUARD | TAG_PROTECT) != 0 && !guards_allowed(fmt) {
            return Err(sc.err("unknown segment flags"));
        }
        let cycles = sc.count(u32::MAX as usize)? as u32;
        let ideal_len = if compact {
            let bits = (len as f32).to_bits() as i32 as i64;
            let i32s = i32::MIN as i64..=i32::MAX as i64;
            f32::from_bits(sc.delta(bits, i32s, "ideal length out of range")? as i32 as u32)
        } else {
            sc.f32()?
        };
        let warp = if tag & 0x20 != 0 {
            if basis != Basis::Fourier {
                return Err(sc.err("warp on a segment that is not Fourier"));
            }
            let a = sc.f32()?;
            if !(a.abs() as f64 <= crate::codec::warp::MAX_WARP) {
                return Err(sc.err("warp out of range"));
            }
            Some(a)
        } else {
            None
        };
        let mut trend = None;
        let (order, step) = match basis {
            Basis::Fourier | Basis::Trend if compact => {
                let orders = 0..=(len / 2 + 1) as i64;
                ctx.order = sc.delta(ctx.order as i64, orders, "order out of range")? as u32;
                (ctx.order, compact_step(&mut sc, &mut ctx)?)
            }
            Basis::Samples if compact => (0, compact_step(&mut sc, &mut ctx)?),
            Basis::Fourier | Basis::Trend => (sc.count(len / 2 + 1)? as u32, sc.f32()?),
            Basis::Samples => (0, sc.f32()?),
            Basis::Lossless => (0, 0.0),
        };
        if basis == Basis::Trend {
            let degree = sc.byte()?;
            if !(1..=2).contains(&degree) {
                return Err(sc.err("trend degree not 1 or 2"));
            }
            trend = Some(Trend {
                degree,
                step: sc.f32()?,
            });
        }
        let guard = if tag & TAG_GUARD != 0 {
            if basis == Basis::Lossless {
                return Err(sc.err("peak guard on a lossless segment"));
            }
            let peak = sc.f32()?;
            let step = sc.f32()?;
            if !(peak >= 0.0 && peak.is_finite() && step > 0.0 && step.is_finite()) {
                return Err(sc.err("peak guard's peak or step out of range"));
            }
            let n = sc.count(len)?;
            let at = sc.indices(
                n,
                0,
                len,
                "corrected samples not increasing or beyond the segment",
            )?;
            Some(Guard {
                peak,
                step,
                at,
                codes: Vec::new(),
            })
        } else {
            None
        };
        let protect = if tag & TAG_PROTECT != 0 {
            if basis == Basis::Lossless {
                return Err(sc.err("protected bins on a lossless segment"));
            }
            let step = sc.f32()?;
            if !(step > 0.0 && step.is_finite()) {
                return Err(sc.err("protected bins' step out of range"));
            }
            let n = sc.count(len / 2)?;
            let bins = sc.indices(
                n,
                1,
                len / 2 + 1,
                "protected bins not increasing or beyond the spectrum",
            )?;
            Some(Protected {
                step,
                bins,
                codes: Vec::new(),
            })
        } else {
            None
        };
        let nsp = sp.count(len)?;
        let mut specials = Vec::with_capacity(nsp);
        let mut idx = 0u64;
        for i in 0..nsp {
            let d: u64 = sp.var()?;
            if i > 0 && d == 0 {
                return Err(sp.err("special indices not increasing"));
            }
            idx = idx.checked_add(d).ok_or_else(|| sp.err("index overflow"))?;
            if idx >= len as u64 {
                return Err(sp.err("special index beyond segment"));
            }
            let kind = match sp.byte()? {
                0 => SpecialKind::Null,
                1 => SpecialKind::Nan(sp.var()?),
                2 => SpecialKind::PosInf,
                3 => SpecialKind::NegInf,
                _ => return Err(sp.err("unknown special kind")),
            };
            specials.push(Special {
                index: idx as u32,
                kind,
            });
        }
        let mut rec = SegmentRecord {
            len,
            ideal_len,
            cycles,
            basis,
            order,
            step,
            predicted,
            codes: Vec::new(),
            raw: Vec::new(),
            specials,
            trend,
            warp,
            guard,
            protect,
        };
        let layout = code_layout(&rec, value_type);
        let n: usize = layout.into_iter().flatten().map(|p| p.1).sum();
        codes_total += n;
        if codes_total > MAX_BLOCK_CODES {
            return Err(FrameError::TooLarge);
        }
        rec.codes = codes.read(n, layout)?;
        if let Some(g) = rec.guard.as_mut() {
            codes_total += g.at.len();
            if codes_total > MAX_BLOCK_CODES {
                return Err(FrameError::TooLarge);
            }
            g.codes = codes.read(g.at.len(), [Some((Family::Correction, g.at.len())), None])?;
        }
        if let Some(p) = rec.protect.as_mut() {
            let n = 2 * p.bins.len();
            codes_total += n;
            if codes_total > MAX_BLOCK_CODES {
                return Err(FrameError::TooLarge);
            }
            p.codes = codes.read(n, [Some((Family::Protected, n)), None])?;
        }
        let nraw = rec.expected_raw(value_type);
        if raw_taken + nraw > raw_total {
            return Err(FrameError::Inconsistent("raw section too short"));
        }
        rec.raw = (raw_taken..raw_taken + nraw)
            .map(|i| {
                (0..width).fold(0u64, |acc, plane| {
                    let byte = raw_bytes[(width - 1 - plane) * raw_total + i] as u64;
                    acc | (byte << (8 * plane))
                })
            })
            .collect();
        raw_taken += nraw;
        total += len;
        segments.push(rec);
    }
    sc.done()?;
    sp.done()?;
    if let Codes::Varint(cc) = &codes {
        cc.done()?;
    }
    if raw_taken != raw_total {
        return Err(FrameError::Inconsistent("raw section too long"));
    }
    let mut tc = Cursor::new(parts[2], "timestamps");
    let residuals = match tc.byte()? {
        0 => Vec::new(),
        1 => {
            let nz = tc.count(total)?;
            let mut r = vec![0i64; total];
            let mut i = 0usize;
            for j in 0..nz {
                let d = tc.count(total)?;
                if j > 0 && d == 0 {
                    return Err(tc.err("indices not increasing"));
                }
                i = i
                    .checked_add(d)
                    .filter(|&i| i < total)
                    .ok_or_else(|| tc.err("index beyond block"))?;
                r[i] = tc.var()?;
            }
            r
        }
        2 => {
            if total > parts[2].len() {
                return Err(tc.err("more residuals than bytes"));
            }
            let mut prev = 0i64;
            (0..total)
                .map(|_| {
                    let d: i64 = tc.var()?;
                    prev = prev.wrapping_add(d);
                    Ok(prev)
                })
                .collect::<Result<_, FrameError>>()?
        }
        _ => return Err(tc.err("unknown timestamp mode")),
    };
    tc.done()?;
    Ok(Block {
        value_type,
        segments,
        times: BlockTimes {
            start_ns,
            step_ns,
            residuals,
        },
    })
}
