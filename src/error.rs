//! The library's error type: each variant says what went wrong and where (file, column, row).
//!
//! The command line maps every variant to one of the documented exit codes with
//! [`Error::exit_code`]: 1 for a broken bound or a damaged archive, 2 for usage and input errors,
//! 3 for I/O failures while writing.

use std::path::PathBuf;

/// Result with the library's [`Error`].
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Everything that can go wrong in cyclarc.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A file could not be opened or read.
    #[error("{}: cannot read: {source}", file.display())]
    Open {
        /// The file.
        file: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// A file is not Parquet, or its Parquet structure is broken.
    #[error("{}: not a readable Parquet file: {reason}", file.display())]
    NotParquet {
        /// The file.
        file: PathBuf,
        /// What the Parquet reader said.
        reason: String,
    },
    /// A column the job needs is missing.
    #[error("{}: no column `{column}` (columns: {available})", file.display())]
    MissingColumn {
        /// The file.
        file: PathBuf,
        /// The column looked for.
        column: String,
        /// The columns the file has.
        available: String,
    },
    /// A column has a type the job cannot use.
    #[error("{}: column `{column}` has type {found}; expected {expected}", file.display())]
    WrongType {
        /// The file.
        file: PathBuf,
        /// The column.
        column: String,
        /// The type found.
        found: String,
        /// What would have been accepted.
        expected: String,
    },
    /// The layout could not be decided from the columns.
    #[error("{}: {reason}", file.display())]
    Layout {
        /// The file.
        file: PathBuf,
        /// Why.
        reason: String,
    },
    /// A time value is null.
    #[error("{}: column `{column}` row {row}: time is null", file.display())]
    NullTime {
        /// The file.
        file: PathBuf,
        /// The time column.
        column: String,
        /// Row index in the file (0-based).
        row: u64,
    },
    /// A channel name is null.
    #[error("{}: column `{column}` row {row}: channel name is null", file.display())]
    NullChannel {
        /// The file.
        file: PathBuf,
        /// The channel column.
        column: String,
        /// Row index in the file (0-based).
        row: u64,
    },
    /// Two rows have the same channel and time.
    #[error(
        "{}: channel `{channel}` has two rows at time {time_ns} ns (rows {first_row} and {row})",
        file.display()
    )]
    DuplicateTime {
        /// The file.
        file: PathBuf,
        /// The channel.
        channel: String,
        /// The repeated timestamp (ns since the epoch).
        time_ns: i64,
        /// The earlier row.
        first_row: u64,
        /// The later row.
        row: u64,
    },
    /// The file holds no rows to archive.
    #[error("{}: no rows to archive", file.display())]
    Empty {
        /// The file.
        file: PathBuf,
    },
    /// An option is invalid.
    #[error("invalid setting `{name}`: {reason}")]
    InvalidOption {
        /// The option.
        name: String,
        /// Why.
        reason: String,
    },
    /// The archive is damaged: a checksum, digest or structural check failed.
    #[error("{}: damaged archive: {reason}", file.display())]
    Damaged {
        /// The archive.
        file: PathBuf,
        /// What failed.
        reason: String,
    },
    /// The archive was written by a newer, incompatible format version.
    #[error(
        "{}: archive format {found} is newer than this cyclarc understands ({supported}); \
         upgrade cyclarc to read it",
        file.display()
    )]
    FutureVersion {
        /// The archive.
        file: PathBuf,
        /// The version the archive declares.
        found: String,
        /// The newest major version this build reads.
        supported: u32,
    },
    /// The archive was written in an older format this build no longer reads.
    #[error(
        "{}: archive format {found} was written by cyclarc 0.1 (one row per segment); this \
         build reads format {supported}: decode it with cyclarc 0.1 and archive the result again",
        file.display()
    )]
    OldVersion {
        /// The archive.
        file: PathBuf,
        /// The version the archive declares.
        found: String,
        /// The major version this build reads.
        supported: u32,
    },
    /// Writing an output failed; nothing was published under the final name.
    #[error("{}: write failed: {source}", file.display())]
    Write {
        /// The output file.
        file: PathBuf,
        /// The I/O error.
        source: std::io::Error,
    },
    /// Writing Parquet failed.
    #[error("{}: write failed: {reason}", file.display())]
    WriteParquet {
        /// The output file.
        file: PathBuf,
        /// What the Parquet writer said.
        reason: String,
    },
    /// The pipeline file is wrong.
    #[error("{}: {reason}", file.display())]
    Pipeline {
        /// The pipeline file.
        file: PathBuf,
        /// What is wrong.
        reason: String,
    },
    /// The codec could not encode a block of the source.
    #[error("{}: {source}", file.display())]
    Codec {
        /// The source file.
        file: PathBuf,
        /// What the codec said.
        source: crate::codec::CodecError,
    },
    /// An output path exists and is not a regular file (a device, FIFO, socket or folder).
    #[error("{}: is a {kind}, not a regular file; choose another output path", file.display())]
    NotARegularFile {
        /// The output path.
        file: PathBuf,
        /// What it is.
        kind: String,
    },
    /// Two columns of a source have the same name.
    #[error(
        "{}: column `{column}` appears twice (positions {first} and {second}); rename one",
        file.display()
    )]
    DuplicateColumn {
        /// The file.
        file: PathBuf,
        /// The repeated name.
        column: String,
        /// Position of the first (0-based).
        first: usize,
        /// Position of the second (0-based).
        second: usize,
    },
    /// An archive did not pass verification after writing; it was taken back.
    #[error("{}: verification failed, the archive was removed: {reason}", file.display())]
    Unverified {
        /// The archive.
        file: PathBuf,
        /// The findings.
        reason: String,
    },
    /// The run was interrupted (SIGTERM or SIGINT) and stopped cleanly.
    #[error("interrupted: stopped before finishing; nothing partial was published")]
    Interrupted,
    /// Object storage (or a local folder reached through it) failed.
    #[error("{location}: {reason}{}", if *retryable { " (temporary: retry)" } else { "" })]
    Storage {
        /// The path or URL.
        location: String,
        /// What the store said.
        reason: String,
        /// Whether retrying may help (network, throttling, timeouts) or not (a missing
        /// object, a refused credential).
        retryable: bool,
    },
    /// A plan, its parts or its manifest are not what they should be.
    #[error("{plan}: {reason}")]
    Plan {
        /// The plan.
        plan: String,
        /// What is wrong.
        reason: String,
    },
    /// Shards of a plan have no verified part yet.
    #[error("{plan}: {} shard(s) missing: {}", missing.len(), missing.join(", "))]
    ShardsMissing {
        /// The plan.
        plan: String,
        /// Ids of the missing shards.
        missing: Vec<String>,
    },
}

/// Exit code of a temporary failure that a scheduler should retry (`EX_TEMPFAIL` of BSD's
/// sysexits.h).
pub const EXIT_RETRY: i32 = 75;

impl Error {
    /// The process exit code for this error (documented in the README).
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Damaged { .. } | Error::Unverified { .. } | Error::ShardsMissing { .. } => 1,
            Error::Codec { source, .. } => source.exit_code(),
            Error::Write { .. } | Error::WriteParquet { .. } => 3,
            Error::Interrupted => 4,
            Error::Storage {
                retryable: true, ..
            } => EXIT_RETRY,
            _ => 2,
        }
    }
}
