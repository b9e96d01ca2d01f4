//! The one harness of the test binaries (`tests/cli`, `tests/codec`).
//!
//! - [`cli`]: run the real binary in a temporary folder per test; every run is logged and the
//!   log (command, exit code, stdout, stderr) is printed when the test fails.
//! - [`signals`]: sample grids and invented test signals from fixed ChaCha8 seeds.
//! - [`parquet_io`]: the one Parquet writer and reader (the parquet crate is the reference reader
//!   the comparisons are made with), value types and raw time columns.
//! - [`source`]: a model of synthetic sources (channels, time and name types, row orders) and
//!   its long and wide writers.
//! - [`series`]: per-channel series read back from sources and decoded files, and the
//!   round-trip comparison against the archive's per-segment budgets.
//! - [`archive`]: an archive's rows, metadata and byte layout as the parquet crate reads them.
//! - [`rows`]: cell-by-cell comparisons for awkward sources written from raw Arrow arrays.
//! - [`codec`]: library-level helpers (runs, decoding encoded runs, error bounds).
#![allow(dead_code)]

pub mod archive;
pub mod cli;
pub mod codec;
pub mod parquet_io;
pub mod rows;
pub mod series;
pub mod signals;
pub mod source;

// Not every binary uses all of them (the codec tests take only `codec` and `signals`).
#[allow(unused_imports)]
pub use self::cli::*;
#[allow(unused_imports)]
pub use self::parquet_io::*;
#[allow(unused_imports)]
pub use self::signals::*;

/// 2026-05-04T00:00:00Z in ns since the epoch (a whole second, so every time unit can hold it).
pub const T0: i64 = 1_777_852_800_000_000_000;
