//! A scan as a SLURM job array on a real (single-node) cluster: `scripts/slurm-scan.sh` submits
//! 4 array tasks and the merge job; the merged file must equal a single-machine `cavern scan`
//! value for value.
//!
//! Needs root and a running cluster, so it only runs when `CAVERN_TEST_SLURM=1`, which `.ci/run`
//! sets after `/work/shared/slurm/local-cluster.sh start` (or `$CAVERN_SLURM_CLUSTER`) succeeded;
//! otherwise it prints why it was skipped and passes.

use crate::scan::assert_same_files;
use crate::util::{repo, Sandbox, CAVERN};
use std::ffi::OsStr;
use std::process::Command;

const CONFIG: &str = r#"title = "invented: spin-cavity scan for the SLURM test"
[units]
system = "physical"
frequency = "MHz"
[time]
stop = 5.0
samples = 21
[sites]
count = 1
decay = 0.1
[[modes]]
levels = 6
loss = 1.0
drive = 0.4
[coupling]
strength = 0.5
[scan]
[[scan.axis]]
name = "kappa"
path = "modes[0].loss"
values = [0.5, 1.0, 2.0]
[[scan.axis]]
name = "g"
path = "coupling.strength"
linear = { from = 0.1, to = 0.7, count = 3 }
"#;

#[test]
fn slurm_job_array_of_four_tasks_merges_into_the_single_machine_file() {
    if std::env::var("CAVERN_TEST_SLURM").as_deref() != Ok("1") {
        eprintln!(
            "SKIPPED scan_slurm: no SLURM cluster for this test (set CAVERN_TEST_SLURM=1 after \
             `local-cluster.sh start`, as .ci/run does when it runs as root)"
        );
        return;
    }
    let sb = Sandbox::new();
    let cfg = std::fs::canonicalize(sb.write("s.toml", CONFIG)).unwrap();
    let out = sb.path().canonicalize().unwrap().join("array.h5");
    let script = repo().join("scripts/slurm-scan.sh");
    let r = Command::new("timeout")
        .arg("600")
        .arg(&script)
        .arg(&cfg)
        .arg(&out)
        .arg("4")
        .env("CAVERN", CAVERN)
        .env("WAIT", "1")
        .output()
        .expect("run scripts/slurm-scan.sh");
    let logs = std::fs::read_dir(out.with_extension("h5.slurm-logs"))
        .map(|rd| {
            rd.flatten()
                .map(|e| {
                    format!(
                        "--- {} ---\n{}",
                        e.path().display(),
                        std::fs::read_to_string(e.path()).unwrap_or_default()
                    )
                })
                .collect::<Vec<_>>()
                .join("\n")
        })
        .unwrap_or_default();
    let what = format!(
        "stdout:\n{}\nstderr:\n{}\nlogs:\n{logs}",
        String::from_utf8_lossy(&r.stdout),
        String::from_utf8_lossy(&r.stderr)
    );
    assert!(
        r.status.success(),
        "the job array or its merge failed\n{what}"
    );
    for k in 1..=4 {
        let j = sb.join(&format!("array.h5.shard-{k}-of-4.journal"));
        assert!(j.is_file(), "missing {}\n{what}", j.display());
    }
    assert!(out.is_file(), "the merge wrote no file\n{what}");
    let o = sb.cavern([
        OsStr::new("scan"),
        cfg.as_os_str(),
        OsStr::new("-o"),
        OsStr::new("single.h5"),
        OsStr::new("-q"),
    ]);
    o.assert_success();
    let n = assert_same_files(&sb.join("single.h5"), &out);
    println!("the 4-task SLURM array and the single-machine scan agree on {n} values");
}
