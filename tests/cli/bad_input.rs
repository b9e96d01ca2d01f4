//! Bad and awkward input, through the real binary. Each case either gets a clear error that
//! names the file (and the column and row where they apply), the documented exit code and
//! nothing written — or round-trips: encode → verify (exit 0) → decode → the same rows,
//! timestamps and null/NaN/±Inf bits (finite values identical for lossless budgets, within
//! the RMS budget otherwise). The README's "Error catalogue" lists the same decisions.
//!
//! Exit codes are the README's (0 ok, 1 broken bound or damaged archive, 2 usage or input
//! error, 3 write failure, 4 interrupted). Sources are invented test signals.

use std::sync::Arc;

use crate::support::rows::*;
use crate::support::*;
use arrow::array::{
    ArrayRef, BooleanArray, Float32Array, Float64Array, Int16Array, Int32Array, Int64Array,
    ListArray, StringArray, StructArray, TimestampNanosecondArray, TimestampSecondArray,
};
use arrow::datatypes::{DataType, Field, Float64Type, TimeUnit};

fn names(n: usize, name: &str) -> Vec<String> {
    vec![name.to_string(); n]
}

/// A small valid long-layout source (one channel, 2000 samples at 1 kHz, 50 Hz).
fn good_source(path: &std::path::Path) {
    let n = 2000;
    write_long(
        path,
        &grid(n, 1000.0),
        &names(n, "a"),
        f64s(&clean_wave(n, 1000.0, 50.0, 1.0)),
    );
}

fn encode_args<'a>(src: &'a str, out: &'a str) -> Vec<&'a str> {
    vec!["encode", src, "--out", out]
}

// ───────────────────────────── unreadable files ─────────────────────────────

#[test]
fn missing_file_is_an_input_error_naming_it() {
    let lab = Lab::new();
    let out = lab.path("a.parquet");
    assert_refused(
        &lab,
        &encode_args(ps(&lab.path("nope.parquet")), ps(&out)),
        2,
        &["nope.parquet", "cannot read"],
    );
}

#[test]
fn a_text_file_is_not_parquet() {
    let lab = Lab::new();
    let src = lab.path("notes.parquet");
    std::fs::write(&src, "time,channel,value\n2026-05-04T00:00:00Z,a,1.0\n").expect("write");
    let out = lab.path("a.parquet");
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["notes.parquet", "not a readable Parquet file"],
    );
}

#[test]
fn an_empty_file_is_not_parquet() {
    let lab = Lab::new();
    let src = lab.path("empty.parquet");
    std::fs::write(&src, b"").expect("write");
    let out = lab.path("a.parquet");
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["empty.parquet", "not a readable Parquet file"],
    );
}

#[test]
fn a_truncated_parquet_file_is_refused_at_every_cut() {
    let lab = Lab::new();
    let full = lab.path("full.parquet");
    good_source(&full);
    let bytes = std::fs::read(&full).expect("read");
    std::fs::remove_file(&full).expect("remove");
    let src = lab.path("cut.parquet");
    let out = lab.path("a.parquet");
    // Half the file (footer gone), all but the magic, and a cut inside the data pages with the
    // footer kept (a file whose pages no longer match its footer).
    let mut inside = bytes[..bytes.len() / 3].to_vec();
    inside.extend_from_slice(&bytes[bytes.len() / 2..]);
    for cut in [
        bytes[..bytes.len() / 2].to_vec(),
        bytes[..bytes.len() - 4].to_vec(),
        inside,
    ] {
        std::fs::write(&src, &cut).expect("write");
        assert_refused(
            &lab,
            &encode_args(ps(&src), ps(&out)),
            2,
            &["cut.parquet", "Parquet"],
        );
    }
}

// ───────────────────────────── schema problems ─────────────────────────────

#[test]
fn zero_rows_are_refused() {
    let lab = Lab::new();
    let src = lab.path("zero.parquet");
    write_long(&src, &[], &[], f64s(&[]));
    let out = lab.path("a.parquet");
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["zero.parquet", "no rows to archive"],
    );
}

#[test]
fn missing_columns_are_named() {
    let lab = Lab::new();
    let out = lab.path("a.parquet");
    // No `time` column: the error names it and lists what the file has.
    let src = lab.path("no-time.parquet");
    write_columns(
        &src,
        vec![
            time_field("ts"),
            Field::new("channel", DataType::Utf8, false),
            field("value", DataType::Float64),
        ],
        vec![
            time_array(&grid(3, 10.0)),
            Arc::new(StringArray::from(names(3, "a"))),
            f64s(&[1.0, 2.0, 3.0]),
        ],
        1024,
    );
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["no-time.parquet", "no column `time`", "ts ("],
    );
    // A `channel` column but no `value`: says which column is missing and what to do.
    let src = lab.path("no-value.parquet");
    write_columns(
        &src,
        vec![
            time_field("time"),
            Field::new("channel", DataType::Utf8, false),
            field("reading", DataType::Utf8),
        ],
        vec![
            time_array(&grid(3, 10.0)),
            Arc::new(StringArray::from(names(3, "a"))),
            Arc::new(StringArray::from(names(3, "x"))),
        ],
        1024,
    );
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["no-value.parquet", "no `value` column"],
    );
    // Explicit long layout on a file without a channel column.
    let src = lab.path("wide.parquet");
    write_wide(&src, &grid(3, 10.0), vec![("v", f64s(&[1.0, 2.0, 3.0]))]);
    let mut args = encode_args(ps(&src), ps(&out));
    args.extend(["--layout", "long"]);
    assert_refused(&lab, &args, 2, &["wide.parquet", "no column `channel`"]);
    // A wide channel asked for by name that is not there.
    let mut args = encode_args(ps(&src), ps(&out));
    args.extend(["--channels", "w"]);
    assert_refused(&lab, &args, 2, &["wide.parquet", "no column `w`"]);
}

/// A long-layout source whose value column is `values`.
fn long_with_values(path: &std::path::Path, values: ArrayRef) {
    let n = values.len();
    write_long_in_groups(path, &grid(n, 10.0), &names(n, "a"), values, 1024);
}

fn list_array() -> ArrayRef {
    Arc::new(ListArray::from_iter_primitive::<Float64Type, _, _>(vec![
        Some(vec![Some(1.0), Some(2.0)]),
        Some(vec![Some(3.0)]),
        None,
    ]))
}

fn struct_array() -> ArrayRef {
    Arc::new(StructArray::from(vec![
        (
            Arc::new(Field::new("x", DataType::Float64, true)),
            f64s(&[1.0, 2.0, 3.0]),
        ),
        (
            Arc::new(Field::new("ok", DataType::Boolean, true)),
            Arc::new(BooleanArray::from(vec![true, false, true])) as ArrayRef,
        ),
    ]))
}

#[test]
fn wrong_value_types_are_named_with_their_column() {
    let lab = Lab::new();
    let out = lab.path("a.parquet");
    let src = lab.path("typed.parquet");
    let cases: Vec<(ArrayRef, &str)> = vec![
        (Arc::new(StringArray::from(vec!["1.0", "2.0", "x"])), "Utf8"),
        (
            Arc::new(BooleanArray::from(vec![true, false, true])),
            "Boolean",
        ),
        (list_array(), "List"),
        (struct_array(), "Struct"),
        (Arc::new(Int64Array::from(vec![1i64, 2, 3])), "Int64"),
    ];
    for (values, ty) in cases {
        long_with_values(&src, values);
        assert_refused(
            &lab,
            &encode_args(ps(&src), ps(&out)),
            2,
            &[
                "typed.parquet",
                "column `value` has type",
                ty,
                "expected Float64",
            ],
        );
    }
    // Channel names that are not strings.
    write_columns(
        &src,
        vec![
            time_field("time"),
            field("channel", DataType::Int32),
            field("value", DataType::Float64),
        ],
        vec![
            time_array(&grid(3, 10.0)),
            Arc::new(Int32Array::from(vec![1, 2, 3])),
            f64s(&[1.0, 2.0, 3.0]),
        ],
        1024,
    );
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["typed.parquet", "column `channel` has type Int32"],
    );
    // A time column of floats.
    write_columns(
        &src,
        vec![
            field("time", DataType::Float64),
            field("v", DataType::Float64),
        ],
        vec![f64s(&[0.0, 0.1, 0.2]), f64s(&[1.0, 2.0, 3.0])],
        1024,
    );
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["typed.parquet", "column `time` has type Float64"],
    );
}

/// The `pressure` column alone, as the reference for a decode of `--channels pressure`.
fn write_only_pressure(lab: &Lab) -> std::path::PathBuf {
    let p = lab.path("pressure-only.parquet");
    write_wide(
        &p,
        &grid(3, 10.0),
        vec![("pressure", f64s(&[1.0, 2.0, 3.0]))],
    );
    p
}

#[test]
fn a_wide_file_never_drops_a_column_silently() {
    let lab = Lab::new();
    let out = lab.path("a.parquet");
    let src = lab.path("mixed.parquet");
    // Every column of a wide file is a channel: a boolean, string, list or struct column
    // beside numeric ones is refused by name rather than left out of the archive.
    let cases: Vec<(ArrayRef, &str)> = vec![
        (
            Arc::new(BooleanArray::from(vec![true, false, true])),
            "Boolean",
        ),
        (Arc::new(StringArray::from(vec!["on", "off", "on"])), "Utf8"),
        (list_array(), "List"),
        (struct_array(), "Struct"),
    ];
    for (odd, ty) in cases {
        write_wide(
            &src,
            &grid(3, 10.0),
            vec![("pressure", f64s(&[1.0, 2.0, 3.0])), ("state", odd)],
        );
        assert_refused(
            &lab,
            &encode_args(ps(&src), ps(&out)),
            2,
            &["mixed.parquet", "column `state` has type", ty, "--channels"],
        );
        // Leaving it out on purpose works, and archives exactly the named channel.
        let arch = lab.path("a.cyclarc.parquet");
        let dec = lab.path("decoded.parquet");
        let mut args = encode_args(ps(&src), ps(&arch));
        args.extend(["--channels", "pressure", "--budget-rms", "0"]);
        lab.run(&args).expect(0);
        lab.run(&["verify", ps(&arch), "--source", ps(&src)])
            .expect(0);
        lab.run(&["decode", ps(&arch), "--out", ps(&dec)]).expect(0);
        let pressure = write_only_pressure(&lab);
        assert_same(&read_rows(&pressure), &read_rows(&dec), Bound::Exact);
        clear_round_trip(&lab);
        std::fs::remove_file(pressure).expect("remove");
    }
    // Nothing numeric at all: the layout cannot be told; the columns are listed.
    write_wide(&src, &grid(3, 10.0), vec![("state", struct_array())]);
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["mixed.parquet", "cannot tell the layout", "state (Struct"],
    );
}

#[test]
fn a_long_file_archives_exactly_time_channel_and_value() {
    // Other columns of a long file (a quality flag here) are not part of the layout: the
    // archive holds the three mapped columns, and decode writes those three back.
    let lab = Lab::new();
    let src = lab.path("flagged.parquet");
    let n = 2000;
    write_columns(
        &src,
        vec![
            time_field("time"),
            Field::new("channel", DataType::Utf8, false),
            field("value", DataType::Float64),
            field("quality", DataType::Boolean),
        ],
        vec![
            time_array(&grid(n, 1000.0)),
            Arc::new(StringArray::from(names(n, "a"))),
            f64s(&clean_wave(n, 1000.0, 50.0, 1.0)),
            Arc::new(BooleanArray::from(vec![true; n])),
        ],
        1 << 16,
    );
    round_trip(&lab, &src, &["--budget-rms", "0"], Bound::Exact);
    let f = std::fs::File::open(lab.path("decoded.parquet")).expect("decoded");
    let b =
        parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(f).expect("Parquet");
    let cols: Vec<String> = b
        .schema()
        .fields()
        .iter()
        .map(|f| f.name().clone())
        .collect();
    assert_eq!(cols, ["time", "channel", "value"]);
}

#[test]
fn timestamps_as_strings_name_the_column() {
    let lab = Lab::new();
    let src = lab.path("text-time.parquet");
    write_columns(
        &src,
        vec![
            field("time", DataType::Utf8),
            Field::new("channel", DataType::Utf8, false),
            field("value", DataType::Float64),
        ],
        vec![
            Arc::new(StringArray::from(vec![
                "2026-05-04T00:00:00Z",
                "2026-05-04T00:00:01Z",
            ])),
            Arc::new(StringArray::from(names(2, "a"))),
            f64s(&[1.0, 2.0]),
        ],
        1024,
    );
    let out = lab.path("a.parquet");
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &[
            "text-time.parquet",
            "column `time` has type Utf8",
            "Timestamp",
        ],
    );
}

#[test]
fn null_times_and_names_and_out_of_range_times_name_the_row() {
    let lab = Lab::new();
    let out = lab.path("a.parquet");
    let src = lab.path("holes.parquet");
    let n = 20;
    let mut t: Vec<Option<i64>> = grid(n, 10.0).into_iter().map(Some).collect();
    t[7] = None;
    write_columns(
        &src,
        vec![
            field(
                "time",
                DataType::Timestamp(TimeUnit::Nanosecond, Some("UTC".into())),
            ),
            Field::new("channel", DataType::Utf8, false),
            field("value", DataType::Float64),
        ],
        vec![
            Arc::new(TimestampNanosecondArray::from(t).with_timezone("UTC")),
            Arc::new(StringArray::from(names(n, "a"))),
            f64s(&vec![1.0; n]),
        ],
        1024,
    );
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["holes.parquet", "column `time` row 7", "time is null"],
    );
    let mut ch: Vec<Option<&str>> = vec![Some("a"); n];
    ch[3] = None;
    write_columns(
        &src,
        vec![
            time_field("time"),
            field("channel", DataType::Utf8),
            field("value", DataType::Float64),
        ],
        vec![
            time_array(&grid(n, 10.0)),
            Arc::new(StringArray::from(ch)),
            f64s(&vec![1.0; n]),
        ],
        1024,
    );
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &[
            "holes.parquet",
            "column `channel` row 3",
            "channel name is null",
        ],
    );
    // Seconds beyond what ns since the epoch can hold (year ~33658 at row 2).
    let secs = vec![
        1_777_852_800i64,
        1_777_852_801,
        1_000_000_000_000,
        1_777_852_803,
    ];
    write_columns(
        &src,
        vec![
            Field::new("time", DataType::Timestamp(TimeUnit::Second, None), false),
            field("v", DataType::Float64),
        ],
        vec![
            Arc::new(TimestampSecondArray::from(secs)),
            f64s(&[1.0, 2.0, 3.0, 4.0]),
        ],
        1024,
    );
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["holes.parquet", "`time`", "row 2", "ns range"],
    );
}

// ───────────────────────────── odd values ─────────────────────────────

#[test]
fn all_null_values_round_trip() {
    let lab = Lab::new();
    let src = lab.path("nulls.parquet");
    let n = 3000;
    let none: Vec<Option<f32>> = vec![None; n];
    write_long(
        &src,
        &grid(n, 1000.0),
        &names(n, "a"),
        Arc::new(Float32Array::from(none)),
    );
    round_trip(&lab, &src, &[], Bound::Exact);
}

#[test]
fn all_nan_values_keep_their_bits() {
    let lab = Lab::new();
    let src = lab.path("nan.parquet");
    let n = 3000;
    // Quiet, negative and payload-carrying NaNs (IEEE 754-2008 §6.2: any exponent-all-ones,
    // non-zero-fraction pattern is a NaN; signalling ones included).
    let pats = [
        0x7ff8_0000_0000_0000u64,
        0xfff8_0000_0000_0001,
        0x7ff0_0000_0000_0001,
        0x7ffc_dead_beef_0042,
    ];
    let v: Vec<f64> = (0..n)
        .map(|i| f64::from_bits(pats[i % pats.len()]))
        .collect();
    write_long(&src, &grid(n, 1000.0), &names(n, "a"), f64s(&v));
    round_trip(&lab, &src, &[], Bound::Exact);
    // The same in f32, wide layout.
    let src = lab.path("nan32.parquet");
    let pats32 = [0x7fc0_0000u32, 0xffc0_0001, 0x7f80_0001, 0x7fa5_5a5a];
    let v: Vec<f32> = (0..n).map(|i| f32::from_bits(pats32[i % 4])).collect();
    write_wide(
        &src,
        &grid(n, 1000.0),
        vec![("x", Arc::new(Float32Array::from(v)))],
    );
    clear_round_trip(&lab);
    round_trip(&lab, &src, &[], Bound::Exact);
}

#[test]
fn infinities_and_nan_inside_a_signal_come_back_where_they_were() {
    let lab = Lab::new();
    let src = lab.path("inf.parquet");
    let n = 5000;
    let mut v = clean_wave(n, 1000.0, 50.0, 2.0);
    for i in (0..n).step_by(97) {
        v[i] = f64::INFINITY;
    }
    for i in (13..n).step_by(131) {
        v[i] = f64::NEG_INFINITY;
    }
    for x in &mut v[2000..2100] {
        *x = f64::NEG_INFINITY; // a stuck sensor reporting −Inf for 0.1 s
    }
    v[4000] = f64::from_bits(0x7ff8_0000_0000_0abc);
    let mut cells: Vec<Option<f64>> = v.into_iter().map(Some).collect();
    cells[10] = None;
    write_long(
        &src,
        &grid(n, 1000.0),
        &names(n, "a"),
        Arc::new(Float64Array::from(cells)),
    );
    round_trip(&lab, &src, &["--budget-rms", "0.01"], Bound::Abs(0.01));
}

#[test]
fn a_single_sample_round_trips() {
    let lab = Lab::new();
    let src = lab.path("one.parquet");
    write_long(&src, &[T0], &names(1, "a"), f64s(&[42.125]));
    round_trip(&lab, &src, &[], Bound::Rel(0.005));
    clear_round_trip(&lab);
    round_trip(&lab, &src, &["--budget-rms", "0"], Bound::Exact);
}

#[test]
fn a_constant_round_trips_within_budget() {
    let lab = Lab::new();
    let src = lab.path("flat.parquet");
    let n = 5000;
    write_long(&src, &grid(n, 1000.0), &names(n, "a"), f64s(&vec![3.25; n]));
    round_trip(&lab, &src, &["--budget-rms", "0.001"], Bound::Abs(0.001));
    clear_round_trip(&lab);
    // Zero everywhere, default (relative) budget: a budget of 0 · RMS is lossless.
    let src = lab.path("zero.parquet");
    write_long(&src, &grid(n, 1000.0), &names(n, "a"), f64s(&vec![0.0; n]));
    round_trip(&lab, &src, &[], Bound::Exact);
}

#[test]
fn magnitudes_near_1e30_and_beyond_round_trip_within_budget() {
    let lab = Lab::new();
    let n = 4000;
    let v = clean_wave(n, 1000.0, 50.0, 1e30);
    let src = lab.path("big.parquet");
    let v32: Vec<f32> = v.iter().map(|&x| x as f32).collect();
    write_wide(
        &src,
        &grid(n, 1000.0),
        vec![
            ("f64", f64s(&v)),
            ("f32", Arc::new(Float32Array::from(v32))),
        ],
    );
    round_trip(&lab, &src, &["--budget-rms", "1e27"], Bound::Abs(1e27));
    clear_round_trip(&lab);
    // And the default relative budget (0.5 % of each segment's RMS) on the same file.
    round_trip(&lab, &src, &[], Bound::Rel(0.005));
    clear_round_trip(&lab);
    // Far beyond: 1e300 in f64 (squares overflow) and 2e38 in f32 (near f32::MAX, 3.4e38).
    let huge = clean_wave(n, 1000.0, 50.0, 1e300);
    let near_max: Vec<f32> = clean_wave(n, 1000.0, 50.0, 2e38)
        .iter()
        .map(|&x| x as f32)
        .collect();
    assert!(near_max.iter().all(|x| x.is_finite()));
    write_wide(
        &src,
        &grid(n, 1000.0),
        vec![
            ("f64", f64s(&huge)),
            ("f32", Arc::new(Float32Array::from(near_max))),
        ],
    );
    round_trip(&lab, &src, &["--budget-rms", "1e35"], Bound::Abs(1e35));
}

#[test]
fn subnormal_values_round_trip() {
    let lab = Lab::new();
    let n = 4000;
    // f64 subnormals are below 2.2250738585072014e-308, f32 ones below 1.1754944e-38
    // (IEEE 754 binary64/binary32 smallest normal).
    let v64: Vec<f64> = clean_wave(n, 1000.0, 50.0, 1e-310);
    let v32: Vec<f32> = clean_wave(n, 1000.0, 50.0, 1e-40)
        .iter()
        .map(|&x| x as f32)
        .collect();
    assert!(v64.iter().all(|x| x.abs() < f64::MIN_POSITIVE));
    assert!(v32.iter().all(|x| x.abs() < f32::MIN_POSITIVE));
    let src = lab.path("tiny.parquet");
    write_wide(
        &src,
        &grid(n, 1000.0),
        vec![
            ("f64", f64s(&v64)),
            ("f32", Arc::new(Float32Array::from(v32))),
        ],
    );
    round_trip(&lab, &src, &["--budget-rms", "0"], Bound::Exact);
    clear_round_trip(&lab);
    // The default relative budget (0.5 % of each segment's RMS).
    round_trip(&lab, &src, &[], Bound::Rel(0.005));
}

#[test]
fn int16_extremes_round_trip_lossless_and_with_a_budget() {
    let lab = Lab::new();
    let n = 6000;
    // Full-scale square wave at 50 Hz (fs 1 kHz) between i16::MIN and i16::MAX, with single
    // extreme spikes: reconstructions overshoot and must be clamped to the type.
    let v: Vec<i16> = (0..n)
        .map(|i| {
            if i % 487 == 0 {
                i16::MIN
            } else if (i / 10) % 2 == 0 {
                i16::MAX
            } else {
                i16::MIN
            }
        })
        .collect();
    let src = lab.path("adc.parquet");
    write_long(
        &src,
        &grid(n, 1000.0),
        &names(n, "ia"),
        Arc::new(Int16Array::from(v)),
    );
    round_trip(&lab, &src, &["--budget-rms", "0"], Bound::Exact);
    clear_round_trip(&lab);
    round_trip(&lab, &src, &["--budget-rms", "300"], Bound::Abs(300.0));
}

#[test]
fn a_given_fundamental_near_nyquist_or_wrong_by_ten_keeps_the_budget() {
    let lab = Lab::new();
    let fs = 1000.0;
    let n = 6000;
    let src = lab.path("f.parquet");
    // 480 Hz at fs 1 kHz: 0.96 of Nyquist.
    write_long(
        &src,
        &grid(n, fs),
        &names(n, "a"),
        f64s(&clean_wave(n, fs, 480.0, 1.0)),
    );
    round_trip(
        &lab,
        &src,
        &["--fundamental-hz", "480", "--budget-rms", "0.01"],
        Bound::Abs(0.01),
    );
    clear_round_trip(&lab);
    // At and above Nyquist.
    for f in ["500", "900"] {
        round_trip(
            &lab,
            &src,
            &["--fundamental-hz", f, "--budget-rms", "0.01"],
            Bound::Abs(0.01),
        );
        clear_round_trip(&lab);
    }
    // 50 Hz given as 500 Hz and as 5 Hz.
    write_long(
        &src,
        &grid(n, fs),
        &names(n, "a"),
        f64s(&clean_wave(n, fs, 50.0, 1.0)),
    );
    for f in ["500", "5"] {
        round_trip(
            &lab,
            &src,
            &["--fundamental-hz", f, "--budget-rms", "0.01"],
            Bound::Abs(0.01),
        );
        clear_round_trip(&lab);
    }
}

// ───────────────────────────── odd time axes ─────────────────────────────

#[test]
fn duplicate_timestamps_are_refused_naming_channel_and_rows() {
    let lab = Lab::new();
    let out = lab.path("a.parquet");
    let src = lab.path("dup.parquet");
    let n = 40;
    // Sorted source: rows 11 and 12 share a time.
    let mut t = grid(n, 100.0);
    t[12] = t[11];
    write_long(&src, &t, &names(n, "bearing.de"), f64s(&vec![1.0; n]));
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["dup.parquet", "channel `bearing.de`", "rows 11 and 12"],
    );
    // Unsorted source: rows 3 and 30 share a time.
    let mut t = grid(n, 100.0);
    t.reverse();
    t[30] = t[3];
    write_long(&src, &t, &names(n, "bearing.de"), f64s(&vec![1.0; n]));
    assert_refused(
        &lab,
        &encode_args(ps(&src), ps(&out)),
        2,
        &["dup.parquet", "channel `bearing.de`", "rows 3 and 30"],
    );
}

#[test]
fn non_monotonic_time_is_sorted_and_round_trips() {
    use rand::seq::SliceRandom;
    use rand::SeedableRng;
    let lab = Lab::new();
    let n = 8000;
    let t = grid(n, 1000.0);
    let v = clean_wave(n, 1000.0, 50.0, 1.0);
    let mut order: Vec<usize> = (0..n).collect();
    order.shuffle(&mut rand_chacha::ChaCha8Rng::seed_from_u64(5));
    let ts: Vec<i64> = order.iter().map(|&i| t[i]).collect();
    let vs: Vec<f64> = order.iter().map(|&i| v[i]).collect();
    let src = lab.path("shuffled.parquet");
    write_long(&src, &ts, &names(n, "a"), f64s(&vs));
    round_trip(&lab, &src, &["--budget-rms", "0.001"], Bound::Abs(0.001));
}

#[test]
fn jittered_time_comes_back_to_the_nanosecond() {
    use rand::{Rng, SeedableRng};
    let lab = Lab::new();
    let n = 8000;
    let mut r = rand_chacha::ChaCha8Rng::seed_from_u64(9);
    // 10 kHz grid with ±3 µs of clock jitter and a slow drift.
    let t: Vec<i64> = (0..n)
        .map(|i| {
            T0 + i as i64 * 100_000 + r.random_range(-3000..=3000) + (i as i64 * i as i64) / 10_000
        })
        .collect();
    let src = lab.path("jitter.parquet");
    write_long(
        &src,
        &t,
        &names(n, "a"),
        f64s(&clean_wave(n, 10_000.0, 50.0, 1.0)),
    );
    round_trip(&lab, &src, &["--budget-rms", "0.001"], Bound::Abs(0.001));
}

#[test]
fn huge_holes_between_runs_round_trip() {
    let lab = Lab::new();
    // Three runs of 1 s at 1 kHz: in 1971, now, and in 2261 (near the end of ns since 1970
    // in i64, 2262-04-11).
    let starts = [31_536_000_000_000_000i64, T0, 9_214_646_400_000_000_000];
    let mut t = Vec::new();
    for s in starts {
        t.extend((0..1000).map(|i| s + i * 1_000_000));
    }
    let n = t.len();
    let src = lab.path("holes.parquet");
    write_long(
        &src,
        &t,
        &names(n, "a"),
        f64s(&clean_wave(n, 1000.0, 50.0, 1.0)),
    );
    round_trip(&lab, &src, &["--budget-rms", "0.001"], Bound::Abs(0.001));
}

#[test]
fn legacy_int96_timestamps_are_read_as_nanoseconds() {
    use parquet::data_type::{DoubleType, Int96, Int96Type};
    use parquet::file::writer::SerializedFileWriter;
    use parquet::schema::parser::parse_message_type;
    let lab = Lab::new();
    let src = lab.path("int96.parquet");
    let n = 3000usize;
    let t = grid(n, 1000.0);
    // INT96 = (nanoseconds of the day as u64 little-endian, Julian day as u32); the Unix epoch
    // is Julian day 2440588 (Parquet format, LogicalTypes.md, "INT96 (deprecated)").
    let day_ns = 86_400_000_000_000i64;
    let int96: Vec<Int96> = t
        .iter()
        .map(|&ns| {
            let day = ns.div_euclid(day_ns) + 2_440_588;
            let nod = ns.rem_euclid(day_ns) as u64;
            let mut v = Int96::new();
            v.set_data(nod as u32, (nod >> 32) as u32, day as u32);
            v
        })
        .collect();
    let v = clean_wave(n, 1000.0, 50.0, 1.0);
    let schema = Arc::new(
        parse_message_type("message s { REQUIRED INT96 time; REQUIRED DOUBLE pump; }")
            .expect("schema"),
    );
    let f = std::fs::File::create(&src).expect("create");
    let mut w = SerializedFileWriter::new(f, schema, Default::default()).expect("writer");
    let mut rg = w.next_row_group().expect("row group");
    let mut c = rg.next_column().expect("col").expect("time");
    c.typed::<Int96Type>()
        .write_batch(&int96, None, None)
        .expect("write");
    c.close().expect("close");
    let mut c = rg.next_column().expect("col").expect("pump");
    c.typed::<DoubleType>()
        .write_batch(&v, None, None)
        .expect("write");
    c.close().expect("close");
    rg.close().expect("close");
    w.close().expect("close");
    // The reference reader sees Timestamp(ns) with our instants.
    let table = read_rows(&src);
    assert_eq!(
        table.time_type,
        DataType::Timestamp(TimeUnit::Nanosecond, None)
    );
    let mut times: Vec<i64> = table.rows.iter().map(|r| r.1).collect();
    times.sort_unstable();
    assert_eq!(times, t);
    // Round trip: same instants and values; the decoded file stores them as INT64 timestamps.
    round_trip(&lab, &src, &["--budget-rms", "0"], Bound::Exact);
    let dec = std::fs::File::open(lab.path("decoded.parquet")).expect("decoded");
    let md = parquet::file::reader::SerializedFileReader::new(dec).expect("reader");
    use parquet::file::reader::FileReader;
    let col = md.metadata().file_metadata().schema_descr().column(0);
    assert_eq!(col.physical_type(), parquet::basic::Type::INT64);
}

// ───────────────────────────── many or odd channels ─────────────────────────────

#[test]
fn ten_thousand_channels_in_one_long_file_round_trip() {
    let lab = Lab::new();
    let per = 12usize;
    let chans = 10_000usize;
    let mut t = Vec::with_capacity(per * chans);
    let mut nm = Vec::with_capacity(per * chans);
    let mut v = Vec::with_capacity(per * chans);
    // Interleaved by time, as a logger writes them.
    for i in 0..per {
        for c in 0..chans {
            t.push(T0 + i as i64 * 10_000_000);
            nm.push(format!("site{:02}.m{:04}", c % 37, c));
            v.push(((c * 7 + i * 3) % 101) as f64 * 0.25);
        }
    }
    let src = lab.path("many.parquet");
    write_long(&src, &t, &nm, f64s(&v));
    round_trip(&lab, &src, &["--budget-rms", "0"], Bound::Exact);
}

#[test]
fn unicode_channel_names_round_trip() {
    let lab = Lab::new();
    let names_u = [
        "Pumpe-Ω/ß.Lager",
        "振動.軸受.外輪",
        "🛠️ motor",
        "e\u{301}tage-1", // combining accent
        "\u{202e}rtl",    // bidi override
        " spaced  name ",
        "",
    ];
    let n = 1500;
    let mut t = Vec::new();
    let mut nm = Vec::new();
    let mut v = Vec::new();
    for (k, name) in names_u.iter().enumerate() {
        let w = clean_wave(n, 1000.0, 50.0 + k as f64, 1.0);
        for (i, &ti) in grid(n, 1000.0).iter().enumerate() {
            t.push(ti);
            nm.push(name.to_string());
            v.push(w[i]);
        }
    }
    let src = lab.path("unicode.parquet");
    write_long(&src, &t, &nm, f64s(&v));
    round_trip(&lab, &src, &["--budget-rms", "0"], Bound::Exact);
}

#[test]
fn channel_names_with_path_pieces_never_become_files() {
    let lab = Lab::new();
    std::fs::create_dir(lab.path("work")).expect("mkdir");
    let evil = [
        "../../escaped",
        "a/b/c",
        "/etc/cyclarc-test",
        "..",
        "./x",
        "C:\\temp\\y",
    ];
    let n = 1000;
    let mut t = Vec::new();
    let mut nm = Vec::new();
    let mut v = Vec::new();
    for name in evil {
        for (i, &ti) in grid(n, 1000.0).iter().enumerate() {
            t.push(ti);
            nm.push(name.to_string());
            v.push(i as f64 * 0.5);
        }
    }
    let src = lab.path("work/paths.parquet");
    write_long(&src, &t, &nm, f64s(&v));
    // Encode, verify and decode inside work/; only the three outputs appear.
    let arch = lab.path("work/a.cyclarc.parquet");
    let dec = lab.path("work/decoded.parquet");
    let before = lab.tree();
    lab.encode(&src, &arch, &["--budget-rms", "0"]).expect(0);
    lab.run(&["verify", ps(&arch), "--source", ps(&src)])
        .expect(0);
    lab.run(&["decode", ps(&arch), "--out", ps(&dec)]).expect(0);
    let mut expected = before;
    for f in [
        "work/a.cyclarc.parquet",
        "work/a.cyclarc.parquet.sha256",
        "work/decoded.parquet",
    ] {
        expected.insert(f.to_string());
    }
    assert_eq!(lab.tree(), expected);
    // Nothing where the names would point, relative to the working folder (the lab), the
    // output folder (work/) or the root.
    let root = lab.dir.path();
    let parent = root.parent().expect("parent");
    for p in [
        parent.join("escaped"),
        parent.parent().unwrap_or(parent).join("escaped"),
        root.join("a"),
        root.join("work/a"),
        root.join("x"),
        root.join("work/x"),
        std::path::PathBuf::from("/etc/cyclarc-test"),
    ] {
        assert!(!p.exists(), "{} appeared", p.display());
    }
    // The names round-trip exactly, one channel each.
    assert_same(&read_rows(&src), &read_rows(&dec), Bound::Exact);
    let tab = read_rows(&dec);
    let mut got: Vec<&str> = tab.types.iter().map(|(n, _)| n.as_str()).collect();
    let mut want = evil.to_vec();
    got.sort_unstable();
    want.sort_unstable();
    assert_eq!(got, want);
    // Decoding one channel by its awkward name selects it.
    let one = lab.path("work/one.parquet");
    lab.run(&[
        "decode",
        ps(&arch),
        "--out",
        ps(&one),
        "--channel",
        "../../escaped",
    ])
    .expect(0);
    assert_eq!(read_rows(&one).types.len(), 1);
}

// ───────────────────────────── options ─────────────────────────────

#[test]
fn negative_nan_and_infinite_budgets_are_refused() {
    let lab = Lab::new();
    let src = lab.path("s.parquet");
    good_source(&src);
    let out = lab.path("a.parquet");
    let cases: [&[&str]; 7] = [
        &["--budget-rms", "-0.5"],
        &["--budget-rms", "NaN"],
        &["--budget-rms", "inf"],
        &["--budget-rel", "-0.01"],
        &["--budget-rel", "nan"],
        &["--budget-rel", "0.01", "--budget-floor", "-1"],
        &["--budget-rel", "0.01", "--budget-floor", "NaN"],
    ];
    for extra in cases {
        let mut args = encode_args(ps(&src), ps(&out));
        args.extend_from_slice(extra);
        assert_refused(
            &lab,
            &args,
            2,
            &["invalid setting `budget-", "finite number ≥ 0"],
        );
    }
}

// ───────────────────────────── pipelines ─────────────────────────────

#[test]
fn a_schema_change_between_files_fails_that_file_only() {
    let lab = Lab::new();
    std::fs::create_dir(lab.path("in")).expect("mkdir");
    let n = 2000;
    for name in ["day1", "day3"] {
        write_long(
            &lab.path(&format!("in/{name}.parquet")),
            &grid(n, 1000.0),
            &names(n, "a"),
            f64s(&clean_wave(n, 1000.0, 50.0, 1.0)),
        );
    }
    // day2's logger was reconfigured: the value column is now called `reading`.
    write_columns(
        &lab.path("in/day2.parquet"),
        vec![
            time_field("time"),
            Field::new("channel", DataType::Utf8, false),
            field("reading", DataType::Float64),
        ],
        vec![
            time_array(&grid(n, 1000.0)),
            Arc::new(StringArray::from(names(n, "a"))),
            f64s(&clean_wave(n, 1000.0, 50.0, 1.0)),
        ],
        1 << 16,
    );
    let pipe = lab.path("job.toml");
    std::fs::write(
        &pipe,
        "output = \"out\"\n[encode]\nbudget_rms = 0.001\nlayout = \"long\"\n[[source]]\npaths = [\"in/*.parquet\"]\n",
    )
    .expect("write pipeline");
    let ran = lab.run(&["run", ps(&pipe), "--json"]);
    ran.expect(2)
        .says(&["day2.parquet", "no column `value`", "reading ("]);
    let report: serde_json::Value = serde_json::from_str(&ran.stdout).expect("JSON report");
    let status: Vec<(String, String)> = report["sources"]
        .as_array()
        .expect("sources")
        .iter()
        .map(|s| {
            (
                s["source"]
                    .as_str()
                    .unwrap_or_default()
                    .rsplit('/')
                    .next()
                    .unwrap_or_default()
                    .to_string(),
                s["status"].as_str().unwrap_or_default().to_string(),
            )
        })
        .collect();
    assert_eq!(
        status,
        [
            ("day1.parquet".to_string(), "archived".to_string()),
            ("day2.parquet".into(), "failed".into()),
            ("day3.parquet".into(), "archived".into())
        ]
    );
    let out: Vec<String> = tree(&lab.path("out")).into_iter().collect();
    assert_eq!(
        out,
        [
            ".cyclarc.lock",
            "cyclarc-manifest.json",
            "day1.cyclarc.parquet",
            "day1.cyclarc.parquet.sha256",
            "day3.cyclarc.parquet",
            "day3.cyclarc.parquet.sha256"
        ]
    );
    let manifest: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(lab.path("out/cyclarc-manifest.json")).expect("manifest"),
    )
    .expect("manifest JSON");
    let keys: Vec<&String> = manifest.as_object().expect("object").keys().collect();
    assert_eq!(keys, ["day1.cyclarc.parquet", "day3.cyclarc.parquet"]);
    for k in keys {
        assert_eq!(
            manifest[k]["archive_sha256"].as_str().expect("sha"),
            sha256(&lab.path(&format!("out/{k}")))
        );
    }
}
