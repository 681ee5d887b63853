//! Quantum-trajectory throughput (`cargo bench --bench trajectories`).
//!
//! Model (invented): N spins with decay γ = 0.1 and dephasing γφ = 0.05 (angular units), detuning
//! 0.2, all coupled (exchange, g = 0.5) to one driven lossy mode (κ = 1, ε = 0.3) with 4 Fock
//! levels; spins start alternately in |e⟩ and |g⟩; 11 samples over t = 0 … 2; rtol 1e-6,
//! atol 1e-8. Three measurements, printed as Markdown tables (and written to
//! `target/perf/trajectories-summary.md`):
//!
//! 1. trajectories per second against d = 2^N · 4 (N = 4 … 16, d up to 262 144), 2 threads;
//! 2. 1 → 2 thread speedup for 200 trajectories at d = 1024 (N = 8);
//! 3. crossover against the density-matrix solver at equal statistical accuracy: the number of
//!    trajectories whose standard error of ⟨σᶻ₀⟩ at the final time equals the density-matrix
//!    integration error allowance (taken as 1e-3, a typical plotting accuracy) is
//!    n = (σ / 1e-3)², with σ the single-trajectory spread measured from the run; the
//!    trajectory cost for that accuracy is n × (time per trajectory), compared with one
//!    density-matrix run of the same model (N ≤ 8; larger d does not fit the density-matrix
//!    workspace comfortably on this machine).
//!
//! Timing is wall-clock of whole solver calls (one call per configuration, after one warm-up
//! call for small d); no criterion statistics because single calls last from milliseconds to
//! tens of seconds.

use cavern_evolve::{evolve_density, run_trajectories, DopriOptions, TrajectoryOptions};
use cavern_model::{
    MasterEquation, ModeInit, ModeParams, Network, ProductState, SiteParams, SpinInit,
};
use cavern_observe as obs;
use std::fmt::Write as _;
use std::time::Instant;

fn model(n: usize) -> (MasterEquation, ProductState) {
    let mut net = Network::empty();
    for _ in 0..n {
        net.sites.push(SiteParams {
            decay: 0.1,
            dephasing: 0.05,
            detuning: 0.2,
            ..Default::default()
        });
    }
    net.modes.push(ModeParams {
        levels: 4,
        loss: 1.0,
        drive: 0.3,
        ..Default::default()
    });
    net.coupling = vec![vec![0.5]; n];
    let me = net.build().expect("benchmark model is valid");
    let st = ProductState {
        spins: (0..n)
            .map(|i| SpinInit::from_sign(if i % 2 == 0 { 1 } else { -1 }))
            .collect(),
        modes: vec![ModeInit::Vacuum],
    };
    (me, st)
}

fn times() -> Vec<f64> {
    (0..11).map(|k| 0.2 * k as f64).collect()
}

fn dopri() -> DopriOptions {
    DopriOptions {
        rtol: 1e-6,
        atol: 1e-8,
        ..Default::default()
    }
}

/// (seconds, final-time mean, final-time single-trajectory standard deviation)
fn run_traj(
    me: &MasterEquation,
    st: &ProductState,
    n_traj: usize,
    threads: usize,
) -> (f64, f64, f64) {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .expect("thread pool");
    let psi0 = st.vector(&me.space).expect("pure initial state");
    let t = times();
    let opts = TrajectoryOptions {
        dopri: dopri(),
        trajectories: n_traj,
        seed: 11,
        keep: 0,
    };
    let space = me.space.clone();
    pool.install(|| {
        let start = Instant::now();
        let r = run_trajectories(
            me,
            &psi0,
            &t,
            &opts,
            1,
            move |psi, out| out[0] = obs::state::spin_z(&space, psi, 0),
            &|_| {},
        )
        .expect("trajectories run");
        let secs = start.elapsed().as_secs_f64();
        let last = t.len() - 1;
        (secs, r.mean[last], r.stderr[last] * (n_traj as f64).sqrt())
    })
}

fn run_dm(me: &MasterEquation, st: &ProductState, threads: usize) -> (f64, f64) {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .expect("thread pool");
    let rho0 = st.density(&me.space).expect("initial state");
    let t = times();
    pool.install(|| {
        let start = Instant::now();
        let mut last = 0.0;
        evolve_density(me, &rho0, &t, dopri(), |_, _, rho, _| {
            last = obs::spin_z(&me.space, rho, 0)
        })
        .expect("density run");
        (start.elapsed().as_secs_f64(), last)
    })
}

fn main() {
    // `cargo bench` passes --bench; `cargo test --benches` passes nothing: then run a smoke test
    let full = std::env::args().any(|a| a == "--bench");
    let mut report = String::new();
    let _ = writeln!(report, "## Quantum trajectories\n");
    let _ = writeln!(report, "### Throughput against d (2 threads)\n");
    let _ = writeln!(
        report,
        "| spins | d | trajectories | seconds | trajectories/s |"
    );
    let _ = writeln!(report, "|---:|---:|---:|---:|---:|");
    let sizes: &[(usize, usize)] = if full {
        &[
            (4, 400),
            (6, 400),
            (8, 200),
            (10, 60),
            (12, 16),
            (14, 4),
            (16, 2),
        ]
    } else {
        &[(4, 10)]
    };
    for &(n, n_traj) in sizes {
        let (me, st) = model(n);
        if n <= 8 {
            run_traj(&me, &st, n_traj.min(20), 2); // warm-up
        }
        let (secs, _, _) = run_traj(&me, &st, n_traj, 2);
        let _ = writeln!(
            report,
            "| {n} | {} | {n_traj} | {secs:.3} | {:.2} |",
            me.space.dim(),
            n_traj as f64 / secs
        );
        eprintln!(
            "throughput: N = {n}, d = {}: {:.2} trajectories/s",
            me.space.dim(),
            n_traj as f64 / secs
        );
    }
    let mut fit: Vec<(f64, f64, f64)> = Vec::new();
    if full {
        let (me, st) = model(8);
        run_traj(&me, &st, 20, 1);
        let (t1, _, _) = run_traj(&me, &st, 200, 1);
        let (t2, _, _) = run_traj(&me, &st, 200, 2);
        let _ = writeln!(
            report,
            "\n### 200 trajectories at d = {} (8 spins)\n",
            me.space.dim()
        );
        let _ = writeln!(
            report,
            "1 thread {t1:.3} s, 2 threads {t2:.3} s: speedup **{:.2}×**",
            t1 / t2
        );

        let _ = writeln!(report, "\n### Crossover against the density matrix at equal accuracy (standard error ε on ⟨σᶻ₀⟩(t = 2))\n");
        let _ = writeln!(report, "| spins | d | density matrix (s, 2 threads) | σ single trajectory | trajectories for ε = 1e-3 | their cost (s) | trajectories for ε = 1e-2 | their cost (s) |");
        let _ = writeln!(report, "|---:|---:|---:|---:|---:|---:|---:|---:|");
        for n in [4usize, 6, 8] {
            let (me, st) = model(n);
            let (dm_s, dm_val) = run_dm(&me, &st, 2);
            let probe = 400;
            let (tr_s, tr_mean, sigma) = run_traj(&me, &st, probe, 2);
            let needed = (sigma / 1e-3).powi(2).ceil();
            let cost = tr_s / probe as f64 * needed;
            let needed2 = (sigma / 1e-2).powi(2).ceil();
            let cost2 = tr_s / probe as f64 * needed2;
            fit.push((
                me.space.dim() as f64,
                dm_s,
                tr_s / probe as f64 * sigma * sigma,
            ));
            let _ = writeln!(
                report,
                "| {n} | {} | {dm_s:.3} | {sigma:.3} | {needed:.0} | {cost:.2} | {needed2:.0} | {cost2:.3} |",
                me.space.dim()
            );
            eprintln!(
                "crossover N = {n}: density matrix {dm_s:.3} s (⟨σᶻ₀⟩ = {dm_val:.4}); trajectories mean {tr_mean:.4} (σ = {sigma:.3}); {needed:.0} needed → {cost:.2} s"
            );
        }
    }
    if full {
        // power laws through the two largest sizes: t_dm ∝ d^a, (trajectory cost × ε²) ∝ d^b;
        // crossover where they meet, for each ε
        let (d1, dm1, c1) = fit[fit.len() - 2];
        let (d2, dm2, c2) = fit[fit.len() - 1];
        let a = (dm2 / dm1).ln() / (d2 / d1).ln();
        let b = (c2 / c1).ln() / (d2 / d1).ln();
        let _ = writeln!(report, "\nPower laws through the two largest sizes: density matrix ∝ d^{a:.2}, trajectories ∝ d^{b:.2}.");
        for eps in [1e-3f64, 1e-2] {
            // dm2·(d/d2)^a = c2/ε²·(d/d2)^b
            let x = (c2 / (eps * eps) / dm2).ln() / (a - b);
            let _ = writeln!(
                report,
                "Extrapolated crossover for ε = {eps:e}: d ≈ {:.0} (trajectories cheaper above).",
                d2 * x.exp()
            );
        }
    }
    println!("{report}");
    if full {
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("target/perf");
        let _ = std::fs::create_dir_all(&dir);
        let _ = std::fs::write(dir.join("trajectories-summary.md"), &report);
    }
}
