//! Object storage: where sources, plans, parts and manifests live, as local paths or URLs
//! (`file://`, `s3://`, `gs://`, `az://` and `abfs://`), through the `object_store` crate.
//!
//! - Credentials and endpoints come from the usual environment variables of each store
//!   (`AWS_ACCESS_KEY_ID`, `AWS_SECRET_ACCESS_KEY`, `AWS_REGION`, `AWS_ENDPOINT_URL`,
//!   `AWS_ALLOW_HTTP`; `GOOGLE_SERVICE_ACCOUNT`, …; `AZURE_STORAGE_ACCOUNT_NAME`, …).
//! - Writes that publish something are create-only ([`Location::put_create`]): one put, which
//!   either makes the object whole or leaves nothing, and never replaces what is there.
//! - Failures are [`Error::Storage`], marked retryable when waiting could help (network,
//!   throttling, timeouts, the store's own errors) and permanent when it cannot (a missing
//!   object, a refused credential, a bad path).
//!
//! The calls block: each runs on one small runtime shared by the process.
//!
//! Does not: know what the bytes are (Parquet, JSON), or decide names.

use std::path::{Path, PathBuf};
use std::sync::{Arc, OnceLock};

use bytes::Bytes;
use futures::TryStreamExt;
use object_store::path::Path as ObjectPath;
use object_store::{
    ObjectStore, ObjectStoreExt, ObjectStoreScheme, PutMode, PutOptions, PutPayload,
};

use crate::error::{Error, Result};

/// The runtime every storage call runs on, started on first use; why it could not start
/// (the process could not spawn its threads), then and on every later call.
fn runtime() -> std::result::Result<&'static tokio::runtime::Runtime, &'static str> {
    static RT: OnceLock<std::result::Result<tokio::runtime::Runtime, String>> = OnceLock::new();
    RT.get_or_init(|| {
        tokio::runtime::Builder::new_multi_thread()
            .worker_threads(2)
            .thread_name("cyclarc-storage")
            .enable_all()
            .build()
            .map_err(|e| format!("the storage runtime did not start: {e}"))
    })
    .as_ref()
    .map_err(String::as_str)
}

/// A place for one object (or a folder of them): a local path or a URL.
#[derive(Clone)]
pub struct Location {
    /// As the user wrote it, or as joined from it (for messages and plans).
    pub text: String,
    store: Arc<dyn ObjectStore>,
    path: ObjectPath,
    /// The local file, when the location is on this machine.
    local: Option<PathBuf>,
}

impl std::fmt::Debug for Location {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.text)
    }
}

/// What a create-only put found.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Put {
    /// The object was created.
    Created,
    /// An object was already there; nothing was written.
    Exists,
}

/// An object found by a listing: its location, size and version tag.
#[derive(Debug, Clone)]
pub struct Found {
    /// Where.
    pub location: Location,
    /// Bytes.
    pub size: u64,
    /// The store's version tag (ETag), when it gives one.
    pub e_tag: Option<String>,
}

/// Whether a text names an object store (a URL with a scheme cyclarc reads) rather than a
/// local path.
pub fn is_url(text: &str) -> bool {
    [
        "file://", "s3://", "s3a://", "gs://", "az://", "adl://", "azure://", "abfs://", "abfss://",
    ]
    .iter()
    .any(|p| text.starts_with(p))
}

fn storage(text: &str, e: impl std::fmt::Display, retryable: bool) -> Error {
    Error::Storage {
        location: text.to_string(),
        reason: e.to_string(),
        retryable,
    }
}

/// A storage failure as an [`Error`]: missing objects, bad paths and refused credentials are
/// permanent; the rest (network, throttling, timeouts, 5xx) may pass.
fn classify(text: &str, e: object_store::Error) -> Error {
    use object_store::Error as E;
    let permanent = matches!(
        e,
        E::NotFound { .. }
            | E::InvalidPath { .. }
            | E::NotSupported { .. }
            | E::NotImplemented { .. }
            | E::PermissionDenied { .. }
            | E::Unauthenticated { .. }
            | E::UnknownConfigurationKey { .. }
    );
    storage(text, e, !permanent)
}

impl Location {
    /// Parse a local path or a URL.
    pub fn parse(text: &str) -> Result<Location> {
        if !is_url(text) || text.starts_with("file://") {
            let local = match text.strip_prefix("file://") {
                Some(p) => PathBuf::from(p),
                None => PathBuf::from(text),
            };
            let abs = std::path::absolute(&local).map_err(|e| storage(text, e, false))?;
            let path = ObjectPath::from_absolute_path(&abs).map_err(|e| storage(text, e, false))?;
            let store: Arc<dyn ObjectStore> = Arc::new(object_store::local::LocalFileSystem::new());
            return Ok(Location {
                text: text.to_string(),
                store,
                path,
                local: Some(abs),
            });
        }
        let url = url::Url::parse(text).map_err(|e| storage(text, e, false))?;
        let (scheme, path) =
            ObjectStoreScheme::parse(&url).map_err(|e| classify(text, e.into()))?;
        let bucket_url = url[..url::Position::BeforePath].to_string();
        let store: Arc<dyn ObjectStore> = match scheme {
            ObjectStoreScheme::AmazonS3 => Arc::new(
                object_store::aws::AmazonS3Builder::from_env()
                    .with_url(&bucket_url)
                    .build()
                    .map_err(|e| classify(text, e))?,
            ),
            ObjectStoreScheme::GoogleCloudStorage => Arc::new(
                object_store::gcp::GoogleCloudStorageBuilder::from_env()
                    .with_url(&bucket_url)
                    .build()
                    .map_err(|e| classify(text, e))?,
            ),
            ObjectStoreScheme::MicrosoftAzure => Arc::new(
                object_store::azure::MicrosoftAzureBuilder::from_env()
                    .with_url(&bucket_url)
                    .build()
                    .map_err(|e| classify(text, e))?,
            ),
            other => {
                return Err(storage(
                    text,
                    format!("{other:?} is not a store cyclarc reads"),
                    false,
                ))
            }
        };
        Ok(Location {
            text: text.to_string(),
            store,
            path,
            local: None,
        })
    }

    /// The local file, when the location is on this machine.
    pub fn local(&self) -> Option<&Path> {
        self.local.as_deref()
    }

    /// The last part of the path (a file name).
    pub fn file_name(&self) -> String {
        self.path.filename().unwrap_or_default().to_string()
    }

    /// A location under this one (`name` may hold `/`).
    pub fn join(&self, name: &str) -> Location {
        let mut path = self.path.clone();
        for part in name.split('/').filter(|p| !p.is_empty()) {
            path = path.clone().join(part);
        }
        Location {
            text: format!("{}/{}", self.text.trim_end_matches('/'), name),
            store: self.store.clone(),
            path,
            local: self.local.as_ref().map(|l| l.join(name)),
        }
    }

    /// Run a storage call to completion; an error names this location when the runtime
    /// cannot start (retryable: it is the process's resources, not the object).
    fn block_on<F: std::future::Future>(&self, f: F) -> Result<F::Output> {
        let rt = runtime().map_err(|reason| Error::Storage {
            location: self.text.clone(),
            reason: reason.to_string(),
            retryable: true,
        })?;
        Ok(rt.block_on(f))
    }

    /// The object's bytes.
    pub fn get(&self) -> Result<Bytes> {
        self.block_on(async {
            let r = self.store.get(&self.path).await?;
            r.bytes().await
        })?
        .map_err(|e| classify(&self.text, e))
    }

    /// A range of the object's bytes.
    pub fn get_range(&self, range: std::ops::Range<u64>) -> Result<Bytes> {
        self.block_on(self.store.get_range(&self.path, range))?
            .map_err(|e| classify(&self.text, e))
    }

    /// Size and version tag, or `None` when there is no object.
    pub fn head(&self) -> Result<Option<(u64, Option<String>)>> {
        match self.block_on(self.store.head(&self.path))? {
            Ok(m) => Ok(Some((m.size, m.e_tag))),
            Err(object_store::Error::NotFound { .. }) => Ok(None),
            Err(e) => Err(classify(&self.text, e)),
        }
    }

    /// Create the object with these bytes in one put, unless one is there already.
    pub fn put_create(&self, bytes: Bytes) -> Result<Put> {
        if let Some(parent) = self.local.as_ref().and_then(|l| l.parent()) {
            std::fs::create_dir_all(parent).map_err(|e| Error::Write {
                file: parent.to_path_buf(),
                source: e,
            })?;
        }
        let opts = PutOptions {
            mode: PutMode::Create,
            ..Default::default()
        };
        match self.block_on(
            self.store
                .put_opts(&self.path, PutPayload::from_bytes(bytes), opts),
        )? {
            Ok(_) => Ok(Put::Created),
            Err(object_store::Error::AlreadyExists { .. }) => Ok(Put::Exists),
            Err(e) => Err(classify(&self.text, e)),
        }
    }

    /// The object as a local file: itself when local, else downloaded into `dir`.
    pub fn fetch(&self, dir: &Path) -> Result<PathBuf> {
        if let Some(l) = &self.local {
            return Ok(l.clone());
        }
        let bytes = self.get()?;
        // Under its own name (archives record the source's name), in a folder named by a
        // hash of the location, so that two sources of one name do not meet.
        let tag = crate::fsio::sha256_hex(self.text.as_bytes());
        let folder = dir.join(&tag[..16]);
        std::fs::create_dir_all(&folder).map_err(|e| Error::Write {
            file: folder.clone(),
            source: e,
        })?;
        let out = folder.join(self.file_name());
        std::fs::write(&out, &bytes).map_err(|e| Error::Write {
            file: out.clone(),
            source: e,
        })?;
        Ok(out)
    }

    /// Objects under this location's folder whose names (relative to it) match a glob
    /// pattern, in name order; as in a shell, `*` and `?` do not match `/`.
    pub fn list_matching(&self, pattern: &glob::Pattern) -> Result<Vec<Found>> {
        let prefix = self.path.clone();
        let listed: Vec<object_store::ObjectMeta> = self
            .block_on(self.store.list(Some(&prefix)).try_collect())?
            .map_err(|e| classify(&self.text, e))?;
        let base = prefix.as_ref().len();
        let mut out: Vec<Found> = listed
            .into_iter()
            .filter_map(|m| {
                let full = m.location.as_ref();
                let rel = full.get(base..)?.trim_start_matches('/').to_string();
                let opts = glob::MatchOptions {
                    require_literal_separator: true,
                    ..Default::default()
                };
                pattern.matches_with(&rel, opts).then(|| Found {
                    location: self.join(&rel),
                    size: m.size,
                    e_tag: m.e_tag,
                })
            })
            .collect();
        out.sort_by(|a, b| a.location.text.cmp(&b.location.text));
        Ok(out)
    }
}
