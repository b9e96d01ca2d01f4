//! What a file job reports and how it is controlled: the encode summary, progress bars.

use std::path::PathBuf;

use serde::Serialize;

use crate::archive::ChannelMeta;

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
    /// SHA-256 (hex) of the archive, as recorded beside it.
    pub archive_sha256: String,
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
