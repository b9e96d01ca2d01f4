//! Peak guard: besides the RMS budget, no output sample may differ from its source value by
//! more than a limit X (channel units). The fitted segment is kept, and every sample whose
//! error exceeds the limit gets a sparse time-domain correction: an integer multiple of a
//! correction step `q` added to the decoder's output, then rounded to the channel's type.
//!
//! The limit is held with the same floating-point margin the RMS bound uses
//! ([`crate::codec::fit::FP_MARGIN_REL`]): a segment synthesized through an FFT may come out a
//! few ulps different on another machine, so the corrections aim at `X − margin`, where the
//! margin is `FP_MARGIN_REL · max|y|` for float outputs and one count for integer outputs
//! (whose rounding may flip). The segment records the largest error after corrections plus
//! that margin, rounded up to f32: the peak it claims, which `verify` checks.
//!
//! A correction never increases a sample's error (`|e − round(e/q)·q| ≤ min(|e|, q/2)`), so
//! the segment's RMS error can only fall. When no step can meet the limit (an integer channel
//! asked for less than its margin), [`guard_segment`] says so and the caller stores the
//! segment losslessly.
//!
//! Does not: choose the basis (that is `fit`), or produce bytes (that is `frame`).

use crate::codec::fit::FP_MARGIN_REL;
use crate::codec::quant::error_to_f32;
use crate::model::ValueType;

/// The corrections of one segment and the peak error it claims.
#[derive(Debug, Clone, PartialEq)]
pub struct Guard {
    /// Largest absolute error of the corrected output (with the margin), rounded up: what
    /// the archive claims for the segment.
    pub peak: f32,
    /// Correction step (channel units), exactly as stored.
    pub step: f32,
    /// Indices of the corrected samples, increasing.
    pub at: Vec<u32>,
    /// Each corrected sample's multiple of `step`.
    pub codes: Vec<i64>,
}

impl Guard {
    /// Estimated coded size of the corrections in bits, on the scale of
    /// [`crate::codec::fit::FitPlan::cost_bits`]: a varint gap per corrected sample and an
    /// Elias-gamma-like length for its code, plus the peak and the step (two f32).
    pub fn cost_bits(&self) -> f64 {
        let mut bits = 64.0;
        let mut last = 0u32;
        for (&i, &c) in self.at.iter().zip(&self.codes) {
            let gap = (i - last).max(1) as f64;
            last = i;
            bits += 8.0 * (gap.log2() / 7.0).floor() + 8.0;
            bits += 1.0 + 2.0 * (c.unsigned_abs() as f64).log2().max(0.0);
        }
        bits
    }
}

/// Relative room left under the limit for the claimed peak's rounding up to f32 (f32 spacing
/// is 2⁻²³ relative).
const CLAIM_ROOM: f64 = 1e-6;

/// How many times the correction step is halved when rounding to the output type pushes a
/// corrected sample past the limit.
const MAX_HALVINGS: usize = 8;

/// The margin the guard keeps for output that may differ in the last bits between machines
/// (see the module docs): `synthesized` is whether the output went through an FFT or a warp
/// (time-domain samples and lossless values are exact IEEE arithmetic everywhere).
pub fn margin(output: &[f64], value_type: ValueType, synthesized: bool) -> f64 {
    if !synthesized {
        return 0.0;
    }
    if value_type.is_integer() {
        return 1.0;
    }
    let peak = output
        .iter()
        .filter(|v| v.is_finite())
        .fold(0.0f64, |a, v| a.max(v.abs()));
    FP_MARGIN_REL * peak + f64::MIN_POSITIVE
}

/// The value the decoder outputs for a corrected sample.
#[inline]
pub fn corrected(y: f64, code: i64, step: f32, value_type: ValueType) -> f64 {
    value_type.round(y + code as f64 * step as f64)
}

/// Corrections that hold `output` within `limit` of `source` over its finite values, and the
/// peak they claim; `None` when no step can (the caller codes the segment losslessly).
/// `output` is the decoder's output of the fitted segment.
pub fn guard_segment(
    source: &[f64],
    output: &[f64],
    value_type: ValueType,
    limit: f64,
    margin: f64,
) -> Option<Guard> {
    // A little under the limit, so that the claim, rounded up to f32, still fits under it
    // (integer errors and margins are whole counts, exact in f32).
    let room = if value_type.is_integer() {
        0.0
    } else {
        CLAIM_ROOM
    };
    let aim = limit * (1.0 - room) - margin;
    if !(aim >= 0.0) || !limit.is_finite() {
        return None;
    }
    // The widest step whose rounding leaves at most `aim`: 2·aim (whole counts on integer
    // channels, at least one).
    let mut step = if value_type.is_integer() {
        (2.0 * aim).floor().max(1.0) as f32
    } else {
        short_down(crate::codec::quant::budget_to_f32(2.0 * aim) as f32)
    };
    for _ in 0..=MAX_HALVINGS {
        if !(step > 0.0) {
            return None;
        }
        if let Some(g) = try_step(source, output, value_type, aim, margin, step, limit) {
            return Some(g);
        }
        if value_type.is_integer() && step <= 1.0 {
            return None;
        }
        step = if value_type.is_integer() {
            (step / 2.0).floor().max(1.0)
        } else {
            step / 2.0
        };
    }
    None
}

/// Low mantissa bits cleared from the stored step and peak: 8 significant bits are plenty for
/// either, and the segments of a channel then repeat the same few bytes, which zstd removes
/// (measured: full f32 peaks cost the guard some 2 B per segment on clean current).
const SHORT_MASK: u32 = 0xffff;

/// `v` (positive) rounded down to 8 significant bits.
pub(crate) fn short_down(v: f32) -> f32 {
    f32::from_bits(v.to_bits() & !SHORT_MASK)
}

/// `v` (positive, finite) rounded up to 8 significant bits.
fn short_up(v: f32) -> f32 {
    crate::codec::quant::round_up_bits(v, 8)
}

fn try_step(
    source: &[f64],
    output: &[f64],
    value_type: ValueType,
    aim: f64,
    margin: f64,
    step: f32,
    limit: f64,
) -> Option<Guard> {
    let (mut at, mut codes) = (Vec::new(), Vec::new());
    let mut worst = 0.0f64;
    for (i, (&x, &y)) in source.iter().zip(output).enumerate() {
        if !x.is_finite() {
            continue;
        }
        let e = y - x;
        if e.abs() <= aim {
            worst = worst.max(e.abs());
            continue;
        }
        let code = (-e / step as f64).round();
        if !(code.abs() < (1u64 << 62) as f64) {
            return None;
        }
        let code = code as i64;
        let after = corrected(y, code, step, value_type) - x;
        if !(after.abs() <= aim) {
            return None;
        }
        worst = worst.max(after.abs());
        if code != 0 {
            at.push(i as u32);
            codes.push(code);
        }
    }
    let claim = error_to_f32(worst + margin);
    let short = short_up(claim);
    Some(Guard {
        peak: if short as f64 <= limit { short } else { claim },
        step,
        at,
        codes,
    })
}

/// Apply a segment's corrections to the decoder's output (before its special values).
pub fn apply(values: &mut [f64], guard: &Guard, value_type: ValueType) {
    for (&i, &c) in guard.at.iter().zip(&guard.codes) {
        if let Some(v) = values.get_mut(i as usize) {
            *v = corrected(*v, c, guard.step, value_type);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_spike_is_corrected_to_within_the_limit_and_nothing_else_is_touched() {
        let source = [0.0, 0.0, 10.0, 0.0, f64::NAN, 0.0];
        let output = [0.1, -0.2, 1.0, 0.3, 0.0, 0.0];
        let g = guard_segment(&source, &output, ValueType::F64, 0.5, 0.0).unwrap();
        assert_eq!(g.at, vec![2]);
        let mut y = output;
        apply(&mut y, &g, ValueType::F64);
        for (x, y) in source.iter().zip(&y) {
            if x.is_finite() {
                assert!((y - x).abs() <= 0.5, "{x} {y}");
            }
        }
        assert!(g.peak as f64 >= 0.3 && g.peak <= 0.5);
    }

    #[test]
    fn an_integer_channel_below_its_margin_is_refused() {
        let source = [0.0, 3.0];
        let output = [0.0, 0.0];
        assert!(guard_segment(&source, &output, ValueType::I16, 0.9, 1.0).is_none());
        let g = guard_segment(&source, &output, ValueType::I16, 1.0, 1.0).unwrap();
        assert_eq!(
            (g.at.clone(), g.codes.clone(), g.step),
            (vec![1], vec![3], 1.0)
        );
    }
}
