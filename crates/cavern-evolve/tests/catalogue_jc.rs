//! Validation catalogue, spin–cavity checks (f1) and (g) of /work/shared/VALIDATION.md: resonant
//! Jaynes–Cummings Rabi oscillations from |e, n⟩ and Tavis–Cummings oscillations of one photon
//! shared with N spins.
//!
//! Both dynamics conserve the excitation number and stay in a finite manifold that the chosen
//! truncation contains entirely (and does not touch its top level), so the formulas are exact for
//! the truncated model and the tolerances are `common::Run::tol` alone.

mod common;

use cavern_model::{ModeInit, ModeParams, Network, ProductState, SiteParams, SpinInit};
use cavern_observe as obs;
use common::{opts, run};

const RTOL: f64 = 1e-10;
const ATOL: f64 = 1e-12;

fn linspace(t0: f64, t1: f64, n: usize) -> Vec<f64> {
    (0..n)
        .map(|k| t0 + (t1 - t0) * k as f64 / (n - 1) as f64)
        .collect()
}

/// (f1) Resonant Jaynes–Cummings, no loss, from |e, n⟩: Pₑ(t) = cos²(g√(n+1) t), for n = 0, 1, 2;
/// also ⟨a†a⟩ = n + 1 − Pₑ (excitation conservation).
/// Source: Jaynes & Cummings, Proc. IEEE 51, 89 (1963) (from memory).
#[test]
fn f1_jaynes_cummings_rabi_oscillations() {
    let g = 0.5;
    for n in 0..3usize {
        // |e, n⟩ couples only to |g, n+1⟩: levels n + 3 keeps n + 1 below the top level
        let levels = n + 3;
        let me = Network {
            sites: vec![SiteParams::default()],
            modes: vec![ModeParams {
                levels,
                ..Default::default()
            }],
            coupling: vec![vec![g]],
            ..Network::empty()
        }
        .build()
        .unwrap();
        let rho0 = ProductState {
            spins: vec![SpinInit::from_sign(1)],
            modes: vec![ModeInit::Fock(n)],
        }
        .density(&me.space)
        .unwrap();
        let r = run(&me, &rho0, &linspace(0.0, 10.0, 41), opts(RTOL, ATOL));
        // Pₑ = (1 + ⟨σᶻ⟩)/2: value ≤ 1, Σ|entries| of |e⟩⟨e| ⊗ 1 = levels
        let tol_p = r.tol(1.0, levels as f64);
        // ⟨a†a⟩ ≤ n + 1, Σ|entries| = 2·Σₖ k
        let tol_n = r.tol((n + 1) as f64, (levels * (levels - 1)) as f64);
        let (mut ep, mut en) = (0.0f64, 0.0f64);
        for (t, rho) in r.times.iter().zip(&r.states) {
            let want = (g * ((n + 1) as f64).sqrt() * t).cos().powi(2);
            let p = (1.0 + obs::spin_z(&me.space, rho, 0)) / 2.0;
            let e = (p - want).abs();
            assert!(e <= tol_p, "n={n} t={t}: Pₑ off by {e:e}");
            let e2 = (obs::photon_number(&me.space, rho, 0) - (n as f64 + 1.0 - want)).abs();
            assert!(e2 <= tol_n, "n={n} t={t}: ⟨n⟩ off by {e2:e}");
            (ep, en) = (ep.max(e), en.max(e2));
        }
        eprintln!(
            "(f1) n={n}: max err Pₑ {ep:.2e} (tol {tol_p:.2e}), ⟨n⟩ {en:.2e} (tol {tol_n:.2e}); {} steps",
            r.stats.steps
        );
    }
}

/// (g) Tavis–Cummings: N = 1…4 spins in |g⟩ and one photon, exchange g, resonant, no loss:
/// ⟨n⟩(t) = cos²(g√N t) and each Pₑ = sin²(g√N t)/N.
/// Source: Tavis & Cummings, Phys. Rev. 170, 379 (1968) (from memory).
#[test]
fn g_tavis_cummings_one_photon() {
    let g = 0.4;
    for n_spins in 1..=4usize {
        // one excitation: |g…g, 1⟩ ↔ |…e…, 0⟩; 3 levels keeps |1⟩ below the top level
        let levels = 3;
        let me = Network {
            sites: vec![SiteParams::default(); n_spins],
            modes: vec![ModeParams {
                levels,
                ..Default::default()
            }],
            coupling: vec![vec![g]; n_spins],
            ..Network::empty()
        }
        .build()
        .unwrap();
        let rho0 = ProductState {
            spins: vec![SpinInit::from_sign(-1); n_spins],
            modes: vec![ModeInit::Fock(1)],
        }
        .density(&me.space)
        .unwrap();
        let r = run(&me, &rho0, &linspace(0.0, 10.0, 41), opts(RTOL, ATOL));
        let d = me.space.dim();
        // ⟨a†a⟩: value ≤ 1, Σ|entries| = (d/levels)·Σₖ k; Pₑ: value ≤ 1, d/2 entries
        let tol_n = r.tol(1.0, (d / levels * levels * (levels - 1) / 2) as f64);
        let tol_p = r.tol(1.0, (d / 2) as f64);
        let (mut en, mut ep) = (0.0f64, 0.0f64);
        let w = g * (n_spins as f64).sqrt();
        for (t, rho) in r.times.iter().zip(&r.states) {
            let want_n = (w * t).cos().powi(2);
            let e = (obs::photon_number(&me.space, rho, 0) - want_n).abs();
            assert!(e <= tol_n, "N={n_spins} t={t}: ⟨n⟩ off by {e:e}");
            en = en.max(e);
            for i in 0..n_spins {
                let p = (1.0 + obs::spin_z(&me.space, rho, i)) / 2.0;
                let e2 = (p - (w * t).sin().powi(2) / n_spins as f64).abs();
                assert!(e2 <= tol_p, "N={n_spins} t={t} site {i}: Pₑ off by {e2:e}");
                ep = ep.max(e2);
            }
        }
        eprintln!(
            "(g) N={n_spins}: max err ⟨n⟩ {en:.2e} (tol {tol_n:.2e}), Pₑ {ep:.2e} (tol {tol_p:.2e}); {} steps",
            r.stats.steps
        );
    }
}
