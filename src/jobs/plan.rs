//! Past one machine: a night's sources cut into shards (`plan`), the shards done anywhere and
//! in any order (`run PLAN --shard I/N`), and the parts checked and published as one
//! (`commit`). An engine (Apache Spark, a Kubernetes Indexed Job, a Slurm array) only
//! schedules and retries the three commands; the sources, the plan, the parts and the
//! manifest can live in object storage ([`crate::store`]).
//!
//! - **Plan.** The job file's sources (paths, globs, URLs) are listed and only their Parquet
//!   footers read. Each source becomes shards of (source, channel set, time window) near
//!   [`DEFAULT_SHARD_BYTES`] of raw samples (4 bytes a sample): channels are independent, so
//!   a wide source's channels are grouped into shards in column order; a time cut, at
//!   row-group boundaries, happens only when one channel of one file (or a whole long-layout
//!   file) is larger than that. A shard's id is a hash of the source's identity (location,
//!   size, version tag) and of what the shard takes. The plan is JSON, deterministic, and its
//!   `hash` covers every other byte of it; the parts go to `OUTPUT/parts/HASH/`.
//! - **Run.** A shard whose part exists and matches its digest is done already (a no-op). Else
//!   the source (checked against the size and version tag the plan recorded) is fetched,
//!   encoded with the shard's settings, verified against it when the job says so, and
//!   published as `ID.cyclarc.parquet` and then its digest `ID.cyclarc.parquet.sha256`, each
//!   in one create-only put: a killed shard leaves nothing under the final names, and a
//!   retried one writes the same bytes (encoding is deterministic).
//! - **Commit.** Every part's bytes are checked against its digest, then the manifest
//!   (`OUTPUT/parts/HASH/manifest.json`: each part with its size and SHA-256) is created, once:
//!   a second commit finds it and changes nothing.
//! - **Read.** `decode`, `verify`, `inspect` and `trend` take a committed plan in place of an
//!   archive: its parts, checked against the manifest, read as one archive.
//!
//! A time cut starts a new run at the cut (a segment never spans it), so an archive cut in
//! time decodes within the same budgets as one that is not, but not to the same values;
//! channel cuts change nothing (a block depends only on its own channel's samples).
//!
//! Does not: schedule, retry or launch anything (the engine does), or make codec decisions.

use std::path::{Path, PathBuf};

use bytes::Bytes;
use parquet::file::metadata::{ParquetMetaData, ParquetMetaDataReader};
use parquet::file::statistics::Statistics;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result, EXIT_RETRY};
use crate::fsio::{digest_path, sha256_hex};
use crate::jobs::control::JobControl;
use crate::jobs::encode::encode_file;
use crate::jobs::pipeline::{self, is_own_output, ARCHIVE_SUFFIX};
use crate::jobs::verify::verify;
use crate::model::Layout;
use crate::options::EncodeOptions;
use crate::signal::RealFft;
use crate::store::{is_url, Location, Put};

/// What a plan file says it is.
pub const PLAN_FORMAT: &str = "cyclarc-plan 1";
/// What a manifest says it is.
pub const MANIFEST_FORMAT: &str = "cyclarc-manifest 1";
/// Raw samples (4 bytes each) a shard aims at: 1 GiB.
pub const DEFAULT_SHARD_BYTES: u64 = 1 << 30;
/// Raw bytes of one sample, as shards are sized.
pub const RAW_BYTES_PER_SAMPLE: u64 = 4;
/// The folder under the output that holds each plan's parts.
pub const PARTS_FOLDER: &str = "parts";
/// The manifest's name in a plan's parts folder.
pub const MANIFEST_NAME: &str = "manifest.json";
/// Bytes read from a source's end to find its footer (more when the footer is longer).
const FOOTER_GUESS: u64 = 64 * 1024;

/// A source as the plan saw it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SourceId {
    /// Path or URL.
    pub location: String,
    /// Bytes.
    pub size: u64,
    /// The store's version tag (ETag; for local files, of inode, size and time), if any.
    pub e_tag: Option<String>,
}

/// One shard: a source, the channels it takes, the time window it takes.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Shard {
    /// Stable id (16 hex digits).
    pub id: String,
    /// The source.
    pub source: SourceId,
    /// Channels (wide layout), in column order; `None`: every channel of the source.
    pub channels: Option<Vec<String>>,
    /// Rows with time in `[from, to)` ns; `None`: every row.
    pub window_ns: Option<(i64, i64)>,
    /// Source rows the shard reads (before the window).
    pub rows: u64,
    /// Raw samples the shard takes × 4 bytes (an estimate when cut in time).
    pub raw_bytes: u64,
    /// The settings (the job's `[encode]` with the source group's overrides).
    pub options: EncodeOptions,
}

/// A plan.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Plan {
    /// [`PLAN_FORMAT`].
    pub format: String,
    /// SHA-256 (16 hex digits) of the plan with this field empty.
    pub hash: String,
    /// The job file, as given.
    pub job: String,
    /// Where parts go: `OUTPUT/parts/HASH`.
    pub parts: String,
    /// Verify each part against its source before publishing it.
    pub verify: bool,
    /// Raw bytes a shard aims at.
    pub shard_bytes: u64,
    /// The shards, by source then channel group then window.
    pub shards: Vec<Shard>,
}

impl Plan {
    /// The plan's bytes as written (pretty JSON, a newline at the end).
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut v = serde_json::to_vec_pretty(self).unwrap_or_default();
        v.push(b'\n');
        v
    }

    fn computed_hash(&self) -> String {
        let mut unhashed = self.clone();
        unhashed.hash = String::new();
        unhashed.parts = String::new();
        sha256_hex(&unhashed.to_bytes())[..16].to_string()
    }

    /// Read and check a plan (a path or URL).
    pub fn read(text: &str) -> Result<Plan> {
        let bytes = Location::parse(text)?.get()?;
        let plan: Plan = serde_json::from_slice(&bytes).map_err(|e| Error::Plan {
            plan: text.to_string(),
            reason: format!("not a plan: {e}"),
        })?;
        if plan.format != PLAN_FORMAT {
            return Err(Error::Plan {
                plan: text.to_string(),
                reason: format!("format `{}`, this build reads `{PLAN_FORMAT}`", plan.format),
            });
        }
        if plan.computed_hash() != plan.hash {
            return Err(Error::Plan {
                plan: text.to_string(),
                reason: "its hash does not match its content (edited after it was made)".into(),
            });
        }
        Ok(plan)
    }

    fn parts_location(&self) -> Result<Location> {
        Location::parse(&self.parts)
    }
}

/// Whether a reader's argument names a plan (`*.json`) rather than an archive.
pub fn is_plan(text: &str) -> bool {
    text.ends_with(".json")
}

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

/// Which shards a `run` does.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Selection {
    /// Every shard.
    All,
    /// Shards I, I+N, I+2N, … (0-based).
    Every {
        /// I.
        index: usize,
        /// N.
        count: usize,
    },
    /// The shard with this id.
    Id(String),
}

impl std::str::FromStr for Selection {
    type Err = String;
    /// `I/N`.
    fn from_str(s: &str) -> std::result::Result<Self, String> {
        let (i, n) = s
            .split_once('/')
            .ok_or_else(|| format!("`{s}` is not I/N"))?;
        let (index, count): (usize, usize) = (
            i.trim()
                .parse()
                .map_err(|_| format!("`{i}` is not a shard index"))?,
            n.trim()
                .parse()
                .map_err(|_| format!("`{n}` is not a shard count"))?,
        );
        if count == 0 || index >= count {
            return Err(format!("`{s}`: I must be 0 … N−1, N at least 1"));
        }
        Ok(Selection::Every { index, count })
    }
}

/// What happened to one shard.
#[derive(Debug, Clone, Serialize)]
#[serde(tag = "status", rename_all = "lowercase")]
pub enum ShardOutcome {
    /// Encoded and published now.
    Done {
        /// Shard id.
        id: String,
        /// Part bytes.
        bytes: u64,
        /// Samples encoded.
        samples: u64,
        /// Seconds it took (fetch, encode, verify, publish).
        seconds: f64,
    },
    /// Its part was there and matches its digest: nothing to do.
    Present {
        /// Shard id.
        id: String,
    },
    /// Failed; the other shards went on.
    Failed {
        /// Shard id.
        id: String,
        /// The error.
        error: String,
        /// Its exit code.
        code: i32,
    },
}

/// What `run PLAN` did.
#[derive(Debug, Clone, Serialize)]
pub struct ShardRun {
    /// The plan.
    pub plan: String,
    /// Its hash.
    pub hash: String,
    /// One entry per shard done, in plan order.
    pub shards: Vec<ShardOutcome>,
}

impl ShardRun {
    /// The exit code: 0, or that of the failure a scheduler should see first — a permanent
    /// one (2, then 1) over a write failure (3) over a temporary one (75) over an interrupt.
    pub fn exit_code(&self) -> i32 {
        let codes: Vec<i32> = self
            .shards
            .iter()
            .filter_map(|s| match s {
                ShardOutcome::Failed { code, .. } => Some(*code),
                _ => None,
            })
            .collect();
        [2, 1, 3, EXIT_RETRY, 4]
            .into_iter()
            .find(|c| codes.contains(c))
            .or(codes.first().copied())
            .unwrap_or(0)
    }
}

/// Do the selected shards of a plan.
pub fn run_plan(plan_text: &str, selection: &Selection, control: &JobControl) -> Result<ShardRun> {
    let plan = Plan::read(plan_text)?;
    let picked: Vec<&Shard> =
        match selection {
            Selection::All => plan.shards.iter().collect(),
            Selection::Every { index, count } => plan
                .shards
                .iter()
                .enumerate()
                .filter(|(k, _)| k % count == *index)
                .map(|(_, s)| s)
                .collect(),
            Selection::Id(id) => {
                let s = plan.shards.iter().find(|s| &s.id == id).ok_or_else(|| {
                    Error::InvalidOption {
                        name: "shard-id".into(),
                        reason: format!("{plan_text} has no shard `{id}`"),
                    }
                })?;
                vec![s]
            }
        };
    let parts = plan.parts_location()?;
    let mut shards = Vec::new();
    for s in picked {
        let outcome = match run_shard(&plan, s, &parts, control) {
            Ok(o) => o,
            Err(Error::Interrupted) => return Err(Error::Interrupted),
            Err(e) => ShardOutcome::Failed {
                id: s.id.clone(),
                error: e.to_string(),
                code: e.exit_code(),
            },
        };
        shards.push(outcome);
    }
    Ok(ShardRun {
        plan: plan_text.to_string(),
        hash: plan.hash,
        shards,
    })
}

fn part_name(id: &str) -> String {
    format!("{id}{ARCHIVE_SUFFIX}")
}

/// The text of a digest file: as `encode` writes it beside an archive.
fn digest_text(sha: &str, name: &str) -> String {
    format!("{sha}  {name}\n")
}

/// A part that exists: done when its digest matches; its digest written when missing (a run
/// stopped between the two puts); damage when it differs.
fn settle(part: &Location, digest: &Location, id: &str) -> Result<ShardOutcome> {
    let sha = sha256_hex(&part.get()?);
    match digest.head()? {
        Some(_) => {
            let text = String::from_utf8_lossy(&digest.get()?).to_string();
            if text.split_whitespace().next() != Some(sha.as_str()) {
                return Err(Error::Damaged {
                    file: PathBuf::from(&part.text),
                    reason: "its SHA-256 differs from the digest beside it".into(),
                });
            }
        }
        None => {
            digest.put_create(Bytes::from(digest_text(&sha, &part.file_name())))?;
        }
    }
    Ok(ShardOutcome::Present { id: id.to_string() })
}

fn run_shard(
    plan: &Plan,
    s: &Shard,
    parts: &Location,
    control: &JobControl,
) -> Result<ShardOutcome> {
    let started = std::time::Instant::now();
    let name = part_name(&s.id);
    let part = parts.join(&name);
    let digest = parts.join(&format!("{name}.sha256"));
    if part.head()?.is_some() {
        return settle(&part, &digest, &s.id);
    }
    let source = Location::parse(&s.source.location)?;
    let (size, e_tag) = source.head()?.ok_or_else(|| Error::Storage {
        location: s.source.location.clone(),
        reason: "the planned source is gone".into(),
        retryable: false,
    })?;
    if size != s.source.size
        || (e_tag.is_some() && s.source.e_tag.is_some() && e_tag != s.source.e_tag)
    {
        return Err(Error::Plan {
            plan: plan.hash.clone(),
            reason: format!(
                "source {} changed since the plan was made ({} → {size} bytes); make a new plan",
                s.source.location, s.source.size
            ),
        });
    }
    let tmp = tempfile::tempdir().map_err(|e| Error::Write {
        file: std::env::temp_dir(),
        source: e,
    })?;
    let local = source.fetch(tmp.path())?;
    let mut settings = s.options.resolve()?;
    if s.channels.is_some() {
        settings.source.channels = s.channels.clone();
    }
    settings.source.window = s.window_ns;
    let out = tmp.path().join(&name);
    let summary = encode_file(&local, &out, &settings, control)?;
    if plan.verify {
        let r = verify(&out, &local, RealFft::shared())?;
        if !r.passed() {
            return Err(Error::Unverified {
                file: out.clone(),
                reason: format!(
                    "verify against {} failed: {}",
                    s.source.location,
                    r.findings
                        .first()
                        .map_or("see `cyclarc verify`".into(), |f| f.what.clone())
                ),
            });
        }
    }
    let read = |p: &Path| {
        std::fs::read(p).map_err(|e| Error::Open {
            file: p.to_path_buf(),
            source: e,
        })
    };
    let bytes = read(&out)?;
    let dig = read(&digest_path(&out))?;
    if part.put_create(Bytes::from(bytes.clone()))? == Put::Exists {
        // Another attempt published it first: the same bytes, if all is well.
        return settle(&part, &digest, &s.id);
    }
    digest.put_create(Bytes::from(dig))?;
    Ok(ShardOutcome::Done {
        id: s.id.clone(),
        bytes: bytes.len() as u64,
        samples: summary.rows,
        seconds: started.elapsed().as_secs_f64(),
    })
}

/// One part in a manifest.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ManifestPart {
    /// Shard id.
    pub id: String,
    /// File name in the parts folder.
    pub archive: String,
    /// Bytes.
    pub bytes: u64,
    /// SHA-256.
    pub sha256: String,
}

/// The manifest of a committed plan.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    /// [`MANIFEST_FORMAT`].
    pub format: String,
    /// The plan's hash.
    pub plan: String,
    /// Every shard's part, in plan order.
    pub parts: Vec<ManifestPart>,
}

/// What `commit` did.
#[derive(Debug, Clone, Serialize)]
pub struct CommitOutcome {
    /// The plan.
    pub plan: String,
    /// Where the manifest is.
    pub manifest: String,
    /// Whether it was written now (false: it was there already, nothing changed).
    pub written: bool,
    /// Parts.
    pub parts: usize,
    /// Their bytes.
    pub bytes: u64,
}

/// Check every part against its digest and write the manifest, once.
pub fn commit(plan_text: &str) -> Result<CommitOutcome> {
    let plan = Plan::read(plan_text)?;
    let parts = plan.parts_location()?;
    let manifest_at = parts.join(MANIFEST_NAME);
    let outcome = |written: bool, m: &Manifest| CommitOutcome {
        plan: plan_text.to_string(),
        manifest: manifest_at.text.clone(),
        written,
        parts: m.parts.len(),
        bytes: m.parts.iter().map(|p| p.bytes).sum(),
    };
    if manifest_at.head()?.is_some() {
        return Ok(outcome(false, &read_manifest(&plan, &manifest_at)?));
    }
    let mut missing = Vec::new();
    let mut entries = Vec::new();
    for s in &plan.shards {
        let name = part_name(&s.id);
        let part = parts.join(&name);
        let digest = parts.join(&format!("{name}.sha256"));
        let (Some(_), Some(_)) = (part.head()?, digest.head()?) else {
            missing.push(s.id.clone());
            continue;
        };
        let bytes = part.get()?;
        let sha = sha256_hex(&bytes);
        let text = String::from_utf8_lossy(&digest.get()?).to_string();
        if text.split_whitespace().next() != Some(sha.as_str()) {
            return Err(Error::Damaged {
                file: PathBuf::from(&part.text),
                reason: "its SHA-256 differs from the digest beside it".into(),
            });
        }
        entries.push(ManifestPart {
            id: s.id.clone(),
            archive: name,
            bytes: bytes.len() as u64,
            sha256: sha,
        });
    }
    if !missing.is_empty() {
        return Err(Error::ShardsMissing {
            plan: plan_text.to_string(),
            missing,
        });
    }
    let m = Manifest {
        format: MANIFEST_FORMAT.into(),
        plan: plan.hash.clone(),
        parts: entries,
    };
    let mut bytes = serde_json::to_vec_pretty(&m).unwrap_or_default();
    bytes.push(b'\n');
    let written = manifest_at.put_create(Bytes::from(bytes))? == Put::Created;
    Ok(outcome(written, &m))
}

fn read_manifest(plan: &Plan, at: &Location) -> Result<Manifest> {
    let m: Manifest = serde_json::from_slice(&at.get()?).map_err(|e| Error::Plan {
        plan: at.text.clone(),
        reason: format!("not a manifest: {e}"),
    })?;
    if m.format != MANIFEST_FORMAT || m.plan != plan.hash {
        return Err(Error::Plan {
            plan: at.text.clone(),
            reason: format!("not the manifest of plan {}", plan.hash),
        });
    }
    Ok(m)
}

/// A committed plan's parts as local files, checked against the manifest, with the shard each
/// holds (remote parts are fetched into a folder that lives as long as this value).
pub struct Committed {
    /// The plan.
    pub plan: Plan,
    /// (shard, local part) in plan order.
    pub parts: Vec<(Shard, PathBuf)>,
    _fetched: tempfile::TempDir,
}

/// Open a committed plan's parts for reading.
pub fn open_committed(plan_text: &str) -> Result<Committed> {
    let plan = Plan::read(plan_text)?;
    let parts_at = plan.parts_location()?;
    let manifest_at = parts_at.join(MANIFEST_NAME);
    if manifest_at.head()?.is_none() {
        return Err(Error::Plan {
            plan: plan_text.to_string(),
            reason: "not committed yet: run `cyclarc commit` on it first".into(),
        });
    }
    let m = read_manifest(&plan, &manifest_at)?;
    let fetched = tempfile::tempdir().map_err(|e| Error::Write {
        file: std::env::temp_dir(),
        source: e,
    })?;
    let mut parts = Vec::new();
    for p in &m.parts {
        let shard = plan
            .shards
            .iter()
            .find(|s| s.id == p.id)
            .cloned()
            .ok_or_else(|| Error::Plan {
                plan: plan_text.to_string(),
                reason: format!("the manifest lists part {} the plan does not have", p.id),
            })?;
        let at = parts_at.join(&p.archive);
        let local = match at.local() {
            Some(l) => l.to_path_buf(),
            None => {
                // With its digest beside it, so readers check it as they check any archive.
                let l = fetched.path().join(&p.archive);
                let bytes = at.get()?;
                std::fs::write(&l, &bytes).map_err(|e| Error::Write {
                    file: l.clone(),
                    source: e,
                })?;
                let dp = digest_path(&l);
                std::fs::write(&dp, digest_text(&p.sha256, &p.archive)).map_err(|e| {
                    Error::Write {
                        file: dp.clone(),
                        source: e,
                    }
                })?;
                l
            }
        };
        let (sha, _) = crate::fsio::sha256_file(&local)?;
        if sha != p.sha256 {
            return Err(Error::Damaged {
                file: local,
                reason: format!(
                    "its SHA-256 differs from the manifest of plan {}",
                    plan.hash
                ),
            });
        }
        parts.push((shard, local));
    }
    Ok(Committed {
        plan,
        parts,
        _fetched: fetched,
    })
}
