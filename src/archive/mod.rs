//! Archive: cyclarc's archive file — its schema, metadata and version rules, writing it, and
//! reading it back into channels. Never imports the jobs.
//!
//! An archive is one Parquet file (zstd) with one row per segment:
//!
//! | column | type | meaning |
//! |---|---|---|
//! | `channel` | utf8 | channel name |
//! | `start` | timestamp(ns, UTC) | time of the segment's first sample |
//! | `samples` | int32 | number of samples (source rows) in the segment |
//! | `basis` | utf8 | `fourier`, `samples` or `lossless` |
//! | `order` | int32, null | truncation order L (bins 0 … L−1; bin k at k·fs/samples Hz); null unless `fourier` |
//! | `cycles` | int32, null | whole cycles K in the segment; null when not periodic |
//! | `budget_rms` | float32 | resolved RMS budget, channel units |
//! | `error_rms` | float32 | RMS error of the decoded output against the source (finite values), rounded up |
//! | `sample_rate_hz` | float32 | sample rate |
//! | `fundamental_hz` | float32, null | fundamental used for the segment |
//! | `rms` | float32 | RMS of the source's finite values |
//! | `h1_amp` … `h3_amp` | float32, null | peak amplitude of harmonics 1–3 (channel units) |
//! | `h1_phase` … `h3_phase` | float32, null | their cosine phase at `start` (radians) |
//! | `thd` | float32, null | THD of harmonics 2–50 over the fundamental (IEEE 519), from the stored coefficients |
//! | `block` | int32 | block number; a block is consecutive segments of one channel run |
//! | `payload` | binary, null | the block's zstd frame, on the block's first row only |
//! | `checksum` | uint32, null | CRC-32 of `payload` and of every column of the block's rows, on the block's first row only |
//!
//! Derived columns (`rms`, harmonics, `thd`) keep 16 significant bits. File metadata holds
//! `cyclarc.format` (`MAJOR.MINOR`, now [`FORMAT_VERSION`]) and `cyclarc.meta` (JSON: writer
//! version, source name, size and SHA-256, resolved settings, source schema, channels).
//! A reader refuses a newer major version; a newer minor version only adds columns or fields.
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
pub use schema::SegmentRow;
pub use series::{decode_channels, decode_salvage, Salvaged};
pub use writer::ArchiveWriter;
