//! The bad-input corpus: every `tests/bad-input/*.toml` holds a small config with exactly one
//! mistake. Its leading comment lines state what the error must say:
//!
//! ```text
//! # expect-line: 17            the line the error must point at (`none` for whole-model errors)
//! # expect: key `sites.decay`  a substring the error must contain (one or more such lines)
//! ```
//!
//! The offending line itself carries the trailing comment `# <-- the mistake`, and
//! `corpus_is_well_formed` checks that it agrees with `expect-line`. Files other than `*.toml`
//! (e.g. a malformed envelope CSV) are data used by a config next to them.
//!
//! Both `cavern check FILE` and `cavern run FILE -o out.h5` must reject every file with exit code
//! 2 and exactly one `error:` line naming the file, the line and each expected substring, without
//! panicking, and must leave nothing (no result, no temporary file) in the working directory.

use crate::util::{repo, Outcome, Sandbox};
use std::path::{Path, PathBuf};

/// Comment marking the offending line of a corpus file.
const MARKER: &str = "# <-- the mistake";

/// The behaviours the corpus must keep covering (file stems in `tests/bad-input/`).
const REQUIRED: &[&str] = &[
    "unknown-key",                 // unknown key, with a nearest-key suggestion
    "unknown-key-nested-envelope", // unknown key inside an inline table of a [[modes]] entry
    "unknown-key-override",        // unknown key inside [[sites.override]]
    "wrong-type",                  // a string where a number is expected
    "negative-rate",
    "nan-rate", // TOML `nan`
    "too-few-levels",
    "coupling-wrong-rows",
    "coupling-wrong-row-length",
    "zz-not-symmetric",
    "pattern-wrong-length",
    "spins-wrong-length",
    "csv-missing",
    "csv-malformed",
    "table-not-increasing",
    "unknown-unit",
    "unknown-unit-system",
    "unknown-envelope-shape",
    "fock-too-large",
    "samples-too-few",
    "stop-and-at",
    "toml-syntax",
    "override-index",
    "memory-guard",
    // the trajectory solver's settings
    "method-unknown",
    "trajectories-zero",
    "trajectories-negative",
    "trajectories-missing-auto",
    "seed-missing",
    "seed-random",
    "bin-width-too-large",
    "bin-width-negative",
    "correlate-unknown",
    "max-delay-too-long",
    "keep-too-many",
    "thermal-trajectories",
    // [memory] and [probes]
    "memory-pattern-wrong-length",
    "memory-rule-unknown",
    "memory-realisation-unknown",
    "memory-zz-conflict",
    "memory-coupling-conflict",
    "memory-matrix-not-symmetric",
    "memory-projection-dependent",
    "memory-scale-missing",
    "memory-modes-detuning-negative",
    "memory-relaxation-negative",
    "memory-eliminate-with-modes",
    "probes-without-memory",
    "probes-max-flips-too-large",
    "probes-site-out-of-range",
    "probes-threshold",
    "probes-pattern-index",
    "probes-erase-mixed-trajectories",
];

/// One corpus file and what its error must say.
#[derive(Debug)]
struct Case {
    path: PathBuf,
    file_name: String,
    /// `Some(n)`: the error must name line n; `None`: a whole-model error without a line.
    line: Option<usize>,
    expects: Vec<String>,
    /// 1-based line carrying [`MARKER`], if any.
    marker_line: Option<usize>,
}

fn bad_input_dir() -> PathBuf {
    repo().join("tests").join("bad-input")
}

fn parse_case(path: &Path) -> Result<Case, String> {
    let text = std::fs::read_to_string(path).map_err(|e| format!("cannot read: {e}"))?;
    let mut line = None;
    let mut expects = Vec::new();
    for l in text.lines().take_while(|l| l.starts_with('#')) {
        if let Some(v) = l.strip_prefix("# expect-line:") {
            let v = v.trim();
            if line.is_some() {
                return Err("more than one `# expect-line:`".into());
            }
            line = Some(if v == "none" {
                None
            } else {
                Some(
                    v.parse::<usize>()
                        .map_err(|_| format!("bad `# expect-line: {v}`"))?,
                )
            });
        } else if let Some(v) = l.strip_prefix("# expect:") {
            let v = v.trim();
            if v.is_empty() {
                return Err("empty `# expect:`".into());
            }
            expects.push(v.to_string());
        }
    }
    let line = line.ok_or("no `# expect-line:` in the leading comments")?;
    if expects.is_empty() {
        return Err("no `# expect:` in the leading comments".into());
    }
    let marked: Vec<usize> = text
        .lines()
        .enumerate()
        .filter(|(_, l)| l.contains(MARKER) && !l.starts_with('#'))
        .map(|(k, _)| k + 1)
        .collect();
    if marked.len() > 1 {
        return Err(format!("`{MARKER}` on several lines: {marked:?}"));
    }
    Ok(Case {
        path: path.to_path_buf(),
        file_name: path
            .file_name()
            .expect("a file name")
            .to_string_lossy()
            .into_owned(),
        line,
        expects,
        marker_line: marked.first().copied(),
    })
}

fn corpus() -> Vec<Case> {
    let mut paths: Vec<PathBuf> = std::fs::read_dir(bad_input_dir())
        .expect("tests/bad-input exists")
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "toml"))
        .collect();
    paths.sort();
    paths
        .iter()
        .map(|p| parse_case(p).unwrap_or_else(|e| panic!("{}: {e}", p.display())))
        .collect()
}

#[test]
fn corpus_is_well_formed() {
    let cases = corpus();
    assert!(
        cases.len() >= 18,
        "only {} files in tests/bad-input",
        cases.len()
    );
    for name in REQUIRED {
        assert!(
            cases.iter().any(|c| c.file_name == format!("{name}.toml")),
            "tests/bad-input/{name}.toml is missing"
        );
    }
    for c in &cases {
        match c.line {
            Some(n) => assert_eq!(
                c.marker_line,
                Some(n),
                "{}: `# expect-line: {n}` but `{MARKER}` is on line {:?}",
                c.file_name,
                c.marker_line
            ),
            None => assert_eq!(
                c.marker_line, None,
                "{}: `# expect-line: none` but a line is marked",
                c.file_name
            ),
        }
    }
}

/// Everything wrong with one rejection, or an empty list.
fn problems(case: &Case, out: &Outcome, sandbox: &Sandbox, is_run: bool) -> Vec<String> {
    let mut p = Vec::new();
    if out.code != Some(2) {
        p.push(format!("exit code {:?}, expected 2 (bad input)", out.code));
    }
    let err = &out.stderr;
    if err.contains("panicked") || err.contains("stack backtrace") {
        p.push("panic or abort text (backtrace) on stderr".into());
    }
    let n_errors = err.lines().filter(|l| l.starts_with("error:")).count();
    if n_errors != 1 {
        p.push(format!(
            "{n_errors} `error:` lines on stderr, expected exactly one for a file with one mistake"
        ));
    }
    if !err.contains(&case.file_name) {
        p.push(format!(
            "stderr does not name the file `{}`",
            case.file_name
        ));
    }
    if let Some(n) = case.line {
        let loc = format!("{}:{n}: ", case.file_name);
        if !err.contains(&loc) {
            p.push(format!("stderr does not contain the location `{loc}`"));
        }
    }
    for e in &case.expects {
        if !err.contains(e.as_str()) {
            p.push(format!("stderr does not contain `{e}`"));
        }
    }
    if is_run && !out.stdout.is_empty() {
        p.push("`run` printed on stdout although it failed".into());
    }
    let left = sandbox.entries();
    if !left.is_empty() {
        p.push(format!("files left in the working directory: {left:?}"));
    }
    p
}

fn reject_all(is_run: bool) {
    let mut report = Vec::new();
    let cases = corpus();
    for case in &cases {
        let sandbox = Sandbox::new();
        let out = if is_run {
            sandbox.cavern([
                "run".as_ref(),
                case.path.as_os_str(),
                "-o".as_ref(),
                "out.h5".as_ref(),
            ])
        } else {
            sandbox.cavern(["check".as_ref(), case.path.as_os_str()])
        };
        let p = problems(case, &out, &sandbox, is_run);
        if !p.is_empty() {
            report.push(format!(
                "== {}:\n  - {}\n{}",
                case.file_name,
                p.join("\n  - "),
                out.describe()
            ));
        }
    }
    assert!(
        report.is_empty(),
        "{} of {} bad-input files were not rejected as expected:\n\n{}",
        report.len(),
        cases.len(),
        report.join("\n\n")
    );
}

#[test]
fn check_rejects_every_bad_input() {
    reject_all(false);
}

#[test]
fn run_rejects_every_bad_input() {
    reject_all(true);
}
