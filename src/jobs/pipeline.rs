//! Pipeline: run a declarative job (`pipelines/*.toml`) over many sources — globs, per-source
//! layout mapping, budget rules per channel, the output folder, verify-after-write — with a
//! manifest so that reruns skip inputs already archived with the same settings. One bad input
//! is reported and the rest still run. A lock file keeps two runs on the same output folder
//! from interleaving; stale temporary files from killed runs are removed at the start.
//!
//! Relative paths in a pipeline file are relative to the file's own folder.
//!
//! Does not: make codec decisions (it calls the encode job).

use std::collections::BTreeMap;
use std::fs::File;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::fsio::{check_output, digest_path, sha256_file, sync_dir, write_atomic};
use crate::jobs::encode::{encode_file, EncodeSummary, JobControl};
use crate::jobs::verify::verify;
use crate::options::EncodeOptions;
use crate::signal::RealFft;

/// Name of the manifest in the output folder.
pub const MANIFEST: &str = "cyclarc-manifest.json";

/// Name of the lock file in the output folder.
pub const LOCK: &str = ".cyclarc.lock";

/// Suffix of archive names: `SOURCE_STEM.cyclarc.parquet`.
pub const ARCHIVE_SUFFIX: &str = ".cyclarc.parquet";

/// A pipeline file.
#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct PipelineFile {
    /// Output folder for archives and the manifest.
    pub output: PathBuf,
    /// Verify each archive against its source after writing. Default true.
    #[serde(default = "yes")]
    pub verify: bool,
    /// Encode settings for every source.
    #[serde(default)]
    pub encode: EncodeOptions,
    /// Source groups.
    #[serde(rename = "source")]
    pub sources: Vec<SourceGroup>,
}

fn yes() -> bool {
    true
}

/// A group of sources sharing a layout mapping and overrides.
#[derive(Debug, Clone, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct SourceGroup {
    /// Paths or glob patterns.
    pub paths: Vec<String>,
    /// Settings that replace the pipeline's `[encode]` for these sources.
    #[serde(default)]
    pub encode: EncodeOptions,
}

/// One manifest entry.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ManifestEntry {
    /// Source path as resolved.
    pub source: String,
    /// Source SHA-256.
    pub source_sha256: String,
    /// Settings fingerprint.
    pub settings: String,
    /// Archive file name in the output folder.
    pub archive: String,
    /// Archive SHA-256.
    pub archive_sha256: String,
}

/// The manifest: archive name → entry.
pub type Manifest = BTreeMap<String, ManifestEntry>;

/// What happened to one source.
#[derive(Debug, Clone, Serialize)]
#[serde(tag = "status", rename_all = "lowercase")]
pub enum SourceOutcome {
    /// Archived now.
    Archived {
        /// Source.
        source: PathBuf,
        /// Encode summary.
        summary: EncodeSummary,
        /// `Some(true)` when verify-after-write is on (an archive that fails it is taken
        /// back and reported as `Failed`), `None` when it is off.
        verified: Option<bool>,
    },
    /// Already archived with the same settings.
    Skipped {
        /// Source.
        source: PathBuf,
        /// Archive.
        archive: PathBuf,
    },
    /// Failed; the rest of the run went on.
    Failed {
        /// Source.
        source: PathBuf,
        /// The error.
        error: String,
        /// Its exit code.
        code: i32,
    },
}

/// The result of a pipeline run.
#[derive(Debug, Clone, Serialize)]
pub struct RunReport {
    /// Pipeline file.
    pub pipeline: PathBuf,
    /// Output folder.
    pub output: PathBuf,
    /// Per source.
    pub sources: Vec<SourceOutcome>,
}

impl RunReport {
    /// Exit status: 0 when all succeeded, else the first failure's code.
    pub fn exit_code(&self) -> i32 {
        self.sources
            .iter()
            .find_map(|s| match s {
                SourceOutcome::Failed { code, .. } => Some(*code),
                _ => None,
            })
            .unwrap_or(0)
    }
}

/// Load and validate a pipeline file.
pub fn load(path: &Path) -> Result<PipelineFile> {
    let text = std::fs::read_to_string(path).map_err(|e| Error::Open {
        file: path.to_path_buf(),
        source: e,
    })?;
    let p: PipelineFile = toml::from_str(&text).map_err(|e| Error::Pipeline {
        file: path.to_path_buf(),
        reason: e.to_string(),
    })?;
    if p.sources.is_empty() {
        return Err(Error::Pipeline {
            file: path.to_path_buf(),
            reason: "no [[source]] groups".into(),
        });
    }
    // Validate every group's settings now, before any work.
    for g in &p.sources {
        p.encode.overlay(&g.encode).resolve()?;
    }
    Ok(p)
}

/// A path of a pipeline file, relative to the file's folder, with `a/../b` folded.
pub fn resolve_rel(base: &Path, p: &Path) -> PathBuf {
    let joined = if p.is_absolute() {
        p.to_path_buf()
    } else {
        base.join(p)
    };
    // Fold `a/../b` into `b` so that paths in reports read naturally.
    let mut out = PathBuf::new();
    for c in joined.components() {
        match c {
            std::path::Component::ParentDir
                if matches!(
                    out.components().next_back(),
                    Some(std::path::Component::Normal(_))
                ) =>
            {
                out.pop();
            }
            std::path::Component::CurDir => {}
            other => out.push(other.as_os_str()),
        }
    }
    if out.as_os_str().is_empty() {
        PathBuf::from(".")
    } else {
        out
    }
}

/// Expand a group's paths and globs (sorted, deduplicated).
fn expand(base: &Path, pipeline: &Path, g: &SourceGroup) -> Result<Vec<PathBuf>> {
    let mut out = Vec::new();
    for pat in &g.paths {
        let full = resolve_rel(base, Path::new(pat));
        let s = full.to_string_lossy();
        if s.contains(['*', '?', '[']) {
            let paths = glob::glob(&s).map_err(|e| Error::Pipeline {
                file: pipeline.to_path_buf(),
                reason: format!("pattern `{pat}`: {e}"),
            })?;
            let mut found: Vec<PathBuf> = paths
                .filter_map(|p| p.ok())
                .filter(|p| !is_own_output(p))
                .collect();
            found.sort();
            out.extend(found);
        } else {
            out.push(full);
        }
    }
    out.dedup();
    Ok(out)
}

/// Whether a file is one that cyclarc writes (an archive, its digest, a manifest, a lock or
/// a temporary file): a pattern that also matches the output folder never takes them as
/// sources.
pub fn is_own_output(path: &Path) -> bool {
    let Some(name) = path.file_name().map(|n| n.to_string_lossy()) else {
        return false;
    };
    name.ends_with(ARCHIVE_SUFFIX)
        || name.ends_with(&format!("{ARCHIVE_SUFFIX}.sha256"))
        || name == MANIFEST
        || name == LOCK
        || (name.starts_with('.') && name.contains(".cyclarc-tmp."))
}

/// Archive file name for a source: `STEM.cyclarc.parquet`.
pub fn archive_name(source: &Path) -> String {
    let stem = source
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "source".into());
    format!("{stem}{ARCHIVE_SUFFIX}")
}

fn read_manifest(dir: &Path) -> Manifest {
    std::fs::read_to_string(dir.join(MANIFEST))
        .ok()
        .and_then(|t| serde_json::from_str(&t).ok())
        .unwrap_or_default()
}

fn write_manifest(dir: &Path, m: &Manifest) -> Result<()> {
    let path = dir.join(MANIFEST);
    let text = serde_json::to_string_pretty(m).unwrap_or_default();
    write_atomic(&path, |f| {
        use std::io::Write;
        f.write_all(text.as_bytes()).map_err(|e| Error::Write {
            file: path.clone(),
            source: e,
        })
    })
}

/// Remove temporary files left by killed runs.
fn clean_stale(dir: &Path) {
    if let Ok(entries) = std::fs::read_dir(dir) {
        for e in entries.flatten() {
            let name = e.file_name().to_string_lossy().into_owned();
            if name.starts_with('.') && name.contains(".cyclarc-tmp.") {
                let _ = std::fs::remove_file(e.path());
            }
        }
    }
}

/// Take a published archive and its digest back (the archive first: a crash in between
/// leaves a digest with no archive, never an unverified archive under its name).
fn withdraw(archive: &Path) -> Result<()> {
    for p in [archive.to_path_buf(), digest_path(archive)] {
        match std::fs::remove_file(&p) {
            Ok(()) => {}
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
            Err(e) => return Err(Error::Write { file: p, source: e }),
        }
    }
    sync_dir(archive).map_err(|e| Error::Write {
        file: archive.to_path_buf(),
        source: e,
    })
}

/// Run a pipeline file.
pub fn run(path: &Path, control: &JobControl) -> Result<RunReport> {
    let p = load(path)?;
    let base = path
        .parent()
        .filter(|b| !b.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let out_dir = resolve_rel(base, &p.output);
    std::fs::create_dir_all(&out_dir).map_err(|e| Error::Write {
        file: out_dir.clone(),
        source: e,
    })?;
    let lock_path = out_dir.join(LOCK);
    // The lock and the manifest are the run's own files: refuse the whole run when either
    // is something else (a FIFO would block, a device would be replaced).
    check_output(&lock_path)?;
    check_output(&out_dir.join(MANIFEST))?;
    let lock = File::create(&lock_path).map_err(|e| Error::Write {
        file: lock_path.clone(),
        source: e,
    })?;
    // Held until the end of the run; a second run on the same folder waits here.
    lock.lock().map_err(|e| Error::Write {
        file: lock_path.clone(),
        source: e,
    })?;
    clean_stale(&out_dir);
    let mut manifest = read_manifest(&out_dir);
    let mut outcomes = Vec::new();
    let mut names_used: BTreeMap<String, PathBuf> = BTreeMap::new();
    for g in &p.sources {
        let opts = p.encode.overlay(&g.encode);
        let settings = opts.resolve()?;
        let fingerprint = settings.fingerprint();
        for src in expand(base, path, g)? {
            crate::stop::check()?;
            let name = archive_name(&src);
            if let Some(other) = names_used.get(&name) {
                outcomes.push(SourceOutcome::Failed {
                    source: src.clone(),
                    error: format!(
                        "archive name {name} is already used by {} in this run",
                        other.display()
                    ),
                    code: 2,
                });
                continue;
            }
            names_used.insert(name.clone(), src.clone());
            let archive = out_dir.join(&name);
            let outcome = (|| -> Result<SourceOutcome> {
                let (sha, _) = sha256_file(&src)?;
                if let Some(e) = manifest.get(&name) {
                    let archive_ok = archive.exists()
                        && sha256_file(&archive).is_ok_and(|(a, _)| a == e.archive_sha256);
                    if e.source_sha256 == sha && e.settings == fingerprint && archive_ok {
                        return Ok(SourceOutcome::Skipped {
                            source: src.clone(),
                            archive: archive.clone(),
                        });
                    }
                    // The archive is about to be replaced: drop its entry first, so that a
                    // run killed midway never leaves an entry that does not match the file.
                    manifest.remove(&name);
                    write_manifest(&out_dir, &manifest)?;
                }
                let summary = encode_file(&src, &archive, &settings, control)?;
                let verified = if p.verify {
                    let checked = verify(&archive, &src, RealFft::shared());
                    match checked {
                        Ok(r) if r.passed() => Some(true),
                        failed => {
                            // An archive that does not verify is not kept under its name.
                            withdraw(&archive)?;
                            let why = match failed {
                                Ok(r) => r
                                    .findings
                                    .iter()
                                    .map(|f| f.to_string())
                                    .collect::<Vec<_>>()
                                    .join("; "),
                                Err(e) => e.to_string(),
                            };
                            return Err(Error::Unverified {
                                file: archive.clone(),
                                reason: why,
                            });
                        }
                    }
                } else {
                    None
                };
                manifest.insert(
                    name.clone(),
                    ManifestEntry {
                        source: src.to_string_lossy().into_owned(),
                        source_sha256: sha,
                        settings: fingerprint.clone(),
                        archive: name.clone(),
                        archive_sha256: summary.archive_sha256.clone(),
                    },
                );
                write_manifest(&out_dir, &manifest)?;
                Ok(SourceOutcome::Archived {
                    source: src.clone(),
                    summary,
                    verified,
                })
            })();
            if let Err(Error::Interrupted) = outcome {
                return Err(Error::Interrupted);
            }
            outcomes.push(outcome.unwrap_or_else(|e| SourceOutcome::Failed {
                source: src.clone(),
                code: e.exit_code(),
                error: e.to_string(),
            }));
        }
    }
    Ok(RunReport {
        pipeline: path.to_path_buf(),
        output: out_dir,
        sources: outcomes,
    })
}
