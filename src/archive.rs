//! Archive: the schema of cyclarc's archive file, its version rules, and writing and reading it.
//!
//! An archive is one Parquet file (zstd) with one row per segment:
//!
//! | column | type | meaning |
//! |---|---|---|
//! | `channel` | utf8 | channel name |
//! | `start` | timestamp(ns, UTC) | time of the segment's first sample |
//! | `samples` | int32 | number of samples (source rows) in the segment |
//! | `basis` | utf8 | `fourier`, `samples` or `lossless` |
//! | `order` | int32, null | truncation order L (bins 0 … L−1; bin k at k·fs/samples Hz); null unless `fourier` |
//! | `cycles` | int32, null | whole cycles K in the segment; null when not periodic |
//! | `budget_rms` | float32 | resolved RMS budget, channel units |
//! | `error_rms` | float32 | RMS error of the decoded output against the source (finite values), rounded up |
//! | `sample_rate_hz` | float32 | sample rate |
//! | `fundamental_hz` | float32, null | fundamental used for the segment |
//! | `rms` | float32 | RMS of the source's finite values |
//! | `h1_amp` … `h3_amp` | float32, null | peak amplitude of harmonics 1–3 (channel units) |
//! | `h1_phase` … `h3_phase` | float32, null | their cosine phase at `start` (radians) |
//! | `thd` | float32, null | THD of harmonics 2–50 over the fundamental (IEEE 519), from the stored coefficients |
//! | `block` | int32 | block number; a block is consecutive segments of one channel run |
//! | `payload` | binary, null | the block's zstd frame, on the block's first row only |
//! | `checksum` | uint32, null | CRC-32 of `payload` and of every column of the block's rows, on the block's first row only |
//!
//! Derived columns (`rms`, harmonics, `thd`) keep 16 significant bits. File metadata holds
//! `cyclarc.format` (`MAJOR.MINOR`, now [`FORMAT_VERSION`]) and `cyclarc.meta` (JSON: writer
//! version, source name, size and SHA-256, resolved settings, source schema, channels).
//! A reader refuses a newer major version; a newer minor version only adds columns or fields.
//! Beside the archive, `NAME.sha256` records the SHA-256 of the whole archive file.
//!
//! Outputs are written to a temporary name in the same folder, fsynced, renamed, and the
//! folder fsynced; a failure leaves nothing under the final name.

use std::fs::File;
use std::io::{Read, Write};
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow::array::{
    Array, ArrayRef, AsArray, BinaryArray, Float32Array, Int32Array, RecordBatch, StringArray,
    TimestampNanosecondArray, UInt32Array,
};
use arrow::datatypes::{
    DataType, Field, Float32Type, Int32Type, Schema, TimeUnit, TimestampNanosecondType, UInt32Type,
};
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, Encoding, ZstdLevel};
use parquet::file::metadata::KeyValue;
use parquet::file::properties::{EnabledStatistics, WriterProperties};
use parquet::schema::types::ColumnPath;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::error::{Error, Result};
use crate::fit::Basis;
use crate::job::{EncodedBlock, DERIVED_HARMONICS};
use crate::options::Settings;
use crate::read::{open_parquet, ChannelInfo, SourceSchema, READ_BATCH_ROWS};
use crate::segment::{FundamentalSource, SegmentPlan};
use crate::signal::ValueType;

/// Archive format major version.
pub const FORMAT_MAJOR: u32 = 1;
/// Archive format minor version.
pub const FORMAT_MINOR: u32 = 1;
/// Archive format version as written.
pub const FORMAT_VERSION: &str = "1.1";
/// This program's version, recorded as the writer.
pub const WRITER: &str = concat!("cyclarc ", env!("CARGO_PKG_VERSION"));

/// Key of the format version in the Parquet file metadata.
pub const KEY_FORMAT: &str = "cyclarc.format";
/// Key of the JSON metadata.
pub const KEY_META: &str = "cyclarc.meta";
/// Key of the CRC-32 (hex) of the JSON metadata.
pub const KEY_META_CRC: &str = "cyclarc.meta.crc32";

/// The CRC-32 stored with a block: over its compressed frame and every column of its rows
/// (in a fixed byte layout), so that a changed value anywhere in the block is detected.
pub fn block_checksum(frame: &[u8], rows: &[SegmentRow]) -> u32 {
    let mut h = crc32fast::Hasher::new();
    h.update(frame);
    let opt32 = |h: &mut crc32fast::Hasher, v: Option<u32>| match v {
        Some(v) => {
            h.update(&[1]);
            h.update(&v.to_le_bytes());
        }
        None => h.update(&[0]),
    };
    for r in rows {
        h.update(&(r.channel.len() as u64).to_le_bytes());
        h.update(r.channel.as_bytes());
        h.update(&r.start_ns.to_le_bytes());
        h.update(&r.samples.to_le_bytes());
        h.update(&[r.basis.tag()]);
        opt32(&mut h, r.order);
        opt32(&mut h, r.cycles);
        for v in [r.budget_rms, r.error_rms, r.sample_rate_hz, r.rms] {
            h.update(&v.to_bits().to_le_bytes());
        }
        opt32(&mut h, r.fundamental_hz.map(f32::to_bits));
        for hm in &r.harmonics {
            opt32(&mut h, hm.map(|p| p.0.to_bits()));
            opt32(&mut h, hm.map(|p| p.1.to_bits()));
        }
        opt32(&mut h, r.thd.map(f32::to_bits));
        h.update(&r.block.to_le_bytes());
    }
    h.finalize()
}

/// One archive row (one segment).
#[derive(Debug, Clone, PartialEq)]
pub struct SegmentRow {
    /// Channel name.
    pub channel: String,
    /// First sample's time (ns).
    pub start_ns: i64,
    /// Samples.
    pub samples: u32,
    /// Basis.
    pub basis: Basis,
    /// Order (Fourier).
    pub order: Option<u32>,
    /// Whole cycles (periodic segments).
    pub cycles: Option<u32>,
    /// Budget.
    pub budget_rms: f32,
    /// Recorded error (rounded up).
    pub error_rms: f32,
    /// Sample rate.
    pub sample_rate_hz: f32,
    /// Fundamental.
    pub fundamental_hz: Option<f32>,
    /// Source RMS.
    pub rms: f32,
    /// (amplitude, phase) of harmonics 1 … [`DERIVED_HARMONICS`].
    pub harmonics: Vec<Option<(f32, f32)>>,
    /// THD.
    pub thd: Option<f32>,
    /// Block number.
    pub block: u32,
    /// Payload (first row of a block).
    pub payload: Option<Vec<u8>>,
    /// CRC-32 of the payload (first row of a block).
    pub checksum: Option<u32>,
}

/// The source an archive was made from.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SourceMeta {
    /// File name (no folder).
    pub name: String,
    /// Size in bytes.
    pub bytes: u64,
    /// SHA-256 of the file, hex.
    pub sha256: String,
}

impl SourceMeta {
    /// Hash a source file.
    pub fn of(path: &Path) -> Result<SourceMeta> {
        let (sha256, bytes) = sha256_file(path)?;
        Ok(SourceMeta {
            name: path
                .file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default(),
            bytes,
            sha256,
        })
    }
}

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

fn hex(b: &[u8]) -> String {
    b.iter().map(|x| format!("{x:02x}")).collect()
}

/// What the archive says about one channel.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChannelMeta {
    /// Name.
    pub name: String,
    /// Value type.
    pub value_type: ValueType,
    /// Sample rate (Hz).
    pub sample_rate_hz: Option<f64>,
    /// Runs (stretches between holes).
    pub runs: usize,
    /// Rows (samples) in the source.
    pub rows: u64,
    /// Whether the rows had to be sorted.
    pub sorted_on_read: bool,
    /// How the fundamental was found: `given`, `estimated`, `not_periodic`, or `mixed`.
    pub fundamental: String,
    /// First estimate or given value (Hz).
    pub fundamental_hz: Option<f64>,
    /// Confidence of the first estimate (autocorrelation at the period).
    pub confidence: Option<f64>,
    /// Lowest and highest tracked fundamental (Hz).
    pub tracked_hz: Option<(f64, f64)>,
    /// Blocks of the channel in the archive (format 1.1 on; absent in 1.0 archives).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub blocks: Option<u64>,
}

impl ChannelMeta {
    /// Start a channel's metadata.
    pub fn new(
        info: &ChannelInfo,
        sample_rate: Option<f64>,
        runs: usize,
        rows: u64,
        sorted: bool,
    ) -> Self {
        ChannelMeta {
            name: info.name.clone(),
            value_type: info.value_type,
            sample_rate_hz: sample_rate,
            runs,
            rows,
            sorted_on_read: sorted,
            fundamental: String::new(),
            fundamental_hz: None,
            confidence: None,
            tracked_hz: None,
            blocks: None,
        }
    }

    /// Fold a run's segmentation into the channel's summary.
    pub fn note_plan(&mut self, plan: &SegmentPlan) {
        let kind = match plan.source {
            FundamentalSource::Given => "given",
            FundamentalSource::Estimated => "estimated",
            FundamentalSource::NotPeriodic => "not_periodic",
        };
        if self.fundamental.is_empty() {
            self.fundamental = kind.to_string();
            self.fundamental_hz = plan.fundamental.map(|e| e.hz);
            self.confidence = plan.fundamental.map(|e| e.confidence);
        } else if self.fundamental != kind {
            self.fundamental = "mixed".into();
        }
        if let Some((lo, hi)) = plan.tracked_range {
            self.tracked_hz = Some(match self.tracked_hz {
                Some((a, b)) => (a.min(lo), b.max(hi)),
                None => (lo, hi),
            });
        }
    }
}

/// The archive's file-level metadata.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ArchiveMeta {
    /// Format version `MAJOR.MINOR`.
    pub format: String,
    /// Writer.
    pub writer: String,
    /// Source.
    pub source: SourceMeta,
    /// Resolved settings (as JSON).
    pub settings: serde_json::Value,
    /// Source schema, for decoding back to the source layout.
    pub schema: SourceSchema,
    /// Channels.
    pub channels: Vec<ChannelMeta>,
}

impl ArchiveMeta {
    /// Build the metadata of a new archive.
    pub fn new(
        source: SourceMeta,
        settings: &Settings,
        schema: SourceSchema,
        channels: Vec<ChannelMeta>,
    ) -> Self {
        let mut schema = schema;
        if schema.layout == crate::options::Layout::Long {
            // Long: the order of first appearance follows the source's row order, which must
            // not change the archive's bytes (the wide layout's column order is kept).
            schema.channels.sort_by(|a, b| a.name.cmp(&b.name));
        }
        ArchiveMeta {
            format: FORMAT_VERSION.into(),
            writer: WRITER.into(),
            source,
            settings: serde_json::to_value(settings).unwrap_or_default(),
            schema,
            channels,
        }
    }
}

/// The archive's Arrow schema.
pub fn archive_schema() -> Schema {
    let f32n = |n: &str| Field::new(n, DataType::Float32, true);
    let mut fields = vec![
        Field::new("channel", DataType::Utf8, false),
        Field::new(
            "start",
            DataType::Timestamp(TimeUnit::Nanosecond, Some("UTC".into())),
            false,
        ),
        Field::new("samples", DataType::Int32, false),
        Field::new("basis", DataType::Utf8, false),
        Field::new("order", DataType::Int32, true),
        Field::new("cycles", DataType::Int32, true),
        Field::new("budget_rms", DataType::Float32, false),
        Field::new("error_rms", DataType::Float32, false),
        Field::new("sample_rate_hz", DataType::Float32, false),
        f32n("fundamental_hz"),
        Field::new("rms", DataType::Float32, false),
    ];
    for h in 1..=DERIVED_HARMONICS {
        fields.push(f32n(&format!("h{h}_amp")));
        fields.push(f32n(&format!("h{h}_phase")));
    }
    fields.push(f32n("thd"));
    fields.push(Field::new("block", DataType::Int32, false));
    fields.push(Field::new("payload", DataType::Binary, true));
    fields.push(Field::new("checksum", DataType::UInt32, true));
    Schema::new(fields)
}

/// Columns whose bytes count as metadata (not payload, not derived) in `inspect`.
pub const DERIVED_COLUMNS: &[&str] = &[
    "fundamental_hz",
    "rms",
    "h1_amp",
    "h1_phase",
    "h2_amp",
    "h2_phase",
    "h3_amp",
    "h3_phase",
    "thd",
];

/// Payload columns in `inspect`.
pub const PAYLOAD_COLUMNS: &[&str] = &["payload", "checksum"];

fn writer_properties() -> WriterProperties {
    let mut b = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(9).unwrap_or_default()))
        .set_max_row_group_row_count(Some(1 << 20));
    let col = |n: &str| ColumnPath::from(n);
    for n in ["start", "block"] {
        b = b
            .set_column_dictionary_enabled(col(n), false)
            .set_column_encoding(col(n), Encoding::DELTA_BINARY_PACKED);
    }
    let mut floats = vec!["error_rms", "rms", "fundamental_hz", "thd", "budget_rms"];
    let names: Vec<String> = (1..=DERIVED_HARMONICS)
        .flat_map(|h| [format!("h{h}_amp"), format!("h{h}_phase")])
        .collect();
    floats.extend(names.iter().map(String::as_str));
    for n in floats {
        b = b
            .set_column_dictionary_enabled(col(n), false)
            .set_column_encoding(col(n), Encoding::BYTE_STREAM_SPLIT);
    }
    b.set_column_dictionary_enabled(col("payload"), false)
        .set_column_compression(col("payload"), Compression::UNCOMPRESSED)
        .set_column_statistics_enabled(col("payload"), EnabledStatistics::None)
        .set_column_dictionary_enabled(col("checksum"), false)
        .build()
}

fn rows_to_batch(rows: &[SegmentRow], schema: &Arc<Schema>) -> Result<RecordBatch, String> {
    let mut cols: Vec<ArrayRef> = vec![
        Arc::new(StringArray::from_iter_values(
            rows.iter().map(|r| r.channel.as_str()),
        )),
        Arc::new(
            TimestampNanosecondArray::from_iter_values(rows.iter().map(|r| r.start_ns))
                .with_timezone("UTC"),
        ),
        Arc::new(Int32Array::from_iter_values(
            rows.iter().map(|r| r.samples as i32),
        )),
        Arc::new(StringArray::from_iter_values(
            rows.iter().map(|r| r.basis.name()),
        )),
        Arc::new(Int32Array::from_iter(
            rows.iter().map(|r| r.order.map(|v| v as i32)),
        )),
        Arc::new(Int32Array::from_iter(
            rows.iter().map(|r| r.cycles.map(|v| v as i32)),
        )),
        Arc::new(Float32Array::from_iter_values(
            rows.iter().map(|r| r.budget_rms),
        )),
        Arc::new(Float32Array::from_iter_values(
            rows.iter().map(|r| r.error_rms),
        )),
        Arc::new(Float32Array::from_iter_values(
            rows.iter().map(|r| r.sample_rate_hz),
        )),
        Arc::new(Float32Array::from_iter(
            rows.iter().map(|r| r.fundamental_hz),
        )),
        Arc::new(Float32Array::from_iter_values(rows.iter().map(|r| r.rms))),
    ];
    for h in 0..DERIVED_HARMONICS {
        let get = |r: &SegmentRow| r.harmonics.get(h).copied().flatten();
        cols.push(Arc::new(Float32Array::from_iter(
            rows.iter().map(|r| get(r).map(|v| v.0)),
        )));
        cols.push(Arc::new(Float32Array::from_iter(
            rows.iter().map(|r| get(r).map(|v| v.1)),
        )));
    }
    cols.push(Arc::new(Float32Array::from_iter(
        rows.iter().map(|r| r.thd),
    )));
    cols.push(Arc::new(Int32Array::from_iter_values(
        rows.iter().map(|r| r.block as i32),
    )));
    cols.push(Arc::new(BinaryArray::from_iter(
        rows.iter().map(|r| r.payload.as_deref()),
    )));
    cols.push(Arc::new(UInt32Array::from_iter(
        rows.iter().map(|r| r.checksum),
    )));
    RecordBatch::try_new(schema.clone(), cols).map_err(|e| e.to_string())
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
fn remove_if_present(path: &Path) -> std::io::Result<()> {
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

/// An archive being written: blocks are appended in order; [`ArchiveWriter::finish`] adds the
/// metadata, closes, fsyncs and renames the file into place and writes the digest beside it.
/// Dropped unfinished, it removes its temporary file and publishes nothing.
pub struct ArchiveWriter {
    out: PathBuf,
    tmp: PathBuf,
    writer: Option<ArrowWriter<File>>,
    schema: Arc<Schema>,
    pending: Vec<SegmentRow>,
    next_block: u32,
    rows: u64,
    /// Blocks written per channel, recorded in the metadata.
    blocks_of: std::collections::BTreeMap<String, u64>,
}

impl ArchiveWriter {
    /// Start writing `out` (under a temporary name in the same folder).
    pub fn create(out: &Path) -> Result<Self> {
        check_output(out)?;
        check_output(&digest_path(out))?;
        let tmp = temp_path(out);
        let file = File::create(&tmp).map_err(|e| Error::Write {
            file: out.to_path_buf(),
            source: e,
        })?;
        let schema = Arc::new(archive_schema());
        let writer =
            ArrowWriter::try_new(file, schema.clone(), Some(writer_properties())).map_err(|e| {
                Error::WriteParquet {
                    file: out.to_path_buf(),
                    reason: e.to_string(),
                }
            });
        let writer = match writer {
            Ok(w) => w,
            Err(e) => {
                let _ = std::fs::remove_file(&tmp);
                return Err(e);
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
        let mut rows = b.rows;
        for r in rows.iter_mut() {
            r.block = self.next_block;
        }
        if let Some(r) = rows.first() {
            *self.blocks_of.entry(r.channel.clone()).or_default() += 1;
        }
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
        if self.pending.len() >= READ_BATCH_ROWS {
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

    /// Finish: metadata, close, fsync, rename, fsync the folder, digest. Returns the size.
    pub fn finish(mut self, meta: &ArchiveMeta) -> Result<u64> {
        self.write_pending()?;
        let mut meta = meta.clone();
        for c in &mut meta.channels {
            c.blocks = Some(self.blocks_of.get(&c.name).copied().unwrap_or(0));
        }
        let meta_json = serde_json::to_string(&meta).map_err(|e| self.perr(e))?;
        let mut w = self
            .writer
            .take()
            .ok_or_else(|| self.perr("writer already closed"))?;
        w.append_key_value_metadata(KeyValue::new(KEY_FORMAT.into(), FORMAT_VERSION.to_string()));
        w.append_key_value_metadata(KeyValue::new(
            KEY_META_CRC.into(),
            format!("{:08x}", crc32fast::hash(meta_json.as_bytes())),
        ));
        w.append_key_value_metadata(KeyValue::new(KEY_META.into(), meta_json));
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
        Ok(size)
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

/// An archive read back.
#[derive(Debug, Clone)]
pub struct Archive {
    /// Path.
    pub path: PathBuf,
    /// Metadata.
    pub meta: ArchiveMeta,
    /// All rows in file order.
    pub rows: Vec<SegmentRow>,
    /// Bytes per column (compressed, as stored), for `inspect`.
    pub column_bytes: Vec<(String, u64)>,
    /// File size.
    pub file_bytes: u64,
}

fn damaged(path: &Path, reason: impl Into<String>) -> Error {
    Error::Damaged {
        file: path.to_path_buf(),
        reason: reason.into(),
    }
}

/// Check a `MAJOR.MINOR` version string against what this build reads.
pub fn check_version(path: &Path, v: &str) -> Result<()> {
    let major: u32 = v
        .split('.')
        .next()
        .and_then(|m| m.parse().ok())
        .ok_or_else(|| damaged(path, format!("unreadable format version `{v}`")))?;
    if major > FORMAT_MAJOR {
        return Err(Error::FutureVersion {
            file: path.to_path_buf(),
            found: v.to_string(),
            supported: FORMAT_MAJOR,
        });
    }
    if major == 0 {
        return Err(damaged(path, format!("unknown format version `{v}`")));
    }
    Ok(())
}

/// Read an archive. Damage in the Parquet structure (including the reader's panics) is
/// reported as [`Error::Damaged`].
pub fn read_archive(path: &Path) -> Result<Archive> {
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
    let meta_json = get(KEY_META).unwrap_or_default();
    let meta_crc = get(KEY_META_CRC).unwrap_or_default();
    if meta_crc != format!("{:08x}", crc32fast::hash(meta_json.as_bytes())) {
        return Err(damaged(path, "file metadata checksum mismatch"));
    }
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
    let result = crate::read::contain(|| -> Result<()> {
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
    })
}

fn batch_to_rows(b: &RecordBatch, out: &mut Vec<SegmentRow>) -> Result<(), String> {
    let col = |name: &str| -> Result<&ArrayRef, String> {
        b.column_by_name(name)
            .ok_or_else(|| format!("column `{name}` is missing"))
    };
    let typed = |name: &str, dt: &DataType| -> Result<&ArrayRef, String> {
        let c = col(name)?;
        if c.data_type() != dt {
            return Err(format!("column `{name}` has type {}", c.data_type()));
        }
        Ok(c)
    };
    let f32t = DataType::Float32;
    let i32t = DataType::Int32;
    let channel = typed("channel", &DataType::Utf8)?.as_string::<i32>();
    let start = col("start")?;
    let start = match start.data_type() {
        DataType::Timestamp(TimeUnit::Nanosecond, _) => {
            start.as_primitive::<TimestampNanosecondType>()
        }
        other => return Err(format!("column `start` has type {other}")),
    };
    let samples = typed("samples", &i32t)?.as_primitive::<Int32Type>();
    let basis = typed("basis", &DataType::Utf8)?.as_string::<i32>();
    let order = typed("order", &i32t)?.as_primitive::<Int32Type>();
    let cycles = typed("cycles", &i32t)?.as_primitive::<Int32Type>();
    let f = |n: &str| -> Result<&arrow::array::PrimitiveArray<Float32Type>, String> {
        Ok(typed(n, &f32t)?.as_primitive::<Float32Type>())
    };
    let (budget, error, rate, fund, rms, thd) = (
        f("budget_rms")?,
        f("error_rms")?,
        f("sample_rate_hz")?,
        f("fundamental_hz")?,
        f("rms")?,
        f("thd")?,
    );
    let mut harm = Vec::new();
    for h in 1..=DERIVED_HARMONICS {
        harm.push((f(&format!("h{h}_amp"))?, f(&format!("h{h}_phase"))?));
    }
    let block = typed("block", &i32t)?.as_primitive::<Int32Type>();
    let payload = typed("payload", &DataType::Binary)?.as_binary::<i32>();
    let checksum = typed("checksum", &DataType::UInt32)?.as_primitive::<UInt32Type>();
    let opt = |a: &arrow::array::PrimitiveArray<Float32Type>, i: usize| {
        (!a.is_null(i)).then(|| a.value(i))
    };
    for i in 0..b.num_rows() {
        let basis_name = basis.value(i);
        let basis = Basis::from_name(basis_name)
            .ok_or_else(|| format!("row {}: unknown basis `{basis_name}`", out.len()))?;
        let nonneg = |v: i32, what: &str| -> Result<u32, String> {
            u32::try_from(v).map_err(|_| format!("row {}: negative {what}", out.len()))
        };
        out.push(SegmentRow {
            channel: channel.value(i).to_string(),
            start_ns: start.value(i),
            samples: nonneg(samples.value(i), "samples")?,
            basis,
            order: if order.is_null(i) {
                None
            } else {
                Some(nonneg(order.value(i), "order")?)
            },
            cycles: if cycles.is_null(i) {
                None
            } else {
                Some(nonneg(cycles.value(i), "cycles")?)
            },
            budget_rms: budget.value(i),
            error_rms: error.value(i),
            sample_rate_hz: rate.value(i),
            fundamental_hz: opt(fund, i),
            rms: rms.value(i),
            harmonics: harm.iter().map(|(a, p)| opt(a, i).zip(opt(p, i))).collect(),
            thd: opt(thd, i),
            block: nonneg(block.value(i), "block")?,
            payload: (!payload.is_null(i)).then(|| payload.value(i).to_vec()),
            checksum: (!checksum.is_null(i)).then(|| checksum.value(i)),
        });
    }
    Ok(())
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

/// Rows of one block, in order, as index ranges into `rows`.
pub fn block_spans(rows: &[SegmentRow]) -> Vec<std::ops::Range<usize>> {
    let mut out = Vec::new();
    let mut start = 0;
    for i in 1..=rows.len() {
        if i == rows.len() || rows[i].block != rows[start].block {
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
        let starts = rows[span.clone()]
            .iter()
            .filter(|r| r.payload.is_some())
            .count();
        if !seen.insert(b) || starts > 1 {
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
