//! Validation catalogue, cavity checks (a)–(c) of /work/shared/VALIDATION.md: a damped cavity
//! from a coherent state, a cavity in a thermal bath from a Fock state, and a driven damped cavity
//! from the vacuum.
//!
//! Tolerances are `common::Run::tol` (derived from rtol/atol and the observable's size), plus an
//! explicit truncation term where the analytic formula is for the untruncated mode.

mod common;

use cavern_evolve::{LindbladRhs, Par, Rhs};
use cavern_model::{ModeInit, ModeParams, Network, ProductState, C64};
use cavern_observe as obs;
use common::{opts, run};

const RTOL: f64 = 1e-10;
const ATOL: f64 = 1e-12;

fn linspace(t0: f64, t1: f64, n: usize) -> Vec<f64> {
    (0..n)
        .map(|k| t0 + (t1 - t0) * k as f64 / (n - 1) as f64)
        .collect()
}

/// Σ_{n ≥ from} e^{−m} mⁿ/n!, summed directly from the tail (no cancellation).
fn poisson_tail(m: f64, from: usize) -> f64 {
    let mut p = (-m).exp();
    for n in 1..=from {
        p *= m / n as f64;
    }
    let mut sum = 0.0;
    for n in from..from + 200 {
        sum += p;
        p *= m / (n + 1) as f64;
    }
    sum
}

/// Σ|O_rc| of a (√n on the first off-diagonal) and of a†a (n on the diagonal) on L levels.
fn entries_a(levels: usize) -> f64 {
    (1..levels).map(|n| (n as f64).sqrt()).sum()
}
fn entries_n(levels: usize) -> f64 {
    (levels * (levels - 1) / 2) as f64
}

fn single_mode(p: ModeParams) -> cavern_model::MasterEquation {
    Network {
        modes: vec![p],
        ..Network::empty()
    }
    .build()
    .unwrap()
}

/// (a) Damped, detuned cavity from a coherent state:
/// ⟨a⟩(t) = α₀ e^{−(iΔc + κ/2)t}, ⟨n⟩(t) = |α₀|² e^{−κt}, purity 1.
/// Source: Walls & Milburn, Quantum Optics (Springer, 1994); Carmichael, Statistical Methods in
/// Quantum Optics 1 (Springer, 1999) (both from memory).
#[test]
fn a_damped_cavity_coherent_state() {
    let (kappa, dc, levels) = (0.8, 1.7, 25);
    let alpha0 = C64::from_polar(1.2, 0.5);
    let m = alpha0.norm_sqr();
    let me = single_mode(ModeParams {
        levels,
        detuning: dc,
        loss: kappa,
        ..Default::default()
    });
    let rho0 = ProductState {
        spins: vec![],
        modes: vec![ModeInit::Coherent(alpha0)],
    }
    .density(&me.space)
    .unwrap();

    // Truncation. With only a and a†a in the model, population only moves down, so the truncated
    // model evolves the truncated, renormalised initial state exactly; and ⟨a⟩, ⟨a†a⟩ obey the
    // same closed equations (d⟨a⟩/dt = −(iΔc + κ/2)⟨a⟩, d⟨n⟩/dt = −κ⟨n⟩) in the truncated model,
    // because [a†a, a] = −a holds there exactly. The only truncation error is in the initial
    // state: with wₖ = Σ_{n≥k} |⟨n|α₀⟩|² (Poisson tail), ⟨a⟩̃(0) = α₀(1 − w_{L−1})/(1 − w_L) and
    // ⟨n⟩̃(0) = |α₀|²(1 − w_{L−1})/(1 − w_L), so they are off by ≤ |α₀|·w_{L−1} and
    // ≤ |α₀|²·w_{L−1}; the trace distance to the true coherent state is √w_L, so the purity
    // (1 exactly for a coherent state under damping) is off by ≤ 2·‖δρ‖₁ = 4√w_L.
    // Here |α₀|² = 1.44, L = 25: w_{L−1} ≈ 2e-21, √w_L ≈ 1e-11.
    let w_lm1 = poisson_tail(m, levels - 1);
    let w_l = poisson_tail(m, levels);
    assert!(w_lm1 < 1e-20 && w_l.sqrt() < 2e-11, "{w_lm1} {w_l}");
    let trunc_a = alpha0.norm() * w_lm1;
    let trunc_n = m * w_lm1;
    let trunc_purity = 4.0 * w_l.sqrt();

    let times = linspace(0.0, 6.0, 25);
    let r = run(&me, &rho0, &times, opts(RTOL, ATOL));
    let tol_a = r.tol(alpha0.norm(), entries_a(levels)) + trunc_a;
    let tol_n = r.tol(m, entries_n(levels)) + trunc_n;
    // Tr ρ² − Tr ρ'² ≈ Tr(2ρ δ): value ≤ 2, Σ|2ρ_rc| ≤ 2d
    let tol_p = r.tol(2.0, 2.0 * levels as f64) + trunc_purity;
    let tol_tr = r.tol(1.0, levels as f64);
    let (mut ea, mut en, mut ep) = (0.0f64, 0.0f64, 0.0f64);
    for (t, rho) in r.times.iter().zip(&r.states) {
        let want_a = alpha0 * (-(C64::new(kappa / 2.0, dc)) * *t).exp();
        let want_n = m * (-kappa * t).exp();
        let da = (obs::field(&me.space, rho, 0) - want_a).norm();
        let dn = (obs::photon_number(&me.space, rho, 0) - want_n).abs();
        let dp = (obs::purity(rho) - 1.0).abs();
        assert!(da <= tol_a, "t={t}: ⟨a⟩ off by {da:e}");
        assert!(dn <= tol_n, "t={t}: ⟨n⟩ off by {dn:e}");
        assert!(dp <= tol_p, "t={t}: purity off by {dp:e}");
        assert!(obs::trace_error(&me.space, rho) <= tol_tr);
        (ea, en, ep) = (ea.max(da), en.max(dn), ep.max(dp));
    }
    eprintln!(
        "(a) max err ⟨a⟩ {ea:.2e} (tol {tol_a:.2e}), ⟨n⟩ {en:.2e} (tol {tol_n:.2e}), purity {ep:.2e} (tol {tol_p:.2e}); {} steps, worst-case ‖δρ‖₁ {:.1e}",
        r.stats.steps,
        r.worst_case_trace_norm()
    );
}

/// (b) Cavity with a thermal bath from a Fock state: ⟨n⟩(t) = n_th + (n₀ − n_th)e^{−κt}.
/// Source: Walls & Milburn, Quantum Optics (1994); Breuer & Petruccione, The Theory of Open
/// Quantum Systems (Oxford, 2002) (both from memory).
#[test]
fn b_thermal_cavity_mean_photon_number() {
    let (kappa, nth, n0, levels) = (1.0, 0.3, 2, 30);
    let me = single_mode(ModeParams {
        levels,
        loss: kappa,
        thermal: nth,
        detuning: 0.4,
        ..Default::default()
    });
    let rho0 = ProductState {
        spins: vec![],
        modes: vec![ModeInit::Fock(n0)],
    }
    .density(&me.space)
    .unwrap();
    let times = linspace(0.0, 8.0, 161);
    let r = run(&me, &rho0, &times, opts(RTOL, ATOL));
    // Truncation. In the truncated model a a† = a†a + 1 − L|L−1⟩⟨L−1|, so exactly
    // d⟨n⟩/dt = −κ⟨n⟩ + κ n_th (1 − L·P_top), P_top = population of |L−1⟩. The infinite-space
    // formula is therefore off by κ n_th L ∫₀ᵗ e^{−κ(t−s)} P_top(s) ds ≤ n_th·L·sup P_top.
    // sup P_top is taken from the 161 samples (spacing 0.05/κ; P_top varies on the scale 1/κ),
    // each measured to within tol_p. A priori P_top ~ q^{L−1−n₀} ≈ 1e-17 with
    // q = n_th/(1 + n_th): the n₀ initial photons shift a thermal tail of ratio ≤ q.
    let p_top = r
        .states
        .iter()
        .map(|rho| obs::top_level_population(&me.space, rho, 0))
        .fold(0.0, f64::max);
    let tol_p = r.tol(1e-16, 1.0);
    let q: f64 = nth / (1.0 + nth);
    assert!(
        p_top <= q.powi((levels - 1 - n0) as i32) + tol_p,
        "{p_top:e}"
    );
    let trunc = nth * levels as f64 * (p_top + tol_p);
    let tol = r.tol(n0 as f64, entries_n(levels)) + trunc;
    let mut worst = 0.0f64;
    for (t, rho) in r.times.iter().zip(&r.states) {
        let want = nth + (n0 as f64 - nth) * (-kappa * t).exp();
        let err = (obs::photon_number(&me.space, rho, 0) - want).abs();
        assert!(err <= tol, "t={t}: ⟨n⟩ off by {err:e} > {tol:e}");
        worst = worst.max(err);
    }
    eprintln!(
        "(b) max err ⟨n⟩ {worst:.2e} (tol {tol:.2e}, of which truncation {trunc:.1e}); sampled max P_top {p_top:.1e}; {} steps, worst-case ‖δρ‖₁ {:.1e}",
        r.stats.steps,
        r.worst_case_trace_norm()
    );
}

/// Truncated steady state of a thermal cavity: P(n) = (1 − q)qⁿ/(1 − q^L), q = n_th/(1 + n_th).
/// This is exact for the plainly truncated model (detailed balance between n and n + 1:
/// κ(1+n_th)(n+1)P(n+1) = κ n_th (n+1) P(n)), and tends to n_thⁿ/(1 + n_th)ⁿ⁺¹ as L → ∞.
/// Source: Walls & Milburn (1994); Breuer & Petruccione (2002) (from memory).
#[test]
fn b_thermal_cavity_long_time_fock_distribution() {
    let (kappa, nth, n0, levels, t_end) = (1.0, 0.3, 2, 30, 40.0);
    let me = single_mode(ModeParams {
        levels,
        loss: kappa,
        thermal: nth,
        ..Default::default()
    });
    let rho0 = ProductState {
        spins: vec![],
        modes: vec![ModeInit::Fock(n0)],
    }
    .density(&me.space)
    .unwrap();
    let r = run(&me, &rho0, &[0.0, t_end], opts(RTOL, ATOL));
    // each P(n) = Tr(|n⟩⟨n|ρ) is a single component: value ≤ 1, one entry
    let b = r.tol(1.0, 1.0);
    let p = obs::fock_distribution(&me.space, &r.states[1], 0);
    let q: f64 = nth / (1.0 + nth);
    let steady: Vec<f64> = (0..levels)
        .map(|n| (1.0 - q) * q.powi(n as i32) / (1.0 - q.powi(levels as i32)))
        .collect();

    // Independent reference for the transient left at t_end: the classical rate equation of the
    // truncated populations, written here from the rates (down κ(1+n_th)n, up κ n_th(n+1) for
    // n < L−1), propagated exactly with a dense matrix exponential.
    let l = levels;
    let mut q_mat = vec![C64::new(0.0, 0.0); l * l];
    for n in 0..l {
        let down = kappa * (1.0 + nth) * n as f64;
        let up = if n + 1 < l {
            kappa * nth * (n + 1) as f64
        } else {
            0.0
        };
        q_mat[n * l + n] -= C64::new(down + up, 0.0);
        if n > 0 {
            q_mat[(n - 1) * l + n] += C64::new(down, 0.0);
        }
        if n + 1 < l {
            q_mat[(n + 1) * l + n] += C64::new(up, 0.0);
        }
    }
    let qt: Vec<C64> = q_mat.iter().map(|v| v * t_end).collect();
    let prop = common::expm(&qt, l);
    let mut p0 = vec![C64::new(0.0, 0.0); l];
    p0[n0] = C64::new(1.0, 0.0);
    let p_ref: Vec<f64> = common::matvec(&prop, &p0).iter().map(|z| z.re).collect();
    // transient still present at t_end according to the reference (≈ e^{−κ t_end} ≈ 4e-18),
    // plus the reference's own rounding
    let transient = p_ref
        .iter()
        .zip(&steady)
        .map(|(a, s)| (a - s).abs())
        .fold(0.0, f64::max);
    // expm error: ‖Q t_end‖₁ ≈ 3000 needs s = 13 squarings of a column-stochastic matrix, whose
    // rounding adds up to about s·L·ε ≈ 9e-14; allow 1e3·ε ≈ 2e-13
    let expm_err = 1e3 * f64::EPSILON;
    let mut worst_ss = 0.0f64;
    let mut worst_ref = 0.0f64;
    for n in 0..levels {
        let e_ss = (p[n] - steady[n]).abs();
        let e_ref = (p[n] - p_ref[n]).abs();
        assert!(
            e_ss <= b + transient + expm_err,
            "P({n}) = {} vs steady {}",
            p[n],
            steady[n]
        );
        assert!(
            e_ref <= b + expm_err,
            "P({n}) = {} vs ref {}",
            p[n],
            p_ref[n]
        );
        worst_ss = worst_ss.max(e_ss);
        worst_ref = worst_ref.max(e_ref);
    }
    // and the infinite-space limit n_thⁿ/(1 + n_th)ⁿ⁺¹: differs from the truncated formula by the
    // factor 1/(1 − q^L), i.e. by ≤ q^L ≈ 6e-20 here
    for n in 0..levels {
        let inf = nth.powi(n as i32) / (1.0 + nth).powi(n as i32 + 1);
        assert!((p[n] - inf).abs() <= b + transient + expm_err + q.powi(levels as i32));
    }
    eprintln!(
        "(b) long-time P(n): max err vs steady formula {worst_ss:.2e}, vs rate-equation ref {worst_ref:.2e} (tol {:.2e}; |ref − steady| {transient:.1e}); {} steps",
        b + transient + expm_err,
        r.stats.steps
    );
}

/// What is exactly true in the plainly truncated model, checked at a small truncation where it
/// differs visibly from the infinite-space formulas (L = 4, n_th = 1, so q = 1/2):
/// - the truncated geometric distribution P(n) = (1 − q)qⁿ/(1 − q^L) is stationary: 𝓛ρ_ss = 0
///   (detailed balance; Walls & Milburn 1994, from memory), whereas its mean (≈ 0.733) is not n_th;
/// - Tr(a†a 𝓛ρ) = −κ⟨n⟩ + κ n_th (1 − L P_top) for any ρ (from a a† = a†a + 1 − L|L−1⟩⟨L−1|).
///
/// Both are identities up to rounding, checked on the library's right-hand side directly.
#[test]
fn b_thermal_cavity_truncation_is_plain() {
    let (kappa, nth, levels) = (0.7, 1.0, 4);
    let me = single_mode(ModeParams {
        levels,
        loss: kappa,
        thermal: nth,
        detuning: 0.9,
        ..Default::default()
    });
    let mut rhs = LindbladRhs::new(&me, Par::Seq).unwrap();
    let d = levels;
    let q: f64 = nth / (1.0 + nth);
    let z = 1.0 - q.powi(levels as i32);
    let mut rho_ss = vec![C64::new(0.0, 0.0); d * d];
    for n in 0..d {
        rho_ss[n * d + n] = C64::new((1.0 - q) * q.powi(n as i32) / z, 0.0);
    }
    // the right-hand side works in its panel-major layout: convert in and out
    let mut rho_p = vec![C64::new(0.0, 0.0); d * d];
    rhs.to_panels(&rho_ss, &mut rho_p);
    let mut out_p = vec![C64::new(0.0, 0.0); d * d];
    rhs.eval(0.0, &rho_p, &mut out_p);
    let mut out = vec![C64::new(0.0, 0.0); d * d];
    rhs.from_panels(&out_p, &mut out);
    // rounding: each entry of 𝓛ρ sums ≤ 4 products of size ≤ κ(1 + 2n_th)L ≈ 8.4; allow 64 ulps
    let round = 64.0 * f64::EPSILON * kappa * (1.0 + 2.0 * nth) * levels as f64;
    let resid = out.iter().map(|v| v.norm()).fold(0.0, f64::max);
    assert!(resid <= round, "𝓛ρ_ss = {resid:e}");
    // the library's truncated thermal initial state is the same distribution
    let rho_th = ModeInit::Thermal(nth).density(levels, 0).unwrap();
    assert!(common::max_diff(&rho_th, &rho_ss) <= 4.0 * f64::EPSILON);
    let mean: f64 = (0..d).map(|n| n as f64 * rho_ss[n * d + n].re).sum();
    assert!(
        (mean - nth).abs() > 0.2,
        "the truncated mean should differ from n_th"
    );

    // a generic Hermitian, unit-trace ρ (a pure state with all Fock components)
    let psi: Vec<C64> = (0..d)
        .map(|n| C64::from_polar(1.0 / (1.0 + n as f64), 0.7 * n as f64))
        .collect();
    let norm: f64 = psi.iter().map(|c| c.norm_sqr()).sum();
    let rho: Vec<C64> = (0..d * d)
        .map(|k| psi[k / d] * psi[k % d].conj() / norm)
        .collect();
    rhs.to_panels(&rho, &mut rho_p);
    rhs.eval(0.0, &rho_p, &mut out_p);
    rhs.from_panels(&out_p, &mut out);
    let space = &me.space;
    let dn: f64 = (0..d).map(|n| n as f64 * out[n * d + n].re).sum();
    let n_mean = obs::photon_number(space, &rho, 0);
    let p_top = obs::top_level_population(space, &rho, 0);
    let want = -kappa * n_mean + kappa * nth * (1.0 - levels as f64 * p_top);
    assert!(
        (dn - want).abs() <= levels as f64 * round,
        "d⟨n⟩/dt = {dn} vs {want}"
    );
    eprintln!(
        "(b) truncation identities: residual {resid:.1e}, d⟨n⟩/dt err {:.1e} (tol {round:.1e})",
        (dn - want).abs()
    );
}

/// (c) Driven damped cavity from the vacuum: α(t) = α_ss(1 − e^{−(iΔc + κ/2)t}),
/// α_ss = −iε/(κ/2 + iΔc), ⟨n⟩(t) = |α(t)|², ⟨n⟩_ss = ε²/(Δc² + κ²/4).
/// Source: Walls & Milburn, Quantum Optics (1994) (from memory).
#[test]
fn c_driven_damped_cavity() {
    let (kappa, dc, eps, levels) = (1.0, 0.7, 0.6, 25);
    let me = single_mode(ModeParams {
        levels,
        detuning: dc,
        loss: kappa,
        drive: eps,
        ..Default::default()
    });
    let rho0 = ProductState {
        spins: vec![],
        modes: vec![ModeInit::Vacuum],
    }
    .density(&me.space)
    .unwrap();
    let rate = C64::new(kappa / 2.0, dc);
    let a_ss = C64::new(0.0, -eps) / rate;
    let n_ss = eps * eps / (dc * dc + kappa * kappa / 4.0);
    assert!((a_ss.norm_sqr() - n_ss).abs() < 1e-15);

    let mut times = linspace(0.0, 10.0, 101);
    times.push(80.0); // steady state: the transient is |α_ss| e^{−κt/2} ≈ 3e-18
    let r = run(&me, &rho0, &times, opts(RTOL, ATOL));
    // Truncation. In the truncated model [a, a†] = 1 − L|L−1⟩⟨L−1| and [a†a, a] = −a exactly, so
    // d⟨a⟩/dt = −(iΔc + κ/2)⟨a⟩ − iε(1 − L P_top) and d⟨n⟩/dt = −κ⟨n⟩ − 2ε Im⟨a⟩. Hence
    // |δ⟨a⟩| ≤ εL·(2/κ)·sup P_top and |δ⟨n⟩| ≤ (2ε/κ)·sup|δ⟨a⟩|. A priori the state is close to
    // |α(t)⟩ with |α|² ≤ 4|α_ss|² ≈ 1.95, so P_top ≲ e^{−1.95}1.95²⁴/24! ≈ 2e-18; the sampled
    // maximum (101 samples on the scale 1/κ, each measured within tol_p) is used.
    let p_top = r
        .states
        .iter()
        .map(|rho| obs::top_level_population(&me.space, rho, 0))
        .fold(0.0, f64::max);
    let tol_p = r.tol(1e-16, 1.0);
    assert!(p_top <= 1e-17 + tol_p, "{p_top:e}");
    let trunc_a = eps * levels as f64 * 2.0 / kappa * (p_top + tol_p);
    let trunc_n = 2.0 * eps / kappa * trunc_a;
    let tol_a = r.tol(2.0 * a_ss.norm(), entries_a(levels)) + trunc_a;
    let tol_n = r.tol(4.0 * n_ss, entries_n(levels)) + trunc_n;
    let (mut ea, mut en) = (0.0f64, 0.0f64);
    for (t, rho) in r.times.iter().zip(&r.states) {
        let alpha = a_ss * (C64::new(1.0, 0.0) - (-rate * *t).exp());
        let da = (obs::field(&me.space, rho, 0) - alpha).norm();
        let dn = (obs::photon_number(&me.space, rho, 0) - alpha.norm_sqr()).abs();
        assert!(da <= tol_a, "t={t}: ⟨a⟩ off by {da:e}");
        assert!(dn <= tol_n, "t={t}: ⟨n⟩ off by {dn:e}");
        (ea, en) = (ea.max(da), en.max(dn));
    }
    // steady values themselves (transient at t = 80 is |α_ss|e^{−40} ≈ 3e-18, included below)
    let last = r.states.last().unwrap();
    let transient = a_ss.norm() * (-kappa * 80.0 / 2.0).exp();
    let da = (obs::field(&me.space, last, 0) - a_ss).norm();
    let dn = (obs::photon_number(&me.space, last, 0) - n_ss).abs();
    assert!(da <= tol_a + transient, "steady ⟨a⟩ off by {da:e}");
    assert!(
        dn <= tol_n + 2.0 * a_ss.norm() * transient + transient * transient,
        "steady ⟨n⟩ off by {dn:e}"
    );
    eprintln!(
        "(c) max err ⟨a⟩ {ea:.2e} (tol {tol_a:.2e}), ⟨n⟩ {en:.2e} (tol {tol_n:.2e}); steady ⟨n⟩ err {dn:.1e}; {} steps, worst-case ‖δρ‖₁ {:.1e}",
        r.stats.steps,
        r.worst_case_trace_norm()
    );
}
