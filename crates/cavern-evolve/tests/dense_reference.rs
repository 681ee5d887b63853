//! The library's evolution against an independent exact propagation: the d²×d² Lindbladian is
//! built densely in this test from the documented conventions (VALIDATION.md "Conventions"),
//! exponentiated by scaling and squaring (`common::expm`), and applied to vec(ρ₀). The full density
//! matrix is compared elementwise at every sample time.
//!
//! Reference accuracy: the series is summed to below 1e-18 relative, so the reference is limited
//! by rounding in the squarings; it is estimated per sample as the difference between
//! exp(𝓛tₖ)ρ₀ computed directly and by repeated application of exp(𝓛Δt), and added to the
//! tolerance.

mod common;

use cavern_model::{
    CouplingForm, ModeInit, ModeParams, Network, ProductState, SiteParams, SpinInit, C64,
};
use common::{
    expm, eye, hermitian_adjoint, kron_all, lin, liouvillian, matvec, max_diff, mm, ops, opts, re,
    run,
};

const RTOL: f64 = 1e-10;
const ATOL: f64 = 1e-12;

/// ρ(tₖ) = exp(𝓛 tₖ) vec ρ₀ for uniformly spaced tₖ = kΔt, with a per-sample error estimate.
fn exact_propagation(
    l: &[C64],
    rho0: &[C64],
    dt: f64,
    samples: usize,
) -> (Vec<Vec<C64>>, Vec<f64>) {
    let n = rho0.len();
    let scaled = |t: f64| -> Vec<C64> { l.iter().map(|v| v * t).collect() };
    let step = expm(&scaled(dt), n);
    let mut out = vec![rho0.to_vec()];
    let mut err = vec![0.0];
    let mut v = rho0.to_vec();
    for k in 1..samples {
        v = matvec(&step, &v);
        let direct = matvec(&expm(&scaled(dt * k as f64), n), rho0);
        err.push(max_diff(&v, &direct));
        out.push(direct);
    }
    (out, err)
}

/// Spin amplitudes (c_g, c_e) = (e^{iφ} sin(θ/2), cos(θ/2)) and the pure-state density matrix,
/// written independently of `SpinInit`.
fn spin_density(theta: f64, phi: f64) -> Vec<C64> {
    let c = [
        C64::from_polar((theta / 2.0).sin(), phi),
        re((theta / 2.0).cos()),
    ];
    (0..4).map(|k| c[k / 2] * c[k % 2].conj()).collect()
}

fn fock_density(n: usize, levels: usize) -> Vec<C64> {
    let mut m = vec![C64::new(0.0, 0.0); levels * levels];
    m[n * levels + n] = re(1.0);
    m
}

/// One spin + one mode with the dipole coupling g(a + a†)σˣ (plus detunings, cavity loss and
/// spin decay) against the exact propagation of the dense Lindbladian, on a 2×3 space. Also shows
/// that the comparison distinguishes the dipole form from the exchange form g(aσ⁺ + a†σ⁻): the
/// counter-rotating terms change ρ by far more than the tolerance.
/// Model: Rabi, Phys. Rev. 49, 324 (1936) / Jaynes & Cummings, Proc. IEEE 51, 89 (1963) (from
/// memory); conventions of VALIDATION.md.
#[test]
fn dipole_coupling_matches_exact_dense_propagation() {
    let levels = 3;
    let (dc, da, g, kappa, gamma) = (0.5, -0.3, 0.45, 0.4, 0.25);
    let (theta, phi) = (0.9, -0.4);
    let net = Network {
        sites: vec![SiteParams {
            detuning: da,
            decay: gamma,
            ..Default::default()
        }],
        modes: vec![ModeParams {
            levels,
            detuning: dc,
            loss: kappa,
            ..Default::default()
        }],
        coupling: vec![vec![g]],
        coupling_form: CouplingForm::Dipole,
        ..Network::empty()
    };
    let me = net.build().unwrap();
    let rho0_lib = ProductState {
        spins: vec![SpinInit { theta, phi }],
        modes: vec![ModeInit::Fock(1)],
    }
    .density(&me.space)
    .unwrap();
    let d = 2 * levels;
    let rho0 = kron_all(&[
        (spin_density(theta, phi), 2),
        (fock_density(1, levels), levels),
    ]);
    assert!(max_diff(&rho0, &rho0_lib) < 1e-15);

    // dense operators on site ⊗ mode
    let a = kron_all(&[(eye(2), 2), (ops::a(levels), levels)]);
    let ad = hermitian_adjoint(&a, d);
    let sx = kron_all(&[(ops::sx(), 2), (eye(levels), levels)]);
    let sz = kron_all(&[(ops::sz(), 2), (eye(levels), levels)]);
    let sm = kron_all(&[(ops::sm(), 2), (eye(levels), levels)]);
    let sp = hermitian_adjoint(&sm, d);
    let h_free = lin(&[(re(dc), &mm(&ad, &a, d)), (re(da / 2.0), &sz)]);
    let x = lin(&[(re(1.0), &a), (re(1.0), &ad)]);
    let h_dipole = lin(&[(re(1.0), &h_free), (re(g), &mm(&x, &sx, d))]);
    let exch = lin(&[(re(1.0), &mm(&a, &sp, d)), (re(1.0), &mm(&ad, &sm, d))]);
    let h_exchange = lin(&[(re(1.0), &h_free), (re(g), &exch)]);
    let jumps = vec![
        lin(&[(re(kappa.sqrt()), &a)]),
        lin(&[(re(gamma.sqrt()), &sm)]),
    ];
    let (dt, samples) = (0.5, 13);
    let times: Vec<f64> = (0..samples).map(|k| dt * k as f64).collect();
    let (refs, ref_err) = exact_propagation(&liouvillian(&h_dipole, &jumps, d), &rho0, dt, samples);
    let (refs_exch, _) =
        exact_propagation(&liouvillian(&h_exchange, &jumps, d), &rho0, dt, samples);

    let r = run(&me, &rho0_lib, &times, opts(RTOL, ATOL));
    let tol_lib = r.tol(1.0, 1.0); // one component of ρ
    let (mut worst, mut worst_tol, mut form_effect) = (0.0f64, 0.0f64, 0.0f64);
    for k in 0..samples {
        let tol = tol_lib + ref_err[k];
        let e = max_diff(&r.states[k], &refs[k]);
        assert!(e <= tol, "t={}: ρ off by {e:e} > {tol:e}", times[k]);
        worst = worst.max(e);
        worst_tol = worst_tol.max(tol);
        form_effect = form_effect.max(max_diff(&refs[k], &refs_exch[k]));
    }
    assert!(form_effect > 1e4 * worst_tol, "{form_effect}");
    eprintln!(
        "dipole 2×3: max err ρ {worst:.2e} (tol ≤ {worst_tol:.2e}, reference err ≤ {:.1e}); dipole vs exchange {form_effect:.2e}; {} steps",
        ref_err.iter().fold(0.0f64, |a, &b| a.max(b)),
        r.stats.steps
    );
}

/// Every term of the model at once, for both coupling forms: two sites and one mode (3 levels)
/// with site detunings, decay, dephasing √(γφ/2)σᶻ, pump √P σ⁺ and drives (Ω/2)σˣ; mode detuning,
/// loss √(κ(1+n_th)) a, thermal gain √(κ n_th) a† and drive ε(a + a†); couplings gᵢ; a zz term
/// Jᶻσᶻ₀σᶻ₁ and a flip-flop term Jˣ(σ⁺₀σ⁻₁ + σ⁻₀σ⁺₁). The library against the exact propagation of
/// the dense Lindbladian built from VALIDATION.md's conventions.
#[test]
fn full_network_matches_exact_dense_propagation() {
    let levels = 3;
    let s: [(f64, f64, f64, f64, f64); 2] = [
        // (Δa, γ, γφ, P, Ω)
        (0.4, 0.3, 0.2, 0.05, 0.6),
        (-0.7, 0.1, 0.05, 0.15, -0.3),
    ];
    let (dc, kappa, nth, eps): (f64, f64, f64, f64) = (0.25, 0.5, 0.2, 0.35);
    let gs = [0.3, -0.45];
    let (jz, jx) = (0.15, 0.4);
    let d = 4 * levels;
    // dense operators on site0 ⊗ site1 ⊗ mode
    let on_site = |i: usize, op: Vec<C64>| -> Vec<C64> {
        let mut f = vec![(eye(2), 2), (eye(2), 2), (eye(levels), levels)];
        f[i] = (op, 2);
        kron_all(&f)
    };
    let a = kron_all(&[(eye(2), 2), (eye(2), 2), (ops::a(levels), levels)]);
    let ad = hermitian_adjoint(&a, d);
    let sm = [on_site(0, ops::sm()), on_site(1, ops::sm())];
    let sp = [hermitian_adjoint(&sm[0], d), hermitian_adjoint(&sm[1], d)];
    let sz = [on_site(0, ops::sz()), on_site(1, ops::sz())];
    let sx = [on_site(0, ops::sx()), on_site(1, ops::sx())];
    let x = lin(&[(re(1.0), &a), (re(1.0), &ad)]);
    let mut h = lin(&[
        (re(dc), &mm(&ad, &a, d)),
        (re(eps), &x),
        (re(jz), &mm(&sz[0], &sz[1], d)),
        (re(jx), &mm(&sp[0], &sm[1], d)),
        (re(jx), &mm(&sm[0], &sp[1], d)),
    ]);
    let mut jumps = vec![
        lin(&[(re((kappa * (1.0 + nth)).sqrt()), &a)]),
        lin(&[(re((kappa * nth).sqrt()), &ad)]),
    ];
    for i in 0..2 {
        let (da, gamma, gphi, pump, omega) = s[i];
        h = lin(&[
            (re(1.0), &h),
            (re(da / 2.0), &sz[i]),
            (re(omega / 2.0), &sx[i]),
        ]);
        jumps.push(lin(&[(re(gamma.sqrt()), &sm[i])]));
        jumps.push(lin(&[(re((gphi / 2.0).sqrt()), &sz[i])]));
        jumps.push(lin(&[(re(pump.sqrt()), &sp[i])]));
    }
    let coupling = |form: CouplingForm| -> Vec<C64> {
        let mut c = vec![C64::new(0.0, 0.0); d * d];
        for i in 0..2 {
            let t = match form {
                CouplingForm::Exchange => lin(&[
                    (re(1.0), &mm(&a, &sp[i], d)),
                    (re(1.0), &mm(&ad, &sm[i], d)),
                ]),
                CouplingForm::Dipole => mm(&x, &sx[i], d),
                CouplingForm::Longitudinal => mm(&x, &sz[i], d),
            };
            c = lin(&[(re(1.0), &c), (re(gs[i]), &t)]);
        }
        c
    };
    let (th0, ph0, th1, ph1) = (0.3, 0.2, 2.2, -1.0);
    let rho0 = kron_all(&[
        (spin_density(th0, ph0), 2),
        (spin_density(th1, ph1), 2),
        (fock_density(1, levels), levels),
    ]);
    let (dt, samples) = (0.4, 11);
    let times: Vec<f64> = (0..samples).map(|k| dt * k as f64).collect();

    for form in [
        CouplingForm::Exchange,
        CouplingForm::Dipole,
        CouplingForm::Longitudinal,
    ] {
        let net = Network {
            sites: s
                .iter()
                .map(|&(detuning, decay, dephasing, pump, rabi)| SiteParams {
                    detuning,
                    decay,
                    dephasing,
                    pump,
                    rabi,
                })
                .collect(),
            modes: vec![ModeParams {
                levels,
                detuning: dc,
                loss: kappa,
                thermal: nth,
                drive: eps,
                ..Default::default()
            }],
            coupling: vec![vec![gs[0]], vec![gs[1]]],
            coupling_form: form,
            zz: vec![vec![0.0, jz], vec![jz, 0.0]],
            flip_flop: vec![vec![0.0, jx], vec![jx, 0.0]],
            ..Network::empty()
        };
        let me = net.build().unwrap();
        let rho0_lib = ProductState {
            spins: vec![
                SpinInit {
                    theta: th0,
                    phi: ph0,
                },
                SpinInit {
                    theta: th1,
                    phi: ph1,
                },
            ],
            modes: vec![ModeInit::Fock(1)],
        }
        .density(&me.space)
        .unwrap();
        assert!(max_diff(&rho0, &rho0_lib) < 1e-15);
        let h_full = lin(&[(re(1.0), &h), (re(1.0), &coupling(form))]);
        // the library's Hamiltonian must equal the dense one exactly (up to rounding)
        assert!(max_diff(&me.hamiltonian_at(0.0).to_dense(), &h_full) < 1e-14);
        let (refs, ref_err) =
            exact_propagation(&liouvillian(&h_full, &jumps, d), &rho0, dt, samples);
        let r = run(&me, &rho0_lib, &times, opts(RTOL, ATOL));
        let tol_lib = r.tol(1.0, 1.0);
        let (mut worst, mut worst_tol) = (0.0f64, 0.0f64);
        for k in 0..samples {
            let tol = tol_lib + ref_err[k];
            let e = max_diff(&r.states[k], &refs[k]);
            assert!(
                e <= tol,
                "{form:?} t={}: ρ off by {e:e} > {tol:e}",
                times[k]
            );
            worst = worst.max(e);
            worst_tol = worst_tol.max(tol);
        }
        eprintln!(
            "full network {form:?}: max err ρ {worst:.2e} (tol ≤ {worst_tol:.2e}, reference err ≤ {:.1e}); {} steps",
            ref_err.iter().fold(0.0f64, |a, &b| a.max(b)),
            r.stats.steps
        );
    }
}
