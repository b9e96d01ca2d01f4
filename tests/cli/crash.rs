//! Crashes, signals, concurrency and I/O faults, through the real binary.
//!
//! - SIGKILL at random moments (fixed-seed ChaCha8) during `encode` and `run`: a file under
//!   an archive's final name always verifies; a rerun of `run` completes the job, removes
//!   the temporary files the killed runs left, and keeps the manifest consistent (it parses,
//!   every entry's archive exists with the recorded SHA-256).
//! - Two `run`s at once on one pipeline: the lock file serializes them; both exit 0.
//! - SIGTERM during a long `encode` or `run`: exit 4, no temporary file, no archive.
//! - I/O faults injected with strace (`-e inject=fsync:error=EIO`, `write:error=ENOSPC`):
//!   exit 3, the file named, nothing under the final name, and stale temporary files are
//!   removed by the next `run`. Skipped with a note when strace is not installed.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::Arc;
use std::time::{Duration, Instant};

use crate::support::rows::*;
use crate::support::*;
use arrow::array::{ArrayRef, Float32Array, Int16Array};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// A wide source of `n` samples at 25.6 kHz: an f32 vibration channel and an i16 current
/// channel (invented signals: harmonics of 29.5 Hz and 60 Hz).
fn source(path: &Path, n: usize, seed: u64) {
    let fs = 25_600.0;
    let mut r = ChaCha8Rng::seed_from_u64(seed);
    let a: Vec<f32> = clean_wave(n, fs, 29.5, 0.8)
        .iter()
        .map(|&v| (v + r.random_range(-0.01..0.01)) as f32)
        .collect();
    let b: Vec<i16> = clean_wave(n, fs, 60.0, 2000.0)
        .iter()
        .map(|&v| v.round() as i16)
        .collect();
    write_wide(
        path,
        &grid(n, fs),
        vec![
            ("accel", Arc::new(Float32Array::from(a)) as ArrayRef),
            ("current", Arc::new(Int16Array::from(b))),
        ],
    );
}

/// Start the binary (working folder `dir`), output captured.
fn spawn(dir: &Path, args: &[&str]) -> Child {
    Command::new(BIN)
        .args(args)
        .current_dir(dir)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the cyclarc binary starts")
}

/// Wait for a child and log it in the lab.
fn finish(lab: &Lab, cmd: &str, child: Child) -> Ran {
    let out = child.wait_with_output().expect("wait");
    lab.record(cmd.to_string(), out.status.code(), &out.stdout, &out.stderr)
}

/// How long one full command takes here (the median of `reps` runs).
fn duration_of(lab: &Lab, reps: usize, args: &[&str], before_each: impl Fn()) -> Duration {
    let mut d: Vec<Duration> = (0..reps)
        .map(|_| {
            before_each();
            let t = Instant::now();
            lab.run(args).expect(0);
            t.elapsed()
        })
        .collect();
    d.sort();
    d[reps / 2]
}

/// Verifies archives, remembering (archive bytes, digest bytes) pairs already verified.
struct Verifier {
    seen: BTreeSet<(String, Option<String>)>,
    runs: usize,
}

impl Verifier {
    fn new() -> Self {
        Verifier {
            seen: BTreeSet::new(),
            runs: 0,
        }
    }

    /// A file under an archive's final name must verify against its source: exit 0 (a
    /// missing digest is allowed, a wrong one is not).
    fn check(&mut self, lab: &Lab, archive: &Path, source: &Path) {
        let key = (
            sha256(archive),
            std::fs::read_to_string(digest_of(archive)).ok(),
        );
        if self.seen.contains(&key) {
            return;
        }
        self.runs += 1;
        lab.run(&["verify", ps(archive), "--source", ps(source)])
            .expect(0);
        self.seen.insert(key);
    }
}

#[test]
fn sigkill_during_encode_never_leaves_a_partial_archive() {
    let lab = Lab::new();
    let src = lab.path("day.parquet");
    source(&src, 600_000, 1);
    let arch = lab.path("day.cyclarc.parquet");
    let budgets = ["0.01", "0.02"];
    let args = |b: &'static str| -> Vec<String> {
        ["encode", ps(&src), "--out", ps(&arch), "--budget-rms", b]
            .iter()
            .map(|s| s.to_string())
            .collect()
    };
    let full = duration_of(
        &lab,
        3,
        &args(budgets[0])
            .iter()
            .map(String::as_str)
            .collect::<Vec<_>>(),
        || {},
    );
    eprintln!("one encode takes {full:?}");
    let mut r = ChaCha8Rng::seed_from_u64(0xdead_5eed);
    let mut v = Verifier::new();
    let trials = 30;
    let (mut killed, mut completed, mut with_archive) = (0, 0, 0);
    let mut temps_left = BTreeSet::new();
    let started = Instant::now();
    for i in 0..trials {
        // Alternate budgets so that each encode replaces an archive with different bytes
        // (the window between the new archive and its new digest is exercised).
        let a = args(budgets[i % 2]);
        let a: Vec<&str> = a.iter().map(String::as_str).collect();
        let delay = full.mul_f64(r.random_range(0.0..1.0));
        let mut child = spawn(lab.dir.path(), &a);
        std::thread::sleep(delay);
        let was_running = child.try_wait().expect("try_wait").is_none();
        child.kill().ok(); // SIGKILL
        let ran = finish(&lab, &a.join(" "), child);
        ran.no_panic();
        if was_running && ran.code.is_none() {
            killed += 1;
        } else {
            completed += 1;
            ran.expect(0);
        }
        if arch.exists() {
            with_archive += 1;
            v.check(&lab, &arch, &src);
        }
        temps_left.extend(temp_files(lab.dir.path()));
    }
    eprintln!(
        "{trials} encode trials in {:.1} s: {killed} killed, {completed} completed, \
         {with_archive} with a file under the final name ({} distinct states verified), \
         {} temporary files left by killed encodes",
        started.elapsed().as_secs_f64(),
        v.runs,
        temps_left.len()
    );
    assert!(
        killed >= trials / 2,
        "most trials must land while encode runs"
    );
    // A last complete encode still works beside whatever the kills left.
    let a = args(budgets[0]);
    lab.run(&a.iter().map(String::as_str).collect::<Vec<_>>())
        .expect(0);
    v.check(&lab, &arch, &src);
}

/// A pipeline over `in/*.parquet` writing to `out/`, with the given absolute budget.
fn write_pipeline(lab: &Lab, budget: &str) -> PathBuf {
    let p = lab.path("job.toml");
    std::fs::write(
        &p,
        format!(
            "output = \"out\"\nverify = true\n[encode]\nbudget_rms = {budget}\n\
             [[source]]\npaths = [\"in/*.parquet\"]\n"
        ),
    )
    .expect("pipeline");
    p
}

/// The manifest must parse, and every entry must name an existing archive with the
/// recorded SHA-256 and a source that exists. Returns the entries' archive names.
fn manifest_consistent(lab: &Lab, out: &Path) -> Vec<String> {
    let m = out.join("cyclarc-manifest.json");
    if !m.exists() {
        return Vec::new();
    }
    let text = std::fs::read_to_string(&m).expect("manifest readable");
    let v: BTreeMap<String, serde_json::Value> = match serde_json::from_str(&text) {
        Ok(v) => v,
        Err(e) => panic!("manifest does not parse: {e}\n{text}"),
    };
    for (name, e) in &v {
        let a = out.join(name);
        assert!(a.exists(), "manifest names {name}, which is not there");
        assert_eq!(
            e["archive_sha256"].as_str(),
            Some(sha256(&a).as_str()),
            "manifest entry {name} does not match the file"
        );
        let src = PathBuf::from(e["source"].as_str().expect("source"));
        let src = if src.is_absolute() {
            src
        } else {
            lab.dir.path().join(src)
        };
        assert_eq!(e["source_sha256"].as_str(), Some(sha256(&src).as_str()));
    }
    v.into_keys().collect()
}

fn sources(lab: &Lab, n: usize) -> Vec<PathBuf> {
    std::fs::create_dir_all(lab.path("in")).expect("mkdir");
    (0..3)
        .map(|k| {
            let p = lab.path(&format!("in/day{k}.parquet"));
            source(&p, n, 10 + k as u64);
            p
        })
        .collect()
}

/// The archive of a source in `out/`.
fn archive_of(lab: &Lab, src: &Path) -> PathBuf {
    let stem = src
        .file_stem()
        .expect("stem")
        .to_string_lossy()
        .into_owned();
    lab.path(&format!("out/{stem}.cyclarc.parquet"))
}

#[test]
fn sigkill_during_run_then_rerun_completes_and_keeps_the_manifest_consistent() {
    let lab = Lab::new();
    let srcs = sources(&lab, 200_000);
    let out = lab.path("out");
    let budgets = ["0.01", "0.02"];
    let pipe = write_pipeline(&lab, budgets[0]);
    let full = duration_of(&lab, 3, &["run", ps(&pipe)], || {
        let _ = std::fs::remove_dir_all(&out);
    });
    eprintln!("one run (3 sources, verify after write) takes {full:?}");
    let mut r = ChaCha8Rng::seed_from_u64(0x0b5e_55ed);
    let mut v = Verifier::new();
    let trials = 24;
    let (mut killed, mut reruns, mut stale_cleaned) = (0, 0, 0);
    let started = Instant::now();
    let mut cycle = 0usize;
    for i in 0..trials {
        let delay = full.mul_f64(r.random_range(0.0..1.0));
        let mut child = spawn(lab.dir.path(), &["run", ps(&pipe)]);
        std::thread::sleep(delay);
        child.kill().ok();
        let ran = finish(&lab, "run job.toml (killed)", child);
        ran.no_panic();
        if ran.code.is_none() {
            killed += 1;
        } else {
            ran.expect(0);
        }
        // Whatever is under a final name verifies; the manifest is consistent.
        for s in &srcs {
            let a = archive_of(&lab, s);
            if a.exists() {
                v.check(&lab, &a, s);
            }
        }
        manifest_consistent(&lab, &out);
        // Every third trial: rerun to the end, then change the budget so the next trials
        // re-archive over existing archives.
        if i % 3 == 2 {
            let stale = temp_files(&out).len();
            let ran = lab.run(&["run", ps(&pipe), "--json"]);
            ran.expect(0);
            reruns += 1;
            assert!(
                temp_files(&out).is_empty(),
                "the rerun removed stale temporary files"
            );
            stale_cleaned += stale;
            let names = manifest_consistent(&lab, &out);
            assert_eq!(names.len(), srcs.len(), "every source is in the manifest");
            for s in &srcs {
                let a = archive_of(&lab, s);
                let d = std::fs::read_to_string(digest_of(&a)).expect("digest beside it");
                assert!(d.starts_with(&sha256(&a)), "digest matches");
                v.check(&lab, &a, s);
            }
            cycle += 1;
            write_pipeline(&lab, budgets[cycle % 2]);
        }
    }
    eprintln!(
        "{trials} run trials in {:.1} s: {killed} killed, {reruns} reruns to completion, \
         {stale_cleaned} stale temporary files removed by reruns, {} distinct archive states \
         verified",
        started.elapsed().as_secs_f64(),
        v.runs
    );
    assert!(killed >= trials / 3, "too few trials landed while run ran");
}

#[test]
fn two_runs_at_once_do_not_corrupt_each_other() {
    let lab = Lab::new();
    let srcs = sources(&lab, 120_000);
    let pipe = write_pipeline(&lab, "0.01");
    for round in 0..3 {
        let a = spawn(lab.dir.path(), &["run", ps(&pipe), "--json"]);
        let b = spawn(lab.dir.path(), &["run", ps(&pipe), "--json"]);
        let ra = finish(&lab, "run job.toml --json (first)", a);
        let rb = finish(&lab, "run job.toml --json (second)", b);
        ra.expect(0);
        rb.expect(0);
        // Each source archived once over the two runs (in the first round) or skipped by
        // both (later rounds, same settings).
        let status = |r: &Ran| -> Vec<String> {
            let j: serde_json::Value = serde_json::from_str(&r.stdout).expect("JSON");
            j["sources"]
                .as_array()
                .expect("sources")
                .iter()
                .map(|s| s["status"].as_str().unwrap_or_default().to_string())
                .collect()
        };
        let (sa, sb) = (status(&ra), status(&rb));
        for k in 0..srcs.len() {
            let pair = [sa[k].as_str(), sb[k].as_str()];
            if round == 0 {
                assert!(
                    pair == ["archived", "skipped"] || pair == ["skipped", "archived"],
                    "source {k}: {pair:?}"
                );
            } else {
                assert_eq!(pair, ["skipped", "skipped"], "source {k}");
            }
        }
        assert_eq!(
            manifest_consistent(&lab, &lab.path("out")).len(),
            srcs.len()
        );
        for s in &srcs {
            lab.run(&["verify", ps(&archive_of(&lab, s)), "--source", ps(s)])
                .expect(0);
        }
        assert!(temp_files(lab.dir.path()).is_empty());
    }
    // Two encodes of one source to one output at once: both finish, the result verifies.
    let out = lab.path("same.cyclarc.parquet");
    let args = [
        "encode",
        ps(&srcs[0]),
        "--out",
        ps(&out),
        "--budget-rms",
        "0.01",
    ];
    let a = spawn(lab.dir.path(), &args);
    let b = spawn(lab.dir.path(), &args);
    finish(&lab, "encode (first)", a).expect(0);
    finish(&lab, "encode (second)", b).expect(0);
    lab.run(&["verify", ps(&out), "--source", ps(&srcs[0])])
        .expect(0);
    assert!(temp_files(lab.dir.path()).is_empty());
}

fn sigterm(child: &Child) {
    let st = Command::new("kill")
        .args(["-TERM", &child.id().to_string()])
        .status()
        .expect("kill runs");
    assert!(st.success());
}

#[test]
fn sigterm_stops_encode_and_run_cleanly_with_exit_4() {
    let lab = Lab::new();
    let src = lab.path("long.parquet");
    source(&src, 1_500_000, 3);
    let arch = lab.path("long.cyclarc.parquet");
    let args = [
        "encode",
        ps(&src),
        "--out",
        ps(&arch),
        "--budget-rms",
        "0.01",
    ];
    let full = duration_of(&lab, 1, &args, || {
        let _ = std::fs::remove_file(&arch);
        let _ = std::fs::remove_file(digest_of(&arch));
    });
    std::fs::remove_file(&arch).expect("remove");
    std::fs::remove_file(digest_of(&arch)).expect("remove");
    eprintln!("the long encode takes {full:?}");
    let before = lab.tree();
    for frac in [0.2, 0.5] {
        let child = spawn(lab.dir.path(), &args);
        std::thread::sleep(full.mul_f64(frac));
        sigterm(&child);
        let ran = finish(&lab, &args.join(" "), child);
        ran.expect(4).says(&["interrupted"]);
        assert_eq!(
            lab.tree(),
            before,
            "nothing left: no archive, no digest, no temporary file"
        );
    }
    // `run`: stops with exit 4; the manifest (if any) stays consistent, no temporary files.
    std::fs::create_dir(lab.path("in")).expect("mkdir");
    std::fs::rename(&src, lab.path("in/long.parquet")).expect("move");
    let pipe = write_pipeline(&lab, "0.01");
    let child = spawn(lab.dir.path(), &["run", ps(&pipe)]);
    std::thread::sleep(full.mul_f64(0.3));
    sigterm(&child);
    let ran = finish(&lab, "run job.toml", child);
    ran.expect(4).says(&["interrupted"]);
    assert!(temp_files(lab.dir.path()).is_empty());
    assert!(!lab.path("out/long.cyclarc.parquet").exists());
    assert!(manifest_consistent(&lab, &lab.path("out")).is_empty());
}

// ───────────────────────────── injected I/O faults ─────────────────────────────

/// Run the binary under strace with fault injection (`inject` are `-e inject=…` specs; the
/// syscalls they name are traced to /dev/null).
fn under_strace(lab: &Lab, inject: &[&str], args: &[&str]) -> Ran {
    let mut traced: Vec<&str> = inject
        .iter()
        .map(|s| s.split(':').next().expect("syscall"))
        .collect();
    traced.dedup();
    let mut strace = vec![
        "-o".to_string(),
        "/dev/null".to_string(),
        "-e".to_string(),
        format!("trace={}", traced.join(",")),
    ];
    for i in inject {
        strace.push("-e".to_string());
        strace.push(format!("inject={i}"));
    }
    lab.run_under_strace(
        &strace,
        args,
        format!("strace {} cyclarc {}", inject.join(" "), args.join(" ")),
    )
}

#[test]
fn injected_fsync_and_write_failures_publish_nothing() {
    if !have_strace("the injected I/O fault tests are skipped") {
        return;
    }
    let lab = Lab::new();
    let src = lab.path("s.parquet");
    source(&src, 100_000, 4);
    let arch = lab.path("s.cyclarc.parquet");
    let args = [
        "encode",
        ps(&src),
        "--out",
        ps(&arch),
        "--budget-rms",
        "0.01",
    ];
    let before = lab.tree();
    // A fresh output: fsync 1 is the archive's temporary file, 2 the folder after its rename,
    // 3 the digest's temporary file, 4 the folder after that rename. Write 1 is the archive's
    // first write; write 2 is its second or, when the archive fits in one write, the
    // digest's: either way nothing may be published.
    let faults = [
        ("fsync:error=EIO:when=1", "s.cyclarc.parquet: write failed"),
        ("fsync:error=EIO:when=2", "s.cyclarc.parquet: write failed"),
        (
            "fsync:error=EIO:when=3",
            "s.cyclarc.parquet.sha256: write failed",
        ),
        (
            "fsync:error=EIO:when=4",
            "s.cyclarc.parquet.sha256: write failed",
        ),
        (
            "write:error=ENOSPC:when=1",
            "s.cyclarc.parquet: write failed",
        ),
        ("write:error=EIO:when=2", "write failed"),
    ];
    for (fault, says) in faults {
        let ran = under_strace(&lab, &[fault], &args);
        ran.expect(3).says(&[says]);
        assert_eq!(
            lab.tree(),
            before,
            "{fault}: nothing published, no temporary file"
        );
    }
    // Replacing an existing archive (other budget): the old digest goes first, so every
    // failure leaves either the old archive (verifying, its digest matching or gone) or none.
    lab.run(&args).expect(0);
    let mut v = Verifier::new();
    let mut args2 = args;
    args2[5] = "0.02";
    for when in 1..=5 {
        lab.run(&args).expect(0);
        let ran = under_strace(&lab, &[&format!("fsync:error=EIO:when={when}")], &args2);
        ran.expect(3).says(&["write failed"]);
        // fsync 1 (the new temporary file): the old archive and digest stay; 2 (the folder,
        // after the old digest's removal): the old archive stays without a digest; 3 and
        // later (the new archive was renamed in, or its digest failed): none is left.
        assert_eq!(arch.exists(), when <= 2, "when={when}: archive");
        assert_eq!(digest_of(&arch).exists(), when == 1, "when={when}: digest");
        if arch.exists() {
            v.check(&lab, &arch, &src);
        }
        assert!(
            temp_files(lab.dir.path()).is_empty(),
            "when={when}: no temporary file"
        );
    }
    // Decode: a failed write leaves no decoded file.
    lab.run(&args).expect(0);
    let dec = lab.path("d.parquet");
    let ran = under_strace(
        &lab,
        &["fsync:error=EIO:when=1"],
        &["decode", ps(&arch), "--out", ps(&dec)],
    );
    ran.expect(3).says(&["d.parquet: write failed"]);
    let ran = under_strace(
        &lab,
        &["write:error=ENOSPC:when=1"],
        &["decode", ps(&arch), "--out", ps(&dec)],
    );
    ran.expect(3).says(&["d.parquet: write failed"]);
    assert!(!dec.exists());
    assert!(temp_files(lab.dir.path()).is_empty());
}

#[test]
fn a_run_with_io_faults_fails_cleanly_and_the_next_run_cleans_up() {
    if !have_strace("the injected I/O fault tests are skipped") {
        return;
    }
    let lab = Lab::new();
    let srcs = sources(&lab, 60_000);
    let pipe = write_pipeline(&lab, "0.01");
    let out = lab.path("out");
    // The first archive's fsync fails and so does removing its temporary file (the first
    // unlink fails too): the run reports exit 3 for that source, archives the others, and leaves a
    // stale temporary file behind.
    let ran = under_strace(
        &lab,
        &["fsync:error=EIO:when=1", "unlink:error=EIO:when=1"],
        &["run", ps(&pipe), "--json"],
    );
    ran.expect(3).says(&["day0.cyclarc.parquet: write failed"]);
    assert!(
        !archive_of(&lab, &srcs[0]).exists(),
        "nothing under the final name"
    );
    assert_eq!(
        temp_files(&out).len(),
        1,
        "the failed removal left one temporary file"
    );
    let names = manifest_consistent(&lab, &out);
    assert_eq!(names, ["day1.cyclarc.parquet", "day2.cyclarc.parquet"]);
    // The manifest write fails (fsyncs 1–4 are day0's archive and digest, 5 the manifest's
    // temporary file): exit 3, the old manifest stays as it was.
    let manifest = std::fs::read(out.join("cyclarc-manifest.json")).expect("manifest");
    let ran = under_strace(&lab, &["fsync:error=EIO:when=5"], &["run", ps(&pipe)]);
    ran.expect(3).says(&["cyclarc-manifest.json: write failed"]);
    assert_eq!(
        std::fs::read(out.join("cyclarc-manifest.json")).expect("manifest"),
        manifest
    );
    manifest_consistent(&lab, &out);
    // The next run without faults: removes the stale file, archives what is missing, and
    // the manifest lists every source.
    let ran = lab.run(&["run", ps(&pipe), "--json"]);
    ran.expect(0);
    assert!(temp_files(&out).is_empty(), "stale temporary files removed");
    assert_eq!(manifest_consistent(&lab, &out).len(), 3);
    for s in &srcs {
        lab.run(&["verify", ps(&archive_of(&lab, s)), "--source", ps(s)])
            .expect(0);
    }
}

#[test]
fn a_reader_that_went_away_does_not_make_the_report_panic() {
    // `cyclarc inspect A --json | head -1`: the reader closes the pipe; the process must not
    // panic on the failed write (Rust ignores SIGPIPE, so print! would panic, exit 101).
    let lab = Lab::new();
    let src = lab.path("s.parquet");
    source(&src, 50_000, 5);
    let arch = lab.path("s.cyclarc.parquet");
    lab.encode(&src, &arch, &["--budget-rms", "0.01"]).expect(0);
    for args in [
        vec!["inspect", ps(&arch), "--json"],
        vec!["inspect", ps(&arch)],
        vec!["verify", ps(&arch), "--source", ps(&src)],
        vec!["verify", ps(&arch), "--source", ps(&src), "--json"],
    ] {
        let (reader, writer) = std::io::pipe().expect("pipe");
        drop(reader); // closed before the child writes anything
        let out = Command::new(BIN)
            .args(&args)
            .stdout(writer)
            .stderr(Stdio::piped())
            .output()
            .expect("runs");
        let ran = lab.record(args.join(" "), out.status.code(), &out.stdout, &out.stderr);
        ran.expect(0);
    }
}
