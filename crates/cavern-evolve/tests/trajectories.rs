//! Quantum trajectories against the density-matrix solver: the trajectory mean must lie within
//! a few standard errors of Tr(Oρ(t)) at every sample time (Dalibard, Castin & Mølmer, PRL 68,
//! 580 (1992); Mølmer, Castin & Dalibard, JOSA B 10, 524 (1993); from memory).

use cavern_evolve::{evolve_density, run_trajectories, DopriOptions, Par, TrajectoryOptions};
use cavern_model::{
    MasterEquation, ModeInit, ModeParams, Network, ProductState, SiteParams, SpinInit,
};
use cavern_observe as obs;

/// Trajectory means of ⟨σᶻ⟩ (site 0) and ⟨n⟩ (mode 0, if any) with their standard errors, and
/// the exact density-matrix values, at `times`.
fn compare(
    me: &MasterEquation,
    st: &ProductState,
    times: &[f64],
    n: usize,
    seed: u64,
) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let space = me.space.clone();
    let has_mode = space.n_modes() > 0;
    let n_obs = if has_mode { 2 } else { 1 };
    let opts = TrajectoryOptions {
        dopri: DopriOptions {
            rtol: 1e-8,
            atol: 1e-10,
            par: Par::Rayon,
            ..Default::default()
        },
        trajectories: n,
        seed,
        keep: 0,
    };
    let psi0 = st.vector(&space).unwrap();
    let sp = space.clone();
    let res = run_trajectories(
        me,
        &psi0,
        times,
        &opts,
        n_obs,
        move |psi, out| {
            out[0] = obs::state::spin_z(&sp, psi, 0);
            if out.len() > 1 {
                out[1] = obs::state::photon_number(&sp, psi, 0);
            }
        },
        &|_| {},
    )
    .unwrap();
    let mut exact = vec![0.0; n_obs * times.len()];
    let nt = times.len();
    evolve_density(
        me,
        &st.density(&space).unwrap(),
        times,
        DopriOptions {
            rtol: 1e-10,
            atol: 1e-12,
            ..Default::default()
        },
        |k, _, rho, _| {
            exact[k] = obs::spin_z(&space, rho, 0);
            if has_mode {
                exact[nt + k] = obs::photon_number(&space, rho, 0);
            }
        },
    )
    .unwrap();
    (res.mean, res.stderr, exact)
}

/// `range`: the spread of single-trajectory values (2 for σᶻ). Early on, when jumps are rare, the
/// sample may hold none and its standard error is then 0; one trajectory's jump moves the mean by
/// at most range/n, so the allowance adds a few such grains to 4 standard errors (a false alarm
/// at 4σ has probability ~6e-5 per point).
fn check(mean: &[f64], se: &[f64], exact: &[f64], range: f64, n: usize, what: &str) {
    let mut worst: f64 = 0.0;
    for k in 0..mean.len() {
        if se[k] > 0.0 {
            worst = worst.max((mean[k] - exact[k]).abs() / se[k]);
        }
        assert!(
            (mean[k] - exact[k]).abs() <= 4.0 * se[k] + 4.0 * range / n as f64,
            "{what}: point {k}: trajectory mean {} ± {} vs exact {}",
            mean[k],
            se[k],
            exact[k]
        );
    }
    eprintln!("{what}: worst deviation {worst:.2} standard errors (points with a non-zero error)");
}

#[test]
fn spontaneous_emission_and_resonance_fluorescence() {
    // spontaneous emission from |e⟩ (Allen & Eberly, from memory) and a resonantly driven,
    // decaying spin from |g⟩ (Mollow 1969, from memory)
    for (rabi, seed) in [(0.0, 1u64), (3.0, 2)] {
        let mut net = Network::empty();
        net.sites.push(SiteParams {
            decay: 1.0,
            rabi,
            ..Default::default()
        });
        let me = net.build().unwrap();
        let start = if rabi == 0.0 { 1 } else { -1 };
        let st = ProductState {
            spins: vec![SpinInit::from_sign(start)],
            modes: vec![],
        };
        let times: Vec<f64> = (0..31).map(|k| 0.1 * k as f64).collect();
        let (m, se, ex) = compare(&me, &st, &times, 2000, seed);
        check(
            &m,
            &se,
            &ex,
            2.0,
            2000,
            if rabi == 0.0 {
                "spontaneous emission"
            } else {
                "resonance fluorescence"
            },
        );
    }
}

#[test]
fn driven_lossy_cavity_with_one_spin() {
    let mut net = Network::empty();
    net.sites.push(SiteParams {
        decay: 0.2,
        detuning: 0.3,
        ..Default::default()
    });
    net.modes.push(ModeParams {
        levels: 6,
        loss: 1.0,
        drive: 0.6,
        detuning: 0.2,
        ..Default::default()
    });
    net.coupling = vec![vec![0.8]];
    let me = net.build().unwrap();
    let st = ProductState {
        spins: vec![SpinInit::from_sign(1)],
        modes: vec![ModeInit::Vacuum],
    };
    let times: Vec<f64> = (0..26).map(|k| 0.2 * k as f64).collect();
    let (m, se, ex) = compare(&me, &st, &times, 1500, 7);
    check(&m[..26], &se[..26], &ex[..26], 2.0, 1500, "cavity QED ⟨σᶻ⟩");
    check(&m[26..], &se[26..], &ex[26..], 5.0, 1500, "cavity QED ⟨n⟩");
}

#[test]
fn same_seed_same_records_any_thread_count_and_different_seeds_differ() {
    let mut net = Network::empty();
    net.sites.push(SiteParams {
        decay: 1.0,
        rabi: 2.0,
        ..Default::default()
    });
    let me = net.build().unwrap();
    let psi0 = ProductState {
        spins: vec![SpinInit::from_sign(-1)],
        modes: vec![],
    }
    .vector(&me.space)
    .unwrap();
    let times: Vec<f64> = (0..11).map(|k| 0.5 * k as f64).collect();
    let run = |threads: usize, seed: u64| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        let opts = TrajectoryOptions {
            dopri: DopriOptions::default(),
            trajectories: 100,
            seed,
            keep: 0,
        };
        let sp = me.space.clone();
        pool.install(|| {
            run_trajectories(
                &me,
                &psi0,
                &times,
                &opts,
                1,
                move |psi, out| out[0] = obs::state::spin_z(&sp, psi, 0),
                &|_| {},
            )
            .unwrap()
        })
    };
    let (a, b, c) = (run(1, 5), run(2, 5), run(2, 6));
    assert_eq!(a.jumps, b.jumps);
    assert_eq!(a.mean, b.mean);
    assert_eq!(a.stderr, b.stderr);
    assert_ne!(a.jumps, c.jumps);
    assert!(!a.jumps.is_empty());
}
