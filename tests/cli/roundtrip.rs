//! Round trips through the real binary: encode → verify → decode, then the decoded file is read
//! with the parquet crate and compared with the source file the test wrote.
//!
//! What each comparison is checked against:
//! - schema, row count, timestamps, null/NaN/±Inf cells: the source file itself (exact);
//! - lossless (`--budget-rms 0`): the source file itself, bit for bit;
//! - lossy values: per segment (split by the archive's `samples` column), the RMS of
//!   decoded − source must not exceed the segment's `budget_rms` (the README's contract);
//! - `budget_rms`: the user's setting (absolute), or rel · the segment's RMS recomputed from
//!   the source, floored (README, Budgets), stored as f32 rounded down.
use crate::support::archive::*;
use crate::support::series::*;
use crate::support::source::*;
use crate::support::*;
use arrow::datatypes::TimeUnit;
use rand::Rng;

/// Sample rate and fundamental for a time unit: whole-unit steps and 20+ samples per cycle.
fn rate_for(t: TimeKind) -> (f64, f64, usize) {
    match t {
        TimeKind::Ts(TimeUnit::Second, _) => (1.0, 0.05, 1200),
        TimeKind::Ts(TimeUnit::Millisecond, _) => (1000.0, 50.0, 3000),
        TimeKind::Ts(TimeUnit::Microsecond, _) => (10_000.0, 50.0, 6000),
        // 25.6 kHz: the step is 39 062.5 ns, so stamps alternate between 39 062 and 39 063 ns.
        _ => (25_600.0, 29.5, 8192),
    }
}

fn amplitude(vt: VType) -> f64 {
    match vt {
        VType::F32 | VType::F64 => 1.0,
        VType::I16 | VType::I32 => 3000.0,
    }
}

fn chans(vts: &[VType], names: &[&str], t: TimeKind) -> Vec<Chan> {
    let (fs, f0, n) = rate_for(t);
    vts.iter()
        .zip(names)
        .enumerate()
        .map(|(i, (&vt, name))| {
            Chan::wave(
                name,
                vt,
                n,
                fs,
                f0 * (1.0 + 0.01 * i as f64),
                amplitude(vt),
                100 + i as u64,
            )
        })
        .collect()
}

const TAGS: [&str; 3] = ["st4.p1.de.accel", "st4.p1.nde.accel", "st4.p2.de.accel"];

fn long_case(vt: VType, names: NameKind, time: TimeKind, budget: &[&str]) {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let mut spec = Spec::new(time);
    spec.names = names;
    write_long(
        &src,
        &chans(&[vt; 3], &TAGS, time),
        spec,
        &Columns::default(),
    );
    let rt = round_trip(&s, &src, &Shape::long(), budget, false);
    assert_eq!(rt.decoded.len(), 3);
    assert!(rt.segments.len() >= 3);
}

fn wide_case(vts: &[VType], time: TimeKind, budget: &[&str]) {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let names = ["ia", "ib", "ic", "vib"];
    write_wide(
        &src,
        &chans(vts, &names[..vts.len()], time),
        Spec::new(time),
        "time",
    );
    let rt = round_trip(&s, &src, &Shape::wide(), budget, false);
    assert_eq!(rt.decoded.len(), vts.len());
}

// ── long layout: every value type, every channel-name type, every time type ──

#[test]
fn long_f32_utf8_timestamp_ns_utc() {
    long_case(
        VType::F32,
        NameKind::Utf8,
        TimeKind::Ts(TimeUnit::Nanosecond, Some("UTC")),
        &["--budget-rms", "0.02"],
    );
}

#[test]
fn long_f64_largeutf8_timestamp_us_no_zone() {
    long_case(
        VType::F64,
        NameKind::LargeUtf8,
        TimeKind::Ts(TimeUnit::Microsecond, None),
        &["--budget-rel", "0.01"],
    );
}

#[test]
fn long_i16_dictionary_timestamp_ms_offset_zone() {
    long_case(
        VType::I16,
        NameKind::Dict,
        TimeKind::Ts(TimeUnit::Millisecond, Some("+05:30")),
        &["--budget-rms", "20"],
    );
}

#[test]
fn long_i32_utf8_timestamp_s_no_zone() {
    long_case(
        VType::I32,
        NameKind::Utf8,
        TimeKind::Ts(TimeUnit::Second, None),
        &["--budget-rms", "20"],
    );
}

#[test]
fn long_f32_largeutf8_timestamp_s_named_zone() {
    long_case(
        VType::F32,
        NameKind::LargeUtf8,
        TimeKind::Ts(TimeUnit::Second, Some("America/Chicago")),
        &["--budget-rel", "0.02", "--budget-floor", "0.001"],
    );
}

#[test]
fn long_f64_dictionary_int64_ns() {
    long_case(
        VType::F64,
        NameKind::Dict,
        TimeKind::Int64Ns,
        &["--budget-rms", "0.02"],
    );
}

#[test]
fn long_i16_utf8_timestamp_ns_no_zone() {
    long_case(
        VType::I16,
        NameKind::Utf8,
        TimeKind::Ts(TimeUnit::Nanosecond, None),
        &["--budget-rel", "0.01"],
    );
}

#[test]
fn long_dictionary_with_other_key_or_value_type_keeps_its_type() {
    for kind in [NameKind::Dict16, NameKind::DictLarge] {
        long_case(
            VType::F32,
            kind,
            TimeKind::Int64Ns,
            &["--budget-rms", "0.02"],
        );
    }
}

#[test]
fn long_custom_column_names() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let cols = Columns {
        time: "ts".into(),
        channel: "tag".into(),
        value: "reading".into(),
    };
    let t = TimeKind::Ts(TimeUnit::Nanosecond, None);
    write_long(
        &src,
        &chans(&[VType::F32; 3], &TAGS, t),
        Spec::new(t),
        &cols,
    );
    let args = [
        "--time-column",
        "ts",
        "--channel-column",
        "tag",
        "--value-column",
        "reading",
        "--layout",
        "long",
        "--budget-rms",
        "0.02",
    ];
    let rt = round_trip(&s, &src, &Shape::Long(cols), &args, false);
    assert_eq!(rt.decoded.len(), 3);
}

// ── wide layout ──

#[test]
fn wide_f32_int64_ns() {
    wide_case(
        &[VType::F32, VType::F32, VType::F32],
        TimeKind::Int64Ns,
        &["--budget-rms", "0.02"],
    );
}

#[test]
fn wide_f64_timestamp_ns_no_zone() {
    wide_case(
        &[VType::F64, VType::F64],
        TimeKind::Ts(TimeUnit::Nanosecond, None),
        &["--budget-rel", "0.01"],
    );
}

#[test]
fn wide_i16_timestamp_s_utc() {
    wide_case(
        &[VType::I16, VType::I16, VType::I16],
        TimeKind::Ts(TimeUnit::Second, Some("UTC")),
        &["--budget-rms", "20"],
    );
}

#[test]
fn wide_i32_timestamp_ms_no_zone() {
    wide_case(
        &[VType::I32, VType::I32],
        TimeKind::Ts(TimeUnit::Millisecond, None),
        &["--budget-rms", "20"],
    );
}

#[test]
fn wide_mixed_types_timestamp_us_named_zone() {
    wide_case(
        &[VType::F32, VType::F64, VType::I16, VType::I32],
        TimeKind::Ts(TimeUnit::Microsecond, Some("Europe/Oslo")),
        &["--budget-rel", "0.01", "--budget-floor", "0.5"],
    );
}

// ── lossless ──

/// Values that only survive a bit-exact path: −0.0, a subnormal, NaNs with payloads.
fn awkward_floats(c: &mut Chan) {
    let (zero, sub, nan) = match c.vt {
        VType::F32 => (
            (-0.0f32).to_bits() as u64,
            f32::from_bits(3).to_bits() as u64,
            0x7fc0_1234u64,
        ),
        VType::F64 => (
            (-0.0f64).to_bits(),
            f64::from_bits(5).to_bits(),
            0x7ff8_0000_dead_beef,
        ),
        _ => return,
    };
    c.cells[10] = Some(zero);
    c.cells[11] = Some(sub);
    c.cells[12] = Some(nan);
    c.cells[500] = Some(zero);
}

#[test]
fn lossless_long_f32_is_bit_exact() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let t = TimeKind::Ts(TimeUnit::Nanosecond, Some("UTC"));
    let mut cs = chans(&[VType::F32; 3], &TAGS, t);
    for c in &mut cs {
        awkward_floats(c);
    }
    write_long(&src, &cs, Spec::new(t), &Columns::default());
    let rt = round_trip(&s, &src, &Shape::long(), &["--budget-rms", "0"], true);
    assert!(
        rt.segments
            .iter()
            .all(|c| c.budget == 0.0 && c.row.error_rms == 0.0),
        "budget 0 asked"
    );
}

#[test]
fn lossless_wide_every_type_is_bit_exact() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let t = TimeKind::Ts(TimeUnit::Microsecond, None);
    let mut cs = chans(
        &[VType::F32, VType::F64, VType::I16, VType::I32],
        &["a", "b", "c", "d"],
        t,
    );
    for c in &mut cs {
        awkward_floats(c);
    }
    // Integer extremes.
    cs[2].cells[20] = Some(VType::I16.bits(i16::MIN as f64));
    cs[2].cells[21] = Some(VType::I16.bits(i16::MAX as f64));
    cs[3].cells[20] = Some(VType::I32.bits(i32::MIN as f64));
    cs[3].cells[21] = Some(VType::I32.bits(i32::MAX as f64));
    write_wide(&src, &cs, Spec::new(t), "time");
    let rt = round_trip(&s, &src, &Shape::wide(), &["--budget-rms", "0"], true);
    assert!(
        rt.segments
            .iter()
            .all(|c| c.budget == 0.0 && c.row.error_rms == 0.0),
        "budget 0 asked"
    );
}

// ── budgets ──

#[test]
fn absolute_budget_is_stored_as_asked() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let t = TimeKind::Int64Ns;
    write_long(
        &src,
        &chans(&[VType::F64; 3], &TAGS, t),
        Spec::new(t),
        &Columns::default(),
    );
    // The rule is recorded as asked, and every segment is within it (round_trip checks each
    // against the f32 just below 0.0123, which is not an f32).
    let rt = round_trip(&s, &src, &Shape::long(), &["--budget-rms", "0.0123"], false);
    let want = f32_down(0.0123);
    assert!((want as f64) <= 0.0123 && want.next_up() as f64 > 0.0123);
    let meta = archive_meta(&s.path("a.cyclarc.parquet"));
    for ch in meta["channels"].as_array().expect("channels") {
        assert_eq!(
            ch["budget"],
            serde_json::json!({ "Absolute": 0.0123 }),
            "{ch}"
        );
    }
    for c in &rt.segments {
        assert_eq!(
            c.budget, want as f64,
            "{} at {}",
            c.seg.channel, c.seg.start
        );
        assert!(c.error_rms <= want as f64);
    }
}

#[test]
fn relative_budget_is_rel_times_segment_rms_with_floor() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let fs = 10_000.0;
    let n = 12_000;
    // A machine that is stopped for the first 0.4 s (sensor noise only) and then runs.
    let mut chans = Vec::new();
    for (i, name) in ["m1.accel", "m2.accel"].iter().enumerate() {
        let run = wave(n, fs, 50.0, 1.0, 0.01, 40 + i as u64);
        let quiet = wave(n, fs, 50.0, 0.0, 2e-4, 50 + i as u64);
        let v: Vec<f64> = (0..n)
            .map(|j| if j < 4000 { quiet[j] } else { run[j] })
            .collect();
        chans.push(Chan::new(name, VType::F64, grid(n, fs), &v));
    }
    write_wide(&src, &chans, Spec::new(TimeKind::Int64Ns), "time");
    let (rel, floor) = (0.02, 0.003);
    let rt = round_trip(
        &s,
        &src,
        &Shape::wide(),
        &["--budget-rel", "0.02", "--budget-floor", "0.003"],
        false,
    );
    // The rule is recorded as asked; round_trip checked every segment against it, on the
    // segment's RMS recomputed here.
    let meta = archive_meta(&s.path("a.cyclarc.parquet"));
    for ch in meta["channels"].as_array().expect("channels") {
        assert_eq!(
            ch["budget"],
            serde_json::json!({ "Relative": { "fraction": rel, "floor": floor } }),
            "{ch}"
        );
    }
    let (mut floored, mut relative) = (0, 0);
    for c in &rt.segments {
        if rel * c.source_rms < floor * 0.99 {
            assert_eq!(c.budget, f32_down(floor) as f64, "floored budget");
            floored += 1;
        } else if rel * c.source_rms > floor * 1.01 {
            relative += 1;
        }
    }
    assert!(
        floored >= 2 && relative >= 2,
        "floored {floored}, relative {relative}"
    );
}

#[test]
fn default_budget_is_half_a_percent_of_segment_rms() {
    // README: "The default, when no budget is given, is `--budget-rel 0.005` (0.5 %)."
    let s = Lab::new();
    let src = s.path("src.parquet");
    let t = TimeKind::Ts(TimeUnit::Microsecond, None);
    write_wide(
        &src,
        &chans(&[VType::F32, VType::F32], &["a", "b"], t),
        Spec::new(t),
        "time",
    );
    let rt = round_trip(&s, &src, &Shape::wide(), &[], false);
    assert!(!rt.segments.is_empty());
    let meta = archive_meta(&s.path("a.cyclarc.parquet"));
    for ch in meta["channels"].as_array().expect("channels") {
        assert_eq!(
            ch["budget"],
            serde_json::json!({ "Relative": { "fraction": 0.005, "floor": 0.0 } }),
            "{ch}"
        );
    }
}

// ── NaN (with payloads), ±Inf, null ──

/// Put specials into a channel: NaNs with non-default payloads, ±Inf, nulls, a run of NaN.
fn sprinkle(c: &mut Chan, seed: u64) -> usize {
    let mut r = rng(seed);
    let n = c.cells.len();
    let nans: Vec<u64> = match c.vt {
        // quiet NaN with payload, negative signalling NaN, the default NaN
        VType::F32 => vec![0x7fc0_1234, 0xff80_0001, f32::NAN.to_bits() as u64],
        VType::F64 => vec![
            0x7ff8_0000_dead_beef,
            0xfff0_0000_0000_0001,
            f64::NAN.to_bits(),
        ],
        _ => vec![],
    };
    let mut placed = 0;
    for k in 0..40 {
        let i = r.random_range(0..n);
        c.cells[i] = match (k % 4, c.vt) {
            (0, _) | (_, VType::I16) | (_, VType::I32) => None,
            (1, VType::F32) => Some(f32::INFINITY.to_bits() as u64),
            (1, _) => Some(f64::INFINITY.to_bits()),
            (2, VType::F32) => Some(f32::NEG_INFINITY.to_bits() as u64),
            (2, _) => Some(f64::NEG_INFINITY.to_bits()),
            _ => Some(nans[k % nans.len()]),
        };
        placed += 1;
    }
    if !nans.is_empty() {
        for i in n / 2..n / 2 + 300 {
            c.cells[i] = Some(nans[1]);
        }
    }
    placed
}

/// The source file (read back with the parquet crate) holds these NaN bit patterns, so the
/// round trip really carries them.
fn assert_source_holds(src: &std::path::Path, shape: &Shape, bits: &[u64]) {
    let series = shape.series(&read_table(src));
    for b in bits {
        assert!(
            series.values().any(|s| s.cells.contains(&Some(*b))),
            "the source lacks NaN pattern {b:#x}"
        );
    }
}

#[test]
fn specials_long_f32_come_back_exactly() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let t = TimeKind::Ts(TimeUnit::Nanosecond, Some("UTC"));
    let mut cs = chans(&[VType::F32; 3], &TAGS, t);
    for (i, c) in cs.iter_mut().enumerate() {
        sprinkle(c, 7 + i as u64);
    }
    write_long(&src, &cs, Spec::new(t), &Columns::default());
    assert_source_holds(&src, &Shape::long(), &[0x7fc0_1234, 0xff80_0001]);
    round_trip(&s, &src, &Shape::long(), &["--budget-rms", "0.02"], false);
}

#[test]
fn specials_long_f64_come_back_exactly() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let t = TimeKind::Int64Ns;
    let mut cs = chans(&[VType::F64; 3], &TAGS, t);
    for (i, c) in cs.iter_mut().enumerate() {
        sprinkle(c, 17 + i as u64);
    }
    write_long(&src, &cs, Spec::new(t), &Columns::default());
    assert_source_holds(
        &src,
        &Shape::long(),
        &[0x7ff8_0000_dead_beef, 0xfff0_0000_0000_0001],
    );
    round_trip(&s, &src, &Shape::long(), &["--budget-rel", "0.01"], false);
}

#[test]
fn specials_wide_every_type_come_back_exactly() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let t = TimeKind::Ts(TimeUnit::Microsecond, Some("UTC"));
    let mut cs = chans(
        &[VType::F32, VType::F64, VType::I16, VType::I32],
        &["a", "b", "c", "d"],
        t,
    );
    for (i, c) in cs.iter_mut().enumerate() {
        sprinkle(c, 27 + i as u64);
    }
    write_wide(&src, &cs, Spec::new(t), "time");
    round_trip(
        &s,
        &src,
        &Shape::wide(),
        &["--budget-rel", "0.01", "--budget-floor", "0.01"],
        false,
    );
}

// ── holes, jitter, order, duplicates ──

#[test]
fn hole_splits_runs_and_both_sides_come_back() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let fs = 10_000.0;
    let mut cs: Vec<Chan> = (0..2)
        .map(|i| {
            Chan::wave(
                ["a", "b"][i],
                VType::F32,
                8000,
                fs,
                50.0,
                1.0,
                60 + i as u64,
            )
        })
        .collect();
    // 50 ms missing: a step of 501 samples, far beyond 1.5× the median step.
    for c in &mut cs {
        c.cut(4000..4500);
    }
    let after_hole = cs[0].times[4000];
    write_wide(&src, &cs, Spec::new(TimeKind::Int64Ns), "time");
    let rt = round_trip(&s, &src, &Shape::wide(), &["--budget-rms", "0.02"], false);
    let meta = archive_meta(&s.path("a.cyclarc.parquet"));
    for ch in meta["channels"].as_array().expect("channels") {
        assert_eq!(ch["runs"], 2, "{}: one hole → two runs", ch["name"]);
    }
    for name in ["a", "b"] {
        let src_t = &rt.source[name].times;
        assert_eq!(src_t.len(), 7500);
        // A segment starts right after the hole, and no segment spans it.
        assert!(
            rt.rows
                .iter()
                .any(|r| r.channel == name && r.start == after_hole),
            "{name}: no segment starts at the first sample after the hole"
        );
        let mut at = 0;
        for r in rt.rows.iter().filter(|r| r.channel == name) {
            let w = &src_t[at..at + r.samples];
            let widest = w.windows(2).map(|p| p[1] - p[0]).max().unwrap_or(0);
            assert!(widest <= 150_000, "segment at {} spans the hole", r.start);
            at += r.samples;
        }
    }
}

#[test]
fn jittered_timestamps_come_back_identical() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let fs = 10_000.0;
    let mut r = rng(99);
    let mut cs = chans(&[VType::F64; 3], &TAGS, TimeKind::Int64Ns);
    let n = cs[0].times.len();
    for c in &mut cs {
        // A new grid at 10 kHz with ±3 µs of clock jitter (well under half a step).
        c.times = grid(n, fs)
            .into_iter()
            .map(|t| t + r.random_range(-3000..=3000))
            .collect();
    }
    write_long(&src, &cs, Spec::new(TimeKind::Int64Ns), &Columns::default());
    round_trip(&s, &src, &Shape::long(), &["--budget-rms", "0.02"], false);
}

#[test]
fn unsorted_interleaved_long_input_comes_back_sorted_and_exact() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let t = TimeKind::Ts(TimeUnit::Nanosecond, None);
    let mut spec = Spec::new(t);
    spec.order = Order::Shuffled(5);
    write_long(
        &src,
        &chans(&[VType::F32; 3], &TAGS, t),
        spec,
        &Columns::default(),
    );
    round_trip(&s, &src, &Shape::long(), &["--budget-rms", "0"], true);
    let meta = archive_meta(&s.path("a.cyclarc.parquet"));
    for ch in meta["channels"].as_array().expect("channels") {
        assert_eq!(ch["sorted_on_read"], true, "{}", ch["name"]);
    }
    // Lossy too: the budget holds on the sorted samples.
    round_trip(&s, &src, &Shape::long(), &["--budget-rms", "0.02"], false);
}

#[test]
fn unsorted_wide_input_comes_back_sorted() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let t = TimeKind::Ts(TimeUnit::Microsecond, None);
    let mut spec = Spec::new(t);
    spec.order = Order::Shuffled(6);
    write_wide(
        &src,
        &chans(&[VType::I16, VType::F64], &["a", "b"], t),
        spec,
        "time",
    );
    round_trip(&s, &src, &Shape::wide(), &["--budget-rms", "0"], true);
    round_trip(&s, &src, &Shape::wide(), &["--budget-rel", "0.01"], false);
}

#[test]
fn duplicate_channel_time_is_refused_naming_file_channel_and_rows() {
    let s = Lab::new();
    let src = s.path("dup-source.parquet");
    let t = TimeKind::Int64Ns;
    let mut cs = chans(&[VType::F32; 3], &["a", "b", "c"], t);
    let dup_t = cs[1].times[1234];
    cs[1].times.push(dup_t);
    cs[1].cells.push(Some(VType::F32.bits(0.5)));
    write_long(&src, &cs, Spec::new(t), &Columns::default());
    // The rows of the duplicate, as the parquet crate reads the file.
    let table = read_table(&src);
    let names = names_of(&table, &Columns::default());
    let times = raw_times(table.batch.column_by_name("time").expect("time"));
    let rows: Vec<usize> = (0..times.len())
        .filter(|&i| names[i] == "b" && times[i] == dup_t)
        .collect();
    assert_eq!(rows.len(), 2);
    let out = s.path("dup.cyclarc.parquet");
    let ran = s.run(&["encode", ps(&src), "--out", ps(&out)]);
    ran.expect(2)
        .ensure(ran.stderr.contains("dup-source.parquet"), "names the file")
        .ensure(ran.stderr.contains("`b`"), "names the channel")
        .ensure(
            ran.stderr
                .contains(&format!("rows {} and {}", rows[0], rows[1])),
            format!("names rows {} and {}", rows[0], rows[1]),
        );
    assert!(!out.exists(), "nothing written");
    assert_eq!(dir_entries(s.dir.path()), vec!["dup-source.parquet"]);
}

#[test]
fn duplicate_time_in_wide_layout_is_refused() {
    let s = Lab::new();
    let src = s.path("wide-dup.parquet");
    let t = TimeKind::Ts(TimeUnit::Microsecond, None);
    let mut cs = chans(&[VType::F64, VType::F64], &["x", "y"], t);
    for c in &mut cs {
        let (tt, v) = (c.times[100], c.cells[100]);
        c.times.insert(3000, tt);
        c.cells.insert(3000, v);
    }
    let mut spec = Spec::new(t);
    spec.order = Order::Shuffled(1);
    write_wide(&src, &cs, spec, "time");
    let table = read_table(&src);
    let times = raw_times(table.batch.column_by_name("time").expect("time"));
    let dup = cs[0].times[100] / 1000;
    let rows: Vec<usize> = (0..times.len()).filter(|&i| times[i] == dup).collect();
    assert_eq!(rows.len(), 2);
    let out = s.path("out.parquet");
    let ran = s.run(&["encode", ps(&src), "--out", ps(&out)]);
    ran.expect(2)
        .ensure(ran.stderr.contains("wide-dup.parquet"), "names the file")
        .ensure(ran.stderr.contains("`x`"), "names the first channel")
        .ensure(
            ran.stderr
                .contains(&format!("rows {} and {}", rows[0], rows[1])),
            "names both rows",
        );
    assert!(!out.exists(), "nothing written");
    assert_eq!(dir_entries(s.dir.path()), vec!["wide-dup.parquet"]);
}
