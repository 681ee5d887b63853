//! Classical Hopfield baselines on a coupling matrix J (see [`cavern_model::memory`]):
//! zero-temperature asynchronous descent and Glauber (heat-bath) dynamics.
//!
//! Both keep the local fields hᵢ = Σⱼ Jᵢⱼ sⱼ up to date incrementally (O(N) per flip, O(1) per
//! rejected update), so a sweep costs O(N) plus O(N) per flip. Site order within each sweep is a
//! fresh random permutation drawn from ChaCha8 seeded with `seed`, so results are reproducible.
//!
//! ```
//! use cavern_model::memory::{learn, LearningRule};
//! use cavern_observe::classical::descend;
//! let p = vec![vec![1i8, -1, 1, -1, 1, 1, -1, -1]];
//! let j = learn(LearningRule::Hebbian, &p).unwrap();
//! let mut start = p[0].clone();
//! start[0] = -start[0]; // one flipped site
//! let out = descend(&j, &start, 7, 100);
//! assert!(out.converged);
//! assert_eq!(out.state, p[0]);
//! ```

use cavern_model::memory::{Couplings, Pattern};
use cavern_model::network::glauber_up;
use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};

/// Result of a classical run.
#[derive(Clone, Debug, PartialEq)]
pub struct ClassicalOutcome {
    /// Final spins (±1).
    pub state: Vec<i8>,
    /// Sweeps performed (a sweep visits every site once).
    pub sweeps: usize,
    /// Total number of spin flips.
    pub flips: usize,
    /// Energy E = −½ Σᵢⱼ Jᵢⱼ sᵢsⱼ of the final state.
    pub energy: f64,
    /// [`descend`]: a full sweep made no flip (a fixed point was reached). [`glauber`]: the
    /// last sweep made no flip.
    pub converged: bool,
}

/// Spins plus their local fields, updated incrementally.
struct Spins<'a> {
    j: &'a Couplings,
    s: Vec<i8>,
    h: Vec<f64>,
    tie: Vec<f64>,
    order: Vec<usize>,
}

impl<'a> Spins<'a> {
    fn new(j: &'a Couplings, start: &[i8]) -> Self {
        assert_eq!(start.len(), j.n(), "start state length differs from N");
        assert!(
            start.iter().all(|&x| x == 1 || x == -1),
            "start state entries must be ±1"
        );
        let n = j.n();
        Self {
            j,
            s: start.to_vec(),
            h: (0..n).map(|i| j.local_field(start, i)).collect(),
            tie: (0..n).map(|i| j.tie_tolerance(i)).collect(),
            order: (0..n).collect(),
        }
    }

    /// Set sᵢ = `to`; returns whether it flipped (then all hₖ are updated).
    fn set(&mut self, i: usize, to: i8) -> bool {
        if self.s[i] == to {
            return false;
        }
        let delta = 2.0 * f64::from(to);
        self.s[i] = to;
        // J is symmetric: column i = row i
        for (h, &jki) in self.h.iter_mut().zip(self.j.row(i)) {
            *h += jki * delta;
        }
        true
    }

    /// A fresh random permutation of the sites (Fisher–Yates).
    fn shuffle(&mut self, rng: &mut ChaCha8Rng) {
        for k in (1..self.order.len()).rev() {
            let r = (rng.next_u64() % (k as u64 + 1)) as usize;
            self.order.swap(k, r);
        }
    }

    fn outcome(self, sweeps: usize, flips: usize, converged: bool) -> ClassicalOutcome {
        let energy = self.j.energy(&self.s);
        ClassicalOutcome {
            state: self.s,
            sweeps,
            flips,
            energy,
            converged,
        }
    }
}

/// `count` independent random patterns of `n` entries, each entry ±1 with probability ½
/// (ChaCha8 seeded by `seed`; reproducible).
pub fn random_patterns(n: usize, count: usize, seed: u64) -> Vec<Pattern> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..count)
        .map(|_| {
            (0..n)
                .map(|_| if rng.next_u64() >> 63 == 1 { 1 } else { -1 })
                .collect()
        })
        .collect()
}

/// Uniform number in [0, 1) from 53 random bits.
fn uniform(rng: &mut ChaCha8Rng) -> f64 {
    (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

/// Zero-temperature asynchronous Hopfield dynamics in a random sequential order (ChaCha8
/// seeded by `seed`), until a full sweep makes no flip or `max_sweeps`. Each visited site takes
/// the sign of its local field; ties (|hᵢ| ≤ 1e-12 Σⱼ|Jᵢⱼ|) keep the current sign. The energy
/// never increases.
///
/// # Panics
/// If `start` does not have N entries of ±1.
pub fn descend(j: &Couplings, start: &[i8], seed: u64, max_sweeps: usize) -> ClassicalOutcome {
    let mut st = Spins::new(j, start);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let (mut sweeps, mut flips) = (0, 0);
    let mut converged = false;
    while sweeps < max_sweeps {
        st.shuffle(&mut rng);
        sweeps += 1;
        let mut changed = 0;
        for k in 0..st.order.len() {
            let i = st.order[k];
            let h = st.h[i];
            if h.abs() > st.tie[i] {
                let to = if h > 0.0 { 1 } else { -1 };
                if st.set(i, to) {
                    changed += 1;
                }
            }
        }
        flips += changed;
        if changed == 0 {
            converged = true;
            break;
        }
    }
    st.outcome(sweeps, flips, converged)
}

/// Glauber (heat-bath) dynamics at temperature `temperature` (same units as J) for `sweeps`
/// sweeps: each visited site is set to +1 with probability w↑(hᵢ) = 1/(1 + e^{−2hᵢ/T}) and to
/// −1 otherwise (Glauber, J. Math. Phys. 4, 294 (1963)); its stationary distribution is the
/// Boltzmann distribution e^{−E/T}/Z. At T = 0 this is [`descend`] except that ties are decided
/// by a fair coin.
///
/// # Panics
/// If `start` does not have N entries of ±1, or `temperature` is negative or not finite.
pub fn glauber(
    j: &Couplings,
    start: &[i8],
    temperature: f64,
    sweeps: usize,
    seed: u64,
) -> ClassicalOutcome {
    assert!(
        temperature.is_finite() && temperature >= 0.0,
        "temperature must be finite and ≥ 0"
    );
    let mut st = Spins::new(j, start);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut flips = 0;
    let mut converged = false;
    for _ in 0..sweeps {
        st.shuffle(&mut rng);
        let mut changed = 0;
        for k in 0..st.order.len() {
            let i = st.order[k];
            let w = glauber_up(st.h[i], temperature, st.tie[i]);
            let to = if uniform(&mut rng) < w { 1 } else { -1 };
            if st.set(i, to) {
                changed += 1;
            }
        }
        flips += changed;
        converged = changed == 0;
    }
    st.outcome(sweeps, flips, converged)
}

#[cfg(test)]
mod tests {
    use super::*;
    use cavern_model::memory::{learn, LearningRule};

    #[test]
    fn incremental_fields_match_direct_sums() {
        let p = vec![vec![1i8, -1, 1, 1, -1, 1], vec![-1i8, -1, 1, -1, 1, 1]];
        let j = learn(LearningRule::Storkey, &p).unwrap();
        let out = glauber(&j, &p[0], 0.7, 13, 3);
        let mut st = Spins::new(&j, &p[0]);
        for (i, &x) in out.state.iter().enumerate() {
            st.set(i, x);
        }
        for i in 0..6 {
            assert!((st.h[i] - j.local_field(&out.state, i)).abs() < 1e-14);
        }
        assert_eq!(out.sweeps, 13);
    }

    #[test]
    fn same_seed_same_result() {
        let p = vec![vec![1i8, -1, 1, 1, -1, 1, -1, -1]];
        let j = learn(LearningRule::Hebbian, &p).unwrap();
        let a = glauber(&j, &[1; 8], 1.0, 20, 11);
        let b = glauber(&j, &[1; 8], 1.0, 20, 11);
        assert_eq!(a, b);
    }
}
