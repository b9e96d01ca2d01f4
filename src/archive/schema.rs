//! The archive's schema: its columns, how each is written, and rows ↔ Arrow batches; how a
//! block's segments are grouped into rows; and the checksum that covers a block's frame and
//! every column of its rows.

use std::sync::Arc;

use arrow::array::{
    Array, ArrayRef, AsArray, BinaryArray, BooleanArray, Float32Array, Int32Array, RecordBatch,
    StringArray, TimestampNanosecondArray,
};
use arrow::datatypes::{
    DataType, Field, Float32Type, Int32Type, Schema, TimeUnit, TimestampNanosecondType,
};
use parquet::basic::{Compression, Encoding, ZstdLevel};
use parquet::file::properties::{EnabledStatistics, WriterProperties, WriterVersion};
use parquet::schema::types::ColumnPath;

use crate::codec::encode::{compact, SegmentSummary};
use crate::codec::quant::{error_to_f32, round_up_bits};

/// Longest time from a row's first segment to the start of its last one (ns): rows start at
/// most a second apart wherever segments are shorter than that, so the query columns keep a
/// resolution of a second or finer.
pub const ROW_SPAN_NS: i64 = 1_000_000_000;

/// The CRC-32 stored with a block: over its compressed frame and every column of its rows
/// (in a fixed byte layout), so that a changed value anywhere in the block is detected.
pub fn block_checksum(frame: &[u8], rows: &[SliceRow]) -> u32 {
    let mut h = crc32fast::Hasher::new();
    h.update(frame);
    let opt32 = |h: &mut crc32fast::Hasher, v: Option<f32>| match v {
        Some(v) => {
            h.update(&[1]);
            h.update(&v.to_bits().to_le_bytes());
        }
        None => h.update(&[0]),
    };
    for r in rows {
        h.update(&(r.channel.len() as u64).to_le_bytes());
        h.update(r.channel.as_bytes());
        h.update(&r.start_ns.to_le_bytes());
        h.update(&r.samples.to_le_bytes());
        h.update(&r.block.to_le_bytes());
        for v in [r.error_rms, r.budget_use, r.rms] {
            h.update(&v.to_bits().to_le_bytes());
        }
        for v in [r.fundamental_hz, r.h1_amp, r.thd] {
            opt32(&mut h, v);
        }
        // Absent in archives written without event capture (and before it existed).
        if let Some(e) = r.event {
            h.update(&[2 + e as u8]);
        }
    }
    h.finalize()
}

/// One archive row: consecutive segments of one block (see [`ROW_SPAN_NS`]), what a query
/// needs about them, and on the block's first row the block's frame and checksum. What each
/// segment is (its length, basis, order, cycles) is in the frame.
#[derive(Debug, Clone, PartialEq)]
pub struct SliceRow {
    /// Channel name.
    pub channel: String,
    /// Time of the first sample (ns since the epoch).
    pub start_ns: i64,
    /// Samples (source rows) in the row's segments.
    pub samples: u32,
    /// Block number.
    pub block: u32,
    /// The largest recorded error of the row's segments, rounded up to 8 significant bits
    /// but never past the budget of a segment that met it.
    pub error_rms: f32,
    /// The largest error over budget of the row's lossy segments (rounded up to 8
    /// significant bits, never past 1 for a segment that met its budget; 0 when all are
    /// lossless). Each segment's budget is the channel's rule (in the metadata) resolved on
    /// the RMS of the segment's source values.
    pub budget_use: f32,
    /// Fundamental (Hz), samples-weighted over the periodic segments.
    pub fundamental_hz: Option<f32>,
    /// RMS of the source, samples-weighted over the segments.
    pub rms: f32,
    /// Peak amplitude of the fundamental, RMS over the periodic segments.
    pub h1_amp: Option<f32>,
    /// THD (IEEE 519): the segments' harmonic power over their fundamental power.
    pub thd: Option<f32>,
    /// Whether the row's segments are events ([`crate::codec::events`]; a row holds events
    /// or non-events, never both); `None` without event capture.
    pub event: Option<bool>,
    /// The block's frame (first row of a block).
    pub payload: Option<Vec<u8>>,
    /// CRC-32 of the frame and the block's rows (first row of a block; stored after the
    /// frame in the `payload` column).
    pub checksum: Option<u32>,
}

/// Round a positive value up to 16 significant bits (see [`compact`]), so a recorded error
/// or ratio never understates.
pub fn compact_up(v: f64) -> f32 {
    round_up_bits(error_to_f32(v), 16)
}

/// A recorded error or budget use: `v` rounded up to 8 significant bits (a byte a row less
/// than 16), but never past `promise` when `v` met it — still a bound on the truth, and
/// still within the promise.
fn recorded_up(v: f32, promise: f32) -> f32 {
    let up = round_up_bits(v, 8);
    if v <= promise {
        up.min(promise)
    } else {
        up
    }
}

/// Group one block's segments into rows: a row takes segments while they start less than
/// [`ROW_SPAN_NS`] after its first one. Payload and checksum are left empty.
pub fn slice_rows(channel: &str, block: u32, segs: &[SegmentSummary]) -> Vec<SliceRow> {
    let mut out = Vec::new();
    let mut i = 0;
    while i < segs.len() {
        let mut j = i + 1;
        while j < segs.len()
            && segs[j].start_ns.saturating_sub(segs[i].start_ns) < ROW_SPAN_NS
            && segs[j].event == segs[i].event
        {
            j += 1;
        }
        out.push(summarize(channel, block, &segs[i..j]));
        i = j;
    }
    out
}

fn summarize(channel: &str, block: u32, segs: &[SegmentSummary]) -> SliceRow {
    let (mut n, mut ms) = (0.0f64, 0.0f64);
    let (mut fw, mut fsum) = (0.0f64, 0.0f64);
    let (mut aw, mut a2) = (0.0f64, 0.0f64);
    let (mut tw, mut h2) = (0.0f64, 0.0f64);
    let (mut error, mut used) = (0.0f32, 0.0f32);
    for s in segs {
        let w = s.samples as f64;
        n += w;
        ms += w * (s.rms as f64).powi(2);
        if let Some(f) = s.fundamental_hz {
            fw += w;
            fsum += w * f as f64;
        }
        if let Some((a, _)) = s.harmonics.first().copied().flatten() {
            let p = w * (a as f64).powi(2);
            aw += w;
            a2 += p;
            if let Some(t) = s.thd {
                tw += p;
                h2 += p * (t as f64).powi(2);
            }
        }
        error = error.max(recorded_up(s.error_rms, s.budget_rms));
        if s.budget_rms > 0.0 {
            let u = error_to_f32(s.error_rms as f64 / s.budget_rms as f64);
            used = used.max(recorded_up(u, 1.0));
        }
    }
    SliceRow {
        channel: channel.to_string(),
        start_ns: segs[0].start_ns,
        samples: segs.iter().map(|s| s.samples).sum(),
        block,
        error_rms: error,
        budget_use: used,
        fundamental_hz: (fw > 0.0).then(|| compact(fsum / fw)),
        rms: compact((ms / n.max(1.0)).sqrt()),
        h1_amp: (aw > 0.0).then(|| compact((a2 / aw).sqrt())),
        thd: (tw > 0.0).then(|| compact((h2 / tw).sqrt())),
        event: segs[0].event,
        payload: None,
        checksum: None,
    }
}

/// The Arrow type of an archive column.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ColumnType {
    /// UTF-8 text.
    Utf8,
    /// Timestamp, nanoseconds, UTC.
    TimestampNsUtc,
    /// 32-bit signed integer.
    Int32,
    /// 32-bit unsigned integer.
    UInt32,
    /// 32-bit float.
    Float32,
    /// Boolean.
    Boolean,
    /// Bytes.
    Binary,
}

impl ColumnType {
    /// The Arrow data type.
    pub fn data_type(self) -> DataType {
        match self {
            ColumnType::Utf8 => DataType::Utf8,
            ColumnType::TimestampNsUtc => {
                DataType::Timestamp(TimeUnit::Nanosecond, Some("UTC".into()))
            }
            ColumnType::Int32 => DataType::Int32,
            ColumnType::UInt32 => DataType::UInt32,
            ColumnType::Float32 => DataType::Float32,
            ColumnType::Boolean => DataType::Boolean,
            ColumnType::Binary => DataType::Binary,
        }
    }
}

/// How a column is written.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ColumnWriting {
    /// The writer's defaults (dictionary encoding): few distinct values.
    Dictionary,
    /// Delta-coded integers, no dictionary: steadily increasing values.
    Delta,
    /// Floats split by byte plane, no dictionary.
    ByteStreamSplit,
    /// Plain, no dictionary.
    Plain,
    /// Plain, not compressed again, no statistics: already compressed frames.
    Frame,
}

/// What a column's bytes count as in `inspect`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ColumnClass {
    /// Where a row is and what it promised: channel, time, samples, block, budget, error.
    Metadata,
    /// Figures for trending, computed from the source and the coefficients.
    Derived,
    /// The coded blocks and their checksums.
    Payload,
}

/// One column of the archive.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Column {
    /// Name.
    pub name: &'static str,
    /// Type.
    pub data_type: ColumnType,
    /// Whether it may be null.
    pub nullable: bool,
    /// How it is written.
    pub writing: ColumnWriting,
    /// What its bytes count as.
    pub class: ColumnClass,
}

const fn column(
    name: &'static str,
    data_type: ColumnType,
    nullable: bool,
    writing: ColumnWriting,
    class: ColumnClass,
) -> Column {
    Column {
        name,
        data_type,
        nullable,
        writing,
        class,
    }
}

/// The archive's columns, in file order: the one table the schema, the writer's properties
/// and `inspect`'s byte breakdown are made from.
pub const COLUMNS: &[Column] = {
    use ColumnClass::{Derived, Metadata, Payload};
    use ColumnType::{Binary, Boolean, Float32, Int32, TimestampNsUtc, Utf8};
    use ColumnWriting::{ByteStreamSplit as Bss, Delta, Dictionary as Dict, Frame, Plain};
    &[
        column("channel", Utf8, false, Dict, Metadata),
        column("start", TimestampNsUtc, false, Delta, Metadata),
        column("samples", Int32, false, Delta, Metadata),
        column("block", Int32, false, Delta, Metadata),
        column("error_rms", Float32, false, Bss, Metadata),
        column("budget_use", Float32, false, Bss, Metadata),
        column("fundamental_hz", Float32, true, Bss, Derived),
        column("rms", Float32, false, Bss, Derived),
        column("h1_amp", Float32, true, Bss, Derived),
        column("thd", Float32, true, Bss, Derived),
        column("event", Boolean, true, Plain, Metadata),
        column("payload", Binary, true, Frame, Payload),
    ]
};

/// The class of a column by name (`None` for a column this build does not write).
pub fn column_class(name: &str) -> Option<ColumnClass> {
    COLUMNS.iter().find(|c| c.name == name).map(|c| c.class)
}

/// The archive's Arrow schema. Without event capture the `event` column, null on every row,
/// is left out (readers take an absent column as no capture, as in archives written before
/// it existed): about 70 B of every small archive.
pub fn archive_schema(events: bool) -> Schema {
    Schema::new(
        COLUMNS
            .iter()
            .filter(|c| events || c.name != "event")
            .map(|c| Field::new(c.name, c.data_type.data_type(), c.nullable))
            .collect::<Vec<_>>(),
    )
}

/// How the archive's columns are written. Parquet 2.0 data pages: a page whose values zstd
/// would not shrink keeps them as they are (the columns of a small archive: 40 B of a
/// one-segment archive), decided page by page inside the one zstd column chunk. (Writing
/// whole small archives uncompressed was tried before: on damaged page headers the parquet
/// reader then allocated gigabytes, measured with the mutation test.)
pub(crate) fn writer_properties() -> WriterProperties {
    // Statistics only where a query prunes by them (channel, start), and no page index: on a
    // small archive each costs more than the payload.
    let mut b = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(9).unwrap_or_default()))
        .set_max_row_group_row_count(Some(1 << 20))
        .set_statistics_enabled(EnabledStatistics::None)
        .set_offset_index_disabled(true)
        .set_writer_version(WriterVersion::PARQUET_2_0)
        .set_created_by(crate::archive::meta::WRITER.into());
    for c in COLUMNS {
        let col = || ColumnPath::from(c.name);
        if matches!(c.name, "channel" | "start") {
            b = b.set_column_statistics_enabled(col(), EnabledStatistics::Chunk);
        }
        b = match c.writing {
            ColumnWriting::Dictionary => b,
            ColumnWriting::Delta => b
                .set_column_dictionary_enabled(col(), false)
                .set_column_encoding(col(), Encoding::DELTA_BINARY_PACKED),
            ColumnWriting::ByteStreamSplit => b
                .set_column_dictionary_enabled(col(), false)
                .set_column_encoding(col(), Encoding::BYTE_STREAM_SPLIT),
            ColumnWriting::Plain => b.set_column_dictionary_enabled(col(), false),
            ColumnWriting::Frame => b
                .set_column_dictionary_enabled(col(), false)
                .set_column_encoding(col(), Encoding::PLAIN)
                .set_column_compression(col(), Compression::UNCOMPRESSED)
                .set_column_statistics_enabled(col(), EnabledStatistics::None),
        };
    }
    b.build()
}

pub(crate) fn rows_to_batch(
    rows: &[SliceRow],
    schema: &Arc<Schema>,
) -> Result<RecordBatch, String> {
    let f32s = |f: fn(&SliceRow) -> f32| -> ArrayRef {
        Arc::new(Float32Array::from_iter_values(rows.iter().map(f)))
    };
    let opt_f32s = |f: fn(&SliceRow) -> Option<f32>| -> ArrayRef {
        Arc::new(Float32Array::from_iter(rows.iter().map(f)))
    };
    let column = |name: &str| -> Result<ArrayRef, String> {
        Ok(match name {
            "channel" => Arc::new(StringArray::from_iter_values(
                rows.iter().map(|r| r.channel.as_str()),
            )),
            "start" => Arc::new(
                TimestampNanosecondArray::from_iter_values(rows.iter().map(|r| r.start_ns))
                    .with_timezone("UTC"),
            ),
            "samples" => Arc::new(Int32Array::from_iter_values(
                rows.iter().map(|r| r.samples as i32),
            )),
            "block" => Arc::new(Int32Array::from_iter_values(
                rows.iter().map(|r| r.block as i32),
            )),
            "error_rms" => f32s(|r| r.error_rms),
            "budget_use" => f32s(|r| r.budget_use),
            "fundamental_hz" => opt_f32s(|r| r.fundamental_hz),
            "rms" => f32s(|r| r.rms),
            "h1_amp" => opt_f32s(|r| r.h1_amp),
            "thd" => opt_f32s(|r| r.thd),
            "event" => Arc::new(BooleanArray::from_iter(rows.iter().map(|r| r.event))),
            "payload" => Arc::new(BinaryArray::from_iter(rows.iter().map(|r| {
                r.payload.as_ref().map(|p| {
                    let mut v = Vec::with_capacity(p.len() + 4);
                    v.extend_from_slice(p);
                    v.extend_from_slice(&r.checksum.unwrap_or(0).to_le_bytes());
                    v
                })
            }))),
            other => return Err(format!("no column `{other}` in this build")),
        })
    };
    if !schema.fields().iter().any(|f| f.name() == "event")
        && rows.iter().any(|r| r.event.is_some())
    {
        return Err("rows mark events but the archive has no `event` column".into());
    }
    let cols = schema
        .fields()
        .iter()
        .map(|f| column(f.name()))
        .collect::<Result<Vec<_>, _>>()?;
    RecordBatch::try_new(schema.clone(), cols).map_err(|e| e.to_string())
}

pub(crate) fn batch_to_rows(b: &RecordBatch, out: &mut Vec<SliceRow>) -> Result<(), String> {
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
    let block = typed("block", &i32t)?.as_primitive::<Int32Type>();
    let f = |n: &str| -> Result<&arrow::array::PrimitiveArray<Float32Type>, String> {
        Ok(typed(n, &DataType::Float32)?.as_primitive::<Float32Type>())
    };
    let (error, used, fund, rms, h1, thd) = (
        f("error_rms")?,
        f("budget_use")?,
        f("fundamental_hz")?,
        f("rms")?,
        f("h1_amp")?,
        f("thd")?,
    );
    let payload = typed("payload", &DataType::Binary)?.as_binary::<i32>();
    // Optional: archives before event capture do not have it.
    let event = match b.column_by_name("event") {
        None => None,
        Some(c) if c.data_type() == &DataType::Boolean => Some(c.as_boolean()),
        Some(c) => return Err(format!("column `event` has type {}", c.data_type())),
    };
    let opt = |a: &arrow::array::PrimitiveArray<Float32Type>, i: usize| {
        (!a.is_null(i)).then(|| a.value(i))
    };
    for i in 0..b.num_rows() {
        let nonneg = |v: i32, what: &str| -> Result<u32, String> {
            u32::try_from(v).map_err(|_| format!("row {}: negative {what}", out.len()))
        };
        let required = |a: &arrow::array::PrimitiveArray<Float32Type>, what: &str| {
            opt(a, i).ok_or_else(|| format!("row {}: {what} is null", out.len()))
        };
        if channel.is_null(i) || start.is_null(i) || samples.is_null(i) || block.is_null(i) {
            return Err(format!("row {}: a required column is null", out.len()));
        }
        // The payload is the frame followed by the block's CRC-32 (little-endian).
        let (frame, checksum) = if payload.is_null(i) {
            (None, None)
        } else {
            let p = payload.value(i);
            let Some(cut) = p.len().checked_sub(4) else {
                return Err(format!(
                    "row {}: payload shorter than its checksum",
                    out.len()
                ));
            };
            let crc = u32::from_le_bytes([p[cut], p[cut + 1], p[cut + 2], p[cut + 3]]);
            (Some(p[..cut].to_vec()), Some(crc))
        };
        out.push(SliceRow {
            channel: channel.value(i).to_string(),
            start_ns: start.value(i),
            samples: nonneg(samples.value(i), "samples")?,
            block: nonneg(block.value(i), "block")?,
            error_rms: required(error, "error_rms")?,
            budget_use: required(used, "budget_use")?,
            fundamental_hz: opt(fund, i),
            rms: required(rms, "rms")?,
            h1_amp: opt(h1, i),
            thd: opt(thd, i),
            event: event.and_then(|e| (!e.is_null(i)).then(|| e.value(i))),
            payload: frame,
            checksum,
        });
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::Basis;

    fn segment(start_ns: i64, budget_rms: f32, error_rms: f32) -> SegmentSummary {
        SegmentSummary {
            start_ns,
            samples: 100,
            basis: Basis::Fourier,
            order: Some(3),
            cycles: Some(1),
            budget_rms,
            error_rms,
            fundamental_hz: Some(50.0),
            rms: 1.0,
            harmonics: Vec::new(),
            thd: None,
            event: None,
        }
    }

    #[test]
    fn recorded_errors_are_bounds_within_the_budget_at_8_bits() {
        // An error just under its budget: 8 bits rounded up would pass the budget, so the
        // row records the budget itself (still ≥ the error); a use of at most 1.
        let b = 0.1f32;
        let e = b.next_down();
        let rows = slice_rows("a", 0, &[segment(0, b, e)]);
        assert_eq!(rows.len(), 1);
        assert!(rows[0].error_rms >= e && rows[0].error_rms <= b);
        assert!(rows[0].budget_use as f64 >= e as f64 / b as f64);
        assert!(rows[0].budget_use <= 1.0);
        // Well under budget: the next value with 8 significant bits at or above the error.
        let e = 0.0123f32;
        let rows = slice_rows("a", 0, &[segment(0, b, e)]);
        let r = rows[0].error_rms;
        assert!(r >= e && r < e * (1.0 + 1.0 / 128.0));
        assert_eq!(r.to_bits() & 0xffff, 0, "8 significant bits");
        // The row takes the largest of its segments; exact values stay exact.
        let rows = slice_rows("a", 0, &[segment(0, 1.0, 0.25), segment(10, 1.0, 0.5)]);
        assert_eq!((rows[0].error_rms, rows[0].budget_use), (0.5, 0.5));
        // Lossless segments: 0 recorded, 0 used.
        let rows = slice_rows("a", 0, &[segment(0, 0.0, 0.0)]);
        assert_eq!((rows[0].error_rms, rows[0].budget_use), (0.0, 0.0));
    }
}
