//! The encode job: one Parquet source file into one archive. Time-ordered sources stream
//! with bounded memory ([`crate::jobs::stream`]); a source whose times go backwards within a
//! channel is read again and sorted in memory. Both ways give the same bytes.

use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::archive::{ChannelMeta, SourceMeta};
use crate::error::{Error, Result};
use crate::fsio::{check_output, digest_path, refuse_same_file};
use crate::jobs::stream::{encode_pass, PassOutcome, Reading};
use crate::options::Settings;

/// What an encode did, for the summary.
#[derive(Debug, Clone, Serialize)]
pub struct EncodeSummary {
    /// Source file.
    pub source: PathBuf,
    /// Archive written.
    pub archive: PathBuf,
    /// Rows read.
    pub rows: u64,
    /// Channels.
    pub channels: usize,
    /// Segments.
    pub segments: usize,
    /// Source file size (bytes).
    pub source_bytes: u64,
    /// Archive size (bytes).
    pub archive_bytes: u64,
    /// Worst error/budget ratio over lossy segments.
    pub worst_error_over_budget: f64,
    /// Per channel: how the fundamental was found.
    pub fundamentals: Vec<ChannelMeta>,
}

/// Options of a file job that are not encode settings.
#[derive(Debug, Clone, Default)]
pub struct JobControl {
    /// Show progress bars (when stderr is a terminal).
    pub progress: bool,
}

/// Encode one Parquet source into an archive. Time-ordered sources stream with bounded
/// memory; a source whose times go backwards within a channel is read again and sorted in
/// memory. Both ways give the same bytes.
pub fn encode_file(
    source: &Path,
    out: &Path,
    settings: &Settings,
    control: &JobControl,
) -> Result<EncodeSummary> {
    refuse_same_file(source, out)?;
    check_output(out)?;
    check_output(&digest_path(out))?;
    let source_meta = SourceMeta::of(source)?;
    let pass = |sort| {
        encode_pass(source, out, settings, control, &source_meta, sort)
            .map_err(|e| e.in_file(source))
    };
    match pass(Reading::Stream)? {
        PassOutcome::Done(summary) => Ok(summary),
        PassOutcome::NeedsSort => match pass(Reading::Sort)? {
            PassOutcome::Done(summary) => Ok(summary),
            PassOutcome::NeedsSort => Err(Error::Layout {
                file: source.to_path_buf(),
                reason: "could not order the rows by time".into(),
            }),
        },
    }
}

/// A progress bar on stderr, drawn only when it is a terminal and progress is on.
pub fn progress_bar(control: &JobControl, len: u64, what: &'static str) -> indicatif::ProgressBar {
    use std::io::IsTerminal;
    if !control.progress || !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let bar = indicatif::ProgressBar::new(len);
    if let Ok(style) =
        indicatif::ProgressStyle::with_template("{msg:>9} [{bar:40}] {percent:>3}% {eta}")
    {
        bar.set_style(style.progress_chars("=> "));
    }
    bar.set_message(what);
    bar
}
