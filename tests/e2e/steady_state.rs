//! `[steady_state]` through the whole tool: the steady state of resonance fluorescence and of a
//! driven damped cavity against their analytic values, the relaxation rates of a damped cavity,
//! and a network whose steady state is not unique.

use crate::util::{python, Sandbox};

fn run(sb: &Sandbox, config: &str) -> String {
    let cfg = sb.write("config.toml", config);
    let out = sb.cavern([
        "run".as_ref(),
        cfg.as_os_str(),
        "-o".as_ref(),
        sb.join("out.h5").as_os_str(),
    ]);
    out.assert_success();
    out.stdout
}

/// Read `/steady_state` and `/relaxation` values with h5py: "name value" lines.
fn read(sb: &Sandbox) -> Vec<(String, f64)> {
    let script = r#"
import sys, h5py
with h5py.File(sys.argv[1], "r") as f:
    g = f["steady_state"]
    print("unique", g.attrs["unique"])
    for k in g:
        v = g[k][()]
        try:
            for i, x in enumerate(v):
                print(f"{k}[{i}]", x)
        except TypeError:
            print(k, v)
    if "relaxation" in f:
        r = f["relaxation"]
        print("zero_dimension", r.attrs["zero_dimension"])
        if "spectral_gap" in r.attrs:
            print("gap", r.attrs["spectral_gap"])
        for i, (a, b) in enumerate(zip(r["eigenvalues_re"][()], r["eigenvalues_im"][()])):
            print(f"ev_re[{i}]", a)
            print(f"ev_im[{i}]", b)
"#;
    python(script, &[sb.join("out.h5").as_os_str()])
        .lines()
        .map(|l| {
            let (k, v) = l.split_once(' ').expect("name value");
            (k.to_string(), v.trim().parse::<f64>().expect("number"))
        })
        .collect()
}

fn get(v: &[(String, f64)], k: &str) -> f64 {
    v.iter()
        .find(|(n, _)| n == k)
        .unwrap_or_else(|| panic!("{k} missing in {v:?}"))
        .1
}

#[test]
fn resonance_fluorescence_steady_population() {
    // ρₑₑ = (Ω²/4)/(Δa² + γ²/4 + Ω²/2) (Mollow, Phys. Rev. 188, 1969 (1969); from memory), here in
    // physical units: the 2π cancels in the ratio. ⟨σᶻ⟩ = 2ρₑₑ − 1.
    for (rabi, det) in [(1.0, 0.0), (3.0, 0.5), (0.4, -1.2)] {
        let sb = Sandbox::new();
        run(
            &sb,
            &format!(
                "[units]\nsystem = \"physical\"\nfrequency = \"MHz\"\n[time]\nstop = 0.1\nsamples = 2\n\
                 [sites]\ncount = 1\ndecay = 1.0\nrabi = {rabi}\ndetuning = {det}\n[steady_state]\nmethod = \"direct\"\n"
            ),
        );
        let v = read(&sb);
        let pe = (rabi * rabi / 4.0) / (det * det + 0.25 + rabi * rabi / 2.0);
        // a direct sparse solve is backward stable: a few hundred ε
        assert!(
            (get(&v, "spin_z[0]") - (2.0 * pe - 1.0)).abs() < 1e-12,
            "{v:?}"
        );
        assert_eq!(get(&v, "unique"), 1.0);
        assert_eq!(get(&v, "zero_dimension"), 1.0);
    }
}

#[test]
fn driven_cavity_photon_number_and_relaxation_rate() {
    // ⟨n⟩ₛₛ = ε²/(Δc² + κ²/4) (Walls & Milburn, Quantum Optics; from memory); the slowest decay of a
    // damped cavity is the field amplitude, λ = −κ/2 ± iΔc (populations decay at κ). Dimensionless
    // units: κ = 1, ε = 0.3, Δc = 0.4; 15 levels leave a Poisson tail ~ (0.36)^15/15! ≈ 1e-19.
    let sb = Sandbox::new();
    let stdout = run(
        &sb,
        "[units]\nsystem = \"dimensionless\"\n[time]\nstop = 1.0\nsamples = 2\n\
         [[modes]]\nlevels = 15\nloss = 1.0\ndrive = 0.3\ndetuning = 0.4\n[steady_state]\nrelaxation_rates = 4\n",
    );
    assert!(stdout.contains("steady state ("), "{stdout}");
    let v = read(&sb);
    let n = 0.09 / (0.16 + 0.25);
    assert!((get(&v, "photon_number[0]") - n).abs() < 1e-10, "{v:?}");
    assert!((get(&v, "gap") - 0.5).abs() < 1e-8, "{v:?}");
    assert!(
        (get(&v, "ev_re[1]") + 0.5).abs() < 1e-8 && (get(&v, "ev_im[1]").abs() - 0.4).abs() < 1e-8,
        "{v:?}"
    );
}

#[test]
fn undamped_conserved_quantity_makes_the_steady_state_not_unique() {
    // a lossy mode and a site with no dissipation and no coupling: the site's populations are
    // conserved, so every mixture of its two levels is stationary (zero eigenspace of dimension ≥ 2)
    let sb = Sandbox::new();
    let cfg = sb.write(
        "config.toml",
        "[units]\nsystem = \"dimensionless\"\n[time]\nstop = 1.0\nsamples = 2\n[sites]\ncount = 1\n\
         [[modes]]\nlevels = 3\nloss = 1.0\n[steady_state]\nrelaxation_rates = 4\n",
    );
    let out = sb.cavern([
        "run".as_ref(),
        cfg.as_os_str(),
        "-o".as_ref(),
        sb.join("out.h5").as_os_str(),
    ]);
    out.assert_success();
    assert!(out.stdout.contains("NOT UNIQUE"), "{}", out.describe());
    assert!(out.stderr.contains("not unique"), "{}", out.describe());
    let v = read(&sb);
    assert_eq!(get(&v, "unique"), 0.0);
    assert!(get(&v, "zero_dimension") >= 2.0, "{v:?}");
}

#[test]
fn iterative_solver_with_each_preconditioner() {
    // GMRES through the CLI with each preconditioner on the driven damped cavity of
    // driven_cavity_photon_number_and_relaxation_rate: ⟨n⟩ₛₛ = ε²/(Δc² + κ²/4) (Walls & Milburn,
    // Quantum Optics; from memory). The GMRES tolerance 1e-11 bounds the residual, and with the
    // gap κ/2 = 0.5 the error in ⟨n⟩ is far below the 1e-8 checked.
    for pre in ["no-jump", "diagonal"] {
        let sb = Sandbox::new();
        run(
            &sb,
            &format!(
                "[units]\nsystem = \"dimensionless\"\n[time]\nstop = 1.0\nsamples = 2\n\
                 [[modes]]\nlevels = 15\nloss = 1.0\ndrive = 0.3\ndetuning = 0.4\n\
                 [steady_state]\nmethod = \"iterative\"\npreconditioner = \"{pre}\"\nrelaxation_rates = 0\n"
            ),
        );
        let v = read(&sb);
        let n = 0.09 / (0.16 + 0.25);
        assert!(
            (get(&v, "photon_number[0]") - n).abs() < 1e-8,
            "{pre}: {v:?}"
        );
        let attrs = python(
            "import sys, h5py\nwith h5py.File(sys.argv[1], 'r') as f:\n    a = f['steady_state'].attrs\n    print(a['method'], a['preconditioner'], a['iterations'])\n",
            &[sb.join("out.h5").as_os_str()],
        );
        let words: Vec<&str> = attrs.split_whitespace().collect();
        assert_eq!(&words[..2], &["gmres", pre], "{attrs}");
        assert!(words[2].parse::<u64>().expect("iterations") >= 1, "{attrs}");
    }
}
