//! A model of synthetic sources (channels with their times and cells, time and name column
//! types, row orders, row groups) and its long and wide Parquet writers.

use std::path::Path;
use std::sync::Arc;

use arrow::array::{
    ArrayRef, DictionaryArray, Int64Array, LargeStringArray, RecordBatch, StringArray,
    TimestampMicrosecondArray, TimestampMillisecondArray, TimestampNanosecondArray,
    TimestampSecondArray,
};
use arrow::datatypes::{DataType, Field, Int32Type, Schema, TimeUnit};
use rand::seq::SliceRandom;

use super::parquet_io::{value_array, write_batch, VType};
use super::signals::{grid, rng, wave};

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
