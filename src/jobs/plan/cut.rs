//! Cutting a job's sources into shards from their Parquet footers.

use std::path::{Path, PathBuf};

use bytes::Bytes;
use parquet::file::metadata::{ParquetMetaData, ParquetMetaDataReader};
use parquet::file::statistics::Statistics;
use serde::Serialize;

use crate::error::{Error, Result};
use crate::fsio::sha256_hex;
use crate::jobs::pipeline::{self, is_own_output};
use crate::model::Layout;
use crate::options::EncodeOptions;
use crate::store::{is_url, Location, Put};

use super::{Plan, Shard, SourceId, PARTS_FOLDER, PLAN_FORMAT, RAW_BYTES_PER_SAMPLE};

/// Bytes read from a source's end to find its footer (more when the footer is longer).
const FOOTER_GUESS: u64 = 64 * 1024;

/// What `plan` wrote.
#[derive(Debug, Clone, Serialize)]
pub struct PlanSummary {
    /// Where the plan is.
    pub plan: String,
    /// Its hash.
    pub hash: String,
    /// Shards.
    pub shards: usize,
    /// Where the parts go.
    pub parts: String,
    /// Sources.
    pub sources: usize,
    /// Raw bytes in all (4 per sample).
    pub raw_bytes: u64,
    /// Whether an identical plan was there already.
    pub existed: bool,
}

/// Make the plan of a job file and write it to `out` (create-only; an identical plan already
/// there is accepted, a different one refused).
pub fn make_plan(job: &Path, out: &str, shard_bytes: u64) -> Result<PlanSummary> {
    if shard_bytes == 0 {
        return Err(Error::InvalidOption {
            name: "shard-bytes".into(),
            reason: "must be at least 1".into(),
        });
    }
    let file = pipeline::load(job)?;
    let base = job.parent().unwrap_or(Path::new(".")).to_path_buf();
    // Local paths are made absolute: shards run from other folders and machines.
    let place = |p: &str| -> String {
        if is_url(p) {
            return p.to_string();
        }
        let rel = pipeline::resolve_rel(&base, Path::new(p));
        std::path::absolute(&rel)
            .unwrap_or(rel)
            .display()
            .to_string()
    };
    let output = place(&file.output.to_string_lossy());
    let mut shards = Vec::new();
    let mut seen = std::collections::BTreeSet::new();
    for group in &file.sources {
        let options = file.encode.overlay(&group.encode);
        let settings = options.resolve()?;
        for pattern in &group.paths {
            for found in list_sources(&place(pattern), job)? {
                if !seen.insert(found.location.clone()) {
                    continue;
                }
                let meta = footer(&found)?;
                shards.extend(cut(&found, &meta, &settings.source, &options, shard_bytes)?);
            }
        }
    }
    let mut plan = Plan {
        format: PLAN_FORMAT.into(),
        hash: String::new(),
        job: job.display().to_string(),
        parts: String::new(),
        verify: file.verify,
        shard_bytes,
        shards,
    };
    plan.hash = plan.computed_hash();
    plan.parts = format!(
        "{}/{PARTS_FOLDER}/{}",
        output.trim_end_matches('/'),
        plan.hash
    );
    let bytes = plan.to_bytes();
    let at = Location::parse(out)?;
    let existed = match at.put_create(Bytes::from(bytes.clone()))? {
        Put::Created => false,
        Put::Exists => {
            if at.get()? != bytes {
                return Err(Error::Plan {
                    plan: out.to_string(),
                    reason: "a different plan is already there (the sources or the job \
                             changed since it was made); write this one elsewhere"
                        .into(),
                });
            }
            true
        }
    };
    Ok(PlanSummary {
        plan: out.to_string(),
        hash: plan.hash.clone(),
        shards: plan.shards.len(),
        parts: plan.parts.clone(),
        sources: seen.len(),
        raw_bytes: plan.shards.iter().map(|s| s.raw_bytes).sum(),
        existed,
    })
}

/// The sources a path, glob or URL names, with their size and version tag, in name order.
fn list_sources(pattern: &str, job: &Path) -> Result<Vec<SourceId>> {
    let glob_chars = |s: &str| s.contains(['*', '?', '[']);
    let bad = |reason: String| Error::Pipeline {
        file: job.to_path_buf(),
        reason,
    };
    let found = if glob_chars(pattern) {
        // The folder before the first glob character is listed; the rest is matched.
        let first = pattern.find(['*', '?', '[']).unwrap_or(pattern.len());
        let cut = pattern[..first].rfind('/').map_or(0, |i| i + 1);
        let (folder, rest) = pattern.split_at(cut);
        let glob =
            glob::Pattern::new(rest).map_err(|e| bad(format!("pattern `{pattern}`: {e}")))?;
        let folder = if folder.is_empty() { "." } else { folder };
        Location::parse(folder)?
            .list_matching(&glob)?
            .into_iter()
            .map(|f| SourceId {
                location: f.location.text,
                size: f.size,
                e_tag: f.e_tag,
            })
            .collect()
    } else {
        let at = Location::parse(pattern)?;
        let (size, e_tag) = at.head()?.ok_or_else(|| Error::Storage {
            location: pattern.to_string(),
            reason: "no such source".into(),
            retryable: false,
        })?;
        vec![SourceId {
            location: pattern.to_string(),
            size,
            e_tag,
        }]
    };
    Ok(found
        .into_iter()
        .filter(|s| !is_own_output(Path::new(&s.location)))
        .collect())
}

/// A source's Parquet footer, read from its end.
fn footer(s: &SourceId) -> Result<ParquetMetaData> {
    let at = Location::parse(&s.location)?;
    let not_parquet = |reason: String| Error::NotParquet {
        file: PathBuf::from(&s.location),
        reason,
    };
    let mut tail = FOOTER_GUESS.min(s.size);
    loop {
        let bytes = at.get_range(s.size - tail..s.size)?;
        let mut reader = ParquetMetaDataReader::new();
        match reader.try_parse_sized(&bytes, s.size) {
            Ok(()) => return reader.finish().map_err(|e| not_parquet(e.to_string())),
            Err(parquet::errors::ParquetError::NeedMoreData(n)) if (n as u64) > tail => {
                tail = (n as u64).min(s.size);
            }
            Err(e) => return Err(not_parquet(e.to_string())),
        }
    }
}

/// The shards of one source.
fn cut(
    source: &SourceId,
    meta: &ParquetMetaData,
    mapping: &crate::source::Mapping,
    options: &EncodeOptions,
    shard_bytes: u64,
) -> Result<Vec<Shard>> {
    let fm = meta.file_metadata();
    let schema =
        parquet::arrow::parquet_to_arrow_schema(fm.schema_descr(), fm.key_value_metadata())
            .map_err(|e| Error::NotParquet {
                file: PathBuf::from(&source.location),
                reason: e.to_string(),
            })?;
    let names: Vec<&str> = schema.fields().iter().map(|f| f.name().as_str()).collect();
    let has = |c: &str| names.contains(&c);
    let layout = mapping.layout.unwrap_or(
        if has(&mapping.channel_column) && has(&mapping.value_column) {
            Layout::Long
        } else {
            Layout::Wide
        },
    );
    let rows = fm.num_rows().max(0) as u64;
    let windows = |channels: u64| time_windows(meta, &schema, mapping, rows, channels, shard_bytes);
    let shard = |channels: Option<Vec<String>>, window_ns, rows: u64, raw_bytes| {
        let mut s = Shard {
            id: String::new(),
            source: source.clone(),
            channels,
            window_ns,
            rows,
            raw_bytes,
            options: options.clone(),
        };
        s.id = sha256_hex(
            &serde_json::to_vec(&(&s.source, &s.channels, &s.window_ns)).unwrap_or_default(),
        )[..16]
            .to_string();
        s
    };
    let mut out = Vec::new();
    match layout {
        Layout::Long => {
            // Channels of a long file are only known by reading it: one shard takes them all.
            for (w, raw) in windows(1) {
                out.push(shard(None, w, rows, raw));
            }
        }
        Layout::Wide => {
            let channels: Vec<String> = match &mapping.channels {
                Some(c) => names
                    .iter()
                    .filter(|n| c.iter().any(|x| x == *n))
                    .map(|n| n.to_string())
                    .collect(),
                None => names
                    .iter()
                    .filter(|n| **n != mapping.time_column)
                    .map(|n| n.to_string())
                    .collect(),
            };
            let per_channel = rows * RAW_BYTES_PER_SAMPLE;
            let mut group: Vec<String> = Vec::new();
            for c in channels {
                if per_channel > shard_bytes {
                    for (w, raw) in windows(1) {
                        out.push(shard(Some(vec![c.clone()]), w, rows, raw));
                    }
                    continue;
                }
                if !group.is_empty() && (group.len() as u64 + 1) * per_channel > shard_bytes {
                    let raw = group.len() as u64 * per_channel;
                    out.push(shard(Some(std::mem::take(&mut group)), None, rows, raw));
                }
                group.push(c);
            }
            if !group.is_empty() {
                let raw = group.len() as u64 * per_channel;
                out.push(shard(Some(group), None, rows, raw));
            }
        }
    }
    Ok(out)
}

/// Time windows of `[from, to)` ns at row-group boundaries, each near `shard_bytes` of raw
/// samples of `channels` channels (the whole file: `(None, raw)` when it fits, when the
/// row groups' time statistics are missing, or when row groups overlap in time).
#[allow(clippy::type_complexity)]
fn time_windows(
    meta: &ParquetMetaData,
    schema: &arrow::datatypes::Schema,
    mapping: &crate::source::Mapping,
    rows: u64,
    channels: u64,
    shard_bytes: u64,
) -> Vec<(Option<(i64, i64)>, u64)> {
    let whole = vec![(None, rows * channels * RAW_BYTES_PER_SAMPLE)];
    if rows * channels * RAW_BYTES_PER_SAMPLE <= shard_bytes {
        return whole;
    }
    let scale = match schema
        .field_with_name(&mapping.time_column)
        .map(|f| f.data_type().clone())
    {
        Ok(arrow::datatypes::DataType::Timestamp(u, _)) => match u {
            arrow::datatypes::TimeUnit::Second => 1_000_000_000,
            arrow::datatypes::TimeUnit::Millisecond => 1_000_000,
            arrow::datatypes::TimeUnit::Microsecond => 1_000,
            arrow::datatypes::TimeUnit::Nanosecond => 1,
        },
        Ok(arrow::datatypes::DataType::Int64) => 1i64,
        _ => return whole,
    };
    let descr = meta.file_metadata().schema_descr();
    let Some(col) =
        (0..descr.num_columns()).find(|&i| descr.column(i).name() == mapping.time_column)
    else {
        return whole;
    };
    let mut groups = Vec::new();
    for rg in meta.row_groups() {
        let Some(Statistics::Int64(s)) = rg.column(col).statistics() else {
            return whole;
        };
        let (Some(&lo), Some(&hi)) = (s.min_opt(), s.max_opt()) else {
            return whole;
        };
        let (Some(lo), Some(hi)) = (lo.checked_mul(scale), hi.checked_mul(scale)) else {
            return whole;
        };
        groups.push((lo, hi, rg.num_rows().max(0) as u64));
    }
    if groups.windows(2).any(|w| w[0].1 > w[1].0) {
        return whole;
    }
    let rows_per_window = (shard_bytes / (channels * RAW_BYTES_PER_SAMPLE)).max(1);
    let mut out: Vec<(Option<(i64, i64)>, u64)> = Vec::new();
    let mut start = i64::MIN;
    let mut taken = 0u64;
    for (i, &(_, _, n)) in groups.iter().enumerate() {
        taken += n;
        let next = groups.get(i + 1).map(|g| g.0);
        match next {
            Some(next_lo) if taken + groups[i + 1].2 > rows_per_window && next_lo > start => {
                out.push((
                    Some((start, next_lo)),
                    taken * channels * RAW_BYTES_PER_SAMPLE,
                ));
                start = next_lo;
                taken = 0;
            }
            Some(_) => {}
            None => out.push((
                Some((start, i64::MAX)),
                taken * channels * RAW_BYTES_PER_SAMPLE,
            )),
        }
    }
    if out.len() <= 1 {
        return whole;
    }
    out
}
