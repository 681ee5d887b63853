//! Running the real `cavern` binary in a throw-away directory, and small helpers shared by the
//! end-to-end tests.

use std::ffi::OsStr;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// The binary under test, built by cargo for this test target.
pub const CAVERN: &str = env!("CARGO_BIN_EXE_cavern");

/// Version the binary should report (it is built from this package).
pub const VERSION: &str = env!("CARGO_PKG_VERSION");

/// Address-space cap for every child process (KiB). The configs of these tests need a few MiB; a
/// cap keeps a run that ignores its memory guard from exhausting the machine (it then fails
/// instead, which the test reports).
const MEMORY_CAP_KIB: u64 = 1024 * 1024;

/// Wall-clock limit for one invocation.
const TIMEOUT: Duration = Duration::from_secs(60);

/// The repository root (the `cavern` package directory).
pub fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// What one invocation of the binary produced.
#[derive(Debug)]
pub struct Outcome {
    /// The command line, for messages.
    pub command: String,
    /// Exit code; `None` if the process was killed by a signal.
    pub code: Option<i32>,
    /// Captured standard output.
    pub stdout: String,
    /// Captured standard error.
    pub stderr: String,
}

impl Outcome {
    /// Everything about the invocation, for assertion messages.
    pub fn describe(&self) -> String {
        format!(
            "command: {}\nexit: {}\n--- stdout ---\n{}\n--- stderr ---\n{}\n--------------",
            self.command,
            match self.code {
                Some(c) => c.to_string(),
                None => "killed by a signal (crash, abort or out of memory)".into(),
            },
            self.stdout,
            self.stderr
        )
    }

    /// Assert exit code 0 and no panic text.
    #[track_caller]
    pub fn assert_success(&self) {
        assert_eq!(self.code, Some(0), "expected success\n{}", self.describe());
        self.assert_no_panic();
    }

    /// Assert that neither stream mentions a panic.
    #[track_caller]
    pub fn assert_no_panic(&self) {
        for s in [&self.stdout, &self.stderr] {
            assert!(
                !s.contains("panicked") && !s.contains("stack backtrace"),
                "the tool panicked\n{}",
                self.describe()
            );
        }
    }
}

/// A fresh temporary working directory, deleted on drop.
pub struct Sandbox {
    dir: tempfile::TempDir,
}

impl Sandbox {
    /// Create an empty directory.
    pub fn new() -> Self {
        let dir = tempfile::Builder::new()
            .prefix("cavern-e2e-")
            .tempdir()
            .expect("create a temporary directory");
        Self { dir }
    }

    /// The directory.
    pub fn path(&self) -> &Path {
        self.dir.path()
    }

    /// `name` inside the directory.
    pub fn join(&self, name: &str) -> PathBuf {
        self.path().join(name)
    }

    /// Write `text` to `name` inside the directory and return its path.
    pub fn write(&self, name: &str, text: &str) -> PathBuf {
        let p = self.join(name);
        std::fs::write(&p, text).expect("write a file into the sandbox");
        p
    }

    /// Every entry below the directory (hidden ones included), as sorted relative paths.
    pub fn entries(&self) -> Vec<String> {
        fn walk(base: &Path, dir: &Path, out: &mut Vec<String>) {
            for e in std::fs::read_dir(dir).expect("list the sandbox").flatten() {
                let p = e.path();
                out.push(
                    p.strip_prefix(base)
                        .expect("entry is below the sandbox")
                        .display()
                        .to_string(),
                );
                if p.is_dir() {
                    walk(base, &p, out);
                }
            }
        }
        let mut v = Vec::new();
        walk(self.path(), self.path(), &mut v);
        v.sort();
        v
    }

    /// Run `cavern ARGS…` with this directory as the working directory, stdin closed and
    /// stdout/stderr captured (so neither is a terminal).
    pub fn cavern<I, S>(&self, args: I) -> Outcome
    where
        I: IntoIterator<Item = S>,
        S: AsRef<OsStr>,
    {
        let args: Vec<std::ffi::OsString> =
            args.into_iter().map(|a| a.as_ref().to_owned()).collect();
        let command = std::iter::once("cavern".to_string())
            .chain(args.iter().map(|a| a.to_string_lossy().into_owned()))
            .collect::<Vec<_>>()
            .join(" ");
        let mut cmd = if cfg!(unix) {
            // `ulimit -v` in a shell that then execs the binary: no unsafe pre-exec hook needed.
            let mut c = Command::new("sh");
            c.arg("-c")
                .arg(format!(
                    "ulimit -v {MEMORY_CAP_KIB} 2>/dev/null; exec \"$0\" \"$@\""
                ))
                .arg(CAVERN);
            c
        } else {
            Command::new(CAVERN)
        };
        cmd.args(&args)
            .current_dir(self.path())
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped());
        let mut child = cmd.spawn().expect("start the cavern binary");
        let reader = |mut pipe: Box<dyn Read + Send>| {
            std::thread::spawn(move || {
                let mut buf = Vec::new();
                let _ = pipe.read_to_end(&mut buf);
                String::from_utf8_lossy(&buf).into_owned()
            })
        };
        let out = reader(Box::new(child.stdout.take().expect("piped stdout")));
        let err = reader(Box::new(child.stderr.take().expect("piped stderr")));
        let start = Instant::now();
        let status = loop {
            if let Some(st) = child.try_wait().expect("wait for cavern") {
                break st;
            }
            if start.elapsed() > TIMEOUT {
                let _ = child.kill();
                let _ = child.wait();
                panic!("`{command}` did not finish within {TIMEOUT:?}; killed it");
            }
            std::thread::sleep(Duration::from_millis(5));
        };
        Outcome {
            command,
            code: status.code(),
            stdout: out.join().expect("stdout reader"),
            stderr: err.join().expect("stderr reader"),
        }
    }
}

/// Where `python3` with h5py and NumPy is required; fails the test (never skips) when missing.
pub fn require_h5py() {
    let ok = Command::new("python3")
        .args(["-c", "import h5py, numpy"])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .map(|s| s.success())
        .unwrap_or(false);
    assert!(
        ok,
        "these tests read the HDF5 results with python3 + h5py + NumPy, which are not available; \
         install them with `pip install h5py numpy`"
    );
}

/// Run an inline Python script with arguments; returns stdout, panics with stderr on failure.
#[track_caller]
pub fn python(script: &str, args: &[&OsStr]) -> String {
    require_h5py();
    let out = Command::new("python3")
        .arg("-c")
        .arg(script)
        .args(args)
        .stdin(Stdio::null())
        .output()
        .expect("start python3");
    let stdout = String::from_utf8_lossy(&out.stdout).into_owned();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(
        out.status.success(),
        "the Python check failed ({}):\n--- stdout ---\n{stdout}\n--- stderr ---\n{stderr}",
        out.status
    );
    stdout
}

/// `|a − b| ≤ rel·|b| + abs`.
pub fn close(a: f64, b: f64, rel: f64, abs: f64) -> bool {
    (a - b).abs() <= rel * b.abs() + abs
}
