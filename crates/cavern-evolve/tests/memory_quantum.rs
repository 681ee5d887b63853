//! Quantum side of the associative memory: Glauber field relaxation, longitudinal spin–mode
//! coupling and the adiabatic elimination of modes, checked against SciPy, closed-form
//! steady states and the far-detuned limit (Reiter & Sørensen 2012).

mod common;

use cavern_model::memory::mediated_zz;
use cavern_model::{
    effective, CouplingForm, FieldRelaxation, MasterEquation, ModeInit, ModeParams, Network,
    ProductState, SiteParams, SpinInit, C64,
};
use cavern_observe as obs;
use common::python::python;
use common::{opts, run};

fn spins(angles: &[(f64, f64)]) -> Vec<SpinInit> {
    angles
        .iter()
        .map(|&(theta, phi)| SpinInit { theta, phi })
        .collect()
}

#[test]
fn field_relaxation_populations_follow_the_classical_glauber_master_equation() {
    // Glauber, J. Math. Phys. 4, 294 (1963): single-spin-flip rates γ/(1 + e^{ΔE/T}) with
    // ΔE = −2 sᵢ' hᵢ the energy change of the flip. With only the field-relaxation jumps and a
    // diagonal Hamiltonian (zz, detunings), the diagonal of ρ obeys exactly this classical master
    // equation, even when the initial state has coherences. Reference: the rate matrix built in
    // Python from the formula and propagated with scipy.linalg.expm.
    let zz = vec![
        vec![0.0, 0.6, -0.4],
        vec![0.6, 0.0, 0.3],
        vec![-0.4, 0.3, 0.0],
    ];
    let times: Vec<f64> = (0..7).map(|k| 0.5 * k as f64).collect();
    let angles = [(0.4, 0.3), (2.0, -1.0), (1.1, 2.5)];
    for temperature in [0.7, 0.0] {
        let net = Network {
            sites: vec![
                SiteParams {
                    detuning: 0.3,
                    ..Default::default()
                };
                3
            ],
            zz: zz.clone(),
            field_relaxation: Some(FieldRelaxation {
                rate: 1.3,
                temperature,
            }),
            ..Network::empty()
        };
        let me = net.build().unwrap();
        let st = ProductState {
            spins: spins(&angles),
            modes: vec![],
        };
        let rho0 = st.density(&me.space).unwrap();
        let r = run(&me, &rho0, &times, opts(1e-9, 1e-11));
        let d = me.space.dim();
        let input = format!(
            "{}\n{temperature:e} 1.3\n{}\n{}",
            zz.iter()
                .flatten()
                .map(|x| format!("{x:e}"))
                .collect::<Vec<_>>()
                .join(" "),
            (0..d)
                .map(|k| format!("{:e}", rho0[k * d + k].re))
                .collect::<Vec<_>>()
                .join(" "),
            times
                .iter()
                .map(|t| format!("{t:e}"))
                .collect::<Vec<_>>()
                .join(" "),
        );
        // site 0 is the most significant bit of the basis index; bit value 1 = |e⟩ = s = +1
        let out = python(
            "import sys, numpy as np, scipy.linalg as sl\n\
             L = sys.stdin.read().split('\\n')\n\
             Jz = np.array([float(x) for x in L[0].split()]); N = int(round(len(Jz) ** 0.5))\n\
             Jz = Jz.reshape(N, N)\n\
             T, g = (float(x) for x in L[1].split())\n\
             p0 = np.array([float(x) for x in L[2].split()])\n\
             ts = [float(x) for x in L[3].split()]\n\
             D = 2 ** N\n\
             s = lambda r, i: 1.0 if (r >> (N - 1 - i)) & 1 else -1.0\n\
             def w(dE):\n\
             \x20   if T > 0: return 1.0 / (1.0 + np.exp(dE / T))\n\
             \x20   return 1.0 if dE < 0 else (0.0 if dE > 0 else 0.5)\n\
             W = np.zeros((D, D))\n\
             for r in range(D):\n\
             \x20   for i in range(N):\n\
             \x20       h = -sum(Jz[i, j] * s(r, j) for j in range(N) if j != i)\n\
             \x20       dE = 2.0 * s(r, i) * h  # flip s_i -> -s_i changes -s_i h by 2 s_i h\n\
             \x20       q = r ^ (1 << (N - 1 - i))\n\
             \x20       W[q, r] += g * w(dE); W[r, r] -= g * w(dE)\n\
             for t in ts:\n\
             \x20   print(' '.join(repr(float(x)) for x in sl.expm(W * t) @ p0))",
            &input,
        );
        let mut worst = 0.0f64;
        for (k, line) in out.lines().enumerate() {
            let want: Vec<f64> = line
                .split_whitespace()
                .map(|x| x.parse().unwrap())
                .collect();
            for q in 0..d {
                let got = r.states[k][q * d + q];
                worst = worst.max((got.re - want[q]).abs());
                assert!(got.im.abs() < 1e-14);
            }
        }
        eprintln!("T = {temperature}: worst population difference {worst:.2e}");
        assert!(worst < r.tol(1.0, 1.0), "{worst}");
        // and populations really moved (the check is not trivial)
        let moved = (0..d)
            .map(|q| (r.states[6][q * d + q] - rho0[q * d + q]).norm())
            .fold(0.0, f64::max);
        assert!(moved > 0.05);
    }
}

#[test]
fn longitudinal_coupling_displaces_a_lossy_mode() {
    // A spin in a σᶻ eigenstate s drives the mode with a constant force g s: the damped driven
    // oscillator relaxes to the coherent state α = −g s/(Δ − iκ/2), ⟨a†a⟩ = g²/(Δ² + κ²/4)
    // (Walls & Milburn, Quantum Optics (2008), from memory). For a superposition the two
    // conditional fields differ and the coherence decays at Γ = κ|α₊ − α₋|²/2
    // = 2κg²/(Δ² + κ²/4) once the field has settled (measurement-induced dephasing:
    // Gambetta et al., Phys. Rev. A 74, 042318 (2006), from memory).
    let (g, dc, kappa, levels) = (0.5, 1.0, 1.0, 10);
    let net = Network {
        sites: vec![SiteParams::default()],
        modes: vec![ModeParams {
            levels,
            detuning: dc,
            loss: kappa,
            ..Default::default()
        }],
        coupling: vec![vec![g]],
        coupling_form: CouplingForm::Longitudinal,
        ..Network::empty()
    };
    let me = net.build().unwrap();
    let times = [0.0, 40.0];
    let n_want = g * g / (dc * dc + kappa * kappa / 4.0);
    for s in [1i8, -1] {
        let st = ProductState {
            spins: vec![SpinInit::from_sign(s)],
            modes: vec![ModeInit::Vacuum],
        };
        let r = run(
            &me,
            &st.density(&me.space).unwrap(),
            &times,
            opts(1e-9, 1e-11),
        );
        let rho = &r.states[1];
        let alpha = C64::new(-g * f64::from(s), 0.0) / C64::new(dc, -kappa / 2.0);
        let field = obs::field(&me.space, rho, 0);
        let n = obs::photon_number(&me.space, rho, 0);
        eprintln!("s = {s}: ⟨a⟩ = {field:.6}, want {alpha:.6}; ⟨a†a⟩ = {n:.6}, want {n_want:.6}");
        // transient e^{−κt/2} = e^{−20}; truncation P(n ≥ 10) ≈ 0.2¹⁰/10! is negligible
        assert!((field - alpha).norm() < r.tol(1.0, levels as f64) + 1e-8);
        assert!((n - n_want).abs() < r.tol(1.0, (levels * levels) as f64 / 2.0) + 1e-8);
    }
    // dephasing of a superposition: ⟨σˣ⟩ decays at Γ after the transient
    let st = ProductState {
        spins: spins(&[(std::f64::consts::FRAC_PI_2, 0.0)]),
        modes: vec![ModeInit::Vacuum],
    };
    let times = [20.0, 30.0];
    let mut all = vec![0.0];
    all.extend(times);
    let r = run(
        &me,
        &st.density(&me.space).unwrap(),
        &all,
        opts(1e-10, 1e-12),
    );
    let x1 = obs::spin_x(&me.space, &r.states[1], 0);
    let x2 = obs::spin_x(&me.space, &r.states[2], 0);
    let gamma = (x1 / x2).ln() / (times[1] - times[0]);
    let gamma_want = 2.0 * kappa * g * g / (dc * dc + kappa * kappa / 4.0);
    eprintln!("dephasing rate {gamma:.6}, want {gamma_want:.6}");
    assert!((gamma / gamma_want - 1.0).abs() < 1e-4);
}

/// ⟨σᶻᵢ⟩ and ⟨σˣᵢ⟩ of every site at every sample.
fn spin_traces(me: &MasterEquation, rho0: &[C64], times: &[f64]) -> Vec<Vec<f64>> {
    let r = run(me, rho0, times, opts(1e-8, 1e-10));
    r.states
        .iter()
        .map(|rho| {
            (0..me.space.n_sites())
                .flat_map(|i| {
                    [
                        obs::spin_z(&me.space, rho, i),
                        obs::spin_x(&me.space, rho, i),
                    ]
                })
                .collect()
        })
        .collect()
}

/// Drive and duration of the full-versus-effective comparison.
const OMEGA: f64 = 0.3;
const T_END: usize = 30;

/// Largest difference of ⟨σᶻᵢ⟩, ⟨σˣᵢ⟩ (i = 0, 1; t = 0…T_END) between the full model of two
/// spins and the given modes (mode m: longitudinal couplings `g[m]` of the two sites, detuning
/// Δₘ = `detunings[m]`, κₘ = Δₘ/2; Rabi drive Ω on both sites) and its adiabatically eliminated
/// version. Also returns Σₘ ε²ₘ with εₘ = (|g₀ₘ| + |g₁ₘ|)/|Δₘ − iκₘ/2|, and the total mediated Jᶻ.
fn full_vs_effective(g: &[[f64; 2]], detunings: &[f64], levels: usize) -> (f64, f64, f64) {
    let modes: Vec<ModeParams> = detunings
        .iter()
        .map(|&dc| ModeParams {
            levels,
            detuning: dc,
            loss: 0.5 * dc,
            ..Default::default()
        })
        .collect();
    let net = Network {
        sites: vec![
            SiteParams {
                rabi: OMEGA,
                ..Default::default()
            };
            2
        ],
        modes,
        coupling: (0..2).map(|i| g.iter().map(|gm| gm[i]).collect()).collect(),
        coupling_form: CouplingForm::Longitudinal,
        ..Network::empty()
    };
    let eff = effective::eliminate_modes(&net).unwrap();
    let (mut jz, mut eps2) = (0.0, 0.0);
    for (gm, md) in g.iter().zip(&net.modes) {
        jz += mediated_zz(gm[0], gm[1], md.detuning, md.loss);
        let s_max = gm[0].abs() + gm[1].abs();
        eps2 += s_max * s_max / (md.detuning * md.detuning + md.loss * md.loss / 4.0);
    }
    assert!((eff.network.zz[0][1] - jz).abs() <= 1e-15 * jz.abs());
    let full = net.build().unwrap();
    let reduced = eff.build().unwrap();
    let angles = spins(&[(1.0, 0.0), (2.1, 0.5)]);
    let times: Vec<f64> = (0..=T_END).map(|k| k as f64).collect();
    let rho_full = ProductState {
        spins: angles.clone(),
        modes: vec![ModeInit::Vacuum; g.len()],
    }
    .density(&full.space)
    .unwrap();
    let rho_red = ProductState {
        spins: angles,
        modes: vec![],
    }
    .density(&reduced.space)
    .unwrap();
    let a = spin_traces(&full, &rho_full, &times);
    let b = spin_traces(&reduced, &rho_red, &times);
    let worst = a
        .iter()
        .flatten()
        .zip(b.iter().flatten())
        .map(|(x, y)| (x - y).abs())
        .fold(0.0, f64::max);
    (worst, eps2, jz)
}

#[test]
fn eliminated_mode_reproduces_the_far_detuned_dynamics() {
    // Reiter & Sørensen, Phys. Rev. A 85, 032111 (2012): the effective spin-only master equation
    // (mediated zz + collective dephasing) is the leading order in ε_S = S_max/|Δ − iκ/2|, the
    // mode displacement per spin configuration. Error budget of the spin observables:
    // - state dressing: the full model's spins are entangled with displaced mode states, which
    //   reduces ⟨σˣ⟩ by the overlap e^{−|α₊ − α₋|²/2} ≈ 1 − 2gᵢ²/|Δ − iκ/2|², plus the slip of
    //   starting from the undisplaced vacuum: together ≤ 2ε_S²;
    // - neglected corrections of relative order ε_S² to each rate (Ω, Jᶻ) accumulate as phase
    //   errors ≤ ε_S²(Ω + |Jᶻ|)t.
    // Bound: ε_S²(2 + (Ω + |Jᶻ|)t_max). Two spins, g ∝ √Δ and κ = Δ/2 keep the effective
    // dynamics (Jᶻ ∝ g²/Δ, dephasing ∝ κg²/Δ²) fixed while ε_S² ∝ 1/Δ shrinks, so quadrupling Δ
    // must quarter the error. With several modes the contributions add (Σₘ ε²ₘ). The second
    // case stores the two "patterns" (1, −1) and (1, 1) in two modes, as the mode realisation
    // of a memory does.
    let g0 = [1.0, -0.7];
    for (g, rel) in [
        (vec![g0], vec![1.0]),
        (vec![[0.8, -0.8], [0.5, 0.5]], vec![1.0, 1.3]),
    ] {
        let at = |dc: f64| {
            let c = (dc / 20.0).sqrt();
            let gs: Vec<[f64; 2]> = g.iter().map(|gm| [gm[0] * c, gm[1] * c]).collect();
            let ds: Vec<f64> = rel.iter().map(|r| r * dc).collect();
            full_vs_effective(&gs, &ds, 4)
        };
        check_second_order(at, g.len());
    }
    // near resonance (Δ = g) the elimination is invalid and the models disagree clearly
    let (e1, eps1, _) = full_vs_effective(&[g0], &[1.0], 14);
    eprintln!("Δ = 1: max |Δ⟨σ⟩| = {e1:.3e} (ε_S² = {eps1:.2})");
    assert!(e1 > 0.2, "Δ = 1: {e1}");
}

/// Errors at Δ = 20 and 80 are within the bound ε_S²(2 + (Ω + |Jᶻ|)t_max) and fall as Δ⁻¹ ∝ ε_S².
fn check_second_order(at: impl Fn(f64) -> (f64, f64, f64), modes: usize) {
    let mut errors = Vec::new();
    for dc in [20.0, 80.0] {
        let (err, eps2, jz) = at(dc);
        let bound = eps2 * (2.0 + (OMEGA + jz.abs()) * T_END as f64);
        eprintln!(
            "{modes} mode(s), Δ = {dc}: max |Δ⟨σ⟩| = {err:.3e}, ε_S² = {eps2:.3e}, \
             bound {bound:.3e}"
        );
        assert!(err < bound, "Δ = {dc}: {err} ≥ {bound}");
        errors.push(err);
    }
    // second order: ε_S² quartered → error quartered (allow 2.5…6 for higher orders)
    let ratio = errors[0] / errors[1];
    eprintln!("error ratio Δ = 20 → 80: {ratio:.2}");
    assert!((2.5..6.0).contains(&ratio), "error ratio {ratio}");
}

/// ⟨σᶻᵢ⟩, ⟨σˣᵢ⟩ at t = 0, dt, …, steps·dt from the exact propagator e^{𝓛dt} of the dense
/// reference implementation (independent of the library's kernel, which does not accept
/// collective jumps).
fn dense_spin_traces(me: &MasterEquation, rho0: &[C64], dt: f64, steps: usize) -> Vec<Vec<f64>> {
    assert!(me.driven.is_empty());
    let d = me.space.dim();
    let h = me.static_hamiltonian.to_dense();
    let jumps: Vec<Vec<C64>> = me.jumps.iter().map(|j| j.op.to_dense()).collect();
    let l: Vec<C64> = common::liouvillian(&h, &jumps, d)
        .iter()
        .map(|v| v * dt)
        .collect();
    let step = common::expm(&l, d * d);
    let mut rho = rho0.to_vec();
    let mut out = Vec::new();
    for k in 0..=steps {
        if k > 0 {
            rho = common::matvec(&step, &rho);
        }
        out.push(
            (0..me.space.n_sites())
                .flat_map(|i| {
                    [
                        obs::spin_z(&me.space, &rho, i),
                        obs::spin_x(&me.space, &rho, i),
                    ]
                })
                .collect(),
        );
    }
    out
}

/// Exchange coupling: largest spin-observable difference between the full model (two spins,
/// one mode with Δ, κ = Δ/2) and its eliminated version over t = 0…60, with ε_S² and the
/// largest effective rate (|Jˣ| or |Lamb shift|).
fn exchange_full_vs_effective(g: [f64; 2], dc: f64) -> (f64, f64, f64) {
    let kappa = 0.5 * dc;
    let net = Network {
        sites: vec![SiteParams::default(); 2],
        // one excitation at most: two Fock levels are exact
        modes: vec![ModeParams {
            levels: 2,
            detuning: dc,
            loss: kappa,
            ..Default::default()
        }],
        coupling: vec![vec![g[0]], vec![g[1]]],
        coupling_form: CouplingForm::Exchange,
        ..Network::empty()
    };
    let eff = effective::eliminate_modes(&net).unwrap();
    let jx = effective::mediated_flip_flop(g[0], g[1], dc, kappa);
    assert_eq!(eff.network.flip_flop[0][1], jx);
    let rate = jx
        .abs()
        .max(effective::mediated_shift(g[0], dc, kappa).abs());
    let full = net.build().unwrap();
    let reduced = eff.build().unwrap();
    // spin 0 in a superposition of |e⟩ and |g⟩, spin 1 in |g⟩: at most one excitation
    let angles = spins(&[(1.0, 0.0), (std::f64::consts::PI, 0.0)]);
    let rho_full = ProductState {
        spins: angles.clone(),
        modes: vec![ModeInit::Vacuum],
    }
    .density(&full.space)
    .unwrap();
    let rho_red = ProductState {
        spins: angles,
        modes: vec![],
    }
    .density(&reduced.space)
    .unwrap();
    let a = dense_spin_traces(&full, &rho_full, 2.0, 30);
    let b = dense_spin_traces(&reduced, &rho_red, 2.0, 30);
    // non-trivial: the mediated flip-flop moves excitation to spin 1 (⟨σᶻ₁⟩ starts at −1)
    let moved = b.iter().map(|v| v[2] + 1.0).fold(0.0, f64::max);
    assert!(moved > 0.1, "spin 1 stays in |g⟩ ({moved})");
    let worst = a
        .iter()
        .flatten()
        .zip(b.iter().flatten())
        .map(|(x, y)| (x - y).abs())
        .fold(0.0, f64::max);
    let s_max = g[0].abs() + g[1].abs();
    (worst, s_max * s_max / (dc * dc + kappa * kappa / 4.0), rate)
}

#[test]
fn eliminated_exchange_mode_gives_dispersive_flip_flop_and_collective_decay() {
    // Reiter & Sørensen, Phys. Rev. A 85, 032111 (2012), exchange coupling: the far-detuned
    // mode mediates Jˣᵢⱼ = −gᵢgⱼΔ/(Δ² + κ²/4), shifts each site by −gᵢ²Δ/(Δ² + κ²/4) and
    // leaves the collective decay √κ Σgᵢσ⁻ᵢ/(Δ − iκ/2). Same error budget and scaling as the
    // longitudinal case (ε_S² ∝ 1/Δ at fixed effective rates, bound ε_S²(2 + rate·t_max)).
    let g0 = [1.0, 0.8];
    let mut errors = Vec::new();
    for dc in [20.0f64, 80.0] {
        let c = (dc / 20.0).sqrt();
        let (err, eps2, rate) = exchange_full_vs_effective([g0[0] * c, g0[1] * c], dc);
        let bound = eps2 * (2.0 + rate * 60.0);
        eprintln!(
            "exchange, Δ = {dc}: max |Δ⟨σ⟩| = {err:.3e}, ε_S² = {eps2:.3e}, bound {bound:.3e}"
        );
        assert!(err < bound, "Δ = {dc}: {err} ≥ {bound}");
        errors.push(err);
    }
    let ratio = errors[0] / errors[1];
    eprintln!("exchange error ratio Δ = 20 → 80: {ratio:.2}");
    assert!((2.5..6.0).contains(&ratio), "error ratio {ratio}");
    let (e1, _, _) = exchange_full_vs_effective(g0, 1.0);
    eprintln!("exchange, Δ = 1: max |Δ⟨σ⟩| = {e1:.3e}");
    assert!(e1 > 0.2, "Δ = 1: {e1}");
}

#[test]
fn trajectories_handle_the_collective_decay_of_an_eliminated_mode() {
    // The collective jump √κ Σgᵢσ⁻ᵢ/|Δ − iκ/2| has two entries per row; the trajectory solver
    // applies it as a general sparse matrix. Reference: the exact dense propagator (unravelling
    // of the master equation: Dalibard, Castin & Mølmer, PRL 68, 580 (1992)); 5 standard errors.
    let (g, dc) = ([1.0, 0.8], 20.0);
    let net = Network {
        sites: vec![SiteParams::default(); 2],
        modes: vec![ModeParams {
            levels: 2,
            detuning: dc,
            loss: 0.5 * dc,
            ..Default::default()
        }],
        coupling: vec![vec![g[0]], vec![g[1]]],
        ..Network::empty()
    };
    let me = effective::eliminate_modes(&net).unwrap().build().unwrap();
    let st = ProductState {
        spins: vec![SpinInit::from_sign(1), SpinInit::from_sign(-1)],
        modes: vec![],
    };
    let exact = dense_spin_traces(&me, &st.density(&me.space).unwrap(), 10.0, 6);
    let times: Vec<f64> = (0..=6).map(|k| 10.0 * k as f64).collect();
    let sp = me.space.clone();
    let res = cavern_evolve::run_trajectories(
        &me,
        &st.vector(&me.space).unwrap(),
        &times,
        &cavern_evolve::TrajectoryOptions {
            dopri: opts(1e-8, 1e-10),
            trajectories: 3000,
            seed: 5,
            keep: 0,
        },
        2,
        move |psi, out| {
            out[0] = obs::state::spin_z(&sp, psi, 0);
            out[1] = obs::state::spin_z(&sp, psi, 1);
        },
        &|_| {},
    )
    .unwrap();
    let nt = times.len();
    for o in 0..2 {
        for k in 0..nt {
            let (mean, se) = (res.mean[o * nt + k], res.stderr[o * nt + k]);
            let want = exact[k][2 * o];
            assert!(
                (mean - want).abs() <= 5.0 * se + 1e-6,
                "site {o}, t = {}: {mean} ± {se} vs {want}",
                times[k]
            );
        }
    }
    assert!(res
        .jumps
        .iter()
        .any(|j| res.channels[j.channel] == cavern_model::Channel::MediatedDecay(0)));
}
