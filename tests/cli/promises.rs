//! Regression tests for seven promises an outside tester found broken, each through the real
//! binary and named after what it guards: outputs that are not regular files, repeated column
//! names, archives that fail verification inside `run`, missing or repeated blocks, tiny
//! errors recorded as 0, time zones, output folders inside a source pattern, and budgets no
//! archive can record. The README's error catalogue lists the same decisions.
//!
//! Sources are invented test signals; the reference values are named beside each check.

use std::path::Path;
use std::process::Command;
use std::sync::Arc;

use crate::support::archive::archive_meta;
use crate::support::rows::*;
use crate::support::*;
use arrow::array::{ArrayRef, AsArray, RecordBatch, TimestampMillisecondArray, UInt32Array};
use arrow::datatypes::{DataType, Field, Float32Type, Int32Type, Schema, TimeUnit};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::arrow_writer::ArrowWriterOptions;
use parquet::arrow::ArrowWriter;
use parquet::file::metadata::KeyValue;

/// Two channels `a` and `b`, 4000 samples each at 1 kHz (long layout).
fn two_channels(path: &Path) {
    let n = 4000;
    let t = grid(n, 1000.0);
    let mut times = t.clone();
    times.extend(&t);
    let mut names = vec!["a".to_string(); n];
    names.extend(vec!["b".to_string(); n]);
    let mut v = clean_wave(n, 1000.0, 50.0, 1.0);
    v.extend(clean_wave(n, 1000.0, 25.0, 2.0));
    write_long(path, &times, &names, f64s(&v));
}

fn make_fifo(p: &Path) {
    let ok = Command::new("mkfifo")
        .arg(p)
        .status()
        .expect("mkfifo runs")
        .success();
    assert!(ok, "mkfifo {}", p.display());
}

/// A character device like the machine's null device (major 1, minor 3), made in the lab:
/// needs root; `false` when it could not be made.
fn make_char_device(p: &Path) -> bool {
    let made = Command::new("mknod")
        .arg(p)
        .args(["c", "1", "3"])
        .status()
        .is_ok_and(|s| s.success());
    if !made {
        eprintln!("NOTE: mknod failed (not root?); the character-device case is skipped");
    }
    made
}

fn is_fifo(p: &Path) -> bool {
    use std::os::unix::fs::FileTypeExt;
    std::fs::metadata(p).is_ok_and(|m| m.file_type().is_fifo())
}

// ───────────── 1. an output that is a device or FIFO is refused, never replaced ─────────────

#[test]
fn output_that_is_a_fifo_or_device_is_refused_and_left_alone() {
    let lab = Lab::new();
    let src = lab.path("src.parquet");
    two_channels(&src);
    let fifo = lab.path("out.fifo");
    make_fifo(&fifo);
    assert_refused(
        &lab,
        &["encode", ps(&src), "--out", ps(&fifo)],
        2,
        &["out.fifo", "FIFO", "not a regular file"],
    );
    assert!(is_fifo(&fifo), "the FIFO is still a FIFO");
    // A folder is refused the same way.
    let folder = lab.path("a-folder");
    std::fs::create_dir(&folder).expect("folder");
    assert_refused(
        &lab,
        &["encode", ps(&src), "--out", ps(&folder)],
        2,
        &["a-folder", "folder"],
    );
    if make_char_device(&lab.path("null")) {
        let dev = lab.path("null");
        assert_refused(
            &lab,
            &["encode", ps(&src), "--out", ps(&dev)],
            2,
            &["character device"],
        );
        use std::os::unix::fs::FileTypeExt;
        assert!(std::fs::metadata(&dev).is_ok_and(|m| m.file_type().is_char_device()));
    }
    // decode --out, with a good archive.
    let arch = lab.path("a.cyclarc.parquet");
    lab.run(&["encode", ps(&src), "--out", ps(&arch)]).expect(0);
    assert_refused(
        &lab,
        &["decode", ps(&arch), "--out", ps(&fifo)],
        2,
        &["out.fifo", "FIFO"],
    );
    // A digest path that is a FIFO: refused before the archive is written.
    let arch2 = lab.path("b.cyclarc.parquet");
    make_fifo(&digest_of(&arch2));
    assert_refused(
        &lab,
        &["encode", ps(&src), "--out", ps(&arch2)],
        2,
        &["b.cyclarc.parquet.sha256", "FIFO"],
    );
    assert!(is_fifo(&digest_of(&arch2)));
}

#[test]
fn run_refuses_outputs_that_are_fifos() {
    let lab = Lab::new();
    std::fs::create_dir(lab.path("data")).expect("data");
    std::fs::create_dir(lab.path("out")).expect("out");
    two_channels(&lab.path("data/src.parquet"));
    let pipe = lab.path("job.toml");
    std::fs::write(
        &pipe,
        "output = \"out\"\n[[source]]\npaths = [\"data/*.parquet\"]\n",
    )
    .expect("pipeline");
    // The archive's name is taken by a FIFO: that source fails (exit 2), the FIFO stays.
    let fifo = lab.path("out/src.cyclarc.parquet");
    make_fifo(&fifo);
    let ran = lab.run(&["run", ps(&pipe)]);
    ran.expect(2).says(&["src.cyclarc.parquet", "FIFO"]);
    assert!(is_fifo(&fifo));
    assert!(temp_files(lab.dir.path()).is_empty());
    assert!(!digest_of(&fifo).exists());
    // The manifest's name taken by a FIFO: the whole run is refused.
    std::fs::remove_file(&fifo).expect("remove");
    let manifest = lab.path("out/cyclarc-manifest.json");
    make_fifo(&manifest);
    lab.run(&["run", ps(&pipe)])
        .expect(2)
        .says(&["cyclarc-manifest.json", "FIFO"]);
    assert!(is_fifo(&manifest));
    assert!(!lab.path("out/src.cyclarc.parquet").exists());
}

// ───────────── 2. repeated column names; run keeps no archive that fails verify ─────────────

#[test]
fn two_wide_columns_with_one_name_are_refused() {
    let lab = Lab::new();
    let src = lab.path("dup.parquet");
    let n = 1000;
    let t = grid(n, 1000.0);
    write_wide(
        &src,
        &t,
        vec![
            ("a", f64s(&clean_wave(n, 1000.0, 50.0, 1.0))),
            ("a", f64s(&clean_wave(n, 1000.0, 50.0, 3.0))),
        ],
    );
    let out = lab.path("dup.cyclarc.parquet");
    assert_refused(
        &lab,
        &["encode", ps(&src), "--out", ps(&out)],
        2,
        &["dup.parquet", "column `a`", "positions 1 and 2"],
    );
    assert_refused(
        &lab,
        &["encode", ps(&src), "--out", ps(&out), "--channels", "a"],
        2,
        &["column `a`", "positions 1 and 2"],
    );
}

/// Opens of `path` by a run of the binary, counted by strace (`-P` keeps only that path).
fn opens_of(lab: &Lab, path: &Path, inject: Option<usize>, args: &[&str]) -> (Ran, usize) {
    let log = lab.path("strace.log");
    let mut strace: Vec<String> = ["-o", ps(&log), "-P", ps(path), "-e", "trace=open,openat"]
        .map(String::from)
        .to_vec();
    if let Some(when) = inject {
        strace.push("-e".to_string());
        strace.push(format!("inject=open,openat:error=EIO:when={when}"));
    }
    let ran = lab.run_under_strace(
        &strace,
        args,
        format!("strace … cyclarc {}", args.join(" ")),
    );
    let text = std::fs::read_to_string(&log).unwrap_or_default();
    let _ = std::fs::remove_file(&log);
    // An interrupted call's second half (`<... openat resumed>`) is not a second open.
    let opens = text
        .lines()
        .filter(|l| l.contains("open(") || l.contains("openat("))
        .count();
    (ran, opens)
}

#[test]
fn run_takes_back_an_archive_that_fails_verification() {
    if !have_strace("the verify-failure injection is skipped") {
        return;
    }
    let lab = Lab::new();
    std::fs::create_dir(lab.path("out")).expect("out");
    let src = lab.path("src.parquet");
    two_channels(&src);
    let pipe = lab.path("job.toml");
    std::fs::write(
        &pipe,
        "output = \"out\"\nverify = true\n[[source]]\npaths = [\"src.parquet\"]\n",
    )
    .expect("pipeline");
    // A clean run opens the source a fixed number of times; the last open is verify's.
    let (ran, opens) = opens_of(&lab, &src, None, &["run", ps(&pipe)]);
    ran.expect(0);
    assert!(opens >= 2, "the source is opened to encode and to verify");
    for f in ["src.cyclarc.parquet", "src.cyclarc.parquet.sha256"] {
        std::fs::remove_file(lab.path("out").join(f)).expect("clear");
    }
    std::fs::remove_file(lab.path("out/cyclarc-manifest.json")).expect("clear");
    // Make verify's read of the source fail: the archive must not stay published.
    let (ran, _) = opens_of(&lab, &src, Some(opens), &["run", ps(&pipe)]);
    ran.expect(1)
        .says(&["verification failed", "src.cyclarc.parquet"]);
    let out = lab.path("out");
    assert!(!out.join("src.cyclarc.parquet").exists());
    assert!(!out.join("src.cyclarc.parquet.sha256").exists());
    let manifest = std::fs::read_to_string(out.join("cyclarc-manifest.json")).unwrap_or_default();
    assert!(!manifest.contains("src.cyclarc.parquet"), "{manifest}");
}

// ───────────── 3. missing, repeated or dropped blocks are found without the digest ─────────────

/// Rewrite an archive keeping the rows `pick` chooses (by index, repeats allowed), with the
/// same schema and file metadata.
fn rewrite_rows(arch: &Path, out: &Path, pick: impl Fn(&[(String, i32)]) -> Vec<u32>) {
    let all = read_table(arch).batch;
    let channel = all
        .column_by_name("channel")
        .expect("channel")
        .as_string::<i32>();
    let block = all
        .column_by_name("block")
        .expect("block")
        .as_primitive::<Int32Type>();
    let keys: Vec<(String, i32)> = (0..all.num_rows())
        .map(|i| (channel.value(i).to_string(), block.value(i)))
        .collect();
    let idx = UInt32Array::from(pick(&keys));
    let cols = all
        .columns()
        .iter()
        .map(|c| arrow::compute::take(c, &idx, None).expect("take"))
        .collect();
    let kept = RecordBatch::try_new(all.schema(), cols).expect("batch");
    let kv = key_values(arch)
        .into_iter()
        .filter(|e| e.key.starts_with("cyclarc."))
        .collect();
    write_parquet_with(out, &kept, None, kv);
}

/// Chooses archive rows (by index) from their (channel, block).
type Pick = dyn Fn(&[(String, i32)]) -> Vec<u32>;

fn rows_where(keys: &[(String, i32)], keep: impl Fn(&(String, i32)) -> bool) -> Vec<u32> {
    (0..keys.len() as u32)
        .filter(|&i| keep(&keys[i as usize]))
        .collect()
}

#[test]
fn block_samples_caps_blocks_and_is_checked() {
    let lab = Lab::new();
    let src = lab.path("src.parquet");
    let n = 20_000;
    write_long(
        &src,
        &grid(n, 1000.0),
        &vec!["a".to_string(); n],
        f64s(&clean_wave(n, 1000.0, 50.0, 1.0)),
    );
    let pipe = lab.path("job.toml");
    let job = |cap: usize| {
        format!("output = \"out\"\n[encode]\nblock_samples = {cap}\n[[source]]\npaths = [\"src.parquet\"]\n")
    };
    std::fs::write(&pipe, job(100)).expect("pipeline");
    let ran = lab.run(&["run", ps(&pipe)]);
    ran.expect(2)
        .ensure(ran.stderr.contains("block-samples"), "names the setting");
    assert!(!lab.path("out/src.cyclarc.parquet").exists());
    // 20,000 samples in blocks of at most 4,096: five blocks or more.
    std::fs::write(&pipe, job(4096)).expect("pipeline");
    lab.run(&["run", ps(&pipe)]).expect(0);
    let meta = archive_meta(&lab.path("out/src.cyclarc.parquet"));
    assert_eq!(meta["settings"]["block_samples"], 4096);
    let blocks = meta["channels"][0]["blocks"].as_u64().expect("blocks");
    assert!(blocks >= 5, "{blocks} blocks");
}

#[test]
fn a_missing_repeated_or_dropped_block_is_reported_by_channel_and_number() {
    let lab = Lab::new();
    let src = lab.path("src.parquet");
    two_channels(&src);
    let pipe = lab.path("job.toml");
    // Two segments per block: each channel gets several blocks.
    std::fs::write(
        &pipe,
        "output = \"out\"\n[encode]\nblock_segments = 2\n[[source]]\npaths = [\"src.parquet\"]\n",
    )
    .expect("pipeline");
    lab.run(&["run", ps(&pipe)]).expect(0);
    let arch = lab.path("out/src.cyclarc.parquet");
    let dec = lab.path("dec.parquet");
    let cases: Vec<(&str, Box<Pick>, Vec<&str>)> = vec![
        (
            "without block 3",
            Box::new(|k| rows_where(k, |r| r.1 != 3)),
            vec!["block 3", "missing"],
        ),
        (
            "without channel b",
            Box::new(|k| rows_where(k, |r| r.0 != "b")),
            vec!["channel `b`", "0 rows, the metadata records 4000"],
        ),
        (
            "with block 2 twice in a row",
            Box::new(|k| {
                let mut v = Vec::new();
                for (i, r) in k.iter().enumerate() {
                    v.push(i as u32);
                    if r.1 == 2 && k.get(i + 1).is_none_or(|n| n.1 != 2) {
                        v.extend(rows_where(k, |r| r.1 == 2));
                    }
                }
                v
            }),
            vec!["block 2", "appears more than once"],
        ),
        (
            "with block 1 again at the end",
            Box::new(|k| {
                let mut v = rows_where(k, |_| true);
                v.extend(rows_where(k, |r| r.1 == 1));
                v
            }),
            vec!["block 1", "appears more than once"],
        ),
    ];
    let clean = read_rows(&src);
    for (what, pick, pieces) in cases {
        let bad = lab.path("bad.cyclarc.parquet");
        rewrite_rows(&arch, &bad, pick);
        // No digest beside `bad`: only the archive's own records can tell.
        assert!(!digest_of(&bad).exists());
        let r = lab.run(&["decode", ps(&bad), "--out", ps(&dec)]);
        r.expect(1).says(&pieces);
        assert!(!dec.exists(), "{what}: a refused decode writes nothing");
        let v = lab.run(&["verify", ps(&bad), "--source", ps(&src)]);
        v.expect(1);
        assert!(
            pieces.iter().all(|p| v.stdout.contains(p)),
            "{what}: verify names the hole\n{}",
            v.context()
        );
        // Decoding what is intact is explicit, and the holes are reported.
        let s = lab.run(&["decode", ps(&bad), "--out", ps(&dec), "--salvage"]);
        s.expect(1).says(&pieces).says(&["hole"]);
        let got = read_rows(&dec);
        let lost = clean.rows.len() - got.rows.len();
        let source_keys: std::collections::BTreeSet<(&String, i64)> =
            clean.rows.iter().map(|r| (&r.0, r.1)).collect();
        let got_keys: std::collections::BTreeSet<(&String, i64)> =
            got.rows.iter().map(|r| (&r.0, r.1)).collect();
        assert!(
            got_keys.is_subset(&source_keys),
            "{what}: salvage writes only rows of the source"
        );
        assert_eq!(got_keys.len(), got.rows.len(), "{what}: each row once");
        if what.contains("twice") || what.contains("again") {
            assert_eq!(lost, 0, "{what}: nothing is lost to a repeated block");
        } else {
            assert!(lost > 0, "{what}: the missing rows are not invented");
        }
        std::fs::remove_file(&dec).expect("clear");
        std::fs::remove_file(&bad).expect("clear");
    }
    // The untouched archive decodes cleanly, with and without --salvage.
    lab.run(&["decode", ps(&arch), "--out", ps(&dec), "--salvage"])
        .expect(0);
}

// ───────────── 4. a tiny error is never recorded as 0 ─────────────

/// The recorded `error_rms` and `budget_rms` per segment, with the segment's sample count.
/// Per archive row: its recorded error (the largest of its segments), error over budget, and
/// samples.
fn recorded(arch: &Path) -> Vec<(f32, f32, i32)> {
    let f = std::fs::File::open(arch).expect("archive");
    let r = ParquetRecordBatchReaderBuilder::try_new(f)
        .expect("Parquet")
        .build()
        .expect("reader");
    let mut out = Vec::new();
    for b in r {
        let b = b.expect("batch");
        let e = b.column_by_name("error_rms").expect("error_rms");
        let e = e.as_primitive::<Float32Type>();
        let bu = b.column_by_name("budget_use").expect("budget_use");
        let bu = bu.as_primitive::<Float32Type>();
        let n = b.column_by_name("samples").expect("samples");
        let n = n.as_primitive::<Int32Type>();
        for i in 0..b.num_rows() {
            out.push((e.value(i), bu.value(i), n.value(i)));
        }
    }
    out
}

#[test]
fn an_error_near_1e_300_is_recorded_above_zero_and_not_below_the_truth() {
    let lab = Lab::new();
    let src = lab.path("tiny.parquet");
    let n = 2000;
    let v: Vec<f64> = clean_wave(n, 1000.0, 50.0, 1.0)
        .iter()
        .map(|x| x * 1e-300)
        .collect();
    write_long(&src, &grid(n, 1000.0), &vec!["a".into(); n], f64s(&v));
    let arch = lab.path("tiny.cyclarc.parquet");
    lab.encode(&src, &arch, &["--budget-rms", "1e-30"])
        .expect(0);
    let dec = lab.path("dec.parquet");
    lab.run(&["decode", ps(&arch), "--out", ps(&dec)]).expect(0);
    let d = read_rows(&dec);
    let rows = recorded(&arch);
    // The true RMS error of each segment, with the squares taken at a power-of-two scale
    // (2¹⁰⁰⁰, exact) so that they do not underflow: the scaled sum of squares of LAPACK's
    // xNRM2 (from memory).
    let scale = 2f64.powi(1000);
    let mut at = 0usize;
    for (err, _, len) in rows {
        let len = len as usize;
        let ss: f64 = (at..at + len)
            .map(|i| ((d.rows[i].2.value() - v[i]) * scale).powi(2))
            .sum();
        let truth = (ss / len as f64).sqrt() / scale;
        assert!(
            truth > 0.0,
            "the segment is not coded exactly (order 0 fits the budget)"
        );
        assert!(err > 0.0, "recorded error 0 for a true error of {truth:e}");
        assert!(
            err as f64 >= truth,
            "recorded {err:e} below the true {truth:e}"
        );
        at += len;
    }
    assert_eq!(at, n);
    let v = lab.run(&["verify", ps(&arch), "--source", ps(&src), "--json"]);
    v.expect(0);
    let j: serde_json::Value = serde_json::from_str(&v.stdout).expect("JSON");
    let worst = j["channels"][0]["worst_error_rms"]
        .as_f64()
        .expect("worst_error_rms");
    assert!(worst > 0.0, "verify prints the tiny error as {worst}");
}

// ───────────── 5. the time zone comes back, for every unit ─────────────

/// A source whose time column is declared `timestamp(unit, Europe/Berlin)`. `coerced`: the
/// way writers that follow the Parquet format's lack of a seconds unit store it (as
/// milliseconds adjusted to UTC, with the declared type in the embedded Arrow schema, as
/// the Arrow C++ writer does for seconds: Apache Parquet format, LogicalTypes.md, TIMESTAMP).
fn zoned_source(path: &Path, unit: TimeUnit, coerced: bool) {
    let n = 1000;
    let per = match unit {
        TimeUnit::Second => 1_000_000_000,
        TimeUnit::Millisecond => 1_000_000,
        TimeUnit::Microsecond => 1_000,
        TimeUnit::Nanosecond => 1,
    };
    // One sample per unit step from T0 (whole seconds for the seconds unit: 1 Hz).
    let fs = 1e9 / per as f64;
    let fs = fs.min(1000.0);
    let t: Vec<i64> = grid(n, fs).iter().map(|x| x / per).collect();
    let zone: Arc<str> = "Europe/Berlin".into();
    let declared = DataType::Timestamp(unit, Some(zone.clone()));
    let values = f64s(&clean_wave(n, fs, fs / 20.0, 1.0));
    let declared_schema = Schema::new(vec![
        Field::new("time", declared.clone(), false),
        Field::new("x", DataType::Float64, true),
    ]);
    if coerced {
        let ms: Vec<i64> = t.iter().map(|v| v * (per / 1_000_000).max(1)).collect();
        let stored = Arc::new(Schema::new(vec![
            Field::new(
                "time",
                DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into())),
                false,
            ),
            Field::new("x", DataType::Float64, true),
        ]));
        let times: ArrayRef = Arc::new(TimestampMillisecondArray::from(ms).with_timezone("UTC"));
        let batch = RecordBatch::try_new(stored.clone(), vec![times, values]).expect("batch");
        let opts = ArrowWriterOptions::new().with_skip_arrow_metadata(true);
        let mut w = ArrowWriter::try_new_with_options(
            std::fs::File::create(path).expect("create"),
            stored,
            opts,
        )
        .expect("writer");
        w.write(&batch).expect("write");
        w.append_key_value_metadata(KeyValue::new(
            "ARROW:schema".into(),
            parquet::arrow::encode_arrow_schema(&declared_schema),
        ));
        w.close().expect("close");
    } else {
        let times = arrow::compute::cast(
            &(Arc::new(arrow::array::Int64Array::from(t)) as ArrayRef),
            &declared,
        )
        .expect("cast");
        write_columns(
            path,
            declared_schema
                .fields()
                .iter()
                .map(|f| f.as_ref().clone())
                .collect(),
            vec![times, values],
            1 << 16,
        );
    }
}

#[test]
fn a_time_zone_comes_back_for_every_unit() {
    let lab = Lab::new();
    let berlin = |unit| DataType::Timestamp(unit, Some("Europe/Berlin".into()));
    for unit in [
        TimeUnit::Second,
        TimeUnit::Millisecond,
        TimeUnit::Microsecond,
        TimeUnit::Nanosecond,
    ] {
        let src = lab.path("zoned.parquet");
        zoned_source(&src, unit, false);
        round_trip(&lab, &src, &["--budget-rms", "0"], Bound::Exact);
        let dec = read_rows(&lab.path("decoded.parquet"));
        assert_eq!(dec.time_type, berlin(unit), "{unit:?}");
        clear_round_trip(&lab);
        std::fs::remove_file(&src).expect("clear");
    }
    // Seconds stored as milliseconds adjusted to UTC, declared in the embedded schema: the
    // decoded file has the declared type, and the same instants.
    let src = lab.path("coerced.parquet");
    zoned_source(&src, TimeUnit::Second, true);
    let arch = lab.path("coerced.cyclarc.parquet");
    let dec = lab.path("coerced-dec.parquet");
    lab.encode(&src, &arch, &["--budget-rms", "0"]).expect(0);
    lab.run(&["verify", ps(&arch), "--source", ps(&src)])
        .expect(0);
    lab.run(&["decode", ps(&arch), "--out", ps(&dec)]).expect(0);
    let (s, d) = (read_rows(&src), read_rows(&dec));
    assert_eq!(d.time_type, berlin(TimeUnit::Second));
    assert_eq!(s.rows.len(), d.rows.len());
    for (a, b) in s.rows.iter().zip(&d.rows) {
        assert_eq!(
            (a.1, a.2),
            (b.1 * 1000, b.2),
            "same instant (ms = s · 1000), same value"
        );
    }
}

// ───────────── 6. an output folder inside the source pattern ─────────────

#[test]
fn an_output_folder_inside_its_own_source_pattern_is_not_read_back() {
    let lab = Lab::new();
    std::fs::create_dir(lab.path("logs")).expect("logs");
    two_channels(&lab.path("logs/pump.parquet"));
    let pipe = lab.path("job.toml");
    // Every file of the folder is a source, and the archives go to the same folder.
    std::fs::write(
        &pipe,
        "output = \"logs\"\n[[source]]\npaths = [\"logs/*\"]\n",
    )
    .expect("pipeline");
    lab.run(&["run", ps(&pipe), "--json"]).expect(0);
    // A temporary file left by a killed run is not a source either.
    std::fs::write(
        lab.path("logs/.pump.cyclarc.parquet.cyclarc-tmp.1"),
        b"partial",
    )
    .expect("stale temp");
    for _ in 0..2 {
        let r = lab.run(&["run", ps(&pipe), "--json"]);
        r.expect(0);
        let j: serde_json::Value = serde_json::from_str(&r.stdout).expect("JSON");
        let sources = j["sources"].as_array().expect("sources");
        assert_eq!(
            sources.len(),
            1,
            "only pump.parquet is a source\n{}",
            r.context()
        );
        assert_eq!(sources[0]["status"], "skipped");
    }
}

// ───────────── 7. budgets no archive can record ─────────────

#[test]
fn budgets_beyond_f32_are_refused_not_changed() {
    let lab = Lab::new();
    let src = lab.path("src.parquet");
    two_channels(&src);
    let out = lab.path("o.cyclarc.parquet");
    // f32's range: largest finite 3.4028235e38, least positive 1.4e-45 (IEEE 754-2019,
    // binary32).
    for (flag, v) in [
        ("--budget-rms", "1e300"),
        ("--budget-rms", "3.5e38"),
        ("--budget-rms", "1e-50"),
    ] {
        assert_refused(
            &lab,
            &["encode", ps(&src), "--out", ps(&out), flag, v],
            2,
            &["budget-rms", "cannot be recorded", "3.4028234663852886e38"],
        );
    }
    assert_refused(
        &lab,
        &[
            "encode",
            ps(&src),
            "--out",
            ps(&out),
            "--budget-rel",
            "0.01",
            "--budget-floor",
            "1e39",
        ],
        2,
        &["budget-floor", "cannot be recorded"],
    );
    // The largest f32 itself is a budget an archive can hold.
    lab.encode(&src, &out, &["--budget-rms", "3.4028234e38"])
        .expect(0);
    std::fs::remove_file(&out).expect("clear");
    std::fs::remove_file(digest_of(&out)).expect("clear");
    // A relative budget on f64 values near 1e300 resolves beyond f32: refused by channel.
    let huge = lab.path("huge.parquet");
    let n = 2000;
    let v: Vec<f64> = clean_wave(n, 1000.0, 50.0, 1.0)
        .iter()
        .map(|x| x * 1e300)
        .collect();
    write_long(&huge, &grid(n, 1000.0), &vec!["big".into(); n], f64s(&v));
    assert_refused(
        &lab,
        &[
            "encode",
            ps(&huge),
            "--out",
            ps(&out),
            "--budget-rel",
            "0.005",
        ],
        2,
        &[
            "huge.parquet",
            "channel `big`",
            "larger than an archive can record",
        ],
    );
    // An absolute budget on the same values round-trips within it.
    let arch = round_trip(&lab, &huge, &["--budget-rms", "1e30"], Bound::Abs(1e30));
    // The rule is recorded as asked; every row's error is within the f32 at or below 1e30,
    // and its recorded error over budget at most 1 (rounded up to 16 bits: 2⁻¹⁶).
    let budget = 1e30f32;
    let budget = if budget as f64 > 1e30 {
        budget.next_down()
    } else {
        budget
    };
    for ch in archive_meta(&arch)["channels"]
        .as_array()
        .expect("channels")
    {
        assert_eq!(
            ch["budget"],
            serde_json::json!({ "Absolute": 1e30 }),
            "{ch}"
        );
    }
    for (err, used, _) in recorded(&arch) {
        assert!(err <= budget, "error {err} over budget {budget}");
        assert!(used <= 1.0 + 2f32.powi(-15), "error/budget {used}");
    }
}
