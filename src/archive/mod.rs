//! Archive: cyclarc's archive file — its schema, metadata and version rules, writing it, and
//! reading it back into channels. Never imports the jobs.
//!
//! An archive is one Parquet file (zstd, Parquet 2.0 data pages). A row holds consecutive segments of one block that
//! start less than [`schema::ROW_SPAN_NS`] (a second) after its first one:
//!
//! | column | type | meaning |
//! |---|---|---|
//! | `channel` | utf8 | channel name |
//! | `start` | timestamp(ns, UTC) | time of the row's first sample |
//! | `samples` | int32 | source rows in the row's segments |
//! | `block` | int32 | block number; a block is consecutive segments of one channel run |
//! | `error_rms` | float32 | largest recorded RMS error of the row's segments, rounded up |
//! | `budget_use` | float32 | largest error over budget of the row's segments, rounded up |
//! | `fundamental_hz` | float32, null | samples-weighted fundamental of the periodic segments |
//! | `rms` | float32 | RMS of the source, samples-weighted over the segments |
//! | `h1_amp` | float32, null | peak amplitude of the fundamental, RMS over the periodic segments |
//! | `thd` | float32, null | THD of harmonics 2–50 (IEEE 519): harmonic power over fundamental power |
//! | `event` | boolean, null | whether the row's segments are events; only with event capture |
//! | `payload` | binary, null | on the block's first row: its zstd frame, then the CRC-32 (LE) of the frame and of every column of the block's rows |
//!
//! What each segment is (samples, basis, order, cycles) is in the frame only
//! ([`series::segment_list`]). A segment's budget is the channel's rule in the metadata
//! ([`ChannelMeta::budget`]) resolved on the RMS of its source's finite values. Query columns
//! keep 16 significant bits; `error_rms` and `budget_use` 8, rounded up (an upper bound on
//! the truth that still meets the budget wherever the segment did). File metadata holds `cyclarc.format` (`MAJOR.MINOR`, now
//! [`FORMAT_VERSION`]) and `cyclarc.meta`: JSON (writer version, source name, size and
//! SHA-256, resolved settings, source schema, channels) as one zstd frame with its content
//! checksum, in base64. A reader refuses a newer major version, and format 1 (one row per
//! segment), and reads format 2 (varint codes, metadata compressed without the dictionary); a
//! newer minor version only adds columns, fields, segment bases or block layouts. Format 3:
//! integer codes range-coded ([`crate::codec::entropy`]), metadata compressed against
//! [`meta::META_DICTIONARY`]; 3.2: compact segment headers (block layouts 4 and 5,
//! [`crate::codec::frame::BLOCK_FORMAT_COMPACT`]).
//! Beside the archive, `NAME.sha256` records the SHA-256 of the whole archive file.
//!
//! Outputs are written to a temporary name in the same folder, fsynced, renamed, and the
//! folder fsynced; a failure leaves nothing under the final name.

pub mod meta;
pub mod reader;
pub mod schema;
pub mod series;
pub mod writer;

pub use meta::{ArchiveMeta, ChannelMeta, SourceMeta, FORMAT_VERSION};
pub use reader::{check_blocks, Archive, DigestPolicy, DigestState, Hole};
pub use schema::SliceRow;
pub use series::{
    decode_channels, decode_salvage, payload_stats, segment_list, PayloadStats, Salvaged,
    SegmentInfo,
};
pub use writer::ArchiveWriter;
