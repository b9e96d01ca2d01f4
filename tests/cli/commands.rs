//! Options, JSON output, refusals, damage and determinism, through the real binary.
//!
//! Each check names what it is checked against: the source file itself (exact), the user's
//! setting (budgets, fundamental, cycles, channel lists, time range), the README's documented
//! behaviour (exit codes, 200 ms segments, inclusive/exclusive range), or another run of the
//! binary (determinism: the bytes of the other archive).
use std::path::Path;

use crate::support::archive::*;
use crate::support::series::*;
use crate::support::source::*;
use crate::support::*;
use arrow::array::{Array, AsArray};
use arrow::datatypes::TimeUnit;

const FS: f64 = 10_000.0;
const N: usize = 6000;

/// Three long-layout f32 channels at 10 kHz (step exactly 100 µs), timestamps in ns UTC.
fn long_source(path: &Path) -> Vec<Chan> {
    let cs: Vec<Chan> = ["a", "b", "c"]
        .iter()
        .enumerate()
        .map(|(i, n)| Chan::wave(n, VType::F32, N, FS, 48.0, 1.0, 200 + i as u64))
        .collect();
    write_long(
        path,
        &cs,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, Some("UTC"))),
        &Columns::default(),
    );
    cs
}

/// Three wide-layout channels (i16, f64, f32) at 10 kHz, timestamps in µs without zone.
fn wide_source(path: &Path) -> Vec<Chan> {
    let cs = vec![
        Chan::wave("ia", VType::I16, N, FS, 48.0, 3000.0, 300),
        Chan::wave("ib", VType::F64, N, FS, 48.0, 1.0, 301),
        Chan::wave("ic", VType::F32, N, FS, 48.0, 1.0, 302),
    ];
    write_wide(
        path,
        &cs,
        Spec::new(TimeKind::Ts(TimeUnit::Microsecond, None)),
        "time",
    );
    cs
}

fn archived_channels(archive: &Path) -> Vec<String> {
    let mut v: Vec<String> = archive_rows(archive)
        .into_iter()
        .map(|r| r.channel)
        .collect();
    v.dedup();
    v
}

// ── encode --channels, decode --channel ──

#[test]
fn encode_channels_keeps_only_those_long() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    long_source(&src);
    let (arch, dec) = (s.path("a.parquet"), s.path("d.parquet"));
    s.encode(&src, &arch, &["--channels", "a,c"]).expect(0);
    assert_eq!(archived_channels(&arch), ["a", "c"], "the user's list");
    s.run(&["verify", ps(&arch), "--source", ps(&src)])
        .expect(0);
    s.run(&["decode", ps(&arch), "--out", ps(&dec)]).expect(0);
    compare_decoded(&src, &dec, &arch, &Shape::long(), false, Some(&["a", "c"]));
}

#[test]
fn encode_channels_keeps_only_those_wide() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    wide_source(&src);
    let (arch, dec) = (s.path("a.parquet"), s.path("d.parquet"));
    s.encode(&src, &arch, &["--channels", "ic,ia", "--budget-rms", "0"])
        .expect(0);
    assert_eq!(archived_channels(&arch), ["ia", "ic"], "the user's list");
    s.run(&["verify", ps(&arch), "--source", ps(&src)])
        .expect(0);
    s.run(&["decode", ps(&arch), "--out", ps(&dec)]).expect(0);
    // Columns in the source's order (time, ia, ic), bit-exact at budget 0.
    compare_decoded(&src, &dec, &arch, &Shape::wide(), true, Some(&["ia", "ic"]));
}

#[test]
fn encode_unknown_channel_is_a_usage_error() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    long_source(&src);
    let arch = s.path("a.parquet");
    let ran = s.encode(&src, &arch, &["--channels", "a,zz"]);
    ran.expect(2)
        .ensure(ran.stderr.contains("zz"), "names the channel");
    assert!(!arch.exists());
}

#[test]
fn decode_channel_selects_channels() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    wide_source(&src);
    let (arch, dec) = (s.path("a.parquet"), s.path("d.parquet"));
    s.encode(&src, &arch, &["--budget-rms", "0.01"]).expect(0);
    s.run(&[
        "decode",
        ps(&arch),
        "--out",
        ps(&dec),
        "--channel",
        "ic",
        "--channel",
        "ib",
    ])
    .expect(0);
    compare_decoded(
        &src,
        &dec,
        &arch,
        &Shape::wide(),
        false,
        Some(&["ib", "ic"]),
    );
    let ran = s.run(&[
        "decode",
        ps(&arch),
        "--out",
        ps(&s.path("x.parquet")),
        "--channel",
        "nope",
    ]);
    ran.expect(2)
        .ensure(ran.stderr.contains("nope"), "names the channel");
    assert!(!s.path("x.parquet").exists());
}

// ── decode --from / --to ──

/// Decoding a time range gives exactly the full decode's rows with from ≤ t < to (README:
/// `--from` inclusive, `--to` exclusive), and their times are the source's.
fn check_window(s: &Lab, src: &Path, shape: &Shape, from: &str, to: &str, lo: i64, hi: i64) {
    let (arch, full, part) = (
        s.path("a.parquet"),
        s.path("full.parquet"),
        s.path("part.parquet"),
    );
    s.encode(src, &arch, &["--budget-rms", "0.01"]).expect(0);
    s.run(&["decode", ps(&arch), "--out", ps(&full)]).expect(0);
    let ran = s.run(&[
        "decode",
        ps(&arch),
        "--out",
        ps(&part),
        "--from",
        from,
        "--to",
        to,
        "--json",
    ]);
    ran.expect(0);
    compare_decoded(src, &full, &arch, shape, false, None);
    let full_t = read_table(&full);
    let part_t = read_table(&part);
    assert_eq!(fields_of(&part_t), fields_of(&full_t), "schema");
    let full_s = shape.series(&full_t);
    let part_s = shape.series(&part_t);
    let src_s = shape.series(&read_table(src));
    let mut rows = 0;
    for (name, f) in &full_s {
        let want = f.window(lo, hi);
        assert!(!want.is_empty());
        assert_eq!(&part_s[name], &want, "{name}: windowed decode");
        // The sample at `to` exists in the source and is excluded; the one at `from` is kept.
        assert!(src_s[name].times.contains(&hi), "{name}: a sample at `to`");
        assert_eq!(want.times[0], lo, "{name}: `from` is inclusive");
        assert!(*want.times.last().expect("rows") < hi);
        rows += want.len();
    }
    if let Shape::Wide(_) = shape {
        rows = part_s.values().next().map_or(0, Series::len);
    }
    assert_eq!(ran.json()["rows"], rows as u64, "JSON rows");
}

#[test]
fn decode_time_range_long_rfc3339_and_ns() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    long_source(&src);
    // T0 = 2026-05-04T00:00:00Z; from = T0 + 0.25 s (sample 2500), to = T0 + 0.4 s (ns).
    let lo = T0 + 250_000_000;
    let hi = T0 + 400_000_000;
    check_window(
        &s,
        &src,
        &Shape::long(),
        "2026-05-04T00:00:00.25Z",
        &hi.to_string(),
        lo,
        hi,
    );
}

#[test]
fn decode_time_range_wide() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    wide_source(&src);
    // The wide source stores µs without zone; the range is given as integer ns.
    let lo = T0 + 123_400_000;
    let hi = T0 + 345_600_000;
    check_window(
        &s,
        &src,
        &Shape::wide(),
        &lo.to_string(),
        "2026-05-04T00:00:00.3456Z",
        lo / 1000,
        hi / 1000,
    );
}

// ── segmentation options ──

#[test]
fn fundamental_hz_and_cycles_per_segment_are_used() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    wide_source(&src);
    let arch = s.path("a.parquet");
    s.encode(
        &src,
        &arch,
        &["--fundamental-hz", "50", "--cycles-per-segment", "4"],
    )
    .expect(0);
    s.run(&["verify", ps(&arch), "--source", ps(&src)])
        .expect(0);
    let segs = archive_segments(&arch);
    let rows = archive_rows(&arch);
    for name in ["ia", "ib", "ic"] {
        let g: Vec<&SegmentEntry> = segs.iter().filter(|g| g.channel == name).collect();
        // 4 cycles of 50 Hz at 10 kHz = 800 samples; 6000 = 7 × 800 + 400.
        let lens: Vec<usize> = g.iter().map(|g| g.samples).collect();
        let mut want = vec![800; 7];
        want.push(400);
        assert_eq!(lens, want, "{name}: K·fs/f0 samples per segment");
        // The tail shorter than K cycles is a segment of its own (segment module docs).
        for x in &g[..g.len() - 1] {
            assert_eq!(x.cycles, Some(4), "{name}: the user's cycles");
        }
        for r in rows.iter().filter(|r| r.channel == name) {
            assert_eq!(
                r.fundamental_hz,
                Some(50.0),
                "{name}: the user's fundamental"
            );
        }
    }
    let meta = archive_meta(&arch);
    for ch in meta["channels"].as_array().expect("channels") {
        assert_eq!(ch["fundamental"], "given");
        assert_eq!(ch["fundamental_hz"], 50.0);
    }
}

#[test]
fn estimated_fundamental_gives_cycles_spanning_200_ms_or_a_multiple() {
    // README: by default K is the fewest cycles spanning 200 ms, or 2, 4, 16 or 64 times
    // that when the trial codes smaller; at 48 Hz a cycle is 20.8 ms, so K = 10 (9.6 cycles
    // would fall short) or a multiple of it, one K per channel.
    let s = Lab::new();
    let src = s.path("src.parquet");
    wide_source(&src);
    let arch = s.path("a.parquet");
    s.run(&["encode", ps(&src), "--out", ps(&arch)]).expect(0);
    let segs = archive_segments(&arch);
    // Every segment but each channel's tail (shorter than K cycles, a segment of its own).
    let tails: Vec<usize> = ["ia", "ib", "ic"]
        .iter()
        .map(|n| {
            segs.iter()
                .rposition(|g| &g.channel == n)
                .expect("segments")
        })
        .collect();
    for (i, g) in segs.iter().enumerate() {
        if tails.contains(&i) {
            continue;
        }
        assert!(
            matches!(g.cycles, Some(10 | 20 | 40 | 160 | 640)),
            "{} at {}: {:?} cycles",
            g.channel,
            g.start,
            g.cycles
        );
        let first = segs
            .iter()
            .find(|o| o.channel == g.channel)
            .expect("segment");
        assert_eq!(g.cycles, first.cycles, "one K per channel");
    }
    for r in archive_rows(&arch) {
        // The synthetic tone is exactly 48 Hz; 1 % is far below the 1.7 Hz bin of a 0.6 s
        // window, which the estimator refines below one bin.
        let f = r.fundamental_hz.expect("periodic") as f64;
        assert!(
            (f / 48.0 - 1.0).abs() < 0.01,
            "{}: estimated {f} Hz",
            r.channel
        );
    }
    let meta = archive_meta(&arch);
    for ch in meta["channels"].as_array().expect("channels") {
        assert_eq!(ch["fundamental"], "estimated");
    }
}

#[test]
fn fundamental_none_cuts_200_ms_blocks() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    long_source(&src);
    let arch = s.path("a.parquet");
    s.encode(&src, &arch, &["--fundamental", "none"]).expect(0);
    s.run(&["verify", ps(&arch), "--source", ps(&src)])
        .expect(0);
    for g in archive_segments(&arch) {
        // README: `--fundamental none` (fixed 200 ms segments): 2000 samples at 10 kHz.
        assert_eq!(g.samples, 2000);
        assert_eq!(g.cycles, None);
    }
    for r in archive_rows(&arch) {
        assert_eq!(r.fundamental_hz, None);
    }
}

/// The container's own cost, for the small snapshots condition monitoring keeps: a
/// one-segment source's archive is at most 1.5 kB beside its payload (the lean-archive
/// target, common practice for a 1–10 s snapshot not to be outweighed by its wrapper), and
/// without event capture it has no `event` column (README, The archive).
#[test]
fn a_one_segment_archive_costs_at_most_1_5_kb_beside_its_payload() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let c = Chan::wave("fh.p1.ia", VType::F32, 2000, FS, 48.0, 1.0, 210);
    write_long(
        &src,
        &[c],
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, Some("UTC"))),
        &Columns::default(),
    );
    let arch = s.path("a.parquet");
    s.encode(&src, &arch, &["--fundamental", "none"]).expect(0);
    assert_eq!(archive_segments(&arch).len(), 1);
    let j = s.run(&["inspect", ps(&arch), "--json"]).expect(0).json();
    let (total, payload) = (
        j["bytes"]["total"].as_u64().unwrap(),
        j["bytes"]["payload"].as_u64().unwrap(),
    );
    assert_eq!(total, std::fs::metadata(&arch).unwrap().len());
    assert!(
        total - payload <= 1500,
        "{total} B in all, {payload} B payload"
    );
    let t = read_table(&arch);
    assert!(t.batch.column_by_name("event").is_none());
    assert!(t.batch.column_by_name("rms").is_some());
}

// ── --json ──

#[test]
fn json_outputs_parse_and_agree_with_the_files() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    long_source(&src);
    let (arch, dec) = (s.path("a.parquet"), s.path("d.parquet"));
    let e = s.encode(&src, &arch, &["--json"]);
    let ej = e.expect(0).json();
    let segs = archive_segments(&arch);
    assert_eq!(ej["rows"], (3 * N) as u64, "rows: the source's");
    assert_eq!(ej["channels"], 3);
    assert_eq!(ej["segments"], segs.len() as u64, "segments: the archive's");
    assert_eq!(
        ej["archive_bytes"],
        std::fs::metadata(&arch).expect("archive").len()
    );
    let v = s.run(&["verify", ps(&arch), "--source", ps(&src), "--json"]);
    let vj = v.expect(0).json();
    assert_eq!(vj["findings"].as_array().map(Vec::len), Some(0));
    assert_eq!(vj["digest"], "ok");
    for c in vj["channels"].as_array().expect("channels") {
        assert_eq!(c["samples"], N as u64);
    }
    let i = s.run(&["inspect", ps(&arch), "--json"]);
    let ij = i.expect(0).json();
    let names: Vec<&str> = ij["channels"]
        .as_array()
        .expect("channels")
        .iter()
        .map(|c| c["channel"].as_str().expect("name"))
        .collect();
    assert_eq!(names, ["a", "b", "c"]);
    assert_eq!(ij["format"], cyclarc::archive::FORMAT_VERSION);
    let d = s.run(&["decode", ps(&arch), "--out", ps(&dec), "--json"]);
    let dj = d.expect(0).json();
    assert_eq!(dj["rows"], (3 * N) as u64);
    assert_eq!(dj["channels"], 3);
}

// ── refusals ──

#[test]
fn out_equal_to_source_is_refused_and_source_unchanged() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    long_source(&src);
    std::fs::create_dir(s.path("sub")).expect("mkdir");
    let before = sha256(&src);
    for out in [src.clone(), s.path("sub/../src.parquet")] {
        let ran = s.run(&["encode", ps(&src), "--out", ps(&out)]);
        ran.expect(2)
            .ensure(ran.stderr.contains("is the source"), "says why");
        assert_eq!(sha256(&src), before, "source unchanged");
    }
    // Relative spelling from the working folder.
    s.run(&["encode", "src.parquet", "--out", "./src.parquet"])
        .expect(2);
    assert_eq!(sha256(&src), before, "source unchanged");
    assert_eq!(dir_entries(s.dir.path()), ["src.parquet", "sub"]);
    // decode onto its own archive is refused too.
    let arch = s.path("a.parquet");
    s.run(&["encode", ps(&src), "--out", ps(&arch)]).expect(0);
    let a_before = sha256(&arch);
    s.run(&["decode", ps(&arch), "--out", ps(&arch)]).expect(2);
    assert_eq!(sha256(&arch), a_before, "archive unchanged");
}

#[test]
fn missing_source_and_bad_flags_are_usage_errors() {
    let s = Lab::new();
    let out = s.path("a.parquet");
    let ran = s.run(&["encode", ps(&s.path("nope.parquet")), "--out", ps(&out)]);
    ran.expect(2)
        .ensure(ran.stderr.contains("nope.parquet"), "names it");
    let src = s.path("src.parquet");
    long_source(&src);
    s.encode(&src, &out, &["--budget-rms", "-1"]).expect(2);
    s.encode(&src, &out, &["--budget-rms", "0.1", "--budget-rel", "0.1"])
        .expect(2);
    assert!(!out.exists());
}

// ── verify: damage and a different source ──

fn encoded(s: &Lab) -> (std::path::PathBuf, std::path::PathBuf) {
    let src = s.path("src.parquet");
    long_source(&src);
    let arch = s.path("a.parquet");
    s.encode(&src, &arch, &["--budget-rms", "0.01"]).expect(0);
    s.run(&["verify", ps(&arch), "--source", ps(&src)])
        .expect(0);
    (src, arch)
}

fn flip(path: &Path, at: usize) {
    let mut b = std::fs::read(path).expect("read");
    b[at] ^= 0x5a;
    std::fs::write(path, b).expect("write");
}

#[test]
fn verify_fails_on_a_damaged_payload() {
    let s = Lab::new();
    let (src, arch) = encoded(&s);
    let (off, len) = payload_chunk(&arch);
    flip(&arch, (off + len / 2) as usize);
    // With the digest beside it: exit 1, the digest mismatch is reported.
    let ran = s.run(&["verify", ps(&arch), "--source", ps(&src), "--json"]);
    ran.expect(1);
    let text = ran.stdout.to_lowercase() + &ran.stderr.to_lowercase();
    ran.ensure(text.contains("digest"), "reports the digest mismatch");
    // Without the digest (an archive copied alone): the block's CRC-32 still catches it (the
    // flipped byte is inside the uncompressed payload column's values).
    std::fs::remove_file(digest_of(&arch)).expect("remove digest");
    let ran = s.run(&["verify", ps(&arch), "--source", ps(&src)]);
    ran.expect(1).ensure(
        ran.stdout.contains("checksum mismatch"),
        "reports the damaged block",
    );
    let out = s.path("d.parquet");
    let ran = s.run(&["decode", ps(&arch), "--out", ps(&out)]);
    ran.expect(1)
        .ensure(ran.stderr.contains("checksum mismatch"), "says why");
    assert!(!out.exists(), "nothing decoded from a damaged block");
}

#[test]
fn verify_fails_on_a_byte_flipped_mid_file() {
    let s = Lab::new();
    let (src, arch) = encoded(&s);
    let len = std::fs::metadata(&arch).expect("archive").len() as usize;
    flip(&arch, len / 2);
    // The digest beside the archive covers every byte of the file.
    let ran = s.run(&["verify", ps(&arch), "--source", ps(&src)]);
    ran.expect(1);
    let text = ran.stdout.to_lowercase() + &ran.stderr.to_lowercase();
    ran.ensure(
        text.contains("digest") || text.contains("damaged"),
        "says the archive is damaged",
    );
}

#[test]
fn verify_and_decode_fail_on_a_truncated_archive() {
    let s = Lab::new();
    let (src, arch) = encoded(&s);
    let b = std::fs::read(&arch).expect("archive");
    std::fs::write(&arch, &b[..b.len() / 2]).expect("truncate");
    let ran = s.run(&["verify", ps(&arch), "--source", ps(&src)]);
    ran.expect(1).ensure(
        ran.stderr.contains("damaged"),
        "says the archive is damaged",
    );
    s.run(&["decode", ps(&arch), "--out", ps(&s.path("d.parquet"))])
        .expect(1);
    s.run(&["inspect", ps(&arch)]).expect(1);
}

#[test]
fn verify_fails_when_the_source_differs() {
    let s = Lab::new();
    let (src, arch) = encoded(&s);
    // The same channels and times with one value of `b` moved by 0.5 (50× the budget).
    let mut cs = long_source(&s.path("unused.parquet"));
    let v = VType::F32.value(cs[1].cells[3000].expect("value"));
    cs[1].cells[3000] = Some(VType::F32.bits(v + 0.5));
    let other = s.path("other.parquet");
    write_long(
        &other,
        &cs,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, Some("UTC"))),
        &Columns::default(),
    );
    let ran = s.run(&["verify", ps(&arch), "--source", ps(&other), "--json"]);
    ran.expect(1);
    let j = ran.json();
    let findings: Vec<String> = j["findings"]
        .as_array()
        .expect("findings")
        .iter()
        .map(|f| f.to_string())
        .collect();
    ran.ensure(
        findings.iter().any(|f| f.contains("SHA-256")),
        "reports the different source file",
    )
    .ensure(
        findings
            .iter()
            .any(|f| f.contains("\"b\"") && f.contains("exceeds the budget")),
        "reports the segment of `b` over budget",
    );
    // The original still passes.
    s.run(&["verify", ps(&arch), "--source", ps(&src)])
        .expect(0);
    // A source with shifted timestamps: rows do not come back.
    for c in &mut cs {
        for t in &mut c.times {
            *t += 1_000;
        }
    }
    write_long(
        &other,
        &cs,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, Some("UTC"))),
        &Columns::default(),
    );
    let ran = s.run(&["verify", ps(&arch), "--source", ps(&other)]);
    ran.expect(1)
        .ensure(ran.stdout.contains("timestamps differ"), "timestamps");
}

// ── determinism ──

#[test]
fn thread_count_does_not_change_bytes() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    // 3 channels × 60 000 samples cut into 1-cycle segments (200 samples at 50 Hz, 10 kHz):
    // 300 segments per channel, more than one block (256 segments) each, so blocks really
    // are fitted in parallel.
    let cs: Vec<Chan> = ["a", "b", "c"]
        .iter()
        .enumerate()
        .map(|(i, n)| Chan::wave(n, VType::F64, 60_000, FS, 50.0, 1.0, 250 + i as u64))
        .collect();
    write_long(&src, &cs, Spec::new(TimeKind::Int64Ns), &Columns::default());
    let (a1, a4) = (s.path("t1.parquet"), s.path("t4.parquet"));
    let args = ["--fundamental-hz", "50", "--cycles-per-segment", "1"];
    let mut one = vec!["--threads", "1", "encode", ps(&src), "--out", ps(&a1)];
    one.extend_from_slice(&args);
    let mut four = vec!["encode", ps(&src), "--out", ps(&a4), "--threads", "4"];
    four.extend_from_slice(&args);
    s.run(&one).expect(0);
    s.run(&four).expect(0);
    let mut blocks: Vec<i32> = archive_rows(&a1).iter().map(|r| r.block).collect();
    blocks.dedup();
    assert!(blocks.len() >= 6, "{} blocks", blocks.len());
    let (b1, b4) = (
        std::fs::read(&a1).expect("a1"),
        std::fs::read(&a4).expect("a4"),
    );
    assert!(b1 == b4, "archives differ between 1 and 4 threads");
    // Decodes agree too.
    let (d1, d4) = (s.path("d1.parquet"), s.path("d4.parquet"));
    s.run(&["--threads", "1", "decode", ps(&a1), "--out", ps(&d1)])
        .expect(0);
    s.run(&["--threads", "4", "decode", ps(&a4), "--out", ps(&d4)])
        .expect(0);
    assert_eq!(sha256(&d1), sha256(&d4));
}

/// Two archives of the same samples from differently written source files: every data byte
/// identical, and the metadata identical except the source file's recorded size and SHA-256.
fn assert_same_archive(a: &Path, b: &Path) {
    let (ba, bb) = (std::fs::read(a).expect("a"), std::fs::read(b).expect("b"));
    assert!(
        data_region(&ba) == data_region(&bb),
        "data pages differ: {} vs {}",
        a.display(),
        b.display()
    );
    let strip = |p: &Path| {
        let mut m = archive_meta(p);
        let src = m["source"].as_object_mut().expect("source");
        src.remove("bytes");
        src.remove("sha256");
        m
    };
    assert_eq!(strip(a), strip(b), "metadata beyond the source identity");
    assert_eq!(
        archive_kv(a).get("cyclarc.format"),
        archive_kv(b).get("cyclarc.format")
    );
}

#[test]
fn row_group_size_and_row_order_do_not_change_archives() {
    let s = Lab::new();
    // 3 × 30 000 rows: more than one 64k read batch.
    let cs: Vec<Chan> = ["x1", "x2", "x3"]
        .iter()
        .enumerate()
        .map(|(i, n)| Chan::wave(n, VType::F64, 30_000, 25_600.0, 29.5, 1.0, 400 + i as u64))
        .collect();
    let t = TimeKind::Ts(TimeUnit::Nanosecond, Some("UTC"));
    let variants: [(&str, Order, usize); 4] = [
        ("rg100k", Order::TimeThenName, 100_000),
        ("rg1k", Order::TimeThenName, 1000),
        ("desc", Order::TimeThenNameDesc, 7000),
        ("blocks", Order::ChannelBlocks, 65_536),
    ];
    let mut archives = Vec::new();
    for (dir, order, rg) in variants {
        std::fs::create_dir(s.path(dir)).expect("mkdir");
        // The same file name in each folder: the archive records the source's name.
        let src = s.path(&format!("{dir}/log.parquet"));
        let mut spec = Spec::new(t);
        spec.order = order;
        spec.row_group = rg;
        write_long(&src, &cs, spec, &Columns::default());
        let arch = s.path(&format!("{dir}/log.cyclarc.parquet"));
        s.encode(&src, &arch, &["--budget-rms", "0.005"]).expect(0);
        archives.push(arch);
    }
    let srcs: Vec<String> = archives
        .iter()
        .map(|a| sha256(&a.with_file_name("log.parquet")))
        .collect();
    assert!(srcs[0] != srcs[1], "the source files must differ in bytes");
    for a in &archives[1..] {
        assert_same_archive(&archives[0], a);
    }
    // Wide layout: row groups of 1000 vs 100 000 rows.
    let wide: Vec<Chan> = ["ia", "ib"]
        .iter()
        .enumerate()
        .map(|(i, n)| Chan::wave(n, VType::I16, 70_000, 7680.0, 60.0, 3000.0, 500 + i as u64))
        .collect();
    let mut archives = Vec::new();
    for (dir, rg) in [("w1k", 1000), ("w100k", 100_000)] {
        std::fs::create_dir(s.path(dir)).expect("mkdir");
        let src = s.path(&format!("{dir}/cur.parquet"));
        let mut spec = Spec::new(TimeKind::Int64Ns);
        spec.row_group = rg;
        write_wide(&src, &wide, spec, "time");
        let arch = s.path(&format!("{dir}/cur.cyclarc.parquet"));
        s.encode(&src, &arch, &["--budget-rms", "2"]).expect(0);
        archives.push(arch);
    }
    assert_same_archive(&archives[0], &archives[1]);
}

// ── encode --peak-max, pipeline `peaks` ──

/// A 48 Hz wave with six single-sample spikes at irregular places (invented test signal).
fn spiky_source(path: &Path) -> Vec<f64> {
    let mut x = wave(N, FS, 48.0, 1.0, 0.01, 900);
    for (k, i) in [211, 1380, 2004, 3333, 4721, 5902].into_iter().enumerate() {
        x[i] += if k % 2 == 0 { 2.5 } else { -1.5 };
    }
    write_wide(
        path,
        &[Chan::new("v", VType::F64, grid(N, FS), &x)],
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    x
}

/// Largest |decoded − source| of channel `v`, from the decoded file (the L∞ norm of the
/// error, computed here).
fn decoded_peak(s: &Lab, arch: &Path, x: &[f64]) -> f64 {
    let dec = s.path("peak-d.parquet");
    let _ = std::fs::remove_file(&dec);
    s.run(&["decode", ps(arch), "--out", ps(&dec)]).expect(0);
    let got = &Shape::wide().series(&read_table(&dec))["v"];
    assert_eq!(got.len(), x.len());
    (0..x.len())
        .map(|i| (got.value(i).expect("no nulls") - x[i]).abs())
        .fold(0.0, f64::max)
}

#[test]
fn peak_max_holds_every_sample_and_verify_and_inspect_report_it() {
    let s = Lab::new();
    let src = s.path("src.parquet");
    let x = spiky_source(&src);
    let (plain, guarded) = (s.path("p.parquet"), s.path("g.parquet"));
    s.encode(&src, &plain, &["--budget-rel", "0.05"]).expect(0);
    // The user's limit, against the 5 % budget that alone smears the spikes.
    assert!(decoded_peak(&s, &plain, &x) > 0.1);
    s.encode(
        &src,
        &guarded,
        &["--budget-rel", "0.05", "--peak-max", "0.05"],
    )
    .expect(0);
    assert!(decoded_peak(&s, &guarded, &x) <= 0.05);
    s.run(&["verify", ps(&guarded), "--source", ps(&src)])
        .expect(0)
        .prints(&["≤ 5.0000e-2"]);
    s.run(&["inspect", ps(&guarded)]).expect(0).prints(&[
        "peak guard on v: every sample within 0.05",
        "samples corrected",
    ]);
    let j = s.run(&["inspect", ps(&guarded), "--json"]).json();
    assert_eq!(j["channels"][0]["peak_max"], 0.05);
    assert!(j["channels"][0]["corrected_samples"].as_u64().is_some());
    // Refused limits name the option.
    s.encode(&src, &s.path("bad.parquet"), &["--peak-max", "0"])
        .expect(2)
        .says(&["peak-max"]);
}

#[test]
fn a_pipeline_peak_rule_applies_to_its_channels_only() {
    let s = Lab::new();
    std::fs::create_dir_all(s.path("data")).expect("mkdir");
    let src = s.path("data/spiky.parquet");
    let x = spiky_source(&src);
    let job = s.path("job.toml");
    std::fs::write(
        &job,
        "output = \"out\"\nverify = true\n[encode]\nbudget_rel = 0.05\n\
         [[encode.peaks]]\nchannels = \"v\"\nmax = 0.1\n\
         [[encode.peaks]]\nchannels = \"*\"\nmax = 0.001\n\n\
         [[source]]\npaths = [\"data/*.parquet\"]\n",
    )
    .expect("job");
    s.run(&["run", ps(&job)]).expect(0);
    let arch = s.path("out/spiky.cyclarc.parquet");
    assert!(decoded_peak(&s, &arch, &x) <= 0.1);
    s.run(&["inspect", ps(&arch)])
        .expect(0)
        .prints(&["peak guard on v: every sample within 0.1 "]);
}

// ── encode --protect-rotor-bars ──

#[test]
fn protected_sidebands_pass_verify_and_inspect_lists_them() {
    // A 50 Hz current with weak sidebands at 47/53 Hz (invented test signal); the bands
    // from the motor's slip (REFERENCE-FACTS: 4-pole, 50 Hz, s = 0.03 → 47/53 Hz).
    let s = Lab::new();
    let src = s.path("src.parquet");
    let fs = 5000.0;
    let n = 20_000;
    let x: Vec<f64> = (0..n)
        .map(|m| {
            let t = m as f64 / fs;
            let w = |f: f64| (std::f64::consts::TAU * f * t).cos();
            100.0 * w(50.0) + 0.5 * w(47.0) + 0.5 * w(53.0)
        })
        .collect();
    write_wide(
        &src,
        &[Chan::new("ia", VType::F64, grid(n, fs), &x)],
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    let arch = s.path("a.parquet");
    let common = [
        "--budget-rel",
        "0.01",
        "--fundamental-hz",
        "50",
        "--cycles-per-segment",
        "50",
    ];
    let mut args = common.to_vec();
    args.extend(["--protect-rotor-bars", "50,0.03"]);
    s.encode(&src, &arch, &args).expect(0);
    s.run(&["verify", ps(&arch), "--source", ps(&src)])
        .expect(0);
    s.run(&["inspect", ps(&arch)])
        .expect(0)
        .prints(&["protected bands on ia: 2 band(s), 8 bin(s)"]);
    // A malformed list names its option.
    let mut bad = common.to_vec();
    bad.extend(["--protect-hz", "47:x"]);
    s.encode(&src, &s.path("b.parquet"), &bad)
        .expect(2)
        .says(&["protect-hz"]);
}

// ── encode --events ──

#[test]
fn events_are_a_column_any_parquet_reader_can_query_and_verify_holds_them() {
    // A 48 Hz wave whose 5th 200 ms window carries a burst of impacts (invented signal).
    let s = Lab::new();
    let src = s.path("src.parquet");
    let n = 20_000;
    let mut x = wave(n, FS, 48.0, 1.0, 0.01, 77);
    for (j, v) in x[8600..9000].iter_mut().enumerate() {
        let t = (j % 100) as f64 / FS;
        *v += 6.0 * (-t * 3000.0).exp() * (std::f64::consts::TAU * 2500.0 * t).sin();
    }
    write_wide(
        &src,
        &[Chan::new("v", VType::F64, grid(n, FS), &x)],
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    let (a1, a2) = (s.path("a1.parquet"), s.path("a2.parquet"));
    let args = [
        "--events",
        "--fundamental-hz",
        "48",
        "--cycles-per-segment",
        "10",
    ];
    s.run(
        &[
            &["--threads", "1", "encode", ps(&src), "--out", ps(&a1)][..],
            &args[..],
        ]
        .concat(),
    )
    .expect(0);
    s.run(
        &[
            &["--threads", "2", "encode", ps(&src), "--out", ps(&a2)][..],
            &args[..],
        ]
        .concat(),
    )
    .expect(0);
    assert_eq!(std::fs::read(&a1).unwrap(), std::fs::read(&a2).unwrap());
    s.run(&["verify", ps(&a1), "--source", ps(&src)]).expect(0);
    // The column, read with the parquet crate alone: the burst's row is marked.
    let t = read_table(&a1);
    let ev = t.batch.column_by_name("event").expect("event column");
    let start = raw_times(t.batch.column_by_name("start").expect("start"));
    let ev = ev.as_boolean();
    let marked: Vec<i64> = (0..ev.len())
        .filter(|&i| !ev.is_null(i) && ev.value(i))
        .map(|i| start[i])
        .collect();
    let burst = grid(n, FS)[8600];
    assert!(
        marked
            .iter()
            .any(|&t0| t0 <= burst && burst - t0 < 210_000_000),
        "burst at {burst} not in the event rows {marked:?}"
    );
    s.run(&["inspect", ps(&a1)])
        .expect(0)
        .prints(&["events on v:"]);
}
