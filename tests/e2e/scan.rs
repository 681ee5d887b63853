//! Parameter scans (`[scan]`, `cavern scan`, `status`, `merge`): the HDF5 layout of contract C3
//! against an analytic driven damped cavity and against plain `cavern run`s, crash safety under
//! `kill -9`, refused configs, failed points, shards and their merge.

use crate::util::{python, Sandbox, CAVERN};
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// A driven damped cavity without spins, scanned over κ (list) and ε (linear range).
const CAVITY: &str = r#"title = "invented: driven damped cavity scan"
[units]
system = "physical"
frequency = "MHz"
[time]
stop = 1.0
samples = 6
[[modes]]
levels = 12
loss = 1.0
drive = 0.2
[scan]
[[scan.axis]]
name = "kappa"
path = "modes[0].loss"
values = [0.5, 2.0]
[[scan.axis]]
name = "drive"
path = "modes[0].drive"
linear = { from = 0.05, to = 0.2, count = 4 }
[[scan.axis]]
path = "modes[0].detuning"
zip_with = "drive"
log = { from = 0.01, to = 1.0, count = 4 }
"#;

/// Two spins and a mode: each point takes a noticeable time, so kills land mid-scan.
const SLOW: &str = r#"[units]
system = "physical"
frequency = "MHz"
[time]
stop = 20.0
samples = 41
[sites]
count = 2
decay = 0.1
rabi = 0.3
[[modes]]
levels = 8
loss = 1.0
drive = 0.5
[coupling]
strength = 0.5
[scan]
[[scan.axis]]
name = "kappa"
path = "modes[0].loss"
log = { from = 0.2, to = 2.0, count = 6 }
[[scan.axis]]
path = "coupling.strength"
values = [0.2, 0.4, 0.6, 0.8]
"#;

/// Quantum trajectories: every point gets its own seed from (scan seed, point index).
const TRAJ: &str = r#"[units]
system = "dimensionless"
[time]
stop = 2.0
samples = 5
[solver]
method = "trajectories"
trajectories = 40
seed = 11
[sites]
count = 1
decay = 1.0
rabi = 1.0
[scan]
seed = 5
[[scan.axis]]
name = "rabi"
path = "sites.rabi"
values = [0.5, 1.0, 2.0, 3.0, 4.0]
"#;

/// Python: compare two cavern files dataset by dataset and attribute by attribute, exactly
/// (NaN equal to NaN); prints the number of values compared.
const SAME_FILES: &str = r#"
import sys, h5py, numpy as np
a, b = h5py.File(sys.argv[1], "r"), h5py.File(sys.argv[2], "r")
def objects(f):
    out = {"/": f}
    f.visititems(lambda n, o: out.__setitem__(n, o))
    return out
oa, ob = objects(a), objects(b)
assert oa.keys() == ob.keys(), sorted(set(oa) ^ set(ob))
n = 0
def same(u, v):
    u, v = np.asarray(u), np.asarray(v)
    if u.dtype.kind == "f":
        return u.shape == v.shape and np.array_equal(u, v, equal_nan=True)
    return u.shape == v.shape and np.array_equal(u, v)
for k, x in oa.items():
    y = ob[k]
    if isinstance(x, h5py.Dataset):
        assert same(x[()], y[()]), f"dataset {k} differs"
        n += np.asarray(x[()]).size
    assert sorted(x.attrs) == sorted(y.attrs), (k, sorted(x.attrs), sorted(y.attrs))
    for at in x.attrs:
        assert same(x.attrs[at], y.attrs[at]), f"attribute {at} of {k} differs"
print(n)
"#;

/// Assert that two result files hold the same values (returns how many were compared).
#[track_caller]
pub fn assert_same_files(a: &Path, b: &Path) -> usize {
    let out = python(SAME_FILES, &[a.as_os_str(), b.as_os_str()]);
    out.trim().parse().expect("count of compared values")
}

#[test]
fn layout_coordinates_and_values_against_the_analytic_cavity_and_plain_runs() {
    let sb = Sandbox::new();
    sb.write("cav.toml", CAVITY);
    let o = sb.cavern([
        "scan",
        "cav.toml",
        "-o",
        "out.h5",
        "--parallel",
        "2",
        "--threads",
        "1",
    ]);
    o.assert_success();
    assert!(
        o.stdout.contains("wrote out.h5 (8 points)"),
        "{}",
        o.describe()
    );
    // the same point as a plain run: κ/2π = 2 MHz, ε/2π = 0.2 MHz, Δc/2π = 1 MHz (indices 1, 3)
    let single = CAVITY
        .split("[scan]")
        .next()
        .unwrap()
        .replace("loss = 1.0", "loss = 2.0")
        .replace("drive = 0.2", "drive = 0.2\ndetuning = 1.0");
    sb.write("one.toml", &single);
    sb.cavern(["run", "one.toml", "-o", "one.h5", "--threads", "1", "-q"])
        .assert_success();
    // Analytic reference: a coherently driven damped cavity from vacuum stays coherent with
    // α(t) = −iε/(κ/2 + iΔ) (1 − e^{−(κ/2 + iΔ)t}) (Walls & Milburn, "Quantum Optics", 2nd ed.
    // 2008, driven damped cavity; H = Δa†a + ε(a + a†), angular rates = 2π × MHz, t in μs).
    let script = r#"
import sys, h5py, numpy as np
f = h5py.File(sys.argv[1], "r")
one = h5py.File(sys.argv[2], "r")
assert f.attrs["kind"] == "scan" and one.attrs["kind"] == "run"
assert list(f["scan"].attrs["axes"]) == ["kappa", "drive"]
k, d = f["scan/axes/kappa"], f["scan/axes/drive"]
assert k.attrs["units"] == "MHz" and k.attrs["path"] == "modes[0].loss"
assert d.attrs["path"] == "modes[0].drive"
assert list(d.attrs["zipped_paths"]) == ["modes[0].drive", "modes[0].detuning"]
assert np.array_equal(k[()], [0.5, 2.0])
assert np.allclose(d[()], np.linspace(0.05, 0.2, 4), rtol=1e-15, atol=0)
det = f["scan/zipped/modes[0].detuning"]
assert det.attrs["units"] == "MHz" and det.attrs["axis"] == "drive"
assert np.allclose(det[()], np.geomspace(0.01, 1.0, 4), rtol=1e-15, atol=0)
t = f["time"][()]
assert f["time"].attrs["units"] == "us" and t.shape == (6,)
n = f["observables/photon_number"]
assert n.shape == (2, 4, 1, 6) and n.attrs["units"] == "photons", n.shape
assert f["observables/purity"].shape == (2, 4, 6)
for name in ["status", "steps", "rhs_evaluations", "rejected_steps", "dimension"]:
    assert f["scan/" + name].shape == (2, 4), name
assert (f["scan/status"][()] == 0).all() and (f["scan/dimension"][()] == 12).all()
assert (f["scan/steps"][()] > 0).all()
assert list(f["scan/error"].asstr()[()]) == [""] * 8
worst = 0.0
for i, kap in enumerate(k[()]):
    for j, eps in enumerate(d[()]):
        z = 2 * np.pi * (kap / 2 + 1j * det[j])
        alpha = -1j * 2 * np.pi * eps / z * (1 - np.exp(-z * t))
        worst = max(worst, np.max(np.abs(n[i, j, 0] - np.abs(alpha) ** 2)))
        re, im = f["observables/field_re"][i, j, 0], f["observables/field_im"][i, j, 0]
        worst = max(worst, np.max(np.abs(re + 1j * im - alpha)))
assert worst < 2e-5, worst
# the point equals the plain run with that value set, value for value
for name in ["photon_number", "field_re", "field_im", "purity", "trace_error"]:
    a, b = f["observables/" + name][1, 3], one["observables/" + name][()]
    assert np.array_equal(a, b), (name, a, b)
assert f["scan/steps"][1, 3] == one["solver"].attrs["steps"]
print(worst)
"#;
    let worst: f64 = python(
        script,
        &[sb.join("out.h5").as_os_str(), sb.join("one.h5").as_os_str()],
    )
    .trim()
    .parse()
    .unwrap();
    assert!(worst < 2e-5);
}

/// Start `cavern scan` and SIGKILL it after `after`; true if it had already finished.
fn run_and_kill(dir: &Path, args: &[&str], after: Duration) -> bool {
    let mut child = Command::new(CAVERN)
        .args(args)
        .current_dir(dir)
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .expect("start cavern");
    let start = Instant::now();
    while start.elapsed() < after {
        if let Some(st) = child.try_wait().expect("wait") {
            assert!(st.success(), "the scan failed on its own: {st}");
            return true;
        }
        std::thread::sleep(Duration::from_millis(2));
    }
    child.kill().expect("kill -9");
    child.wait().expect("reap");
    false
}

#[test]
fn kill_minus_nine_at_random_moments_then_resume_gives_the_uninterrupted_file() {
    let sb = Sandbox::new();
    sb.write("slow.toml", SLOW);
    let args = [
        "scan",
        "slow.toml",
        "--parallel",
        "2",
        "--threads",
        "1",
        "-q",
    ];
    let t0 = Instant::now();
    let o = sb.cavern([&args[..], &["-o", "ref.h5"]].concat());
    o.assert_success();
    let full = t0.elapsed();
    // kill moments spread over the run time, from a seed printed for reproduction
    let seed = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .unwrap()
        .subsec_nanos() as u64;
    println!("kill-moment seed {seed}, uninterrupted run {full:?}");
    let mut state = seed | 1;
    let mut kills = 0;
    for _ in 0..6 {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        let frac = (state >> 11) as f64 / (1u64 << 53) as f64;
        let after = full.mul_f64(0.05 + 0.25 * frac);
        if run_and_kill(sb.path(), &[&args[..], &["-o", "k.h5"]].concat(), after) {
            break;
        }
        kills += 1;
    }
    assert!(
        kills >= 3,
        "the scan finished before it could be killed 3 times"
    );
    // a write torn by a crash: half a record at the end of the journal
    let j = sb.join("k.h5.journal");
    let mut bytes = std::fs::read(&j).unwrap();
    bytes.extend_from_slice(b"CVSJ\x40\x00\x00\x00torn");
    std::fs::write(&j, &bytes).unwrap();
    let st = sb.cavern(["status", "k.h5"]);
    st.assert_success();
    assert!(
        st.stdout.contains("remaining") && st.stdout.contains("torn"),
        "{}",
        st.describe()
    );
    let o = sb.cavern(
        [
            &args[..2],
            &["-o", "k.h5", "--parallel", "2", "--threads", "1"],
        ]
        .concat(),
    );
    o.assert_success();
    assert!(
        o.stderr.contains("resumed") && o.stderr.contains("torn"),
        "{}",
        o.describe()
    );
    let n = assert_same_files(&sb.join("ref.h5"), &sb.join("k.h5"));
    assert!(n > 24 * 41, "compared only {n} values");
    // rerunning a finished scan recomputes nothing
    let o = sb.cavern([&args[..2], &["-o", "k.h5"]].concat());
    o.assert_success();
    assert!(
        o.stderr.contains("0 of 24 points to run"),
        "{}",
        o.describe()
    );
}

#[test]
fn a_changed_config_is_refused_with_how_to_start_over() {
    let sb = Sandbox::new();
    sb.write("cav.toml", CAVITY);
    sb.cavern(["scan", "cav.toml", "-o", "out.h5", "-q"])
        .assert_success();
    sb.write("cav.toml", &CAVITY.replace("levels = 12", "levels = 13"));
    let o = sb.cavern(["scan", "cav.toml", "-o", "out.h5", "-q"]);
    assert_eq!(o.code, Some(2), "{}", o.describe());
    assert!(
        o.stderr.contains("different config") && o.stderr.contains("delete out.h5.journal"),
        "{}",
        o.describe()
    );
}

#[test]
fn failed_points_are_recorded_and_the_scan_exits_1() {
    let sb = Sandbox::new();
    // GMRES with one matrix–vector product cannot converge: that point fails, the other not
    let cfg = CAVITY.split("[scan]").next().unwrap().to_string()
        + "[steady_state]\nmethod = \"iterative\"\nrelaxation_rates = 0\n\
           [scan]\n[[scan.axis]]\nname = \"budget\"\npath = \"steady_state.max_iterations\"\nvalues = [1, 5000]\n";
    let cfg = cfg.replace("[steady_state]", "[steady_state]\nmax_iterations = 100");
    sb.write("f.toml", &cfg);
    let o = sb.cavern(["scan", "f.toml", "-o", "f.h5"]);
    assert_eq!(o.code, Some(1), "{}", o.describe());
    assert!(o.stdout.contains("1 point(s) FAILED"), "{}", o.describe());
    o.assert_no_panic();
    // steady state of the driven damped cavity: coherent, n = ε²/(κ/2)² at Δ = 0 (Walls & Milburn 2008)
    let script = r#"
import sys, h5py, numpy as np
f = h5py.File(sys.argv[1], "r")
assert list(f["scan/status"][()]) == [1, 0]
err = list(f["scan/error"].asstr()[()])
assert "steady state" in err[0] and err[1] == "", err
n = f["steady_state/observables/photon_number"]
assert n.shape == (2, 1) and np.isnan(n[0, 0])
assert abs(n[1, 0] - (0.2 / 0.5) ** 2) < 1e-8, n[1, 0]
assert np.isnan(f["observables/photon_number"][0]).all()
"#;
    python(script, &[sb.join("f.h5").as_os_str()]);
}

#[test]
fn bad_scan_keys_name_file_line_and_key() {
    let sb = Sandbox::new();
    let cases = [
        (
            "modes[0].los",
            "values = [1]",
            "cav.toml:14",
            "scan.axis[0].path",
        ),
        (
            "modes[0].levels",
            "values = [1]",
            "cav.toml:14",
            "modes[0].levels",
        ),
        ("title", "values = [1]", "cav.toml:14", "not a number"),
        (
            "modes[3].loss",
            "values = [1]",
            "cav.toml:14",
            "no `modes[3]`",
        ),
        (
            "modes[0].detuning",
            "log = { from = 0, to = 1, count = 3 }",
            "cav.toml:15",
            "from > 0",
        ),
    ];
    for (path, values, at, what) in cases {
        let cfg = CAVITY.split("[scan]").next().unwrap().to_string()
            + &format!("[scan]\n[[scan.axis]]\npath = \"{path}\"\n{values}\n");
        sb.write("cav.toml", &cfg);
        for cmd in ["check", "scan"] {
            let o = sb.cavern([cmd, "cav.toml"]);
            assert_eq!(o.code, Some(2), "{}", o.describe());
            assert!(
                o.stderr.contains(at) && o.stderr.contains(what),
                "expected {at} and {what}\n{}",
                o.describe()
            );
            o.assert_no_panic();
        }
    }
    // `run` refuses a scan config and names the command to use
    sb.write("cav.toml", CAVITY);
    let o = sb.cavern(["run", "cav.toml"]);
    assert_eq!(o.code, Some(2));
    assert!(
        o.stderr.contains("cavern scan cav.toml"),
        "{}",
        o.describe()
    );
}

#[test]
fn check_reports_points_memory_and_a_calibrated_time() {
    let sb = Sandbox::new();
    sb.write("cav.toml", CAVITY);
    let o = sb.cavern(["check", "cav.toml"]);
    o.assert_success();
    for want in [
        "8 points = 2 × 4",
        "per point",
        "point(s) at a time",
        "calibrated by evolving point(s) 0, 4, 7",
        "in total",
    ] {
        assert!(o.stdout.contains(want), "missing {want}\n{}", o.describe());
    }
}

#[test]
fn shards_merge_into_the_single_machine_file_whatever_the_split() {
    let sb = Sandbox::new();
    sb.write("t.toml", TRAJ);
    sb.cavern([
        "scan",
        "t.toml",
        "-o",
        "whole.h5",
        "--parallel",
        "1",
        "--threads",
        "2",
        "-q",
    ])
    .assert_success();
    for k in 1..=3 {
        let shard = format!("{k}/3");
        let o = sb.cavern([
            "scan",
            "t.toml",
            "-o",
            "part.h5",
            "--shard",
            &shard,
            "--parallel",
            "2",
            "--threads",
            "1",
        ]);
        o.assert_success();
        assert!(
            !sb.join("part.h5").exists(),
            "a shard must not write the result file"
        );
        if k == 1 {
            // a missing shard is reported, and nothing is written
            let m = sb.cavern(["merge", "-o", "part.h5", "part.h5.shard-1-of-3.journal"]);
            assert_eq!(m.code, Some(1), "{}", m.describe());
            assert!(
                m.stderr.contains("missing") && m.stderr.contains("2/3, 3/3"),
                "{}",
                m.describe()
            );
            assert!(!sb.join("part.h5").exists());
        }
    }
    let st = sb.cavern(["status", "part.h5"]);
    st.assert_success();
    assert!(
        st.stdout
            .contains("total: 5/5 points done, 0 failed, 0 remaining"),
        "{}",
        st.describe()
    );
    let m = sb.cavern([
        "merge",
        "-o",
        "part.h5",
        "part.h5.shard-1-of-3.journal",
        "part.h5.shard-2-of-3.journal",
        "part.h5.shard-3-of-3.journal",
        "part.h5.shard-3-of-3.journal",
    ]);
    m.assert_success();
    assert!(
        m.stderr.contains("identical results (kept once)"),
        "{}",
        m.describe()
    );
    assert_same_files(&sb.join("whole.h5"), &sb.join("part.h5"));
    let script = r#"
import sys, h5py, numpy as np
f = h5py.File(sys.argv[1], "r")
s = f["scan/seed"][()]
assert s.shape == (5,) and len(set(s)) == 5 and (s >= 0).all(), s
assert f["observables/spin_z"].shape == (5, 1, 5) and f["observables/spin_z_stderr"].shape == (5, 1, 5)
"#;
    python(script, &[sb.join("part.h5").as_os_str()]);
}
