//! Validation catalogue, single-spin checks (d1)–(d4), (e1), (e2) of /work/shared/VALIDATION.md:
//! spontaneous emission, pure dephasing, both together, incoherent pumping, the Rabi formula with
//! detuning, and the resonance-fluorescence steady state.
//!
//! A two-level system has no truncation, so the analytic results are exact for the model and the
//! tolerances are `common::Run::tol` (derived from rtol/atol) alone, except for the steady state
//! reached by long-time evolution, where a rigorous transient bound is added.

mod common;

use cavern_model::{Network, ProductState, SiteParams, SpinInit, C64};
use cavern_observe as obs;
use common::{opts, run, Run};

const RTOL: f64 = 1e-10;
const ATOL: f64 = 1e-12;

fn linspace(t0: f64, t1: f64, n: usize) -> Vec<f64> {
    (0..n)
        .map(|k| t0 + (t1 - t0) * k as f64 / (n - 1) as f64)
        .collect()
}

/// Evolve one site from `init` and return the run together with the space.
fn one_site(p: SiteParams, init: SpinInit, times: &[f64]) -> (cavern_model::MasterEquation, Run) {
    let me = Network {
        sites: vec![p],
        ..Network::empty()
    }
    .build()
    .unwrap();
    let rho0 = ProductState {
        spins: vec![init],
        modes: vec![],
    }
    .density(&me.space)
    .unwrap();
    let r = run(&me, &rho0, times, opts(RTOL, ATOL));
    (me, r)
}

/// ρ_eg(0) = c_e c̄_g of the Bloch-sphere initial state (the quantity `coherence` returns).
fn rho_eg0(init: SpinInit) -> C64 {
    let [cg, ce] = init.amplitudes();
    ce * cg.conj()
}

/// Pₑ = ρ_ee (the (e, e) entry: basis (g, e) = (0, 1)).
fn pe(rho: &[C64]) -> f64 {
    rho[3].re
}

/// The (θ, φ) state used for coherence checks: not on the equator and with a phase, so both
/// populations and the phase of ρ_eg are non-trivial.
const TILTED: SpinInit = SpinInit {
    theta: 1.1,
    phi: 0.6,
};

/// (d1) Spontaneous emission from |e⟩: Pₑ(t) = e^{−γt}.
/// Source: Allen & Eberly, Optical Resonance and Two-Level Atoms (Wiley, 1975) (from memory).
#[test]
fn d1_spontaneous_emission() {
    let gamma = 0.7;
    let (me, r) = one_site(
        SiteParams {
            decay: gamma,
            detuning: 0.3,
            ..Default::default()
        },
        SpinInit::from_sign(1),
        &linspace(0.0, 8.0, 33),
    );
    let tol = r.tol(1.0, 1.0);
    let mut worst = 0.0f64;
    for (t, rho) in r.times.iter().zip(&r.states) {
        let err = (pe(rho) - (-gamma * t).exp()).abs();
        assert!(err <= tol, "t={t}: Pₑ off by {err:e}");
        // the same through the observable ⟨σᶻ⟩ = 2Pₑ − 1 (value ≤ 1, two entries)
        let ez = (obs::spin_z(&me.space, rho, 0) - (2.0 * (-gamma * t).exp() - 1.0)).abs();
        assert!(ez <= r.tol(1.0, 2.0), "t={t}: ⟨σᶻ⟩ off by {ez:e}");
        worst = worst.max(err);
    }
    eprintln!(
        "(d1) max err Pₑ {worst:.2e} (tol {tol:.2e}); {} steps",
        r.stats.steps
    );
}

/// (d2) Pure dephasing with detuning from a superposition: ρ_eg(t) = ρ_eg(0)e^{−(iΔa + γφ)t}
/// (the documented convention: jump √(γφ/2)σᶻ, coherences decay as e^{−γφ t}); populations
/// constant. Source: Allen & Eberly (1975); Breuer & Petruccione, The Theory of Open Quantum
/// Systems (2002) (from memory).
#[test]
fn d2_pure_dephasing() {
    let (gphi, da) = (0.4, 1.3);
    for init in [
        SpinInit {
            theta: std::f64::consts::FRAC_PI_2,
            phi: 0.0,
        },
        TILTED,
    ] {
        let (me, r) = one_site(
            SiteParams {
                dephasing: gphi,
                detuning: da,
                ..Default::default()
            },
            init,
            &linspace(0.0, 6.0, 25),
        );
        let c0 = rho_eg0(init);
        let pe0 = init.amplitudes()[1].norm_sqr();
        let tol_c = r.tol(c0.norm(), 1.0);
        let tol_p = r.tol(1.0, 1.0);
        let (mut ec, mut ep) = (0.0f64, 0.0f64);
        for (t, rho) in r.times.iter().zip(&r.states) {
            let want = c0 * (-C64::new(gphi, da) * *t).exp();
            let e = (obs::coherence(&me.space, rho, 0) - want).norm();
            assert!(e <= tol_c, "t={t}: ρ_eg off by {e:e}");
            let e2 = (pe(rho) - pe0).abs();
            assert!(e2 <= tol_p, "t={t}: Pₑ moved by {e2:e}");
            (ec, ep) = (ec.max(e), ep.max(e2));
        }
        eprintln!(
            "(d2) θ={}: max err ρ_eg {ec:.2e} (tol {tol_c:.2e}), Pₑ {ep:.2e} (tol {tol_p:.2e}); {} steps",
            init.theta, r.stats.steps
        );
    }
}

/// (d3) Decay and dephasing: ρ_eg(t) = ρ_eg(0)e^{−(iΔa + γ/2 + γφ)t} (so
/// |ρ_eg| ∝ e^{−(γ/2 + γφ)t}, 1/T₂ = γ/2 + γφ), Pₑ(t) = Pₑ(0)e^{−γt}.
/// Source: Allen & Eberly (1975) (from memory).
#[test]
fn d3_decay_and_dephasing() {
    let (gamma, gphi, da) = (0.5, 0.35, -0.8);
    let (me, r) = one_site(
        SiteParams {
            decay: gamma,
            dephasing: gphi,
            detuning: da,
            ..Default::default()
        },
        TILTED,
        &linspace(0.0, 6.0, 25),
    );
    let c0 = rho_eg0(TILTED);
    let pe0 = TILTED.amplitudes()[1].norm_sqr();
    let tol_c = r.tol(c0.norm(), 1.0);
    let tol_p = r.tol(1.0, 1.0);
    let (mut ec, mut ep) = (0.0f64, 0.0f64);
    for (t, rho) in r.times.iter().zip(&r.states) {
        let want = c0 * (-C64::new(gamma / 2.0 + gphi, da) * *t).exp();
        let e = (obs::coherence(&me.space, rho, 0) - want).norm();
        assert!(e <= tol_c, "t={t}: ρ_eg off by {e:e}");
        let e2 = (pe(rho) - pe0 * (-gamma * t).exp()).abs();
        assert!(e2 <= tol_p, "t={t}: Pₑ off by {e2:e}");
        (ec, ep) = (ec.max(e), ep.max(e2));
    }
    eprintln!(
        "(d3) max err ρ_eg {ec:.2e} (tol {tol_c:.2e}), Pₑ {ep:.2e} (tol {tol_p:.2e}); {} steps",
        r.stats.steps
    );
}

/// (d4) Decay, incoherent pump and dephasing: Pₑ(t) = p + (Pₑ(0) − p)e^{−(P+γ)t}, p = P/(P+γ);
/// ρ_eg(t) = ρ_eg(0)e^{−(iΔa + (P+γ)/2 + γφ)t}.
/// Source: Allen & Eberly (1975) (from memory).
#[test]
fn d4_decay_pump_dephasing() {
    let (gamma, pump, gphi, da) = (0.6, 0.25, 0.15, 0.45);
    let (me, r) = one_site(
        SiteParams {
            decay: gamma,
            pump,
            dephasing: gphi,
            detuning: da,
            ..Default::default()
        },
        TILTED,
        &linspace(0.0, 8.0, 33),
    );
    let c0 = rho_eg0(TILTED);
    let pe0 = TILTED.amplitudes()[1].norm_sqr();
    let p = pump / (pump + gamma);
    let tol_c = r.tol(c0.norm(), 1.0);
    let tol_p = r.tol(1.0, 1.0);
    let (mut ec, mut ep) = (0.0f64, 0.0f64);
    for (t, rho) in r.times.iter().zip(&r.states) {
        let want_c = c0 * (-C64::new((pump + gamma) / 2.0 + gphi, da) * *t).exp();
        let want_p = p + (pe0 - p) * (-(pump + gamma) * t).exp();
        let e = (obs::coherence(&me.space, rho, 0) - want_c).norm();
        let e2 = (pe(rho) - want_p).abs();
        assert!(e <= tol_c, "t={t}: ρ_eg off by {e:e}");
        assert!(e2 <= tol_p, "t={t}: Pₑ off by {e2:e}");
        (ec, ep) = (ec.max(e), ep.max(e2));
    }
    eprintln!(
        "(d4) max err ρ_eg {ec:.2e} (tol {tol_c:.2e}), Pₑ {ep:.2e} (tol {tol_p:.2e}); {} steps",
        r.stats.steps
    );
}

/// (e1) Rabi formula with detuning, from |g⟩: Pₑ(t) = (Ω²/W²) sin²(Wt/2), W = √(Ω² + Δa²)
/// (drive written (Ω/2)σˣ). Source: Rabi, Phys. Rev. 51, 652 (1937); Allen & Eberly (1975)
/// (from memory).
#[test]
fn e1_rabi_formula_with_detuning() {
    for (omega, da) in [(1.1, 0.0), (1.1, 0.8), (0.7, -1.9)] {
        let w = f64::hypot(omega, da);
        let (_, r) = one_site(
            SiteParams {
                rabi: omega,
                detuning: da,
                ..Default::default()
            },
            SpinInit::from_sign(-1),
            &linspace(0.0, 12.0, 49),
        );
        let tol = r.tol(1.0, 1.0);
        let mut worst = 0.0f64;
        for (t, rho) in r.times.iter().zip(&r.states) {
            let want = (omega / w).powi(2) * (w * t / 2.0).sin().powi(2);
            let err = (pe(rho) - want).abs();
            assert!(err <= tol, "Ω={omega} Δ={da} t={t}: Pₑ off by {err:e}");
            worst = worst.max(err);
        }
        eprintln!(
            "(e1) Ω={omega} Δa={da}: max err Pₑ {worst:.2e} (tol {tol:.2e}); {} steps",
            r.stats.steps
        );
    }
}

/// (e2) Resonance fluorescence steady state (drive (Ω/2)σˣ, detuning Δa, decay γ):
/// ρₑₑ = (Ω²/4)/(Δa² + γ²/4 + Ω²/2), ⟨σ⁻⟩ = −i(Ω/2)(γ/2 − iΔa)/(Δa² + γ²/4 + Ω²/2),
/// reached by long-time evolution from |g⟩. Source: Mollow, Phys. Rev. 188, 1969 (1969); Loudon,
/// The Quantum Theory of Light (Oxford, 3rd ed. 2000) (from memory).
#[test]
fn e2_resonance_fluorescence_steady_state() {
    let gamma: f64 = 1.0;
    let t_end = 60.0;
    // Transient bound: the Bloch vector r = (⟨σˣ⟩, ⟨σʸ⟩, ⟨σᶻ⟩) obeys ṙ = M r + b with
    // M = A − D, A antisymmetric (the Hamiltonian rotation) and D = diag(γ/2, γ/2, γ), so
    // d|r − r_ss|²/dt = −2(r − r_ss)ᵀD(r − r_ss) ≤ −γ|r − r_ss|² and |r − r_ss| ≤ 2e^{−γt/2}
    // (both in the unit ball). ρₑₑ = (1 + z)/2 and ⟨σ⁻⟩ = (x − iy)/2 are then within
    // e^{−γt/2} ≈ 9e-14 of their steady values at t = 60/γ.
    let transient = (-gamma * t_end / 2.0).exp();
    for (omega, da) in [(0.5, 0.0), (2.0, 0.0), (1.0, 0.7), (3.0, -1.5)] {
        let (me, r) = one_site(
            SiteParams {
                rabi: omega,
                detuning: da,
                decay: gamma,
                ..Default::default()
            },
            SpinInit::from_sign(-1),
            &[0.0, t_end],
        );
        let den = da * da + gamma * gamma / 4.0 + omega * omega / 2.0;
        let ree = (omega * omega / 4.0) / den;
        let sm = C64::new(0.0, -omega / 2.0) * C64::new(gamma / 2.0, -da) / den;
        let rho = &r.states[1];
        let tol = r.tol(1.0, 1.0) + transient;
        let e1 = (pe(rho) - ree).abs();
        let e2 = (obs::coherence(&me.space, rho, 0) - sm).norm();
        assert!(e1 <= tol, "Ω={omega} Δ={da}: ρₑₑ off by {e1:e}");
        assert!(e2 <= tol, "Ω={omega} Δ={da}: ⟨σ⁻⟩ off by {e2:e}");
        eprintln!(
            "(e2) Ω={omega} Δa={da}: err ρₑₑ {e1:.2e}, ⟨σ⁻⟩ {e2:.2e} (tol {tol:.2e}); {} steps",
            r.stats.steps
        );
    }
}
