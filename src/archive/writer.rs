//! Writing an archive: blocks appended in canonical order, the metadata at the end, and the
//! file published atomically with its digest beside it.

use std::fs::File;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow::datatypes::Schema;
use parquet::arrow::arrow_writer::ArrowWriterOptions;
use parquet::arrow::ArrowWriter;
use parquet::file::metadata::KeyValue;

use crate::archive::meta::{pack_meta, ArchiveMeta, FORMAT_VERSION, KEY_FORMAT, KEY_META};
use crate::archive::schema::{
    archive_schema, block_checksum, rows_to_batch, slice_rows, writer_properties, SliceRow,
};
use crate::codec::EncodedBlock;
use crate::error::{Error, Result};
use crate::fsio::{
    check_output, digest_path, publish, remove_if_present, sha256_file, sync_dir, temp_path,
    write_atomic,
};

/// Rows buffered before they are written as one batch (the row groups hold up to 2²⁰ rows).
const WRITE_BATCH_ROWS: usize = 65_536;

/// An archive being written: blocks are appended in order; [`ArchiveWriter::finish`] adds the
/// metadata, closes, fsyncs and renames the file into place and writes the digest beside it.
/// Dropped unfinished, it removes its temporary file and publishes nothing.
pub struct ArchiveWriter {
    out: PathBuf,
    tmp: PathBuf,
    writer: Option<ArrowWriter<File>>,
    schema: Arc<Schema>,
    pending: Vec<SliceRow>,
    next_block: u32,
    rows: u64,
    /// Blocks written per channel, recorded in the metadata.
    blocks_of: std::collections::BTreeMap<String, u64>,
}

impl ArchiveWriter {
    /// Start writing `out` (under a temporary name in the same folder); `events`: whether
    /// the archive has the `event` column (event capture on).
    pub fn create(out: &Path, events: bool) -> Result<Self> {
        check_output(out)?;
        check_output(&digest_path(out))?;
        let tmp = temp_path(out);
        let file = File::create(&tmp).map_err(|e| Error::Write {
            file: out.to_path_buf(),
            source: e,
        })?;
        let schema = Arc::new(archive_schema(events));
        // No embedded Arrow schema: the Parquet logical types already say everything a reader
        // needs (UTC nanosecond times), and it cost 1.6 kB.
        let writer = ArrowWriter::try_new_with_options(
            file,
            schema.clone(),
            ArrowWriterOptions::new()
                .with_properties(writer_properties())
                .with_skip_arrow_metadata(true),
        );
        let writer = match writer {
            Ok(w) => w,
            Err(e) => {
                let _ = std::fs::remove_file(&tmp);
                return Err(Error::WriteParquet {
                    file: out.to_path_buf(),
                    reason: e.to_string(),
                });
            }
        };
        Ok(ArchiveWriter {
            out: out.to_path_buf(),
            tmp,
            writer: Some(writer),
            schema,
            pending: Vec::new(),
            next_block: 0,
            rows: 0,
            blocks_of: Default::default(),
        })
    }

    fn perr(&self, e: impl ToString) -> Error {
        Error::WriteParquet {
            file: self.out.clone(),
            reason: e.to_string(),
        }
    }

    /// Append one block (its rows get the next block number).
    pub fn push(&mut self, b: EncodedBlock) -> Result<()> {
        let block = self.next_block;
        let rows = slice_rows(&b.channel, block, &b.segments);
        *self.blocks_of.entry(b.channel).or_default() += 1;
        let crc = block_checksum(&b.frame, &rows);
        let mut frame = Some(b.frame);
        for mut r in rows {
            if let Some(fr) = frame.take() {
                r.payload = Some(fr);
                r.checksum = Some(crc);
            }
            self.pending.push(r);
        }
        self.next_block += 1;
        if self.pending.len() >= WRITE_BATCH_ROWS {
            self.write_pending()?;
        }
        Ok(())
    }

    fn write_pending(&mut self) -> Result<()> {
        if self.pending.is_empty() {
            return Ok(());
        }
        let batch = rows_to_batch(&self.pending, &self.schema).map_err(|e| self.perr(e))?;
        self.rows += self.pending.len() as u64;
        self.pending.clear();
        let w = self.writer.as_mut().ok_or_else(|| Error::WriteParquet {
            file: self.out.clone(),
            reason: "writer already closed".into(),
        })?;
        w.write(&batch).map_err(|e| Error::WriteParquet {
            file: self.out.clone(),
            reason: e.to_string(),
        })
    }

    /// Finish: metadata, close, fsync, rename, fsync the folder, digest. Returns the size and
    /// the SHA-256 (hex) of the published file.
    pub fn finish(mut self, meta: &ArchiveMeta) -> Result<(u64, String)> {
        self.write_pending()?;
        let mut meta = meta.clone();
        for c in &mut meta.channels {
            c.blocks = Some(self.blocks_of.get(&c.name).copied().unwrap_or(0));
        }
        let meta_value = pack_meta(&meta).map_err(|e| self.perr(e))?;
        let mut w = self
            .writer
            .take()
            .ok_or_else(|| self.perr("writer already closed"))?;
        w.append_key_value_metadata(KeyValue::new(KEY_FORMAT.into(), FORMAT_VERSION.to_string()));
        w.append_key_value_metadata(KeyValue::new(KEY_META.into(), meta_value));
        let result = (|| {
            let file = w.into_inner().map_err(|e| self.perr(e))?;
            let werr = |e: std::io::Error| Error::Write {
                file: self.out.clone(),
                source: e,
            };
            // A failed fsync means the data may not be on disk: fail this output, never retry.
            file.sync_all().map_err(werr)?;
            drop(file);
            let digest = sha256_file(&self.tmp).map_err(|e| match e {
                Error::Open { source, .. } => werr(source),
                other => other,
            })?;
            // A digest left by an earlier archive of this name would not match the new file:
            // remove it first, so that a crash before the new one is written leaves no digest
            // (reported as missing), never a wrong one.
            remove_if_present(&digest_path(&self.out)).map_err(werr)?;
            publish(&self.tmp, &self.out).map_err(werr)?;
            Ok(digest)
        })();
        let (digest, size) = match result {
            Ok(d) => d,
            Err(e) => {
                let _ = std::fs::remove_file(&self.tmp);
                return Err(e);
            }
        };
        let name = self
            .out
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        let dp = digest_path(&self.out);
        let written = write_atomic(&dp, |f| {
            writeln!(f, "{digest}  {name}").map_err(|e| Error::Write {
                file: dp.clone(),
                source: e,
            })
        });
        if let Err(e) = written {
            // An archive whose digest could not be recorded is not published either.
            let _ = std::fs::remove_file(&self.out);
            let _ = sync_dir(&self.out);
            return Err(e);
        }
        Ok((size, digest))
    }
}

impl Drop for ArchiveWriter {
    fn drop(&mut self) {
        if self.writer.is_some() {
            // Not finished: publish nothing.
            self.writer = None;
            let _ = std::fs::remove_file(&self.tmp);
        }
    }
}
