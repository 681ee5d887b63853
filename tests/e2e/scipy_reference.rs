//! A driven, lossy 2-spin + 1-mode network run through the whole tool (config in physical units,
//! `cavern run`, HDF5 file) and compared at every sample time with an independent reference
//! computed inside the test: `tests/python/lindblad_reference.py` builds the Liouvillian with
//! NumPy Kronecker products and propagates it with SciPy's matrix exponential
//! (scipy.linalg.expm; Al-Mohy & Higham, SIAM J. Matrix Anal. Appl. 31, 970 (2009)).

use crate::util::{python, repo, Sandbox};
use std::f64::consts::TAU;

const CONFIG: &str = r#"
# Test scenario (invented): two sites and one driven lossy mode with every kind of term.
[units]
system = "physical"
frequency = "MHz"

[time]
stop = 3.0
samples = 13

[solver]
rtol = 1e-10
atol = 1e-12

[sites]
count = 2
detuning = 0.3
decay = 0.1
dephasing = 0.05
rabi = 0.2

[[sites.override]]
index = 1
detuning = -0.2
decay = 0.15
dephasing = 0.0
pump = 0.02
rabi = 0.0

[[modes]]
levels = 7
detuning = 0.4
loss = 0.8
thermal = 0.1
drive = 0.3

[coupling]
strength = [[0.5], [0.4]]

[spin_spin]
zz = 0.1
flip_flop = 0.05

[initial]
spins = "+-"
modes = [{ coherent = [0.3, 0.1] }]

[observe]
spin_axes = ["z", "x"]
"#;

#[test]
fn two_spins_one_mode_match_a_scipy_matrix_exponential() {
    let sb = Sandbox::new();
    let cfg = sb.write("config.toml", CONFIG);
    let out = sb.cavern([
        "run".as_ref(),
        cfg.as_os_str(),
        "-o".as_ref(),
        sb.join("out.h5").as_os_str(),
        "--quiet".as_ref(),
    ]);
    out.assert_success();

    // The same model in angular units: the test applies 2π to the MHz values itself.
    let w = |f: f64| TAU * f;
    let spec = format!(
        r#"{{"sites": [
            {{"detuning": {}, "decay": {}, "dephasing": {}, "pump": 0.0, "rabi": {}, "coupling": {}}},
            {{"detuning": {}, "decay": {}, "dephasing": 0.0, "pump": {}, "rabi": 0.0, "coupling": {}}}],
          "mode": {{"levels": 7, "detuning": {}, "loss": {}, "thermal": 0.1, "drive": {}}},
          "zz": {}, "flip_flop": {}, "spins": [1, -1], "alpha": [0.3, 0.1],
          "times": [{}]}}"#,
        w(0.3),
        w(0.1),
        w(0.05),
        w(0.2),
        w(0.5),
        w(-0.2),
        w(0.15),
        w(0.02),
        w(0.4),
        w(0.4),
        w(0.8),
        w(0.3),
        w(0.1),
        w(0.05),
        (0..13)
            .map(|k| format!("{}", 3.0 * k as f64 / 12.0))
            .collect::<Vec<_>>()
            .join(", ")
    );
    let spec_path = sb.write("spec.json", &spec);
    let script = r#"
import json, subprocess, sys
import h5py, numpy as np
ref_script, spec_path, h5_path = sys.argv[1:4]
with open(spec_path) as f:
    ref = json.loads(subprocess.run([sys.executable, ref_script], stdin=f, capture_output=True,
                                    check=True, text=True).stdout)
with h5py.File(h5_path, "r") as h:
    o = h["observables"]
    got = {k: np.asarray(o[k]) for k in ["spin_z", "spin_x", "photon_number", "field_re", "field_im", "purity"]}
for k, v in got.items():
    r = np.asarray(ref[k])
    v = v.reshape(r.shape)
    print(k, float(np.max(np.abs(v - r))), float(np.max(np.abs(r))))
"#;
    let ref_script = repo().join("tests/python/lindblad_reference.py");
    let report = python(
        script,
        &[
            ref_script.as_os_str(),
            spec_path.as_os_str(),
            sb.join("out.h5").as_os_str(),
        ],
    );
    eprintln!("max deviation from the SciPy reference (name, deviation, scale):\n{report}");
    let mut seen = 0;
    for line in report.lines() {
        let f: Vec<&str> = line.split_whitespace().collect();
        let (name, dev, scale): (&str, f64, f64) =
            (f[0], f[1].parse().unwrap(), f[2].parse().unwrap());
        // rtol 1e-10 / atol 1e-12 per step over ~10² steps bounds the global error near 1e-8 of
        // the O(1) observables; allow 1e-7 (the exact propagator is accurate to ~1e-12).
        assert!(
            dev <= 1e-7,
            "{name}: max deviation {dev:e} from the SciPy reference (scale {scale})"
        );
        assert!(
            scale > 1e-3,
            "{name}: reference is trivially small ({scale}); the test would not catch errors"
        );
        seen += 1;
    }
    assert_eq!(seen, 6, "expected six compared observables, got:\n{report}");
}
