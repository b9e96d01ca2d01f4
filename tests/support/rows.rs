//! Cell-by-cell checks for awkward sources written from raw Arrow arrays (the robustness
//! tests): a file's rows as (channel, raw time, cell), compared with a bound, and the
//! encode → verify → decode round trip that must write nothing else.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow::array::{ArrayRef, AsArray, Float64Array, StringArray};
use arrow::datatypes::{DataType, Field};

use super::cli::{digest_of, ps, Lab, Ran};
use super::parquet_io::{cells_of, field, raw_times, read_table, time_array, time_field};
use super::parquet_io::{write_columns, VType};

/// A Float64 value column.
pub fn f64s(v: &[f64]) -> ArrayRef {
    Arc::new(Float64Array::from(v.to_vec()))
}

/// A long-layout source: `time`, `channel` (Utf8), `value` (the given array).
pub fn write_long(path: &Path, times: &[i64], names: &[String], values: ArrayRef) {
    write_long_in_groups(path, times, names, values, 1 << 16);
}

/// [`write_long`] with `row_group` rows per row group.
pub fn write_long_in_groups(
    path: &Path,
    times: &[i64],
    names: &[String],
    values: ArrayRef,
    row_group: usize,
) {
    write_columns(
        path,
        vec![
            time_field("time"),
            Field::new("channel", DataType::Utf8, false),
            field("value", values.data_type().clone()),
        ],
        vec![
            time_array(times),
            Arc::new(StringArray::from_iter_values(names)),
            values,
        ],
        row_group,
    );
}

/// A wide-layout source: `time` plus the given channel columns.
pub fn write_wide(path: &Path, times: &[i64], cols: Vec<(&str, ArrayRef)>) {
    let mut fields = vec![time_field("time")];
    let mut arrays = vec![time_array(times)];
    for (n, a) in cols {
        fields.push(field(n, a.data_type().clone()));
        arrays.push(a);
    }
    write_columns(path, fields, arrays, 1 << 16);
}

/// One cell: null, or the stored bit pattern of its type (floats: their bits; integers: the
/// value as i64 bits).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Cell {
    /// Null.
    Null,
    /// f64 bits.
    F64(u64),
    /// f32 bits.
    F32(u32),
    /// Integer value.
    Int(i64),
}

impl Cell {
    /// The value as f64 (NaN for null).
    pub fn value(self) -> f64 {
        match self {
            Cell::Null => f64::NAN,
            Cell::F64(b) => f64::from_bits(b),
            Cell::F32(b) => f32::from_bits(b) as f64,
            Cell::Int(v) => v as f64,
        }
    }

    /// Whether the cell holds a finite number.
    pub fn is_finite(self) -> bool {
        self != Cell::Null && self.value().is_finite()
    }
}

/// A file's rows as (channel, raw time in the column's unit, cell), sorted, plus the Arrow
/// types of the time column and of each channel.
#[derive(Debug, Clone, PartialEq)]
pub struct Rows {
    /// Time column type.
    pub time_type: DataType,
    /// (channel, value type), sorted by channel.
    pub types: Vec<(String, DataType)>,
    /// (channel, time, cell), sorted.
    pub rows: Vec<(String, i64, Cell)>,
}

/// A value column as cells.
fn cells(a: &ArrayRef) -> Vec<Cell> {
    let (vt, bits) = cells_of(a);
    bits.into_iter()
        .map(|b| match (b, vt) {
            (None, _) => Cell::Null,
            (Some(b), VType::F64) => Cell::F64(b),
            (Some(b), VType::F32) => Cell::F32(b as u32),
            (Some(b), VType::I16 | VType::I32) => Cell::Int(b as i64),
        })
        .collect()
}

/// Read a file's rows (long layout when it has `channel` and `value` columns, else wide with
/// `time`).
pub fn read_rows(path: &Path) -> Rows {
    let table = read_table(path);
    let (schema, batch) = (&table.schema, &table.batch);
    let long =
        schema.column_with_name("channel").is_some() && schema.column_with_name("value").is_some();
    let time_type = schema
        .field_with_name("time")
        .expect("a time column")
        .data_type()
        .clone();
    let mut rows = Vec::new();
    let mut types: Vec<(String, DataType)> = Vec::new();
    let t = raw_times(batch.column_by_name("time").expect("time"));
    if long {
        let names = arrow::compute::cast(
            batch.column_by_name("channel").expect("channel"),
            &DataType::Utf8,
        )
        .expect("names as Utf8");
        let names = names.as_string::<i32>();
        let v = batch.column_by_name("value").expect("value");
        let c = cells(v);
        for i in 0..batch.num_rows() {
            let n = names.value(i).to_string();
            if !types.iter().any(|(m, _)| m == &n) {
                types.push((n.clone(), v.data_type().clone()));
            }
            rows.push((n, t[i], c[i]));
        }
    } else {
        for (fi, f) in schema.fields().iter().enumerate() {
            if f.name() == "time" {
                continue;
            }
            // Types come from the rows read (as when reading batch by batch): none for an
            // empty file.
            if batch.num_rows() > 0 {
                types.push((f.name().clone(), f.data_type().clone()));
            }
            let c = cells(batch.column(fi));
            for i in 0..batch.num_rows() {
                rows.push((f.name().clone(), t[i], c[i]));
            }
        }
    }
    rows.sort();
    types.sort_by(|a, b| a.0.cmp(&b.0));
    Rows {
        time_type,
        types,
        rows,
    }
}

/// How closely decoded finite values must match the source.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Bound {
    /// Bit for bit (lossless budgets).
    Exact,
    /// Each channel's RMS error over finite values ≤ this absolute budget: a per-segment RMS
    /// bound implies it, since the channel's mean square error is the sample-weighted mean
    /// of the segments'.
    Abs(f64),
    /// Each channel's RMS error ≤ this fraction of the channel's RMS (finite values): with
    /// segment budgets `f·rms_seg`, the weighted mean of `f²·rms_seg²` is `f²·rms_channel²`.
    Rel(f64),
}

/// Assert that two tables hold the same rows, times and types, finite values within the
/// bound, and identical nulls, NaN bits and ±Inf.
pub fn assert_same(src: &Rows, dec: &Rows, bound: Bound) {
    assert_eq!(src.time_type, dec.time_type, "time type");
    assert_eq!(src.types, dec.types, "channels and value types");
    assert_eq!(src.rows.len(), dec.rows.len(), "row count");
    // Per channel: (sum of squared errors, sum of squared source values, count).
    let mut sq: std::collections::BTreeMap<&str, (f64, f64, usize)> = Default::default();
    for (i, (a, b)) in src.rows.iter().zip(&dec.rows).enumerate() {
        assert_eq!((&a.0, a.1), (&b.0, b.1), "row {i}: channel and time");
        if bound != Bound::Exact && a.2.is_finite() && b.2.is_finite() {
            let e = b.2.value() - a.2.value();
            let s = sq.entry(a.0.as_str()).or_default();
            s.0 += e * e;
            s.1 += a.2.value() * a.2.value();
            s.2 += 1;
        } else {
            assert_eq!(a.2, b.2, "row {i} ({}, {}): cell", a.0, a.1);
        }
    }
    for (ch, (e2, x2, n)) in sq {
        let rms = (e2 / n as f64).sqrt();
        let limit = match bound {
            Bound::Exact => 0.0,
            Bound::Abs(b) => b,
            Bound::Rel(f) => f * (x2 / n as f64).sqrt(),
        };
        assert!(
            rms <= limit,
            "channel {ch}: RMS error {rms:e} over {limit:e} ({bound:?})"
        );
    }
}

/// encode → verify (exit 0) → decode; then compare the decoded file with the source.
/// Returns the archive path. Only the archive, its digest and the decoded file may appear.
pub fn round_trip(lab: &Lab, src: &Path, extra: &[&str], bound: Bound) -> PathBuf {
    let arch = lab.path("a.cyclarc.parquet");
    let dec = lab.path("decoded.parquet");
    let before = lab.tree();
    lab.encode(src, &arch, extra).expect(0);
    lab.run(&["verify", ps(&arch), "--source", ps(src)])
        .expect(0);
    lab.run(&["decode", ps(&arch), "--out", ps(&dec)]).expect(0);
    assert_same(&read_rows(src), &read_rows(&dec), bound);
    let mut expected = before;
    for p in [&arch, &digest_of(&arch), &dec] {
        expected.insert(p.file_name().expect("name").to_string_lossy().into_owned());
    }
    assert_eq!(
        lab.tree(),
        expected,
        "a round trip writes the archive, its digest, the decoded file"
    );
    arch
}

/// Run the binary expecting a refusal: the exit code, stderr naming each piece, no panic, and
/// nothing written (the lab's files are exactly as before).
pub fn assert_refused(lab: &Lab, args: &[&str], code: i32, pieces: &[&str]) -> Ran {
    let before = lab.tree();
    let ran = lab.run(args);
    ran.expect(code).says(pieces);
    let after = lab.tree();
    assert_eq!(
        before,
        after,
        "files changed by a refused command\n{}",
        ran.context()
    );
    ran
}

/// Remove the outputs of [`round_trip`] so the next one can run in the same lab.
pub fn clear_round_trip(lab: &Lab) {
    for f in [
        "a.cyclarc.parquet",
        "a.cyclarc.parquet.sha256",
        "decoded.parquet",
    ] {
        std::fs::remove_file(lab.path(f)).expect("remove a round-trip output");
    }
}
