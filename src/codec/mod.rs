//! The codec: samples of one channel run in, coded blocks out, and back. It plans whole-cycle
//! segments, fits each one (exact error of every order by Parseval, quantizer step, least
//! order, basis), packs segments into zstd frames, and rebuilds samples from frames.
//!
//! Never names Parquet, paths or columns: files are the `source` and `archive` layers' work.

pub mod bands;
pub mod decode;
pub mod encode;
pub mod entropy;
pub mod estimate;
pub mod events;
pub mod fit;
pub mod frame;
pub mod guard;
pub mod params;
pub mod parse;
pub mod quant;
pub mod search;
pub mod segment;
pub mod warp;

pub use decode::{rebuild_block, synthesize, DecodedSegment, Prev};
pub use encode::{encode_run, CodecError, EncodedBlock, RunEncoding, RunParams, SegmentSummary};
pub use fit::{fit_segment, FitPlan};
pub use frame::{encode_block, Block, FrameError};
pub use params::{Budget, CodecParams};
pub use parse::{decode_block, parse_block};
pub use segment::{plan_segments, SegmentPlan};
