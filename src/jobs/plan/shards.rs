//! Running a plan's shards: each one encoded, verified and published as a part, or found
//! done already.

use std::path::{Path, PathBuf};

use bytes::Bytes;
use serde::Serialize;

use crate::error::{Error, Result, EXIT_RETRY};
use crate::fsio::{digest_path, sha256_hex};
use crate::jobs::control::JobControl;
use crate::jobs::encode::encode_file;
use crate::jobs::verify::verify;
use crate::signal::RealFft;
use crate::store::{Location, Put};

use super::{digest_text, part_name, Plan, Shard};

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
