//! `cyclarc run` through the real binary: archives and manifest, reruns that skip, a budget
//! change that re-archives, one bad input among good ones; the shipped demo; and the nightly
//! example pipeline, which must load and validate.
//!
//! Checked against: the README's Pipelines section (archive names, manifest, skip rules, one
//! bad input reported while the rest run, non-zero exit), the SHA-256 of the source files
//! computed here, and demo-data/README.md (the channels of each demo file).
use std::path::{Path, PathBuf};

use crate::support::archive::*;
use crate::support::source::*;
use crate::support::*;
use arrow::datatypes::TimeUnit;
use cyclarc::options::Budget;

fn write_sources(s: &Lab) -> (PathBuf, PathBuf) {
    let dir = s.path("data/ps-north");
    std::fs::create_dir_all(&dir).expect("mkdir");
    let vib = dir.join("vib-0301.parquet");
    let cs: Vec<Chan> = ["n.p1.de.accel", "n.p1.nde.accel"]
        .iter()
        .enumerate()
        .map(|(i, n)| Chan::wave(n, VType::F32, 8000, 25_600.0, 29.5, 0.1, 700 + i as u64))
        .collect();
    write_long(
        &vib,
        &cs,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, Some("UTC"))),
        &Columns::default(),
    );
    let cur = dir.join("cur-0301.parquet");
    let cs: Vec<Chan> = ["ia", "ib", "ic"]
        .iter()
        .enumerate()
        .map(|(i, n)| Chan::wave(n, VType::I16, 7680, 7680.0, 60.0, 2000.0, 710 + i as u64))
        .collect();
    write_wide(
        &cur,
        &cs,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    (vib, cur)
}

fn pipeline_text(budget_rel: f64) -> String {
    format!(
        r#"# test pipeline
output = "archive"
verify = true

[encode]
budget_rel = {budget_rel}
budget_floor = 0.001
# Whole cycles per segment pinned: otherwise the trial coder may choose longer segments at
# a wider budget, and the budget comparison below wants the same segments.
cycles_per_segment = 10

[[encode.budgets]]
channels = "*.accel"
rms = 0.002

[[source]]
paths = ["data/*/vib-*.parquet"]
[source.encode]
layout = "long"

[[source]]
paths = ["data/*/cur-*.parquet"]
"#
    )
}

fn statuses(j: &serde_json::Value) -> Vec<(String, String)> {
    let mut v: Vec<(String, String)> = j["sources"]
        .as_array()
        .expect("sources")
        .iter()
        .map(|o| {
            let src = o["source"].as_str().expect("source");
            let name = Path::new(src)
                .file_name()
                .expect("file name")
                .to_string_lossy()
                .into_owned();
            (name, o["status"].as_str().expect("status").to_string())
        })
        .collect();
    v.sort();
    v
}

fn pairs(v: &[(&str, &str)]) -> Vec<(String, String)> {
    v.iter()
        .map(|(a, b)| (a.to_string(), b.to_string()))
        .collect()
}

#[test]
fn run_archives_skips_reruns_rearchives_on_change_and_reports_a_bad_input() {
    let s = Lab::new();
    let (vib, cur) = write_sources(&s);
    // A file the glob matches that is not Parquet.
    let bad = s.path("data/ps-north/vib-0302.parquet");
    std::fs::write(&bad, "logger crashed while writing this file\n").expect("bad file");
    let pipe = s.path("nightly.toml");
    std::fs::write(&pipe, pipeline_text(0.005)).expect("pipeline");
    let out = s.path("archive");

    // First run: two archived, the bad one reported, exit non-zero.
    let r1 = s.run(&["run", ps(&pipe), "--json"]);
    r1.ensure(
        r1.code.is_some_and(|c| c != 0),
        "a failed input → non-zero exit",
    );
    let j = r1.json();
    assert_eq!(
        statuses(&j),
        pairs(&[
            ("cur-0301.parquet", "archived"),
            ("vib-0301.parquet", "archived"),
            ("vib-0302.parquet", "failed"),
        ])
    );
    for o in j["sources"].as_array().expect("sources") {
        match o["status"].as_str() {
            Some("archived") => assert_eq!(o["verified"], true, "verify = true"),
            Some("failed") => {
                let e = o["error"].as_str().expect("error");
                r1.ensure(e.contains("vib-0302.parquet"), "names the bad file");
            }
            _ => {}
        }
    }
    let (va, ca) = (
        out.join("vib-0301.cyclarc.parquet"),
        out.join("cur-0301.cyclarc.parquet"),
    );
    assert!(
        va.exists() && ca.exists(),
        "archives named SOURCE_STEM.cyclarc.parquet"
    );
    assert!(!out.join("vib-0302.cyclarc.parquet").exists());
    // The manifest records each good source's SHA-256 (computed here) and its archive's.
    let manifest: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(out.join("cyclarc-manifest.json")).expect("manifest"),
    )
    .expect("manifest JSON");
    let m = manifest.as_object().expect("object");
    assert_eq!(m.len(), 2, "{manifest}");
    for (src, arch) in [(&vib, &va), (&cur, &ca)] {
        let e = &m[arch.file_name().expect("name").to_str().expect("utf-8")];
        assert_eq!(e["source_sha256"], sha256(src));
        assert_eq!(e["archive_sha256"], sha256(arch));
    }
    s.run(&["verify", ps(&va), "--source", ps(&vib)]).expect(0);
    s.run(&["verify", ps(&ca), "--source", ps(&cur)]).expect(0);
    // The budget rule for accelerometers applied (absolute 0.002), recorded per channel.
    for ch in archive_meta(&va)["channels"].as_array().expect("channels") {
        assert_eq!(
            ch["budget"],
            serde_json::json!({ "Absolute": 0.002 }),
            "{ch}"
        );
    }
    let (vh, ch) = (sha256(&va), sha256(&ca));
    let narrow = archive_rows(&ca);
    let narrow_rule = archive_meta(&ca)["channels"][0]["budget"].clone();

    // Second run: both skipped (text on stderr), the bad one still reported.
    let r2 = s.run(&["run", ps(&pipe)]);
    r2.ensure(r2.code.is_some_and(|c| c != 0), "still a failed input")
        .ensure(
            r2.stderr.matches("skipped").count() == 2,
            "two sources skipped",
        )
        .ensure(r2.stderr.contains("vib-0302.parquet"), "bad file reported");
    let r3 = s.run(&["run", ps(&pipe), "--json"]);
    assert_eq!(
        statuses(&r3.json()),
        pairs(&[
            ("cur-0301.parquet", "skipped"),
            ("vib-0301.parquet", "skipped"),
            ("vib-0302.parquet", "failed"),
        ])
    );
    assert_eq!((sha256(&va), sha256(&ca)), (vh.clone(), ch.clone()));

    // A different default budget changes the settings of both groups: both re-archived.
    std::fs::write(&pipe, pipeline_text(0.01)).expect("pipeline");
    let r4 = s.run(&["run", ps(&pipe), "--json"]);
    assert_eq!(
        statuses(&r4.json()),
        pairs(&[
            ("cur-0301.parquet", "archived"),
            ("vib-0301.parquet", "archived"),
            ("vib-0302.parquet", "failed"),
        ])
    );
    assert!(sha256(&ca) != ch, "current re-archived with a wider budget");
    // The same rows, each segment with twice the budget (0.01 vs 0.005 of the same RMS).
    let wider = archive_rows(&ca);
    assert_eq!(wider.len(), narrow.len());
    for (w, n) in wider.iter().zip(&narrow) {
        assert_eq!((w.start, w.samples), (n.start, n.samples));
    }
    let rule = |m: &serde_json::Value| m["Relative"]["fraction"].as_f64().expect("relative");
    let wider_rule = archive_meta(&ca)["channels"][0]["budget"].clone();
    assert_eq!(
        rule(&wider_rule),
        2.0 * rule(&narrow_rule),
        "{wider_rule} vs {narrow_rule}"
    );

    // The bad file fixed (removed): everything skipped, exit 0.
    std::fs::remove_file(&bad).expect("rm");
    let r5 = s.run(&["run", ps(&pipe), "--json"]);
    r5.expect(0);
    assert_eq!(
        statuses(&r5.json()),
        pairs(&[
            ("cur-0301.parquet", "skipped"),
            ("vib-0301.parquet", "skipped"),
        ])
    );

    // A source that changed is archived again; the other is still skipped.
    let cs: Vec<Chan> = ["ia", "ib", "ic"]
        .iter()
        .enumerate()
        .map(|(i, n)| Chan::wave(n, VType::I16, 7680, 7680.0, 60.0, 2500.0, 720 + i as u64))
        .collect();
    write_wide(
        &cur,
        &cs,
        Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
        "time",
    );
    let r6 = s.run(&["run", ps(&pipe), "--json"]);
    r6.expect(0);
    assert_eq!(
        statuses(&r6.json()),
        pairs(&[
            ("cur-0301.parquet", "archived"),
            ("vib-0301.parquet", "skipped"),
        ])
    );
    s.run(&["verify", ps(&ca), "--source", ps(&cur)]).expect(0);
}

#[test]
fn run_with_a_missing_pipeline_or_bad_key_is_a_usage_error() {
    let s = Lab::new();
    let ran = s.run(&["run", ps(&s.path("none.toml"))]);
    ran.expect(2)
        .ensure(ran.stderr.contains("none.toml"), "names the file");
    let pipe = s.path("p.toml");
    std::fs::write(
        &pipe,
        "output = \"out\"\nbudget = 3\n[[source]]\npaths = [\"*.parquet\"]\n",
    )
    .expect("pipeline");
    let ran = s.run(&["run", ps(&pipe)]);
    ran.expect(2)
        .ensure(ran.stderr.contains("budget"), "names the key");
    assert!(!s.path("out").exists(), "nothing written");
}

/// demo-data/README.md: the channels of each demo file.
const DEMO: [(&str, &[&str]); 2] = [
    (
        "fennick-hollow-vibration",
        &["fh.p1.de.accel", "fh.p1.nde.accel", "fh.p2.de.accel"],
    ),
    ("fennick-hollow-motor-current", &["ia", "ib", "ic"]),
];

#[test]
fn demo_pipeline_runs_and_inspect_lists_every_channel() {
    let s = Lab::new();
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(root.join("pipelines/demo.toml")).expect("demo.toml");
    let out = s.path("demo-archive");
    // The shipped pipeline with its relative paths made absolute; output into the temp folder.
    assert!(text.contains("\"../target/demo-archive\"") && text.contains("\"../demo-data/"));
    let text = text
        .replace("\"../target/demo-archive\"", &format!("{:?}", ps(&out)))
        .replace(
            "\"../demo-data/",
            &format!("\"{}/", ps(&root.join("demo-data"))),
        );
    let pipe = s.path("demo.toml");
    std::fs::write(&pipe, text).expect("pipeline");
    s.run(&["run", ps(&pipe)]).expect(0);
    for (stem, channels) in DEMO {
        let arch = out.join(format!("{stem}.cyclarc.parquet"));
        let src = root.join(format!("demo-data/{stem}.parquet"));
        s.run(&["verify", ps(&arch), "--source", ps(&src)])
            .expect(0);
        let ran = s.run(&["inspect", ps(&arch)]);
        ran.expect(0);
        let lines: Vec<&str> = ran.stdout.lines().collect();
        let header = lines
            .iter()
            .position(|l| l.starts_with("channel") && l.contains("segments"))
            .unwrap_or_else(|| panic!("no table header\n{}", ran.context()));
        let table: Vec<&str> = lines[header + 2..]
            .iter()
            .take_while(|l| !l.trim().is_empty())
            .copied()
            .collect();
        let names: Vec<&str> = table
            .iter()
            .map(|l| l.split_whitespace().next().expect("cell"))
            .collect();
        ran.ensure(names == channels, format!("table rows {names:?}"));
    }
    // A second run skips both.
    let ran = s.run(&["run", ps(&pipe), "--json"]);
    let j = ran.expect(0).json();
    assert!(j["sources"]
        .as_array()
        .expect("sources")
        .iter()
        .all(|o| o["status"] == "skipped"));
}

#[test]
fn nightly_example_pipeline_loads_and_validates() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/nightly-example.toml");
    let p = cyclarc::jobs::pipeline::load(&path).unwrap_or_else(|e| panic!("{e}"));
    assert!(p.verify);
    assert_eq!(p.sources.len(), 3);
    assert!(p.output.is_absolute());
    // What its comments promise: first matching rule wins (README, Pipelines).
    for g in &p.sources {
        let st = p.encode.overlay(&g.encode).resolve().expect("valid group");
        assert_eq!(
            st.codec.budget_for("kb.psr.p2.nde.accel"),
            Budget::Absolute(0.006)
        );
        assert_eq!(
            st.codec.budget_for("kb.psn.p1.de.accel"),
            Budget::Absolute(0.004)
        );
        assert_eq!(
            st.codec.budget_for("kb.pse.p3.ib"),
            Budget::Relative {
                fraction: 0.005,
                floor: 1.0
            }
        );
        assert_eq!(
            st.codec.budget_for("kb.psn.p1.bearing_temp"),
            Budget::Relative {
                fraction: 0.005,
                floor: 0.0005
            }
        );
    }
    let motor = p
        .encode
        .overlay(&p.sources[2].encode)
        .resolve()
        .expect("motor");
    assert_eq!(
        motor.codec.fundamental,
        cyclarc::codec::segment::FundamentalSetting::Hz(60.0)
    );
    assert_eq!(motor.codec.cycles_per_segment, Some(12));
}
