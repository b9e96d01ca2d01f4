//! The vocabulary every layer shares: value types and their output rounding, the three
//! bases of a segment, special (null, NaN, ±Inf) values, how a source lays out its columns
//! and stores time, and runs of samples. Plain data; no stage logic.

use arrow::datatypes::{DataType, TimeUnit};
use serde::{Deserialize, Serialize};

/// The value type of a channel in the source, which is also the decoder's output type.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ValueType {
    /// 64-bit float.
    F64,
    /// 32-bit float.
    F32,
    /// 16-bit signed integer (ADC counts).
    I16,
    /// 32-bit signed integer (ADC counts).
    I32,
}

impl ValueType {
    /// Round a reconstructed value to what the decoder outputs in this type (as f64).
    /// Integers round half away from zero and saturate at the type's range.
    #[inline]
    pub fn round(self, y: f64) -> f64 {
        match self {
            ValueType::F64 => y,
            ValueType::F32 => y as f32 as f64,
            ValueType::I16 => y.round().clamp(i16::MIN as f64, i16::MAX as f64),
            ValueType::I32 => y.round().clamp(i32::MIN as f64, i32::MAX as f64),
        }
    }

    /// The mean-square error that rounding to this type adds at magnitude `scale`
    /// (uniform rounding: q²/12, J. O. Smith, "Mathematics of the DFT", round-off error variance).
    pub fn rounding_mse(self, scale: f64) -> f64 {
        match self {
            ValueType::F64 => 0.0,
            ValueType::F32 => {
                let q = scale.abs() * f32::EPSILON as f64;
                q * q / 12.0
            }
            ValueType::I16 | ValueType::I32 => 1.0 / 12.0,
        }
    }

    /// Whether values are integers.
    pub fn is_integer(self) -> bool {
        matches!(self, ValueType::I16 | ValueType::I32)
    }

    /// Name used in the archive metadata and reports.
    pub fn name(self) -> &'static str {
        match self {
            ValueType::F64 => "f64",
            ValueType::F32 => "f32",
            ValueType::I16 => "i16",
            ValueType::I32 => "i32",
        }
    }
}

/// The representation of a segment in the archive.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Basis {
    /// Quantized Fourier coefficients of bins 0 … order−1.
    Fourier,
    /// Samples quantized in the time domain with a uniform step.
    Samples,
    /// Values stored bit-exact.
    Lossless,
    /// A low-order polynomial (ramp, or ramp and parabola) plus quantized Fourier
    /// coefficients of bins 0 … order−1 of what the polynomial leaves.
    #[serde(rename = "fourier_trend")]
    Trend,
}

/// The polynomial part of a [`Basis::Trend`] segment: its degree (1: ramp; 2: ramp and
/// parabola) and the quantizer step of its coefficients on the orthonormal discrete
/// polynomials (see [`crate::codec::decode::trend_shape`]).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Trend {
    /// Degree, 1 or 2.
    pub degree: u8,
    /// Quantizer step of the coefficients (stored exactly as f32).
    pub step: f32,
}

impl Basis {
    /// The name stored in the archive's `basis` column.
    pub fn name(self) -> &'static str {
        match self {
            Basis::Fourier => "fourier",
            Basis::Samples => "samples",
            Basis::Lossless => "lossless",
            Basis::Trend => "fourier_trend",
        }
    }

    /// Parse an archive `basis` value.
    pub fn from_name(s: &str) -> Option<Basis> {
        match s {
            "fourier" => Some(Basis::Fourier),
            "samples" => Some(Basis::Samples),
            "lossless" => Some(Basis::Lossless),
            "fourier_trend" => Some(Basis::Trend),
            _ => None,
        }
    }

    /// Tag byte used inside payloads.
    pub fn tag(self) -> u8 {
        match self {
            Basis::Fourier => 0,
            Basis::Samples => 1,
            Basis::Lossless => 2,
            Basis::Trend => 3,
        }
    }

    /// Inverse of [`Basis::tag`].
    pub fn from_tag(t: u8) -> Option<Basis> {
        match t {
            0 => Some(Basis::Fourier),
            1 => Some(Basis::Samples),
            2 => Some(Basis::Lossless),
            3 => Some(Basis::Trend),
            _ => None,
        }
    }
}

/// A non-finite or missing value, stored exactly.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum SpecialKind {
    /// Null (missing) value.
    Null,
    /// NaN with its bit pattern (f64 bits, or f32 bits widened, in the source's type).
    Nan(u64),
    /// +∞.
    PosInf,
    /// −∞.
    NegInf,
}

/// A special value at an index within its segment.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Special {
    /// Index within the segment.
    pub index: u32,
    /// What is there.
    pub kind: SpecialKind,
}

/// Source layout.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "lowercase")]
pub enum Layout {
    /// One row per sample: time, channel, value.
    Long,
    /// One row per time: time plus one numeric column per channel.
    Wide,
}

/// How the source stores time.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "lowercase")]
pub enum TimeType {
    /// Arrow Timestamp with a unit (`s`, `ms`, `us`, `ns`) and optional zone.
    Timestamp {
        /// Unit.
        unit: String,
        /// Time zone, if any.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        tz: Option<String>,
    },
    /// Int64 epoch nanoseconds.
    Int64Nanos,
}

impl TimeType {
    /// Nanoseconds per unit.
    pub fn nanos_per_unit(&self) -> i64 {
        match self {
            TimeType::Timestamp { unit, .. } => match unit.as_str() {
                "s" => 1_000_000_000,
                "ms" => 1_000_000,
                "us" => 1_000,
                _ => 1,
            },
            TimeType::Int64Nanos => 1,
        }
    }

    /// The Arrow type.
    pub fn data_type(&self) -> DataType {
        match self {
            TimeType::Timestamp { unit, tz } => DataType::Timestamp(
                match unit.as_str() {
                    "s" => TimeUnit::Second,
                    "ms" => TimeUnit::Millisecond,
                    "us" => TimeUnit::Microsecond,
                    _ => TimeUnit::Nanosecond,
                },
                tz.as_deref().map(Into::into),
            ),
            TimeType::Int64Nanos => DataType::Int64,
        }
    }
}

/// How the source stores channel names (long layout).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum NameType {
    /// Utf8.
    Utf8,
    /// LargeUtf8.
    LargeUtf8,
    /// Dictionary-encoded strings.
    Dictionary {
        /// Key type.
        key: DictKey,
        /// Whether the values are LargeUtf8 (else Utf8).
        large: bool,
    },
}

/// Key type of a dictionary-encoded channel column.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
#[allow(missing_docs)]
pub enum DictKey {
    Int8,
    Int16,
    Int32,
    Int64,
    UInt8,
    UInt16,
    UInt32,
    UInt64,
}

impl NameType {
    /// The Arrow type.
    pub fn data_type(self) -> DataType {
        match self {
            NameType::Utf8 => DataType::Utf8,
            NameType::LargeUtf8 => DataType::LargeUtf8,
            NameType::Dictionary { key, large } => DataType::Dictionary(
                Box::new(match key {
                    DictKey::Int8 => DataType::Int8,
                    DictKey::Int16 => DataType::Int16,
                    DictKey::Int32 => DataType::Int32,
                    DictKey::Int64 => DataType::Int64,
                    DictKey::UInt8 => DataType::UInt8,
                    DictKey::UInt16 => DataType::UInt16,
                    DictKey::UInt32 => DataType::UInt32,
                    DictKey::UInt64 => DataType::UInt64,
                }),
                Box::new(if large {
                    DataType::LargeUtf8
                } else {
                    DataType::Utf8
                }),
            ),
        }
    }
}

/// One channel of the source.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ChannelInfo {
    /// Name (column name in the wide layout).
    pub name: String,
    /// Value type.
    pub value_type: ValueType,
}

/// What the decoder needs to write the source's layout back.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SourceSchema {
    /// Layout.
    pub layout: Layout,
    /// Time column name.
    pub time_column: String,
    /// Time type.
    pub time_type: TimeType,
    /// Channel column (long).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub channel_column: Option<String>,
    /// Channel column type (long).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub name_type: Option<NameType>,
    /// Value column (long).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub value_column: Option<String>,
    /// Channels in source order (wide: column order; long: order of first appearance while
    /// reading, name order in an archive's metadata).
    pub channels: Vec<ChannelInfo>,
}

/// A run: samples without holes, in time order.
#[derive(Debug, Clone, PartialEq)]
pub struct Run {
    /// Times (ns), strictly increasing.
    pub times: Vec<i64>,
    /// Values (NaN at specials).
    pub values: Vec<f64>,
    /// (index within the run, kind), increasing.
    pub specials: Vec<(usize, SpecialKind)>,
}

/// One channel's decoded samples, in time order.
#[derive(Debug, Clone, Default)]
pub struct ChannelSeries {
    /// Name.
    pub name: String,
    /// Times (ns).
    pub times: Vec<i64>,
    /// Values (NaN at specials).
    pub values: Vec<f64>,
    /// (index, kind) of null and non-finite values.
    pub specials: Vec<(usize, SpecialKind)>,
    /// Per archive row of the channel: (row index, sample range in this series).
    pub segments: Vec<(usize, std::ops::Range<usize>)>,
    /// Per entry of `segments`: the peak error its segment claims (peak guard only).
    pub peaks: Vec<Option<f32>>,
    /// Per entry of `segments`: its protected bins, if any.
    pub protected: Vec<Option<Vec<u32>>>,
}

impl ChannelSeries {
    /// A channel's samples from stretches of it in time order (runs, or pieces of a channel
    /// from several archives), end to end; each stretch's specials are indexed within it.
    pub fn joined(name: &str, stretches: impl IntoIterator<Item = Run>) -> ChannelSeries {
        let mut out = ChannelSeries {
            name: name.to_string(),
            ..Default::default()
        };
        for r in stretches {
            let base = out.times.len();
            out.specials
                .extend(r.specials.iter().map(|&(i, k)| (i + base, k)));
            out.times.extend(r.times);
            out.values.extend(r.values);
        }
        out
    }
}
