//! `[memory]` and `[probes]`: what `cavern check` prints about the stored couplings, the `/memory`
//! and `/recall` groups of a run (read back with h5py and recomputed with NumPy), the recall
//! table, erased probes, and the classical limit of the quantum network.

use crate::util::{python, repo, Sandbox};

/// `cavern run CONFIG -o out.h5` in `sb`; returns stdout.
fn run(sb: &Sandbox, config: &std::path::Path) -> String {
    let out = sb.cavern([
        "run".as_ref(),
        config.as_os_str(),
        "-o".as_ref(),
        sb.join("out.h5").as_os_str(),
    ]);
    out.assert_success();
    out.stdout
}

/// A matrix as a TOML array of rows.
fn toml_matrix(m: &[Vec<f64>]) -> String {
    let rows: Vec<String> = m
        .iter()
        .map(|r| {
            let v: Vec<String> = r.iter().map(|x| format!("{x:.17e}")).collect();
            format!("[{}]", v.join(", "))
        })
        .collect();
    format!("[{}]", rows.join(",\n  "))
}

/// Hebbian J of `patterns` (Hopfield, PNAS 79, 2554 (1982)) plus a small fixed symmetric
/// perturbation 0.02·((i+1)(j+1) mod 7 − 3)/3 that makes every local field non-zero (no ties).
fn perturbed_hebbian(patterns: &[&str]) -> Vec<Vec<f64>> {
    let xi: Vec<Vec<f64>> = patterns
        .iter()
        .map(|p| {
            p.chars()
                .map(|c| if c == '+' { 1.0 } else { -1.0 })
                .collect()
        })
        .collect();
    let n = xi[0].len();
    (0..n)
        .map(|i| {
            (0..n)
                .map(|j| {
                    if i == j {
                        return 0.0;
                    }
                    let hebb: f64 = xi.iter().map(|x| x[i] * x[j]).sum::<f64>() / n as f64;
                    hebb + 0.02 * (((i + 1) * (j + 1) % 7) as f64 - 3.0) / 3.0
                })
                .collect()
        })
        .collect()
}

#[test]
fn check_prints_the_couplings_and_their_spectrum() {
    let sb = Sandbox::new();
    let cfg = sb.write(
        "mem.toml",
        "[units]\nsystem = \"physical\"\nfrequency = \"MHz\"\n[time]\nstop = 1.0\nsamples = 3\n\
         [sites]\ncount = 5\n[memory]\npatterns = [\"+++--\", [1, -1, 1, -1, 1]]\nscale = 0.5\n",
    );
    let out = sb.cavern(["check".as_ref(), cfg.as_os_str()]);
    out.assert_success();
    let s = &out.stdout;
    // the printed rows of J and the spectrum, against NumPy: J = (1/N) Ξᵀ Ξ with a zero
    // diagonal (Hopfield 1982), eigenvalues by numpy.linalg.eigvalsh
    let rows: Vec<Vec<f64>> = s
        .lines()
        .skip_while(|l| !l.contains("coupling matrix J (rule units"))
        .skip(1)
        .take(5)
        .map(numbers_in_brackets)
        .collect();
    let spectrum = numbers_in_brackets(
        s.lines()
            .find(|l| l.contains("spectrum of J"))
            .unwrap_or_else(|| panic!("no spectrum line\n{}", out.describe())),
    );
    let reference = python(
        r#"
import numpy as np
X = np.array([[1, 1, 1, -1, -1], [1, -1, 1, -1, 1]], float)
J = X.T @ X / 5; np.fill_diagonal(J, 0)
print(" ".join(repr(float(x)) for x in J.ravel()))
print(" ".join(repr(float(x)) for x in np.linalg.eigvalsh(J)))
"#,
        &[],
    );
    let mut lines = reference.lines().map(|l| {
        l.split_whitespace()
            .map(|x| x.parse::<f64>().expect("number"))
            .collect::<Vec<f64>>()
    });
    let j_ref = lines.next().expect("J");
    let spec_ref = lines.next().expect("spectrum");
    // printed with 6 decimals
    for (k, want) in j_ref.iter().enumerate() {
        let got = rows[k / 5][k % 5];
        assert!(
            (got - want).abs() < 1e-6,
            "J[{k}] = {got}, NumPy {want}\n{s}"
        );
    }
    assert_eq!(spectrum.len(), 5, "{s}");
    for (got, want) in spectrum.iter().zip(&spec_ref) {
        assert!(
            (got - want).abs() < 1e-6,
            "spectrum {spectrum:?}, NumPy {spec_ref:?}"
        );
    }
    // the Hamiltonian gets Jᶻ/2π = −scale·J (config units): pair 0–2 has J = 2/5
    assert!(s.contains("scale c/2π = 0.5 MHz"), "{s}");
    let zz: Vec<Vec<f64>> = s
        .lines()
        .skip_while(|l| !l.contains("spin–spin zz"))
        .skip(1)
        .take(5)
        .map(numbers_in_brackets)
        .collect();
    assert!((zz[0][2] + 0.5 * 0.4).abs() < 1e-6, "{s}");
    // the stored patterns are observed automatically
    assert!(s.contains("patterns    +++--, +-+-+"), "{s}");
}

/// The numbers inside the first `[…]` of a line.
fn numbers_in_brackets(line: &str) -> Vec<f64> {
    let a = line.find('[').expect("[") + 1;
    let b = line[a..].find(']').expect("]") + a;
    line[a..b]
        .split(',')
        .map(|x| {
            x.trim()
                .parse::<f64>()
                .unwrap_or_else(|_| panic!("not a number in `{line}`"))
        })
        .collect()
}

#[test]
fn mode_realisation_prints_the_mediated_scale_with_its_reference() {
    // one longitudinally coupled mode per pattern; after adiabatic elimination
    // Jᶻᵢⱼ = −2g²Δ/(Δ² + κ²/4) Σ_μ ξᵢξⱼ (Reiter & Sørensen, Phys. Rev. A 85, 032111 (2012)),
    // i.e. c = 2N g²Δ/(Δ² + κ²/4); in config units (the 2π cancels to one power) with N = 4,
    // g = 0.1, Δ = 2, κ = 1: c/2π = 2·4·0.01·2/(4 + 0.25) = 0.0376470588…
    let sb = Sandbox::new();
    let cfg = sb.write(
        "modes.toml",
        "[units]\nsystem = \"physical\"\nfrequency = \"MHz\"\n[time]\nstop = 0.5\nsamples = 3\n\
         [sites]\ncount = 4\n[memory]\npatterns = [\"++--\", \"+-+-\"]\nrealisation = \"modes\"\n\
         [memory.modes]\nlevels = 3\ndetuning = 2.0\nloss = 1.0\ncoupling = 0.1\n",
    );
    let out = sb.cavern(["check".as_ref(), cfg.as_os_str()]);
    out.assert_success();
    let s = &out.stdout;
    assert!(s.contains("dimension d = 144"), "2⁴ · 3 · 3\n{s}");
    assert!(s.contains("scale c/2π = 0.037647 MHz"), "{s}");
    assert!(
        s.contains("Reiter & Sørensen, Phys. Rev. A 85, 032111 (2012)"),
        "{s}"
    );
    assert!(s.contains("longitudinal g(a + a†)σᶻ"), "{s}");
    // g²Δ/(Δ² + κ²/4)/2π = 0.01·2/4.25
    assert!(s.contains("g²Δ/(Δ² + κ²/4)/2π = 0.004706 MHz"), "{s}");
    // and it runs: the memory modes are modes of the model, in the vacuum at t = 0
    run(&sb, &cfg);
    let file = python(
        r#"
import sys, h5py
f = h5py.File(sys.argv[1], "r")
print(list(f["model"].attrs["mode_names"]), f["memory"].attrs["realisation"], "recall" in f)
print(f["observables/photon_number"][:, 0].tolist())
"#,
        &[sb.join("out.h5").as_os_str()],
    );
    assert!(
        file.starts_with("['memory0', 'memory1'] modes False"),
        "{file}"
    );
    assert!(file.contains("[0.0, 0.0]"), "{file}");
}

#[test]
fn demo_run_writes_memory_and_recall_and_prints_the_table() {
    let sb = Sandbox::new();
    let demo = repo().join("demo-data").join("ring6.toml");
    let stdout = run(&sb, &demo);
    // every dataset of /memory and /recall is recomputed from the file with NumPy: J from the
    // patterns (Hebbian, Hopfield 1982), the spectrum (eigvalsh), the t = 0 overlaps of the
    // flipped probes, each probe's success / retrieved pattern / time to recall from its
    // overlap trace, and the curve from the probes
    let script = r#"
import sys, h5py, numpy as np
f = h5py.File(sys.argv[1], "r")
m, r = f["memory"], f["recall"]; p = r["probes"]
thr = r.attrs["threshold"]; t = f["time"][()]
X = m["patterns"][()]; npat, N = X.shape; P = r.attrs["probe_count"]
for name, ds, shape in [
    ("couplings", m["couplings"], (N, N)), ("spectrum", m["spectrum"], (N,)),
    ("flips", r["flips"], (2,)), ("success", r["success"], (2,)),
    ("success_stderr", r["success_stderr"], (2,)), ("time_to_recall", r["time_to_recall"], (2,)),
    ("baseline_descent_success", r["baseline_descent_success"], (2,)),
    ("baseline_glauber_success", r["baseline_glauber_success"], (2,)),
    ("pattern", p["pattern"], (P,)), ("pflips", p["flips"], (P,)),
    ("flipped_sites", p["flipped_sites"], (P, N)), ("final_overlap", p["final_overlap"], (P, npat)),
    ("retrieved", p["retrieved"], (P,)), ("psuccess", p["success"], (P,)),
    ("ptime", p["time_to_recall"], (P,)), ("overlaps", p["overlaps"], (P, npat, len(t))),
]:
    assert ds.shape == shape, (name, ds.shape, shape)
assert p["success"].dtype == np.int64 and p["retrieved"].dtype == np.int64
assert r["time_to_recall"].attrs["units"] == "us"
Xf = X.astype(float)
J = Xf.T @ Xf / N; np.fill_diagonal(J, 0)
assert abs(J - m["couplings"][()]).max() < 1e-15
assert abs(np.linalg.eigvalsh(J) - m["spectrum"][()]).max() < 1e-12
ov = p["overlaps"][()]; pat = p["pattern"][()]; fl = p["flipped_sites"][()]
s0 = Xf[pat] * (1 - 2 * fl)
assert abs(ov[:, :, 0] - s0 @ Xf.T / N).max() < 1e-12
assert (fl.sum(axis=1) == p["flips"][()]).all()
fin = ov[:, :, -1]
assert (fin == p["final_overlap"][()]).all()
ok = fin[np.arange(P), pat] > thr
assert (ok.astype(int) == p["success"][()]).all()
def ttr(m):
    k = len(m)
    while k > 0 and m[k - 1] > thr:
        k -= 1
    return t[k] if k < len(m) else np.nan
tt = np.array([ttr(ov[q, pat[q]]) for q in range(P)])
assert np.array_equal(np.isnan(tt), np.isnan(p["time_to_recall"][()]))
assert np.allclose(tt[~np.isnan(tt)], p["time_to_recall"][()][~np.isnan(tt)], rtol=0, atol=0)
for q in range(P):
    cand = [(v, mu) for mu, v in enumerate(fin[q]) if v > thr] + [(-v, npat + mu) for mu, v in enumerate(fin[q]) if -v > thr]
    assert p["retrieved"][q] == (max(cand)[1] if cand else -1)
for i, k in enumerate(r["flips"][()]):
    sel = p["flips"][()] == k
    n = sel.sum(); sp = p["success_probability"][()][sel]
    assert (p["success_probability_stderr"][()] == 0).all()
    assert (sp >= -1e-12).all() and (sp <= 1 + 1e-12).all()
    # curve: mean recall probability, standard error of the mean over the probes (sd/sqrt n)
    assert abs(r["success"][i] - sp.mean()) < 1e-15
    assert abs(r["success_stderr"][i] - sp.std(ddof=1) / np.sqrt(n)) < 1e-15
    want = tt[sel & ok].mean() if (sel & ok).any() else np.nan
    got = r["time_to_recall"][i]
    assert (np.isnan(want) and np.isnan(got)) or abs(got - want) < 1e-12
    assert abs(r["baseline_descent_success"][i] - p["descent_success"][()][sel].mean()) < 1e-15
    print(k, n, r["success"][i], r["success_stderr"][i], got, r["baseline_descent_success"][i], r["baseline_glauber_success"][i])
"#;
    let curve = python(script, &[sb.join("out.h5").as_os_str()]);
    // the table on the terminal shows the same numbers
    let header = stdout
        .lines()
        .find(|l| l.contains("quantum success ± err"))
        .unwrap_or_else(|| panic!("no recall table\n{stdout}"));
    for col in [
        "k",
        "probes",
        "time to recall [us]",
        "descent success",
        "Glauber success (T = 0.1)",
    ] {
        assert!(header.contains(col), "{header}");
    }
    let table: Vec<&str> = stdout
        .lines()
        .skip_while(|l| !l.contains("quantum success ± err"))
        .skip(1)
        .take(2)
        .collect();
    for (line, file) in table.iter().zip(curve.lines()) {
        let f: Vec<f64> = file
            .split_whitespace()
            .map(|x| x.parse().unwrap())
            .collect();
        let cols: Vec<&str> = line.split_whitespace().collect();
        // k probes success ± err ttr descent glauber
        assert_eq!(cols[0].parse::<f64>().unwrap(), f[0], "{line} vs {file}");
        assert_eq!(cols[1].parse::<f64>().unwrap(), f[1], "{line} vs {file}");
        assert!(
            (cols[2].parse::<f64>().unwrap() - f[2]).abs() <= 5e-4,
            "{line} vs {file}"
        );
        assert!(
            (cols[4].parse::<f64>().unwrap() - f[3]).abs() <= 5e-4,
            "{line} vs {file}"
        );
        assert!(
            (cols[6].parse::<f64>().unwrap() - f[5]).abs() <= 5e-4,
            "{line} vs {file}"
        );
        assert!(
            (cols[7].parse::<f64>().unwrap() - f[6]).abs() <= 5e-4,
            "{line} vs {file}"
        );
    }
}

/// The classical reference for every probe of `out.h5`, from the file's J and patterns:
/// - the continuous-time Glauber master equation on all 2ᴺ configurations (Glauber, J. Math.
///   Phys. 4, 294 (1963)): site i flips up at rate γ_G w↑(hᵢ), down at γ_G w↓(hᵢ), with
///   hᵢ = c Σⱼ Jᵢⱼ sⱼ, w↑(h) = 1/(1 + e^{−2h/T}) (at T = 0 a step, ½ at h = 0), propagated to the
///   final time with scipy.linalg.expm: the expected overlaps and the probability that the
///   configuration's overlap with the probed pattern is above the threshold;
/// - every fixed point reachable by flips that align a spin with its local field (asynchronous
///   zero-temperature dynamics in any order; Hopfield 1982), by exhaustive search, and whether
///   a tie (hᵢ = 0) occurs on the way.
///
/// Prints per probe: expected overlaps (2), success probability, unique-and-tie-free flag,
/// success of that unique fixed point, then the file's final overlaps (2), success, descent
/// success, success probability and its error (−1 when absent).
const CLASSICAL: &str = r#"
import sys, h5py, numpy as np, itertools
from scipy.linalg import expm
f = h5py.File(sys.argv[1], "r")
gamma, T, c = (float(x) for x in sys.argv[2:5])
J = f["memory/couplings"][()]; X = f["memory/patterns"][()].astype(float); N = J.shape[0]
r = f["recall"]; p = r["probes"]; thr = r.attrs["threshold"]; t_end = f["time"][-1]
states = [np.array(s, float) for s in itertools.product([1, -1], repeat=N)]
index = {tuple(s): k for k, s in enumerate(states)}
def w_up(h):
    if T > 0:
        return 1 / (1 + np.exp(-2 * h / T))
    return 0.5 if abs(h) < 1e-12 else float(h > 0)
W = np.zeros((2**N, 2**N))
for k, s in enumerate(states):
    h = c * J @ s
    for i in range(N):
        rate = gamma * (w_up(h[i]) if s[i] < 0 else 1 - w_up(h[i]))
        y = s.copy(); y[i] = -y[i]
        W[index[tuple(y)], k] += rate; W[k, k] -= rate
U = expm(W * t_end)
M = np.array(states) @ X.T / N
for q in range(p["pattern"].shape[0]):
    mu = p["pattern"][q]
    s0 = X[mu] * (1 - 2 * p["flipped_sites"][q])
    prob = U[:, index[tuple(s0)]]
    expected = prob @ M
    p_ok = prob[M[:, mu] > thr].sum()
    seen, fixed, stack, tie = set(), set(), [tuple(s0)], False
    while stack:
        x = stack.pop()
        if x in seen:
            continue
        seen.add(x)
        h = J @ np.array(x)
        tie = tie or bool(np.any(np.abs(h) < 1e-12))
        mis = [i for i in range(N) if h[i] * x[i] < 0]
        if not mis:
            fixed.add(x)
        for i in mis:
            y = list(x); y[i] = -y[i]; stack.append(tuple(y))
    unique = len(fixed) == 1 and not tie
    fixed_ok = unique and (X[mu] @ np.array(next(iter(fixed))) / N > thr)
    sp = p["success_probability"][q] if "success_probability" in p else -1.0
    se = p["success_probability_stderr"][q] if "success_probability_stderr" in p else -1.0
    print(*(float(v) for v in [*expected, p_ok, unique, fixed_ok, *p["final_overlap"][q],
          p["success"][q], p["descent_success"][q], sp, se]))
"#;

/// One probe: the classical reference and what the tool wrote.
struct Reference {
    expected: [f64; 2],
    p_success: f64,
    unique: bool,
    unique_success: bool,
    quantum: [f64; 2],
    success: bool,
    descent: f64,
    probability: f64,
    stderr: f64,
}

fn classical_reference(sb: &Sandbox, gamma: f64, temperature: f64, scale: f64) -> Vec<Reference> {
    let args: Vec<std::ffi::OsString> = [gamma, temperature, scale]
        .iter()
        .map(|x| x.to_string().into())
        .collect();
    let out = sb.join("out.h5");
    let mut all: Vec<&std::ffi::OsStr> = vec![out.as_os_str()];
    all.extend(args.iter().map(|a| a.as_os_str()));
    python(CLASSICAL, &all)
        .lines()
        .map(|l| {
            let v: Vec<f64> = l.split_whitespace().map(|x| x.parse().unwrap()).collect();
            Reference {
                expected: [v[0], v[1]],
                p_success: v[2],
                unique: v[3] == 1.0,
                unique_success: v[4] == 1.0,
                quantum: [v[5], v[6]],
                success: v[7] == 1.0,
                descent: v[8],
                probability: v[9],
                stderr: v[10],
            }
        })
        .collect()
}

/// Six sites storing two orthogonal patterns through a given J (Hebbian plus a small fixed
/// perturbation, so that no local field vanishes), with a local-field relaxation γ_G = 20 much
/// faster than everything else at T = 0 and a weak transverse drive Ω = 0.01 (dimensionless).
fn classical_limit_config(solver: &str, probes: &str) -> String {
    let j = perturbed_hebbian(&["+++---", "+-++-+"]);
    format!(
        "[units]\nsystem = \"dimensionless\"\n[time]\nstop = 2.0\nsamples = 21\n{solver}\n\
         [sites]\ncount = 6\nrabi = 0.01\n\
         [memory]\npatterns = [\"+++---\", \"+-++-+\"]\nrealisation = \"matrix\"\nmatrix = {}\nscale = 1.0\n\
         [memory.relaxation]\nrate = 20.0\ntemperature = 0.0\n{probes}\n",
        toml_matrix(&j)
    )
}

#[test]
fn strong_field_relaxation_reproduces_the_classical_recall_outcome() {
    // With a local-field relaxation γ_G = 20 ≫ the transverse drive Ω = 0.01 at T = 0, the
    // populations follow the zero-temperature Glauber master equation (Glauber 1963), i.e.
    // asynchronous Hopfield descent in random order (Hopfield 1982). Per probe: the final
    // overlaps equal the classical master equation's expectation (SciPy expm) up to the
    // O((Ω/ΔE)²) admixture of the drive, and where every update order ends in the same fixed
    // point without a tie, the quantum success equals the tool's classical descent.
    let sb = Sandbox::new();
    let cfg = sb.write(
        "classical.toml",
        &classical_limit_config(
            "[solver]\nrtol = 1e-8\natol = 1e-11",
            "[probes]\nmax_flips = 2\nthreshold = 0.8",
        ),
    );
    run(&sb, &cfg);
    let probes = classical_reference(&sb, 20.0, 0.0, 1.0);
    assert_eq!(probes.len(), 2 * (6 + 15));
    // tolerance: the drive admixes the flipped state of a site with weight ≈ (Ω/γ_G)² = 2.5e-7
    // (the damping γ_G/2 = 10 dominates the zz energy differences, ≤ 2); measured max deviation
    // 1e-5 (with the integration error at rtol 1e-8); the bound leaves a factor 10
    for r in &probes {
        for (q, c) in r.quantum.iter().zip(&r.expected) {
            assert!(
                (q - c).abs() < 1e-4,
                "quantum {:?} vs classical {:?}",
                r.quantum,
                r.expected
            );
        }
    }
    let unique: Vec<&Reference> = probes.iter().filter(|r| r.unique).collect();
    // non-vacuous: several probes have an order-independent outcome
    assert!(unique.len() >= 5, "only {} unique outcomes", unique.len());
    for r in &unique {
        assert_eq!(r.success, r.unique_success);
        assert_eq!(r.success, r.descent == 1.0);
    }
    // the recall probability Tr(Πρ) equals the classical master equation's probability of a
    // configuration above threshold (Glauber 1963, SciPy expm), within the same admixture bound
    for r in &probes {
        assert!(
            (r.probability - r.p_success).abs() < 1e-4 && r.stderr == 0.0,
            "recall probability {} ± {} vs classical {}",
            r.probability,
            r.stderr,
            r.p_success
        );
    }
    // and the outcomes are not all the same
    assert!(probes.iter().any(|r| r.success) && probes.iter().any(|r| !r.success));
}

#[test]
fn trajectories_give_the_success_probability_with_its_error() {
    // the same network with the trajectory solver: each probe's success probability (the mean
    // over trajectories of ⟨ψ|Π|ψ⟩, Π the projector on configurations above threshold) against
    // the classical master equation's probability of ending in such a configuration (SciPy expm)
    let sb = Sandbox::new();
    let cfg = sb.write(
        "traj.toml",
        &classical_limit_config(
            "[solver]\nmethod = \"trajectories\"\ntrajectories = 64\nseed = 5",
            "[probes]\nsites = [[0], [3], [1, 4]]\nthreshold = 0.8",
        ),
    );
    let stdout = run(&sb, &cfg);
    assert!(
        stdout.contains("64 trajectories per probe; ± is the standard error over trajectories"),
        "{stdout}"
    );
    let probes = classical_reference(&sb, 20.0, 0.0, 1.0);
    assert_eq!(probes.len(), 2 * 3);
    for r in &probes {
        // binomial error of 64 trajectories around the classical probability (the estimated
        // error is 0 when all trajectories agree, so the bound uses the classical p)
        let sigma = (r.p_success * (1.0 - r.p_success) / 64.0).sqrt();
        assert!(
            (r.probability - r.p_success).abs() <= 4.0 * sigma + 0.02,
            "success probability {} ± {} vs classical {}",
            r.probability,
            r.stderr,
            r.p_success
        );
        assert!(r.stderr.is_finite() && r.stderr >= 0.0, "{}", r.stderr);
    }
}

#[test]
fn erased_sites_start_unpolarised_and_memory_without_probes_is_a_plain_run() {
    let sb = Sandbox::new();
    let base = "[units]\nsystem = \"dimensionless\"\n[time]\nstop = 0.5\nsamples = 3\n\
                [sites]\ncount = 4\ndecay = 0.1\n[memory]\npatterns = [\"++--\", \"+-+-\"]\nscale = 1.0\n";
    for corruption in ["erase-mixed", "erase-superposition"] {
        let cfg = sb.write(
            "erase.toml",
            &format!("{base}[probes]\nsites = [[0], [1, 2]]\ncorruption = \"{corruption}\"\n"),
        );
        run(&sb, &cfg);
        // an erased site has ⟨σᶻ⟩ = 0, so m_ν(0) = (1/N) Σ_{i not erased} ξᵢ^ν ξᵢ^μ
        let got = python(
            r#"
import sys, h5py, numpy as np
f = h5py.File(sys.argv[1], "r")
p = f["recall/probes"]; X = f["memory/patterns"][()].astype(float)
keep = 1 - p["flipped_sites"][()]
want = (X[p["pattern"][()]] * keep) @ X.T / X.shape[1]
print(abs(p["overlaps"][:, :, 0] - want).max(), f["recall"].attrs["corruption"], p["flips"][()].tolist())
"#,
            &[sb.join("out.h5").as_os_str()],
        );
        let v: Vec<&str> = got.split_whitespace().collect();
        assert!(v[0].parse::<f64>().unwrap() < 1e-12, "{got}");
        assert_eq!(v[1], corruption);
        assert_eq!(&got[got.find('[').unwrap()..].trim(), &"[1, 2, 1, 2]");
    }
    // no [probes]: a normal run plus /memory; the stored patterns come first among the observed
    // ones, an extra observed pattern after them
    let cfg = sb.write(
        "plain.toml",
        &format!("{base}[observe]\npatterns = [\"+-+-\", \"++++\"]\n"),
    );
    let stdout = run(&sb, &cfg);
    assert!(!stdout.contains("recall of"), "{stdout}");
    let got = python(
        r#"
import sys, h5py
f = h5py.File(sys.argv[1], "r")
print("recall" in f, f["memory"].attrs["rule"], f["memory/patterns"].shape,
      list(f["observables/pattern_overlap"].attrs["rows"]), f["observables/pattern_overlap"].shape)
"#,
        &[sb.join("out.h5").as_os_str()],
    );
    assert_eq!(
        got.trim(),
        "False hebbian (2, 4) ['pattern0', 'pattern1', 'pattern2'] (3, 3)"
    );
}

#[test]
fn eliminated_memory_modes_agree_with_the_full_model_only_far_detuned() {
    // [memory.modes] eliminate = true runs the spin-only effective model (effective-operator
    // formalism, Reiter & Sørensen, Phys. Rev. A 85, 032111 (2012)): mediated zz plus one
    // collective dephasing per mode. Its corrections are of relative order (N g/|Δ − iκ/2|)², the
    // squared mode displacement: 9·0.16/404 = 3.6e-3 for g = 0.4, Δ = 20, κ = 4 (measured max
    // |Δ⟨σᶻ⟩| 2.4e-3; bound 5e-3), but 9·4/20 = 1.8 for g = 2, Δ = 4, where the two must visibly
    // disagree (measured 0.22).
    let sb = Sandbox::new();
    let spin_z = |eliminate: bool, g: f64, detuning: f64| -> Vec<f64> {
        let cfg = sb.write(
            "el.toml",
            &format!(
                "[units]\nsystem = \"dimensionless\"\n[time]\nstop = 3.0\nsamples = 31\n\
                 [solver]\nrtol = 1e-8\natol = 1e-10\n[sites]\ncount = 3\nrabi = 1.0\ndecay = 0.2\n\
                 [memory]\npatterns = [\"++-\", \"+-+\"]\nrealisation = \"modes\"\n\
                 [memory.modes]\neliminate = {eliminate}\nlevels = 8\ndetuning = {detuning}\n\
                 loss = 4.0\ncoupling = {g}\n"
            ),
        );
        run(&sb, &cfg);
        python(
            r#"
import sys, h5py
f = h5py.File(sys.argv[1], "r")
assert f["memory"].attrs["modes_eliminated"] == int(sys.argv[2] == "true")
print(" ".join(repr(float(x)) for x in f["observables/spin_z"][()].ravel()))
"#,
            &[
                sb.join("out.h5").as_os_str(),
                eliminate.to_string().as_ref(),
            ],
        )
        .split_whitespace()
        .map(|x| x.parse().unwrap())
        .collect()
    };
    let max_diff = |a: &[f64], b: &[f64]| {
        assert_eq!(a.len(), b.len());
        a.iter()
            .zip(b)
            .map(|(x, y)| (x - y).abs())
            .fold(0.0, f64::max)
    };
    let near = max_diff(&spin_z(false, 0.4, 20.0), &spin_z(true, 0.4, 20.0));
    assert!(near < 5e-3, "far detuned: max |Δ⟨σᶻ⟩| = {near}");
    let far = max_diff(&spin_z(false, 2.0, 4.0), &spin_z(true, 2.0, 4.0));
    assert!(far > 0.05, "strongly coupled: max |Δ⟨σᶻ⟩| = {far}");
    // the check output says so and the effective model has no modes
    let out = sb.cavern(["check", "el.toml"]);
    out.assert_success();
    assert!(
        out.stdout.contains("dimension d = 8") && out.stdout.contains("the modes are ELIMINATED"),
        "{}",
        out.describe()
    );
}

#[test]
fn probe_results_do_not_depend_on_the_thread_count() {
    // density-matrix probes run one per thread for small d; each is a fixed sequential
    // computation and the classical runs are seeded per probe, so /recall is bit-identical
    let sb = Sandbox::new();
    let cfg = sb.write(
        "threads.toml",
        "[units]\nsystem = \"dimensionless\"\n[time]\nstop = 1.0\nsamples = 11\n\
         [sites]\ncount = 4\nrabi = 0.1\ndecay = 0.05\n\
         [memory]\npatterns = [\"++--\", \"+-+-\"]\nscale = 1.0\n\
         [memory.relaxation]\nrate = 2.0\ntemperature = 0.2\n\
         [probes]\nmax_flips = 2\ndraws = 3\nseed = 11\n",
    );
    let dump = |threads: &str| {
        let out = sb.cavern([
            "run".as_ref(),
            cfg.as_os_str(),
            "--threads".as_ref(),
            threads.as_ref(),
            "-o".as_ref(),
            sb.join("out.h5").as_os_str(),
        ]);
        out.assert_success();
        python(
            r#"
import sys, h5py
f = h5py.File(sys.argv[1], "r")
def walk(g, path=""):
    for k in sorted(g):
        if isinstance(g[k], h5py.Group):
            walk(g[k], path + k + "/")
        else:
            print(path + k, g[k][()].tobytes().hex())
walk(f["recall"])
"#,
            &[sb.join("out.h5").as_os_str()],
        )
    };
    let one = dump("1");
    assert!(one.contains("probes/overlaps"), "{one}");
    assert_eq!(one, dump("2"));
}
