//! Committing a plan's parts (checked against their digests, then the manifest) and reading
//! a committed plan as one archive.

use std::path::PathBuf;

use bytes::Bytes;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::fsio::{digest_path, sha256_hex};
use crate::store::{Location, Put};

use super::{digest_text, part_name, Plan, Shard, MANIFEST_FORMAT, MANIFEST_NAME};

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
