//! Quantum trajectories: the Monte Carlo wave-function unravelling of the master equation
//! (J. Dalibard, Y. Castin & K. Mølmer, Phys. Rev. Lett. 68, 580 (1992); K. Mølmer, Y. Castin &
//! J. Dalibard, J. Opt. Soc. Am. B 10, 524 (1993)).
//!
//! Between jumps |ψ⟩ follows dψ/dt = −i H_eff(t) ψ with H_eff = H − (i/2) Σₖ Lₖ†Lₖ, integrated by
//! the adaptive Dormand–Prince method. The squared norm decays monotonically; a jump happens when
//! it reaches a uniform random threshold (waiting-time method), at a time located on the dense
//! output to within the integrator's tolerance (bisection on ‖ψ(t)‖²), not at a step end. The
//! channel k is drawn with probability ∝ ‖Lₖψ‖², then ψ ← Lₖψ/‖Lₖψ‖ and a new threshold is drawn.
//!
//! Randomness: trajectory k draws from ChaCha8 seeded by the run seed with stream k, so each
//! trajectory's record is the same whatever the thread count or order of execution. Means and
//! standard errors are accumulated in fixed blocks of trajectories combined in block order, so
//! the statistics are bit-identical for any number of threads.

use crate::dopri::{Dopri5, DopriOptions, Rhs, Stats, StepOutcome};
use crate::par::Par;
use crate::EvolveError;
use cavern_model::{Channel, Envelope, MasterEquation, SparseOp};
use num_complex::Complex64 as C64;
use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};
use rayon::prelude::*;

/// One group of H_eff: compressed rows of −i·Hₖ (or the static −iH₀ − ½ΣL†L) and its envelope.
struct Group {
    envelope: Envelope,
    ptr: Vec<usize>,
    col: Vec<usize>,
    val: Vec<C64>,
}

/// dψ/dt = −i H_eff(t) ψ as a right-hand side on state vectors. Cloning is cheap: the operator
/// data are shared.
#[derive(Clone)]
pub struct EffectiveRhs {
    d: usize,
    groups: std::sync::Arc<Vec<Group>>,
    coeff: Vec<f64>,
    par: Par,
}

/// Dimension from which one trajectory's matrix-vector products are split over threads (and
/// trajectories then run one after another).
pub const PARALLEL_STATE_DIM: usize = 1 << 15;

/// Rows per parallel task of the matrix-vector product (fixed: thread-count independent).
const ROWS_PER_TASK: usize = 4096;

impl EffectiveRhs {
    /// Build from a master equation; `par` selects a parallel matrix-vector product for large d.
    pub fn new(me: &MasterEquation, par: Par) -> Self {
        let mi = C64::new(0.0, -1.0);
        let a0 = me.static_generator();
        let group = |envelope: Envelope, op: &SparseOp| {
            let (p, c, v) = op.raw();
            Group {
                envelope,
                ptr: p.to_vec(),
                col: c.to_vec(),
                val: v.to_vec(),
            }
        };
        let mut groups = vec![group(Envelope::Constant, &a0)];
        for t in &me.driven {
            groups.push(group(t.envelope.clone(), &t.op.scaled(mi)));
        }
        Self {
            d: me.space.dim(),
            coeff: vec![1.0; groups.len()],
            groups: std::sync::Arc::new(groups),
            par,
        }
    }

    fn row(&self, r: usize, y: &[C64]) -> C64 {
        let mut acc = C64::new(0.0, 0.0);
        for (g, &c) in self.groups.iter().zip(&self.coeff) {
            if c == 0.0 {
                continue;
            }
            let mut s = C64::new(0.0, 0.0);
            for k in g.ptr[r]..g.ptr[r + 1] {
                s += g.val[k] * y[g.col[k]];
            }
            acc += s * c;
        }
        acc
    }
}

impl Rhs for EffectiveRhs {
    fn len(&self) -> usize {
        self.d
    }
    fn eval(&mut self, t: f64, y: &[C64], dy: &mut [C64]) {
        for (c, g) in self.coeff.iter_mut().zip(self.groups.iter()) {
            *c = g.envelope.value(t);
        }
        if self.par == Par::Rayon && self.d >= PARALLEL_STATE_DIM {
            let me = &*self;
            dy.par_chunks_mut(ROWS_PER_TASK)
                .enumerate()
                .for_each(|(b, o)| {
                    for (i, x) in o.iter_mut().enumerate() {
                        *x = me.row(b * ROWS_PER_TASK + i, y);
                    }
                });
        } else {
            for (r, o) in dy.iter_mut().enumerate() {
                *o = self.row(r, y);
            }
        }
    }
}

/// Settings of a trajectory run.
#[derive(Clone, Debug, PartialEq)]
pub struct TrajectoryOptions {
    /// Integrator settings (tolerances apply to the state-vector components).
    pub dopri: DopriOptions,
    /// Number of trajectories (≥ 1).
    pub trajectories: usize,
    /// Run seed; trajectory k uses stream k of ChaCha8 seeded with it.
    pub seed: u64,
    /// Keep the observable traces of the first `keep` trajectories.
    pub keep: usize,
}

/// One quantum jump.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct JumpRecord {
    /// Trajectory index.
    pub trajectory: u64,
    /// Time of the jump (time unit).
    pub time: f64,
    /// Index into the master equation's `jumps` (the channel).
    pub channel: usize,
}

/// Statistics of a trajectory run.
#[derive(Clone, Debug, PartialEq)]
pub struct TrajectoryResult {
    /// Number of trajectories.
    pub trajectories: usize,
    /// Mean of each observable, `[observable][time]` row-major.
    pub mean: Vec<f64>,
    /// Standard error of the mean, same layout (sample standard deviation / √n).
    pub stderr: Vec<f64>,
    /// Every jump, ordered by trajectory then time.
    pub jumps: Vec<JumpRecord>,
    /// Traces of the first `keep` trajectories, `[trajectory][observable][time]`.
    pub kept: Vec<Vec<f64>>,
    /// Channels of the jump operators (index = `JumpRecord::channel`).
    pub channels: Vec<Channel>,
    /// Work summed over trajectories.
    pub stats: Stats,
}

/// Trajectories per accumulation block (fixed, so sums do not depend on thread count).
const BLOCK: usize = 16;

/// Uniform number in [0, 1) from 53 random bits.
fn uniform(rng: &mut ChaCha8Rng) -> f64 {
    (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

fn norm2(v: &[C64]) -> f64 {
    v.iter().map(|z| z.norm_sqr()).sum()
}

/// Run the trajectories.
///
/// `observe(ψ, out)` writes the `n_obs` observables of a normalised state into `out`.
///
/// # Errors
/// [`EvolveError::Options`] for zero trajectories or unsorted times; integrator errors otherwise
/// (naming the trajectory's time reached).
pub fn run_trajectories<F>(
    me: &MasterEquation,
    psi0: &[C64],
    times: &[f64],
    opts: &TrajectoryOptions,
    n_obs: usize,
    observe: F,
    progress: &(dyn Fn(usize) + Sync),
) -> Result<TrajectoryResult, EvolveError>
where
    F: Fn(&[C64], &mut [f64]) + Sync,
{
    if opts.trajectories == 0 {
        return Err(EvolveError::Options(
            "the number of trajectories must be at least 1".into(),
        ));
    }
    if times.is_empty() || times.windows(2).any(|w| !(w[1] > w[0])) {
        return Err(EvolveError::Options(
            "sample times must be strictly increasing".into(),
        ));
    }
    let n_t = times.len();
    let n_blocks = opts.trajectories.div_ceil(BLOCK);
    // small states: trajectories in parallel, each sequential; large states: one trajectory at a
    // time with parallel matrix-vector products and vector operations
    let large = opts.dopri.par == Par::Rayon && psi0.len() >= PARALLEL_STATE_DIM;
    let inner = if large { Par::Rayon } else { Par::Seq };
    let base = EffectiveRhs::new(me, inner);
    let block = |b: usize| -> Result<BlockOut, EvolveError> {
        let mut out = BlockOut::new(n_obs * n_t);
        for k in b * BLOCK..((b + 1) * BLOCK).min(opts.trajectories) {
            let one = one_trajectory(
                me,
                base.clone(),
                psi0,
                times,
                opts,
                inner,
                k as u64,
                n_obs,
                &observe,
            )?;
            for (i, &x) in one.trace.iter().enumerate() {
                out.sum[i] += x;
                out.sq[i] += x * x;
            }
            if k < opts.keep {
                out.kept.push(one.trace);
            }
            out.jumps.extend(one.jumps);
            out.stats.steps += one.stats.steps;
            out.stats.rejected += one.stats.rejected;
            out.stats.rhs_evals += one.stats.rhs_evals;
            progress(1);
        }
        Ok(out)
    };
    let n = opts.trajectories as f64;
    let mut sum = vec![0.0; n_obs * n_t];
    let mut sq = vec![0.0; n_obs * n_t];
    let mut res = TrajectoryResult {
        trajectories: opts.trajectories,
        mean: Vec::new(),
        stderr: Vec::new(),
        jumps: Vec::new(),
        kept: Vec::new(),
        channels: me.jumps.iter().map(|j| j.channel).collect(),
        stats: Stats::default(),
    };
    // blocks run in waves; each wave is reduced in block order, so memory stays bounded and the
    // sums do not depend on the thread count
    let wave = 4 * rayon::current_num_threads().max(1);
    let mut first = 0;
    while first < n_blocks {
        let last = (first + wave).min(n_blocks);
        let blocks: Vec<Result<BlockOut, EvolveError>> = if opts.dopri.par == Par::Rayon && !large {
            (first..last).into_par_iter().map(block).collect()
        } else {
            (first..last).map(block).collect()
        };
        first = last;
        for b in blocks {
            let b = b?;
            for i in 0..sum.len() {
                sum[i] += b.sum[i];
                sq[i] += b.sq[i];
            }
            res.jumps.extend(b.jumps);
            res.kept.extend(b.kept);
            res.stats.steps += b.stats.steps;
            res.stats.rejected += b.stats.rejected;
            res.stats.rhs_evals += b.stats.rhs_evals;
        }
    }
    res.mean = sum.iter().map(|s| s / n).collect();
    res.stderr = sum
        .iter()
        .zip(&sq)
        .map(|(s, q)| {
            if opts.trajectories < 2 {
                return f64::NAN;
            }
            let m = s / n;
            let var = ((q - n * m * m) / (n - 1.0)).max(0.0);
            (var / n).sqrt()
        })
        .collect();
    Ok(res)
}

struct BlockOut {
    sum: Vec<f64>,
    sq: Vec<f64>,
    kept: Vec<Vec<f64>>,
    jumps: Vec<JumpRecord>,
    stats: Stats,
}

impl BlockOut {
    fn new(n: usize) -> Self {
        Self {
            sum: vec![0.0; n],
            sq: vec![0.0; n],
            kept: Vec::new(),
            jumps: Vec::new(),
            stats: Stats::default(),
        }
    }
}

struct OneTrajectory {
    trace: Vec<f64>,
    jumps: Vec<JumpRecord>,
    stats: Stats,
}

/// Evolve trajectory `k`.
fn one_trajectory<F>(
    me: &MasterEquation,
    mut rhs: EffectiveRhs,
    psi0: &[C64],
    times: &[f64],
    opts: &TrajectoryOptions,
    par: Par,
    k: u64,
    n_obs: usize,
    observe: &F,
) -> Result<OneTrajectory, EvolveError>
where
    F: Fn(&[C64], &mut [f64]),
{
    let d = psi0.len();
    let n_t = times.len();
    let mut rng = ChaCha8Rng::seed_from_u64(opts.seed);
    rng.set_stream(k);
    let dopri = DopriOptions { par, ..opts.dopri };
    let t0 = times[0];
    let mut ode = Dopri5::new(&mut rhs, t0, psi0, dopri)?;
    let mut trace = vec![0.0; n_obs * n_t];
    let mut obs = vec![0.0; n_obs];
    let mut scratch = vec![C64::new(0.0, 0.0); d];
    let mut jumped = vec![C64::new(0.0, 0.0); d];
    let mut jumps = Vec::new();
    let mut weights = vec![0.0; me.jumps.len()];
    let mut threshold = uniform(&mut rng);
    let record = |psi: &[C64], idx: usize, trace: &mut [f64], obs: &mut [f64], tmp: &mut [C64]| {
        let nrm = norm2(psi).sqrt();
        for (t, s) in tmp.iter_mut().zip(psi) {
            *t = s / nrm;
        }
        observe(tmp, obs);
        for (o, &v) in obs.iter().enumerate() {
            trace[o * n_t + idx] = v;
        }
    };
    let mut normalised = vec![C64::new(0.0, 0.0); d];
    record(ode.y(), 0, &mut trace, &mut obs, &mut normalised);
    let mut next = 1;
    let t_end = times[n_t - 1];
    while next < n_t {
        let StepOutcome::Accepted { from, to } = ode.step(&mut rhs, t_end)? else {
            continue;
        };
        let n_to = norm2(ode.y());
        // the step [from, to] either holds no jump, or the first one at t* where ‖ψ‖² = threshold
        let t_stop = if n_to > threshold {
            to
        } else {
            // bisection on the monotone ‖ψ(t)‖² over the dense output
            let (mut lo, mut hi) = (from, to);
            for _ in 0..200 {
                if hi - lo <= 1e-13 * hi.abs().max(1.0) {
                    break;
                }
                let mid = 0.5 * (lo + hi);
                ode.interpolate(mid, &mut scratch);
                if norm2(&scratch) > threshold {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            hi
        };
        while next < n_t && times[next] <= t_stop {
            if times[next] == to {
                record(ode.y(), next, &mut trace, &mut obs, &mut normalised);
            } else {
                ode.interpolate(times[next], &mut scratch);
                record(&scratch, next, &mut trace, &mut obs, &mut normalised);
            }
            next += 1;
        }
        if t_stop < to || n_to <= threshold {
            // jump at t_stop: channel ∝ ‖Lₖψ‖²
            if t_stop == to {
                scratch.copy_from_slice(ode.y());
            } else {
                ode.interpolate(t_stop, &mut scratch);
            }
            for (w, j) in weights.iter_mut().zip(&me.jumps) {
                j.op.apply(&scratch, &mut jumped);
                *w = norm2(&jumped);
            }
            let total: f64 = weights.iter().sum();
            if !(total > 0.0) || !total.is_finite() {
                return Err(EvolveError::NonFinite { t: t_stop });
            }
            let mut u = uniform(&mut rng) * total;
            // the last channel with non-zero weight takes any rounding remainder
            let mut ch = weights.iter().rposition(|w| *w > 0.0).unwrap_or(0);
            for (i, w) in weights.iter().enumerate() {
                if u < *w {
                    ch = i;
                    break;
                }
                u -= w;
            }
            me.jumps[ch].op.apply(&scratch, &mut jumped);
            let nrm = norm2(&jumped).sqrt();
            jumped.iter_mut().for_each(|z| *z /= nrm);
            jumps.push(JumpRecord {
                trajectory: k,
                time: t_stop,
                channel: ch,
            });
            ode.reset(&mut rhs, t_stop, &jumped);
            threshold = uniform(&mut rng);
        }
    }
    Ok(OneTrajectory {
        trace,
        jumps,
        stats: ode.stats(),
    })
}
