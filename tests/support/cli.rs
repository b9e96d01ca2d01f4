//! Running the real binary: a temporary folder per test ([`Lab`]), one finished run
//! ([`Ran`]), and the file-system helpers the command-line tests share.

use std::cell::RefCell;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

/// The binary under test.
pub const BIN: &str = env!("CARGO_BIN_EXE_cyclarc");

/// One finished run of the binary.
#[derive(Debug, Clone)]
pub struct Ran {
    /// The command line.
    pub cmd: String,
    /// Exit code (`None` when killed by a signal).
    pub code: Option<i32>,
    /// Captured stdout.
    pub stdout: String,
    /// Captured stderr.
    pub stderr: String,
}

impl Ran {
    /// Everything about the run, for failure messages.
    pub fn context(&self) -> String {
        format!(
            "command: {}\nexit code: {:?}\n--- stdout ---\n{}\n--- stderr ---\n{}\n--------------",
            self.cmd, self.code, self.stdout, self.stderr
        )
    }

    /// Assert the exit code (and that nothing panicked); on failure print the run.
    pub fn expect(&self, code: i32) -> &Self {
        self.no_panic();
        assert_eq!(
            self.code,
            Some(code),
            "unexpected exit code\n{}",
            self.context()
        );
        self
    }

    /// Assert that the process did not panic (exit 101 or a panic message).
    pub fn no_panic(&self) -> &Self {
        assert!(
            self.code != Some(101) && !self.stderr.contains("panicked"),
            "the binary panicked\n{}",
            self.context()
        );
        self
    }

    /// Assert that stderr contains each of these pieces.
    pub fn says(&self, pieces: &[&str]) -> &Self {
        for p in pieces {
            assert!(
                self.stderr.contains(p),
                "stderr does not contain `{p}`\n{}",
                self.context()
            );
        }
        self
    }

    /// Assert that stdout contains each of these pieces.
    pub fn prints(&self, pieces: &[&str]) -> &Self {
        for p in pieces {
            assert!(
                self.stdout.contains(p),
                "stdout does not contain `{p}`\n{}",
                self.context()
            );
        }
        self
    }

    /// Assert a condition about this run, printing the run on failure.
    pub fn ensure(&self, cond: bool, what: impl std::fmt::Display) -> &Self {
        assert!(cond, "{what}\n{}", self.context());
        self
    }

    /// stdout parsed as JSON (fails with the run's output if it is not JSON).
    pub fn json(&self) -> serde_json::Value {
        match serde_json::from_str(&self.stdout) {
            Ok(v) => v,
            Err(e) => panic!("stdout is not JSON: {e}\n{}", self.context()),
        }
    }
}

/// A test's temporary folder plus a log of every command run in it; the log is printed when
/// the test fails, so data assertions show what the binary said too.
pub struct Lab {
    /// The folder (removed at the end).
    pub dir: tempfile::TempDir,
    log: RefCell<Vec<String>>,
}

impl Default for Lab {
    fn default() -> Self {
        Lab::new()
    }
}

impl Lab {
    /// A fresh folder.
    pub fn new() -> Lab {
        Lab {
            dir: tempfile::tempdir().expect("temporary folder"),
            log: RefCell::new(Vec::new()),
        }
    }

    /// A path inside the folder.
    pub fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    /// Run the binary (working folder: the lab).
    pub fn run(&self, args: &[&str]) -> Ran {
        let out = Command::new(BIN)
            .args(args)
            .current_dir(self.dir.path())
            .output()
            .expect("the cyclarc binary starts");
        self.record(
            format!("cyclarc {}", args.join(" ")),
            out.status.code(),
            &out.stdout,
            &out.stderr,
        )
    }

    /// Run the binary with these environment variables set (working folder: the lab).
    pub fn run_env(&self, args: &[&str], env: &[(String, String)]) -> Ran {
        let out = Command::new(BIN)
            .args(args)
            .envs(env.iter().map(|(k, v)| (k.as_str(), v.as_str())))
            .current_dir(self.dir.path())
            .output()
            .expect("the cyclarc binary starts");
        self.record(
            format!("cyclarc {}", args.join(" ")),
            out.status.code(),
            &out.stdout,
            &out.stderr,
        )
    }

    /// Run `cyclarc encode SRC --out OUT EXTRA…`.
    pub fn encode(&self, src: &Path, out: &Path, extra: &[&str]) -> Ran {
        let mut args = vec!["encode", ps(src), "--out", ps(out)];
        args.extend_from_slice(extra);
        self.run(&args)
    }

    /// Run the binary under `strace -f -qq` with these strace options (working folder: the
    /// lab); logged as `label`.
    pub fn run_under_strace(&self, strace: &[String], args: &[&str], label: String) -> Ran {
        let out = Command::new("strace")
            .args(["-f", "-qq"])
            .args(strace)
            .arg(BIN)
            .args(args)
            .current_dir(self.dir.path())
            .output()
            .expect("strace runs");
        self.record(label, out.status.code(), &out.stdout, &out.stderr)
    }

    /// Log a run made some other way (a child process the test drove itself).
    pub fn record(&self, cmd: String, code: Option<i32>, stdout: &[u8], stderr: &[u8]) -> Ran {
        let ran = Ran {
            cmd,
            code,
            stdout: String::from_utf8_lossy(stdout).into_owned(),
            stderr: String::from_utf8_lossy(stderr).into_owned(),
        };
        let mut log = self.log.borrow_mut();
        if log.len() > 200 {
            log.remove(0);
        }
        log.push(ran.context());
        ran
    }

    /// Every file and folder under the lab (relative paths, sorted).
    pub fn tree(&self) -> BTreeSet<String> {
        tree(self.dir.path())
    }
}

impl Drop for Lab {
    fn drop(&mut self) {
        if std::thread::panicking() {
            eprintln!("==== commands run by the failing test (latest last) ====");
            for l in self.log.borrow().iter() {
                eprintln!("{l}");
            }
        }
    }
}

/// Whether strace can be run here; when not, say which checks are skipped (`skipped`).
pub fn have_strace(skipped: &str) -> bool {
    let ok = Command::new("strace")
        .arg("-V")
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success());
    if !ok {
        eprintln!("NOTE: strace is not installed; {skipped}");
    }
    ok
}

/// Every file and folder under `root` (relative paths, sorted).
pub fn tree(root: &Path) -> BTreeSet<String> {
    let mut out = BTreeSet::new();
    let mut stack = vec![root.to_path_buf()];
    while let Some(d) = stack.pop() {
        let Ok(rd) = std::fs::read_dir(&d) else {
            continue;
        };
        for e in rd.flatten() {
            let p = e.path();
            if let Ok(rel) = p.strip_prefix(root) {
                out.insert(rel.to_string_lossy().into_owned());
            }
            if p.is_dir() {
                stack.push(p);
            }
        }
    }
    out
}

/// Temporary files of cyclarc (`.NAME.cyclarc-tmp.PID`) under `root`.
pub fn temp_files(root: &Path) -> Vec<String> {
    tree(root)
        .into_iter()
        .filter(|p| p.contains(".cyclarc-tmp."))
        .collect()
}

/// Names of the entries of a folder, sorted.
pub fn dir_entries(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .expect("readable folder")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// A path as &str (temporary folders are UTF-8 here).
pub fn ps(p: &Path) -> &str {
    p.to_str().expect("UTF-8 path")
}

/// SHA-256 of a file, hex (sha2 is a dependency of the crate).
pub fn sha256(p: &Path) -> String {
    use sha2::{Digest, Sha256};
    let bytes = std::fs::read(p).expect("readable file");
    Sha256::digest(&bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// The digest file beside an archive.
pub fn digest_of(archive: &Path) -> PathBuf {
    let mut s = archive.as_os_str().to_owned();
    s.push(".sha256");
    s.into()
}
