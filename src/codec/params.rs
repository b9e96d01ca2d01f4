//! The codec's parameters: budgets and their resolution per segment, segmentation, block
//! sizes and the zstd level. Filled once from the options; the codec reads nothing else.

use serde::{Deserialize, Serialize};

use crate::codec::bands::Protection;
use crate::codec::segment::{
    FundamentalSetting, SegmentSettings, DEFAULT_FALLBACK_SEGMENT_SECONDS, DEFAULT_MIN_CONFIDENCE,
    DEFAULT_MIN_SEGMENT_SECONDS,
};

/// Default zstd level for blocks.
pub const DEFAULT_ZSTD_LEVEL: i32 = 19;

/// Default most segments per block.
pub const DEFAULT_BLOCK_SEGMENTS: usize = 256;

/// Default most samples per block (measured on 10⁷ samples of clean motor current at 0.5 %:
/// 2¹⁸ 9.4 kB, 2¹⁹ 7.0 kB, 2²⁰ 5.5 kB; peak memory 141, 160, 204 MB).
pub const DEFAULT_BLOCK_SAMPLES: usize = 1 << 19;

/// Fewest samples per block a setting may ask for.
pub const MIN_BLOCK_SAMPLES: usize = 1 << 12;

/// Most samples per block a setting may ask for (the largest segment fits in one).
pub const MAX_BLOCK_SAMPLES: usize = 1 << 24;

/// Default relative budget when none is given: 0.5 % of each segment's RMS.
pub const DEFAULT_BUDGET_REL: f64 = 0.005;

/// A resolved budget rule.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub enum Budget {
    /// ε = value (channel units).
    Absolute(f64),
    /// ε = max(fraction · segment RMS, floor).
    Relative {
        /// Fraction of the segment RMS.
        fraction: f64,
        /// Absolute floor.
        floor: f64,
    },
}

/// The largest budget an archive can record (budgets are stored as f32, rounded down).
pub const MAX_BUDGET: f64 = f32::MAX as f64;

/// The smallest positive budget an archive can record (the least positive f32); a positive
/// budget below it would be stored as 0, which means lossless.
pub const MIN_POSITIVE_BUDGET: f64 = f32::from_bits(1) as f64;

impl Budget {
    /// The budget of a segment with the given RMS, rounded down to f32. `Err` carries a
    /// resolved budget above [`MAX_BUDGET`] (a relative budget on values beyond f32's range),
    /// which no archive row can hold. A resolved budget below the least positive f32 is
    /// stored as 0: that segment is coded losslessly.
    pub fn resolve(&self, segment_rms: f64) -> std::result::Result<f64, f64> {
        let b = match *self {
            Budget::Absolute(b) => b,
            Budget::Relative { fraction, floor } => (fraction * segment_rms).max(floor),
        };
        if b > MAX_BUDGET {
            return Err(b);
        }
        Ok(crate::codec::quant::budget_to_f32(if b.is_finite() {
            b
        } else {
            0.0
        }))
    }
}

/// The value of the first rule whose glob pattern matches the channel's name.
pub fn first_match<'a, T>(rules: &'a [(String, T)], channel: &str) -> Option<&'a T> {
    rules
        .iter()
        .find(|(p, _)| glob::Pattern::new(p).is_ok_and(|p| p.matches(channel)))
        .map(|(_, v)| v)
}

/// What the codec needs to encode a channel.
#[derive(Debug, Clone, PartialEq)]
pub struct CodecParams {
    /// Default budget.
    pub budget: Budget,
    /// Per-channel rules (pattern, budget), first match wins.
    pub budget_rules: Vec<(String, Budget)>,
    /// Fundamental.
    pub fundamental: FundamentalSetting,
    /// Cycles per segment.
    pub cycles_per_segment: Option<u32>,
    /// zstd level.
    pub zstd_level: i32,
    /// Most segments per block.
    pub block_segments: usize,
    /// Most samples per block.
    pub block_samples: usize,
    /// Default peak limit ([`crate::codec::guard`]; channel units), or none.
    pub peak_max: Option<f64>,
    /// Per-channel peak limits (pattern, limit), first match wins.
    pub peak_rules: Vec<(String, f64)>,
    /// Protected bands of every channel ([`crate::codec::bands`]), or none.
    pub protection: Option<Protection>,
    /// Per-channel protected bands (pattern, bands), first match wins over `protection`.
    pub protection_rules: Vec<(String, Protection)>,
    /// Event capture ([`crate::codec::events`]) on every channel.
    pub events: bool,
}

impl CodecParams {
    /// The budget for a channel: the first matching rule, else the default.
    pub fn budget_for(&self, channel: &str) -> Budget {
        first_match(&self.budget_rules, channel).map_or(self.budget, |b| *b)
    }

    /// The peak limit for a channel: the first matching rule, else the default.
    pub fn peak_for(&self, channel: &str) -> Option<f64> {
        first_match(&self.peak_rules, channel).map_or(self.peak_max, |x| Some(*x))
    }

    /// The protected bands of a channel: the first matching rule, else the default.
    pub fn protection_for(&self, channel: &str) -> Option<&Protection> {
        first_match(&self.protection_rules, channel).or(self.protection.as_ref())
    }

    /// Segmentation settings for a sample rate.
    pub fn segment_settings(&self, sample_rate: f64) -> SegmentSettings {
        SegmentSettings {
            sample_rate,
            fundamental: self.fundamental,
            cycles_per_segment: self.cycles_per_segment,
            min_segment_seconds: DEFAULT_MIN_SEGMENT_SECONDS,
            fallback_segment_seconds: DEFAULT_FALLBACK_SEGMENT_SECONDS,
            min_confidence: DEFAULT_MIN_CONFIDENCE,
        }
    }
}
