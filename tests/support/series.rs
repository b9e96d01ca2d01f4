//! Per-channel series read back from sources and decoded files, and the round-trip check of a
//! decoded file against its source and the archive's per-segment budgets.

use std::collections::BTreeMap;
use std::path::Path;

use arrow::array::AsArray;
use arrow::datatypes::DataType;

use super::archive::{
    archive_meta, archive_rows, archive_segments, rule_budget, ArchiveRow, SegmentEntry,
};
use super::cli::{ps, Lab};
use super::parquet_io::{cells_of, raw_times, read_table, Table, VType};
use super::source::Columns;

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
    /// The segment, as the archive lists it.
    pub seg: SegmentEntry,
    /// Its archive row.
    pub row: ArchiveRow,
    /// Its budget: the channel's rule in the metadata on `source_rms`, rounded down to f32.
    pub budget: f64,
    /// RMS of (decoded − source) over the segment's finite source values.
    pub error_rms: f64,
    /// RMS of the segment's finite source values.
    pub source_rms: f64,
}

/// Split a channel's source and decoded samples (both in time order) by the archive's
/// segments and recompute each segment's RMS error, RMS and budget.
pub fn segment_checks(
    name: &str,
    src: &Series,
    dec: &Series,
    rows: &[ArchiveRow],
    segs: &[SegmentEntry],
    meta: &serde_json::Value,
) -> Vec<SegCheck> {
    let segs: Vec<&SegmentEntry> = segs.iter().filter(|g| g.channel == name).collect();
    let total: usize = segs.iter().map(|g| g.samples).sum();
    assert_eq!(
        total,
        src.len(),
        "{name}: the archive's segments add up to {total} samples, the source has {} rows",
        src.len()
    );
    let row_total: usize = rows
        .iter()
        .filter(|r| r.channel == name)
        .map(|r| r.samples)
        .sum();
    assert_eq!(
        row_total, total,
        "{name}: the rows' `samples` add up to the segments'"
    );
    let mut out = Vec::new();
    let mut at = 0;
    for g in segs {
        let range = at..at + g.samples;
        at += g.samples;
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
        let source_rms = finite_rms(&x);
        out.push(SegCheck {
            seg: g.clone(),
            row: rows[g.row].clone(),
            budget: rule_budget(meta, name, source_rms),
            error_rms: if n > 0 { (sum / n as f64).sqrt() } else { 0.0 },
            source_rms,
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
/// every segment's recomputed RMS error within its budget (the channel's rule in the metadata
/// on the segment's source RMS: the contract of the README), and not above what its row records.
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
    let seg_list = archive_segments(archive);
    let meta = archive_meta(archive);
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
        let segs = segment_checks(name, s, d, &rows, &seg_list, &meta);
        for c in &segs {
            // The budget is recomputed here from the rule; summation order may move the RMS
            // by a few ulps, which can flip its f32 rounding by one step.
            let budget = (c.budget as f32).next_up() as f64;
            assert!(
                c.error_rms <= budget,
                "{name}: segment at {} ({} samples): RMS error {:e} > budget {:e}",
                c.seg.start,
                c.seg.samples,
                c.error_rms,
                c.budget
            );
            // What the segment's row records is not less than what the segment shows.
            assert!(
                c.error_rms <= c.row.error_rms as f64 * (1.0 + 1e-6),
                "{name}: segment at {}: error {:e} above its row's {:e}",
                c.seg.start,
                c.error_rms,
                c.row.error_rms
            );
            if c.budget > 0.0 {
                assert!(
                    c.error_rms / budget <= c.row.budget_use as f64 * (1.0 + 1e-5),
                    "{name}: segment at {}: error/budget {:e} above its row's {:e}",
                    c.seg.start,
                    c.error_rms / c.budget,
                    c.row.budget_use
                );
            }
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
    s: &Lab,
    source: &Path,
    shape: &Shape,
    args: &[&str],
    lossless: bool,
) -> RoundTrip {
    let archive = s.path("a.cyclarc.parquet");
    let decoded = s.path("decoded.parquet");
    s.encode(source, &archive, args).expect(0);
    s.run(&["verify", ps(&archive), "--source", ps(source)])
        .expect(0);
    s.run(&["decode", ps(&archive), "--out", ps(&decoded)])
        .expect(0);
    compare_decoded(source, &decoded, &archive, shape, lossless, None)
}
