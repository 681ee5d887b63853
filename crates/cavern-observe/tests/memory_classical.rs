//! Classical associative memory: learning rules, zero-temperature descent and Glauber dynamics,
//! checked against published results (Hopfield 1982; Amit, Gutfreund & Sompolinsky 1985;
//! Personnaz, Guyon & Dreyfus 1985; Storkey 1997; Glauber 1963; Curie–Weiss mean field) and
//! against NumPy.

use cavern_model::memory::{learn, overlap, Couplings, LearningRule, Pattern};
use cavern_model::network::glauber_up;
use cavern_observe::classical::{descend, glauber, random_patterns};
#[path = "../../cavern-evolve/tests/common/python.rs"]
mod python;
use python::python;

/// Is every site of `p` aligned with its local field (strictly), i.e. is `p` a fixed point of the
/// zero-temperature dynamics?
fn is_fixed_point(j: &Couplings, p: &[i8]) -> bool {
    (0..j.n()).all(|i| j.local_field(p, i) * f64::from(p[i]) > j.tie_tolerance(i))
}

fn fixed_point_count(j: &Couplings, patterns: &[Pattern]) -> usize {
    patterns.iter().filter(|p| is_fixed_point(j, p)).count()
}

#[test]
fn hebbian_patterns_are_local_minima_and_descent_never_raises_the_energy() {
    // Hopfield, PNAS 79, 2554 (1982): for few stored patterns (P/N small) each pattern is a
    // fixed point of the asynchronous dynamics, i.e. a local minimum of E = −½ΣJss, and every
    // asynchronous update lowers E or leaves it unchanged.
    let (n, np) = (100, 3);
    let patterns = random_patterns(n, np, 1);
    let j = learn(LearningRule::Hebbian, &patterns).unwrap();
    for p in &patterns {
        assert!(is_fixed_point(&j, p));
        let e = j.energy(p);
        for i in 0..n {
            let mut q = p.clone();
            q[i] = -q[i];
            assert!(j.energy(&q) > e, "single flip lowers the energy");
        }
        let out = descend(&j, p, 5, 10);
        assert!(out.converged && out.flips == 0 && out.sweeps == 1);
        assert_eq!(&out.state, p);
    }
    // from random starts, the energy after k sweeps (same seed → same site orders) never rises
    for seed in 0..5 {
        let start = &random_patterns(n, 1, 100 + seed)[0];
        let mut last = j.energy(start);
        let mut k = 1;
        loop {
            let out = descend(&j, start, seed, k);
            assert!(
                out.energy <= last + 1e-12,
                "energy rose: {} → {}",
                last,
                out.energy
            );
            assert!((out.energy - j.energy(&out.state)).abs() < 1e-12);
            last = out.energy;
            if out.converged {
                // the end point is a local minimum: no single flip lowers E
                for i in 0..n {
                    let mut q = out.state.clone();
                    q[i] = -q[i];
                    assert!(j.energy(&q) >= out.energy - 1e-12);
                }
                break;
            }
            k += 1;
            assert!(k < 100, "descent did not converge");
        }
    }
}

/// Mean final overlap with the starting pattern after descent from each of the first `probes`
/// stored patterns.
fn recall_overlap(n: usize, np: usize, probes: usize, seed: u64) -> f64 {
    let patterns = random_patterns(n, np, seed);
    let j = learn(LearningRule::Hebbian, &patterns).unwrap();
    let mut sum = 0.0;
    for (k, p) in patterns.iter().take(probes).enumerate() {
        let out = descend(&j, p, seed * 1000 + k as u64, 200);
        let s: Vec<f64> = out.state.iter().map(|&x| f64::from(x)).collect();
        sum += overlap(p, &s);
    }
    sum / probes.min(np) as f64
}

#[test]
fn hebbian_capacity_breaks_down_near_0_138() {
    // Amit, Gutfreund & Sompolinsky, PRL 55, 1530 (1985): retrieval states of the Hebbian network
    // exist up to α = P/N ≈ 0.138 with overlap m ≈ 0.97 at the edge and m > 0.99 for α ≤ 0.1;
    // beyond it, descent from a stored pattern ends far from it. At N = 400 finite-size effects
    // blur the transition, so the check is one load well inside (α = 0.05: m > 0.95) and one
    // well beyond (α = 0.25: mean m < 0.6).
    let n = 400;
    let below = recall_overlap(n, 20, 10, 2);
    let above = recall_overlap(n, 100, 10, 3);
    eprintln!("N = {n}: mean recall overlap α = 0.05: {below:.4}, α = 0.25: {above:.4}");
    assert!(below > 0.95, "α = 0.05 overlap {below}");
    assert!(above < 0.6, "α = 0.25 overlap {above}");
    // content-addressable recall from a noisy probe (Hopfield 1982): at α = 0.05 probes with
    // about 12% of the sites flipped (m₀ ≈ 0.75) descend back to the stored pattern
    let patterns = random_patterns(n, 20, 2);
    let j = learn(LearningRule::Hebbian, &patterns).unwrap();
    let noise = random_patterns(n, 40, 5);
    for (k, p) in patterns.iter().take(10).enumerate() {
        // flip site i when three independent draws are all −1 (probability 1/8 = 12.5%)
        let probe: Vec<i8> = (0..n)
            .map(|i| {
                let flip = (0..3).all(|r| noise[k + 10 * r][i] == -1);
                if flip {
                    -p[i]
                } else {
                    p[i]
                }
            })
            .collect();
        let out = descend(&j, &probe, 50 + k as u64, 200);
        let s: Vec<f64> = out.state.iter().map(|&x| f64::from(x)).collect();
        let m0 = overlap(p, &probe.iter().map(|&x| f64::from(x)).collect::<Vec<_>>());
        let m = overlap(p, &s);
        assert!(m0 < 0.85 && m > 0.95, "probe {k}: m₀ = {m0}, final m = {m}");
    }
}

/// `count` copies of one random prototype, each entry flipped with probability 1/8 (when three
/// independent fair ±1 draws are all −1); pairwise overlap ≈ (3/4)² ≈ 0.56.
fn correlated_patterns(n: usize, count: usize, seed: u64) -> Vec<Pattern> {
    let proto = &random_patterns(n, 1, seed)[0];
    let noise = random_patterns(n, count * 3, seed + 1);
    (0..count)
        .map(|k| {
            (0..n)
                .map(|i| {
                    let flip = (0..3).all(|r| noise[k * 3 + r][i] == -1);
                    if flip {
                        -proto[i]
                    } else {
                        proto[i]
                    }
                })
                .collect()
        })
        .collect()
}

#[test]
fn projection_rule_stores_correlated_patterns_exactly_where_hebbian_fails() {
    // Personnaz, Guyon & Dreyfus, J. Physique Lett. 46, L359 (1985): with J = Ξ C⁻¹ Ξᵀ/N every
    // linearly independent pattern satisfies Jξ = ξ, hence (with the diagonal removed, which
    // keeps the sign as J_ii < 1) is a fixed point, however correlated the patterns are.
    // Hebbian storage of strongly correlated patterns instead merges them (Hopfield 1982).
    let (n, np) = (100, 10);
    let patterns = correlated_patterns(n, np, 7);
    let mean_overlap: f64 = {
        let mut s = 0.0;
        for a in 0..np {
            for b in 0..a {
                let pb: Vec<f64> = patterns[b].iter().map(|&x| f64::from(x)).collect();
                s += overlap(&patterns[a], &pb);
            }
        }
        s / (np * (np - 1) / 2) as f64
    };
    let proj = learn(LearningRule::Projection, &patterns).unwrap();
    let hebb = learn(LearningRule::Hebbian, &patterns).unwrap();
    let (fp_proj, fp_hebb) = (
        fixed_point_count(&proj, &patterns),
        fixed_point_count(&hebb, &patterns),
    );
    eprintln!(
        "correlated set (mean pair overlap {mean_overlap:.3}): fixed points projection \
         {fp_proj}/{np}, Hebbian {fp_hebb}/{np}"
    );
    assert!(mean_overlap > 0.4);
    assert_eq!(fp_proj, np);
    assert!(fp_hebb <= np / 2);
    // J + D (D = the removed diagonal, 0 ≤ D_ii < 1) acts as the identity on the span, so the
    // local field of a stored pattern is hᵢ = (1 − D_ii) ξᵢ: aligned and of size at most 1
    for p in &patterns {
        for i in 0..n {
            let a = proj.local_field(p, i) * f64::from(p[i]);
            assert!(a > 0.0 && a <= 1.0 + 1e-12, "site {i}: ξᵢhᵢ = {a}");
        }
    }
    // J = Π − D with Π an orthogonal projector and D ≥ 0, so every eigenvalue of J is ≤ 1
    let ev = proj.spectrum();
    assert!(*ev.last().unwrap() <= 1.0 + 1e-9);
}

#[test]
fn storkey_rule_stores_beyond_the_hebbian_stability_limit() {
    // Storkey (1997): the incremental rule keeps all patterns as fixed points up to
    // P ≈ N/√(2 ln N) (≈ 33 at N = 100), against N/(2 ln N) ≈ 11 for the Hebbian rule
    // (McEliece, Posner, Rodemich & Venkatesh, IEEE Trans. Inf. Theory 33, 461 (1987), from
    // memory). At P = 20, N = 100 the Storkey patterns are all fixed points, the Hebbian ones not.
    let (n, np) = (100, 20);
    let mut storkey_total = 0;
    let mut hebb_total = 0;
    for seed in 0..3 {
        let patterns = random_patterns(n, np, 40 + seed);
        let st = learn(LearningRule::Storkey, &patterns).unwrap();
        let hb = learn(LearningRule::Hebbian, &patterns).unwrap();
        storkey_total += fixed_point_count(&st, &patterns);
        hebb_total += fixed_point_count(&hb, &patterns);
    }
    eprintln!("P = {np}, N = {n}, 3 sets: fixed points Storkey {storkey_total}/60, Hebbian {hebb_total}/60");
    assert_eq!(storkey_total, 3 * np);
    assert!(hebb_total < 2 * np);
}

#[test]
fn spectrum_matches_numpy_eigvalsh() {
    // reference: numpy.linalg.eigvalsh (LAPACK syevd)
    for (rule, n, np, seed) in [
        (LearningRule::Hebbian, 12, 3, 1),
        (LearningRule::Projection, 30, 7, 2),
        (LearningRule::Storkey, 25, 6, 3),
    ] {
        let j = learn(rule, &random_patterns(n, np, seed)).unwrap();
        let ours = j.spectrum();
        let text: Vec<String> = j
            .rows()
            .iter()
            .map(|r| {
                r.iter()
                    .map(|x| format!("{x:.17e}"))
                    .collect::<Vec<_>>()
                    .join(" ")
            })
            .collect();
        let out = python(
            "import sys, numpy as np\n\
             a = np.array([[float(x) for x in l.split()] for l in sys.stdin if l.strip()])\n\
             print(' '.join(repr(float(v)) for v in np.linalg.eigvalsh(a)))",
            &text.join("\n"),
        );
        let theirs: Vec<f64> = out.split_whitespace().map(|x| x.parse().unwrap()).collect();
        assert_eq!(theirs.len(), n);
        let scale = theirs.iter().fold(0.0f64, |m, x| m.max(x.abs()));
        for (a, b) in ours.iter().zip(&theirs) {
            // backward-stable eigensolvers: error ≲ ε·N·‖J‖ (Golub & Van Loan §8.5)
            assert!(
                (a - b).abs() <= 100.0 * f64::EPSILON * n as f64 * scale,
                "{rule:?}: {a} vs {b}"
            );
        }
    }
}

/// Curie–Weiss couplings Jᵢⱼ = J0/N, i ≠ j.
fn curie_weiss(n: usize, j0: f64) -> Couplings {
    let rows: Vec<Vec<f64>> = (0..n)
        .map(|i| {
            (0..n)
                .map(|k| if i == k { 0.0 } else { j0 / n as f64 })
                .collect()
        })
        .collect();
    Couplings::from_rows(&rows).unwrap()
}

/// Magnetisation samples m = Σs/N, one per sweep after `burn` sweeps.
fn magnetisation_samples(
    j: &Couplings,
    t: f64,
    burn: usize,
    samples: usize,
    seed: u64,
) -> Vec<f64> {
    let n = j.n();
    let mut s = glauber(j, &vec![1; n], t, burn, seed).state;
    (0..samples)
        .map(|k| {
            s = glauber(j, &s, t, 1, seed + 1 + k as u64).state;
            s.iter().map(|&x| f64::from(x)).sum::<f64>() / n as f64
        })
        .collect()
}

/// Solve m = tanh(m/τ) (τ = T/J0 < 1) for the positive root by fixed-point iteration.
fn mean_field_m(tau: f64) -> f64 {
    let mut m = 1.0;
    for _ in 0..10_000 {
        m = (m / tau).tanh();
    }
    m
}

#[test]
fn glauber_curie_weiss_follows_mean_field() {
    // Curie–Weiss model (textbook mean field, e.g. Kardar, Statistical Physics of Particles
    // (2007)): below T_c = J0 the magnetisation solves m = tanh(J0 m/T); above T_c it vanishes,
    // with fluctuations ⟨m²⟩ = 1/(N(1 − J0/T)) (Gaussian approximation, same source).
    let (n, j0) = (400, 1.0);
    let j = curie_weiss(n, j0);
    for tau in [0.5, 0.8] {
        let m = magnetisation_samples(&j, tau * j0, 100, 400, 9);
        let mean = m.iter().sum::<f64>() / m.len() as f64;
        let want = mean_field_m(tau);
        eprintln!("T/J0 = {tau}: ⟨m⟩ = {mean:.4}, mean field {want:.4}");
        // fluctuations: std(m) ≈ √(χT/N) ≲ 0.05 per sample, 400 correlated samples → ≲ 0.01;
        // finite-size bias O(1/N)
        assert!((mean - want).abs() < 0.02, "T/J0 = {tau}: {mean} vs {want}");
    }
    let tau = 2.0;
    let m = magnetisation_samples(&j, tau * j0, 50, 2000, 19);
    let mean = m.iter().sum::<f64>() / m.len() as f64;
    let m2 = m.iter().map(|x| x * x).sum::<f64>() / m.len() as f64;
    let want = 1.0 / (n as f64 * (1.0 - 1.0 / tau));
    eprintln!("T/J0 = {tau}: ⟨m⟩ = {mean:.4}, ⟨m²⟩ = {m2:.5} vs {want:.5}");
    assert!(mean.abs() < 0.02);
    // ~1000 independent samples (correlation time ~1/(1 − J0/T) = 2 sweeps): relative
    // statistical error of ⟨m²⟩ ≈ √(2/1000) ≈ 5%; allow 20%
    assert!((m2 / want - 1.0).abs() < 0.2, "{m2} vs {want}");
}

#[test]
fn glauber_samples_the_boltzmann_distribution() {
    // Glauber, J. Math. Phys. 4, 294 (1963): the heat-bath rates satisfy detailed balance with
    // respect to exp(−E/T)/Z, so (i) the continuous-time rate matrix annihilates the Boltzmann
    // vector exactly and (ii) the sampled state histogram converges to it.
    let rows = vec![
        vec![0.0, 0.7, -0.4, 0.2],
        vec![0.7, 0.0, 0.5, -0.3],
        vec![-0.4, 0.5, 0.0, 0.6],
        vec![0.2, -0.3, 0.6, 0.0],
    ];
    let j = Couplings::from_rows(&rows).unwrap();
    let (n, t) = (4, 0.8);
    let states: Vec<Vec<i8>> = (0..1 << n)
        .map(|k| {
            (0..n)
                .map(|i| if k >> i & 1 == 1 { 1 } else { -1 })
                .collect()
        })
        .collect();
    let weights: Vec<f64> = states.iter().map(|s| (-j.energy(s) / t).exp()).collect();
    let z: f64 = weights.iter().sum();
    let boltzmann: Vec<f64> = weights.iter().map(|w| w / z).collect();
    // (i) stationarity of the master equation dP(s)/dt = Σᵢ [W(sⁱ→s)P(sⁱ) − W(s→sⁱ)P(s)]
    for (k, s) in states.iter().enumerate() {
        let mut flow = 0.0;
        for i in 0..n {
            let kf = k ^ (1 << i);
            let h = j.local_field(s, i); // same for s and its i-flip
                                         // rate of moving site i to value v: w↑(h) for v = +1, w↑(−h) for v = −1
            let rate_to = |v: i8| glauber_up(f64::from(v) * h, t, 0.0);
            flow += rate_to(s[i]) * boltzmann[kf] - rate_to(-s[i]) * boltzmann[k];
        }
        assert!(flow.abs() < 1e-15, "state {k}: net flow {flow}");
    }
    // (ii) histogram of a long heat-bath run
    let sweeps = 100_000;
    let mut hist = vec![0usize; 1 << n];
    let mut s = vec![1i8; n];
    for k in 0..sweeps {
        s = glauber(&j, &s, t, 1, 1000 + k as u64).state;
        let idx = (0..n).filter(|&i| s[i] == 1).map(|i| 1 << i).sum::<usize>();
        hist[idx] += 1;
    }
    for k in 0..1 << n {
        let p = hist[k] as f64 / sweeps as f64;
        // binomial standard error √(p(1−p)/samples) (samples one sweep apart are nearly
        // independent for N = 4); 5σ
        let sigma = (boltzmann[k] * (1.0 - boltzmann[k]) / sweeps as f64).sqrt();
        assert!(
            (p - boltzmann[k]).abs() < 5.0 * sigma + 1e-4,
            "state {k}: sampled {p} vs Boltzmann {}",
            boltzmann[k]
        );
    }
}

#[test]
fn projection_and_storkey_match_numpy_implementations() {
    // references: projection J = Ξ·pinv(Ξ) with numpy.linalg.pinv (Personnaz, Guyon & Dreyfus
    // 1985: the orthogonal projector on the span of the patterns), diagonal zeroed; Storkey's
    // update written out literally from Storkey (1997):
    // w_ij += (ξᵢξⱼ − ξᵢ h_ji − h_ij ξⱼ)/N, h_ij = Σ_{k≠i,j} w_ik ξ_k
    let (n, np) = (12, 4);
    let patterns = random_patterns(n, np, 77);
    let text: Vec<String> = patterns
        .iter()
        .map(|p| {
            p.iter()
                .map(|x| x.to_string())
                .collect::<Vec<_>>()
                .join(" ")
        })
        .collect();
    let out = python(
        "import sys, numpy as np\n\
         X = np.array([[float(x) for x in l.split()] for l in sys.stdin if l.strip()])\n\
         P, N = X.shape\n\
         J = X.T @ np.linalg.pinv(X.T)\n\
         np.fill_diagonal(J, 0.0)\n\
         W = np.zeros((N, N))\n\
         for xi in X:\n\
         \x20   h = lambda i, j: sum(W[i, k] * xi[k] for k in range(N) if k != i and k != j)\n\
         \x20   D = np.zeros((N, N))\n\
         \x20   for i in range(N):\n\
         \x20       for j in range(N):\n\
         \x20           if i != j:\n\
         \x20               D[i, j] = (xi[i] * xi[j] - xi[i] * h(j, i) - h(i, j) * xi[j]) / N\n\
         \x20   W = W + D\n\
         print(' '.join(repr(float(v)) for v in J.ravel()))\n\
         print(' '.join(repr(float(v)) for v in W.ravel()))",
        &text.join("\n"),
    );
    let mut lines = out.lines();
    for rule in [LearningRule::Projection, LearningRule::Storkey] {
        let theirs: Vec<f64> = lines
            .next()
            .unwrap()
            .split_whitespace()
            .map(|x| x.parse().unwrap())
            .collect();
        let j = learn(rule, &patterns).unwrap();
        for i in 0..n {
            for k in 0..n {
                // both sides are O(1) sums of O(N·P) rounded terms
                assert!(
                    (j.get(i, k) - theirs[i * n + k]).abs() < 1e-12,
                    "{rule:?} [{i}][{k}]: {} vs {}",
                    j.get(i, k),
                    theirs[i * n + k]
                );
            }
        }
    }
}
