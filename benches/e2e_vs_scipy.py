#!/usr/bin/env python3
"""End-to-end comparison of cavern against a SciPy reference on the same master equation.

The scenario is benches/e2e6.toml (invented: 6 spins + one 6-level mode, d = 384). This script

1. builds cavern (`cargo build --release`, unless --no-build) and runs
   `cavern run CONFIG -o OUT --quiet --threads T` for T = 1 and 2 (--repeat times each),
   reading the solver's own wall time from the HDF5 attribute /solver/wall_seconds;
2. builds the same Hamiltonian and jump operators in NumPy/SciPy from the values in the config,
   forms the sparse Liouvillian in the column-stacking convention vec(AXB) = (Bᵀ ⊗ A) vec(X),
   and integrates it with scipy.integrate.solve_ivp(method="RK45") at the config's rtol/atol,
   over the same time span with the same sample times;
3. checks that ⟨σᶻᵢ⟩(t) and ⟨a†a⟩(t) agree, and prints both wall times and the speedups.

Conventions (crate docs and /work/shared/VALIDATION.md): basis site 0 ⊗ … ⊗ site N−1 ⊗ mode, first
factor most significant; spin basis (|g⟩, |e⟩), σᶻ = diag(−1, +1), σ⁻ = |g⟩⟨e|; Fock basis |0⟩…;
H = Δc a†a + Σᵢ (Δaᵢ/2)σᶻᵢ + Σᵢ gᵢ(aσ⁺ᵢ + a†σ⁻ᵢ) + ε(a + a†) + Σᵢ<ⱼ Jᶻᵢⱼ σᶻᵢσᶻⱼ (angular = 2π × MHz,
times in µs); jumps √κ a, √γ σ⁻ᵢ, √(γφ/2) σᶻᵢ.

Usage: python3 benches/e2e_vs_scipy.py [--config benches/e2e6.toml] [--no-build] [--repeat 3]
       [--scipy-repeat 2] [--cavern PATH]
Writes a JSON summary to target/perf/e2e_vs_scipy.json.
"""

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
import tomllib
from pathlib import Path

import numpy as np
import scipy
import scipy.sparse as sp
from scipy.integrate import solve_ivp

ROOT = Path(__file__).resolve().parent.parent
TAU = 2.0 * np.pi


def blas_info():
    """Environment that affects NumPy's BLAS (recorded, never changed)."""
    info = {k: os.environ.get(k) for k in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE", "OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS")}
    try:
        from threadpoolctl import threadpool_info

        info["threadpools"] = [
            {k: p.get(k) for k in ("internal_api", "version", "architecture", "num_threads")} for p in threadpool_info()
        ]
    except ImportError:
        info["threadpools"] = "threadpoolctl not installed"
    return info


# ------------------------------------------------------------------------------------------------
# The model, from the config


def model_from_config(cfg):
    """Angular parameters of the config (only the keys this benchmark uses are accepted)."""
    units = cfg["units"]
    assert units["system"] == "physical" and units["frequency"] == "MHz", "expects MHz / µs"
    s = cfg["sites"]
    n = s["count"]
    sites = [
        {"detuning": s.get("detuning", 0.0), "decay": s.get("decay", 0.0), "dephasing": s.get("dephasing", 0.0)}
        for _ in range(n)
    ]
    for o in s.get("override", []):
        for k, v in o.items():
            if k != "index":
                assert k in sites[0], f"unsupported site key {k}"
                sites[o["index"]][k] = v
    for k in ("pump", "rabi", "rabi_envelope"):
        assert k not in s, f"unsupported site key {k}"
    (mode,) = cfg["modes"]
    for k in mode:
        assert k in ("name", "levels", "detuning", "loss", "drive"), f"unsupported mode key {k}"
    c = cfg["coupling"]
    assert c.get("form", "exchange") == "exchange" and "envelope" not in c
    g = [row[0] for row in c["strength"]]
    ss = cfg.get("spin_spin", {})
    assert set(ss) <= {"zz"}, "only constant zz couplings are supported"
    zz = np.array(ss.get("zz", np.zeros((n, n))), dtype=float)
    t = cfg["time"]
    times = np.array([t["stop"] * k / (t["samples"] - 1) for k in range(t["samples"])])
    times[-1] = t["stop"]
    init = cfg["initial"]
    assert init.get("modes", ["vacuum"]) == ["vacuum"]
    spins = [1 if ch == "+" else -1 for ch in init["spins"]]
    return {
        "n": n,
        "levels": mode["levels"],
        "delta_a": np.array([TAU * x["detuning"] for x in sites]),
        "gamma": np.array([TAU * x["decay"] for x in sites]),
        "gamma_phi": np.array([TAU * x["dephasing"] for x in sites]),
        "delta_c": TAU * mode.get("detuning", 0.0),
        "kappa": TAU * mode.get("loss", 0.0),
        "eps": TAU * mode.get("drive", 0.0),
        "g": TAU * np.array(g),
        "zz": TAU * zz,
        "spins": spins,
        "times": times,
        "rtol": cfg["solver"]["rtol"],
        "atol": cfg["solver"]["atol"],
    }


def embed(local, k, dims):
    """I ⊗ … ⊗ local (factor k) ⊗ … ⊗ I, first factor most significant."""
    out = sp.identity(1, dtype=complex, format="csr")
    for j, dj in enumerate(dims):
        out = sp.kron(out, sp.csr_matrix(local) if j == k else sp.identity(dj, dtype=complex), format="csr")
    return out


def operators(m):
    n, lv = m["n"], m["levels"]
    dims = [2] * n + [lv]
    sm = np.array([[0, 1], [0, 0]], dtype=complex)  # σ⁻ = |g⟩⟨e|, basis (g, e)
    szl = np.diag([-1.0, 1.0]).astype(complex)
    al = np.diag(np.sqrt(np.arange(1, lv)), 1).astype(complex)  # a|n⟩ = √n|n−1⟩
    smi = [embed(sm, i, dims) for i in range(n)]
    szi = [embed(szl, i, dims) for i in range(n)]
    a = embed(al, n, dims)
    ad = a.conj().T.tocsr()
    d = int(np.prod(dims))
    h = m["delta_c"] * (ad @ a) + m["eps"] * (a + ad)
    for i in range(n):
        h = h + 0.5 * m["delta_a"][i] * szi[i]
        h = h + m["g"][i] * (a @ smi[i].conj().T + ad @ smi[i])
        for j in range(i + 1, n):
            if m["zz"][i, j] != 0.0:
                h = h + m["zz"][i, j] * (szi[i] @ szi[j])
    jumps = []
    if m["kappa"] > 0:
        jumps.append(np.sqrt(m["kappa"]) * a)
    for i in range(n):
        if m["gamma"][i] > 0:
            jumps.append(np.sqrt(m["gamma"][i]) * smi[i])
        if m["gamma_phi"][i] > 0:
            jumps.append(np.sqrt(m["gamma_phi"][i] / 2.0) * szi[i])
    return d, sp.csr_matrix(h), jumps


def liouvillian(d, h, jumps):
    """Column stacking: vec(AρB) = (Bᵀ ⊗ A) vec(ρ)."""
    eye = sp.identity(d, dtype=complex, format="csr")
    lv = -1j * (sp.kron(eye, h) - sp.kron(h.T, eye))
    for l in jumps:
        ldl = (l.conj().T @ l).tocsr()
        lv = lv + sp.kron(l.conj(), l) - 0.5 * sp.kron(eye, ldl) - 0.5 * sp.kron(ldl.T, eye)
    return sp.csr_matrix(lv)


def initial_rho(m):
    psi = np.array([1.0 + 0j])
    for s in m["spins"]:
        psi = np.kron(psi, np.array([0, 1]) if s > 0 else np.array([1, 0]))
    vac = np.zeros(m["levels"])
    vac[0] = 1.0
    psi = np.kron(psi, vac).astype(complex)
    return np.outer(psi, psi.conj())


def observables_from_diag(m, diag):
    """⟨σᶻᵢ⟩ (rows i) and ⟨a†a⟩ from the diagonals diag[t, r] of ρ(t)."""
    n, lv = m["n"], m["levels"]
    d = diag.shape[1]
    r = np.arange(d)
    sz = np.empty((n, diag.shape[0]))
    for i in range(n):
        stride = lv * 2 ** (n - 1 - i)
        s = np.where((r // stride) % 2 == 1, 1.0, -1.0)
        sz[i] = diag.real @ s
    nph = diag.real @ (r % lv).astype(float)
    return sz, nph


def run_scipy(m):
    t0 = time.perf_counter()
    d, h, jumps = operators(m)
    lv = liouvillian(d, h, jumps)
    build = time.perf_counter() - t0
    y0 = initial_rho(m).flatten(order="F")
    nfev = 0

    def f(_t, y):
        nonlocal nfev
        nfev += 1
        return lv @ y

    t0 = time.perf_counter()
    sol = solve_ivp(
        f, (m["times"][0], m["times"][-1]), y0, method="RK45", t_eval=m["times"], rtol=m["rtol"], atol=m["atol"]
    )
    wall = time.perf_counter() - t0
    assert sol.success, sol.message
    diag = sol.y[:: d + 1, :].T  # ρ_rr at index r + r·d in either stacking
    sz, nph = observables_from_diag(m, diag)
    return {
        "d": d,
        "liouvillian_nnz": int(lv.nnz),
        "build_seconds": build,
        "wall_seconds": wall,
        "rhs_evaluations": nfev,
        "spin_z": sz,
        "photon_number": nph,
    }


# ------------------------------------------------------------------------------------------------
# cavern


def run_cavern(binary, config, threads, out_dir):
    import h5py

    out = Path(out_dir) / f"e2e-t{threads}.h5"
    t0 = time.perf_counter()
    subprocess.run([str(binary), "run", str(config), "-o", str(out), "--quiet", "--threads", str(threads)], check=True)
    process = time.perf_counter() - t0
    with h5py.File(out, "r") as f:
        solver = dict(f["solver"].attrs)
        res = {
            "process_seconds": process,
            "wall_seconds": float(solver["wall_seconds"]),
            "threads": int(solver["threads"]),
            "steps": int(solver["steps"]),
            "rejected_steps": int(solver["rejected_steps"]),
            "rhs_evaluations": int(solver["rhs_evaluations"]),
            "spin_z": np.array(f["observables/spin_z"]),
            "photon_number": np.array(f["observables/photon_number"])[0],
            "time": np.array(f["time"]),
        }
    return res


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--config", default=str(ROOT / "benches" / "e2e6.toml"))
    ap.add_argument("--cavern", default=str(ROOT / "target" / "release" / "cavern"))
    ap.add_argument("--no-build", action="store_true", help="do not run cargo build --release first")
    ap.add_argument("--repeat", type=int, default=3, help="cavern runs per thread count (median reported)")
    ap.add_argument("--scipy-repeat", type=int, default=2, help="SciPy integrations (median and min reported)")
    ap.add_argument("--json", default=str(ROOT / "target" / "perf" / "e2e_vs_scipy.json"))
    args = ap.parse_args()

    env = blas_info()
    print(f"python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}")
    print(f"BLAS environment (recorded, not changed): {env}")
    print(f"load average before: {os.getloadavg()}")

    if not args.no_build:
        subprocess.run(["cargo", "build", "--release", "--quiet"], cwd=ROOT, check=True)
    cfg = tomllib.loads(Path(args.config).read_text())
    m = model_from_config(cfg)

    cav = {}
    with tempfile.TemporaryDirectory() as tmp:
        for t in (1, 2):
            runs = [run_cavern(args.cavern, args.config, t, tmp) for _ in range(args.repeat)]
            best = runs[0]
            cav[t] = {
                "runs": runs,
                "wall_median": statistics.median(r["wall_seconds"] for r in runs),
                "wall_min": min(r["wall_seconds"] for r in runs),
                "process_median": statistics.median(r["process_seconds"] for r in runs),
                "result": best,
            }
            print(
                f"cavern --threads {t}: solver wall {[round(r['wall_seconds'], 3) for r in runs]} s "
                f"(median {cav[t]['wall_median']:.3f}), process {cav[t]['process_median']:.3f} s, "
                f"{best['steps']} steps, {best['rejected_steps']} rejected, {best['rhs_evaluations']} RHS calls"
            )

    print("SciPy reference: building the Liouvillian and integrating (RK45) ...", flush=True)
    refs = []
    for _ in range(args.scipy_repeat):
        refs.append(run_scipy(m))
        r = refs[-1]
        print(
            f"scipy: d = {r['d']}, Liouvillian {r['d'] ** 2}² with {r['liouvillian_nnz']} non-zeros, "
            f"build {r['build_seconds']:.2f} s, solve_ivp {r['wall_seconds']:.2f} s, {r['rhs_evaluations']} RHS calls",
            flush=True,
        )
    ref = refs[0]
    ref["wall_runs"] = [r["wall_seconds"] for r in refs]
    ref["wall_median"] = statistics.median(ref["wall_runs"])
    ref["wall_min"] = min(ref["wall_runs"])

    # agreement: both integrators control local error per element at atol + rtol·|ρ|; an observable
    # sums d diagonal elements with weights ≤ max|o|, and global error grows over the run, so allow
    # K·(rtol + d·atol)·max|o| with K = 10 for the growth of local into global error.
    d = ref["d"]
    res = cav[1]["result"]
    assert np.allclose(res["time"], m["times"], rtol=0, atol=1e-12)
    ok = True
    report = {}
    for name, omax in (("spin_z", 1.0), ("photon_number", float(m["levels"] - 1))):
        tol = 10.0 * (m["rtol"] + d * m["atol"]) * omax
        diffs = {t: float(np.max(np.abs(cav[t]["result"][name] - ref[name]))) for t in (1, 2)}
        diff12 = float(np.max(np.abs(cav[1]["result"][name] - cav[2]["result"][name])))
        good = all(v <= tol for v in diffs.values())
        ok &= good
        report[name] = {"max_abs_diff_vs_scipy": diffs, "diff_1_vs_2_threads": diff12, "tolerance": tol, "ok": good}
        print(
            f"{name}: max |cavern − scipy| = {diffs[1]:.2e} (1 thread), {diffs[2]:.2e} (2 threads); "
            f"1 vs 2 threads {diff12:.1e}; tolerance {tol:.1e}: {'OK' if good else 'MISMATCH'}"
        )
    # a glance at the dynamics (so that agreement is not trivial)
    print(
        f"range over the run: <σz_0> {ref['spin_z'][0].min():+.3f} … {ref['spin_z'][0].max():+.3f}, "
        f"<a†a> {ref['photon_number'].min():.4f} … {ref['photon_number'].max():.4f}"
    )

    s1 = ref["wall_median"] / cav[1]["wall_median"]
    s2 = ref["wall_median"] / cav[2]["wall_median"]
    m1 = ref["wall_min"] / cav[1]["wall_min"]
    m2 = ref["wall_min"] / cav[2]["wall_min"]
    p1 = ref["wall_median"] / cav[1]["process_median"]
    thr = cav[1]["wall_median"] / cav[2]["wall_median"]
    thr_min = cav[1]["wall_min"] / cav[2]["wall_min"]
    print()
    print("| solver | wall time median (s) | min (s) | speedup vs SciPy (median; min) |")
    print("|---|---:|---:|---:|")
    print(
        f"| SciPy solve_ivp RK45 (sparse Liouvillian) | {ref['wall_median']:.3f} | {ref['wall_min']:.3f} | 1.0× |"
    )
    print(
        f"| cavern --threads 1 (solver) | {cav[1]['wall_median']:.3f} | {cav[1]['wall_min']:.3f} | {s1:.1f}×; {m1:.1f}× |"
    )
    print(
        f"| cavern --threads 2 (solver) | {cav[2]['wall_median']:.3f} | {cav[2]['wall_min']:.3f} | {s2:.1f}×; {m2:.1f}× |"
    )
    print(f"| cavern --threads 1 (whole process) | {cav[1]['process_median']:.3f} | | {p1:.1f}× |")
    print(f"\ncavern 1 → 2 threads: {thr:.2f}× (medians), {thr_min:.2f}× (minima)")
    print(f"load average after: {os.getloadavg()}")

    summary = {
        "config": str(args.config),
        "environment": env,
        "numpy_version": np.__version__,
        "scipy_version": scipy.__version__,
        "scipy": {k: v for k, v in ref.items() if k not in ("spin_z", "photon_number")},
        "cavern": {
            t: {k: v for k, v in c.items() if k != "result" and k != "runs"}
            | {"wall_runs": [r["wall_seconds"] for r in c["runs"]], "steps": c["result"]["steps"],
               "rhs_evaluations": c["result"]["rhs_evaluations"]}
            for t, c in cav.items()
        },
        "agreement": report,
        "speedup_vs_scipy": {"threads1": s1, "threads2": s2, "threads1_min": m1, "threads2_min": m2},
        "thread_speedup_1_to_2": thr,
        "thread_speedup_1_to_2_min": thr_min,
    }
    Path(args.json).parent.mkdir(parents=True, exist_ok=True)
    Path(args.json).write_text(json.dumps(summary, indent=2, default=str))
    print(f"(summary written to {args.json})")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
