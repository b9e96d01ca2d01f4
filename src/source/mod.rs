//! Sources: Parquet telemetry in — columns mapped to channels, times to nanoseconds, each
//! channel gathered, sorted when needed and split into runs at holes — and decoded channels
//! back out to Parquet in the source's own layout and types.
//!
//! Does not: anything Fourier (that is the codec) or archive files (that is `archive`).

use serde::Serialize;

use crate::model::Layout;

pub mod assemble;
pub mod prefetch;
pub mod read;
pub mod writeback;

pub use assemble::{
    assemble, sort_channel, ChannelAssembler, ChannelSamples, RunEvent, StreamError,
};
pub use prefetch::{Batch, Prefetch};
pub use read::{ChannelChunk, Source};
pub use writeback::write_decoded;

/// How a source's columns map to channels, and its sample rate when the user gives one.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Mapping {
    /// Layout (None: detect).
    pub layout: Option<Layout>,
    /// Time column.
    pub time_column: String,
    /// Channel column (long layout).
    pub channel_column: String,
    /// Value column (long layout).
    pub value_column: String,
    /// Only these channels (None: all).
    pub channels: Option<Vec<String>>,
    /// Sample rate override (Hz); None: from the median step.
    pub sample_rate_hz: Option<f64>,
    /// Only rows whose time is in `[from, to)` (ns since the epoch); None: every row. A
    /// shard of a plan cut in time reads its window this way.
    pub window: Option<(i64, i64)>,
}

impl Default for Mapping {
    fn default() -> Self {
        Mapping {
            layout: None,
            time_column: "time".into(),
            channel_column: "channel".into(),
            value_column: "value".into(),
            channels: None,
            sample_rate_hz: None,
            window: None,
        }
    }
}
