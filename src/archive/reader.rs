//! Reading an archive: the file and its metadata, the digest beside it, and the checks that
//! every channel's blocks are there, once and in order.

use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::archive::meta::{check_version, unpack_meta, ArchiveMeta, KEY_FORMAT, KEY_META};
use crate::archive::schema::{batch_to_rows, SliceRow};
use crate::error::{Error, Result};
use crate::fsio::{check_digest, contain, digest_path, open_parquet, READ_BATCH_ROWS};

/// An archive read back.
#[derive(Debug, Clone)]
pub struct Archive {
    /// Path.
    pub path: PathBuf,
    /// Metadata.
    pub meta: ArchiveMeta,
    /// All rows in file order.
    pub rows: Vec<SliceRow>,
    /// Bytes per column (compressed, as stored), for `inspect`.
    pub column_bytes: Vec<(String, u64)>,
    /// File size.
    pub file_bytes: u64,
    /// What the digest beside the archive said when it was opened.
    pub digest: DigestState,
}

/// What to do with the digest recorded beside an archive (`ARCHIVE.sha256`), which covers
/// every byte, the Parquet footer and cyclarc's metadata included.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DigestPolicy {
    /// A digest that differs is damage: refuse the archive.
    Refuse,
    /// Note a differing digest in [`Archive::digest`] and read on (verify, salvage).
    Report,
    /// Do not read the digest (inspect).
    Skip,
}

/// What the digest beside an archive said.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum DigestState {
    /// Present and equal to the file's SHA-256.
    Ok,
    /// No digest file.
    Missing,
    /// Present and different.
    Mismatch,
    /// Not read ([`DigestPolicy::Skip`]).
    Unchecked,
}

impl DigestState {
    /// The word reports use.
    pub fn name(self) -> &'static str {
        match self {
            DigestState::Ok => "ok",
            DigestState::Missing => "missing",
            DigestState::Mismatch => "mismatch",
            DigestState::Unchecked => "unchecked",
        }
    }
}

/// What a digest that differs from the archive means, in words.
pub fn digest_mismatch(path: &Path) -> String {
    format!(
        "its SHA-256 differs from the digest recorded in {} (the file changed after it was \
         written)",
        digest_path(path).display()
    )
}

impl Archive {
    /// Bytes attributed to a channel: its frames and their CRC-32s, plus its share (by rows)
    /// of every byte outside the payload column, footer included.
    pub fn channel_bytes(&self, channel: &str) -> u64 {
        let payload_all: u64 = self
            .column_bytes
            .iter()
            .filter(|(n, _)| {
                crate::archive::schema::column_class(n)
                    == Some(crate::archive::schema::ColumnClass::Payload)
            })
            .map(|(_, b)| *b)
            .sum();
        let other = self.file_bytes.saturating_sub(payload_all) as f64;
        let total_rows = self.rows.len().max(1) as f64;
        let rows: Vec<_> = self.rows.iter().filter(|r| r.channel == channel).collect();
        let pay: u64 = rows
            .iter()
            .filter_map(|r| r.payload.as_ref().map(|p| p.len() as u64 + 4))
            .sum();
        pay + (other * rows.len() as f64 / total_rows).round() as u64
    }

    /// Bytes outside every column chunk: the Parquet footer, headers and file metadata.
    pub fn footer_bytes(&self) -> u64 {
        let all: u64 = self.column_bytes.iter().map(|(_, b)| *b).sum();
        self.file_bytes.saturating_sub(all)
    }

    /// Open an archive: the one way in. The digest is checked as `policy` says, then the file
    /// is read; damage in the Parquet structure (the reader's panics included) is
    /// [`Error::Damaged`].
    pub fn open(path: &Path, policy: DigestPolicy) -> Result<Archive> {
        let digest = match policy {
            DigestPolicy::Skip => DigestState::Unchecked,
            _ => match check_digest(path)? {
                Some(true) => DigestState::Ok,
                Some(false) => DigestState::Mismatch,
                None => DigestState::Missing,
            },
        };
        if digest == DigestState::Mismatch && policy == DigestPolicy::Refuse {
            return Err(damaged(path, digest_mismatch(path)));
        }
        match read_archive(path) {
            Ok(mut a) => {
                a.digest = digest;
                Ok(a)
            }
            // With the digest already differing, whatever the reader found is damage (a
            // flipped version byte must not read as "written by a newer cyclarc").
            Err(e) if digest == DigestState::Mismatch => Err(damaged(
                path,
                format!("its digest differs from the recorded one, and: {e}"),
            )),
            Err(e) => Err(e),
        }
    }
}

fn damaged(path: &Path, reason: impl Into<String>) -> Error {
    Error::Damaged {
        file: path.to_path_buf(),
        reason: reason.into(),
    }
}

/// Read an archive without looking at its digest (see [`Archive::open`]).
fn read_archive(path: &Path) -> Result<Archive> {
    let builder = match open_parquet(path) {
        Ok(b) => b,
        Err(Error::NotParquet { reason, .. }) => return Err(damaged(path, reason)),
        Err(e) => return Err(e),
    };
    let file_bytes = std::fs::metadata(path).map(|m| m.len()).unwrap_or(0);
    let md = builder.metadata().clone();
    let kv = md.file_metadata().key_value_metadata();
    let get = |k: &str| {
        kv.and_then(|kv| kv.iter().find(|e| e.key == k))
            .and_then(|e| e.value.clone())
    };
    let format = get(KEY_FORMAT).ok_or_else(|| {
        damaged(
            path,
            "no cyclarc format version in the file metadata (not an archive?)",
        )
    })?;
    check_version(path, &format)?;
    let meta_json =
        unpack_meta(&get(KEY_META).unwrap_or_default()).map_err(|e| damaged(path, e))?;
    let meta: ArchiveMeta =
        serde_json::from_str(&meta_json).map_err(|e| damaged(path, format!("metadata: {e}")))?;
    check_version(path, &meta.format)?;
    let mut column_bytes: Vec<(String, u64)> = Vec::new();
    for rg in md.row_groups() {
        for c in rg.columns() {
            let name = c.column_path().string();
            let size = c.compressed_size().max(0) as u64;
            match column_bytes.iter_mut().find(|e| e.0 == name) {
                Some(e) => e.1 += size,
                None => column_bytes.push((name, size)),
            }
        }
    }
    let reader = builder
        .with_batch_size(READ_BATCH_ROWS)
        .build()
        .map_err(|e| damaged(path, e.to_string()))?;
    let mut rows = Vec::new();
    let result = contain(|| -> Result<()> {
        for batch in reader {
            let batch = batch.map_err(|e| damaged(path, e.to_string()))?;
            batch_to_rows(&batch, &mut rows).map_err(|e| damaged(path, e))?;
        }
        Ok(())
    });
    match result {
        Ok(r) => r?,
        Err(_) => return Err(damaged(path, "the Parquet reader failed on damaged data")),
    }
    Ok(Archive {
        path: path.to_path_buf(),
        meta,
        rows,
        column_bytes,
        file_bytes,
        digest: DigestState::Unchecked,
    })
}

/// Rows of one block, in order, as index ranges into `rows`. A block starts where the block
/// number changes or where a row carries a payload (a block's first row does), so a block
/// repeated right after itself is two spans, not one of twice the rows.
pub fn block_spans(rows: &[SliceRow]) -> Vec<std::ops::Range<usize>> {
    let mut out = Vec::new();
    let mut start = 0;
    for i in 1..=rows.len() {
        if i == rows.len() || rows[i].block != rows[start].block || rows[i].payload.is_some() {
            out.push(start..i);
            start = i;
        }
    }
    out
}

/// A block that is missing, repeated or out of place, or a channel whose blocks do not add up
/// to what the metadata records.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Hole {
    /// The channel, when known.
    pub channel: Option<String>,
    /// The block number, when it applies.
    pub block: Option<u32>,
    /// What is wrong.
    pub what: String,
}

impl std::fmt::Display for Hole {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        if let Some(c) = &self.channel {
            write!(f, "channel `{c}`: ")?;
        }
        if let Some(b) = self.block {
            write!(f, "block {b}: ")?;
        }
        f.write_str(&self.what)
    }
}

/// Check that the archive holds every block once, in order, and that each channel's blocks
/// and rows add up to what the metadata records. Blocks are numbered 0, 1, 2, … in file
/// order; a channel's blocks come in time order. Returns what is wrong (empty: complete).
pub fn check_blocks(archive: &Archive) -> Vec<Hole> {
    let rows = &archive.rows;
    let mut holes = Vec::new();
    let hole = |channel: Option<&str>, block: Option<u32>, what: String| Hole {
        channel: channel.map(str::to_string),
        block,
        what,
    };
    let mut seen = std::collections::BTreeSet::new();
    let mut next = 0u64;
    let mut missing: Vec<u64> = Vec::new();
    // Per channel: blocks, samples, and the last segment start.
    let mut found: std::collections::BTreeMap<&str, (u64, u64, i64)> = Default::default();
    for span in block_spans(rows) {
        let first = &rows[span.start];
        let b = first.block;
        if !seen.insert(b) {
            holes.push(hole(
                Some(&first.channel),
                Some(b),
                "appears more than once".into(),
            ));
        } else if (b as u64) > next {
            missing.extend(next..b as u64);
        } else if (b as u64) < next {
            holes.push(hole(Some(&first.channel), Some(b), "out of order".into()));
        }
        next = next.max(b as u64 + 1);
        let e = found
            .entry(first.channel.as_str())
            .or_insert((0, 0, i64::MIN));
        if first.start_ns <= e.2 && e.0 > 0 {
            holes.push(hole(
                Some(&first.channel),
                Some(b),
                "starts before the channel's previous block".into(),
            ));
        }
        e.0 += 1;
        for r in &rows[span] {
            e.1 += r.samples as u64;
            e.2 = e.2.max(r.start_ns);
        }
    }
    let recorded: u64 = archive.meta.channels.iter().filter_map(|c| c.blocks).sum();
    if archive.meta.channels.iter().all(|c| c.blocks.is_some()) && recorded > next {
        missing.extend(next..recorded);
    }
    // Channels short of blocks or rows name the missing blocks' owner.
    let mut short = Vec::new();
    for c in &archive.meta.channels {
        let (blocks, samples, _) = found.get(c.name.as_str()).copied().unwrap_or_default();
        let mut what = Vec::new();
        if let Some(want) = c.blocks.filter(|&w| w != blocks) {
            what.push(format!("{blocks} blocks, the metadata records {want}"));
        }
        if samples != c.rows {
            what.push(format!("{samples} rows, the metadata records {}", c.rows));
        }
        if !what.is_empty() {
            short.push(c.name.as_str());
            holes.push(hole(Some(&c.name), None, what.join("; ")));
        }
    }
    for name in found.keys() {
        if !archive.meta.channels.iter().any(|c| c.name == *name) {
            holes.push(hole(Some(name), None, "not in the metadata".into()));
        }
    }
    let owner = match short.as_slice() {
        [one] => Some(*one),
        _ => None,
    };
    for b in missing {
        holes.push(hole(
            owner,
            u32::try_from(b).ok(),
            "missing (its rows are not in the archive)".into(),
        ));
    }
    holes
}
