//! `plan`, `run PLAN --shard`, `commit`, and the readers of a committed plan, through the real
//! binary on local folders. What they are held to:
//!
//! - the union of the parts decodes to what a single run decodes (the parquet crate reads
//!   both; channel cuts change no value, since a block depends only on its own channel);
//! - create-only publication: a rerun writes nothing, a second commit changes nothing (the
//!   semantics of a conditional create, `O_EXCL` in open(2) and `If-None-Match: *` in the S3
//!   API reference);
//! - every source row comes back exactly once, a time cut included, within the budgets
//!   `verify` recomputes.
//!
//! The object-storage and Apache Spark runs are in `scale.rs`.

use std::path::Path;

use crate::support::parquet_io::read_table;
use crate::support::signals::grid;
use crate::support::source::*;
use crate::support::*;
use arrow::array::{Array, AsArray};
use arrow::datatypes::{Float64Type, TimeUnit};

/// A pump's phase currents (three channels), `n` samples at 5 kHz starting `offset_s` after
/// T0: a 50 Hz wave with a 5th harmonic, its level set by `seed`.
pub fn phase_currents(n: usize, offset_s: f64, seed: u64) -> Vec<Chan> {
    let fs = 5000.0;
    let t0 = (offset_s * 1e9) as i64;
    let times: Vec<i64> = grid(n, fs).into_iter().map(|t| t + t0).collect();
    ["ia", "ib", "ic"]
        .iter()
        .enumerate()
        .map(|(k, name)| {
            let level = 10.0 + seed as f64;
            let shift = k as f64 * std::f64::consts::TAU / 3.0;
            let v: Vec<f64> = (0..n)
                .map(|m| {
                    let w = std::f64::consts::TAU * 50.0 * (m as f64 / fs + offset_s);
                    level * (w - shift).cos() + 0.3 * (5.0 * (w - shift)).cos()
                })
                .collect();
            Chan::new(name, VType::F64, times.clone(), &v)
        })
        .collect()
}

/// Write `count` wide sources of consecutive 4 s stretches under `dir`.
pub fn write_night(dir: &Path, count: usize, n: usize) {
    std::fs::create_dir_all(dir).unwrap();
    for i in 0..count {
        write_wide(
            &dir.join(format!("pump-{i:02}.parquet")),
            &phase_currents(n, i as f64 * n as f64 / 5000.0, i as u64),
            Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None)),
            "time",
        );
    }
}

/// Times and each channel's values (as f64 bits, nulls as None) of a decoded wide file.
type Rows = (Vec<i64>, Vec<(String, Vec<Option<u64>>)>);

fn wide_rows(path: &Path) -> Rows {
    let t = read_table(path);
    let b = &t.batch;
    let time = b
        .column_by_name("time")
        .expect("time")
        .as_primitive::<arrow::datatypes::TimestampNanosecondType>()
        .values()
        .to_vec();
    let mut cols = Vec::new();
    for f in t.schema.fields() {
        if f.name() == "time" {
            continue;
        }
        let a = b
            .column_by_name(f.name())
            .unwrap()
            .as_primitive::<Float64Type>();
        cols.push((
            f.name().clone(),
            (0..a.len())
                .map(|i| (!a.is_null(i)).then(|| a.value(i).to_bits()))
                .collect(),
        ));
    }
    (time, cols)
}

/// The rows of several decoded wide files, end to end.
fn concat(parts: Vec<Rows>) -> Rows {
    let mut out: Rows = (Vec::new(), Vec::new());
    for (t, cols) in parts {
        out.0.extend(t);
        for (name, v) in cols {
            match out.1.iter_mut().find(|c| c.0 == name) {
                Some(c) => c.1.extend(v),
                None => out.1.push((name, v)),
            }
        }
    }
    out
}

fn job(s: &Lab, name: &str, output: &str, sources: &str) -> std::path::PathBuf {
    let p = s.path(name);
    std::fs::write(
        &p,
        format!(
            "output = \"{output}\"\nverify = true\n[encode]\nbudget_rel = 0.01\n\
             [[source]]\npaths = [\"{sources}\"]\n"
        ),
    )
    .unwrap();
    p
}

#[test]
fn sharded_by_channel_a_plan_decodes_exactly_as_a_single_run() {
    let s = Lab::new();
    write_night(&s.path("night"), 3, 20_000);
    let j = job(&s, "job.toml", "out", "night/*.parquet");
    // 20,000 samples × 4 B = 80 kB per channel: two channels to a shard of 170 kB.
    let plan = s
        .run(&[
            "plan",
            ps(&j),
            "--out",
            "plan.json",
            "--shard-bytes",
            "170000",
            "--json",
        ])
        .expect(0)
        .json();
    assert_eq!(plan["shards"], 6, "{plan}");
    let text = std::fs::read_to_string(s.path("plan.json")).unwrap();
    let p: serde_json::Value = serde_json::from_str(&text).unwrap();
    let groups: Vec<String> = p["shards"]
        .as_array()
        .unwrap()
        .iter()
        .map(|sh| sh["channels"].to_string())
        .collect();
    assert_eq!(groups[..2], [r#"["ia","ib"]"#, r#"["ic"]"#], "{text}");
    // Deterministic: planned again, the same bytes (and written again, accepted).
    s.run(&[
        "plan",
        ps(&j),
        "--out",
        "again.json",
        "--shard-bytes",
        "170000",
    ])
    .expect(0);
    assert_eq!(
        std::fs::read(s.path("again.json")).unwrap(),
        text.as_bytes()
    );
    s.run(&[
        "plan",
        ps(&j),
        "--out",
        "plan.json",
        "--shard-bytes",
        "170000",
    ])
    .expect(0)
    .says(&["identical"]);
    // A different plan where one is: refused, the plan left as it was.
    s.run(&[
        "plan",
        ps(&j),
        "--out",
        "plan.json",
        "--shard-bytes",
        "90000",
    ])
    .expect(2)
    .says(&["different plan"]);
    assert_eq!(std::fs::read_to_string(s.path("plan.json")).unwrap(), text);

    // Half the shards, then commit: refused, naming what is missing.
    s.run(&["run", "plan.json", "--shard", "0/2"]).expect(0);
    let ids: Vec<&str> = p["shards"]
        .as_array()
        .unwrap()
        .iter()
        .map(|sh| sh["id"].as_str().unwrap())
        .collect();
    s.run(&["commit", "plan.json"])
        .expect(1)
        .says(&["3 shard(s) missing", ids[1], ids[3], ids[5]]);
    s.run(&["run", "plan.json", "--shard", "1/2"]).expect(0);
    s.run(&["commit", "plan.json"])
        .expect(0)
        .says(&["committed 6 part(s)"]);
    let parts = s.path(&format!("out/parts/{}", p["hash"].as_str().unwrap()));
    let manifest = parts.join("manifest.json");
    let before = (tree(&parts), sha256(&manifest));
    let stamps: Vec<_> = tree(&parts)
        .iter()
        .map(|f| {
            std::fs::metadata(parts.join(f))
                .unwrap()
                .modified()
                .unwrap()
        })
        .collect();
    // A rerun of every shard and a second commit change nothing.
    s.run(&["run", "plan.json"])
        .expect(0)
        .says(&["matches its digest"]);
    s.run(&["commit", "plan.json"])
        .expect(0)
        .says(&["already committed"]);
    assert_eq!((tree(&parts), sha256(&manifest)), before);
    let again: Vec<_> = tree(&parts)
        .iter()
        .map(|f| {
            std::fs::metadata(parts.join(f))
                .unwrap()
                .modified()
                .unwrap()
        })
        .collect();
    assert_eq!(stamps, again, "no part was written again");

    // The union decodes to what one ordinary run of the same job decodes, source by source.
    s.run(&["decode", "plan.json", "--out", "union.parquet"])
        .expect(0);
    let single = job(&s, "single.toml", "single", "night/*.parquet");
    s.run(&["run", ps(&single)]).expect(0);
    let mut each = Vec::new();
    for i in 0..3 {
        let out = s.path(&format!("single-{i}.parquet"));
        s.run(&[
            "decode",
            ps(&s.path(&format!("single/pump-{i:02}.cyclarc.parquet"))),
            "--out",
            ps(&out),
        ])
        .expect(0);
        each.push(wide_rows(&out));
    }
    let union = wide_rows(&s.path("union.parquet"));
    assert_eq!(union.0.len(), 60_000);
    assert!(
        union == concat(each),
        "the union differs from the single run"
    );

    // The other readers take the plan as one archive.
    s.run(&["verify", "plan.json"])
        .expect(0)
        .prints(&["6 part(s), all pass"]);
    let i = s.run(&["inspect", "plan.json", "--json"]).expect(0).json();
    let chans = i["channels"].as_array().unwrap();
    assert_eq!(chans.len(), 3);
    assert!(chans.iter().all(|c| c["samples"] == 60_000), "{i}");
    let t = s.run(&["trend", "plan.json", "--json"]).expect(0).json();
    let mut single_points = 0;
    for k in 0..3 {
        let a = s.path(&format!("single/pump-{k:02}.cyclarc.parquet"));
        single_points += s.run(&["trend", ps(&a), "--json"]).expect(0).json()["points"]
            .as_array()
            .unwrap()
            .len();
    }
    assert_eq!(t["points"].as_array().unwrap().len(), single_points);
    // An edited plan is refused.
    std::fs::write(
        s.path("edited.json"),
        text.replace("\"verify\": true", "\"verify\": false"),
    )
    .unwrap();
    s.run(&["run", "edited.json"]).expect(2).says(&["hash"]);
    // Shards are of plans only.
    s.run(&["run", ps(&j), "--shard", "0/2"]).expect(2);
}

#[test]
fn a_time_cut_covers_every_row_once_and_verifies() {
    let s = Lab::new();
    std::fs::create_dir_all(s.path("night")).unwrap();
    // One long-layout source: 3 channels × 40,000 samples, row groups of 16,384 rows.
    let chans = phase_currents(40_000, 0.0, 1);
    let mut spec = Spec::new(TimeKind::Ts(TimeUnit::Nanosecond, None));
    spec.row_group = 16_384;
    write_long(
        &s.path("night/long.parquet"),
        &chans,
        spec,
        &Columns::default(),
    );
    let j = job(&s, "job.toml", "out", "night/*.parquet");
    // 120,000 rows × 4 B = 480 kB; shards of 200 kB cut it in time at row groups.
    let plan = s
        .run(&[
            "plan",
            ps(&j),
            "--out",
            "plan.json",
            "--shard-bytes",
            "200000",
            "--json",
        ])
        .expect(0)
        .json();
    let shards = plan["shards"].as_u64().unwrap();
    assert!(shards >= 3, "{plan}");
    s.run(&["run", "plan.json"]).expect(0);
    s.run(&["commit", "plan.json"]).expect(0);
    s.run(&["verify", "plan.json"])
        .expect(0)
        .prints(&[&format!("{shards} part(s), all pass")]);
    s.run(&["decode", "plan.json", "--out", "back.parquet"])
        .expect(0);
    let back = read_table(&s.path("back.parquet")).batch;
    assert_eq!(back.num_rows(), 120_000, "every row back, none twice");
}
