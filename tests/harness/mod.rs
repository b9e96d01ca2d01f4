//! Shared helpers of the robustness tests (`bad_input`, `damage`, `crash`): run the real
//! binary in a temporary folder, write awkward Parquet sources with arrow/parquet, read files
//! back with the parquet crate (the reference reader), and compare rows cell by cell.
//!
//! Every run of the binary is logged; when a test fails the log (command, exit code, stdout,
//! stderr) is printed.
#![allow(dead_code)]

use std::cell::RefCell;
use std::collections::BTreeSet;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::Arc;

use arrow::array::{Array, ArrayRef, AsArray, RecordBatch};
use arrow::datatypes::{
    DataType, Field, Float32Type, Float64Type, Int16Type, Int32Type, Int64Type, Schema, TimeUnit,
    TimestampMicrosecondType, TimestampMillisecondType, TimestampNanosecondType,
    TimestampSecondType,
};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::ArrowWriter;
use parquet::file::properties::WriterProperties;

/// The binary under test.
pub const BIN: &str = env!("CARGO_BIN_EXE_cyclarc");

/// 2026-05-04T00:00:00Z in ns since the epoch.
pub const T0: i64 = 1_777_852_800_000_000_000;

/// One finished run of the binary.
#[derive(Debug, Clone)]
pub struct Ran {
    /// The command line.
    pub cmd: String,
    /// Exit code (`None` when killed by a signal).
    pub code: Option<i32>,
    /// Captured stdout.
    pub stdout: String,
    /// Captured stderr.
    pub stderr: String,
}

impl Ran {
    /// Everything about the run, for failure messages.
    pub fn context(&self) -> String {
        format!(
            "command: {}\nexit code: {:?}\n--- stdout ---\n{}\n--- stderr ---\n{}\n--------------",
            self.cmd, self.code, self.stdout, self.stderr
        )
    }

    /// Assert the exit code (and that nothing panicked).
    pub fn expect(&self, code: i32) -> &Self {
        self.no_panic();
        assert_eq!(
            self.code,
            Some(code),
            "unexpected exit code\n{}",
            self.context()
        );
        self
    }

    /// Assert that the process did not panic (exit 101 or a panic message).
    pub fn no_panic(&self) -> &Self {
        assert!(
            self.code != Some(101) && !self.stderr.contains("panicked"),
            "the binary panicked\n{}",
            self.context()
        );
        self
    }

    /// Assert that stderr contains each of these pieces.
    pub fn says(&self, pieces: &[&str]) -> &Self {
        for p in pieces {
            assert!(
                self.stderr.contains(p),
                "stderr does not contain `{p}`\n{}",
                self.context()
            );
        }
        self
    }

    /// Assert a condition about this run, printing the run on failure.
    pub fn ensure(&self, cond: bool, what: impl std::fmt::Display) -> &Self {
        assert!(cond, "{what}\n{}", self.context());
        self
    }
}

/// A test's temporary folder and the log of every command run in it.
pub struct Lab {
    /// The folder (removed at the end).
    pub dir: tempfile::TempDir,
    log: RefCell<Vec<String>>,
}

impl Default for Lab {
    fn default() -> Self {
        Lab::new()
    }
}

impl Lab {
    /// A fresh folder.
    pub fn new() -> Lab {
        Lab {
            dir: tempfile::tempdir().expect("temporary folder"),
            log: RefCell::new(Vec::new()),
        }
    }

    /// A path inside the folder.
    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    /// Run the binary (working folder: the lab).
    pub fn run(&self, args: &[&str]) -> Ran {
        let out = Command::new(BIN)
            .args(args)
            .current_dir(self.dir.path())
            .output()
            .expect("the cyclarc binary starts");
        self.record(
            format!("cyclarc {}", args.join(" ")),
            out.status.code(),
            &out.stdout,
            &out.stderr,
        )
    }

    /// Log a run made some other way (a child process the test drove itself).
    pub fn record(&self, cmd: String, code: Option<i32>, stdout: &[u8], stderr: &[u8]) -> Ran {
        let ran = Ran {
            cmd,
            code,
            stdout: String::from_utf8_lossy(stdout).into_owned(),
            stderr: String::from_utf8_lossy(stderr).into_owned(),
        };
        let mut log = self.log.borrow_mut();
        if log.len() > 200 {
            log.remove(0);
        }
        log.push(ran.context());
        ran
    }

    /// Every file and folder under the lab (relative paths, sorted).
    pub fn tree(&self) -> BTreeSet<String> {
        tree(self.dir.path())
    }
}

impl Drop for Lab {
    fn drop(&mut self) {
        if std::thread::panicking() {
            eprintln!("==== commands run by the failing test (latest last) ====");
            for l in self.log.borrow().iter() {
                eprintln!("{l}");
            }
        }
    }
}

/// Every file and folder under `root` (relative paths, sorted).
pub fn tree(root: &Path) -> BTreeSet<String> {
    let mut out = BTreeSet::new();
    let mut stack = vec![root.to_path_buf()];
    while let Some(d) = stack.pop() {
        let Ok(rd) = std::fs::read_dir(&d) else {
            continue;
        };
        for e in rd.flatten() {
            let p = e.path();
            if let Ok(rel) = p.strip_prefix(root) {
                out.insert(rel.to_string_lossy().into_owned());
            }
            if p.is_dir() {
                stack.push(p);
            }
        }
    }
    out
}

/// Temporary files of cyclarc (`.NAME.cyclarc-tmp.PID`) under `root`.
pub fn temp_files(root: &Path) -> Vec<String> {
    tree(root)
        .into_iter()
        .filter(|p| p.contains(".cyclarc-tmp."))
        .collect()
}

/// A path as &str.
pub fn ps(p: &Path) -> &str {
    p.to_str().expect("UTF-8 path")
}

/// SHA-256 of a file, hex.
pub fn sha256(p: &Path) -> String {
    use sha2::{Digest, Sha256};
    let bytes = std::fs::read(p).expect("readable file");
    Sha256::digest(&bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// The digest file beside an archive.
pub fn digest_of(archive: &Path) -> PathBuf {
    let mut s = archive.as_os_str().to_owned();
    s.push(".sha256");
    s.into()
}

// ───────────────────────────── writing sources ─────────────────────────────

/// Write columns as one Parquet file (default writer properties, `row_group` rows per group).
pub fn write_columns(path: &Path, fields: Vec<Field>, cols: Vec<ArrayRef>, row_group: usize) {
    let schema = Arc::new(Schema::new(fields));
    let batch = RecordBatch::try_new(schema.clone(), cols).expect("valid test batch");
    let props = WriterProperties::builder()
        .set_max_row_group_row_count(Some(row_group.max(1)))
        .build();
    let f = File::create(path).expect("create test source");
    let mut w = ArrowWriter::try_new(f, schema, Some(props)).expect("writer");
    w.write(&batch).expect("write");
    w.close().expect("close");
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
    Arc::new(arrow::array::TimestampNanosecondArray::from(t.to_vec()).with_timezone("UTC"))
}

/// A long-layout source: `time`, `channel` (Utf8), `value` (the given array).
pub fn write_long(path: &Path, times: &[i64], names: &[String], values: ArrayRef) {
    write_columns(
        path,
        vec![
            time_field("time"),
            Field::new("channel", DataType::Utf8, false),
            field("value", values.data_type().clone()),
        ],
        vec![
            time_array(times),
            Arc::new(arrow::array::StringArray::from_iter_values(names)),
            values,
        ],
        1 << 16,
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

/// Sample times `T0 + round(i·1e9/fs)` ns.
pub fn grid(n: usize, fs: f64) -> Vec<i64> {
    (0..n)
        .map(|i| T0 + (i as f64 * 1e9 / fs).round() as i64)
        .collect()
}

/// Harmonics 1–3 of `f0` (amplitudes `amp`·[1, 0.2, 0.05]) sampled at `fs`, n samples.
pub fn wave(n: usize, fs: f64, f0: f64, amp: f64) -> Vec<f64> {
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let w = std::f64::consts::TAU * f0 * t;
            amp * (w.cos() + 0.2 * (2.0 * w + 0.4).cos() + 0.05 * (3.0 * w + 1.1).cos())
        })
        .collect()
}

// ───────────────────────────── reading files back ─────────────────────────────

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
pub struct Table {
    /// Time column type.
    pub time_type: DataType,
    /// (channel, value type), sorted by channel.
    pub types: Vec<(String, DataType)>,
    /// (channel, time, cell), sorted.
    pub rows: Vec<(String, i64, Cell)>,
}

fn cells(a: &ArrayRef) -> Vec<Cell> {
    let n = a.len();
    (0..n)
        .map(|i| {
            if a.is_null(i) {
                return Cell::Null;
            }
            match a.data_type() {
                DataType::Float64 => Cell::F64(a.as_primitive::<Float64Type>().value(i).to_bits()),
                DataType::Float32 => Cell::F32(a.as_primitive::<Float32Type>().value(i).to_bits()),
                DataType::Int16 => Cell::Int(a.as_primitive::<Int16Type>().value(i) as i64),
                DataType::Int32 => Cell::Int(a.as_primitive::<Int32Type>().value(i) as i64),
                other => panic!("unexpected value type {other}"),
            }
        })
        .collect()
}

fn times(a: &ArrayRef) -> Vec<i64> {
    match a.data_type() {
        DataType::Timestamp(TimeUnit::Second, _) => {
            a.as_primitive::<TimestampSecondType>().values().to_vec()
        }
        DataType::Timestamp(TimeUnit::Millisecond, _) => a
            .as_primitive::<TimestampMillisecondType>()
            .values()
            .to_vec(),
        DataType::Timestamp(TimeUnit::Microsecond, _) => a
            .as_primitive::<TimestampMicrosecondType>()
            .values()
            .to_vec(),
        DataType::Timestamp(TimeUnit::Nanosecond, _) => a
            .as_primitive::<TimestampNanosecondType>()
            .values()
            .to_vec(),
        DataType::Int64 => a.as_primitive::<Int64Type>().values().to_vec(),
        other => panic!("unexpected time type {other}"),
    }
}

/// Read a file (long layout when it has `channel` and `value` columns, else wide with `time`).
pub fn read_table(path: &Path) -> Table {
    let f = File::open(path).expect("readable file");
    let b = ParquetRecordBatchReaderBuilder::try_new(f).expect("Parquet");
    let schema = b.schema().clone();
    let reader = b.build().expect("reader");
    let long =
        schema.column_with_name("channel").is_some() && schema.column_with_name("value").is_some();
    let time_type = schema
        .field_with_name("time")
        .expect("a time column")
        .data_type()
        .clone();
    let mut rows = Vec::new();
    let mut types: Vec<(String, DataType)> = Vec::new();
    for batch in reader {
        let batch = batch.expect("batch");
        let t = times(batch.column_by_name("time").expect("time"));
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
            for (fi, f) in batch.schema().fields().iter().enumerate() {
                if f.name() == "time" {
                    continue;
                }
                if !types.iter().any(|(m, _)| m == f.name()) {
                    types.push((f.name().clone(), f.data_type().clone()));
                }
                let c = cells(batch.column(fi));
                for i in 0..batch.num_rows() {
                    rows.push((f.name().clone(), t[i], c[i]));
                }
            }
        }
    }
    rows.sort();
    types.sort_by(|a, b| a.0.cmp(&b.0));
    Table {
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
pub fn assert_same(src: &Table, dec: &Table, bound: Bound) {
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
    let mut args = vec!["encode", ps(src), "--out", ps(&arch)];
    args.extend_from_slice(extra);
    lab.run(&args).expect(0);
    lab.run(&["verify", ps(&arch), "--source", ps(src)])
        .expect(0);
    lab.run(&["decode", ps(&arch), "--out", ps(&dec)]).expect(0);
    assert_same(&read_table(src), &read_table(&dec), bound);
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
