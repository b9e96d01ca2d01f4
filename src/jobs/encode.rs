//! The encode job: one Parquet source file into one archive. Time-ordered sources stream
//! with bounded memory ([`crate::jobs::stream`]); a source whose times go backwards within a
//! channel is read again and sorted in memory. Both ways give the same bytes.

use std::path::Path;

use crate::archive::SourceMeta;
use crate::error::{Error, Result};
use crate::fsio::{check_output, digest_path, refuse_same_file};
pub use crate::jobs::control::{EncodeSummary, JobControl};
use crate::jobs::stream::{encode_pass, PassOutcome, Reading};
use crate::jobs::survey::{survey, with_survey_budgets};
use crate::options::Settings;

/// Encode one Parquet source into an archive. Time-ordered sources stream with bounded
/// memory; a source whose times go backwards within a channel is read again and sorted in
/// memory. Both ways give the same bytes. With `budget_from_survey`, the source is surveyed
/// first ([`crate::jobs::survey`]) and each channel's recommendation becomes its budget rule.
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
    let surveyed;
    let settings = if settings.budget_from_survey {
        surveyed = with_survey_budgets(settings, &survey(source, settings)?);
        &surveyed
    } else {
        settings
    };
    let pass = |reading| encode_pass(source, out, settings, control, &source_meta, reading);
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
