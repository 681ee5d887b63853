"""Independent reference for cavern's end-to-end test: builds the Lindblad generator of a small
spin-cavity network with NumPy (dense Kronecker products, column-stacking vectorisation
vec(A rho B) = (B^T kron A) vec(rho)) and propagates it exactly with SciPy's matrix exponential
(scipy.linalg.expm; Al-Mohy & Higham, SIAM J. Matrix Anal. Appl. 31, 970 (2009)).

Reads a JSON spec on stdin (angular units, hbar = 1, conventions of cavern's README) and prints
JSON with expectation values at the requested times. Written independently of cavern's code.
"""
import json
import sys

import numpy as np
from scipy.linalg import expm


def main():
    spec = json.load(sys.stdin)
    n = len(spec["sites"])
    levels = spec["mode"]["levels"]
    dims = [2] * n + [levels]
    d = int(np.prod(dims))

    def embed(op, k):
        mats = [np.eye(x) for x in dims]
        mats[k] = op
        out = mats[0]
        for m in mats[1:]:
            out = np.kron(out, m)
        return out

    # local operators in the (g, e) basis, sigma_z = diag(-1, +1), sigma_minus = |g><e|
    sm = np.array([[0, 1], [0, 0]], dtype=complex)
    sz = np.diag([-1.0, 1.0]).astype(complex)
    sx = np.array([[0, 1], [1, 0]], dtype=complex)
    a_loc = np.diag(np.sqrt(np.arange(1, levels)), 1).astype(complex)

    S_m = [embed(sm, i) for i in range(n)]
    S_z = [embed(sz, i) for i in range(n)]
    S_x = [embed(sx, i) for i in range(n)]
    a = embed(a_loc, n)
    ad = a.conj().T

    mode = spec["mode"]
    H = mode["detuning"] * ad @ a + mode["drive"] * (a + ad)
    jumps = []
    for i, s in enumerate(spec["sites"]):
        H = H + s["detuning"] / 2 * S_z[i] + s["rabi"] / 2 * S_x[i]
        g = s["coupling"]
        H = H + g * (a @ S_m[i].conj().T + ad @ S_m[i])
        if s["decay"] > 0:
            jumps.append(np.sqrt(s["decay"]) * S_m[i])
        if s["dephasing"] > 0:
            jumps.append(np.sqrt(s["dephasing"] / 2) * S_z[i])
        if s["pump"] > 0:
            jumps.append(np.sqrt(s["pump"]) * S_m[i].conj().T)
    for i in range(n):
        for j in range(i + 1, n):
            H = H + spec["zz"] * S_z[i] @ S_z[j]
            H = H + spec["flip_flop"] * (S_m[i].conj().T @ S_m[j] + S_m[i] @ S_m[j].conj().T)
    kappa, nth = mode["loss"], mode["thermal"]
    if kappa * (1 + nth) > 0:
        jumps.append(np.sqrt(kappa * (1 + nth)) * a)
    if kappa * nth > 0:
        jumps.append(np.sqrt(kappa * nth) * ad)

    eye = np.eye(d)
    # column stacking: vec(A X B) = kron(B.T, A) vec(X)
    L = -1j * (np.kron(eye, H) - np.kron(H.T, eye))
    for J in jumps:
        JdJ = J.conj().T @ J
        L = L + np.kron(J.conj(), J) - 0.5 * np.kron(eye, JdJ) - 0.5 * np.kron(JdJ.T, eye)

    # initial state: spins from signs (+1 = |e>), mode coherent alpha truncated and renormalised
    psi = np.array([1.0 + 0j])
    for sgn in spec["spins"]:
        psi = np.kron(psi, np.array([0, 1.0]) if sgn > 0 else np.array([1.0, 0]))
    alpha = complex(*spec["alpha"])
    c = np.zeros(levels, dtype=complex)
    c[0] = 1.0
    for k in range(1, levels):
        c[k] = c[k - 1] * alpha / np.sqrt(k)
    c /= np.linalg.norm(c)
    psi = np.kron(psi, c)
    rho = np.outer(psi, psi.conj())

    times = spec["times"]
    dt = times[1] - times[0]
    assert np.allclose(np.diff(times), dt), "equally spaced times expected"
    P = expm(L * dt)
    v = rho.reshape(-1, order="F")
    out = {"spin_z": [[] for _ in range(n)], "spin_x": [[] for _ in range(n)],
           "photon_number": [], "field_re": [], "field_im": [], "purity": []}
    for k in range(len(times)):
        if k > 0:
            v = P @ v
        r = v.reshape(d, d, order="F")
        for i in range(n):
            out["spin_z"][i].append(np.trace(S_z[i] @ r).real)
            out["spin_x"][i].append(np.trace(S_x[i] @ r).real)
        out["photon_number"].append(np.trace(ad @ a @ r).real)
        f = np.trace(a @ r)
        out["field_re"].append(f.real)
        out["field_im"].append(f.imag)
        out["purity"].append(np.trace(r @ r).real)
    json.dump(out, sys.stdout)


if __name__ == "__main__":
    main()
