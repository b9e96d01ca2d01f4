//! The archive's schema: its columns, how each is written, and rows ↔ Arrow batches; and the
//! checksum that covers a block's frame and every column of its rows.

use std::sync::Arc;

use arrow::array::{
    Array, ArrayRef, AsArray, BinaryArray, Float32Array, Int32Array, RecordBatch, StringArray,
    TimestampNanosecondArray, UInt32Array,
};
use arrow::datatypes::{
    DataType, Field, Float32Type, Int32Type, Schema, TimeUnit, TimestampNanosecondType, UInt32Type,
};
use parquet::basic::{Compression, Encoding, ZstdLevel};
use parquet::file::properties::{EnabledStatistics, WriterProperties};
use parquet::schema::types::ColumnPath;

use crate::codec::encode::{SegmentSummary, DERIVED_HARMONICS};
use crate::model::Basis;

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
        h.update(&r.seg.start_ns.to_le_bytes());
        h.update(&r.seg.samples.to_le_bytes());
        h.update(&[r.seg.basis.tag()]);
        opt32(&mut h, r.seg.order);
        opt32(&mut h, r.seg.cycles);
        for v in [
            r.seg.budget_rms,
            r.seg.error_rms,
            r.seg.sample_rate_hz,
            r.seg.rms,
        ] {
            h.update(&v.to_bits().to_le_bytes());
        }
        opt32(&mut h, r.seg.fundamental_hz.map(f32::to_bits));
        for hm in &r.seg.harmonics {
            opt32(&mut h, hm.map(|p| p.0.to_bits()));
            opt32(&mut h, hm.map(|p| p.1.to_bits()));
        }
        opt32(&mut h, r.seg.thd.map(f32::to_bits));
        h.update(&r.block.to_le_bytes());
    }
    h.finalize()
}

/// One archive row: one segment of one channel, with its block number, and on the block's
/// first row the block's frame and checksum.
#[derive(Debug, Clone, PartialEq)]
pub struct SegmentRow {
    /// Channel name.
    pub channel: String,
    /// What the codec recorded for the segment.
    pub seg: SegmentSummary,
    /// Block number.
    pub block: u32,
    /// Payload (first row of a block).
    pub payload: Option<Vec<u8>>,
    /// CRC-32 of the payload and the block's rows (first row of a block).
    pub checksum: Option<u32>,
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
    /// What a segment is: channel, time, basis, order, budget, error, block.
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
/// and `inspect`'s byte breakdown are made from. The harmonic columns are `h1_…` to
/// `h{DERIVED_HARMONICS}_…`.
pub const COLUMNS: &[Column] = {
    use ColumnClass::{Derived, Metadata, Payload};
    use ColumnType::{Binary, Float32, Int32, TimestampNsUtc, UInt32, Utf8};
    use ColumnWriting::{ByteStreamSplit as Bss, Delta, Dictionary as Dict, Frame, Plain};
    &[
        column("channel", Utf8, false, Dict, Metadata),
        column("start", TimestampNsUtc, false, Delta, Metadata),
        column("samples", Int32, false, Dict, Metadata),
        column("basis", Utf8, false, Dict, Metadata),
        column("order", Int32, true, Dict, Metadata),
        column("cycles", Int32, true, Dict, Metadata),
        column("budget_rms", Float32, false, Bss, Metadata),
        column("error_rms", Float32, false, Bss, Metadata),
        column("sample_rate_hz", Float32, false, Dict, Metadata),
        column("fundamental_hz", Float32, true, Bss, Derived),
        column("rms", Float32, false, Bss, Derived),
        column("h1_amp", Float32, true, Bss, Derived),
        column("h1_phase", Float32, true, Bss, Derived),
        column("h2_amp", Float32, true, Bss, Derived),
        column("h2_phase", Float32, true, Bss, Derived),
        column("h3_amp", Float32, true, Bss, Derived),
        column("h3_phase", Float32, true, Bss, Derived),
        column("thd", Float32, true, Bss, Derived),
        column("block", Int32, false, Delta, Metadata),
        column("payload", Binary, true, Frame, Payload),
        column("checksum", UInt32, true, Plain, Payload),
    ]
};

// The table names exactly the derived harmonics' columns.
const _: () = assert!(COLUMNS.len() == 15 + 2 * DERIVED_HARMONICS);

/// The class of a column by name (`None` for a column this build does not write).
pub fn column_class(name: &str) -> Option<ColumnClass> {
    COLUMNS.iter().find(|c| c.name == name).map(|c| c.class)
}

/// The archive's Arrow schema.
pub fn archive_schema() -> Schema {
    Schema::new(
        COLUMNS
            .iter()
            .map(|c| Field::new(c.name, c.data_type.data_type(), c.nullable))
            .collect::<Vec<_>>(),
    )
}

pub(crate) fn writer_properties() -> WriterProperties {
    // Statistics only where a query prunes by them (channel, start): per-page statistics
    // and the page index on every column cost more than a small archive's payload.
    let mut b = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(9).unwrap_or_default()))
        .set_max_row_group_row_count(Some(1 << 20))
        .set_statistics_enabled(EnabledStatistics::None);
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
                .set_column_compression(col(), Compression::UNCOMPRESSED)
                .set_column_statistics_enabled(col(), EnabledStatistics::None),
        };
    }
    b.build()
}

pub(crate) fn rows_to_batch(
    rows: &[SegmentRow],
    schema: &Arc<Schema>,
) -> Result<RecordBatch, String> {
    let mut cols: Vec<ArrayRef> = vec![
        Arc::new(StringArray::from_iter_values(
            rows.iter().map(|r| r.channel.as_str()),
        )),
        Arc::new(
            TimestampNanosecondArray::from_iter_values(rows.iter().map(|r| r.seg.start_ns))
                .with_timezone("UTC"),
        ),
        Arc::new(Int32Array::from_iter_values(
            rows.iter().map(|r| r.seg.samples as i32),
        )),
        Arc::new(StringArray::from_iter_values(
            rows.iter().map(|r| r.seg.basis.name()),
        )),
        Arc::new(Int32Array::from_iter(
            rows.iter().map(|r| r.seg.order.map(|v| v as i32)),
        )),
        Arc::new(Int32Array::from_iter(
            rows.iter().map(|r| r.seg.cycles.map(|v| v as i32)),
        )),
        Arc::new(Float32Array::from_iter_values(
            rows.iter().map(|r| r.seg.budget_rms),
        )),
        Arc::new(Float32Array::from_iter_values(
            rows.iter().map(|r| r.seg.error_rms),
        )),
        Arc::new(Float32Array::from_iter_values(
            rows.iter().map(|r| r.seg.sample_rate_hz),
        )),
        Arc::new(Float32Array::from_iter(
            rows.iter().map(|r| r.seg.fundamental_hz),
        )),
        Arc::new(Float32Array::from_iter_values(
            rows.iter().map(|r| r.seg.rms),
        )),
    ];
    for h in 0..DERIVED_HARMONICS {
        let get = |r: &SegmentRow| r.seg.harmonics.get(h).copied().flatten();
        cols.push(Arc::new(Float32Array::from_iter(
            rows.iter().map(|r| get(r).map(|v| v.0)),
        )));
        cols.push(Arc::new(Float32Array::from_iter(
            rows.iter().map(|r| get(r).map(|v| v.1)),
        )));
    }
    cols.push(Arc::new(Float32Array::from_iter(
        rows.iter().map(|r| r.seg.thd),
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

pub(crate) fn batch_to_rows(b: &RecordBatch, out: &mut Vec<SegmentRow>) -> Result<(), String> {
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
            seg: SegmentSummary {
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
            },
            block: nonneg(block.value(i), "block")?,
            payload: (!payload.is_null(i)).then(|| payload.value(i).to_vec()),
            checksum: (!checksum.is_null(i)).then(|| checksum.value(i)),
        });
    }
    Ok(())
}
