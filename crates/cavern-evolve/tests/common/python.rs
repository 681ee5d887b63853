//! Running a NumPy/SciPy reference script from a test (shared by the test files of several
//! crates through `#[path]`).

use std::process::{Command, Stdio};

/// Run a Python script (NumPy/SciPy) with `input` on stdin; fails (never skips) without python3.
pub fn python(script: &str, input: &str) -> String {
    use std::io::Write;
    let mut child = Command::new("python3")
        .arg("-c")
        .arg(script)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("these checks need python3 with NumPy and SciPy (pip install numpy scipy)");
    child
        .stdin
        .take()
        .expect("stdin is piped")
        .write_all(input.as_bytes())
        .expect("write to python3");
    let out = child.wait_with_output().expect("python3 runs");
    assert!(
        out.status.success(),
        "python failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).expect("utf-8 output")
}
