//! Time-dependent envelopes are applied to the right terms at the right times: the library's
//! evolution under envelopes is compared with an independent fixed-step RK4 integration of the
//! dense Lindblad equation written in this test (`common::lindblad_dense`, `common::rk4`), whose
//! envelope functions are also re-implemented here.
//!
//! Reference accuracy: RK4 (classical fourth order; Kutta 1901, see Hairer, Nørsett & Wanner,
//! Solving ODEs I, §II.1; from memory) with every envelope kink on a grid point, run with N and 2N
//! steps; the 2N run is the reference and |ρ_N − ρ_2N| (≈ 15× its error, by Richardson) is added to
//! the tolerance.

mod common;

use cavern_model::{
    CouplingForm, Envelope, ModeInit, ModeParams, Network, ProductState, SiteParams, SpinInit, C64,
};
use common::{kron_all, lin, lindblad_dense, max_diff, ops, opts, re, rk4, run};

const RTOL: f64 = 1e-10;
const ATOL: f64 = 1e-12;

/// Piecewise-linear interpolation held constant outside the knots (the documented `Table`
/// semantics), written independently of the library.
fn table(ts: &[f64], vs: &[f64], t: f64) -> f64 {
    if t <= ts[0] {
        return vs[0];
    }
    for k in 1..ts.len() {
        if t <= ts[k] {
            return vs[k - 1] + (vs[k] - vs[k - 1]) * (t - ts[k - 1]) / (ts[k] - ts[k - 1]);
        }
    }
    vs[ts.len() - 1]
}

/// An envelope f(t) re-implemented in the test.
type EnvFn<'a> = &'a dyn Fn(f64) -> f64;

/// Reference ρ at each sample time (samples on the RK4 grid), with N and 2N steps over [0, T].
fn reference<F>(
    f: &F,
    rho0: &[C64],
    times: &[f64],
    steps_per_unit: usize,
) -> (Vec<Vec<C64>>, Vec<f64>)
where
    F: Fn(f64, &[C64]) -> Vec<C64>,
{
    let mut out = vec![rho0.to_vec()];
    let mut err = vec![0.0];
    let (mut coarse, mut fine) = (rho0.to_vec(), rho0.to_vec());
    for w in times.windows(2) {
        let n = ((w[1] - w[0]) * steps_per_unit as f64).round() as usize;
        coarse = rk4(f, w[0], w[1], &coarse, n);
        fine = rk4(f, w[0], w[1], &fine, 2 * n);
        err.push(max_diff(&coarse, &fine));
        out.push(fine.clone());
    }
    (out, err)
}

fn spin_rhs<'a>(
    omega: f64,
    da: f64,
    gamma: f64,
    gphi: f64,
    env: EnvFn<'a>,
) -> impl Fn(f64, &[C64]) -> Vec<C64> + 'a {
    let sz = ops::sz();
    let sx = ops::sx();
    let jumps = vec![
        lin(&[(re(gamma.sqrt()), &ops::sm())]),
        lin(&[(re((gphi / 2.0).sqrt()), &sz)]),
    ];
    let h0 = lin(&[(re(da / 2.0), &sz)]);
    let hx = lin(&[(re(omega / 2.0), &sx)]);
    move |t: f64, rho: &[C64]| {
        let h = lin(&[(re(1.0), &h0), (re(env(t)), &hx)]);
        lindblad_dense(&h, &jumps, rho, 2)
    }
}

/// One driven, decaying, dephasing spin: H = (Δa/2)σᶻ + f(t)(Ω/2)σˣ, for a linear ramp and a
/// piecewise table envelope on the Rabi drive. The full 2×2 ρ is compared at every sample time.
/// Conventions: VALIDATION.md / cavern-model docs; the Bloch equations are textbook (Allen &
/// Eberly, Optical Resonance and Two-Level Atoms, 1975; from memory).
#[test]
fn spin_drive_envelopes_match_rk4_reference() {
    let (omega, da, gamma, gphi) = (2.0, 0.3, 0.2, 0.1);
    let times: Vec<f64> = (0..=16).map(|k| 0.25 * k as f64).collect();
    let ramp = |t: f64| ((t - 0.5) / 2.0).clamp(0.0, 1.0);
    let (tt, tv) = (vec![0.0, 1.0, 1.5, 3.0], vec![0.2, 1.0, -0.5, 0.8]);
    let tab = |t: f64| table(&tt, &tv, t);
    let cases: Vec<(&str, Envelope, EnvFn)> = vec![
        (
            "ramp",
            Envelope::Ramp {
                start: 0.5,
                stop: 2.5,
                from: 0.0,
                to: 1.0,
            },
            &ramp,
        ),
        (
            "table",
            Envelope::table(tt.clone(), tv.clone()).unwrap(),
            &tab,
        ),
    ];
    let constant = |_: f64| 1.0;
    for (name, envelope, env) in cases {
        let me = Network {
            sites: vec![SiteParams {
                rabi: omega,
                detuning: da,
                decay: gamma,
                dephasing: gphi,
                ..Default::default()
            }],
            rabi_envelope: envelope,
            ..Network::empty()
        }
        .build()
        .unwrap();
        assert_eq!(me.driven.len(), 1, "the drive must be an envelope term");
        let rho0 = ProductState {
            spins: vec![SpinInit::from_sign(-1)],
            modes: vec![],
        }
        .density(&me.space)
        .unwrap();
        let r = run(&me, &rho0, &times, opts(RTOL, ATOL));
        // all kinks (0.5, 2.5; 1, 1.5, 3) lie on the grid of 2000 steps per unit
        let (refs, ref_err) =
            reference(&spin_rhs(omega, da, gamma, gphi, env), &rho0, &times, 2000);
        let (refs_const, _) = reference(
            &spin_rhs(omega, da, gamma, gphi, &constant),
            &rho0,
            &times,
            500,
        );
        let tol_lib = r.tol(1.0, 1.0); // one component of ρ: value ≤ 1
        let (mut worst, mut worst_tol, mut sensitivity) = (0.0f64, 0.0f64, 0.0f64);
        for k in 0..times.len() {
            let tol = tol_lib + ref_err[k];
            let e = max_diff(&r.states[k], &refs[k]);
            assert!(e <= tol, "{name} t={}: ρ off by {e:e} > {tol:e}", times[k]);
            worst = worst.max(e);
            worst_tol = worst_tol.max(tol);
            sensitivity = sensitivity.max(max_diff(&refs[k], &refs_const[k]));
        }
        // the envelope matters: ignoring it would change ρ by far more than the tolerance
        assert!(sensitivity > 1e4 * worst_tol, "{name}: {sensitivity}");
        eprintln!(
            "envelope {name}: max err ρ {worst:.2e} (tol ≤ {worst_tol:.2e}, reference err ≤ {:.1e}); effect of the envelope {sensitivity:.2}; {} steps, {} rejected",
            ref_err.iter().fold(0.0f64, |a, &b| a.max(b)),
            r.stats.steps,
            r.stats.rejected
        );
    }
}

/// A spin coupled to a driven lossy mode, with three different envelopes on three terms: a
/// smooth step on the cavity drive ε(a + a†), a table on the spin–mode coupling (dipole form
/// g(a + a†)σˣ), and a ramp on the spin drive (Ω/2)σˣ. Compared elementwise with the RK4
/// reference on the dense 2×4-dimensional Lindblad equation (mode truncated at 4 levels in both).
#[test]
fn envelopes_on_drive_coupling_and_rabi_match_rk4_reference() {
    let levels = 4;
    let (dc, da, kappa, gamma, eps, g, omega) = (0.4, -0.2, 0.6, 0.3, 0.5, 0.35, 0.8);
    let smooth = |t: f64| {
        let u = ((t - 0.5) / 1.5).clamp(0.0, 1.0);
        u * u * (3.0 - 2.0 * u)
    };
    let (tt, tv) = (vec![0.0, 1.0, 2.0], vec![1.0, -0.5, 0.5]);
    let tab = |t: f64| table(&tt, &tv, t);
    let ramp = |t: f64| 1.0 - ((t - 1.0) / 2.0).clamp(0.0, 1.0);
    let me = Network {
        sites: vec![SiteParams {
            detuning: da,
            decay: gamma,
            rabi: omega,
            ..Default::default()
        }],
        modes: vec![ModeParams {
            levels,
            detuning: dc,
            loss: kappa,
            drive: eps,
            drive_envelope: Envelope::SmoothStep {
                start: 0.5,
                stop: 2.0,
                from: 0.0,
                to: 1.0,
            },
            ..Default::default()
        }],
        coupling: vec![vec![g]],
        coupling_form: CouplingForm::Dipole,
        coupling_envelope: Envelope::table(tt.clone(), tv.clone()).unwrap(),
        rabi_envelope: Envelope::Ramp {
            start: 1.0,
            stop: 3.0,
            from: 1.0,
            to: 0.0,
        },
        ..Network::empty()
    }
    .build()
    .unwrap();
    assert_eq!(me.driven.len(), 3);
    let init = ProductState {
        spins: vec![SpinInit {
            theta: 0.8,
            phi: 0.3,
        }],
        modes: vec![ModeInit::Vacuum],
    };
    let rho0 = init.density(&me.space).unwrap();
    let times: Vec<f64> = (0..=12).map(|k| 0.25 * k as f64).collect();
    let r = run(&me, &rho0, &times, opts(RTOL, ATOL));

    // dense reference operators: site ⊗ mode, site (g, e), Fock 0..levels−1
    let i2 = common::eye(2);
    let il = common::eye(levels);
    let a = kron_all(&[(i2.clone(), 2), (ops::a(levels), levels)]);
    let ad = common::hermitian_adjoint(&a, 2 * levels);
    let n_op = common::mm(&ad, &a, 2 * levels);
    let sz = kron_all(&[(ops::sz(), 2), (il.clone(), levels)]);
    let sx = kron_all(&[(ops::sx(), 2), (il.clone(), levels)]);
    let sm = kron_all(&[(ops::sm(), 2), (il, levels)]);
    let d = 2 * levels;
    let h0 = lin(&[(re(dc), &n_op), (re(da / 2.0), &sz)]);
    let x = lin(&[(re(1.0), &a), (re(1.0), &ad)]);
    let h_drive = lin(&[(re(eps), &x)]);
    let h_coup = lin(&[(re(g), &common::mm(&x, &sx, d))]);
    let h_rabi = lin(&[(re(omega / 2.0), &sx)]);
    let jumps = vec![
        lin(&[(re(kappa.sqrt()), &a)]),
        lin(&[(re(gamma.sqrt()), &sm)]),
    ];
    let rhs = |t: f64, rho: &[C64]| {
        let h = lin(&[
            (re(1.0), &h0),
            (re(smooth(t)), &h_drive),
            (re(tab(t)), &h_coup),
            (re(ramp(t)), &h_rabi),
        ]);
        lindblad_dense(&h, &jumps, rho, d)
    };
    // kinks at 0.5, 1, 2, 3 are on the grid of 1000 steps per unit
    let (refs, ref_err) = reference(&rhs, &rho0, &times, 1000);
    let tol_lib = r.tol(1.0, 1.0);
    let (mut worst, mut worst_tol) = (0.0f64, 0.0f64);
    for k in 0..times.len() {
        let tol = tol_lib + ref_err[k];
        let e = max_diff(&r.states[k], &refs[k]);
        assert!(e <= tol, "t={}: ρ off by {e:e} > {tol:e}", times[k]);
        worst = worst.max(e);
        worst_tol = worst_tol.max(tol);
    }
    eprintln!(
        "envelopes on three terms: max err ρ {worst:.2e} (tol ≤ {worst_tol:.2e}); {} steps",
        r.stats.steps
    );
}
