//! The decode job: an archive (or some channels, or a time range) back to Parquet in the
//! source's layout, column names, time type and value types.

use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::archive::reader::digest_mismatch;
use crate::archive::{decode_channels, decode_salvage, Archive, DigestPolicy, DigestState, Hole};
use crate::error::{Error, Result};
use crate::fsio::{check_output, refuse_same_file};
use crate::model::{ChannelInfo, ChannelSeries};
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

/// Decode the parts of a committed plan ([`crate::jobs::plan`]) as one archive into one
/// Parquet file: each channel's samples from every part, in time order. The parts must come
/// from sources of one layout (the same time column, time type and column names); a channel
/// must have one value type and no time twice. Parts that hold none of `channels` are left
/// out (so the channels of one layout can be decoded from a plan over several).
pub fn decode_parts(
    label: &str,
    parts: &[PathBuf],
    out: &Path,
    channels: &[String],
    from: Option<i64>,
    to: Option<i64>,
) -> Result<DecodeSummary> {
    check_output(out)?;
    let fft = RealFft::shared();
    let mut schema: Option<crate::model::SourceSchema> = None;
    let mut types: Vec<ChannelInfo> = Vec::new();
    let mut pieces: Vec<ChannelSeries> = Vec::new();
    for p in parts {
        let archive = Archive::open(p, DigestPolicy::Refuse)?;
        let wanted: Vec<String> = archive
            .meta
            .channels
            .iter()
            .filter(|c| channels.is_empty() || channels.contains(&c.name))
            .map(|c| c.name.clone())
            .collect();
        if wanted.is_empty() {
            continue;
        }
        let s = &archive.meta.schema;
        match &schema {
            None => schema = Some(s.clone()),
            Some(first) => {
                if first.layout != s.layout
                    || first.time_column != s.time_column
                    || first.time_type != s.time_type
                    || first.channel_column != s.channel_column
                    || first.value_column != s.value_column
                {
                    return Err(Error::Plan {
                        plan: label.to_string(),
                        reason: format!(
                            "{} comes from a source of another layout than the first part's; \
                             decode the channels of one layout at a time (--channel)",
                            p.display()
                        ),
                    });
                }
            }
        }
        for c in &archive.meta.channels {
            match types.iter().find(|t| t.name == c.name) {
                Some(t) if t.value_type != c.value_type => {
                    return Err(Error::Plan {
                        plan: label.to_string(),
                        reason: format!(
                            "channel `{}` is {} in one part and {} in another",
                            c.name,
                            t.value_type.name(),
                            c.value_type.name()
                        ),
                    })
                }
                Some(_) => {}
                None => types.push(ChannelInfo {
                    name: c.name.clone(),
                    value_type: c.value_type,
                }),
            }
        }
        pieces.extend(decode_channels(&archive, &wanted, from, to, fft)?);
    }
    for c in channels {
        if !types.iter().any(|t| &t.name == c) {
            return Err(Error::InvalidOption {
                name: "channel".into(),
                reason: format!("{label}: no channel `{c}`"),
            });
        }
    }
    let Some(mut schema) = schema else {
        return Err(Error::Plan {
            plan: label.to_string(),
            reason: "has no parts".into(),
        });
    };
    schema.channels = types.clone();
    let series = join_pieces(label, pieces)?;
    let rows = write_decoded(out, &schema, &types, &series, channels)?;
    Ok(DecodeSummary {
        archive: PathBuf::from(label),
        out: out.to_path_buf(),
        rows,
        channels: series.len(),
        holes: Vec::new(),
    })
}

/// One series per channel from pieces of it (parts cut by source, channels or time): the
/// pieces in time order, end to end. Pieces that overlap in time would interleave two
/// sources' samples of one channel: refused.
fn join_pieces(label: &str, pieces: Vec<ChannelSeries>) -> Result<Vec<ChannelSeries>> {
    let mut by_name: Vec<(String, Vec<ChannelSeries>)> = Vec::new();
    for p in pieces.into_iter().filter(|p| !p.times.is_empty()) {
        match by_name.iter_mut().find(|(n, _)| *n == p.name) {
            Some((_, v)) => v.push(p),
            None => by_name.push((p.name.clone(), vec![p])),
        }
    }
    let mut out = Vec::new();
    for (name, mut v) in by_name {
        v.sort_by_key(|p| p.times[0]);
        for w in v.windows(2) {
            let (last, first) = (w[0].times[w[0].times.len() - 1], w[1].times[0]);
            if first <= last {
                return Err(Error::Plan {
                    plan: label.to_string(),
                    reason: format!(
                        "channel `{name}` has samples at or before {last} ns in two parts \
                         (two sources overlap in time)"
                    ),
                });
            }
        }
        let joined = ChannelSeries::joined(
            &name,
            v.into_iter().map(|p| crate::model::Run {
                times: p.times,
                values: p.values,
                specials: p.specials,
            }),
        );
        out.push(joined);
    }
    Ok(out)
}
