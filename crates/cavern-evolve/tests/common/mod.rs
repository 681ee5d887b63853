//! Shared helpers of the integration tests: running an evolution, the solver error budget, and a
//! small dense reference implementation (Kronecker products, Lindbladian superoperator, matrix
//! exponential, fixed-step RK4) written independently of the library.

#![allow(dead_code)] // each test file uses a different subset

pub mod python;

use cavern_evolve::{evolve_density, DopriOptions, Par, Stats};
use cavern_model::{MasterEquation, C64};

pub const ZERO: C64 = C64::new(0.0, 0.0);
pub const ONE: C64 = C64::new(1.0, 0.0);
pub const I: C64 = C64::new(0.0, 1.0);

/// Solver options with the given tolerances (sequential, so tests do not fight over threads).
pub fn opts(rtol: f64, atol: f64) -> DopriOptions {
    DopriOptions {
        rtol,
        atol,
        par: Par::Seq,
        ..Default::default()
    }
}

/// Result of [`run`]: ρ at every sample time, and the work counters.
pub struct Run {
    pub times: Vec<f64>,
    pub states: Vec<Vec<C64>>,
    pub stats: Stats,
    pub opts: DopriOptions,
    pub d: usize,
}

/// Evolve `rho0` with `evolve_density` and keep ρ at each of `times`.
pub fn run(me: &MasterEquation, rho0: &[C64], times: &[f64], opts: DopriOptions) -> Run {
    let mut states = vec![Vec::new(); times.len()];
    let stats = evolve_density(me, rho0, times, opts, |k, t, rho, _| {
        assert_eq!(t, times[k]);
        states[k] = rho.to_vec();
    })
    .expect("evolution failed");
    Run {
        times: times.to_vec(),
        states,
        stats,
        opts,
        d: me.space.dim(),
    }
}

/// Accumulation allowance of [`Run::tol`]: how many local tolerances the global error of an
/// observable may reach. See [`Run::tol`] for the reasoning; fixed before any test was run.
pub const ACCUMULATION: f64 = 100.0;

impl Run {
    /// Allowed error of an observable Tr(Oρ) whose value is at most `scale` in magnitude and whose
    /// matrix entries sum to `entries` = Σ|O_rc| (e.g. 1 for a population, Σₙ n ≈ L²/2 for a†a),
    /// derived from the solver tolerances:
    ///
    /// - Dormand–Prince accepts a step when the weighted RMS of its error estimate is ≤ 1, i.e.
    ///   each component's local error is about atol + rtol·|ρ_rc| or less; an observable summing
    ///   those components is then off by about rtol·scale + atol·entries per step;
    /// - the propagated solution is one order higher than the estimate (local extrapolation), so
    ///   its true local error is well below that, and the Lindblad flow is non-expansive in trace
    ///   norm (Ruskai, Rev. Math. Phys. 6, 1147 (1994); from memory), so local errors do not grow.
    ///   For such problems the global error stays of the order of the tolerance ("tolerance
    ///   proportionality": Hairer, Nørsett & Wanner, Solving Ordinary Differential Equations I,
    ///   2nd ed. 1993, §II.4; from memory);
    /// - [`ACCUMULATION`] = 100 allows for accumulation over the run and for the interpolant at
    ///   sample times.
    ///
    /// [`Run::worst_case_trace_norm`] is a strict (and far looser) bound, reported for context.
    pub fn tol(&self, scale: f64, entries: f64) -> f64 {
        ACCUMULATION * (self.opts.rtol * scale + self.opts.atol * entries)
    }

    /// Strict worst-case bound on the trace-norm error ‖ρ_num(t) − ρ(t)‖₁ at any sample time,
    /// assuming only that the embedded estimate bounds each local error ("Lady Windermere's fan":
    /// Hairer, Nørsett & Wanner, §II.3; from memory): an accepted step has Σᵢ|eᵢ|² ≤
    /// n(atol + rtol)² over n = d² components (every |ρ_rc| ≤ 1), i.e. Frobenius norm ≤
    /// d(atol + rtol) and trace norm ≤ √d·d(atol + rtol); the trace-norm-contractive flow does not
    /// amplify it, so the global error is at most the sum over accepted steps (plus one for the
    /// interpolant). An observable is off by at most its operator norm times this.
    pub fn worst_case_trace_norm(&self) -> f64 {
        let d = self.d as f64;
        (self.stats.steps + 1) as f64 * d.sqrt() * d * (self.opts.atol + self.opts.rtol)
    }
}

/// Largest |a − b| over two equally long complex slices.
pub fn max_diff(a: &[C64], b: &[C64]) -> f64 {
    assert_eq!(a.len(), b.len());
    a.iter()
        .zip(b)
        .map(|(x, y)| (x - y).norm())
        .fold(0.0, f64::max)
}

// ---------------------------------------------------------------------------------------------
// Dense reference implementation (row-major n×n complex matrices), independent of the library.
// ---------------------------------------------------------------------------------------------

/// n×n identity.
pub fn eye(n: usize) -> Vec<C64> {
    let mut m = vec![ZERO; n * n];
    for i in 0..n {
        m[i * n + i] = ONE;
    }
    m
}

/// Kronecker product A ⊗ B (A is na×na, B is nb×nb), first factor most significant.
pub fn kron(a: &[C64], na: usize, b: &[C64], nb: usize) -> Vec<C64> {
    let n = na * nb;
    let mut out = vec![ZERO; n * n];
    for i in 0..na {
        for j in 0..na {
            for k in 0..nb {
                for l in 0..nb {
                    out[(i * nb + k) * n + j * nb + l] = a[i * na + j] * b[k * nb + l];
                }
            }
        }
    }
    out
}

/// Kronecker product of a list of (matrix, dimension) factors.
pub fn kron_all(factors: &[(Vec<C64>, usize)]) -> Vec<C64> {
    let mut m = vec![ONE];
    let mut n = 1;
    for (f, k) in factors {
        m = kron(&m, n, f, *k);
        n *= k;
    }
    m
}

/// Matrix product A·B.
pub fn mm(a: &[C64], b: &[C64], n: usize) -> Vec<C64> {
    let mut out = vec![ZERO; n * n];
    for i in 0..n {
        for k in 0..n {
            let x = a[i * n + k];
            if x == ZERO {
                continue;
            }
            for j in 0..n {
                out[i * n + j] += x * b[k * n + j];
            }
        }
    }
    out
}

/// A†.
pub fn hermitian_adjoint(a: &[C64], n: usize) -> Vec<C64> {
    let mut out = vec![ZERO; n * n];
    for i in 0..n {
        for j in 0..n {
            out[j * n + i] = a[i * n + j].conj();
        }
    }
    out
}

/// Σ cₖ Aₖ.
pub fn lin(terms: &[(C64, &[C64])]) -> Vec<C64> {
    let mut out = vec![ZERO; terms[0].1.len()];
    for (c, a) in terms {
        for (o, x) in out.iter_mut().zip(a.iter()) {
            *o += c * x;
        }
    }
    out
}

/// y = A x.
pub fn matvec(a: &[C64], x: &[C64]) -> Vec<C64> {
    let n = x.len();
    (0..n)
        .map(|i| (0..n).map(|j| a[i * n + j] * x[j]).sum())
        .collect()
}

pub fn re(x: f64) -> C64 {
    C64::new(x, 0.0)
}

/// Local operators in the documented basis: spin (|g⟩, |e⟩) = (0, 1); Fock |0⟩ … |levels−1⟩.
pub mod ops {
    use super::{ONE, ZERO};
    use cavern_model::C64;

    /// σ⁻ = |g⟩⟨e|: the only entry is row g = 0, column e = 1.
    pub fn sm() -> Vec<C64> {
        vec![ZERO, ONE, ZERO, ZERO]
    }
    /// σ⁺ = |e⟩⟨g|.
    pub fn sp() -> Vec<C64> {
        vec![ZERO, ZERO, ONE, ZERO]
    }
    /// σᶻ = diag(−1, +1).
    pub fn sz() -> Vec<C64> {
        vec![-ONE, ZERO, ZERO, ONE]
    }
    /// σˣ.
    pub fn sx() -> Vec<C64> {
        vec![ZERO, ONE, ONE, ZERO]
    }
    /// a on `l` levels, plainly truncated: a|n⟩ = √n|n−1⟩.
    pub fn a(l: usize) -> Vec<C64> {
        let mut m = vec![ZERO; l * l];
        for n in 1..l {
            m[(n - 1) * l + n] = C64::new((n as f64).sqrt(), 0.0);
        }
        m
    }
}

/// dρ/dt = −i[H, ρ] + Σ (LρL† − ½{L†L, ρ}) for dense H and jump operators (each with its √rate).
pub fn lindblad_dense(h: &[C64], jumps: &[Vec<C64>], rho: &[C64], d: usize) -> Vec<C64> {
    let hr = mm(h, rho, d);
    let rh = mm(rho, h, d);
    let mut out = lin(&[(-I, &hr), (I, &rh)]);
    for l in jumps {
        let ld = hermitian_adjoint(l, d);
        let ldl = mm(&ld, l, d);
        let lrl = mm(&mm(l, rho, d), &ld, d);
        let a = mm(&ldl, rho, d);
        let b = mm(rho, &ldl, d);
        for k in 0..d * d {
            out[k] += lrl[k] - 0.5 * (a[k] + b[k]);
        }
    }
    out
}

/// The d²×d² Lindbladian superoperator acting on row-major vec(ρ), built column by column as
/// vec(𝓛(E_kl)) for the matrix units E_kl.
pub fn liouvillian(h: &[C64], jumps: &[Vec<C64>], d: usize) -> Vec<C64> {
    let n = d * d;
    let mut s = vec![ZERO; n * n];
    for col in 0..n {
        let mut e = vec![ZERO; n];
        e[col] = ONE;
        let v = lindblad_dense(h, jumps, &e, d);
        for row in 0..n {
            s[row * n + col] = v[row];
        }
    }
    s
}

/// Matrix exponential by scaling and squaring with a Taylor series (Moler & Van Loan, "Nineteen
/// dubious ways to compute the exponential of a matrix", SIAM Review 20, 801 (1978); from
/// memory): scale so that ‖A‖₁/2ˢ ≤ 1/2, sum the Taylor series until terms fall below 1e-18
/// relative (at most 40 terms; the remainder after k terms is ≤ 2·0.5ᵏ/k!), then square s times.
pub fn expm(a: &[C64], n: usize) -> Vec<C64> {
    let norm1 = (0..n)
        .map(|j| (0..n).map(|i| a[i * n + j].norm()).sum::<f64>())
        .fold(0.0, f64::max);
    let mut s = 0;
    while norm1 / 2f64.powi(s) > 0.5 {
        s += 1;
    }
    let scale = re(1.0 / 2f64.powi(s));
    let x: Vec<C64> = a.iter().map(|v| v * scale).collect();
    let mut sum = eye(n);
    let mut term = eye(n);
    for k in 1..=40 {
        term = mm(&term, &x, n);
        let f = re(1.0 / k as f64);
        term.iter_mut().for_each(|v| *v *= f);
        let tn = term.iter().map(|v| v.norm()).fold(0.0, f64::max);
        for (o, t) in sum.iter_mut().zip(&term) {
            *o += t;
        }
        if tn < 1e-18 {
            break;
        }
    }
    for _ in 0..s {
        sum = mm(&sum, &sum, n);
    }
    sum
}

/// Classical fixed-step RK4 (Kutta 1901; e.g. Hairer, Nørsett & Wanner, Solving ODEs I, §II.1;
/// from memory) for dy/dt = f(t, y) from t0 to t1 in `steps` equal steps.
pub fn rk4<F>(mut f: F, t0: f64, t1: f64, y0: &[C64], steps: usize) -> Vec<C64>
where
    F: FnMut(f64, &[C64]) -> Vec<C64>,
{
    let h = (t1 - t0) / steps as f64;
    let mut y = y0.to_vec();
    let axpy = |y: &[C64], k: &[C64], c: f64| -> Vec<C64> {
        y.iter().zip(k).map(|(a, b)| a + b * c).collect()
    };
    for s in 0..steps {
        let t = t0 + s as f64 * h;
        let k1 = f(t, &y);
        let k2 = f(t + h / 2.0, &axpy(&y, &k1, h / 2.0));
        let k3 = f(t + h / 2.0, &axpy(&y, &k2, h / 2.0));
        let k4 = f(t + h, &axpy(&y, &k3, h));
        for i in 0..y.len() {
            y[i] += (k1[i] + 2.0 * k2[i] + 2.0 * k3[i] + k4[i]) * (h / 6.0);
        }
    }
    y
}
