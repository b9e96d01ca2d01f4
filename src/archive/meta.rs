//! The archive's file-level metadata: format versions and their rules, the source it was
//! made from, the resolved settings, the source's schema, and what it holds per channel.

use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::codec::params::Budget;
use crate::codec::segment::{FundamentalSource, SegmentPlan};
use crate::error::{Error, Result};
use crate::fsio::sha256_file;
use crate::model::{ChannelInfo, Layout, SourceSchema, ValueType};

/// Archive format major version.
pub const FORMAT_MAJOR: u32 = 3;

/// Archive format minor version.
pub const FORMAT_MINOR: u32 = 1;

/// Archive format version as written.
pub const FORMAT_VERSION: &str = "3.2";

/// The oldest major version this build reads (2: the same layout, with varint codes and
/// metadata compressed without [`META_DICTIONARY`]).
pub const OLDEST_READ_MAJOR: u32 = 2;

/// This program's version, recorded as the writer.
pub const WRITER: &str = concat!("cyclarc ", env!("CARGO_PKG_VERSION"));

/// Key of the format version in the Parquet file metadata.
pub const KEY_FORMAT: &str = "cyclarc.format";

/// Key of the metadata: JSON, compressed as one zstd frame with its content checksum against
/// [`META_DICTIONARY`], in standard base64 (`cyclarc inspect --meta` prints the JSON).
pub const KEY_META: &str = "cyclarc.meta";

/// zstd level of the packed metadata.
const META_ZSTD_LEVEL: i32 = 19;

/// Largest metadata JSON accepted (a damaged frame cannot make the reader allocate more).
const MAX_META_BYTES: u64 = 64 << 20;

/// A zstd raw-content dictionary for the metadata: typical records of this program's own
/// fields, so that the keys and the settings every archive repeats cost a few bytes instead
/// of some 400 (a one-channel archive's metadata: 484 → 128 B before base64). Format 3
/// archives are compressed against these exact bytes: **never edit the file**; a different
/// dictionary needs a new major format version and this one kept for reading.
pub const META_DICTIONARY: &[u8] = include_bytes!("meta-dictionary.json");

/// The metadata as stored under [`KEY_META`].
pub fn pack_meta(meta: &ArchiveMeta) -> std::result::Result<String, String> {
    use base64::Engine;
    use zstd::zstd_safe::CParameter;
    let json = serde_json::to_vec(meta).map_err(|e| e.to_string())?;
    let mut c = zstd::bulk::Compressor::with_dictionary(META_ZSTD_LEVEL, META_DICTIONARY)
        .map_err(|e| e.to_string())?;
    c.set_parameter(CParameter::ChecksumFlag(true))
        .map_err(|e| e.to_string())?;
    let z = c.compress(&json).map_err(|e| e.to_string())?;
    Ok(base64::engine::general_purpose::STANDARD.encode(z))
}

/// The metadata JSON stored under [`KEY_META`]; `Err` says why it is unreadable. Format 2
/// frames (no dictionary) read the same way: a frame that never refers to the dictionary
/// decodes alike with it loaded.
pub fn unpack_meta(value: &str) -> std::result::Result<String, String> {
    use base64::Engine;
    use std::io::Read;
    let z = base64::engine::general_purpose::STANDARD
        .decode(value)
        .map_err(|e| format!("metadata is not base64: {e}"))?;
    let damaged = |e: std::io::Error| format!("metadata checksum mismatch or damaged frame ({e})");
    let mut dec =
        zstd::stream::read::Decoder::with_dictionary(&z[..], META_DICTIONARY).map_err(damaged)?;
    let mut json = Vec::new();
    (&mut dec)
        .take(MAX_META_BYTES + 1)
        .read_to_end(&mut json)
        .map_err(damaged)?;
    if json.len() as u64 > MAX_META_BYTES {
        return Err("metadata larger than the format allows".into());
    }
    String::from_utf8(json).map_err(|_| "metadata is not UTF-8".into())
}

/// The source an archive was made from.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SourceMeta {
    /// File name (no folder).
    pub name: String,
    /// Size in bytes.
    pub bytes: u64,
    /// SHA-256 of the file, hex.
    pub sha256: String,
}

impl SourceMeta {
    /// Hash a source file.
    pub fn of(path: &Path) -> Result<SourceMeta> {
        let (sha256, bytes) = sha256_file(path)?;
        Ok(SourceMeta {
            name: path
                .file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default(),
            bytes,
            sha256,
        })
    }
}

/// What the archive says about one channel.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChannelMeta {
    /// Name.
    pub name: String,
    /// Value type.
    pub value_type: ValueType,
    /// Sample rate (Hz).
    pub sample_rate_hz: Option<f64>,
    /// Runs (stretches between holes).
    pub runs: usize,
    /// Rows (samples) in the source.
    pub rows: u64,
    /// Whether the rows had to be sorted.
    pub sorted_on_read: bool,
    /// How the fundamental was found: `given`, `estimated`, `not_periodic`, or `mixed`.
    pub fundamental: String,
    /// First estimate or given value (Hz).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fundamental_hz: Option<f64>,
    /// Confidence of the first estimate (autocorrelation at the period).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub confidence: Option<f64>,
    /// Lowest and highest tracked fundamental (Hz).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tracked_hz: Option<(f64, f64)>,
    /// The candidate fundamental that came second at the start of the first run (Hz), and
    /// its trial bytes per sample over the winner's (absent when there was none).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub runner_up_hz: Option<(f64, f64)>,
    /// Blocks of the channel in the archive.
    pub blocks: Option<u64>,
    /// The channel's budget rule, which each segment's budget was resolved from (on the RMS
    /// of its source's finite values).
    pub budget: Option<Budget>,
    /// The channel's peak limit ([`crate::codec::guard`]): no decoded sample differs from
    /// its source value by more than this (channel units). Absent without a guard.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub peak_max: Option<f64>,
    /// The channel's protected bands and amplitude floor ([`crate::codec::bands`]).
    /// Absent without protection.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub protection: Option<crate::codec::bands::Protection>,
    /// Event capture ([`crate::codec::events`]): an event row's budget is the channel's
    /// rule × this factor. Absent without event capture.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub event_budget_factor: Option<f64>,
}

impl ChannelMeta {
    /// Start a channel's metadata.
    pub fn new(
        info: &ChannelInfo,
        sample_rate: Option<f64>,
        runs: usize,
        rows: u64,
        sorted: bool,
    ) -> Self {
        ChannelMeta {
            name: info.name.clone(),
            value_type: info.value_type,
            sample_rate_hz: sample_rate,
            runs,
            rows,
            sorted_on_read: sorted,
            fundamental: String::new(),
            fundamental_hz: None,
            confidence: None,
            tracked_hz: None,
            runner_up_hz: None,
            blocks: None,
            budget: None,
            peak_max: None,
            protection: None,
            event_budget_factor: None,
        }
    }

    /// Fold a run's segmentation into the channel's summary.
    pub fn note_plan(&mut self, plan: &SegmentPlan) {
        let kind = match plan.source {
            FundamentalSource::Given => "given",
            FundamentalSource::Estimated => "estimated",
            FundamentalSource::NotPeriodic => "not_periodic",
        };
        // What was estimated is recorded to 7 significant digits (a frequency) or 4 (a
        // ratio): the digits past them are noise of the estimate, and in a small archive
        // they cost more than its payload. A given fundamental is kept as given.
        let (hz, ratio) = (|x: f64| significant(x, 7), |x: f64| significant(x, 4));
        if self.fundamental.is_empty() {
            self.fundamental = kind.to_string();
            self.fundamental_hz = plan.fundamental.map(|e| match plan.source {
                FundamentalSource::Given => e.hz,
                _ => hz(e.hz),
            });
            self.confidence = plan.fundamental.map(|e| ratio(e.confidence));
            self.runner_up_hz = plan.runner_up.map(|(e, r)| (hz(e.hz), ratio(r)));
        } else if self.fundamental != kind {
            self.fundamental = "mixed".into();
        }
        if let Some((lo, hi)) = plan.tracked_range {
            let (lo, hi) = (hz(lo), hz(hi));
            self.tracked_hz = Some(match self.tracked_hz {
                Some((a, b)) => (a.min(lo), b.max(hi)),
                None => (lo, hi),
            });
        }
    }
}

/// `x` to `digits` significant decimal digits (as printed, so its JSON is that short);
/// non-finite values as they are.
fn significant(x: f64, digits: usize) -> f64 {
    if !x.is_finite() || x == 0.0 {
        return x;
    }
    format!("{:.*e}", digits.saturating_sub(1), x)
        .parse()
        .unwrap_or(x)
}

/// The archive's file-level metadata.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ArchiveMeta {
    /// Format version `MAJOR.MINOR`.
    pub format: String,
    /// Writer.
    pub writer: String,
    /// Source.
    pub source: SourceMeta,
    /// Resolved settings (as JSON).
    pub settings: serde_json::Value,
    /// Source schema, for decoding back to the source layout.
    pub schema: SourceSchema,
    /// Channels.
    pub channels: Vec<ChannelMeta>,
}

impl ArchiveMeta {
    /// Build the metadata of a new archive.
    pub fn new(
        source: SourceMeta,
        settings: serde_json::Value,
        schema: SourceSchema,
        channels: Vec<ChannelMeta>,
    ) -> Self {
        let mut schema = schema;
        if schema.layout == Layout::Long {
            // Long: the order of first appearance follows the source's row order, which must
            // not change the archive's bytes (the wide layout's column order is kept).
            schema.channels.sort_by(|a, b| a.name.cmp(&b.name));
        }
        let mut settings = settings;
        drop_nulls(&mut settings);
        ArchiveMeta {
            format: FORMAT_VERSION.into(),
            writer: WRITER.into(),
            source,
            settings,
            schema,
            channels,
        }
    }
}

/// Leave out unset settings (null) from the recorded settings: absent means unset.
fn drop_nulls(v: &mut serde_json::Value) {
    match v {
        serde_json::Value::Object(m) => {
            m.retain(|_, x| !x.is_null());
            m.values_mut().for_each(drop_nulls);
        }
        serde_json::Value::Array(a) => a.iter_mut().for_each(drop_nulls),
        _ => {}
    }
}

/// Check a `MAJOR.MINOR` version string against what this build reads.
pub fn check_version(path: &Path, v: &str) -> Result<()> {
    let major: u32 = v
        .split('.')
        .next()
        .and_then(|m| m.parse().ok())
        .ok_or_else(|| Error::Damaged {
            file: path.to_path_buf(),
            reason: format!("unreadable format version `{v}`"),
        })?;
    if major > FORMAT_MAJOR {
        return Err(Error::FutureVersion {
            file: path.to_path_buf(),
            found: v.to_string(),
            supported: FORMAT_MAJOR,
        });
    }
    if (1..OLDEST_READ_MAJOR).contains(&major) {
        return Err(Error::OldVersion {
            file: path.to_path_buf(),
            found: v.to_string(),
            supported: FORMAT_MAJOR,
        });
    }
    if major == 0 {
        return Err(Error::Damaged {
            file: path.to_path_buf(),
            reason: format!("unknown format version `{v}`"),
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_metadata_dictionary_is_the_one_format_3_was_written_with() {
        // Format 3 archives are compressed against these bytes: a changed dictionary would
        // make every one of them unreadable (its SHA-256 as first committed).
        use sha2::Digest;
        let h = sha2::Sha256::digest(META_DICTIONARY);
        let hex: String = h.iter().map(|b| format!("{b:02x}")).collect();
        assert_eq!(hex, FROZEN_DICTIONARY_SHA256);
    }

    #[test]
    fn significant_digits_are_what_json_prints() {
        // Against std's shortest round-trip printing (Rust reference, `Display` for f64).
        assert_eq!(
            significant(3.1687525150722396e-8, 7).to_string(),
            "0.00000003168753"
        );
        assert_eq!(significant(0.96085326792923, 4).to_string(), "0.9609");
        assert_eq!(significant(49.969_712_345, 7).to_string(), "49.96971");
        assert_eq!(significant(-1234.5678, 4).to_string(), "-1235");
        assert_eq!(significant(0.0, 7), 0.0);
        assert!(significant(f64::NAN, 7).is_nan());
        let json = serde_json::to_string(&significant(3.695907908014233, 4)).unwrap();
        assert_eq!(json, "3.696");
    }

    const FROZEN_DICTIONARY_SHA256: &str =
        "7aae45c753283052db4619fb758df61e7b450b68c6cecd1a1fd8ed46fed743ef";

    #[test]
    fn format_2_metadata_without_the_dictionary_still_reads() {
        use base64::Engine;
        let json = br#"{"format":"2.0","writer":"cyclarc 0.1.0"}"#;
        let z = crate::codec::frame::compress(json, 19).unwrap();
        let v = base64::engine::general_purpose::STANDARD.encode(z);
        assert_eq!(unpack_meta(&v).unwrap().as_bytes(), json);
    }
}
