#!/usr/bin/env python3
"""Steady-state solvers of cavern against SciPy's sparse direct solver on the same Liouvillian.

For each size the script runs, alternating A/B/A/B (--repeat times each):

A. `cavern run CONFIG` with `[steady_state] method = "direct"` (or "iterative"), relaxation_rates = 0,
   reading the solve's own wall time (/steady_state attribute wall_seconds), the LU statistics
   (factor_nnz_l/u, factor_bytes = predicted bytes) and the process's peak resident memory
   (/usr/bin/time -f %M);
B. a SciPy worker (a subprocess of this script, so that its peak memory and a time limit can be
   measured and enforced) that builds the same model *independently* from the config values
   (benches/e2e_vs_scipy.py: H, jump operators, column-stacking Liouvillian), replaces the
   equation of ρ₀₀ by the trace condition, and calls scipy.sparse.linalg.splu with the options
   given by --scipy-spec (default MMD_AT_PLUS_A with SymmetricMode and diag_pivot_thresh 0.01,
   the fastest SuperLU set-up measured for these matrices; COLAMD, SciPy's default, was slower).
   It reports the factorisation time, nnz(L) + nnz(U), peak memory, and the steady-state
   observables.

When both finish, ⟨σᶻᵢ⟩ and ⟨a†a⟩ of the two steady states are compared (independent builds of
the model, so this is also a correctness check). A SciPy run that exceeds --scipy-timeout seconds
is stopped and reported as such; one that outgrows --scipy-memory GiB (address-space cap, default
16) reports its MemoryError.

Usage:
  python3 benches/steady_vs_scipy.py --levels 5 --repeat 2            # d = 80, both, A/B/A/B
  python3 benches/steady_vs_scipy.py --levels 16 --repeat 1 --scipy-timeout 900   # d = 256
  python3 benches/steady_vs_scipy.py --sites 6 --levels 16 --method iterative --tolerance 1e-8 \
      --repeat 1 --scipy-timeout 1200                                   # d = 1024, GMRES vs splu
Options: --config (default benches/steady256.toml; --sites/--levels override its size),
--cavern PATH (default target/release/cavern, built unless --no-build).
Writes target/perf/steady_vs_scipy-d{d}.json.
"""

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
import tomllib
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "benches"))
from e2e_vs_scipy import blas_info, liouvillian, model_from_config, observables_from_diag, operators  # noqa: E402


def sized_config(base, sites, levels, method, tolerance=None):
    """The base config with the requested number of sites and levels (same parameters)."""
    text = Path(base).read_text()
    cfg = tomllib.loads(text)
    n0 = cfg["sites"]["count"]
    sites = sites or n0
    levels = levels or cfg["modes"][0]["levels"]
    lines = []
    for line in text.splitlines():
        if line.startswith("count ="):
            line = f"count = {sites}"
        elif line.startswith("levels ="):
            line = f"levels = {levels}"
        elif line.startswith("method ="):
            line = f'method = "{method}"'
            if tolerance is not None:
                line += f"\ntolerance = {tolerance}"
        lines.append(line)
    text = "\n".join(lines) + "\n"
    if sites != n0:
        # coupling and zz rows for the new site count (pattern 0.30/0.25 and mirror pairs)
        g = ", ".join(f"[{0.30 if i % 2 == 0 else 0.25}]" for i in range(sites))
        zz = [[0.025 if j == sites - 1 - i and i != j else 0.0 for j in range(sites)] for i in range(sites)]
        text = text.replace(text[text.index("strength ="): text.index("\n", text.index("strength ="))], f"strength = [{g}]")
        start = text.index("zz = [[")
        end = text.index("]]", start) + 2
        text = text[:start] + "zz = " + json.dumps(zz) + text[end:]
        spins = "".join("+" if i % 2 == 0 else "-" for i in range(sites))
        text = text.replace(text[text.index("spins ="): text.index("\n", text.index("spins ="))], f'spins = "{spins}"')
        text = "\n".join(l for l in text.splitlines() if not l.startswith("index =") or int(l.split("=")[1]) < sites)
    return text


def scipy_worker(config, spec, limit_gib):
    """Runs in a subprocess: build, factorise, solve; prints one JSON line."""
    import resource

    import scipy.sparse as sp
    import scipy.sparse.linalg as sla

    if limit_gib > 0:
        # address-space cap: a factorisation that outgrows it fails with MemoryError (reported)
        # instead of pushing the machine into the OOM killer
        lim = int(limit_gib * 2**30)
        resource.setrlimit(resource.RLIMIT_AS, (lim, lim))
    cfg = tomllib.loads(Path(config).read_text())
    m = model_from_config(cfg)
    t0 = time.perf_counter()
    d, h, jumps = operators(m)
    lv = liouvillian(d, h, jumps).tocsr()
    # replace the equation of ρ₀₀ (row 0 in either stacking) by the trace condition
    keep = np.ones(d * d)
    keep[0] = 0.0
    trace_row = sp.csr_matrix((np.ones(d), (np.zeros(d, dtype=int), np.arange(d) * (d + 1))), shape=(d * d, d * d))
    a = sp.csc_matrix(sp.diags(keep) @ lv + trace_row)
    build = time.perf_counter() - t0
    kw = {}
    perm = spec
    if spec.endswith("+sym"):
        perm = spec[:-4]
        kw = {"diag_pivot_thresh": 0.01, "options": {"SymmetricMode": True}}
    t0 = time.perf_counter()
    try:
        lu = sla.splu(a, permc_spec=perm, **kw)
    except (MemoryError, RuntimeError) as e:
        print(json.dumps({"d": d, "nnz": int(a.nnz), "build_seconds": build,
                          "error": f"{type(e).__name__}: {e}", "failed_after_seconds": time.perf_counter() - t0,
                          "peak_rss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}))
        return
    factor = time.perf_counter() - t0
    b = np.zeros(d * d, dtype=complex)
    b[0] = 1.0
    t0 = time.perf_counter()
    x = lu.solve(b)
    solve = time.perf_counter() - t0
    rho = x.reshape(d, d, order="F")
    rho = 0.5 * (rho + rho.conj().T)
    rho /= np.trace(rho).real
    sz, nph = observables_from_diag(m, np.diag(rho)[None, :])
    print(json.dumps({
        "d": d,
        "nnz": int(a.nnz),
        "build_seconds": build,
        "factor_seconds": factor,
        "solve_seconds": solve,
        "nnz_l": int(lu.L.nnz),
        "nnz_u": int(lu.U.nnz),
        # complex128 values + int32 row indices, as SuperLU stores them
        "factor_bytes": int((lu.L.nnz + lu.U.nnz) * 20),
        "peak_rss_bytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
        "spin_z": sz[:, 0].tolist(),
        "photon_number": float(nph[0]),
    }))


def timed(cmd, timeout):
    """Run cmd under /usr/bin/time (and coreutils `timeout`, which also stops cmd's children);
    returns (completed or None on timeout, peak RSS bytes, wall)."""
    limit = ["timeout", "-s", "KILL", str(int(timeout))] if timeout else []
    with tempfile.NamedTemporaryFile("r", suffix=".txt") as tf:
        t0 = time.perf_counter()
        p = subprocess.run(["/usr/bin/time", "-f", "%M", "-o", tf.name] + limit + cmd, capture_output=True,
                           text=True)
        wall = time.perf_counter() - t0
        if timeout and p.returncode in (124, 137, -9):
            return None, None, wall
        if p.returncode != 0:
            sys.exit(f"{' '.join(cmd)} failed ({p.returncode}):\n{p.stderr}")
        rss = int(Path(tf.name).read_text().split()[-1]) * 1024
    return p, rss, wall


def run_cavern(binary, config_text, out_dir, threads):
    import h5py

    cfg = Path(out_dir) / "steady.toml"
    cfg.write_text(config_text)
    out = Path(out_dir) / "steady.h5"
    p, rss, wall = timed([str(binary), "run", str(cfg), "-o", str(out), "--quiet", "--threads", str(threads)], None)
    with h5py.File(out, "r") as f:
        g = f["steady_state"]
        a = dict(g.attrs)
        res = {
            "process_seconds": wall,
            "solve_seconds": float(a["wall_seconds"]),
            "method": str(a["method"]),
            "relative_residual": float(a["relative_residual"]),
            "iterations": int(a["iterations"]),
            "peak_rss_bytes": rss,
            "spin_z": np.array(g["spin_z"])[:, 0].tolist() if np.array(g["spin_z"]).ndim == 2 else np.array(g["spin_z"]).tolist(),
            "photon_number": float(np.ravel(np.array(g["photon_number"]))[0]),
        }
        for k in ("factor_nnz_l", "factor_nnz_u", "factor_bytes"):
            if k in a:
                res[k] = int(a[k])
        if "preconditioner" in a:
            res["preconditioner"] = str(a["preconditioner"])
        if "fallbacks" in a:
            res["fallbacks"] = [str(x) for x in a["fallbacks"]]
    return res


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--config", default=str(ROOT / "benches" / "steady256.toml"))
    ap.add_argument("--sites", type=int, default=None)
    ap.add_argument("--levels", type=int, default=None)
    ap.add_argument("--method", default="direct", choices=["direct", "iterative"])
    ap.add_argument("--tolerance", type=float, default=None,
                    help="[steady_state] tolerance for the iterative solver (default: cavern's 1e-11)")
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--scipy-spec", default="MMD_AT_PLUS_A+sym")
    ap.add_argument("--scipy-timeout", type=float, default=1800.0)
    ap.add_argument("--scipy-memory", type=float, default=16.0,
                    help="address-space cap of the SciPy process in GiB (0 = none)")
    ap.add_argument("--no-scipy", action="store_true")
    ap.add_argument("--no-build", action="store_true")
    ap.add_argument("--cavern", default=str(ROOT / "target" / "release" / "cavern"))
    ap.add_argument("--scipy-worker", nargs=3, metavar=("CONFIG", "SPEC", "GIB"), help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.scipy_worker:
        scipy_worker(args.scipy_worker[0], args.scipy_worker[1], float(args.scipy_worker[2]))
        return
    if not args.no_build:
        subprocess.run(["cargo", "build", "--release", "--quiet"], cwd=ROOT, check=True)
    text = sized_config(args.config, args.sites, args.levels, args.method, args.tolerance)
    cfg = tomllib.loads(text)
    d = 2 ** cfg["sites"]["count"] * cfg["modes"][0]["levels"]
    print(f"d = {d} ({d * d} unknowns), cavern method {args.method}, {os.cpu_count()} cores; BLAS {blas_info()}")
    runs = {"cavern": [], "scipy": []}
    with tempfile.TemporaryDirectory() as tmp:
        cfg_path = Path(tmp) / "model.toml"
        cfg_path.write_text(text)
        for rep in range(args.repeat):
            r = run_cavern(args.cavern, text, tmp, args.threads)
            runs["cavern"].append(r)
            print(f"[{rep}] cavern {r['method']}: solve {r['solve_seconds']:.2f} s (process {r['process_seconds']:.2f} s), "
                  f"peak RSS {r['peak_rss_bytes'] / 2**20:.0f} MiB, predicted {r.get('factor_bytes', 0) / 2**20:.0f} MiB, "
                  f"nnz L {r.get('factor_nnz_l')}, U {r.get('factor_nnz_u')}, rel. residual {r['relative_residual']:.1e}, "
                  f"iterations {r['iterations']}, preconditioner {r.get('preconditioner', '-')}", flush=True)
            if args.no_scipy:
                continue
            p, rss, wall = timed([sys.executable, __file__, "--scipy-worker", str(cfg_path), args.scipy_spec,
                                  str(args.scipy_memory)], args.scipy_timeout)
            if p is None:
                runs["scipy"].append({"timeout": args.scipy_timeout})
                print(f"[{rep}] scipy splu ({args.scipy_spec}): stopped after {wall:.0f} s without finishing", flush=True)
                continue
            s = json.loads(p.stdout.strip().splitlines()[-1])
            s["process_peak_rss_bytes"] = rss
            runs["scipy"].append(s)
            if "error" in s:
                print(f"[{rep}] scipy splu ({args.scipy_spec}): failed after {s['failed_after_seconds']:.0f} s "
                      f"(cap {args.scipy_memory} GiB): {s['error']}; peak RSS {rss / 2**20:.0f} MiB", flush=True)
                continue
            print(f"[{rep}] scipy splu ({args.scipy_spec}): factor {s['factor_seconds']:.2f} s, solve "
                  f"{s['solve_seconds']:.2f} s, nnz L+U {s['nnz_l'] + s['nnz_u']} "
                  f"({s['factor_bytes'] / 2**20:.0f} MiB), peak RSS {rss / 2**20:.0f} MiB", flush=True)
            dz = np.max(np.abs(np.array(r["spin_z"]) - np.array(s["spin_z"])))
            dn = abs(r["photon_number"] - s["photon_number"])
            print(f"      steady states: max |Δ⟨σᶻᵢ⟩| = {dz:.1e}, |Δ⟨a†a⟩| = {dn:.1e}", flush=True)
            assert dz < 1e-8 and dn < 1e-8, "cavern and SciPy steady states disagree"
    cav = [r["solve_seconds"] for r in runs["cavern"]]
    print(f"cavern solve: median {statistics.median(cav):.2f} s, min {min(cav):.2f} s over {len(cav)} runs")
    sci = [s["factor_seconds"] + s["solve_seconds"] for s in runs["scipy"] if "factor_seconds" in s]
    if sci:
        print(f"scipy factor+solve: median {statistics.median(sci):.2f} s, min {min(sci):.2f} s over {len(sci)} runs")
    out = ROOT / "target" / "perf"
    out.mkdir(parents=True, exist_ok=True)
    (out / f"steady_vs_scipy-d{d}.json").write_text(json.dumps({"d": d, "runs": runs}, indent=1))


if __name__ == "__main__":
    main()
