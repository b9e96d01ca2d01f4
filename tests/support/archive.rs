//! An archive as the parquet crate reads it: its rows, key-value metadata and byte layout.

use std::collections::BTreeMap;
use std::fs::File;
use std::path::Path;

use arrow::array::{Array, AsArray};
use arrow::datatypes::{Float32Type, Int32Type};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

use super::parquet_io::{key_values, raw_times, read_table};

/// One archive row, as the parquet crate reads it.
#[derive(Debug, Clone, PartialEq)]
pub struct ArchiveRow {
    /// channel.
    pub channel: String,
    /// start (ns).
    pub start: i64,
    /// samples.
    pub samples: usize,
    /// basis.
    pub basis: String,
    /// order.
    pub order: Option<i32>,
    /// cycles.
    pub cycles: Option<i32>,
    /// budget_rms.
    pub budget_rms: f32,
    /// error_rms.
    pub error_rms: f32,
    /// sample_rate_hz.
    pub sample_rate_hz: f32,
    /// fundamental_hz.
    pub fundamental_hz: Option<f32>,
    /// block.
    pub block: i32,
    /// payload length, when present.
    pub payload_len: Option<usize>,
}

/// All rows of an archive, in file order.
pub fn archive_rows(path: &Path) -> Vec<ArchiveRow> {
    let t = read_table(path);
    let b = &t.batch;
    let col = |n: &str| {
        b.column_by_name(n)
            .unwrap_or_else(|| panic!("archive has no column {n}"))
    };
    let strs = |n: &str| -> Vec<String> {
        col(n)
            .as_string::<i32>()
            .iter()
            .map(|v| v.expect("non-null").to_string())
            .collect()
    };
    let i32s =
        |n: &str| -> Vec<Option<i32>> { col(n).as_primitive::<Int32Type>().iter().collect() };
    let f32s =
        |n: &str| -> Vec<Option<f32>> { col(n).as_primitive::<Float32Type>().iter().collect() };
    let channel = strs("channel");
    let basis = strs("basis");
    let start = raw_times(col("start"));
    let (samples, order, cycles, block) = (
        i32s("samples"),
        i32s("order"),
        i32s("cycles"),
        i32s("block"),
    );
    let (budget, error, rate, fund) = (
        f32s("budget_rms"),
        f32s("error_rms"),
        f32s("sample_rate_hz"),
        f32s("fundamental_hz"),
    );
    let payload = col("payload").as_binary::<i32>();
    (0..b.num_rows())
        .map(|i| ArchiveRow {
            channel: channel[i].clone(),
            start: start[i],
            samples: samples[i].expect("samples") as usize,
            basis: basis[i].clone(),
            order: order[i],
            cycles: cycles[i],
            budget_rms: budget[i].expect("budget_rms"),
            error_rms: error[i].expect("error_rms"),
            sample_rate_hz: rate[i].expect("sample_rate_hz"),
            fundamental_hz: fund[i],
            block: block[i].expect("block"),
            payload_len: (!payload.is_null(i)).then(|| payload.value(i).len()),
        })
        .collect()
}

/// The archive's key-value metadata.
pub fn archive_kv(path: &Path) -> BTreeMap<String, String> {
    key_values(path)
        .into_iter()
        .map(|e| (e.key, e.value.unwrap_or_default()))
        .collect()
}

/// The archive's `cyclarc.meta` JSON.
pub fn archive_meta(path: &Path) -> serde_json::Value {
    let kv = archive_kv(path);
    serde_json::from_str(kv.get("cyclarc.meta").expect("cyclarc.meta key")).expect("meta JSON")
}

/// The file's bytes before the Parquet footer (data pages), from the footer length stored in
/// the last 8 bytes (Parquet file layout: `… footer, footer length (u32 LE), "PAR1"`).
pub fn data_region(bytes: &[u8]) -> &[u8] {
    let n = bytes.len();
    assert_eq!(&bytes[n - 4..], b"PAR1", "Parquet magic");
    let footer = u32::from_le_bytes(bytes[n - 8..n - 4].try_into().expect("4 bytes")) as usize;
    &bytes[..n - 8 - footer]
}

/// The byte range (offset, length) of the `payload` column chunk of row group 0.
pub fn payload_chunk(path: &Path) -> (u64, u64) {
    let f = File::open(path).expect("archive");
    let b = ParquetRecordBatchReaderBuilder::try_new(f).expect("Parquet archive");
    let rg = b.metadata().row_group(0);
    let c = rg
        .columns()
        .iter()
        .find(|c| c.column_path().string() == "payload")
        .expect("payload column chunk");
    c.byte_range()
}
