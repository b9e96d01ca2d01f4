//! An archive as the parquet crate reads it: its rows, key-value metadata and byte layout.

use std::collections::BTreeMap;
use std::fs::File;
use std::path::Path;

use arrow::array::{Array, AsArray};
use arrow::datatypes::{Float32Type, Int32Type};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

use super::parquet_io::{key_values, raw_times, read_table};

/// One archive row (up to a second of one block's segments), as the parquet crate reads it.
#[derive(Debug, Clone, PartialEq)]
pub struct ArchiveRow {
    /// channel.
    pub channel: String,
    /// start (ns).
    pub start: i64,
    /// samples.
    pub samples: usize,
    /// block.
    pub block: i32,
    /// error_rms (the largest of the row's segments).
    pub error_rms: f32,
    /// budget_use (the largest error/budget of the row's segments).
    pub budget_use: f32,
    /// fundamental_hz.
    pub fundamental_hz: Option<f32>,
    /// Frame length, when the row carries the payload (its last 4 bytes are the CRC-32).
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
    let channel: Vec<String> = col("channel")
        .as_string::<i32>()
        .iter()
        .map(|v| v.expect("non-null").to_string())
        .collect();
    let i32s =
        |n: &str| -> Vec<Option<i32>> { col(n).as_primitive::<Int32Type>().iter().collect() };
    let f32s =
        |n: &str| -> Vec<Option<f32>> { col(n).as_primitive::<Float32Type>().iter().collect() };
    let start = raw_times(col("start"));
    let (samples, block) = (i32s("samples"), i32s("block"));
    let (error, used, fund) = (
        f32s("error_rms"),
        f32s("budget_use"),
        f32s("fundamental_hz"),
    );
    let payload = col("payload").as_binary::<i32>();
    (0..b.num_rows())
        .map(|i| ArchiveRow {
            channel: channel[i].clone(),
            start: start[i],
            samples: samples[i].expect("samples") as usize,
            block: block[i].expect("block"),
            error_rms: error[i].expect("error_rms"),
            budget_use: used[i].expect("budget_use"),
            fundamental_hz: fund[i],
            payload_len: (!payload.is_null(i)).then(|| payload.value(i).len() - 4),
        })
        .collect()
}

/// One segment as `cyclarc inspect --segments --json` lists it.
#[derive(Debug, Clone, PartialEq)]
pub struct SegmentEntry {
    /// Channel.
    pub channel: String,
    /// Start (ns).
    pub start: i64,
    /// Samples.
    pub samples: usize,
    /// Basis name.
    pub basis: String,
    /// Order.
    pub order: Option<u32>,
    /// Whole cycles.
    pub cycles: Option<u32>,
    /// Index of its archive row.
    pub row: usize,
}

/// The archive's segments, as the binary lists them (`inspect --segments --json`).
pub fn archive_segments(path: &Path) -> Vec<SegmentEntry> {
    let out = std::process::Command::new(super::cli::BIN)
        .args(["inspect", "--segments", "--json"])
        .arg(path)
        .output()
        .expect("run inspect");
    assert!(out.status.success(), "inspect --segments failed: {out:?}");
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("inspect JSON");
    let u = |x: &serde_json::Value| x.as_u64().map(|v| v as u32);
    v["segments"]
        .as_array()
        .expect("segments")
        .iter()
        .map(|g| SegmentEntry {
            channel: g["channel"].as_str().expect("channel").to_string(),
            start: g["start_ns"].as_i64().expect("start_ns"),
            samples: g["samples"].as_u64().expect("samples") as usize,
            basis: g["basis"].as_str().expect("basis").to_string(),
            order: u(&g["order"]),
            cycles: u(&g["cycles"]),
            row: g["row"].as_u64().expect("row") as usize,
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

/// The archive's `cyclarc.meta` JSON (stored as base64 of a zstd frame).
pub fn archive_meta(path: &Path) -> serde_json::Value {
    let kv = archive_kv(path);
    serde_json::from_slice(&unpack_meta(
        kv.get("cyclarc.meta").expect("cyclarc.meta key"),
    ))
    .expect("meta JSON")
}

/// The JSON bytes of a stored `cyclarc.meta` value.
pub fn unpack_meta(value: &str) -> Vec<u8> {
    use base64::Engine;
    let z = base64::engine::general_purpose::STANDARD
        .decode(value)
        .expect("cyclarc.meta is base64");
    // README: compressed against the format's raw-content dictionary.
    let mut d = zstd::bulk::Decompressor::with_dictionary(cyclarc::archive::meta::META_DICTIONARY)
        .expect("dictionary loads");
    d.decompress(&z, 64 << 20)
        .expect("cyclarc.meta is a zstd frame")
}

/// A `cyclarc.meta` value holding `json`, compressed without the dictionary (as format 2
/// wrote it): readers take both.
pub fn pack_meta(json: &[u8]) -> String {
    use base64::Engine;
    base64::engine::general_purpose::STANDARD.encode(zstd::encode_all(json, 3).expect("zstd"))
}

/// The budget a channel's rule in the metadata gives a segment of RMS `rms`, rounded down to
/// f32 (README: budgets are ε = value, or max(fraction · segment RMS, floor)).
pub fn rule_budget(meta: &serde_json::Value, channel: &str, rms: f64) -> f64 {
    let ch = meta["channels"]
        .as_array()
        .expect("channels")
        .iter()
        .find(|c| c["name"] == channel)
        .unwrap_or_else(|| panic!("channel {channel} in the metadata"));
    let rule = &ch["budget"];
    let b = if let Some(v) = rule["Absolute"].as_f64() {
        v
    } else {
        let r = &rule["Relative"];
        (r["fraction"].as_f64().expect("fraction") * rms).max(r["floor"].as_f64().expect("floor"))
    };
    super::series::f32_down(b) as f64
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
