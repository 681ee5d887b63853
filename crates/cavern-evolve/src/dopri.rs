//! Adaptive Dormand–Prince 5(4) integrator with dense output, for complex state vectors.
//!
//! Method: J. R. Dormand & P. J. Prince, "A family of embedded Runge–Kutta formulae",
//! J. Comput. Appl. Math. 6, 19 (1980). Step-size control, error norm, initial step and the
//! fourth-order continuous extension follow E. Hairer, S. P. Nørsett & G. Wanner, *Solving Ordinary
//! Differential Equations I*, 2nd ed. (Springer 1993), §II.4–II.6 and their code DOPRI5, with the
//! PI ("stabilised") step-size controller of K. Gustafsson, ACM TOMS 17, 533 (1991) (β = 0.04).
//!
//! Error norm: err = √( (1/n) Σᵢ (|eᵢ| / (atol + rtol·max(|y₀ᵢ|, |y₁ᵢ|)))² ) over the n complex
//! components (modulus of each complex number); a step is accepted when err ≤ 1.

use crate::par::{for_chunks, for_chunks2, sum_ranges, Par};
use crate::EvolveError;
use num_complex::Complex64 as C64;

/// Right-hand side f(t, y) of dy/dt = f(t, y) on complex vectors.
pub trait Rhs {
    /// Number of complex unknowns.
    fn len(&self) -> usize;
    /// True if there are no unknowns.
    fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// Write f(t, y) into `dy` (both of length [`Rhs::len`]). Must not allocate per call.
    fn eval(&mut self, t: f64, y: &[C64], dy: &mut [C64]);
    /// The leading components the integrator has to carry, (m₁, m₂) with m₁ ≤ m₂ ≤ len: the
    /// components from m₂ on follow from the first m₂ (see [`Rhs::complete`]), and in the error
    /// norm each of the components m₁..m₂ stands for two of equal modulus (a Hermitian matrix
    /// stored by its lower half: m₁ diagonal, m₂ − m₁ below the diagonal). `eval` then needs to
    /// write only the first m₂ components of `dy`. Default: all components, each once.
    fn carried(&self) -> (usize, usize) {
        (self.len(), self.len())
    }
    /// Fill components m₂.. of `y` from the first m₂ (see [`Rhs::carried`]). Default: nothing.
    fn complete(&self, y: &mut [C64]) {
        let _ = y;
    }
}

/// Numerical options of the integrator (physical parameters live in the model).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DopriOptions {
    /// Relative tolerance (default 1e-6).
    pub rtol: f64,
    /// Absolute tolerance, in the units of the state's components (default 1e-9).
    pub atol: f64,
    /// Largest allowed step, in the time unit (default: unlimited).
    pub h_max: f64,
    /// First trial step; `None` chooses it automatically (Hairer–Nørsett–Wanner §II.4).
    pub h_init: Option<f64>,
    /// Give up after this many step attempts (default 10⁸).
    pub max_attempts: u64,
    /// Parallelism of the vector operations.
    pub par: Par,
}

impl Default for DopriOptions {
    fn default() -> Self {
        Self {
            rtol: 1e-6,
            atol: 1e-9,
            h_max: f64::INFINITY,
            h_init: None,
            max_attempts: 100_000_000,
            par: Par::Rayon,
        }
    }
}

/// Counters of the work done.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Stats {
    /// Accepted steps.
    pub steps: u64,
    /// Rejected step attempts.
    pub rejected: u64,
    /// Right-hand-side evaluations.
    pub rhs_evals: u64,
}

/// What one call of [`Dopri5::step`] did.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum StepOutcome {
    /// A step from `from` to `to` was accepted; dense output is valid on [from, to].
    Accepted {
        /// Start of the step.
        from: f64,
        /// End of the step (the new current time).
        to: f64,
    },
    /// The attempt was rejected; the step size was reduced to `next_h`.
    Rejected {
        /// Step size of the next attempt.
        next_h: f64,
    },
}

// Butcher tableau of DOPRI5 (Dormand & Prince 1980; Hairer–Nørsett–Wanner Table II.5.2)
const C2: f64 = 1.0 / 5.0;
const C3: f64 = 3.0 / 10.0;
const C4: f64 = 4.0 / 5.0;
const C5: f64 = 8.0 / 9.0;
const A21: f64 = 1.0 / 5.0;
const A31: f64 = 3.0 / 40.0;
const A32: f64 = 9.0 / 40.0;
const A41: f64 = 44.0 / 45.0;
const A42: f64 = -56.0 / 15.0;
const A43: f64 = 32.0 / 9.0;
const A51: f64 = 19372.0 / 6561.0;
const A52: f64 = -25360.0 / 2187.0;
const A53: f64 = 64448.0 / 6561.0;
const A54: f64 = -212.0 / 729.0;
const A61: f64 = 9017.0 / 3168.0;
const A62: f64 = -355.0 / 33.0;
const A63: f64 = 46732.0 / 5247.0;
const A64: f64 = 49.0 / 176.0;
const A65: f64 = -5103.0 / 18656.0;
const A71: f64 = 35.0 / 384.0;
const A73: f64 = 500.0 / 1113.0;
const A74: f64 = 125.0 / 192.0;
const A75: f64 = -2187.0 / 6784.0;
const A76: f64 = 11.0 / 84.0;
// error coefficients b − b̂
const E1: f64 = 71.0 / 57600.0;
const E3: f64 = -71.0 / 16695.0;
const E4: f64 = 71.0 / 1920.0;
const E5: f64 = -17253.0 / 339200.0;
const E6: f64 = 22.0 / 525.0;
const E7: f64 = -1.0 / 40.0;
// dense output (Hairer's DOPRI5, CONTD5)
const D1: f64 = -12715105075.0 / 11282082432.0;
const D3: f64 = 87487479700.0 / 32700410799.0;
const D4: f64 = -10690763975.0 / 1880347072.0;
const D5: f64 = 701980252875.0 / 199316789632.0;
const D6: f64 = -1453857185.0 / 822651844.0;
const D7: f64 = 69997945.0 / 29380423.0;

const SAFE: f64 = 0.9;
const BETA: f64 = 0.04;
const FAC_MIN: f64 = 0.2; // new h ≥ 0.2 h
const FAC_MAX: f64 = 10.0; // new h ≤ 10 h

/// Bytes of workspace [`Dopri5`] allocates for `n` complex unknowns (nine vectors).
pub fn dopri_workspace_bytes(n: usize) -> usize {
    9 * n * std::mem::size_of::<C64>()
}

/// The integrator state: current (t, y), step size, stages and counters.
pub struct Dopri5 {
    opts: DopriOptions,
    t: f64,
    h: f64,
    t_prev: f64,
    h_prev: f64,
    y: Vec<C64>,
    ytmp: Vec<C64>,
    k: [Vec<C64>; 7],
    facold: f64,
    last_rejected: bool,
    bad_values: u32,
    partials: Vec<f64>,
    /// [`Rhs::carried`] of the right-hand side.
    carried: (usize, usize),
    stats: Stats,
}

impl Dopri5 {
    /// Start at (t0, y0): evaluates f(t0, y0) and picks the first step.
    ///
    /// # Errors
    /// [`EvolveError::NonFinite`] if y0 or f(t0, y0) has NaN/Inf; [`EvolveError::Options`] for
    /// tolerances that are not positive and finite.
    pub fn new<R: Rhs>(
        rhs: &mut R,
        t0: f64,
        y0: &[C64],
        opts: DopriOptions,
    ) -> Result<Self, EvolveError> {
        if !(opts.rtol > 0.0 && opts.rtol.is_finite() && opts.atol > 0.0 && opts.atol.is_finite()) {
            return Err(EvolveError::Options(format!(
                "tolerances must be positive and finite (rtol = {}, atol = {})",
                opts.rtol, opts.atol
            )));
        }
        if !(opts.h_max > 0.0) {
            return Err(EvolveError::Options(format!(
                "h_max must be > 0 (got {})",
                opts.h_max
            )));
        }
        let n = rhs.len();
        assert_eq!(y0.len(), n, "initial state has the wrong length");
        let zero = C64::new(0.0, 0.0);
        let mut s = Self {
            opts,
            t: t0,
            h: 0.0,
            t_prev: t0,
            h_prev: 0.0,
            y: y0.to_vec(),
            ytmp: vec![zero; n],
            k: std::array::from_fn(|_| vec![zero; n]),
            facold: 1e-4,
            last_rejected: false,
            bad_values: 0,
            partials: Vec::new(),
            carried: rhs.carried(),
            stats: Stats::default(),
        };
        if s.y.iter().any(|v| !v.re.is_finite() || !v.im.is_finite()) {
            return Err(EvolveError::NonFinite { t: t0 });
        }
        rhs.eval(t0, &s.y, &mut s.k[0]);
        s.stats.rhs_evals += 1;
        if s.k[0]
            .iter()
            .any(|v| !v.re.is_finite() || !v.im.is_finite())
        {
            return Err(EvolveError::NonFinite { t: t0 });
        }
        s.h = match opts.h_init {
            Some(h) if h > 0.0 => h.min(opts.h_max),
            _ => s.initial_step(rhs),
        };
        Ok(s)
    }

    /// Σ f over all n components, from the carried ones: f(lo, hi) sums components lo..hi, and
    /// those past m₁ count twice (see [`Rhs::carried`]).
    fn carried_sum<F>(par: Par, carried: (usize, usize), partials: &mut Vec<f64>, f: F) -> f64
    where
        F: Fn(usize, usize) -> f64 + Sync + Send,
    {
        let (m1, m2) = carried;
        let once = sum_ranges(par, m1, partials, &f);
        if m2 == m1 {
            return once;
        }
        let twice = sum_ranges(
            par,
            m2 - m1,
            partials,
            #[inline(always)]
            |lo, hi| f(m1 + lo, m1 + hi),
        );
        once + 2.0 * twice
    }

    /// Weighted RMS norm of `v` with weights atol + rtol·|y|.
    fn weighted_norm(&mut self, which: usize) -> f64 {
        let (atol, rtol, n) = (self.opts.atol, self.opts.rtol, self.y.len());
        let (y, v) = (&self.y, &self.k[which]);
        let s = Self::carried_sum(self.opts.par, self.carried, &mut self.partials, |lo, hi| {
            (lo..hi)
                .map(|i| (v[i].norm() / (atol + rtol * y[i].norm())).powi(2))
                .sum()
        });
        (s / n.max(1) as f64).sqrt()
    }

    fn initial_step<R: Rhs>(&mut self, rhs: &mut R) -> f64 {
        // Hairer–Nørsett–Wanner §II.4 ("Starting step size"), as in DOPRI5's HINIT
        let n = self.y.len();
        let dnf = self.weighted_norm(0);
        let (atol, rtol) = (self.opts.atol, self.opts.rtol);
        let dny = {
            let y = &self.y;
            let s = Self::carried_sum(self.opts.par, self.carried, &mut self.partials, |lo, hi| {
                (lo..hi)
                    .map(|i| (y[i].norm() / (atol + rtol * y[i].norm())).powi(2))
                    .sum()
            });
            (s / n.max(1) as f64).sqrt()
        };
        let mut h = if dnf <= 1e-10 || dny <= 1e-10 {
            1e-6
        } else {
            0.01 * dny / dnf
        };
        h = h.min(self.opts.h_max);
        {
            let (y, k0) = (&self.y, &self.k[0]);
            for_chunks(self.opts.par, &mut self.ytmp[..self.carried.1], |lo, o| {
                for (j, x) in o.iter_mut().enumerate() {
                    *x = y[lo + j] + k0[lo + j] * h;
                }
            });
        }
        let [k0, k1, ..] = &mut self.k;
        rhs.complete(&mut self.ytmp);
        rhs.eval(self.t + h, &self.ytmp, k1);
        self.stats.rhs_evals += 1;
        let (y, k0, k1) = (&self.y, &*k0, &*k1);
        let s = Self::carried_sum(self.opts.par, self.carried, &mut self.partials, |lo, hi| {
            (lo..hi)
                .map(|i| ((k1[i] - k0[i]).norm() / (atol + rtol * y[i].norm())).powi(2))
                .sum()
        });
        let der2 = (s / n.max(1) as f64).sqrt() / h;
        let der12 = der2.max(dnf);
        let h1 = if der12 <= 1e-15 {
            (h * 1e-3).max(1e-6)
        } else {
            (0.01 / der12).powf(0.2)
        };
        (100.0 * h).min(h1).min(self.opts.h_max)
    }

    /// Current time.
    pub fn t(&self) -> f64 {
        self.t
    }

    /// Current state y(t).
    pub fn y(&self) -> &[C64] {
        &self.y
    }

    /// Re-evaluate f at the current state (keeps the step size).
    fn restart<R: Rhs>(&mut self, rhs: &mut R) {
        rhs.eval(self.t, &self.y, &mut self.k[0]);
        self.stats.rhs_evals += 1;
        self.last_rejected = false;
    }

    /// Continue from a new point (t, y), e.g. after a quantum jump: copies `y`, re-evaluates f and
    /// keeps the current step size. Dense output is invalid until the next accepted step.
    ///
    /// # Panics
    /// If `y` has the wrong length.
    pub fn reset<R: Rhs>(&mut self, rhs: &mut R, t: f64, y: &[C64]) {
        self.y.copy_from_slice(y);
        self.t = t;
        self.restart(rhs);
    }

    /// Step size of the next attempt.
    pub fn h(&self) -> f64 {
        self.h
    }

    /// Work counters so far.
    pub fn stats(&self) -> Stats {
        self.stats
    }

    /// Attempt one step, never going past `t_stop`.
    ///
    /// # Errors
    /// [`EvolveError::NonFinite`] when the right-hand side keeps producing NaN/Inf as the step
    /// shrinks; [`EvolveError::StepUnderflow`] when the step falls below the resolution of t;
    /// [`EvolveError::TooManySteps`] past `max_attempts`.
    pub fn step<R: Rhs>(&mut self, rhs: &mut R, t_stop: f64) -> Result<StepOutcome, EvolveError> {
        let attempts = self.stats.steps + self.stats.rejected;
        if attempts >= self.opts.max_attempts {
            return Err(EvolveError::TooManySteps {
                t: self.t,
                attempts,
            });
        }
        let mut h = self.h.min(self.opts.h_max);
        let remaining = t_stop - self.t;
        if remaining <= 0.0 {
            return Ok(StepOutcome::Accepted {
                from: self.t,
                to: self.t,
            });
        }
        // land exactly on t_stop when close (avoid a sliver step)
        if h >= remaining || 1.01 * h >= remaining {
            h = remaining;
        }
        if h <= 10.0 * f64::EPSILON * self.t.abs().max(remaining) {
            if self.bad_values > 0 {
                // the step collapsed because the right-hand side keeps returning NaN/Inf
                return Err(EvolveError::NonFinite { t: self.t });
            }
            return Err(EvolveError::StepUnderflow { t: self.t, h });
        }
        let t = self.t;
        let par = self.opts.par;
        // stages 2..7; stage inputs go to ytmp
        self.stage(par, h, &[(0, A21)]);
        self.eval_stage(rhs, t + C2 * h, 1);
        self.stage(par, h, &[(0, A31), (1, A32)]);
        self.eval_stage(rhs, t + C3 * h, 2);
        self.stage(par, h, &[(0, A41), (1, A42), (2, A43)]);
        self.eval_stage(rhs, t + C4 * h, 3);
        self.stage(par, h, &[(0, A51), (1, A52), (2, A53), (3, A54)]);
        self.eval_stage(rhs, t + C5 * h, 4);
        self.stage(par, h, &[(0, A61), (1, A62), (2, A63), (3, A64), (4, A65)]);
        self.eval_stage(rhs, t + h, 5);
        self.stage_last(par, h);
        self.eval_stage(rhs, t + h, 6);
        let err = self.error_norm(h);

        let expo1 = 0.2 - BETA * 0.75;
        if !err.is_finite() {
            // NaN/Inf in a stage: shrink hard; give up after repeated failures
            self.bad_values += 1;
            self.stats.rejected += 1;
            if self.bad_values > 12 {
                return Err(EvolveError::NonFinite { t: self.t });
            }
            self.h = h * FAC_MIN;
            self.last_rejected = true;
            return Ok(StepOutcome::Rejected { next_h: self.h });
        }
        self.bad_values = 0;
        let fac11 = err.powf(expo1);
        if err <= 1.0 {
            let fac = (fac11 / self.facold.powf(BETA) / SAFE).clamp(1.0 / FAC_MAX, 1.0 / FAC_MIN);
            let mut h_new = h / fac;
            self.facold = err.max(1e-4);
            if self.last_rejected {
                h_new = h_new.min(h);
            }
            self.last_rejected = false;
            self.stats.steps += 1;
            // accept: ytmp holds y(t+h), k[6] = f(t+h, y(t+h)) (FSAL)
            std::mem::swap(&mut self.y, &mut self.ytmp);
            self.k.swap(0, 6);
            self.t_prev = t;
            self.h_prev = h;
            self.t = if h == remaining { t_stop } else { t + h };
            self.h = h_new.min(self.opts.h_max);
            Ok(StepOutcome::Accepted {
                from: t,
                to: self.t,
            })
        } else {
            self.h = h / (1.0 / FAC_MIN).min(fac11 / SAFE);
            self.last_rejected = true;
            self.stats.rejected += 1;
            Ok(StepOutcome::Rejected { next_h: self.h })
        }
    }

    fn stage(&mut self, par: Par, h: f64, coef: &[(usize, f64)]) {
        // one fused pass: ytmp = y + h Σⱼ aⱼ kⱼ (one to five stages), specialised on the count so
        // that the inner loop is unrolled and free of bounds checks
        match coef.len() {
            1 => self.stage_n::<1>(par, h, coef),
            2 => self.stage_n::<2>(par, h, coef),
            3 => self.stage_n::<3>(par, h, coef),
            4 => self.stage_n::<4>(par, h, coef),
            5 => self.stage_n::<5>(par, h, coef),
            m => unreachable!("DOPRI5 stages combine at most five vectors, not {m}"),
        }
    }

    fn stage_n<const M: usize>(&mut self, par: Par, h: f64, coef: &[(usize, f64)]) {
        let (y, k) = (&self.y, &self.k);
        let ks: [&[C64]; M] = std::array::from_fn(|m| &k[coef[m].0][..]);
        let ha: [f64; M] = std::array::from_fn(|m| h * coef[m].1);
        for_chunks(
            par,
            &mut self.ytmp[..self.carried.1],
            #[inline(always)]
            |lo, o| {
                let n = o.len();
                let y = &y[lo..lo + n];
                let ks: [&[C64]; M] = std::array::from_fn(|q| &ks[q][lo..lo + n]);
                for i in 0..n {
                    let mut acc = y[i];
                    for q in 0..M {
                        acc += ks[q][i] * ha[q];
                    }
                    o[i] = acc;
                }
            },
        );
    }

    /// Stage 7 input y₁ = y + h Σ a₇ⱼ kⱼ, and in the same pass the part of the error estimate that
    /// does not need k₇: E₁k₁ + E₃k₃ + … + E₆k₆ (same k's) into `k[1]`, which no later use needs
    /// (stage 7 and the dense output skip k₂). The error norm then reads four vectors, not eight.
    fn stage_last(&mut self, par: Par, h: f64) {
        let y = &self.y;
        let [k0, k1, k2, k3, k4, k5, _] = &mut self.k;
        let (k0, k2, k3, k4, k5) = (&*k0, &*k2, &*k3, &*k4, &*k5);
        let ha = [h * A71, h * A73, h * A74, h * A75, h * A76];
        let m = self.carried.1;
        for_chunks2(
            par,
            &mut self.ytmp[..m],
            &mut k1[..m],
            #[inline(always)]
            |lo, o, e| {
                let n = o.len();
                let y = &y[lo..lo + n];
                let (k0, k2, k3) = (&k0[lo..lo + n], &k2[lo..lo + n], &k3[lo..lo + n]);
                let (k4, k5) = (&k4[lo..lo + n], &k5[lo..lo + n]);
                for i in 0..n {
                    o[i] = y[i]
                        + k0[i] * ha[0]
                        + k2[i] * ha[1]
                        + k3[i] * ha[2]
                        + k4[i] * ha[3]
                        + k5[i] * ha[4];
                    e[i] = k0[i] * E1 + k2[i] * E3 + k3[i] * E4 + k4[i] * E5 + k5[i] * E6;
                }
            },
        );
    }

    fn eval_stage<R: Rhs>(&mut self, rhs: &mut R, t: f64, into: usize) {
        rhs.complete(&mut self.ytmp);
        rhs.eval(t, &self.ytmp, &mut self.k[into]);
        self.stats.rhs_evals += 1;
    }

    fn error_norm(&mut self, h: f64) -> f64 {
        let (atol, rtol, n) = (self.opts.atol, self.opts.rtol, self.y.len());
        let (y, y1, k) = (&self.y, &self.ytmp, &self.k);
        let s = Self::carried_sum(
            self.opts.par,
            self.carried,
            &mut self.partials,
            #[inline(always)]
            |lo, hi| {
                let (y, y1) = (&y[lo..hi], &y1[lo..hi]);
                let (e5, k6) = (&k[1][lo..hi], &k[6][lo..hi]);
                let mut acc = 0.0;
                for i in 0..hi - lo {
                    // k[1] holds E₁k₁ + E₃k₃ + E₄k₄ + E₅k₅ + E₆k₆ (see `stage_last`)
                    let e = (e5[i] + k6[i] * E7) * h;
                    // |e|²/sk² without hypot: sk = atol + rtol·max(|y₀|, |y₁|)
                    let sk = atol + rtol * y[i].norm_sqr().max(y1[i].norm_sqr()).sqrt();
                    acc += e.norm_sqr() / (sk * sk);
                }
                acc
            },
        );
        (s / n.max(1) as f64).sqrt()
    }

    /// Dense output: write y(t) into `out` for t in the last accepted step [from, to]
    /// (fourth-order continuous extension; exact at both ends). Valid until the next
    /// [`Dopri5::step`]. Only the carried components are written ([`Rhs::carried`]); call
    /// [`Rhs::complete`] on `out` for the rest.
    ///
    /// # Panics
    /// If no step has been accepted yet or `out` has the wrong length.
    pub fn interpolate(&self, t: f64, out: &mut [C64]) {
        assert!(self.stats.steps > 0, "interpolate() needs an accepted step");
        assert_eq!(out.len(), self.y.len());
        let h = self.h_prev;
        let theta = ((t - self.t_prev) / h).clamp(0.0, 1.0);
        let theta1 = 1.0 - theta;
        // after acceptance: y0 = ytmp, y1 = y, old k1 = k[6], new f(y1) = k[0]
        let (y0, y1, k) = (&self.ytmp, &self.y, &self.k);
        for_chunks(
            self.opts.par,
            &mut out[..self.carried.1],
            #[inline(always)]
            |lo, o| {
                let n = o.len();
                let (y0, y1) = (&y0[lo..lo + n], &y1[lo..lo + n]);
                let (k0, k2, k3) = (&k[0][lo..lo + n], &k[2][lo..lo + n], &k[3][lo..lo + n]);
                let (k4, k5, k6) = (&k[4][lo..lo + n], &k[5][lo..lo + n], &k[6][lo..lo + n]);
                for i in 0..n {
                    let k1 = k6[i];
                    let k7 = k0[i];
                    let ydiff = y1[i] - y0[i];
                    let bspl = k1 * h - ydiff;
                    let r4 = ydiff - k7 * h - bspl;
                    let r5 =
                        (k1 * D1 + k2[i] * D3 + k3[i] * D4 + k4[i] * D5 + k5[i] * D6 + k7 * D7) * h;
                    o[i] = y0[i] + (ydiff + (bspl + (r4 + r5 * theta1) * theta) * theta1) * theta;
                }
            },
        );
    }
}

/// Integrate from `t0` and call `observe(index, t, y(t), stats)` at every requested time (dense
/// output; steps are not shortened to hit them). `times` must be non-decreasing and ≥ `t0`.
/// `scratch` (length n) receives interpolated states.
///
/// # Errors
/// As [`Dopri5::step`], and [`EvolveError::Options`] for unsorted or early sample times.
pub fn integrate<R: Rhs, F>(
    rhs: &mut R,
    t0: f64,
    y0: &[C64],
    times: &[f64],
    opts: DopriOptions,
    scratch: &mut [C64],
    mut observe: F,
) -> Result<Stats, EvolveError>
where
    F: FnMut(usize, f64, &[C64], &Stats),
{
    if times.windows(2).any(|w| !(w[1] >= w[0])) || times.first().is_some_and(|&t| !(t >= t0)) {
        return Err(EvolveError::Options(
            "sample times must be non-decreasing and ≥ the start time".into(),
        ));
    }
    let mut ode = Dopri5::new(rhs, t0, y0, opts)?;
    let Some(&t_end) = times.last() else {
        return Ok(ode.stats());
    };
    let mut next = 0;
    while next < times.len() && times[next] == t0 {
        observe(next, t0, ode.y(), &ode.stats());
        next += 1;
    }
    while next < times.len() {
        if let StepOutcome::Accepted { to, .. } = ode.step(rhs, t_end)? {
            while next < times.len() && times[next] <= to {
                let ts = times[next];
                if ts == to {
                    observe(next, ts, ode.y(), &ode.stats());
                } else {
                    ode.interpolate(ts, scratch);
                    rhs.complete(scratch);
                    observe(next, ts, scratch, &ode.stats());
                }
                next += 1;
            }
        }
    }
    Ok(ode.stats())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// y' = f(t, y) given by a closure, on one complex unknown.
    struct Scalar<F: FnMut(f64, C64) -> C64>(F);

    impl<F: FnMut(f64, C64) -> C64> Rhs for Scalar<F> {
        fn len(&self) -> usize {
            1
        }
        fn eval(&mut self, t: f64, y: &[C64], dy: &mut [C64]) {
            dy[0] = (self.0)(t, y[0]);
        }
    }

    fn run<F: FnMut(f64, C64) -> C64>(f: F, t_end: f64) -> Result<Stats, EvolveError> {
        let mut rhs = Scalar(f);
        let mut scratch = [C64::new(0.0, 0.0)];
        let opts = DopriOptions {
            par: Par::Seq,
            ..Default::default()
        };
        integrate(
            &mut rhs,
            0.0,
            &[C64::new(1.0, 0.0)],
            &[0.0, t_end],
            opts,
            &mut scratch,
            |_, _, _, _| {},
        )
    }

    #[test]
    fn nan_is_an_error_naming_the_time_reached() {
        // the right-hand side turns NaN for t > 0.5: the integrator must stop near there
        let err = run(
            |t, y| if t > 0.5 { C64::new(f64::NAN, 0.0) } else { -y },
            2.0,
        )
        .unwrap_err();
        match err {
            EvolveError::NonFinite { t } => assert!((0.0..=0.5).contains(&t) && t > 0.3, "t = {t}"),
            other => panic!("expected NonFinite, got {other:?}"),
        }
    }

    #[test]
    fn blow_up_is_a_step_underflow_near_the_singularity() {
        // y' = y², y(0) = 1 has the solution 1/(1 − t), singular at t = 1 (textbook finite-time
        // blow-up, e.g. Hairer–Nørsett–Wanner §I.7): the step size must collapse just before t = 1
        let err = run(|_, y| y * y, 2.0).unwrap_err();
        let t = match err {
            EvolveError::StepUnderflow { t, .. } | EvolveError::NonFinite { t } => t,
            other => panic!("expected a step-size underflow, got {other:?}"),
        };
        // an explicit method may accept a step that just straddles the pole before the values
        // overflow, so the time reached is near 1 rather than strictly below it
        assert!((t - 1.0).abs() < 1e-3, "t = {t}");
        assert!(err.to_string().contains("t = "), "{err}");
    }

    #[test]
    fn invalid_options_are_refused() {
        let mut rhs = Scalar(|_, y| -y);
        let opts = DopriOptions {
            rtol: 0.0,
            ..Default::default()
        };
        assert!(matches!(
            Dopri5::new(&mut rhs, 0.0, &[C64::new(1.0, 0.0)], opts),
            Err(EvolveError::Options(_))
        ));
    }
}
