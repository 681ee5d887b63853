//! Time evolution of the Lindblad master equation.
//!
//! - [`dopri`]: adaptive Dormand–Prince 5(4) with dense output on complex vectors.
//! - [`lindblad`]: the matrix-free right-hand side on a dense density matrix.
//! - [`evolve_density`]: both together, calling back at the requested sample times.
//! - [`trajectory`]: quantum trajectories (Monte Carlo wave functions) of the same model.
//! - [`steady`]: steady states (sparse LU, GMRES, evolution) and relaxation rates of the model.
//!
//! ```
//! use cavern_model::{Network, SiteParams, ProductState, SpinInit};
//! use cavern_evolve::{evolve_density, DopriOptions};
//! // one decaying two-level site starting in |e⟩: Pₑ(t) = e^{−γt}
//! let mut net = Network::empty();
//! net.sites.push(SiteParams { decay: 1.0, ..Default::default() });
//! let me = net.build().unwrap();
//! let rho0 = ProductState { spins: vec![SpinInit::from_sign(1)], modes: vec![] }
//!     .density(&me.space).unwrap();
//! let mut pe = Vec::new();
//! evolve_density(&me, &rho0, &[0.0, 1.0], DopriOptions { rtol: 1e-9, atol: 1e-12, ..Default::default() },
//!     |_, _, rho, _| pe.push(rho[3].re)).unwrap();
//! assert!((pe[1] - (-1.0f64).exp()).abs() < 1e-7);
//! ```

pub mod dopri;
pub mod lindblad;
pub mod par;
pub mod steady;
pub mod trajectory;

pub use dopri::{integrate, Dopri5, DopriOptions, Rhs, Stats, StepOutcome};
pub use lindblad::LindbladRhs;
pub use par::Par;
pub use steady::{
    generator_scale, liouvillian, relaxation, steady_state, steady_state_direct,
    steady_state_evolve, steady_state_gmres, DirectOptions, EvolutionOptions, FactorStats,
    GmresOptions, Relaxation, RelaxationOptions, SteadyError, SteadyMethod, SteadyOptions,
    SteadySolution,
};
pub use trajectory::{run_trajectories, JumpRecord, TrajectoryOptions, TrajectoryResult};

use cavern_model::MasterEquation;
use num_complex::Complex64 as C64;

/// Errors of the time evolution. Each names the time reached.
#[derive(Debug, thiserror::Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum EvolveError {
    /// NaN or Inf appeared in the state or its derivative.
    #[error("the solution became NaN or infinite at t = {t}")]
    NonFinite {
        /// Time reached.
        t: f64,
    },
    /// The step size fell below what the time resolution allows.
    #[error("step size underflow at t = {t} (step {h:e}); the problem may be too stiff for the tolerances")]
    StepUnderflow {
        /// Time reached.
        t: f64,
        /// Step size tried.
        h: f64,
    },
    /// The attempt limit was reached.
    #[error("gave up after {attempts} step attempts at t = {t}")]
    TooManySteps {
        /// Time reached.
        t: f64,
        /// Attempts made.
        attempts: u64,
    },
    /// Invalid numerical options.
    #[error("invalid solver options: {0}")]
    Options(String),
    /// The model uses something this solver does not support.
    #[error("unsupported model: {0}")]
    Unsupported(String),
}

/// Bytes the density-matrix evolution allocates for Hilbert-space dimension `d`: the integrator's
/// nine d×d vectors, the initial state in both layouts, one interpolation buffer and one
/// row-major sample (thirteen d×d complex matrices in all; the right-hand side works tile by tile
/// with a w×w scratch per thread).
pub fn density_workspace_bytes(d: usize) -> u128 {
    13u128 * (d as u128) * (d as u128) * std::mem::size_of::<C64>() as u128
}

/// Evolve ρ from `rho0` at t₀ = `times[0]` (or 0 if `times` is empty),
/// calling `observe(index, t, ρ(t), stats)` at every sample time.
///
/// # Errors
/// [`EvolveError`] from the integrator or the model.
pub fn evolve_density<F>(
    me: &MasterEquation,
    rho0: &[C64],
    times: &[f64],
    opts: DopriOptions,
    mut observe: F,
) -> Result<Stats, EvolveError>
where
    F: FnMut(usize, f64, &[C64], &Stats),
{
    // ρ and every stage are Hermitian: the integrator carries only the lower tiles
    let mut rhs = LindbladRhs::new(me, opts.par)?.lower_half_only();
    let t0 = times.first().copied().unwrap_or(0.0);
    // the kernel works on a tiled copy of ρ; samples are handed out row-major
    let mut y0 = vec![C64::new(0.0, 0.0); rho0.len()];
    rhs.to_panels(rho0, &mut y0);
    let mut scratch = vec![C64::new(0.0, 0.0); rho0.len()];
    let mut sample = vec![C64::new(0.0, 0.0); rho0.len()];
    let d = me.space.dim();
    integrate(
        &mut rhs,
        t0,
        &y0,
        times,
        opts,
        &mut scratch,
        |k, t, y, st| {
            lindblad::from_panels(d, y, &mut sample);
            observe(k, t, &sample, st)
        },
    )
}
