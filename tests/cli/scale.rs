//! Past one machine, for real, on this machine: an S3-compatible server (moto's, started here
//! on 127.0.0.1 and stopped by its PID), Apache Spark in local mode running the driver in
//! `pipelines/spark/`, and a thousand objects planned and run by sixteen shard processes.
//!
//! The references: the S3 API's conditional create (`If-None-Match: *`) as moto serves it;
//! Spark's own retry of a failed task (`spark.task.maxFailures`, the `local[N,F]` master);
//! the parquet crate, which reads the decoded files compared. `.ci/run` installs moto and
//! pyspark (and a JRE) and sets `CYCLARC_REQUIRE_SCALE=1`, so that these tests fail rather
//! than skip without them.

use std::net::{TcpListener, TcpStream};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use crate::shards::write_night;
use crate::support::archive::archive_rows;
use crate::support::*;

const BUCKET: &str = "fennick-hollow-logs";

fn required() -> bool {
    std::env::var_os("CYCLARC_REQUIRE_SCALE").is_some()
}

/// Whether a command runs; when it does not and the scale tests are required, fail.
fn have(what: &str, cmd: &mut Command) -> bool {
    let ok = cmd
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success());
    assert!(
        ok || !required(),
        "CYCLARC_REQUIRE_SCALE is set but {what} is missing"
    );
    if !ok {
        eprintln!("NOTE: {what} is not installed; skipped");
    }
    ok
}

/// Whether pyspark (and a Java runtime) is there; see [`have`].
fn have_pyspark() -> bool {
    have(
        "pyspark (pip install pyspark) with a Java runtime",
        Command::new("python3").args(["-c", "import pyspark"]),
    )
}

/// Run a Python script with Spark bound to 127.0.0.1; its standard output, after asserting
/// that it succeeded.
fn python_ok(script: &Path, args: &[&Path]) -> String {
    let out = Command::new("python3")
        .arg(script)
        .args(args)
        .env("SPARK_LOCAL_IP", "127.0.0.1")
        .output()
        .expect("python3 runs");
    let stdout = String::from_utf8_lossy(&out.stdout).into_owned();
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    stdout
}

/// moto's S3 server on a free port of 127.0.0.1; stopped (by its PID) when dropped.
struct Moto {
    child: Child,
    port: u16,
}

impl Moto {
    fn start() -> Option<Moto> {
        if !have(
            "moto_server (pip install 'moto[server]')",
            Command::new("python3").args(["-c", "import moto.server, boto3"]),
        ) {
            return None;
        }
        let port = TcpListener::bind("127.0.0.1:0")
            .and_then(|l| l.local_addr())
            .expect("a free port")
            .port();
        let child = Command::new("python3")
            .args([
                "-m",
                "moto.server",
                "-H",
                "127.0.0.1",
                "-p",
                &port.to_string(),
            ])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .expect("moto starts");
        let m = Moto { child, port };
        let until = Instant::now() + Duration::from_secs(30);
        while TcpStream::connect(("127.0.0.1", port)).is_err() {
            assert!(
                Instant::now() < until,
                "moto did not listen on 127.0.0.1:{port}"
            );
            std::thread::sleep(Duration::from_millis(100));
        }
        Some(m)
    }

    /// The environment cyclarc and boto3 read: credentials for moto, the endpoint, plain http.
    fn env(&self) -> Vec<(String, String)> {
        [
            ("AWS_ACCESS_KEY_ID", "cyclarc-test".to_string()),
            ("AWS_SECRET_ACCESS_KEY", "cyclarc-test".to_string()),
            ("AWS_REGION", "us-east-1".to_string()),
            ("AWS_DEFAULT_REGION", "us-east-1".to_string()),
            (
                "AWS_ENDPOINT_URL",
                format!("http://127.0.0.1:{}", self.port),
            ),
            ("AWS_ALLOW_HTTP", "true".to_string()),
            ("AWS_EC2_METADATA_DISABLED", "true".to_string()),
        ]
        .into_iter()
        .map(|(k, v)| (k.to_string(), v))
        .collect()
    }

    /// Run a Python snippet with boto3's client `s3` and `bucket` defined; its stdout.
    fn py(&self, code: &str) -> String {
        let prelude =
            format!("import boto3, sys, json\ns3 = boto3.client('s3')\nbucket = '{BUCKET}'\n");
        let out = Command::new("python3")
            .args(["-c", &format!("{prelude}{code}")])
            .envs(self.env())
            .output()
            .expect("python3 runs");
        assert!(
            out.status.success(),
            "boto3 failed: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8_lossy(&out.stdout).into_owned()
    }

    /// Upload every file of a folder under `prefix/`.
    fn upload(&self, dir: &Path, prefix: &str) {
        self.py(&format!(
            "import os\nd = {dir:?}\nfor f in sorted(os.listdir(d)):\n    \
             s3.upload_file(os.path.join(d, f), bucket, '{prefix}/' + f)\n",
            dir = dir.display().to_string()
        ));
    }

    /// Every object under a prefix as `key etag` lines, sorted.
    fn listing(&self, prefix: &str) -> String {
        self.py(&format!(
            "p = s3.get_paginator('list_objects_v2')\nrows = []\n\
             for page in p.paginate(Bucket=bucket, Prefix='{prefix}'):\n    \
             rows += [o['Key'] + ' ' + o['ETag'] for o in page.get('Contents', [])]\n\
             print('\\n'.join(sorted(rows)))\n"
        ))
    }
}

impl Drop for Moto {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn job_file(s: &Lab, name: &str, output: &str, sources: &str, verify: bool) -> PathBuf {
    let p = s.path(name);
    std::fs::write(
        &p,
        format!(
            "output = \"{output}\"\nverify = {verify}\n[encode]\nbudget_rel = 0.01\n\
             [[source]]\npaths = [\"{sources}\"]\n"
        ),
    )
    .unwrap();
    p
}

/// SHA-256 of each part a committed plan's manifest lists, in plan order.
fn manifest_shas(s: &Lab, env: &[(String, String)], plan: &str) -> Vec<String> {
    let p = s
        .run_env(&["inspect", plan, "--meta"], env)
        .expect(0)
        .json();
    let parts = p["parts"].as_str().unwrap().to_string();
    // The manifest itself, read through the store as any object.
    let text = if let Some(path) = parts.strip_prefix("s3://") {
        let (bucket, key) = path.split_once('/').unwrap();
        let out = Command::new("python3")
            .args([
                "-c",
                &format!(
                    "import boto3,sys\nsys.stdout.write(boto3.client('s3').get_object(\
                     Bucket='{bucket}', Key='{key}/manifest.json')['Body'].read().decode())"
                ),
            ])
            .envs(env.iter().map(|(k, v)| (k.as_str(), v.as_str())))
            .output()
            .unwrap();
        String::from_utf8(out.stdout).unwrap()
    } else {
        std::fs::read_to_string(Path::new(&parts).join("manifest.json")).unwrap()
    };
    let m: serde_json::Value = serde_json::from_str(&text).unwrap();
    m["parts"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["sha256"].as_str().unwrap().to_string())
        .collect()
}

#[test]
fn spark_runs_a_plan_over_s3_retries_a_failed_task_and_commits_once() {
    let Some(moto) = Moto::start() else { return };
    if !have_pyspark() {
        return;
    }
    let s = Lab::new();
    let env = moto.env();
    moto.py("s3.create_bucket(Bucket=bucket)\n");
    write_night(&s.path("night"), 6, 20_000);
    moto.upload(&s.path("night"), "night/2026-05-04");
    let job = job_file(
        &s,
        "job.toml",
        &format!("s3://{BUCKET}/archive"),
        &format!("s3://{BUCKET}/night/2026-05-04/*.parquet"),
        true,
    );
    let plan = format!("s3://{BUCKET}/plans/2026-05-04.json");
    // A cyclarc that fails the first attempt at shard 2 as a lost executor would (exit 75).
    let marker = s.path("failed-once");
    let wrapper = s.path("cyclarc-failing-once");
    std::fs::write(
        &wrapper,
        format!(
            "#!/bin/sh\ncase \" $* \" in\n  *\" --shard 2/\"*)\n    \
             if [ ! -e {m:?} ]; then touch {m:?}; echo 'injected failure' >&2; exit 75; fi;;\n\
             esac\nexec {bin:?} \"$@\"\n",
            m = marker.display().to_string(),
            bin = BIN
        ),
    )
    .unwrap();
    use std::os::unix::fs::PermissionsExt;
    std::fs::set_permissions(&wrapper, std::fs::Permissions::from_mode(0o755)).unwrap();
    let driver = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/spark/cyclarc_spark.py");
    let spark = |extra: &[&str]| {
        let out = Command::new("python3")
            .arg(&driver)
            .args([ps(&job), "--plan", &plan, "--cyclarc", ps(&wrapper)])
            .args(["--master", "local[2,3]"])
            .args(extra)
            .envs(env.iter().map(|(k, v)| (k.as_str(), v.as_str())))
            .env("SPARK_LOCAL_IP", "127.0.0.1")
            .current_dir(s.dir.path())
            .output()
            .expect("the Spark driver runs");
        s.record(
            format!("python3 cyclarc_spark.py {}", ps(&job)),
            out.status.code(),
            &out.stdout,
            &out.stderr,
        )
    };
    spark(&[]).expect(0);
    assert!(marker.exists(), "shard 2's first attempt failed");
    let listing = moto.listing("");
    assert_eq!(
        listing.matches("manifest.json").count(),
        1,
        "one manifest: {listing}"
    );

    // The same shards planned over the same files on disk and run without Spark or failures:
    // the same part bytes.
    let local_job = job_file(&s, "local.toml", "local-out", "night/*.parquet", true);
    s.run(&["plan", ps(&local_job), "--out", "local.json"])
        .expect(0);
    s.run(&["run", "local.json"]).expect(0);
    s.run(&["commit", "local.json"]).expect(0);
    assert_eq!(
        manifest_shas(&s, &env, &plan),
        manifest_shas(&s, &env, "local.json"),
        "the retried run wrote other bytes"
    );

    // The union decodes to what one ordinary local run decodes, source by source.
    s.run_env(&["decode", &plan, "--out", "union.parquet"], &env)
        .expect(0);
    s.run_env(&["decode", "local.json", "--out", "local.parquet"], &env)
        .expect(0);
    assert_eq!(
        sha256(&s.path("union.parquet")),
        sha256(&s.path("local.parquet"))
    );
    s.run_env(&["verify", &plan], &env)
        .expect(0)
        .prints(&["all pass"]);

    // A rerun does nothing: the plan is there (identical), every part matches, committed.
    spark(&[]).expect(0);
    assert_eq!(moto.listing(""), listing, "the rerun changed the bucket");
    s.run_env(&["commit", &plan], &env)
        .expect(0)
        .says(&["already committed"]);
}

#[test]
fn a_killed_shard_leaves_no_part_and_its_rerun_publishes_it() {
    let Some(moto) = Moto::start() else { return };
    let s = Lab::new();
    let env = moto.env();
    moto.py("s3.create_bucket(Bucket=bucket)\n");
    // One source big enough that its shard, on one thread, is still encoding when it is
    // killed (about 4 s of work on the 2-core machine CI runs on).
    write_night(&s.path("night"), 1, 2_500_000);
    moto.upload(&s.path("night"), "night");
    let job = job_file(
        &s,
        "job.toml",
        &format!("s3://{BUCKET}/archive"),
        &format!("s3://{BUCKET}/night/*.parquet"),
        true,
    );
    let plan = format!("s3://{BUCKET}/plans/big.json");
    s.run_env(&["plan", ps(&job), "--out", &plan], &env)
        .expect(0);
    let mut child = Command::new(BIN)
        .args(["--threads", "1", "run", &plan, "--shard", "0/1"])
        .envs(env.iter().map(|(k, v)| (k.as_str(), v.as_str())))
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    std::thread::sleep(Duration::from_millis(1500));
    assert!(
        child.try_wait().unwrap().is_none(),
        "the shard finished before it could be killed: make the source bigger"
    );
    child.kill().unwrap();
    child.wait().unwrap();
    let parts = moto.listing("archive/parts/");
    assert!(
        !parts.contains(".cyclarc.parquet"),
        "a killed shard left a part: {parts}"
    );
    s.run_env(&["commit", &plan], &env)
        .expect(1)
        .says(&["1 shard(s) missing"]);
    s.run_env(&["run", &plan, "--shard", "0/1"], &env).expect(0);
    s.run_env(&["commit", &plan], &env).expect(0);
    s.run_env(&["commit", &plan], &env)
        .expect(0)
        .says(&["already committed"]);
    assert_eq!(moto.listing("").matches("manifest.json").count(), 1);
}

#[test]
fn a_thousand_objects_in_sixteen_shard_processes_do_a_single_runs_work() {
    let Some(moto) = Moto::start() else { return };
    let s = Lab::new();
    let env = moto.env();
    moto.py("s3.create_bucket(Bucket=bucket)\n");
    // 1,000 one-second snapshots (two kinds, so the bytes are not all alike).
    write_night(&s.path("two"), 2, 5_000);
    moto.py(&format!(
        "for i in range(1000):\n    \
         s3.upload_file({d:?} + '/pump-%02d.parquet' % (i % 2), bucket, 'snap/s%04d.parquet' % i)\n",
        d = s.path("two").display().to_string()
    ));
    let job = job_file(
        &s,
        "job.toml",
        &format!("s3://{BUCKET}/archive"),
        &format!("s3://{BUCKET}/snap/*.parquet"),
        false,
    );
    let plan = format!("s3://{BUCKET}/plans/snap.json");
    let p = s
        .run_env(&["plan", ps(&job), "--out", &plan, "--json"], &env)
        .expect(0)
        .json();
    assert_eq!(p["shards"], 1000, "{p}");
    // Sixteen shard processes, two at a time (this machine's two cores), as a scheduler's
    // waves would run them.
    let n = 16;
    let mut done = 0u64;
    let mut samples = 0u64;
    let (mut wall, mut work) = (0.0f64, 0.0f64);
    for wave in 0..n / 2 {
        let started = Instant::now();
        let children: Vec<_> = (0..2)
            .map(|k| {
                Command::new(BIN)
                    .args(["--threads", "1", "run", &plan, "--json", "--shard"])
                    .arg(format!("{}/{n}", 2 * wave + k))
                    .envs(env.iter().map(|(k, v)| (k.as_str(), v.as_str())))
                    .stdout(Stdio::piped())
                    .stderr(Stdio::null())
                    .spawn()
                    .unwrap()
            })
            .collect();
        for c in children {
            let out = c.wait_with_output().unwrap();
            assert_eq!(out.status.code(), Some(0));
            let r: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
            for sh in r["shards"].as_array().unwrap() {
                assert_eq!(sh["status"], "done", "{sh}");
                done += 1;
                samples += sh["samples"].as_u64().unwrap();
                work += sh["seconds"].as_f64().unwrap();
            }
        }
        // Two processes ran side by side: the wave's wall time counts for both.
        wall += 2.0 * started.elapsed().as_secs_f64();
    }
    // Every shard exactly once, and every source row encoded once: a single run's work.
    assert_eq!(done, 1000);
    assert_eq!(
        samples,
        1000 * 3 * 5_000,
        "three channels of 5,000 rows per object"
    );
    eprintln!(
        "scale: 1,000 objects, {n} shard processes in waves of 2: {:.1} ms of process time per \
         shard beyond its own work ({:.1} ms of work per shard)",
        (wall - work) / 1000.0 * 1e3,
        work / 1000.0 * 1e3
    );
    s.run_env(&["commit", &plan], &env)
        .expect(0)
        .says(&["committed 1000 part(s)"]);
}

#[test]
fn the_spark_drivers_own_tests_pass() {
    // The driver's retry and no-commit rules, against a stand-in binary (its own unittest).
    if !have_pyspark() {
        return;
    }
    let test = Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/spark/test_cyclarc_spark.py");
    python_ok(&test, &[]);
}

#[test]
fn spark_reads_an_archives_query_columns_as_the_parquet_crate_does() {
    // The README's claim that any Parquet reader trends a machine without decoding, checked
    // with a second, independent implementation (parquet-java, inside Spark 3.5): every row's
    // channel, start, samples, error and budget use as the parquet crate reads them. Spark
    // 3.5 needs the two settings the README names (nanosecond times as longs; its vectorized
    // reader lacks BYTE_STREAM_SPLIT).
    if !have_pyspark() {
        return;
    }
    let s = Lab::new();
    write_night(&s.path("night"), 1, 20_000);
    let src = s.path("night/pump-00.parquet");
    let arch = s.path("a.cyclarc.parquet");
    s.encode(&src, &arch, &[]).expect(0);
    let script = s.path("read.py");
    std::fs::write(
        &script,
        r#"import struct, sys
from pyspark.sql import SparkSession
s = (SparkSession.builder.master("local[1]")
     .config("spark.ui.enabled", "false")
     .config("spark.sql.legacy.parquet.nanosAsLong", "true")
     .config("spark.sql.parquet.enableVectorizedReader", "false")
     .getOrCreate())
s.sparkContext.setLogLevel("ERROR")
for r in s.read.parquet(sys.argv[1]).select(
        "channel", "start", "samples", "error_rms", "budget_use").collect():
    bits = [struct.unpack("<I", struct.pack("<f", v))[0] for v in (r.error_rms, r.budget_use)]
    print(r.channel, r.start, r.samples, *bits)
s.stop()
"#,
    )
    .unwrap();
    let stdout = python_ok(&script, &[&arch]);
    let want: Vec<String> = archive_rows(&arch)
        .iter()
        .map(|r| {
            format!(
                "{} {} {} {} {}",
                r.channel,
                r.start,
                r.samples,
                r.error_rms.to_bits(),
                r.budget_use.to_bits()
            )
        })
        .collect();
    let got: Vec<String> = stdout.lines().map(str::to_string).collect();
    assert!(!want.is_empty());
    assert_eq!(got, want);
}
