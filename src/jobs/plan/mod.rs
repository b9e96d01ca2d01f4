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

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::fsio::sha256_hex;
use crate::jobs::pipeline::ARCHIVE_SUFFIX;
use crate::options::EncodeOptions;
use crate::store::Location;

mod commit;
mod cut;
mod shards;

pub use commit::{commit, open_committed, CommitOutcome, Committed, Manifest, ManifestPart};
pub use cut::{make_plan, PlanSummary};
pub use shards::{run_plan, Selection, ShardOutcome, ShardRun};

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

fn part_name(id: &str) -> String {
    format!("{id}{ARCHIVE_SUFFIX}")
}

/// The text of a digest file: as `encode` writes it beside an archive.
fn digest_text(sha: &str, name: &str) -> String {
    format!("{sha}  {name}\n")
}
