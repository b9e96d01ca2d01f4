//! Decode: rebuild the samples and timestamps of a block from its unpacked segments —
//! prediction, dequantization and inverse FFT for Fourier segments, dequantization for
//! time-domain samples, bit patterns for lossless ones — and put the NaN, ±Inf and null
//! values back where they were.
//!
//! The encoder calls the same functions ([`synthesize`], [`crate::signal::predict`]), so the
//! error it records is the error of this output.
//!
//! Does not: compare with sources (that is `jobs::verify`) or read files (that is `archive`).

use crate::codec::frame::{Block, FrameError, SegmentRecord};
use crate::codec::quant::{dequantize_bin, undelta_codes};
use crate::codec::warp::synthesize_warped;
use crate::model::{Basis, Special, SpecialKind, ValueType};
use crate::signal::{half_len, is_real_bin, predict, Transform, C64};

/// What a segment's prediction is based on: the previous Fourier segment of the same block.
#[derive(Debug, Clone)]
pub struct Prev {
    /// Reconstructed coefficients of bins 0 … L−1.
    pub coeffs: Vec<C64>,
    /// Its length in samples.
    pub n: usize,
    /// Its ideal length Λ = K·P (as stored, f32 precision).
    pub ideal: f64,
}

/// Synthesize a Fourier segment as the decoder does: inverse transform of the kept bins, then
/// rounding to the output type. Returns (unrounded, rounded).
pub fn synthesize(
    coeffs: &[C64],
    n: usize,
    value_type: ValueType,
    fft: &dyn Transform,
) -> (Vec<f64>, Vec<f64>) {
    let mut full = vec![C64::new(0.0, 0.0); half_len(n)];
    full[..coeffs.len().min(half_len(n))].copy_from_slice(&coeffs[..coeffs.len().min(half_len(n))]);
    let y = fft.inverse(&full, n);
    let out = y.iter().map(|&v| value_type.round(v)).collect();
    (y, out)
}

/// Synthesize a Fourier-plus-trend segment: the inverse transform of the kept bins plus the
/// polynomial `shape` ([`trend_shape`]), then rounding to the output type. Returns
/// (unrounded, rounded).
pub fn synthesize_trend(
    coeffs: &[C64],
    shape: &[f64],
    value_type: ValueType,
    fft: &dyn Transform,
) -> (Vec<f64>, Vec<f64>) {
    let n = shape.len();
    let (mut y, _) = synthesize(coeffs, n, ValueType::F64, fft);
    for (v, s) in y.iter_mut().zip(shape) {
        *v += s;
    }
    let out = y.iter().map(|&v| value_type.round(v)).collect();
    (y, out)
}

/// The orthonormal discrete polynomials on samples m = 0 … n−1 (the discrete Chebyshev, or
/// Gram, polynomials): with t = m − (n−1)/2,
/// p₁ = t and p₂ = t² − (n²−1)/12, whose squares sum to n(n²−1)/12 and
/// n(n²−1)(n²−4)/180; each is divided by the square root of its sum. Both are orthogonal to
/// a constant and to each other. `None` when `n` is too short for the degree.
pub fn trend_basis(n: usize, degree: usize) -> Option<Vec<Vec<f64>>> {
    if n < degree + 1 || !(1..=2).contains(&degree) {
        return None;
    }
    let nf = n as f64;
    let c = (nf - 1.0) / 2.0;
    let s1 = (nf * (nf * nf - 1.0) / 12.0).sqrt();
    let mut out = vec![(0..n).map(|m| (m as f64 - c) / s1).collect::<Vec<f64>>()];
    if degree == 2 {
        let s2 = (nf * (nf * nf - 1.0) * (nf * nf - 4.0) / 180.0).sqrt();
        let k = (nf * nf - 1.0) / 12.0;
        out.push(
            (0..n)
                .map(|m| {
                    let t = m as f64 - c;
                    (t * t - k) / s2
                })
                .collect(),
        );
    }
    Some(out)
}

/// The polynomial part of a trend segment: Σ_j codes_j·step·u_j with u_j from
/// [`trend_basis`]. `None` when the segment is too short for the degree.
pub fn trend_shape(codes: &[i64], step: f64, n: usize) -> Option<Vec<f64>> {
    let basis = trend_basis(n, codes.len())?;
    let mut out = vec![0.0; n];
    for (&q, u) in codes.iter().zip(&basis) {
        let b = q as f64 * step;
        for (o, &v) in out.iter_mut().zip(u) {
            *o += b * v;
        }
    }
    Some(out)
}

/// One rebuilt segment.
#[derive(Debug, Clone, PartialEq)]
pub struct DecodedSegment {
    /// Output values in the channel's type (as f64); non-finite positions hold NaN.
    pub values: Vec<f64>,
    /// Null, NaN (with bits) and ±Inf values by index.
    pub specials: Vec<Special>,
    /// Reconstructed coefficients (Fourier only), bins 0 … L−1.
    pub coeffs: Vec<C64>,
    /// The peak error the segment claims ([`crate::codec::guard`]), if guarded.
    pub peak: Option<f32>,
    /// The segment's protected bins ([`crate::codec::bands`]), if any.
    pub protected: Option<Vec<u32>>,
}

impl DecodedSegment {
    /// Whether sample i is null.
    pub fn is_null(&self, i: usize) -> bool {
        self.specials
            .binary_search_by_key(&(i as u32), |s| s.index)
            .is_ok_and(|p| self.specials[p].kind == SpecialKind::Null)
    }
}

/// Rebuild every segment of a block, in order.
pub fn rebuild_block(
    block: &Block,
    fft: &dyn Transform,
) -> Result<Vec<DecodedSegment>, FrameError> {
    let mut prev: Option<Prev> = None;
    let mut out = Vec::with_capacity(block.segments.len());
    for (j, seg) in block.segments.iter().enumerate() {
        let raw = segment_raw(seg, prev.as_ref(), block.value_type, fft)
            .map_err(|what| FrameError::Segment { index: j, what })?;
        prev = matches!(seg.basis, Basis::Fourier | Basis::Trend).then(|| Prev {
            coeffs: raw.coeffs.clone(),
            n: seg.len,
            ideal: seg.ideal_len as f64,
        });
        let values = finish_segment(&raw, seg, block.value_type);
        out.push(DecodedSegment {
            values,
            specials: seg.specials.clone(),
            coeffs: raw.coeffs,
            peak: seg.guard.as_ref().map(|g| g.peak),
            protected: seg.protect.as_ref().map(|p| p.bins.clone()),
        });
    }
    Ok(out)
}

/// A segment's output before rounding: what the decoder synthesizes from the codes.
#[derive(Debug, Clone)]
pub struct RawSegment {
    /// Unrounded values (lossless: the exact values; NaN at non-finite positions).
    pub values: Vec<f64>,
    /// Whether `values` are exact (lossless) and are not rounded again.
    pub exact: bool,
    /// Reconstructed coefficients of bins 0 … L−1 (Fourier bases).
    pub coeffs: Vec<C64>,
}

/// The decoder's unrounded output of one segment (`prev`: the previous Fourier segment of
/// the block, for predicted segments). The encoder calls it to see what the decoder will see.
pub fn segment_raw(
    seg: &SegmentRecord,
    prev: Option<&Prev>,
    value_type: ValueType,
    fft: &dyn Transform,
) -> Result<RawSegment, &'static str> {
    let lossy = |values, coeffs| RawSegment {
        values,
        exact: false,
        coeffs,
    };
    Ok(match seg.basis {
        Basis::Fourier => {
            let coeffs = fourier_coeffs(seg, &seg.codes, prev)?;
            let (y, _) = match seg.warp {
                Some(a) => synthesize_warped(&coeffs, seg.len, a as f64, ValueType::F64),
                None => synthesize(&coeffs, seg.len, ValueType::F64, fft),
            };
            lossy(y, coeffs)
        }
        Basis::Trend => {
            let t = seg.trend.ok_or("trend segment without its trend")?;
            let d = (t.degree as usize).min(seg.codes.len());
            let (tc, fc) = seg.codes.split_at(d);
            let coeffs = fourier_coeffs(seg, fc, prev)?;
            let shape = trend_shape(tc, t.step as f64, seg.len)
                .ok_or("trend on a segment too short for its degree")?;
            let (y, _) = synthesize_trend(&coeffs, &shape, ValueType::F64, fft);
            lossy(y, coeffs)
        }
        Basis::Samples => {
            let q = if seg.predicted {
                undelta_codes(&seg.codes)
            } else {
                seg.codes.clone()
            };
            let s = seg.step as f64;
            lossy(q.iter().map(|&c| c as f64 * s).collect(), Vec::new())
        }
        Basis::Lossless => RawSegment {
            values: lossless_values(seg, value_type),
            exact: true,
            coeffs: Vec::new(),
        },
    })
}

/// A segment's output from its unrounded values: protected bins' refinements added
/// ([`crate::codec::bands`]), rounding to the output type, the peak guard's corrections
/// ([`crate::codec::guard`]), then the special values in their places.
pub fn finish_segment(raw: &RawSegment, seg: &SegmentRecord, value_type: ValueType) -> Vec<f64> {
    let mut values = raw.values.clone();
    if let Some(p) = &seg.protect {
        crate::codec::bands::add_refinement(&mut values, p);
    }
    if !raw.exact {
        for v in values.iter_mut() {
            *v = value_type.round(*v);
        }
    }
    if let Some(g) = &seg.guard {
        crate::codec::guard::apply(&mut values, g, value_type);
    }
    for sp in &seg.specials {
        if let Some(v) = values.get_mut(sp.index as usize) {
            *v = special_value(sp.kind, value_type);
        }
    }
    values
}

/// The f64 stand-in for a special value (NaN for null and NaN, exact bits for f64 NaN).
pub fn special_value(kind: SpecialKind, value_type: ValueType) -> f64 {
    match kind {
        SpecialKind::Null => f64::NAN,
        SpecialKind::Nan(bits) => match value_type {
            ValueType::F32 => f32::from_bits(bits as u32) as f64,
            _ => f64::from_bits(bits),
        },
        SpecialKind::PosInf => f64::INFINITY,
        SpecialKind::NegInf => f64::NEG_INFINITY,
    }
}

/// Reconstruct the kept Fourier coefficients of a segment from its Fourier codes and
/// prediction.
pub fn fourier_coeffs(
    seg: &SegmentRecord,
    codes: &[i64],
    prev: Option<&Prev>,
) -> Result<Vec<C64>, &'static str> {
    let n = seg.len;
    let l = seg.order as usize;
    let pred = match (seg.predicted, prev) {
        (true, Some(p)) => predict(&p.coeffs, p.n, p.ideal, n, l),
        (true, None) => return Err("predicted segment without a previous Fourier segment"),
        (false, _) => vec![C64::new(0.0, 0.0); l],
    };
    let step = seg.step as f64;
    let mut codes = codes.iter();
    let mut out = Vec::with_capacity(l);
    for (k, &p) in pred.iter().enumerate() {
        let qr = *codes.next().ok_or("too few codes")?;
        let qi = if is_real_bin(k, n) {
            0
        } else {
            *codes.next().ok_or("too few codes")?
        };
        out.push(dequantize_bin(p, qr, qi, step, k, n));
    }
    Ok(out)
}

fn lossless_values(seg: &SegmentRecord, value_type: ValueType) -> Vec<f64> {
    let mut out = vec![f64::NAN; seg.len];
    let mut sp = seg.specials.iter().peekable();
    let ints = if value_type.is_integer() {
        if seg.predicted {
            undelta_codes(&seg.codes)
        } else {
            seg.codes.clone()
        }
    } else {
        Vec::new()
    };
    let mut next = 0usize;
    for (i, slot) in out.iter_mut().enumerate() {
        if sp.peek().is_some_and(|s| s.index as usize == i) {
            sp.next();
            continue;
        }
        *slot = match value_type {
            ValueType::F64 => seg.raw.get(next).map_or(f64::NAN, |&b| f64::from_bits(b)),
            ValueType::F32 => seg
                .raw
                .get(next)
                .map_or(f64::NAN, |&b| f32::from_bits(b as u32) as f64),
            ValueType::I16 | ValueType::I32 => ints.get(next).map_or(f64::NAN, |&v| v as f64),
        };
        next += 1;
    }
    out
}
