//! The associative-memory workflow: stored patterns realised in the network (`[memory]`), probe
//! states corrupted from them (`[probes]`), the evolution of every probe under the same master
//! equation, the recall metrics, and the classical Hopfield baseline on the same couplings.
//!
//! Definitions (README.md, "Associative memory"):
//! - overlap m_μ(t) = (1/N) Σᵢ ξᵢ^μ ⟨σᶻᵢ⟩(t) (negation: −m_μ);
//! - a probe of pattern μ **succeeds** when its final overlap m_μ(T) is above the threshold θ;
//! - its **time to recall** is the first sample time t_k with m_μ(t_j) > θ for every j ≥ k
//!   (NaN when m_μ(T) ≤ θ);
//! - the **retrieved** pattern is μ when m_μ(T) > θ, N_p + μ when −m_μ(T) > θ (its negation),
//!   else −1 (θ ≥ ½ makes it unique for distinct patterns; the largest is taken otherwise).

use crate::config::{Method, RunPlan};
use crate::AppError;
use cavern_evolve::{evolve_density, run_trajectories, DopriOptions, Par, TrajectoryOptions};
use cavern_model::effective::{EffectiveModel, MediatedJump};
use cavern_model::memory::{overlap, Couplings, LearningRule, Pattern};
use cavern_model::state::{MixedProductState, SiteInit};
use cavern_model::{FieldRelaxation, MasterEquation, SpinInit};
use cavern_observe::classical;
use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};
use rayon::prelude::*;

/// How the memory couplings enter the network.
#[derive(Clone, Debug, PartialEq)]
pub enum Realisation {
    /// Direct zz couplings Jᶻ = −c·J ([`cavern_model::memory::zz_from_couplings`]).
    Zz,
    /// A user-given coupling matrix J (rule units), realised as direct zz couplings Jᶻ = −c·J.
    Matrix,
    /// One lossy mode per pattern, longitudinal coupling g ξᵢ^μ (a_μ + a_μ†) σᶻᵢ.
    Modes {
        /// Index of the first memory mode in the network (the user's `[[modes]]` come first).
        first_mode: usize,
        /// Fock levels kept per memory mode.
        levels: usize,
        /// Δ (angular).
        detuning: f64,
        /// κ (angular energy decay rate).
        loss: f64,
        /// g (angular).
        coupling: f64,
        /// The modes were eliminated adiabatically: the run uses the spin-only effective model
        /// (mediated zz in the Hamiltonian, one collective dephasing jump per pattern).
        eliminated: bool,
    },
}

impl Realisation {
    /// Name used in the config and the output.
    pub fn name(&self) -> &'static str {
        match self {
            Realisation::Zz => "zz",
            Realisation::Matrix => "matrix",
            Realisation::Modes { .. } => "modes",
        }
    }
}

/// What the config stores and how (`[memory]`).
#[derive(Clone, Debug, PartialEq)]
pub struct MemoryPlan {
    /// The stored ±1 patterns.
    pub patterns: Vec<Pattern>,
    /// The learning rule (`None` for a user-given matrix).
    pub rule: Option<LearningRule>,
    /// How J enters the network.
    pub realisation: Realisation,
    /// The coupling matrix J in rule units (for the mode realisation: the Hebbian J the modes
    /// mediate after adiabatic elimination).
    pub couplings: Couplings,
    /// The scale c (angular): Jᶻ = −c·J (for modes, the mediated c = 2N g²Δ/(Δ² + κ²/4)).
    pub scale: f64,
    /// The local-field spin relaxation, if configured.
    pub relaxation: Option<FieldRelaxation>,
    /// The probes, when `[probes]` is present.
    pub probes: Option<ProbePlan>,
    /// The collective jumps left by eliminated memory modes (empty unless the modes were
    /// eliminated; the Hamiltonian part is already in the network's zz).
    pub mediated_jumps: Vec<MediatedJump>,
}

/// The master equation of a plan: the network's, plus the collective jumps of eliminated memory
/// modes (Reiter & Sørensen, Phys. Rev. A 85, 032111 (2012)).
///
/// # Errors
/// As [`cavern_model::Network::build`].
pub fn master_equation(plan: &RunPlan) -> Result<MasterEquation, cavern_model::ModelError> {
    match &plan.memory {
        Some(m) if !m.mediated_jumps.is_empty() => EffectiveModel {
            network: plan.network.clone(),
            jumps: m.mediated_jumps.clone(),
        }
        .build(),
        _ => plan.network.build(),
    }
}

/// How the probed sites are corrupted.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Corruption {
    /// Each listed site starts flipped (−ξᵢ).
    Flip,
    /// Each listed site starts maximally mixed (½𝟙).
    EraseMixed,
    /// Each listed site starts in (|e⟩ + |g⟩)/√2.
    EraseSuperposition,
}

impl Corruption {
    /// Name used in the config and the output.
    pub fn name(self) -> &'static str {
        match self {
            Corruption::Flip => "flip",
            Corruption::EraseMixed => "erase-mixed",
            Corruption::EraseSuperposition => "erase-superposition",
        }
    }
}

/// One probe: a stored pattern with some sites corrupted.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Probe {
    /// Index of the probed pattern.
    pub pattern: usize,
    /// The corrupted sites, ascending.
    pub sites: Vec<usize>,
}

/// The probe batch and the recall settings (`[probes]`).
#[derive(Clone, Debug, PartialEq)]
pub struct ProbePlan {
    /// Every probe, in output order.
    pub probes: Vec<Probe>,
    /// How the sites are corrupted.
    pub corruption: Corruption,
    /// Success threshold θ on the final overlap.
    pub threshold: f64,
    /// Seed of the random draws and of the classical runs.
    pub seed: u64,
    /// Temperature of the classical Glauber baseline (rule units of J).
    pub glauber_temperature: f64,
    /// Sweeps of each classical Glauber run.
    pub glauber_sweeps: usize,
    /// Classical Glauber runs per probe.
    pub glauber_runs: usize,
}

/// Binomial coefficient C(n, k), saturating.
pub fn choose(n: usize, k: usize) -> u128 {
    if k > n {
        return 0;
    }
    let mut c: u128 = 1;
    for i in 0..k.min(n - k) {
        c = c.saturating_mul((n - i) as u128) / (i as u128 + 1);
    }
    c
}

/// Every k-subset of 0..n in lexicographic order.
fn all_subsets(n: usize, k: usize) -> Vec<Vec<usize>> {
    let mut out = Vec::new();
    let mut idx: Vec<usize> = (0..k).collect();
    if k > n {
        return out;
    }
    loop {
        out.push(idx.clone());
        // advance the rightmost index that can move
        let Some(p) = (0..k).rev().find(|&p| idx[p] < n - k + p) else {
            return out;
        };
        idx[p] += 1;
        for q in p + 1..k {
            idx[q] = idx[q - 1] + 1;
        }
    }
}

/// The corrupted-site sets of one (pattern, k) cell: all C(n, k) subsets when `draws` ≥ C(n, k),
/// otherwise `draws` distinct subsets drawn uniformly (partial Fisher–Yates shuffle) from
/// stream `stream` of ChaCha8 seeded with `seed`.
pub fn draw_subsets(n: usize, k: usize, draws: usize, seed: u64, stream: u64) -> Vec<Vec<usize>> {
    if (draws as u128) >= choose(n, k) {
        return all_subsets(n, k);
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(stream);
    let mut out: Vec<Vec<usize>> = Vec::with_capacity(draws);
    let mut sites: Vec<usize> = (0..n).collect();
    while out.len() < draws {
        for i in 0..k {
            let j = i + (rng.next_u64() % (n - i) as u64) as usize;
            sites.swap(i, j);
        }
        let mut s = sites[..k].to_vec();
        s.sort_unstable();
        if !out.contains(&s) {
            out.push(s);
        }
    }
    out
}

/// The probe batch: for each pattern in `patterns` and each k = 1 … `max_flips`, the subsets of
/// [`draw_subsets`] (stream = pattern · 2¹⁶ + k, so each cell is reproducible on its own).
pub fn draw_probes(
    n: usize,
    patterns: &[usize],
    max_flips: usize,
    draws: usize,
    seed: u64,
) -> Vec<Probe> {
    let mut out = Vec::new();
    for &pattern in patterns {
        for k in 1..=max_flips {
            for sites in draw_subsets(n, k, draws, seed, ((pattern as u64) << 16) + k as u64) {
                out.push(Probe { pattern, sites });
            }
        }
    }
    out
}

/// Time to recall: the first sample time t_k after which the overlap stays above `threshold`
/// (m(t_j) > θ for every j ≥ k); NaN when the last sample is not above it.
pub fn time_to_recall(times: &[f64], overlap: &[f64], threshold: f64) -> f64 {
    let mut first = None;
    for (k, &m) in overlap.iter().enumerate().rev() {
        if m > threshold {
            first = Some(k);
        } else {
            break;
        }
    }
    first.map_or(f64::NAN, |k| times[k])
}

/// The retrieved entry from final overlaps `m`: μ when m_μ > θ, N_p + μ (the negation) when
/// −m_μ > θ, −1 when none; the largest |m_μ| wins if several pass.
pub fn retrieved(m: &[f64], threshold: f64) -> i64 {
    let mut best: Option<(f64, i64)> = None;
    for (mu, &x) in m.iter().enumerate() {
        let cand = if x > threshold {
            Some((x, mu as i64))
        } else if -x > threshold {
            Some((-x, (m.len() + mu) as i64))
        } else {
            None
        };
        if let Some(c) = cand {
            if best.is_none_or(|b| c.0 > b.0) {
                best = Some(c);
            }
        }
    }
    best.map_or(-1, |b| b.1)
}

/// The initial state of a probe: the run's initial mode states, the probed pattern's signs on
/// the sites, corrupted as `corruption` says on the probe's sites.
pub fn probe_state(
    plan: &RunPlan,
    patterns: &[Pattern],
    probe: &Probe,
    corruption: Corruption,
) -> MixedProductState {
    let xi = &patterns[probe.pattern];
    let sites = xi
        .iter()
        .enumerate()
        .map(|(i, &s)| {
            if !probe.sites.contains(&i) {
                return SiteInit::Pure(SpinInit::from_sign(s));
            }
            match corruption {
                Corruption::Flip => SiteInit::Pure(SpinInit::from_sign(-s)),
                Corruption::EraseMixed => SiteInit::MaximallyMixed,
                Corruption::EraseSuperposition => SiteInit::Pure(SpinInit {
                    theta: std::f64::consts::FRAC_PI_2,
                    phi: 0.0,
                }),
            }
        })
        .collect();
    MixedProductState {
        sites,
        modes: plan.initial.modes.clone(),
    }
}

/// The classical start of a probe: the pattern with the probe's sites flipped, or (erasures)
/// set to random signs drawn from `rng`.
fn classical_start(
    xi: &[i8],
    probe: &Probe,
    corruption: Corruption,
    rng: &mut ChaCha8Rng,
) -> Vec<i8> {
    let mut s = xi.to_vec();
    for &i in &probe.sites {
        s[i] = match corruption {
            Corruption::Flip => -xi[i],
            _ => {
                if rng.next_u64() & 1 == 1 {
                    1
                } else {
                    -1
                }
            }
        };
    }
    s
}

/// Result of one probe.
#[derive(Clone, Debug, PartialEq)]
pub struct ProbeOutcome {
    /// Overlaps with every pattern against time, `[pattern][time]` row-major (the mean over
    /// trajectories for the trajectory solver).
    pub overlaps: Vec<f64>,
    /// Final overlap with every pattern.
    pub final_overlap: Vec<f64>,
    /// Retrieved entry ([`retrieved`]).
    pub retrieved: i64,
    /// Final overlap with the probed pattern above the threshold.
    pub success: bool,
    /// [`time_to_recall`] of the overlap with the probed pattern.
    pub time_to_recall: f64,
    /// Recall probability P = Tr(Π ρ(T)) with its standard error: the probability that measuring
    /// every site's σᶻ at the last sample finds a configuration whose overlap with the probed
    /// pattern is above the threshold (Π projects on those configurations, [`recalled_mask`]).
    /// Exact for the density matrix (error 0); for trajectories the mean of ⟨ψ|Π|ψ⟩ over the
    /// trajectories and its standard error.
    pub success_probability: Option<(f64, f64)>,
    /// Classical zero-temperature descent from the same start succeeded (0/1).
    pub descent_success: f64,
    /// Fraction of the classical Glauber runs that succeeded.
    pub glauber_success: f64,
}

/// One point of the recall curve.
#[derive(Clone, Debug, PartialEq)]
pub struct CurvePoint {
    /// Number of corrupted sites k.
    pub flips: usize,
    /// Probes with this k.
    pub probes: usize,
    /// Quantum success fraction (mean success probability for trajectories).
    pub success: f64,
    /// Its standard error ([`curve`]).
    pub success_stderr: f64,
    /// Mean time to recall over the successful probes (NaN if none).
    pub time_to_recall: f64,
    /// Classical descent success fraction.
    pub descent_success: f64,
    /// Classical Glauber success fraction.
    pub glauber_success: f64,
}

/// Everything the probes produced.
#[derive(Clone, Debug, PartialEq)]
pub struct RecallResult {
    /// Per probe, in the order of [`ProbePlan::probes`].
    pub outcomes: Vec<ProbeOutcome>,
    /// Success against k.
    pub curve: Vec<CurvePoint>,
    /// The solver used.
    pub method: Method,
    /// Trajectories per probe (0 for the density matrix).
    pub trajectories: usize,
    /// Wall-clock seconds of the probe evolutions.
    pub wall_seconds: f64,
}

/// Basis states (of the whole space, modes included) whose spin configuration has an overlap
/// (1/N) Σᵢ ξᵢ sᵢ with `xi` above `threshold`: the projector Π of the recall probability.
pub fn recalled_mask(space: &cavern_model::Space, xi: &[i8], threshold: f64) -> Vec<bool> {
    (0..space.dim())
        .map(|r| {
            let s: Vec<f64> = (0..space.n_sites()).map(|i| space.spin(r, i)).collect();
            overlap(xi, &s) > threshold
        })
        .collect()
}

/// The recall curve: probes grouped by k; success = mean recall probability
/// ([`ProbeOutcome::success_probability`]) over the n probes. Its error: with `exact`
/// probabilities (density matrix) the standard error of that mean over the probes,
/// sd/√n (the spread over corruptions); for trajectories √(Σ se_p²)/n (the trajectories'
/// statistical error). Without probabilities, the fraction f of successful probes, √(f(1−f)/n).
pub fn curve(probes: &[Probe], outcomes: &[ProbeOutcome], exact: bool) -> Vec<CurvePoint> {
    let mut ks: Vec<usize> = probes.iter().map(|p| p.sites.len()).collect();
    ks.sort_unstable();
    ks.dedup();
    ks.into_iter()
        .map(|k| {
            let sel: Vec<&ProbeOutcome> = probes
                .iter()
                .zip(outcomes)
                .filter(|(p, _)| p.sites.len() == k)
                .map(|(_, o)| o)
                .collect();
            let n = sel.len() as f64;
            let mean = |f: &dyn Fn(&ProbeOutcome) -> f64| sel.iter().map(|o| f(o)).sum::<f64>() / n;
            let (success, success_stderr) = if sel.iter().all(|o| o.success_probability.is_some()) {
                let p = mean(&|o| o.success_probability.map_or(0.0, |x| x.0));
                let err = if exact {
                    let ss: f64 = sel
                        .iter()
                        .map(|o| (o.success_probability.map_or(0.0, |x| x.0) - p).powi(2))
                        .sum();
                    if sel.len() > 1 {
                        (ss / (n - 1.0)).sqrt() / n.sqrt()
                    } else {
                        0.0
                    }
                } else {
                    sel.iter()
                        .map(|o| o.success_probability.map_or(0.0, |x| x.1 * x.1))
                        .sum::<f64>()
                        .sqrt()
                        / n
                };
                (p, err)
            } else {
                let f = mean(&|o| f64::from(u8::from(o.success)));
                (f, (f * (1.0 - f) / n).sqrt())
            };
            let ok: Vec<f64> = sel
                .iter()
                .filter(|o| o.success)
                .map(|o| o.time_to_recall)
                .collect();
            CurvePoint {
                flips: k,
                probes: sel.len(),
                success,
                success_stderr,
                time_to_recall: if ok.is_empty() {
                    f64::NAN
                } else {
                    ok.iter().sum::<f64>() / ok.len() as f64
                },
                descent_success: mean(&|o| o.descent_success),
                glauber_success: mean(&|o| o.glauber_success),
            }
        })
        .collect()
}

/// Largest dimension for which the density-matrix probes run in parallel (one probe per thread,
/// each sequential); above it the probes run one after another with a parallel kernel.
const PARALLEL_PROBES_MAX_DIM: usize = 128;

/// Classical baseline of one probe on J: descent (0/1) and the Glauber success fraction.
fn baseline(mem: &MemoryPlan, pp: &ProbePlan, index: usize) -> (f64, f64) {
    let probe = &pp.probes[index];
    let xi = &mem.patterns[probe.pattern];
    let mut rng = ChaCha8Rng::seed_from_u64(pp.seed);
    rng.set_stream(index as u64);
    let start = classical_start(xi, probe, pp.corruption, &mut rng);
    let ok = |s: &[i8]| {
        let s: Vec<f64> = s.iter().map(|&x| f64::from(x)).collect();
        overlap(xi, &s) > pp.threshold
    };
    let seed = rng.next_u64();
    let descent = classical::descend(&mem.couplings, &start, seed, 10_000);
    let mut wins = 0;
    for _ in 0..pp.glauber_runs {
        let g = classical::glauber(
            &mem.couplings,
            &start,
            pp.glauber_temperature,
            pp.glauber_sweeps,
            rng.next_u64(),
        );
        wins += usize::from(ok(&g.state));
    }
    (
        f64::from(u8::from(ok(&descent.state))),
        wins as f64 / pp.glauber_runs.max(1) as f64,
    )
}

/// Metrics of one probe from its overlap traces `[pattern][time]`.
fn outcome(
    times: &[f64],
    overlaps: Vec<f64>,
    n_p: usize,
    probed: usize,
    threshold: f64,
    success_probability: Option<(f64, f64)>,
    classical: (f64, f64),
) -> ProbeOutcome {
    let n_t = times.len();
    let final_overlap: Vec<f64> = (0..n_p).map(|mu| overlaps[mu * n_t + n_t - 1]).collect();
    let trace = &overlaps[probed * n_t..(probed + 1) * n_t];
    ProbeOutcome {
        time_to_recall: time_to_recall(times, trace, threshold),
        retrieved: retrieved(&final_overlap, threshold),
        success: final_overlap[probed] > threshold,
        final_overlap,
        overlaps,
        success_probability,
        descent_success: classical.0,
        glauber_success: classical.1,
    }
}

/// ⟨σᶻᵢ⟩ of every site of a density matrix.
fn site_z(me: &MasterEquation, rho: &[cavern_model::C64]) -> Vec<f64> {
    (0..me.space.n_sites())
        .map(|i| cavern_observe::spin_z(&me.space, rho, i))
        .collect()
}

/// Evolve every probe of `mem` under `me` with `method` and compute the metrics.
/// `progress(done)` is called after each probe.
///
/// # Errors
/// [`AppError::Input`] for an initial state the solver cannot take (a mixed erasure with
/// trajectories); [`AppError::Runtime`] when an evolution fails.
pub fn run_probes(
    plan: &RunPlan,
    me: &MasterEquation,
    mem: &MemoryPlan,
    method: Method,
    opts: DopriOptions,
    progress: &(dyn Fn(usize) + Sync),
) -> Result<Option<RecallResult>, AppError> {
    let Some(pp) = &mem.probes else {
        return Ok(None);
    };
    let start = std::time::Instant::now();
    let times = &plan.times;
    let n_t = times.len();
    let n_p = mem.patterns.len();
    let file = plan.path.display();
    let failed = |k: usize, e: cavern_evolve::EvolveError| {
        AppError::Runtime(format!("{file}: the evolution of probe {k} failed: {e}"))
    };
    let state_err =
        |k: usize, e: cavern_model::ModelError| AppError::Input(format!("{file}: probe {k}: {e}"));
    let (outcomes, trajectories) = match method {
        Method::DensityMatrix => {
            let parallel = me.space.dim() <= PARALLEL_PROBES_MAX_DIM;
            let one = |k: usize| -> Result<ProbeOutcome, AppError> {
                let probe = &pp.probes[k];
                let rho0 = probe_state(plan, &mem.patterns, probe, pp.corruption)
                    .density(&me.space)
                    .map_err(|e| state_err(k, e))?;
                let mut ov = vec![f64::NAN; n_p * n_t];
                let mask = recalled_mask(&me.space, &mem.patterns[probe.pattern], pp.threshold);
                let d = me.space.dim();
                let mut p_recall = f64::NAN;
                let o = DopriOptions {
                    par: if parallel { Par::Seq } else { opts.par },
                    ..opts
                };
                evolve_density(me, &rho0, times, o, |s, _t, rho, _st| {
                    let sz = site_z(me, rho);
                    for (mu, xi) in mem.patterns.iter().enumerate() {
                        ov[mu * n_t + s] = overlap(xi, &sz);
                    }
                    if s + 1 == n_t {
                        p_recall = (0..d).filter(|&r| mask[r]).map(|r| rho[r * d + r].re).sum();
                    }
                })
                .map_err(|e| failed(k, e))?;
                let out = outcome(
                    times,
                    ov,
                    n_p,
                    probe.pattern,
                    pp.threshold,
                    Some((p_recall, 0.0)),
                    baseline(mem, pp, k),
                );
                progress(1);
                Ok(out)
            };
            let res: Result<Vec<_>, _> = if parallel {
                (0..pp.probes.len()).into_par_iter().map(one).collect()
            } else {
                (0..pp.probes.len()).map(one).collect()
            };
            (res?, 0)
        }
        Method::Trajectories => {
            let tp = plan
                .solver
                .trajectories
                .as_ref()
                .expect("the config layer resolves trajectory settings for this method");
            let mut res = Vec::with_capacity(pp.probes.len());
            for (k, probe) in pp.probes.iter().enumerate() {
                let st = probe_state(plan, &mem.patterns, probe, pp.corruption);
                let Some(pure) = st.as_product() else {
                    return Err(AppError::Input(format!(
                        "{file}: [probes] corruption = \"erase-mixed\" starts from a mixed state, \
                         which the trajectory solver (state vectors) cannot evolve; use \
                         corruption = \"erase-superposition\" or method = \"density-matrix\""
                    )));
                };
                let psi0 = pure.vector(&me.space).map_err(|e| state_err(k, e))?;
                let xi = &mem.patterns[probe.pattern];
                // observables: the overlaps with every pattern, then ⟨ψ|Π|ψ⟩, the probability
                // that a σᶻ measurement of every site finds the probed pattern recalled
                let mask = recalled_mask(&me.space, xi, pp.threshold);
                let observe = |psi: &[cavern_model::C64], out: &mut [f64]| {
                    let sz: Vec<f64> = (0..me.space.n_sites())
                        .map(|i| cavern_observe::state::spin_z(&me.space, psi, i))
                        .collect();
                    for (mu, p) in mem.patterns.iter().enumerate() {
                        out[mu] = overlap(p, &sz);
                    }
                    out[n_p] = psi
                        .iter()
                        .zip(&mask)
                        .filter(|(_, &m)| m)
                        .map(|(z, _)| z.norm_sqr())
                        .sum();
                };
                let topts = TrajectoryOptions {
                    dopri: opts,
                    trajectories: tp.trajectories,
                    seed: tp.seed.wrapping_add(1 + k as u64),
                    keep: 0,
                };
                let r = run_trajectories(me, &psi0, times, &topts, n_p + 1, observe, &|_| {})
                    .map_err(|e| failed(k, e))?;
                let ov = r.mean[..n_p * n_t].to_vec();
                let last = n_p * n_t + n_t - 1;
                let sp = Some((r.mean[last], r.stderr[last]));
                res.push(outcome(
                    times,
                    ov,
                    n_p,
                    probe.pattern,
                    pp.threshold,
                    sp,
                    baseline(mem, pp, k),
                ));
                progress(1);
            }
            (res, tp.trajectories)
        }
    };
    Ok(Some(RecallResult {
        curve: curve(&pp.probes, &outcomes, method == Method::DensityMatrix),
        outcomes,
        method,
        trajectories,
        wall_seconds: start.elapsed().as_secs_f64(),
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn time_to_recall_on_a_constructed_trace() {
        // the overlap crosses 0.8 at t = 1, dips below at t = 2, then stays above from t = 3:
        // the definition (first time after which it stays above) gives t = 3
        let t = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0];
        let m = [0.2, 0.85, 0.7, 0.81, 0.9, 0.95];
        assert_eq!(time_to_recall(&t, &m, 0.8), 3.0);
        // exactly at the threshold is not above it
        assert!(time_to_recall(&t, &[0.2, 0.9, 0.9, 0.9, 0.9, 0.8], 0.8).is_nan());
        // above from the start
        assert_eq!(time_to_recall(&t, &[0.9; 6], 0.8), 0.0);
    }

    #[test]
    fn retrieved_counts_negations_as_their_own_entries() {
        assert_eq!(retrieved(&[0.9, 0.1], 0.8), 0);
        assert_eq!(retrieved(&[0.1, -0.95], 0.8), 3);
        assert_eq!(retrieved(&[0.5, -0.5], 0.8), -1);
    }

    #[test]
    fn subsets_are_exhaustive_or_distinct_draws() {
        assert_eq!(choose(6, 2), 15);
        assert_eq!(choose(30, 15), 155_117_520);
        let all = draw_subsets(4, 2, 10, 1, 0);
        assert_eq!(all.len(), 6);
        assert_eq!(all[0], vec![0, 1]);
        assert_eq!(all[5], vec![2, 3]);
        let some = draw_subsets(10, 3, 5, 7, 2);
        assert_eq!(some.len(), 5);
        for (a, s) in some.iter().enumerate() {
            assert!(s.windows(2).all(|w| w[0] < w[1]) && s[2] < 10);
            assert!(!some[..a].contains(s));
        }
        // reproducible from the seed and stream alone
        assert_eq!(some, draw_subsets(10, 3, 5, 7, 2));
        assert_ne!(some, draw_subsets(10, 3, 5, 8, 2));
        let probes = draw_probes(6, &[0, 1], 2, 100, 3);
        assert_eq!(probes.len(), 2 * (6 + 15));
    }

    #[test]
    fn curve_groups_by_flips() {
        let p = |k: usize| Probe {
            pattern: 0,
            sites: (0..k).collect(),
        };
        let o = |ok: bool, t: f64| ProbeOutcome {
            overlaps: vec![],
            final_overlap: vec![],
            retrieved: -1,
            success: ok,
            time_to_recall: t,
            success_probability: None,
            descent_success: 1.0,
            glauber_success: 0.5,
        };
        let c = curve(
            &[p(1), p(1), p(2), p(1)],
            &[
                o(true, 1.0),
                o(false, f64::NAN),
                o(false, f64::NAN),
                o(true, 3.0),
            ],
            false,
        );
        assert_eq!(c.len(), 2);
        assert_eq!((c[0].flips, c[0].probes), (1, 3));
        assert!((c[0].success - 2.0 / 3.0).abs() < 1e-15);
        assert!((c[0].success_stderr - (2.0f64 / 27.0).sqrt()).abs() < 1e-15);
        assert_eq!(c[0].time_to_recall, 2.0);
        assert!(c[1].time_to_recall.is_nan() && c[1].success == 0.0);
        // exact probabilities (density matrix): their mean, and the standard error of that
        // mean over the probes, sd/√n (common practice)
        let q = |x: f64| ProbeOutcome {
            success_probability: Some((x, 0.0)),
            ..o(x > 0.5, 1.0)
        };
        let c = curve(&[p(1), p(1), p(1)], &[q(0.2), q(0.5), q(0.8)], true);
        assert!((c[0].success - 0.5).abs() < 1e-15);
        assert!((c[0].success_stderr - (0.09f64 / 3.0).sqrt()).abs() < 1e-15);
    }
}
