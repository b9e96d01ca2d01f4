//! Files: durable, atomic writing (temporary file, fsync, rename, fsync of the folder),
//! refusing outputs that are not regular files, SHA-256 digests beside archives, and opening
//! Parquet files so that the reader's panics on damaged files become errors.
//!
//! Does not: know what is in the files.

use std::fs::File;
use std::io::{Read, Write};
use std::path::{Path, PathBuf};

use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use sha2::{Digest, Sha256};

use crate::error::{Error, Result};

/// SHA-256 (hex) and size of a file.
pub fn sha256_file(path: &Path) -> Result<(String, u64)> {
    let mut f = File::open(path).map_err(|e| Error::Open {
        file: path.to_path_buf(),
        source: e,
    })?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    let mut total = 0u64;
    loop {
        let n = f.read(&mut buf).map_err(|e| Error::Open {
            file: path.to_path_buf(),
            source: e,
        })?;
        if n == 0 {
            break;
        }
        total += n as u64;
        h.update(&buf[..n]);
    }
    Ok((hex(&h.finalize()), total))
}

/// SHA-256 (hex) of bytes in memory.
pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

fn hex(b: &[u8]) -> String {
    b.iter().map(|x| format!("{x:02x}")).collect()
}

/// Refuse an output path that is the source itself.
pub fn refuse_same_file(source: &Path, out: &Path) -> Result<()> {
    let same = match (source.canonicalize(), out.canonicalize()) {
        (Ok(a), Ok(b)) => a == b,
        _ => false,
    };
    if same || source == out {
        return Err(Error::InvalidOption {
            name: "out".into(),
            reason: format!(
                "{} is the source; choose another output (sources are never overwritten)",
                out.display()
            ),
        });
    }
    Ok(())
}

/// Refuse an output path that exists and is not a regular file (a device, FIFO, socket or
/// folder): renaming a finished file onto it would replace it. Checked before anything is
/// written, so nothing appears beside it either.
pub fn check_output(path: &Path) -> Result<()> {
    let Ok(m) = std::fs::metadata(path) else {
        return Ok(());
    };
    if m.is_file() {
        return Ok(());
    }
    let kind = if m.is_dir() {
        "folder"
    } else {
        special_file_kind(&m.file_type())
    };
    Err(Error::NotARegularFile {
        file: path.to_path_buf(),
        kind: kind.into(),
    })
}

#[cfg(unix)]
fn special_file_kind(t: &std::fs::FileType) -> &'static str {
    use std::os::unix::fs::FileTypeExt;
    if t.is_char_device() {
        "character device"
    } else if t.is_block_device() {
        "block device"
    } else if t.is_fifo() {
        "FIFO"
    } else if t.is_socket() {
        "socket"
    } else {
        "special file"
    }
}

#[cfg(not(unix))]
fn special_file_kind(_: &std::fs::FileType) -> &'static str {
    "special file"
}

/// The temporary name an output is written under before it is renamed into place.
pub fn temp_path(out: &Path) -> PathBuf {
    let name = out
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "out".into());
    out.with_file_name(format!(".{name}.cyclarc-tmp.{}", std::process::id()))
}

/// Write a file durably and atomically: temporary file, fsync, rename, fsync of the folder.
/// `write` fills the temporary file. On any failure the temporary file is removed and nothing
/// appears under `out`.
pub fn write_atomic<T>(out: &Path, write: impl FnOnce(&mut File) -> Result<T>) -> Result<T> {
    check_output(out)?;
    let tmp = temp_path(out);
    let werr = |e: std::io::Error| Error::Write {
        file: out.to_path_buf(),
        source: e,
    };
    let result = (|| {
        let mut f = File::create(&tmp).map_err(werr)?;
        let v = write(&mut f)?;
        f.flush().map_err(werr)?;
        // A failed fsync means the data may not be on disk: fail this output, never retry.
        f.sync_all().map_err(werr)?;
        drop(f);
        publish(&tmp, out).map_err(werr)?;
        Ok(v)
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result
}

/// Rename a finished, fsynced temporary file onto `out` and fsync the folder. When the
/// folder's fsync fails the rename may not survive a crash, so the file is taken back
/// (removed): nothing stays published that was not made durable.
pub fn publish(tmp: &Path, out: &Path) -> std::io::Result<()> {
    std::fs::rename(tmp, out)?;
    if let Err(e) = sync_dir(out) {
        let _ = std::fs::remove_file(out);
        let _ = sync_dir(out);
        return Err(e);
    }
    Ok(())
}

/// Remove a file if it exists (and fsync its folder); a missing file is fine.
pub fn remove_if_present(path: &Path) -> std::io::Result<()> {
    match std::fs::remove_file(path) {
        Ok(()) => sync_dir(path),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
        Err(e) => Err(e),
    }
}

/// fsync the folder holding `path`, so a rename survives a crash.
pub fn sync_dir(path: &Path) -> std::io::Result<()> {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    File::open(dir)?.sync_all()
}

/// Path of the digest file recorded beside an archive.
pub fn digest_path(archive: &Path) -> PathBuf {
    let mut s = archive.as_os_str().to_os_string();
    s.push(".sha256");
    PathBuf::from(s)
}

/// Check the digest recorded beside an archive: `Ok(Some(true))` matches, `Ok(Some(false))`
/// differs, `Ok(None)` no digest file.
pub fn check_digest(path: &Path) -> Result<Option<bool>> {
    let dp = digest_path(path);
    let Ok(text) = std::fs::read_to_string(&dp) else {
        return Ok(None);
    };
    let recorded = text.split_whitespace().next().unwrap_or("").to_string();
    let (actual, _) = sha256_file(path)?;
    Ok(Some(recorded == actual))
}

thread_local! {
    /// Depth of [`contain`] calls on this thread.
    static CONTAINED: std::cell::Cell<u32> = const { std::cell::Cell::new(0) };
}

/// Rows per record batch when scanning (the parquet crate's default of 1024 is slow).
pub const READ_BATCH_ROWS: usize = 65_536;

/// Run `f`, turning a panic inside it into `Err`: the parquet reader panics on some damaged
/// files instead of returning an error. The hook of [`quiet_contained_panics`] prints nothing
/// for such a panic (the caller reports it as an error with the file's name).
pub fn contain<R>(f: impl FnOnce() -> R) -> std::thread::Result<R> {
    CONTAINED.with(|c| c.set(c.get() + 1));
    let r = std::panic::catch_unwind(std::panic::AssertUnwindSafe(f));
    CONTAINED.with(|c| c.set(c.get().saturating_sub(1)));
    r
}

/// Install a panic hook that stays silent for panics inside [`contain`] and passes every
/// other panic to the hook installed before (the command line calls this once).
pub fn quiet_contained_panics() {
    let previous = std::panic::take_hook();
    std::panic::set_hook(Box::new(move |info| {
        if CONTAINED.with(|c| c.get()) == 0 {
            previous(info)
        }
    }));
}

/// Open a Parquet file, turning the reader's panics on damaged input into errors.
pub fn open_parquet(path: &Path) -> Result<ParquetRecordBatchReaderBuilder<File>> {
    let file = File::open(path).map_err(|e| Error::Open {
        file: path.to_path_buf(),
        source: e,
    })?;
    if file.metadata().map(|m| m.is_dir()).unwrap_or(false) {
        return Err(Error::Open {
            file: path.to_path_buf(),
            source: std::io::Error::other("is a directory"),
        });
    }
    let r = contain(|| ParquetRecordBatchReaderBuilder::try_new(file));
    match r {
        Ok(Ok(b)) => Ok(b),
        Ok(Err(e)) => Err(Error::NotParquet {
            file: path.to_path_buf(),
            reason: e.to_string(),
        }),
        Err(_) => Err(Error::NotParquet {
            file: path.to_path_buf(),
            reason: "the Parquet reader failed on damaged metadata".into(),
        }),
    }
}
