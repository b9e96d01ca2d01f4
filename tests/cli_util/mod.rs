//! Helpers for the command-line tests: run the real `cyclarc` binary, write synthetic Parquet
//! sources with arrow/parquet, and read sources, decoded files and archives back with the
//! parquet crate (the reference reader the comparisons are made with).
//!
//! The synthetic signals are invented (harmonics of a fundamental plus Gaussian noise from
//! fixed ChaCha seeds); they serve round-trip and behaviour checks, not codec quality.
#![allow(dead_code)]

use std::cell::RefCell;
use std::collections::BTreeMap;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::Arc;

use arrow::array::{
    Array, ArrayRef, AsArray, DictionaryArray, Float32Array, Float64Array, Int16Array, Int32Array,
    Int64Array, LargeStringArray, RecordBatch, StringArray, TimestampMicrosecondArray,
    TimestampMillisecondArray, TimestampNanosecondArray, TimestampSecondArray,
};
use arrow::datatypes::{
    DataType, Field, Float32Type, Float64Type, Int16Type, Int32Type, Int64Type, Schema, TimeUnit,
};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::properties::WriterProperties;
use rand::seq::SliceRandom;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

/// The binary under test.
pub const BIN: &str = env!("CARGO_BIN_EXE_cyclarc");

/// 2026-03-01T00:00:00Z in ns since the epoch (a whole second, so every unit can hold it).
pub const T0: i64 = 1_772_323_200_000_000_000;

// ───────────────────────────── running the binary ─────────────────────────────

/// One finished run of the binary.
pub struct Ran {
    /// The command line (for messages).
    pub cmd: String,
    /// Exit code (`None` if killed by a signal).
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

    /// Assert the exit code; on failure print the command, stdout and stderr.
    pub fn expect(&self, code: i32) -> &Self {
        assert_eq!(
            self.code,
            Some(code),
            "unexpected exit code\n{}",
            self.context()
        );
        self
    }

    /// Assert a condition about this run; on failure print the command, stdout and stderr.
    pub fn ensure(&self, cond: bool, what: impl std::fmt::Display) -> &Self {
        assert!(cond, "{what}\n{}", self.context());
        self
    }

    /// stdout parsed as JSON (fails with the run's output if it is not JSON).
    pub fn json(&self) -> serde_json::Value {
        match serde_json::from_str(&self.stdout) {
            Ok(v) => v,
            Err(e) => panic!("stdout is not JSON: {e}\n{}", self.context()),
        }
    }
}

/// A test's working folder plus a log of every command run in it; the log is printed when
/// the test fails, so data assertions show what the binary said too.
pub struct Session {
    /// The temporary folder (removed at the end).
    pub dir: tempfile::TempDir,
    log: RefCell<Vec<String>>,
}

impl Session {
    /// A fresh temporary folder.
    pub fn new() -> Session {
        Session {
            dir: tempfile::tempdir().expect("temporary folder"),
            log: RefCell::new(Vec::new()),
        }
    }

    /// A path inside the folder.
    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    /// Run the binary with these arguments.
    pub fn run(&self, args: &[&str]) -> Ran {
        let out = Command::new(BIN)
            .args(args)
            .current_dir(self.dir.path())
            .output()
            .expect("the cyclarc binary starts");
        let ran = Ran {
            cmd: format!("cyclarc {}", args.join(" ")),
            code: out.status.code(),
            stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
        };
        self.log.borrow_mut().push(ran.context());
        ran
    }
}

impl Default for Session {
    fn default() -> Self {
        Session::new()
    }
}

impl Drop for Session {
    fn drop(&mut self) {
        if std::thread::panicking() {
            eprintln!("==== commands run by the failing test ====");
            for l in self.log.borrow().iter() {
                eprintln!("{l}");
            }
        }
    }
}

/// A path as &str (temporary folders are UTF-8 here).
pub fn ps(p: &Path) -> &str {
    p.to_str().expect("UTF-8 path")
}

/// SHA-256 of a file, hex (sha2 is a dependency of the crate).
pub fn sha256(p: &Path) -> String {
    use sha2::{Digest, Sha256};
    let bytes = std::fs::read(p).expect("readable file");
    Sha256::digest(&bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// Names of the entries of a folder, sorted.
pub fn dir_entries(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .expect("readable folder")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

// ───────────────────────────── synthetic signals ─────────────────────────────

/// Fixed-seed generator.
pub fn rng(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}

/// Harmonics 1–5 of `f0` (amplitudes `amp`·[1, 0.3, 0.15, 0.08, 0.04], random phases) plus
/// Gaussian noise of standard deviation `noise`, sampled at `fs` (n samples).
pub fn wave(n: usize, fs: f64, f0: f64, amp: f64, noise: f64, seed: u64) -> Vec<f64> {
    let mut r = rng(seed);
    let rel = [1.0, 0.3, 0.15, 0.08, 0.04];
    let phases: Vec<f64> = rel
        .iter()
        .map(|_| r.random::<f64>() * std::f64::consts::TAU)
        .collect();
    let nd = Normal::new(0.0, noise).expect("valid normal");
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let mut v = 0.0;
            for (h, (&a, &p)) in rel.iter().zip(&phases).enumerate() {
                let h = (h + 1) as f64;
                v += amp * a * (std::f64::consts::TAU * h * f0 * t + p).cos();
            }
            v + nd.sample(&mut r)
        })
        .collect()
}

/// Sample times `T0 + round(i·1e9/fs)` ns.
pub fn grid(n: usize, fs: f64) -> Vec<i64> {
    (0..n)
        .map(|i| T0 + (i as f64 * 1e9 / fs).round() as i64)
        .collect()
}

// ───────────────────────────── source model ─────────────────────────────

/// A value type of the source.
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

    fn of(dt: &DataType) -> Option<VType> {
        Some(match dt {
            DataType::Float32 => VType::F32,
            DataType::Float64 => VType::F64,
            DataType::Int16 => VType::I16,
            DataType::Int32 => VType::I32,
            _ => return None,
        })
    }
}

/// One channel of a synthetic source: times (ns) and cells (bit patterns; `None` is null).
#[derive(Debug, Clone)]
pub struct Chan {
    /// Name.
    pub name: String,
    /// Value type.
    pub vt: VType,
    /// Times (ns since the epoch).
    pub times: Vec<i64>,
    /// Values as bit patterns in `vt`; `None` is null.
    pub cells: Vec<Option<u64>>,
}

impl Chan {
    /// A channel from f64 values (stored in `vt`).
    pub fn new(name: &str, vt: VType, times: Vec<i64>, values: &[f64]) -> Chan {
        assert_eq!(times.len(), values.len());
        Chan {
            name: name.into(),
            vt,
            times,
            cells: values.iter().map(|&v| Some(vt.bits(v))).collect(),
        }
    }

    /// A channel sampled on `grid(n, fs)` with `wave(n, fs, f0, amp, noise, seed)`.
    pub fn wave(name: &str, vt: VType, n: usize, fs: f64, f0: f64, amp: f64, seed: u64) -> Chan {
        let noise = amp * 0.01;
        Chan::new(name, vt, grid(n, fs), &wave(n, fs, f0, amp, noise, seed))
    }

    /// Remove the samples in `range` (a hole in the log).
    pub fn cut(&mut self, range: std::ops::Range<usize>) {
        self.times.drain(range.clone());
        self.cells.drain(range);
    }
}

/// How the source stores time.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TimeKind {
    /// Arrow Timestamp with a unit and optional zone.
    Ts(TimeUnit, Option<&'static str>),
    /// Int64 epoch ns.
    Int64Ns,
}

impl TimeKind {
    /// Nanoseconds per unit.
    pub fn ns_per_unit(self) -> i64 {
        match self {
            TimeKind::Ts(TimeUnit::Second, _) => 1_000_000_000,
            TimeKind::Ts(TimeUnit::Millisecond, _) => 1_000_000,
            TimeKind::Ts(TimeUnit::Microsecond, _) => 1_000,
            _ => 1,
        }
    }

    /// The Arrow type.
    pub fn data_type(self) -> DataType {
        match self {
            TimeKind::Ts(u, tz) => DataType::Timestamp(u, tz.map(Into::into)),
            TimeKind::Int64Ns => DataType::Int64,
        }
    }

    fn array(self, ns: &[i64]) -> ArrayRef {
        let d = self.ns_per_unit();
        let v: Vec<i64> = ns
            .iter()
            .map(|&t| {
                assert_eq!(t % d, 0, "test time {t} is not a whole {self:?}");
                t / d
            })
            .collect();
        match self {
            TimeKind::Int64Ns => Arc::new(Int64Array::from(v)),
            TimeKind::Ts(u, tz) => match u {
                TimeUnit::Second => Arc::new(TimestampSecondArray::from(v).with_timezone_opt(tz)),
                TimeUnit::Millisecond => {
                    Arc::new(TimestampMillisecondArray::from(v).with_timezone_opt(tz))
                }
                TimeUnit::Microsecond => {
                    Arc::new(TimestampMicrosecondArray::from(v).with_timezone_opt(tz))
                }
                TimeUnit::Nanosecond => {
                    Arc::new(TimestampNanosecondArray::from(v).with_timezone_opt(tz))
                }
            },
        }
    }
}

/// How the source stores channel names (long layout).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NameKind {
    /// Utf8.
    Utf8,
    /// LargeUtf8.
    LargeUtf8,
    /// Dictionary(Int32, Utf8).
    Dict,
    /// Dictionary(Int16, Utf8).
    Dict16,
    /// Dictionary(Int32, LargeUtf8).
    DictLarge,
}

/// Row order of a written source.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Order {
    /// By time, then channel name (channels interleaved).
    TimeThenName,
    /// By time, then channel name descending.
    TimeThenNameDesc,
    /// All rows of one channel, then the next (name order), each by time.
    ChannelBlocks,
    /// A random permutation from this seed.
    Shuffled(u64),
}

/// How a source file is written.
#[derive(Debug, Clone, Copy)]
pub struct Spec {
    /// Time column type.
    pub time: TimeKind,
    /// Channel column type (long layout).
    pub names: NameKind,
    /// Row order.
    pub order: Order,
    /// Rows per row group.
    pub row_group: usize,
}

impl Spec {
    /// Time-ordered, Utf8 names, the given time type, 64k-row groups.
    pub fn new(time: TimeKind) -> Spec {
        Spec {
            time,
            names: NameKind::Utf8,
            order: Order::TimeThenName,
            row_group: 65_536,
        }
    }
}

/// Column names of a source.
#[derive(Debug, Clone)]
pub struct Columns {
    /// Time column.
    pub time: String,
    /// Channel column (long).
    pub channel: String,
    /// Value column (long).
    pub value: String,
}

impl Default for Columns {
    fn default() -> Self {
        Columns {
            time: "time".into(),
            channel: "channel".into(),
            value: "value".into(),
        }
    }
}

fn value_array(vt: VType, cells: &[Option<u64>]) -> ArrayRef {
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

/// Write a batch to Parquet (zstd) in row groups of `row_group` rows.
pub fn write_batch(path: &Path, batch: &RecordBatch, row_group: usize) {
    let props = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::try_new(3).expect("level")))
        .set_max_row_group_row_count(Some(row_group))
        .build();
    let f = File::create(path).expect("create source");
    let mut w = ArrowWriter::try_new(f, batch.schema(), Some(props)).expect("writer");
    w.write(batch).expect("write");
    w.close().expect("close");
}

fn permutation(
    n: usize,
    order: Order,
    key: impl Fn(usize, usize) -> std::cmp::Ordering,
) -> Vec<usize> {
    let mut idx: Vec<usize> = (0..n).collect();
    match order {
        Order::Shuffled(seed) => idx.shuffle(&mut rng(seed)),
        _ => idx.sort_by(|&a, &b| key(a, b)),
    }
    idx
}

/// Write channels in the long layout (time, channel, value), all of one value type.
pub fn write_long(path: &Path, chans: &[Chan], spec: Spec, cols: &Columns) {
    let vt = chans[0].vt;
    assert!(
        chans.iter().all(|c| c.vt == vt),
        "long layout: one value type"
    );
    let mut rows: Vec<(usize, usize)> = Vec::new();
    for (c, ch) in chans.iter().enumerate() {
        rows.extend((0..ch.times.len()).map(|i| (c, i)));
    }
    let t = |r: (usize, usize)| chans[r.0].times[r.1];
    let name = |r: (usize, usize)| chans[r.0].name.as_str();
    let perm = permutation(rows.len(), spec.order, |a, b| {
        let (ra, rb) = (rows[a], rows[b]);
        match spec.order {
            Order::TimeThenName => (t(ra), name(ra)).cmp(&(t(rb), name(rb))),
            Order::TimeThenNameDesc => t(ra).cmp(&t(rb)).then(name(rb).cmp(name(ra))),
            _ => (name(ra), t(ra)).cmp(&(name(rb), t(rb))),
        }
    });
    let rows: Vec<(usize, usize)> = perm.into_iter().map(|i| rows[i]).collect();
    let times: Vec<i64> = rows.iter().map(|&r| t(r)).collect();
    let names: Vec<&str> = rows.iter().map(|&r| name(r)).collect();
    let cells: Vec<Option<u64>> = rows.iter().map(|&(c, i)| chans[c].cells[i]).collect();
    let (name_arr, name_dt): (ArrayRef, DataType) = match spec.names {
        NameKind::Utf8 => (Arc::new(StringArray::from(names)), DataType::Utf8),
        NameKind::LargeUtf8 => (Arc::new(LargeStringArray::from(names)), DataType::LargeUtf8),
        NameKind::Dict => (
            Arc::new(names.into_iter().collect::<DictionaryArray<Int32Type>>()),
            DataType::Dictionary(Box::new(DataType::Int32), Box::new(DataType::Utf8)),
        ),
        NameKind::Dict16 | NameKind::DictLarge => {
            let (k, v) = if spec.names == NameKind::Dict16 {
                (DataType::Int16, DataType::Utf8)
            } else {
                (DataType::Int32, DataType::LargeUtf8)
            };
            let dt = DataType::Dictionary(Box::new(k), Box::new(v));
            let d: ArrayRef = Arc::new(names.into_iter().collect::<DictionaryArray<Int32Type>>());
            (arrow::compute::cast(&d, &dt).expect("dictionary cast"), dt)
        }
    };
    let schema = Arc::new(Schema::new(vec![
        Field::new(&cols.time, spec.time.data_type(), false),
        Field::new(&cols.channel, name_dt, false),
        Field::new(&cols.value, vt.data_type(), true),
    ]));
    let batch = RecordBatch::try_new(
        schema,
        vec![spec.time.array(&times), name_arr, value_array(vt, &cells)],
    )
    .expect("long batch");
    write_batch(path, &batch, spec.row_group);
}

/// Write channels in the wide layout (time plus one column per channel, in the given order);
/// all channels share one time axis.
pub fn write_wide(path: &Path, chans: &[Chan], spec: Spec, time_col: &str) {
    let times = &chans[0].times;
    assert!(
        chans.iter().all(|c| &c.times == times),
        "wide: one time axis"
    );
    let perm = permutation(times.len(), spec.order, |a, b| times[a].cmp(&times[b]));
    let t: Vec<i64> = perm.iter().map(|&i| times[i]).collect();
    let mut fields = vec![Field::new(time_col, spec.time.data_type(), false)];
    let mut arrays = vec![spec.time.array(&t)];
    for c in chans {
        fields.push(Field::new(&c.name, c.vt.data_type(), true));
        let cells: Vec<Option<u64>> = perm.iter().map(|&i| c.cells[i]).collect();
        arrays.push(value_array(c.vt, &cells));
    }
    let batch = RecordBatch::try_new(Arc::new(Schema::new(fields)), arrays).expect("wide batch");
    write_batch(path, &batch, spec.row_group);
}

// ───────────────────────────── reading Parquet back ─────────────────────────────

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

/// One channel read from a file: raw time values (in the file's unit) and cells.
#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    /// Value type.
    pub vt: VType,
    /// Raw time values, in the time column's unit.
    pub times: Vec<i64>,
    /// Bit patterns (`None` is null).
    pub cells: Vec<Option<u64>>,
}

impl Series {
    /// Number of samples.
    pub fn len(&self) -> usize {
        self.times.len()
    }

    /// Whether empty.
    pub fn is_empty(&self) -> bool {
        self.times.is_empty()
    }

    /// Value i as f64 (`None` for null).
    pub fn value(&self, i: usize) -> Option<f64> {
        self.cells[i].map(|b| self.vt.value(b))
    }

    /// A copy sorted by time (stable).
    pub fn sorted(&self) -> Series {
        let mut idx: Vec<usize> = (0..self.len()).collect();
        idx.sort_by_key(|&i| self.times[i]);
        Series {
            vt: self.vt,
            times: idx.iter().map(|&i| self.times[i]).collect(),
            cells: idx.iter().map(|&i| self.cells[i]).collect(),
        }
    }

    /// The samples with `from ≤ t < to` (raw time units).
    pub fn window(&self, from: i64, to: i64) -> Series {
        let keep: Vec<usize> = (0..self.len())
            .filter(|&i| self.times[i] >= from && self.times[i] < to)
            .collect();
        Series {
            vt: self.vt,
            times: keep.iter().map(|&i| self.times[i]).collect(),
            cells: keep.iter().map(|&i| self.cells[i]).collect(),
        }
    }
}

/// Raw i64 values of a time column (Timestamp of any unit, or Int64).
pub fn raw_times(col: &ArrayRef) -> Vec<i64> {
    assert_eq!(col.null_count(), 0, "null times");
    let c = arrow::compute::cast(col, &DataType::Int64).expect("time as Int64");
    c.as_primitive::<Int64Type>().values().to_vec()
}

fn cells_of(col: &ArrayRef) -> (VType, Vec<Option<u64>>) {
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

/// Channel names of a long table, row by row.
pub fn names_of(t: &Table, cols: &Columns) -> Vec<String> {
    let c = t
        .batch
        .column_by_name(&cols.channel)
        .unwrap_or_else(|| panic!("no column {}", cols.channel));
    let c = arrow::compute::cast(c, &DataType::Utf8).expect("names as Utf8");
    c.as_string::<i32>()
        .iter()
        .map(|v| v.expect("non-null name").to_string())
        .collect()
}

/// Per-channel series of a long-layout table, in file row order.
pub fn long_series(t: &Table, cols: &Columns) -> BTreeMap<String, Series> {
    let col = |n: &str| {
        t.batch
            .column_by_name(n)
            .unwrap_or_else(|| panic!("no column {n}"))
    };
    let times = raw_times(col(&cols.time));
    let names = names_of(t, cols);
    let (vt, cells) = cells_of(col(&cols.value));
    let mut out: BTreeMap<String, Series> = BTreeMap::new();
    for i in 0..times.len() {
        let s = out.entry(names[i].clone()).or_insert_with(|| Series {
            vt,
            times: Vec::new(),
            cells: Vec::new(),
        });
        s.times.push(times[i]);
        s.cells.push(cells[i]);
    }
    out
}

/// Per-channel series of a wide-layout table (every column but the time), in row order.
pub fn wide_series(t: &Table, time_col: &str) -> BTreeMap<String, Series> {
    let times = raw_times(t.batch.column_by_name(time_col).expect("time column"));
    let mut out = BTreeMap::new();
    for (f, c) in t.schema.fields().iter().zip(t.batch.columns()) {
        if f.name() == time_col {
            continue;
        }
        let (vt, cells) = cells_of(c);
        out.insert(
            f.name().clone(),
            Series {
                vt,
                times: times.clone(),
                cells,
            },
        );
    }
    out
}

/// Column names and types of a table.
pub fn fields_of(t: &Table) -> Vec<(String, DataType)> {
    t.schema
        .fields()
        .iter()
        .map(|f| (f.name().clone(), f.data_type().clone()))
        .collect()
}

// ───────────────────────────── archives ─────────────────────────────

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
    let f = File::open(path).expect("archive");
    let b = ParquetRecordBatchReaderBuilder::try_new(f).expect("Parquet archive");
    b.metadata()
        .file_metadata()
        .key_value_metadata()
        .map(|kv| {
            kv.iter()
                .map(|e| (e.key.clone(), e.value.clone().unwrap_or_default()))
                .collect()
        })
        .unwrap_or_default()
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

// ───────────────────────────── comparisons ─────────────────────────────

/// An f32 budget as cyclarc stores it: the largest f32 not above `b` (README: "Budgets are
/// stored as f32 rounded down").
pub fn f32_down(b: f64) -> f32 {
    let f = b as f32;
    if f as f64 > b {
        f.next_down()
    } else {
        f
    }
}

/// RMS over the finite values.
pub fn finite_rms(x: &[f64]) -> f64 {
    let v: Vec<f64> = x.iter().copied().filter(|v| v.is_finite()).collect();
    if v.is_empty() {
        0.0
    } else {
        (v.iter().map(|v| v * v).sum::<f64>() / v.len() as f64).sqrt()
    }
}

/// One segment's numbers, recomputed from the files.
#[derive(Debug, Clone)]
pub struct SegCheck {
    /// Archive row.
    pub row: ArchiveRow,
    /// RMS of (decoded − source) over the segment's finite source values.
    pub error_rms: f64,
    /// RMS of the segment's finite source values.
    pub source_rms: f64,
}

/// Split a channel's source and decoded samples (both in time order) by the archive's
/// `samples` column and recompute each segment's RMS error and RMS.
pub fn segment_checks(
    name: &str,
    src: &Series,
    dec: &Series,
    rows: &[ArchiveRow],
) -> Vec<SegCheck> {
    let rows: Vec<&ArchiveRow> = rows.iter().filter(|r| r.channel == name).collect();
    let total: usize = rows.iter().map(|r| r.samples).sum();
    assert_eq!(
        total,
        src.len(),
        "{name}: the archive's `samples` add up to {total}, the source has {} rows",
        src.len()
    );
    let mut out = Vec::new();
    let mut at = 0;
    for r in rows {
        let range = at..at + r.samples;
        at += r.samples;
        let x: Vec<f64> = range
            .clone()
            .map(|i| src.value(i).unwrap_or(f64::NAN))
            .collect();
        let (mut sum, mut n) = (0.0f64, 0usize);
        for i in range {
            let Some(xv) = src.value(i) else { continue };
            if !xv.is_finite() {
                continue;
            }
            let yv = dec.value(i).unwrap_or(f64::NAN);
            sum += (yv - xv) * (yv - xv);
            n += 1;
        }
        out.push(SegCheck {
            row: r.clone(),
            error_rms: if n > 0 { (sum / n as f64).sqrt() } else { 0.0 },
            source_rms: finite_rms(&x),
        });
    }
    out
}

/// How a source is laid out, for reading it back.
#[derive(Debug, Clone)]
pub enum Shape {
    /// Long layout with these column names.
    Long(Columns),
    /// Wide layout with this time column.
    Wide(String),
}

impl Shape {
    /// Long with the default names.
    pub fn long() -> Shape {
        Shape::Long(Columns::default())
    }
    /// Wide with the default time column.
    pub fn wide() -> Shape {
        Shape::Wide("time".into())
    }
    /// Per-channel series of a table.
    pub fn series(&self, t: &Table) -> BTreeMap<String, Series> {
        match self {
            Shape::Long(c) => long_series(t, c),
            Shape::Wide(tc) => wide_series(t, tc),
        }
    }
    fn time_col(&self) -> &str {
        match self {
            Shape::Long(c) => &c.time,
            Shape::Wide(t) => t,
        }
    }
}

/// What a round trip produced, for further checks.
pub struct RoundTrip {
    /// The archive's rows.
    pub rows: Vec<ArchiveRow>,
    /// Per-segment numbers, all channels.
    pub segments: Vec<SegCheck>,
    /// The source's series, each sorted by time.
    pub source: BTreeMap<String, Series>,
    /// The decoded series.
    pub decoded: BTreeMap<String, Series>,
}

/// Check a decoded file against its source (both read with the parquet crate):
/// the same column names and types; rows sorted by (channel, time) (long) or time (wide);
/// every channel's timestamps identical to the source's (sorted by time); null, NaN and ±Inf
/// cells with identical bits at the same places; `lossless`: every cell bit-identical;
/// every segment's recomputed RMS error within its `budget_rms` (the contract of the README).
/// `keep` limits the comparison to some channels (others must be absent from the decoded file).
pub fn compare_decoded(
    source: &Path,
    decoded: &Path,
    archive: &Path,
    shape: &Shape,
    lossless: bool,
    keep: Option<&[&str]>,
) -> RoundTrip {
    let st = read_table(source);
    let dt = read_table(decoded);
    let mut src_fields = fields_of(&st);
    if let (Shape::Wide(tc), Some(k)) = (shape, keep) {
        src_fields.retain(|(n, _)| n == tc || k.contains(&n.as_str()));
    }
    assert_eq!(fields_of(&dt), src_fields, "decoded schema (names, types)");
    // Row order of the decoded file.
    let times = raw_times(dt.batch.column_by_name(shape.time_col()).expect("time"));
    match shape {
        Shape::Long(c) => {
            let names = names_of(&dt, c);
            for i in 1..times.len() {
                assert!(
                    (names[i - 1].as_str(), times[i - 1]) < (names[i].as_str(), times[i]),
                    "decoded long rows not sorted by (channel, time) at row {i}"
                );
            }
        }
        Shape::Wide(_) => {
            for i in 1..times.len() {
                assert!(
                    times[i - 1] < times[i],
                    "decoded wide rows not sorted by time at row {i}"
                );
            }
        }
    }
    let mut src: BTreeMap<String, Series> = shape
        .series(&st)
        .into_iter()
        .map(|(k, v)| (k, v.sorted()))
        .collect();
    if let Some(k) = keep {
        src.retain(|n, _| k.contains(&n.as_str()));
    }
    let dec = shape.series(&dt);
    assert_eq!(
        dec.keys().collect::<Vec<_>>(),
        src.keys().collect::<Vec<_>>(),
        "decoded channels"
    );
    let rows = archive_rows(archive);
    let mut segments = Vec::new();
    for (name, s) in &src {
        let d = &dec[name];
        assert_eq!(d.vt, s.vt, "{name}: value type");
        assert_eq!(d.len(), s.len(), "{name}: row count");
        if let Some(i) = (0..s.len()).find(|&i| d.times[i] != s.times[i]) {
            panic!(
                "{name}: timestamp {i} differs: source {} decoded {}",
                s.times[i], d.times[i]
            );
        }
        for i in 0..s.len() {
            let special = match s.cells[i] {
                None => true,
                Some(b) => !s.vt.value(b).is_finite(),
            };
            if special || lossless {
                assert_eq!(
                    d.cells[i].map(|b| format!("{b:#x}")),
                    s.cells[i].map(|b| format!("{b:#x}")),
                    "{name}: sample {i} (time {}) must come back bit-exact",
                    s.times[i]
                );
            } else {
                assert!(
                    d.value(i).is_some_and(f64::is_finite),
                    "{name}: finite sample {i} came back as {:?}",
                    d.value(i)
                );
            }
        }
        let segs = segment_checks(name, s, d, &rows);
        for c in &segs {
            assert!(
                c.error_rms <= c.row.budget_rms as f64,
                "{name}: segment at {} ({} samples): RMS error {:e} > budget {:e}",
                c.row.start,
                c.row.samples,
                c.error_rms,
                c.row.budget_rms
            );
        }
        segments.extend(segs);
    }
    RoundTrip {
        rows,
        segments,
        source: src,
        decoded: dec,
    }
}

/// encode (with `args`) → verify (exit 0) → decode → compare with the source.
pub fn round_trip(
    s: &Session,
    source: &Path,
    shape: &Shape,
    args: &[&str],
    lossless: bool,
) -> RoundTrip {
    let archive = s.path("a.cyclarc.parquet");
    let decoded = s.path("decoded.parquet");
    let mut enc = vec!["encode", ps(source), "--out", ps(&archive)];
    enc.extend_from_slice(args);
    s.run(&enc).expect(0);
    s.run(&["verify", ps(&archive), "--source", ps(source)])
        .expect(0);
    s.run(&["decode", ps(&archive), "--out", ps(&decoded)])
        .expect(0);
    compare_decoded(source, &decoded, &archive, shape, lossless, None)
}
