//! Steady states and relaxation rates (`cavern_evolve::steady`) against analytic results and an
//! independent dense reference.
//!
//! Error budgets. The analytic values below are exact for the *truncated* model (or the truncation
//! is bounded separately), so what remains is the solver error ‖ρ − ρₛₛ‖. It is bounded a
//! posteriori, rigorously, with the dense reference Liouvillian of `common` (built from the
//! definition, independently of the library): with A = 𝓛 with its first row replaced by the trace
//! functional and b = e₀, A is non-singular for a unique steady state and
//!
//! ‖ρ − ρₛₛ‖_F ≤ ‖Aρ − b‖₂ / σ_min(A),
//!
//! with σ_min from a dense SVD. The computed ‖Aρ − b‖₂ is itself off by at most the rounding of
//! the products, n·ε·‖|A||ρ|‖₂ (n terms per row; the standard bound for inner products, e.g.
//! Higham, Accuracy and Stability of Numerical Algorithms, §3.1; from memory), which is added.
//! An observable Tr(Oρ) is then off by at most ‖O‖_F times the bound. Each test also checks that
//! the bound is as small as the method promises (for the direct LU: n·ε·cond(A), the normwise
//! backward-stability estimate, Higham §9; from memory), so a broken solver cannot pass with a
//! large but "valid" bound.

mod common;

use cavern_evolve::steady::LuStrategy;
use cavern_evolve::steady::{self, frozen};
use cavern_evolve::{
    lindblad, DirectOptions, EvolutionOptions, GmresOptions, LindbladRhs, Par, RelaxationOptions,
    SteadyError, SteadyMethod, SteadyOptions,
};
use cavern_model::{CouplingForm, Envelope, MasterEquation, ModeParams, Network, SiteParams, C64};
use common::{max_diff, ONE, ZERO};

const EPS: f64 = f64::EPSILON;

// ---------------------------------------------------------------------------------------------
// Dense reference and error bounds
// ---------------------------------------------------------------------------------------------

/// The dense reference of a (static) model: 𝓛 (n×n row-major, n = d²) and the bordered matrix.
struct Dense {
    n: usize,
    l: Vec<C64>,
    a: Vec<C64>,
    smin: f64,
    smax: f64,
}

impl Dense {
    fn new(me: &MasterEquation, t_eval: f64) -> Self {
        let mf = frozen(me, t_eval);
        let d = mf.space.dim();
        let n = d * d;
        let h = mf.static_hamiltonian.to_dense();
        let jumps: Vec<Vec<C64>> = mf.jumps.iter().map(|j| j.op.to_dense()).collect();
        let l = common::liouvillian(&h, &jumps, d);
        let mut a = l.clone();
        for c in 0..n {
            a[c] = ZERO;
        }
        for r in 0..d {
            a[r * d + r] = ONE;
        }
        let m = faer::Mat::<C64>::from_fn(n, n, |i, j| a[i * n + j]);
        let sv = m.singular_values().expect("dense SVD");
        let smin = sv.iter().copied().fold(f64::INFINITY, f64::min);
        let smax = sv.iter().copied().fold(0.0, f64::max);
        Self {
            n,
            l,
            a,
            smin,
            smax,
        }
    }

    /// Rigorous bound of ‖ρ − ρₛₛ‖_F (see the file header).
    fn bound(&self, rho: &[C64]) -> f64 {
        let n = self.n;
        let mut res2 = 0.0;
        let mut abs2 = 0.0;
        for i in 0..n {
            let row = &self.a[i * n..(i + 1) * n];
            let v: C64 = row.iter().zip(rho).map(|(x, y)| x * y).sum();
            let b = if i == 0 { ONE } else { ZERO };
            res2 += (v - b).norm_sqr();
            let s: f64 = row.iter().zip(rho).map(|(x, y)| x.norm() * y.norm()).sum();
            abs2 += s * s;
        }
        (res2.sqrt() + n as f64 * EPS * abs2.sqrt()) / self.smin
    }

    /// ‖𝓛ρ‖_F with the reference 𝓛.
    fn residual_f(&self, rho: &[C64]) -> f64 {
        common::matvec(&self.l, rho)
            .iter()
            .map(|v| v.norm_sqr())
            .sum::<f64>()
            .sqrt()
    }

    /// What a backward-stable direct solve guarantees: n·ε·cond₂(A)·‖ρ‖_F (ρ ≈ 1 in norm).
    fn direct_promise(&self) -> f64 {
        self.n as f64 * EPS * self.smax / self.smin
    }

    /// All eigenvalues of 𝓛 with their condition numbers κ(λ) = ‖x‖‖y‖/|yᴴx| (x right, y left
    /// eigenvector; left ones from the eigenvectors of 𝓛ᴴ, matched by value).
    fn eigen(&self) -> Vec<(C64, f64)> {
        let n = self.n;
        let l = faer::Mat::<C64>::from_fn(n, n, |i, j| self.l[i * n + j]);
        let lh = faer::Mat::<C64>::from_fn(n, n, |i, j| self.l[j * n + i].conj());
        let er = l.eigen().expect("dense eigen");
        let el = lh.eigen().expect("dense eigen");
        let (sr, ur) = (er.S().column_vector(), er.U());
        let (sl, ul) = (el.S().column_vector(), el.U());
        let mut used = vec![false; n];
        (0..n)
            .map(|i| {
                let lam = sr[i];
                // the left eigenvector belongs to conj(λ) of 𝓛ᴴ
                let k = (0..n)
                    .filter(|&k| !used[k])
                    .min_by(|&a, &b| {
                        (sl[a].conj() - lam)
                            .norm()
                            .total_cmp(&(sl[b].conj() - lam).norm())
                    })
                    .unwrap();
                used[k] = true;
                let (mut xy, mut xx, mut yy) = (ZERO, 0.0, 0.0);
                for r in 0..n {
                    xy += ul[(r, k)].conj() * ur[(r, i)];
                    xx += ur[(r, i)].norm_sqr();
                    yy += ul[(r, k)].norm_sqr();
                }
                (lam, (xx * yy).sqrt() / xy.norm())
            })
            .collect()
    }
}

/// Allowed error of an Arnoldi eigenvalue: first-order perturbation theory gives
/// |δλ| ≤ κ(λ)·(Ritz error estimate + backward error of the factorisation n·ε·S); the factor 2
/// covers the neglected second-order terms.
fn eig_tol(kappa: f64, estimate: f64, n: usize, scale: f64) -> f64 {
    2.0 * kappa * (estimate + n as f64 * EPS * scale)
}

/// Condition number of the dense eigenvalue nearest `lam`.
fn kappa_near(eigs: &[(C64, f64)], lam: C64) -> f64 {
    eigs.iter()
        .min_by(|a, b| (a.0 - lam).norm().total_cmp(&(b.0 - lam).norm()))
        .unwrap()
        .1
}

fn seq_gmres() -> GmresOptions {
    GmresOptions {
        par: Par::Seq,
        ..Default::default()
    }
}

fn seq_evolution() -> EvolutionOptions {
    let mut o = EvolutionOptions::default();
    o.dopri.par = Par::Seq;
    o
}

/// ⟨a⟩ = Σₙ √n ρ_{n,n−1} and ⟨n⟩ = Σₙ n ρ_nn of a single mode.
fn field_and_number(rho: &[C64], d: usize) -> (C64, f64) {
    let a = (1..d).map(|k| rho[k * d + k - 1] * (k as f64).sqrt()).sum();
    let n = (0..d).map(|k| k as f64 * rho[k * d + k].re).sum();
    (a, n)
}

fn cavity(levels: usize, loss: f64, detuning: f64, drive: f64, thermal: f64) -> Network {
    Network {
        modes: vec![ModeParams {
            levels,
            loss,
            detuning,
            drive,
            thermal,
            ..Default::default()
        }],
        ..Network::empty()
    }
}

fn spin(p: SiteParams) -> MasterEquation {
    Network {
        sites: vec![p],
        ..Network::empty()
    }
    .build()
    .unwrap()
}

/// Driven, lossy Jaynes–Cummings model with every kind of spin dissipation (d = 12).
fn driven_jc() -> MasterEquation {
    Network {
        sites: vec![SiteParams {
            detuning: 0.3,
            decay: 0.2,
            dephasing: 0.05,
            rabi: 0.4,
            ..Default::default()
        }],
        modes: vec![ModeParams {
            levels: 6,
            detuning: -0.2,
            loss: 1.0,
            drive: 0.5,
            ..Default::default()
        }],
        coupling: vec![vec![0.7]],
        ..Network::empty()
    }
    .build()
    .unwrap()
}

/// Two driven sites (Rabi drive, decay, dephasing, pump) exchange-coupled to a driven 4-level
/// mode, with a zz coupling (d = 16).
fn two_driven_sites() -> MasterEquation {
    Network {
        sites: vec![
            SiteParams {
                detuning: 0.2,
                decay: 0.3,
                dephasing: 0.1,
                rabi: 0.5,
                ..Default::default()
            },
            SiteParams {
                detuning: -0.4,
                decay: 0.1,
                pump: 0.05,
                ..Default::default()
            },
        ],
        modes: vec![ModeParams {
            levels: 4,
            detuning: 0.3,
            loss: 0.8,
            drive: 0.4,
            ..Default::default()
        }],
        coupling: vec![vec![0.6], vec![0.45]],
        zz: vec![vec![0.0, 0.1], vec![0.1, 0.0]],
        ..Network::empty()
    }
    .build()
    .unwrap()
}

// ---------------------------------------------------------------------------------------------
// The superoperator
// ---------------------------------------------------------------------------------------------

/// The sparse 𝓛 against the matrix-free kernel (`LindbladRhs`) and against the dense reference
/// built from the definition (`common::liouvillian`), on random Hermitian ρ, for a model with every
/// kind of term, including envelope-scaled ones frozen at t_eval (mid-ramp).
#[test]
fn liouvillian_matches_the_kernel_and_the_definition() {
    let ramp = Envelope::Ramp {
        start: 0.0,
        stop: 1.0,
        from: 0.2,
        to: 1.0,
    };
    for form in [CouplingForm::Exchange, CouplingForm::Dipole] {
        let net = Network {
            sites: vec![
                SiteParams {
                    detuning: 0.3,
                    decay: 0.1,
                    dephasing: 0.2,
                    pump: 0.05,
                    rabi: 0.4,
                },
                SiteParams {
                    detuning: -0.5,
                    decay: 0.3,
                    rabi: 0.2,
                    ..Default::default()
                },
            ],
            modes: vec![ModeParams {
                levels: 3,
                detuning: -0.2,
                loss: 1.0,
                thermal: 0.5,
                drive: 0.7,
                drive_envelope: ramp.clone(),
            }],
            coupling: vec![vec![0.9], vec![0.4]],
            coupling_form: form,
            zz: vec![vec![0.0, 0.25], vec![0.25, 0.0]],
            flip_flop: vec![vec![0.0, 0.15], vec![0.15, 0.0]],
            rabi_envelope: ramp.clone(),
            ..Network::empty()
        };
        let me = net.build().unwrap();
        assert!(!me.driven.is_empty());
        let t_eval = 0.37;
        let d = me.space.dim();
        let n = d * d;
        let l = steady::liouvillian(&me, t_eval).unwrap();
        let scale = steady::generator_scale(&me, t_eval);
        let mut rhs = LindbladRhs::new(&me, Par::Seq).unwrap();
        let dense = Dense::new(&me, t_eval);
        // largest number of stored entries in a row of 𝓛 (terms of one output element)
        let mut per_row = vec![0usize; n];
        for j in 0..n {
            for &i in l.row_idx_of_col_raw(j) {
                per_row[i] += 1;
            }
        }
        let k = *per_row.iter().max().unwrap() as f64;
        let mut seed = 0x1234_5678_u64;
        let mut rnd = || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            (seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        for _ in 0..3 {
            let mut rho = vec![ZERO; n];
            for r in 0..d {
                rho[r * d + r] = C64::new(rnd(), 0.0);
                for c in r + 1..d {
                    let v = C64::new(rnd(), rnd());
                    rho[r * d + c] = v;
                    rho[c * d + r] = v.conj();
                }
            }
            // sparse product, column by column
            let mut y = vec![ZERO; n];
            for j in 0..n {
                for (&i, v) in l.row_idx_of_col_raw(j).iter().zip(l.val_of_col(j)) {
                    y[i] += v * rho[j];
                }
            }
            let (mut p, mut out, mut kern) = (vec![ZERO; n], vec![ZERO; n], vec![ZERO; n]);
            lindblad::to_panels(d, &rho, &mut p);
            rhs.apply(t_eval, &p, &mut out);
            lindblad::from_panels(d, &out, &mut kern);
            let reference = common::matvec(&dense.l, &rho);
            // each element is a sum of at most k products: rounding ≤ k·ε·Σ|terms| ≤ k·ε·S·‖ρ‖max
            // per evaluation, and two evaluations are compared
            let rmax = rho.iter().map(|v| v.norm()).fold(0.0, f64::max);
            let tol = 2.0 * k * EPS * scale * rmax;
            let e_kernel = max_diff(&y, &kern);
            let e_dense = max_diff(&y, &reference);
            eprintln!(
                "𝓛 ({form:?}, d = {d}, nnz {}): sparse vs kernel {e_kernel:.1e}, vs dense \
                 definition {e_dense:.1e} (tol {tol:.1e})",
                l.compute_nnz()
            );
            assert!(e_kernel <= tol, "sparse 𝓛 vs LindbladRhs: {e_kernel:e}");
            // the dense reference sums up to n terms per element
            let tol_dense = 2.0 * n as f64 * EPS * scale * rmax;
            assert!(e_dense <= tol_dense, "sparse 𝓛 vs definition: {e_dense:e}");
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Analytic steady states
// ---------------------------------------------------------------------------------------------

/// (c) Driven damped cavity (Walls & Milburn, Quantum Optics; from memory): the steady state is
/// the coherent state α = −iε/(κ/2 + iΔc), ⟨n⟩ = ε²/(Δc² + κ²/4), pure.
///
/// Truncation, bounded honestly: ρ_c = the coherent state truncated to the kept levels and
/// renormalised. Its own distance to the truncated model's steady state is bounded a posteriori
/// like any candidate (`Dense::bound`), and its ⟨n⟩, ⟨a⟩ differ from the analytic values by the
/// computed Poisson tail. So |⟨n⟩_num − n̄| ≤ ‖n̂‖_F (bound(ρ) + bound(ρ_c)) + |⟨n⟩_c − n̄|.
///
/// Also: envelopes are frozen at t_eval: with the drive on a ramp from 0 to 1 over [0, 2], the
/// steady state at t_eval = 1 is that of the drive ε/2, and at t_eval = 5 that of ε.
#[test]
fn driven_cavity_is_coherent() {
    let (kappa, dc, eps_drive, levels) = (1.0, 0.4, 0.6, 24);
    for (t_eval, f) in [(1.0, 0.5), (5.0, 1.0)] {
        let mut net = cavity(levels, kappa, dc, eps_drive, 0.0);
        net.modes[0].drive_envelope = Envelope::Ramp {
            start: 0.0,
            stop: 2.0,
            from: 0.0,
            to: 1.0,
        };
        let me = net.build().unwrap();
        let eps = eps_drive * f;
        let alpha = C64::new(0.0, -eps) / C64::new(kappa / 2.0, dc);
        let nbar = eps * eps / (dc * dc + kappa * kappa / 4.0);
        assert!((alpha.norm_sqr() - nbar).abs() < 1e-15);
        let d = levels;
        // truncated, renormalised coherent state
        let mut amp = vec![ZERO; d];
        let mut fact = 1.0;
        for k in 0..d {
            if k > 0 {
                fact *= k as f64;
            }
            amp[k] = (-nbar / 2.0).exp() * alpha.powu(k as u32) / fact.sqrt();
        }
        let norm2: f64 = amp.iter().map(|v| v.norm_sqr()).sum();
        let rho_c: Vec<C64> = (0..d * d)
            .map(|i| amp[i / d] * amp[i % d].conj() / norm2)
            .collect();
        let (a_c, n_c) = field_and_number(&rho_c, d);
        let dense = Dense::new(&me, t_eval);
        let b_c = dense.bound(&rho_c);
        let number_f = (0..d).map(|k| (k * k) as f64).sum::<f64>().sqrt(); // ‖n̂‖_F
        let a_f = (1..d).map(|k| k as f64).sum::<f64>().sqrt(); // ‖â‖_F
        let s = steady::steady_state_direct(&me, t_eval, &DirectOptions::default()).unwrap();
        let b = dense.bound(&s.rho);
        assert!(
            b <= dense.direct_promise(),
            "bound {b:e} vs promise {:e}",
            dense.direct_promise()
        );
        let (a_num, n_num) = field_and_number(&s.rho, d);
        let tol_n = number_f * (b + b_c) + (n_c - nbar).abs();
        let tol_a = a_f * (b + b_c) + (a_c - alpha).norm();
        let purity: f64 = common::mm(&s.rho, &s.rho, d)
            .iter()
            .step_by(d + 1)
            .map(|v| v.re)
            .sum();
        // |Tr ρ² − Tr ρ_c²| ≤ ‖ρ − ρ_c‖_F (‖ρ‖_F + ‖ρ_c‖_F) ≤ 2‖ρ − ρ_c‖_F, and Tr ρ_c² = 1
        let tol_p = 2.0 * (b + b_c);
        let (en, ea, ep) = (
            (n_num - nbar).abs(),
            (a_num - alpha).norm(),
            (purity - 1.0).abs(),
        );
        eprintln!(
            "(c) t_eval {t_eval}: ⟨n⟩ err {en:.1e} (tol {tol_n:.1e}), ⟨a⟩ err {ea:.1e} (tol \
             {tol_a:.1e}), purity err {ep:.1e}; bound {b:.1e}, truncation: candidate bound \
             {b_c:.1e}, tail {:.1e}; relative residual {:.1e}; LU nnz L {} U {} ({} B)",
            (n_c - nbar).abs(),
            s.relative_residual,
            s.factor.unwrap().nnz_l,
            s.factor.unwrap().nnz_u,
            s.factor.unwrap().bytes
        );
        assert!(en <= tol_n && ea <= tol_a && ep <= tol_p);
        assert_eq!(s.method, SteadyMethod::Direct);
    }
}

/// (b) Thermal bath (Walls & Milburn; Breuer & Petruccione, The Theory of Open Quantum Systems;
/// from memory): detailed balance κ(1+n_th)(n+1)P(n+1) = κ n_th (n+1) P(n) holds exactly in the
/// plainly truncated model, so P(n) = (1−q)qⁿ/(1−q^levels), q = n_th/(1+n_th), and no
/// coherences. Each element is within the Frobenius bound.
#[test]
fn thermal_bath_gives_the_truncated_geometric_distribution() {
    for (nth, levels) in [(0.7, 6), (2.0, 12)] {
        let me = cavity(levels, 1.3, 0.4, 0.0, nth).build().unwrap();
        let dense = Dense::new(&me, 0.0);
        let q: f64 = nth / (1.0 + nth);
        for s in [
            steady::steady_state_direct(&me, 0.0, &DirectOptions::default()).unwrap(),
            steady::steady_state_gmres(&me, 0.0, &seq_gmres(), None).unwrap(),
        ] {
            let d = levels;
            let mut exact = vec![ZERO; d * d];
            for k in 0..d {
                exact[k * d + k] = C64::new(
                    (1.0 - q) * q.powi(k as i32) / (1.0 - q.powi(levels as i32)),
                    0.0,
                );
            }
            let err = max_diff(&s.rho, &exact);
            let b = dense.bound(&s.rho);
            eprintln!(
                "(b) n_th {nth}, {levels} levels, {}: max error {err:.1e} (bound {b:.1e}), \
                 {} iterations",
                s.method, s.iterations
            );
            assert!(err <= b);
        }
    }
}

/// (e2) Resonance fluorescence (Mollow, Phys. Rev. 188, 1969 (1969); Loudon, The Quantum Theory
/// of Light; from memory): ρₑₑ = (Ω²/4)/(Δa² + γ²/4 + Ω²/2),
/// ⟨σ⁻⟩ = ρ_eg = −i(Ω/2)(γ/2 − iΔa)/(Δa² + γ²/4 + Ω²/2), for four drive/detuning pairs, with the
/// direct and the GMRES solvers.
#[test]
fn resonance_fluorescence() {
    let gamma = 1.0;
    for (omega, da) in [(0.5, 0.0), (2.0, 0.0), (1.0, 0.7), (3.0, -1.5)] {
        let me = spin(SiteParams {
            rabi: omega,
            detuning: da,
            decay: gamma,
            ..Default::default()
        });
        let dense = Dense::new(&me, 0.0);
        let den = da * da + gamma * gamma / 4.0 + omega * omega / 2.0;
        let ree = (omega * omega / 4.0) / den;
        let sm = C64::new(0.0, -omega / 2.0) * C64::new(gamma / 2.0, -da) / den;
        for s in [
            steady::steady_state_direct(&me, 0.0, &DirectOptions::default()).unwrap(),
            steady::steady_state_gmres(&me, 0.0, &seq_gmres(), None).unwrap(),
        ] {
            let b = dense.bound(&s.rho);
            let (e1, e2) = ((s.rho[3].re - ree).abs(), (s.rho[2] - sm).norm());
            eprintln!(
                "(e2) Ω={omega} Δa={da} {}: ρₑₑ err {e1:.1e}, ⟨σ⁻⟩ err {e2:.1e} (bound {b:.1e})",
                s.method
            );
            assert!(e1 <= b && e2 <= b);
        }
    }
}

// ---------------------------------------------------------------------------------------------
// The three methods against each other and against long-time evolution
// ---------------------------------------------------------------------------------------------

/// Direct, GMRES and the evolution fallback on a driven, lossy Jaynes–Cummings model (no
/// analytic solution), each against the rigorous bound, and against ρ(T) of `evolve_density`
/// from the vacuum for T = 60/gap.
#[test]
fn direct_gmres_evolution_and_long_time_evolution_agree() {
    let me = driven_jc();
    let d = me.space.dim();
    let dense = Dense::new(&me, 0.0);
    let scale = steady::generator_scale(&me, 0.0);
    let direct = steady::steady_state_direct(&me, 0.0, &DirectOptions::default()).unwrap();
    let gopts = seq_gmres();
    let gmres = steady::steady_state_gmres(&me, 0.0, &gopts, None).unwrap();
    let eopts = seq_evolution();
    let evo = steady::steady_state_evolve(&me, 0.0, &eopts, None).unwrap();
    let bd = dense.bound(&direct.rho);
    let bg = dense.bound(&gmres.rho);
    let be = dense.bound(&evo.rho);
    // what each method promises, as a bound on ‖𝓛ρ‖_F (ρ normalised):
    // GMRES stops at ‖b − Mx‖ ≤ tol‖b‖ with ‖b‖ = |s|/√d, |s| ≤ S; taking the trace of the
    // residual gives |s||1 − Tr x| ≤ √d‖r‖, hence ‖𝓛x‖ ≤ 2‖r‖ and
    // ‖𝓛ρ‖ ≤ 2·tol·S/√d/(1 − tol), plus the rounding of the final evaluation (≤ n·ε·S).
    let n = (d * d) as f64;
    let gmres_promise =
        2.0 * gopts.tol * scale / (d as f64).sqrt() / (1.0 - gopts.tol) + n * EPS * scale;
    // evolution stops at ‖𝓛ρ‖_max ≤ tol·S·‖ρ‖_max (before the final renormalisation, which
    // changes ρ by its trace error); ‖·‖_F ≤ √n‖·‖_max
    let evo_promise = n.sqrt() * eopts.tol * scale * 1.001;
    assert!(bd <= dense.direct_promise());
    assert!(
        dense.residual_f(&gmres.rho) <= gmres_promise,
        "GMRES residual"
    );
    assert!(
        dense.residual_f(&evo.rho) <= evo_promise,
        "evolution residual"
    );
    let e_g = max_diff(&direct.rho, &gmres.rho);
    let e_e = max_diff(&direct.rho, &evo.rho);
    eprintln!(
        "JC d = {d}: direct rel. residual {:.1e} (bound {bd:.1e}); GMRES {} its, rel. residual \
         {:.1e}, |Δρ| {e_g:.1e} (bound {bg:.1e}); evolution to t = {:.1} in {} steps, rel. \
         residual {:.1e}, |Δρ| {e_e:.1e} (bound {be:.1e}); σ_min(A) = {:.2e}",
        direct.relative_residual,
        gmres.iterations,
        gmres.relative_residual,
        evo.time.unwrap(),
        evo.iterations,
        evo.relative_residual,
        dense.smin
    );
    assert!(e_g <= bd + bg);
    assert!(e_e <= bd + be);

    // long-time evolution with the ordinary integrator, from the vacuum ⊗ |g⟩
    let rel = steady::relaxation(&me, 0.0, &RelaxationOptions::default()).unwrap();
    let gap = rel.gap.unwrap();
    let t_end = 60.0 / gap;
    let mut rho0 = vec![ZERO; d * d];
    rho0[0] = ONE;
    let r = common::run(&me, &rho0, &[0.0, t_end], common::opts(1e-10, 1e-12));
    // ρ(T) − ρₛₛ: integration error (common::Run::tol, from rtol/atol) plus the transient,
    // ≤ κ_V e^{−gap·T} with κ_V the eigenvector condition number of 𝓛 (a constant of the model;
    // e^{−60} ≈ 9e-27 leaves room for any κ_V below 1e13)
    let tol = r.tol(1.0, 1.0) + 1e13 * (-gap * t_end).exp() + bd;
    let e_t = max_diff(&direct.rho, &r.states[1]);
    eprintln!(
        "JC: long-time evolution to T = {t_end:.0} (gap {gap:.4}): |Δρ| {e_t:.1e} (tol {tol:.1e})"
    );
    assert!(e_t <= tol);
}

/// The automatic driver: direct by default; GMRES when the direct solve is ruled out by size;
/// evolution when GMRES is given too few iterations. Each fallback is recorded.
#[test]
fn driver_falls_back_in_order() {
    let me = driven_jc();
    let mut opts = SteadyOptions {
        gmres: seq_gmres(),
        evolution: seq_evolution(),
        ..Default::default()
    };
    let s = steady::steady_state(&me, 0.0, &opts).unwrap();
    assert_eq!(s.method, SteadyMethod::Direct);
    assert!(s.fallbacks.is_empty());
    opts.direct_max_unknowns = Some(10);
    let s = steady::steady_state(&me, 0.0, &opts).unwrap();
    assert_eq!(s.method, SteadyMethod::Gmres);
    assert!(s.fallbacks[0].contains("skipped"), "{:?}", s.fallbacks);
    opts.gmres.max_iterations = 2;
    let s = steady::steady_state(&me, 0.0, &opts).unwrap();
    assert_eq!(s.method, SteadyMethod::Evolution);
    assert!(
        s.fallbacks[1].contains("GMRES did not converge"),
        "{:?}",
        s.fallbacks
    );
}

/// GMRES with each preconditioner (the inverse of the no-jump part Kρ + ρK†, and the diagonal of
/// 𝓛) on three models, against the rigorous a-posteriori bound of the dense reference (file
/// header): the driven JC model (d = 12), two driven sites in a driven 4-level mode (d = 16), and
/// an undriven network whose steady state is known exactly: two decaying sites exchange-coupled to
/// a lossy mode relax to the ground state and the vacuum (spontaneous emission and cavity decay
/// only remove excitations; Breuer & Petruccione, The Theory of Open Quantum Systems, 2002, §3.4,
/// from memory). There the ground state is a zero-rate eigenvector of K (no jump empties it), so
/// the no-jump preconditioner needs its clamp.
#[test]
fn gmres_preconditioners_agree_with_the_dense_reference() {
    use cavern_evolve::steady::GmresPreconditioner;
    let dark = Network {
        sites: vec![
            SiteParams {
                detuning: 0.2,
                decay: 0.3,
                ..Default::default()
            },
            SiteParams {
                detuning: -0.1,
                decay: 0.15,
                ..Default::default()
            },
        ],
        modes: vec![ModeParams {
            levels: 3,
            detuning: 0.1,
            loss: 0.9,
            ..Default::default()
        }],
        coupling: vec![vec![0.5], vec![0.4]],
        ..Network::empty()
    }
    .build()
    .unwrap();
    for (me, label, exact_ground) in [
        (driven_jc(), "driven JC", false),
        (two_driven_sites(), "two sites", false),
        (dark, "undriven", true),
    ] {
        let d = me.space.dim();
        let dense = Dense::new(&me, 0.0);
        let scale = steady::generator_scale(&me, 0.0);
        for pre in [GmresPreconditioner::NoJump, GmresPreconditioner::Diagonal] {
            let opts = GmresOptions {
                preconditioner: pre,
                ..seq_gmres()
            };
            let s = steady::steady_state_gmres(&me, 0.0, &opts, None).unwrap();
            assert_eq!(s.preconditioner, Some(pre), "{label}: {:?}", s.fallbacks);
            // the promise of the GMRES stopping test (see
            // direct_gmres_evolution_and_long_time_evolution_agree)
            let n = (d * d) as f64;
            let promise =
                2.0 * opts.tol * scale / (d as f64).sqrt() / (1.0 - opts.tol) + n * EPS * scale;
            let res = dense.residual_f(&s.rho);
            let bound = dense.bound(&s.rho);
            eprintln!(
                "{label} (d = {d}), {}: {} products, ‖𝓛ρ‖_F {res:.1e} (promise {promise:.1e}), \
                 ‖ρ − ρₛₛ‖_F ≤ {bound:.1e}",
                pre.name(),
                s.iterations
            );
            assert!(res <= promise, "{label} {pre:?}");
            // the bound is (‖Aρ − b‖₂ + rounding)/σ_min and the trace row is exact after the
            // normalisation, so it must be within the promise over σ_min (2× for the rounding)
            assert!(bound <= 2.0 * promise / dense.smin, "{label} {pre:?}");
            if exact_ground {
                let mut ground = vec![ZERO; d * d];
                ground[0] = ONE;
                assert!(max_diff(&s.rho, &ground) <= bound, "{label} {pre:?}");
            }
        }
    }
}

/// Both sparse LUs (the multifrontal one with pivots restricted to supernode blocks, and faer's
/// partial-pivoting one) solve the real form of 𝓛 on Hermitian matrices; each solution must lie
/// within the rigorous a-posteriori bound of the dense reference built from the definition
/// (‖ρ − ρₛₛ‖_F ≤ ‖Aρ − b‖/σ_min(A); see the file header, Higham §3.1 and §9, from memory), and
/// that bound must be as small as a backward-stable solve promises. Model: the driven JC model
/// (d = 12) and two driven sites in a 4-level mode (d = 16, zz coupling, every dissipator).
#[test]
fn lu_strategies_agree_with_the_dense_reference() {
    let two_sites = two_driven_sites();
    for (me, label) in [(driven_jc(), "driven JC"), (two_sites, "two sites")] {
        let dense = Dense::new(&me, 0.0);
        let mut rhos = Vec::new();
        for strategy in [LuStrategy::Multifrontal, LuStrategy::PartialPivoting] {
            let opts = DirectOptions {
                strategy,
                ..Default::default()
            };
            let s = steady::steady_state_direct(&me, 0.0, &opts).unwrap();
            let f = s.factor.unwrap();
            let bound = dense.bound(&s.rho);
            eprintln!(
                "{label}, {strategy:?}: bound {bound:.1e} (promise {:.1e}), rcond {:.1e}, \
                 largest multiplier {:.1e}, refinement {}, nnz L {} U {}, {} B predicted",
                dense.direct_promise(),
                f.rcond,
                f.max_multiplier,
                f.refinement_steps,
                f.nnz_l,
                f.nnz_u,
                f.bytes
            );
            assert_eq!(f.strategy, strategy, "{label}: no fallback expected");
            assert!(bound <= dense.direct_promise(), "{label} {strategy:?}");
            // the condition estimate is within a factor n of the 2-norm one (norm equivalence)
            // and may only overestimate rcond (it underestimates ‖A⁻¹‖₁)
            assert!(f.rcond > 0.0 && f.rcond.is_finite());
            rhos.push((s.rho, bound));
        }
        let diff = max_diff(&rhos[0].0, &rhos[1].0);
        assert!(diff <= rhos[0].1 + rhos[1].1, "{label}: {diff:e}");
    }
}

/// The memory guard acts before any numeric work: a limit below the predicted size of the
/// factors refuses the direct solve with the prediction, and the driver then falls back to
/// GMRES, saying why (common practice: check the symbolic analysis's size before the numeric
/// factorisation). Relaxation refuses the same way.
#[test]
fn memory_guard_refuses_before_factorising() {
    let me = driven_jc();
    let tight = DirectOptions {
        max_factor_bytes: Some(1000),
        ..Default::default()
    };
    match steady::steady_state_direct(&me, 0.0, &tight) {
        Err(SteadyError::TooLarge {
            n, needed, allowed, ..
        }) => {
            assert_eq!(n, 144);
            assert_eq!(allowed, 1000);
            assert!(needed > 1000);
        }
        other => panic!("expected TooLarge, got {other:?}"),
    }
    let free = steady::steady_state_direct(&me, 0.0, &DirectOptions::default()).unwrap();
    let limit = free.factor.unwrap().bytes as u128;
    let exact = DirectOptions {
        max_factor_bytes: Some(limit),
        ..Default::default()
    };
    assert!(steady::steady_state_direct(&me, 0.0, &exact).is_ok());
    let opts = SteadyOptions {
        direct: tight,
        gmres: seq_gmres(),
        evolution: seq_evolution(),
        ..Default::default()
    };
    let s = steady::steady_state(&me, 0.0, &opts).unwrap();
    assert_eq!(s.method, SteadyMethod::Gmres);
    assert!(s.fallbacks[0].contains("refused"), "{:?}", s.fallbacks);
    let ropts = RelaxationOptions {
        max_factor_bytes: Some(1000),
        ..Default::default()
    };
    assert!(matches!(
        steady::relaxation(&me, 0.0, &ropts),
        Err(SteadyError::TooLarge { .. })
    ));
}

/// Failures are errors that carry the numbers reached, never silent answers.
#[test]
fn failures_carry_the_residual_reached() {
    let me = driven_jc();
    let opts = GmresOptions {
        max_iterations: 3,
        ..seq_gmres()
    };
    match steady::steady_state_gmres(&me, 0.0, &opts, None) {
        Err(SteadyError::NotConverged {
            iterations,
            gmres_residual,
            tol,
            residual,
            ..
        }) => {
            assert_eq!(iterations, 3);
            assert!(gmres_residual > tol && residual > 0.0);
        }
        other => panic!("expected NotConverged, got {other:?}"),
    }
    let opts = EvolutionOptions {
        max_time: 0.5,
        ..seq_evolution()
    };
    match steady::steady_state_evolve(&me, 0.0, &opts, None) {
        Err(
            e @ SteadyError::NotStationary {
                time,
                relative_residual,
                tol,
                ..
            },
        ) => {
            assert!(time == 0.5 && relative_residual > tol);
            assert!(e.to_string().contains("t = 0.5"), "{e}");
        }
        other => panic!("expected NotStationary, got {other:?}"),
    }
    // the envelope time must be finite
    assert!(matches!(
        steady::steady_state_direct(&me, f64::NAN, &DirectOptions::default()),
        Err(SteadyError::Options(_))
    ));
}

// ---------------------------------------------------------------------------------------------
// Relaxation spectrum
// ---------------------------------------------------------------------------------------------

/// Check every eigenvalue found against the dense spectrum and a list of analytic values.
fn check_spectrum(me: &MasterEquation, rel: &steady::Relaxation, exact: &[C64], label: &str) {
    let dense = Dense::new(me, 0.0);
    let eigs = dense.eigen();
    for (lam, est) in rel.eigenvalues.iter().zip(&rel.error_estimates) {
        let kappa = kappa_near(&eigs, *lam);
        let tol = eig_tol(kappa, *est, dense.n, rel.scale);
        let want = exact
            .iter()
            .min_by(|a, b| (*a - lam).norm().total_cmp(&(*b - lam).norm()))
            .unwrap();
        let err = (want - lam).norm();
        eprintln!(
            "{label}: λ = {:+.6}{:+.6}i, exact {:+.4}{:+.4}i, err {err:.1e} (tol {tol:.1e}, κ {kappa:.1})",
            lam.re, lam.im, want.re, want.im
        );
        assert!(err <= tol, "{label}: λ = {lam} vs {want}");
    }
    // every exact value within reach was found: those nearer the shift than the farthest found
    let reach = rel
        .eigenvalues
        .iter()
        .map(|l| (l - rel.shift).norm())
        .fold(0.0, f64::max);
    for w in exact
        .iter()
        .filter(|w| (*w - rel.shift).norm() < 0.999 * reach)
    {
        assert!(
            rel.eigenvalues.iter().any(|l| (l - w).norm() < 1e-6),
            "{label}: {w} missing from {:?}",
            rel.eigenvalues
        );
    }
}

/// Damped cavity (Walls & Milburn; Carmichael, Statistical Methods in Quantum Optics 1; from
/// memory): with no drive and a zero-temperature bath 𝓛 is triangular in the Fock basis ordered
/// by n + m (the jump moves ρ_nm to ρ_{n−1,m−1}; plain truncation removes nothing from the
/// diagonal), so its eigenvalues are exactly −iΔc(n − m) − κ(n + m)/2. The slowest non-zero
/// ones, −κ/2 ∓ iΔc (n − m = ±1), are the decay of the field amplitude ⟨a⟩ (coherences ρ_{n,n±1});
/// the photon number (populations, ρ₁₁) relaxes at −κ, together with the coherences ρ₀₂, ρ₂₀
/// at −κ ∓ 2iΔc. Gap = κ/2, time scale 2/κ.
#[test]
fn damped_cavity_spectrum() {
    let (kappa, dc, levels) = (1.0, 0.3, 8);
    let me = cavity(levels, kappa, dc, 0.0, 0.0).build().unwrap();
    let rel = steady::relaxation(&me, 0.0, &RelaxationOptions::default()).unwrap();
    let mut exact = Vec::new();
    for n in 0..levels {
        for m in 0..levels {
            exact.push(C64::new(
                -kappa * (n + m) as f64 / 2.0,
                -dc * (n as f64 - m as f64),
            ));
        }
    }
    check_spectrum(&me, &rel, &exact, "cavity");
    assert_eq!(rel.degenerate, None);
    assert_eq!(rel.zero_dimension, 1);
    let gap = rel.gap.unwrap();
    assert!((gap - kappa / 2.0).abs() <= 1e-8, "gap {gap}");
    assert!((rel.time_scale.unwrap() - 2.0 / kappa).abs() <= 1e-7);
    // the field-amplitude pair comes right after the zero, then the population rate −κ
    // (the order inside a conjugate pair is decided by rounding)
    let e = &rel.eigenvalues;
    assert!(
        (e[1].re + 0.5).abs() < 1e-8 && (e[1].im.abs() - 0.3).abs() < 1e-8,
        "{e:?}"
    );
    assert!((e[2] - e[1].conj()).norm() < 1e-8, "{e:?}");
    assert!((e[3] - C64::new(-1.0, 0.0)).norm() < 1e-8, "{e:?}");
    eprintln!(
        "cavity: basis {}, block {}, nnz(𝓛 − σ) {}",
        rel.basis_size, rel.block_size, rel.matrix_nnz
    );
}

/// Decaying spin (Allen & Eberly, Optical Resonance and Two-Level Atoms; from memory): the
/// coherences ρ_eg, ρ_ge decay at γ/2 + γφ and rotate at ∓Δa: λ = −(γ/2 + γφ) ∓ iΔa; the
/// population at λ = −γ; 0 for the steady state. Without dephasing the gap is γ/2.
#[test]
fn decaying_spin_spectrum() {
    // Δa ≠ 0 keeps the two coherence eigenvalues apart (a double eigenvalue has no finite
    // condition number for the error budget)
    for (gamma, gphi, da) in [(1.0, 0.0, 0.25), (1.0, 0.3, 0.8), (0.4, 0.5, -1.2)] {
        let me = spin(SiteParams {
            decay: gamma,
            dephasing: gphi,
            detuning: da,
            ..Default::default()
        });
        let rel = steady::relaxation(&me, 0.0, &RelaxationOptions::default()).unwrap();
        let coh = gamma / 2.0 + gphi;
        let exact = [
            C64::new(0.0, 0.0),
            C64::new(-coh, -da),
            C64::new(-coh, da),
            C64::new(-gamma, 0.0),
        ];
        check_spectrum(
            &me,
            &rel,
            &exact,
            &format!("spin γ={gamma} γφ={gphi} Δa={da}"),
        );
        assert_eq!(rel.eigenvalues.len(), 4); // the whole (4-dimensional) spectrum
        assert_eq!(rel.degenerate, None);
        let gap = rel.gap.unwrap();
        assert!((gap - coh.min(gamma)).abs() <= 1e-10, "gap {gap}");
    }
}

/// Arnoldi against the full dense spectrum of the reference 𝓛 for a generic model (driven JC):
/// the eigenvalues found are the ones of 𝓛 nearest the shift, each within its error estimate.
#[test]
fn arnoldi_matches_the_dense_spectrum() {
    let me = driven_jc();
    let opts = RelaxationOptions {
        count: 10,
        ..Default::default()
    };
    let rel = steady::relaxation(&me, 0.0, &opts).unwrap();
    let dense = Dense::new(&me, 0.0);
    let mut eigs = dense.eigen();
    eigs.sort_by(|a, b| {
        (a.0 - rel.shift)
            .norm()
            .total_cmp(&(b.0 - rel.shift).norm())
    });
    let exact: Vec<C64> = eigs.iter().map(|e| e.0).collect();
    check_spectrum(&me, &rel, &exact, "JC");
    assert_eq!(rel.eigenvalues.len(), 10);
    assert_eq!(rel.degenerate, None);
    // the 10 found are the 10 nearest the shift (ties at the boundary aside)
    let reach10 = (exact[9] - rel.shift).norm();
    for l in &rel.eigenvalues {
        assert!((l - rel.shift).norm() <= reach10 * (1.0 + 1e-8));
    }
}

/// Non-unique steady states are detected and their number reported, and the direct solve
/// refuses them:
/// - a spin with neither drive nor dissipation: ρ_gg and ρ_ee are both conserved (k = 2);
/// - a lossless mode (3 levels, detuned) beside a decaying, uncoupled spin: every Fock
///   population of the mode is conserved (k = 3);
/// - two undamped spins resonantly coupled to one lossy mode: the antisymmetric state
///   (|eg⟩ − |ge⟩)/√2 ⊗ |0⟩ is dark (decoupled from the mode by symmetry), so it and |gg, 0⟩,
///   with their coherences (same energy), span k = 4 (Dicke subradiance; Dicke, Phys. Rev. 93,
///   99 (1954); from memory). This one exceeds the initial block size 4 and forces a larger
///   block.
///
/// k is checked against the number of zero eigenvalues of the dense reference 𝓛.
#[test]
fn degenerate_steady_states_are_reported() {
    let lone = spin(SiteParams {
        detuning: 0.5,
        ..Default::default()
    });
    let uncoupled = Network {
        sites: vec![SiteParams {
            decay: 1.0,
            ..Default::default()
        }],
        modes: vec![ModeParams {
            levels: 3,
            detuning: 0.5,
            ..Default::default()
        }],
        ..Network::empty()
    }
    .build()
    .unwrap();
    let dark = Network {
        sites: vec![SiteParams::default(), SiteParams::default()],
        modes: vec![ModeParams {
            levels: 3,
            loss: 1.0,
            ..Default::default()
        }],
        coupling: vec![vec![0.8], vec![0.8]],
        ..Network::empty()
    }
    .build()
    .unwrap();
    for (me, k, label) in [
        (lone, 2, "lone spin"),
        (uncoupled, 3, "lossless mode"),
        (dark, 4, "dark state"),
    ] {
        let rel = steady::relaxation(&me, 0.0, &RelaxationOptions::default()).unwrap();
        let dense = Dense::new(&me, 0.0);
        let zero_abs = RelaxationOptions::default().zero_tol * rel.scale;
        let dense_zeros = dense
            .eigen()
            .iter()
            .filter(|e| e.0.norm() <= zero_abs)
            .count();
        eprintln!(
            "{label}: degenerate {:?} (dense: {dense_zeros}), block {}, basis {}, eigenvalues {:?}",
            rel.degenerate, rel.block_size, rel.basis_size, rel.eigenvalues
        );
        assert_eq!(dense_zeros, k, "{label}: dense reference");
        assert_eq!(rel.degenerate, Some(k), "{label}");
        assert!(!rel.zero_dimension_is_lower_bound);
        match steady::steady_state_direct(&me, 0.0, &DirectOptions::default()) {
            Err(SteadyError::Singular { .. }) => {}
            other => panic!("{label}: expected Singular, got {other:?}"),
        }
    }
}

/// The iterative and evolution solvers refuse before allocating when their known workspace
/// exceeds the limit, and the driver then reports every method's refusal (common practice: check
/// the memory before allocating).
#[test]
fn workspace_limits_refuse_before_allocating() {
    let me = driven_jc();
    let d = me.space.dim();
    let gopts = GmresOptions {
        max_workspace_bytes: Some(1000),
        ..seq_gmres()
    };
    match steady::steady_state_gmres(&me, 0.0, &gopts, None) {
        Err(SteadyError::WorkspaceTooLarge {
            method,
            needed,
            allowed,
        }) => {
            assert_eq!(method, SteadyMethod::Gmres);
            assert_eq!(needed, steady::gmres_workspace_bytes(d, &gopts));
            assert_eq!(allowed, 1000);
        }
        other => panic!("expected a refusal, got {other:?}"),
    }
    let mut eopts = seq_evolution();
    eopts.max_workspace_bytes = Some(1000);
    assert!(matches!(
        steady::steady_state_evolve(&me, 0.0, &eopts, None),
        Err(SteadyError::WorkspaceTooLarge {
            method: SteadyMethod::Evolution,
            ..
        })
    ));
    let opts = SteadyOptions {
        direct: DirectOptions {
            max_factor_bytes: Some(1000),
            ..Default::default()
        },
        gmres: gopts,
        evolution: eopts,
        ..Default::default()
    };
    match steady::steady_state(&me, 0.0, &opts) {
        Err(SteadyError::AllFailed(errors)) => {
            assert_eq!(errors.len(), 3, "{errors:?}");
            assert!(matches!(errors[0], SteadyError::TooLarge { .. }));
            assert!(matches!(errors[1], SteadyError::WorkspaceTooLarge { .. }));
            assert!(matches!(errors[2], SteadyError::WorkspaceTooLarge { .. }));
        }
        other => panic!("expected every method to refuse, got {other:?}"),
    }
    // with room, both run
    let gopts = GmresOptions {
        max_workspace_bytes: Some(steady::gmres_workspace_bytes(d, &seq_gmres())),
        ..seq_gmres()
    };
    steady::steady_state_gmres(&me, 0.0, &gopts, None).unwrap();
}
