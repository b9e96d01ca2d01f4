//! The decode job: an archive (or some channels, or a time range) back to Parquet in the
//! source's layout, column names, time type and value types.

use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::archive::reader::digest_mismatch;
use crate::archive::{decode_channels, decode_salvage, Archive, DigestPolicy, DigestState, Hole};
use crate::error::{Error, Result};
use crate::fsio::{check_output, refuse_same_file};
use crate::model::ChannelInfo;
use crate::signal::RealFft;
use crate::source::write_decoded;

/// What a decode wrote.
#[derive(Debug, Clone, Serialize)]
pub struct DecodeSummary {
    /// Archive read.
    pub archive: PathBuf,
    /// File written.
    pub out: PathBuf,
    /// Rows written.
    pub rows: u64,
    /// Channels written.
    pub channels: usize,
    /// With `salvage`: the blocks left out and the channels whose rows do not add up.
    pub holes: Vec<Hole>,
}

/// Decode an archive (or some channels, or a time range) to Parquet in the source's layout,
/// column names, time type and value types. `salvage`: decode what is intact — a digest
/// mismatch, a missing, repeated or damaged block are reported in [`DecodeSummary::holes`]
/// instead of refusing the archive (the caller exits 1 when there are holes).
pub fn decode_file(
    archive_path: &Path,
    out: &Path,
    channels: &[String],
    from: Option<i64>,
    to: Option<i64>,
    salvage: bool,
) -> Result<DecodeSummary> {
    refuse_same_file(archive_path, out)?;
    check_output(out)?;
    if let (Some(f), Some(t)) = (from, to) {
        if f >= t {
            return Err(Error::InvalidOption {
                name: "from".into(),
                reason: format!("--from ({f} ns) must be before --to ({t} ns)"),
            });
        }
    }
    // The digest beside the archive covers every byte, the Parquet footer and cyclarc's
    // metadata included, which nothing inside the file checksums: a mismatch is damage.
    let policy = if salvage {
        DigestPolicy::Report
    } else {
        DigestPolicy::Refuse
    };
    let archive = Archive::open(archive_path, policy)?;
    let mut holes = Vec::new();
    if archive.digest == DigestState::Mismatch {
        holes.push(Hole {
            channel: None,
            block: None,
            what: digest_mismatch(archive_path),
        });
    }
    for c in channels {
        if !archive.meta.channels.iter().any(|m| &m.name == c) {
            return Err(Error::InvalidOption {
                name: "channel".into(),
                reason: format!("{}: no channel `{c}`", archive_path.display()),
            });
        }
    }
    let fft = RealFft::shared();
    let series = if salvage {
        let s = decode_salvage(&archive, channels, from, to, fft)?;
        holes.extend(s.holes);
        s.series
    } else {
        decode_channels(&archive, channels, from, to, fft)?
    };
    let types: Vec<ChannelInfo> = archive
        .meta
        .channels
        .iter()
        .map(|c| ChannelInfo {
            name: c.name.clone(),
            value_type: c.value_type,
        })
        .collect();
    let rows = write_decoded(out, &archive.meta.schema, &types, &series, channels)?;
    Ok(DecodeSummary {
        archive: archive_path.to_path_buf(),
        out: out.to_path_buf(),
        rows,
        channels: series.len(),
        holes,
    })
}
