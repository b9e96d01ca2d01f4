//! The one Parquet writer ([`write_parquet`]) and reader ([`read_table`]) of the tests, with
//! the column helpers the sources and comparisons are built from.

use std::fs::File;
use std::path::Path;
use std::sync::Arc;

use arrow::array::{
    Array, ArrayRef, AsArray, Float32Array, Float64Array, Int16Array, Int32Array, RecordBatch,
    TimestampNanosecondArray,
};
use arrow::datatypes::{
    DataType, Field, Float32Type, Float64Type, Int16Type, Int32Type, Int64Type, Schema, TimeUnit,
};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;

// ───────────────────────────── writing ─────────────────────────────

/// Write one batch as a Parquet file with these writer properties.
pub fn write_parquet(path: &Path, batch: &RecordBatch, props: WriterProperties) {
    write_parquet_with(path, batch, Some(props), Vec::new());
}

/// Write one batch as a Parquet file (default properties when `None`), then append these
/// key-value metadata entries in order.
pub fn write_parquet_with(
    path: &Path,
    batch: &RecordBatch,
    props: Option<WriterProperties>,
    kv: Vec<KeyValue>,
) {
    let f = File::create(path).expect("create test file");
    let mut w = ArrowWriter::try_new(f, batch.schema(), props).expect("writer");
    w.write(batch).expect("write");
    for e in kv {
        w.append_key_value_metadata(e);
    }
    w.close().expect("close");
}

/// Write a batch to Parquet (zstd) in row groups of `row_group` rows.
pub fn write_batch(path: &Path, batch: &RecordBatch, row_group: usize) {
    let props = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(3).expect("level")))
        .set_max_row_group_row_count(Some(row_group))
        .build();
    write_parquet(path, batch, props);
}

/// Write columns as one Parquet file (default writer properties, `row_group` rows per group).
pub fn write_columns(path: &Path, fields: Vec<Field>, cols: Vec<ArrayRef>, row_group: usize) {
    let schema = Arc::new(Schema::new(fields));
    let batch = RecordBatch::try_new(schema, cols).expect("valid test batch");
    let props = WriterProperties::builder()
        .set_max_row_group_row_count(Some(row_group.max(1)))
        .build();
    write_parquet(path, &batch, props);
}

/// A nullable field.
pub fn field(name: &str, dt: DataType) -> Field {
    Field::new(name, dt, true)
}

/// The time field used by the tests: Timestamp(ns, UTC), not null.
pub fn time_field(name: &str) -> Field {
    Field::new(
        name,
        DataType::Timestamp(TimeUnit::Nanosecond, Some("UTC".into())),
        false,
    )
}

/// A Timestamp(ns, UTC) array.
pub fn time_array(t: &[i64]) -> ArrayRef {
    Arc::new(TimestampNanosecondArray::from(t.to_vec()).with_timezone("UTC"))
}

// ───────────────────────────── value types ─────────────────────────────

/// A value type of a source.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum VType {
    /// Float32.
    F32,
    /// Float64.
    F64,
    /// Int16.
    I16,
    /// Int32.
    I32,
}

impl VType {
    /// The Arrow type.
    pub fn data_type(self) -> DataType {
        match self {
            VType::F32 => DataType::Float32,
            VType::F64 => DataType::Float64,
            VType::I16 => DataType::Int16,
            VType::I32 => DataType::Int32,
        }
    }

    /// The bit pattern (widened to u64) of `v` stored in this type: floats cast, integers
    /// rounded half away from zero and saturated.
    pub fn bits(self, v: f64) -> u64 {
        match self {
            VType::F32 => (v as f32).to_bits() as u64,
            VType::F64 => v.to_bits(),
            VType::I16 => (v.round().clamp(i16::MIN as f64, i16::MAX as f64) as i16) as i64 as u64,
            VType::I32 => (v.round().clamp(i32::MIN as f64, i32::MAX as f64) as i32) as i64 as u64,
        }
    }

    /// The value of a bit pattern, as f64.
    pub fn value(self, bits: u64) -> f64 {
        match self {
            VType::F32 => f32::from_bits(bits as u32) as f64,
            VType::F64 => f64::from_bits(bits),
            VType::I16 | VType::I32 => bits as i64 as f64,
        }
    }

    /// The value type of an Arrow type, if it is one.
    pub fn of(dt: &DataType) -> Option<VType> {
        Some(match dt {
            DataType::Float32 => VType::F32,
            DataType::Float64 => VType::F64,
            DataType::Int16 => VType::I16,
            DataType::Int32 => VType::I32,
            _ => return None,
        })
    }
}

/// A value column from bit patterns (`None` is null).
pub fn value_array(vt: VType, cells: &[Option<u64>]) -> ArrayRef {
    match vt {
        VType::F32 => Arc::new(Float32Array::from_iter(
            cells.iter().map(|c| c.map(|b| f32::from_bits(b as u32))),
        )),
        VType::F64 => Arc::new(Float64Array::from_iter(
            cells.iter().map(|c| c.map(f64::from_bits)),
        )),
        VType::I16 => Arc::new(Int16Array::from_iter(
            cells.iter().map(|c| c.map(|b| b as i64 as i16)),
        )),
        VType::I32 => Arc::new(Int32Array::from_iter(
            cells.iter().map(|c| c.map(|b| b as i64 as i32)),
        )),
    }
}

// ───────────────────────────── reading ─────────────────────────────

/// A whole Parquet file in one batch.
pub struct Table {
    /// Schema as the parquet crate reads it.
    pub schema: Arc<Schema>,
    /// All rows.
    pub batch: RecordBatch,
}

/// Read a whole Parquet file.
pub fn read_table(path: &Path) -> Table {
    let f = File::open(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let b = ParquetRecordBatchReaderBuilder::try_new(f).expect("a Parquet file");
    let schema = b.schema().clone();
    let batches: Vec<RecordBatch> = b
        .build()
        .expect("reader")
        .collect::<Result<_, _>>()
        .expect("readable batches");
    let batch = arrow::compute::concat_batches(&schema, &batches).expect("concat");
    Table { schema, batch }
}

/// Raw i64 values of a time column (Timestamp of any unit, or Int64).
pub fn raw_times(col: &ArrayRef) -> Vec<i64> {
    assert_eq!(col.null_count(), 0, "null times");
    let c = arrow::compute::cast(col, &DataType::Int64).expect("time as Int64");
    c.as_primitive::<Int64Type>().values().to_vec()
}

/// A value column's type and bit patterns (`None` is null).
pub fn cells_of(col: &ArrayRef) -> (VType, Vec<Option<u64>>) {
    let vt = VType::of(col.data_type())
        .unwrap_or_else(|| panic!("value column of type {}", col.data_type()));
    let cells = (0..col.len())
        .map(|i| {
            (!col.is_null(i)).then(|| match vt {
                VType::F32 => col.as_primitive::<Float32Type>().value(i).to_bits() as u64,
                VType::F64 => col.as_primitive::<Float64Type>().value(i).to_bits(),
                VType::I16 => col.as_primitive::<Int16Type>().value(i) as i64 as u64,
                VType::I32 => col.as_primitive::<Int32Type>().value(i) as i64 as u64,
            })
        })
        .collect();
    (vt, cells)
}

/// A file's key-value metadata entries, in file order.
pub fn key_values(path: &Path) -> Vec<KeyValue> {
    let f = File::open(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let b = ParquetRecordBatchReaderBuilder::try_new(f).expect("a Parquet file");
    b.metadata()
        .file_metadata()
        .key_value_metadata()
        .cloned()
        .unwrap_or_default()
}
