//! Steady states and relaxation rates of the Lindblad master equation.
//!
//! The steady state ρₛₛ solves 𝓛ρ = 0 with Tr ρ = 1, where
//! 𝓛ρ = −i[H, ρ] + Σₖ (LₖρLₖ† − ½{Lₖ†Lₖ, ρ}). Three solvers are offered, and a driver that
//! chooses between them:
//!
//! - [`steady_state_direct`]: the d²×d² sparse matrix of 𝓛 with one equation replaced by the
//!   trace condition, in its real form on Hermitian matrices, factorised by a sparse LU
//!   ([`LuStrategy`]: a multifrontal LU on the symmetrised pattern by default, faer's
//!   partial-pivoting supernodal LU as checked fallback). Exact up to rounding; memory grows with
//!   the fill-in of the factors, which the symbolic analysis predicts before the numeric
//!   factorisation ([`FactorStats`], [`DirectOptions::max_factor_bytes`]).
//! - [`steady_state_gmres`]: restarted GMRES(m) (Y. Saad & M. H. Schultz, SIAM J. Sci. Stat.
//!   Comput. 7, 856 (1986)), matrix-free: 𝓛 is applied by [`LindbladRhs`], never as a matrix.
//!   Right-preconditioned by default with the exact inverse of the no-jump part Kρ + ρK†
//!   ([`GmresPreconditioner`]). Memory: about m + 5 d×d complex matrices (Krylov basis, iterate,
//!   work vectors), plus 6 for the no-jump preconditioner (1 for the
//!   diagonal one).
//! - [`steady_state_evolve`]: the fallback: Dormand–Prince time evolution until ρ stops changing.
//! - [`steady_state`]: direct when d² is small enough, otherwise GMRES, then evolution.
//!
//! [`relaxation`] finds the eigenvalues of 𝓛 closest to zero (shift-and-invert block Arnoldi),
//! the spectral gap, and whether the steady state is unique.
//!
//! **Non-unique steady states: what each method detects.**
//!
//! | method | detects a non-unique steady state? |
//! |---|---|
//! | [`steady_state_direct`] | yes: the trace-bordered matrix is then singular, seen as a reciprocal condition estimate below [`DirectOptions::min_rcond`] ([`SteadyError::Singular`]); it cannot tell the dimension of the zero eigenspace, and a unique but extremely ill-conditioned problem (gap/‖𝓛‖ below about 1e-13) is reported the same way |
//! | [`relaxation`] | yes, with the dimension (number of zero eigenvalues), up to its basis limit ([`Relaxation::zero_dimension_is_lower_bound`]) |
//! | [`steady_state_gmres`] | no: GMRES on a singular but consistent system converges to *a* solution (which one depends on the start) |
//! | [`steady_state_evolve`] | no: the evolution converges to the attractor of its initial state |
//!
//! The application (`cavern run`) therefore warns when a GMRES or evolution result was not
//! checked by the relaxation spectrum.
//!
//! **Time-dependent models.** A steady state needs a time-independent generator. Every function
//! here takes an explicit time `t_eval` at which the envelopes fₖ(t) of the driven terms are
//! *frozen*: the model solved is H₀ + Σₖ fₖ(t_eval) Hₖ (see [`frozen`]). For a model without
//! driven terms `t_eval` has no effect (it must still be finite).
//!
//! **Layout.** Density matrices are row-major d×d (`rho[r * d + c]` = ⟨r|ρ|c⟩), as everywhere in
//! cavern; vec(ρ) is the same array, so the superoperator index of (r, c) is r·d + c. With this
//! row-major vectorisation vec(AρB) = (A ⊗ Bᵀ) vec(ρ), hence
//!
//! ```text
//! 𝓛 = K ⊗ I + I ⊗ K̄ + Σₖ Lₖ ⊗ L̄ₖ,   K = −iH − ½ Σₖ Lₖ†Lₖ
//! ```
//!
//! (K̄ = complex conjugate, = (K†)ᵀ; expanded: −i(H ⊗ I − I ⊗ Hᵀ) + Σ [L ⊗ L̄ − ½ L†L ⊗ I −
//! ½ I ⊗ (L†L)ᵀ]). The d²×d² matrix is built only in this module.
//!
//! **Residuals.** Every result carries the same two numbers, computed by [`LindbladRhs`] on the
//! returned ρ (Hermitian, trace exactly normalised), whatever the method:
//!
//! - `residual` = ‖𝓛ρ‖_max = maxᵣc |(dρ/dt)ᵣc|, in rate units (1 / time unit);
//! - `relative_residual` = ‖𝓛ρ‖_max / (S · ‖ρ‖_max), where S = [`generator_scale`] is an upper
//!   bound of the induced ∞-norm ‖𝓛‖∞ (max absolute row sum), so the ratio is a backward-error-like
//!   quantity in [0, 1]: a few ε for an exact solve.
//!
//! The distance to the true steady state is bounded by ‖𝓛⁺‖ times the residual, and ‖𝓛⁺‖ is about
//! 1/gap (more for strongly non-normal generators): check [`relaxation`] when it matters.

use crate::dopri::{Dopri5, DopriOptions, StepOutcome};
use crate::lindblad::{self, LindbladRhs};
use crate::par::{for_chunks, sum_ranges, Par};
use crate::EvolveError;
use cavern_model::{MasterEquation, SparseOp};
use faer::sparse::{SparseColMat, Triplet};
use num_complex::Complex64 as C64;
use sparse_lu::{FactorFailure, RealLu};
use std::fmt;

mod multifrontal;
mod sparse_lu;
mod sylvester;

pub use sparse_lu::LuStrategy;

/// The linear-algebra crate whose sparse matrix [`liouvillian`] returns.
pub use faer;

const ZERO: C64 = C64::new(0.0, 0.0);

/// Which solver produced a steady state.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[non_exhaustive]
pub enum SteadyMethod {
    /// Sparse LU of 𝓛 with one row replaced by the trace condition.
    Direct,
    /// Restarted GMRES(m), preconditioned, matrix-free.
    Gmres,
    /// Time evolution until dρ/dt is negligible.
    Evolution,
}

impl SteadyMethod {
    /// Short machine-readable name: `direct-lu`, `gmres`, `evolution`.
    pub fn name(&self) -> &'static str {
        match self {
            SteadyMethod::Direct => "direct-lu",
            SteadyMethod::Gmres => "gmres",
            SteadyMethod::Evolution => "evolution",
        }
    }
}

impl fmt::Display for SteadyMethod {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Errors of the steady-state and relaxation solvers. Each carries the numbers reached.
#[derive(Debug, thiserror::Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum SteadyError {
    /// Invalid options.
    #[error("invalid steady-state options: {0}")]
    Options(String),
    /// The model cannot be handled (from the right-hand side or the integrator).
    #[error(transparent)]
    Evolve(#[from] EvolveError),
    /// The bordered matrix (𝓛 with one equation replaced by the trace condition) is singular to
    /// working precision: its estimated reciprocal condition number is below the threshold (or a
    /// pivot is exactly zero), i.e. the steady state is not unique (or the problem is hopelessly
    /// ill-conditioned).
    #[error(
        "the steady state is not unique (or numerically singular): the trace-bordered Liouvillian \
         has estimated reciprocal condition number {rcond:e} (threshold {threshold:e}); check \
         `relaxation` for the dimension of the zero eigenspace"
    )]
    Singular {
        /// Estimated 1/(‖A‖₁‖A⁻¹‖₁) of the bordered matrix A (0 for an exactly zero pivot).
        rcond: f64,
        /// The threshold it fell below.
        threshold: f64,
    },
    /// A factorisation failed (out of memory, or a structurally singular matrix).
    #[error("sparse LU of the {n}×{n} Liouvillian failed: {reason}")]
    Factorization {
        /// Matrix size d².
        n: usize,
        /// faer's message.
        reason: String,
    },
    /// The symbolic analysis predicts LU factors larger than the memory allowed
    /// ([`DirectOptions::max_factor_bytes`]); nothing was factorised.
    #[error(
        "sparse LU of the {n}×{n} Liouvillian refused: its factors may need up to {needed} bytes \
         (George–Ng bound, nnz(L), nnz(U) ≤ {nnz_bound}), more than the allowed {allowed} bytes"
    )]
    TooLarge {
        /// Matrix size d².
        n: usize,
        /// The bound on the factors' non-zeros.
        nnz_bound: usize,
        /// Predicted bytes (bound).
        needed: u128,
        /// Allowed bytes.
        allowed: u128,
    },
    /// The working memory of an iterative or evolution solve would exceed the allowed bytes
    /// ([`GmresOptions::max_workspace_bytes`], [`EvolutionOptions::max_workspace_bytes`]);
    /// nothing was allocated.
    #[error(
        "{method} refused: its working memory would be about {needed} bytes, more than the \
         allowed {allowed} bytes"
    )]
    WorkspaceTooLarge {
        /// The method refused.
        method: SteadyMethod,
        /// Predicted bytes.
        needed: u128,
        /// Allowed bytes.
        allowed: u128,
    },
    /// A direct solution's residual is above the accepted level.
    #[error(
        "{method}: relative residual {relative_residual:e} is above the accepted {tol:e} \
         (‖𝓛ρ‖_max = {residual:e} per time unit)"
    )]
    Inaccurate {
        /// The method.
        method: SteadyMethod,
        /// ‖𝓛ρ‖_max (1/time unit).
        residual: f64,
        /// Relative residual reached.
        relative_residual: f64,
        /// The accepted level.
        tol: f64,
    },
    /// GMRES did not reach its tolerance within the iteration limit.
    #[error(
        "GMRES did not converge in {iterations} iterations: residual {gmres_residual:e} of the \
         trace-augmented system relative to its right-hand side (tolerance {tol:e}); the last \
         iterate has ‖𝓛ρ‖_max = {residual:e}, relative {relative_residual:e}"
    )]
    NotConverged {
        /// Matrix–vector products done.
        iterations: usize,
        /// ‖b − Mx‖₂ / ‖b‖₂ of the augmented system at the last iterate.
        gmres_residual: f64,
        /// The tolerance on it.
        tol: f64,
        /// ‖𝓛ρ‖_max of the last iterate normalised to trace 1 (NaN if its trace vanished).
        residual: f64,
        /// The corresponding relative residual.
        relative_residual: f64,
    },
    /// Time evolution reached its maximum time before ρ became stationary.
    #[error(
        "time evolution reached t = {time} without becoming stationary: relative residual \
         {relative_residual:e} (‖dρ/dt‖_max = {residual:e}), tolerance {tol:e}"
    )]
    NotStationary {
        /// Time reached.
        time: f64,
        /// ‖dρ/dt‖_max at that time.
        residual: f64,
        /// Relative residual at that time.
        relative_residual: f64,
        /// The tolerance on the relative residual.
        tol: f64,
    },
    /// The solution has a vanishing or non-finite trace (a broken solve).
    #[error("{method}: the solution has trace {trace}, cannot normalise")]
    BadTrace {
        /// The method.
        method: SteadyMethod,
        /// The trace found.
        trace: f64,
    },
    /// The Arnoldi iteration did not converge the requested eigenvalues within its basis limit.
    #[error(
        "relaxation: the Arnoldi basis reached {basis} vectors without converging the \
         {wanted} eigenvalues nearest the shift (worst relative Ritz residual {worst_residual:e}, \
         tolerance {tol:e}); raise `max_basis` or lower `count`"
    )]
    EigenNotConverged {
        /// Basis size reached.
        basis: usize,
        /// Eigenvalues requested.
        wanted: usize,
        /// Worst relative Ritz residual among them.
        worst_residual: f64,
        /// The tolerance.
        tol: f64,
    },
    /// The dense eigensolver for the small projected matrix failed.
    #[error("relaxation: dense eigensolver failed on the {size}×{size} projected matrix")]
    DenseEigen {
        /// Size of the projected matrix.
        size: usize,
    },
    /// Every method tried by [`steady_state`] failed; the errors in order.
    #[error("no steady-state method succeeded: {}", .0.iter().map(|e| e.to_string()).collect::<Vec<_>>().join("; then "))]
    AllFailed(Vec<SteadyError>),
}

/// Memory and quality of a sparse LU factorisation.
///
/// The LU factorises the real d²×d² matrix of 𝓛 acting on Hermitian matrices (see
/// [`steady_state_direct`]). Sizes come from the symbolic analysis, known before the numeric
/// factorisation (what the memory guard [`DirectOptions::max_factor_bytes`] checks): exact for
/// the multifrontal LU (dense supernode blocks counted in full), George–Ng upper bounds for
/// faer's partial-pivoting LU, whose actual fill faer does not expose.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FactorStats {
    /// Order of the matrix (d²).
    pub n: usize,
    /// Non-zeros of the factorised (real) matrix.
    pub nnz_matrix: usize,
    /// Entries of the lower factor L (diagonal included); a bound for partial pivoting.
    pub nnz_l: usize,
    /// Entries of the upper factor U; a bound for partial pivoting.
    pub nnz_u: usize,
    /// Predicted bytes: multifrontal, the factors' values and structure plus two fronts of the
    /// largest order (working memory); partial pivoting, values (8 B) and row indices (8 B) of L
    /// and U at the George–Ng bounds.
    pub bytes: usize,
    /// Estimated reciprocal condition number 1/(‖A‖₁‖A⁻¹‖₁) of the factorised matrix A (an
    /// upper bound, usually within a factor 3; Hager–Higham estimator).
    pub rcond: f64,
    /// The LU used (after any fallback).
    pub strategy: LuStrategy,
    /// Largest |multiplier| in the off-diagonal blocks of L: 1 for partial pivoting; for the
    /// multifrontal LU (pivots restricted to supernode blocks) a pivot-growth indicator.
    pub max_multiplier: f64,
    /// Iterative-refinement steps applied to the solution (each one solve with the factors).
    pub refinement_steps: usize,
    /// Wall time of the symbolic analysis (ordering included), seconds.
    pub analyse_seconds: f64,
    /// Wall time of the numeric factorisation, seconds.
    pub factor_seconds: f64,
}

/// A steady state and how it was obtained.
#[derive(Clone, Debug, PartialEq)]
pub struct SteadySolution {
    /// ρₛₛ, row-major d×d, Hermitian with trace 1.
    pub rho: Vec<C64>,
    /// ‖𝓛ρ‖_max, per time unit (see the module docs).
    pub residual: f64,
    /// ‖𝓛ρ‖_max / ([`generator_scale`] · ‖ρ‖_max).
    pub relative_residual: f64,
    /// The method that produced ρ.
    pub method: SteadyMethod,
    /// Work done: 1 for the direct solve (one factorisation), matrix–vector products for GMRES,
    /// accepted integrator steps for evolution.
    pub iterations: usize,
    /// Evolution only: the time reached (time unit).
    pub time: Option<f64>,
    /// Direct only: the factorisation's size.
    pub factor: Option<FactorStats>,
    /// GMRES only: the preconditioner used.
    pub preconditioner: Option<GmresPreconditioner>,
    /// Notes in order: for [`steady_state`], why earlier methods were skipped or failed; for
    /// GMRES, a preconditioner that could not be built.
    pub fallbacks: Vec<String>,
}

/// Options of [`steady_state_direct`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DirectOptions {
    /// Refuse the solution ([`SteadyError::Singular`]) when the estimated reciprocal condition
    /// number of the bordered matrix is below this. Default 1e3·ε ≈ 2.2e-13: a rank-deficient
    /// matrix (non-unique steady state) leaves a pivot made of rounding errors, of order ε times
    /// the entries it was computed from, hence rcond of order ε.
    pub min_rcond: f64,
    /// Refuse the solution ([`SteadyError::Inaccurate`]) when its relative residual exceeds this
    /// (default 1e-10; a backward-stable solve gives a few ε).
    pub max_relative_residual: f64,
    /// The sparse LU (default [`LuStrategy::Multifrontal`], which falls back to
    /// [`LuStrategy::PartialPivoting`] when its restricted pivoting is not accurate enough).
    pub strategy: LuStrategy,
    /// Refuse to factorise ([`SteadyError::TooLarge`]) when the predicted bytes
    /// ([`FactorStats::bytes`]) exceed this. `None`: no limit.
    pub max_factor_bytes: Option<u128>,
}

impl Default for DirectOptions {
    fn default() -> Self {
        Self {
            min_rcond: 1e3 * f64::EPSILON,
            max_relative_residual: 1e-10,
            strategy: LuStrategy::Multifrontal,
            max_factor_bytes: None,
        }
    }
}

/// Options of [`steady_state_gmres`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct GmresOptions {
    /// Krylov dimension m between restarts (default 40).
    pub restart: usize,
    /// Largest number of matrix–vector products (default 5000).
    pub max_iterations: usize,
    /// Stop when ‖b − Mx‖₂ ≤ tol·‖b‖₂ for the trace-augmented system (default 1e-11).
    pub tol: f64,
    /// Parallelism of the right-hand side and the vector operations.
    pub par: Par,
    /// The preconditioner (default [`GmresPreconditioner::NoJump`]).
    pub preconditioner: GmresPreconditioner,
    /// Refuse ([`SteadyError::WorkspaceTooLarge`]) when [`gmres_workspace_bytes`] exceeds this.
    /// `None`: no limit.
    pub max_workspace_bytes: Option<u128>,
}

/// Bytes GMRES allocates for dimension `d` with `opts`: the Krylov basis (restart + 1 vectors),
/// iterate, right-hand side, two work vectors and the start guess (5; the kernel needs no d×d
/// workspace),
/// and the preconditioner (6 d×d matrices for the no-jump one, 1 for the diagonal one), each
/// d² complex numbers.
pub fn gmres_workspace_bytes(d: usize, opts: &GmresOptions) -> u128 {
    let pre = match opts.preconditioner {
        GmresPreconditioner::NoJump => 6,
        GmresPreconditioner::Diagonal => 1,
    };
    (opts.restart as u128 + 1 + 5 + pre) * (d as u128) * (d as u128) * 16
}

/// Bytes the evolution fallback allocates for dimension `d`: the integrator's nine vectors, the
/// state and its copy (11 d×d complex matrices).
pub fn evolution_workspace_bytes(d: usize) -> u128 {
    11 * (d as u128) * (d as u128) * 16
}

fn check_workspace(
    method: SteadyMethod,
    needed: u128,
    allowed: Option<u128>,
) -> Result<(), SteadyError> {
    match allowed {
        Some(allowed) if needed > allowed => Err(SteadyError::WorkspaceTooLarge {
            method,
            needed,
            allowed,
        }),
        _ => Ok(()),
    }
}

/// Right preconditioner of [`steady_state_gmres`].
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum GmresPreconditioner {
    /// The inverse of the no-jump part Kρ + ρK† of 𝓛 (a Sylvester equation, solved in the
    /// eigenbasis of K): keeps all coherent dynamics, drops the jump terms LρL†. Costs an O(d³)
    /// eigen-decomposition once and four dense d×d products per product with 𝓛; falls back to
    /// [`GmresPreconditioner::Diagonal`] (with a note) when K's eigenvectors are numerically
    /// dependent. Measured on the benchmark networks: 25–30× fewer products than the diagonal one.
    #[default]
    NoJump,
    /// The diagonal of 𝓛 (Jacobi): cheap, but slow to converge when couplings dominate.
    Diagonal,
}

impl GmresPreconditioner {
    /// Name used in output files and messages.
    pub fn name(&self) -> &'static str {
        match self {
            GmresPreconditioner::NoJump => "no-jump",
            GmresPreconditioner::Diagonal => "diagonal",
        }
    }
}

impl Default for GmresOptions {
    fn default() -> Self {
        Self {
            restart: 40,
            max_iterations: 5000,
            tol: 1e-11,
            par: Par::Rayon,
            preconditioner: GmresPreconditioner::NoJump,
            max_workspace_bytes: None,
        }
    }
}

/// Options of [`steady_state_evolve`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EvolutionOptions {
    /// Stop when the relative residual ‖dρ/dt‖_max / ([`generator_scale`]·‖ρ‖_max) ≤ tol
    /// (default 1e-9).
    pub tol: f64,
    /// Give up ([`SteadyError::NotStationary`]) at this time (time unit, default 1e6).
    pub max_time: f64,
    /// Integrator options (defaults: rtol 1e-8, atol 1e-11, otherwise [`DopriOptions`]'s).
    pub dopri: DopriOptions,
    /// Refuse ([`SteadyError::WorkspaceTooLarge`]) when [`evolution_workspace_bytes`] exceeds
    /// this. `None`: no limit.
    pub max_workspace_bytes: Option<u128>,
}

impl Default for EvolutionOptions {
    fn default() -> Self {
        Self {
            tol: 1e-9,
            max_time: 1e6,
            dopri: DopriOptions {
                rtol: 1e-8,
                atol: 1e-11,
                ..Default::default()
            },
            max_workspace_bytes: None,
        }
    }
}

/// Options of [`steady_state`].
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct SteadyOptions {
    /// Options of the direct solve.
    pub direct: DirectOptions,
    /// Options of GMRES.
    pub gmres: GmresOptions,
    /// Options of the evolution fallback.
    pub evolution: EvolutionOptions,
    /// Largest d² for which the direct solve is tried; `None` = 4096 (d ≤ 64). Above that the
    /// fill-in of the LU grows fast (measured with the multifrontal LU on 2 shared cores, see
    /// docs/performance.md: d = 80, about 1 s and 0.3 GB; d = 256, minutes and 12 GB) while GMRES,
    /// when it converges, takes about a second up to d ≈ 100. Larger direct solves are
    /// available explicitly, guarded by [`DirectOptions::max_factor_bytes`].
    pub direct_max_unknowns: Option<usize>,
}

/// Options of [`relaxation`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RelaxationOptions {
    /// Number of eigenvalues nearest the shift to converge (default 6; raised automatically so
    /// that at least one non-zero eigenvalue is found when the zero eigenspace is larger).
    pub count: usize,
    /// Shift σ (real, < 0, per time unit). `None`: σ = −10⁻³·[`generator_scale`].
    pub shift: Option<f64>,
    /// A Ritz pair counts as converged when ‖AQy − μQy‖ ≤ tol·|μ| for A = (𝓛 − σ)⁻¹
    /// (default 1e-10).
    pub tol: f64,
    /// An eigenvalue is zero when |λ| ≤ zero_tol·[`generator_scale`] (default √ε ≈ 1.5e-8: exact
    /// zeros come out at about ε·scale, so this separates them from any rate the model can
    /// resolve while allowing a large margin).
    pub zero_tol: f64,
    /// Initial block size of the Arnoldi iteration (number of random start vectors, default 4).
    /// The iteration can see a zero eigenspace of dimension up to the block size; when it finds
    /// that many zeros it doubles the block and starts again.
    pub block: usize,
    /// Largest Krylov basis (vectors of length d², default 400).
    pub max_basis: usize,
    /// The LU of 𝓛 − σI (as [`DirectOptions::strategy`]; the multifrontal LU is used as it is,
    /// its accuracy only affecting the Ritz residuals, which are checked).
    pub strategy: LuStrategy,
    /// Refuse ([`SteadyError::TooLarge`]) when the bound of the LU's bytes exceeds this.
    pub max_factor_bytes: Option<u128>,
}

impl Default for RelaxationOptions {
    fn default() -> Self {
        Self {
            count: 6,
            shift: None,
            tol: 1e-10,
            zero_tol: f64::EPSILON.sqrt(),
            block: 4,
            max_basis: 400,
            strategy: LuStrategy::Multifrontal,
            max_factor_bytes: None,
        }
    }
}

/// Eigenvalues of 𝓛 near zero, the spectral gap and the uniqueness of the steady state.
#[derive(Clone, Debug, PartialEq)]
pub struct Relaxation {
    /// The converged eigenvalues nearest the shift (per time unit), zeros first, then by real
    /// part descending (slowest decay first; real parts within zero_tol·scale of each other
    /// count as equal), then by |Im λ| and Im λ.
    pub eigenvalues: Vec<C64>,
    /// First-order error estimate of each eigenvalue, (‖r‖ + k·ε·‖H‖_F)/|μ|² with the Ritz
    /// residual r of A = (𝓛 − σ)⁻¹ and the rounding floor of the k×k projected matrix H (valid
    /// for normal 𝓛; multiply by the eigenvalue's condition number otherwise). Since ‖A‖ ≈ 1/|σ|,
    /// eigenvalues far from the shift carry relative errors of about ε·|λ|/|σ|.
    pub error_estimates: Vec<f64>,
    /// Number of eigenvalues found with |λ| ≤ zero_tol·scale: the dimension of the zero
    /// eigenspace (1 for a unique steady state).
    pub zero_dimension: usize,
    /// True if the block iteration could not grow enough (basis limit, or no convergence with
    /// the larger block) to be sure the zero eigenspace is not larger than `zero_dimension`,
    /// which is then a lower bound. `degenerate` is still right whenever it is `Some`.
    pub zero_dimension_is_lower_bound: bool,
    /// `Some(k)` when the steady state is not unique: k = `zero_dimension` ≥ 2.
    pub degenerate: Option<usize>,
    /// Spectral gap: −Re λ of the first non-zero eigenvalue in the sorted list (per time unit);
    /// `None` if all eigenvalues found are zero. Zero for an undamped oscillation (purely
    /// imaginary λ).
    pub gap: Option<f64>,
    /// 1/gap (time unit); infinite for a zero gap.
    pub time_scale: Option<f64>,
    /// The shift σ used.
    pub shift: f64,
    /// [`generator_scale`] of the model.
    pub scale: f64,
    /// Final Krylov basis size.
    pub basis_size: usize,
    /// Block size of the run reported.
    pub block_size: usize,
    /// Non-zeros of the real form of 𝓛 − σI that was factorised.
    pub matrix_nnz: usize,
}

// ---------------------------------------------------------------------------------------------
// Model preparation
// ---------------------------------------------------------------------------------------------

/// The model with every envelope frozen at `t_eval`: static Hamiltonian H₀ + Σₖ fₖ(t_eval) Hₖ,
/// no driven terms, the same jumps. Returns a clone when there are no driven terms.
pub fn frozen(me: &MasterEquation, t_eval: f64) -> MasterEquation {
    if me.driven.is_empty() {
        return me.clone();
    }
    MasterEquation {
        space: me.space.clone(),
        static_hamiltonian: me.hamiltonian_at(t_eval),
        driven: Vec::new(),
        jumps: me.jumps.clone(),
    }
}

fn check_t_eval(t_eval: f64) -> Result<(), SteadyError> {
    if !t_eval.is_finite() {
        return Err(SteadyError::Options(format!(
            "t_eval = {t_eval}: the time at which envelopes are frozen must be finite"
        )));
    }
    Ok(())
}

fn row_sum_norm(op: &SparseOp) -> f64 {
    (0..op.dim())
        .map(|r| op.row(r).map(|(_, v)| v.norm()).sum::<f64>())
        .fold(0.0, f64::max)
}

/// Upper bound S of ‖𝓛‖∞ (max absolute row sum of the superoperator) at `t_eval`:
/// S = 2‖K‖∞ + Σₖ ‖Lₖ‖∞², from ‖A ⊗ B‖∞ = ‖A‖∞‖B‖∞. Per time unit. Used as the scale of
/// relative residuals and tolerances.
pub fn generator_scale(me: &MasterEquation, t_eval: f64) -> f64 {
    scale_of(&frozen(me, t_eval))
}

fn scale_of(mf: &MasterEquation) -> f64 {
    let k = mf.static_generator();
    2.0 * row_sum_norm(&k)
        + mf.jumps
            .iter()
            .map(|j| row_sum_norm(&j.op).powi(2))
            .sum::<f64>()
}

/// Triplets (row, column, value) of 𝓛 on row-major vec(ρ), unsorted, with duplicates.
fn liouvillian_triplets(mf: &MasterEquation) -> Vec<(usize, usize, C64)> {
    let d = mf.space.dim();
    let k = mf.static_generator().triplets();
    let mut t = Vec::with_capacity(2 * d * k.len());
    // K ⊗ I: ((r, c), (i, c)) += K_ri
    for &(r, i, v) in &k {
        for c in 0..d {
            t.push((r * d + c, i * d + c, v));
        }
    }
    // I ⊗ K̄: ((r, c), (r, j)) += conj(K_cj)
    for &(c, j, v) in &k {
        let v = v.conj();
        for r in 0..d {
            t.push((r * d + c, r * d + j, v));
        }
    }
    // L ⊗ L̄: ((r, c), (i, j)) += L_ri conj(L_cj)
    for jump in &mf.jumps {
        let l = jump.op.triplets();
        for &(r, i, a) in &l {
            for &(c, j, b) in &l {
                t.push((r * d + c, i * d + j, a * b.conj()));
            }
        }
    }
    t
}

/// Sum duplicates, drop exact zeros, and build a faer column-major sparse matrix.
fn assemble<T>(
    n: usize,
    mut t: Vec<(usize, usize, T)>,
) -> Result<SparseColMat<usize, T>, SteadyError>
where
    T: Copy + PartialEq + Default + std::ops::AddAssign + faer::traits::ComplexField,
{
    t.sort_unstable_by_key(|&(r, c, _)| (c, r));
    let mut merged: Vec<Triplet<usize, usize, T>> = Vec::with_capacity(t.len());
    for (r, c, v) in t {
        match merged.last_mut() {
            Some(last) if last.row == r && last.col == c => last.val += v,
            _ => merged.push(Triplet {
                row: r,
                col: c,
                val: v,
            }),
        }
    }
    merged.retain(|e| e.val != T::default());
    SparseColMat::try_new_from_triplets(n, n, &merged).map_err(|e| SteadyError::Factorization {
        n,
        reason: format!("{e:?}"),
    })
}

/// Real coordinates of Hermitian matrices: y ∈ ℝ^{d²} with y[r·d + c] = Re ρ_rc for r ≤ c and
/// y[c·d + r] = Im ρ_rc for r < c. Every Hermitian ρ has exactly one such y, and the index pattern
/// is that of vec(ρ), so the real matrix below has the (folded) pattern of the complex one.
fn hermitian_from_real(d: usize, y: &[f64], rho: &mut [C64]) {
    for r in 0..d {
        rho[r * d + r] = C64::new(y[r * d + r], 0.0);
        for c in r + 1..d {
            let v = C64::new(y[r * d + c], y[c * d + r]);
            rho[r * d + c] = v;
            rho[c * d + r] = v.conj();
        }
    }
}

/// Triplets of 𝓛 as a real-linear map on the real coordinates of Hermitian matrices (see
/// [`hermitian_from_real`]), with `shift` added to the diagonal. 𝓛 maps Hermitian matrices to
/// Hermitian matrices, and ℂ^{d×d} is the complexification of the Hermitian matrices, so this real
/// d²×d² matrix has exactly the eigenvalues of 𝓛 (with multiplicity), and its kernel is the set
/// of Hermitian steady states. Each complex equation (r, c), r ≤ c, of 𝓛ρ gives its real part
/// (row r·d + c) and, for r < c, its imaginary part (row c·d + r); a term v·ρ_ij with
/// ρ_ij = y_a + i·s·y_b (s = +1 for i < j, −1 for i > j, y_b absent for i = j) contributes
/// Re(v)y_a − s·Im(v)y_b to the real part and Im(v)y_a + s·Re(v)y_b to the imaginary part.
/// Real arithmetic costs about a quarter of complex arithmetic in the LU.
fn hermitian_triplets(mf: &MasterEquation, shift: f64) -> Vec<(usize, usize, f64)> {
    let d = mf.space.dim();
    let complex = liouvillian_triplets(mf);
    let mut t = Vec::with_capacity(2 * complex.len() + d * d);
    for (row, col, v) in complex {
        let (r, c) = (row / d, row % d);
        if r > c {
            continue;
        }
        let (i, j) = (col / d, col % d);
        let (a, b, s) = match i.cmp(&j) {
            std::cmp::Ordering::Less => (i * d + j, Some(j * d + i), 1.0),
            std::cmp::Ordering::Greater => (j * d + i, Some(i * d + j), -1.0),
            std::cmp::Ordering::Equal => (col, None, 0.0),
        };
        let re_row = r * d + c;
        t.push((re_row, a, v.re));
        if let Some(b) = b {
            t.push((re_row, b, -s * v.im));
        }
        if r < c {
            let im_row = c * d + r;
            t.push((im_row, a, v.im));
            if let Some(b) = b {
                t.push((im_row, b, s * v.re));
            }
        }
    }
    if shift != 0.0 {
        t.extend((0..d * d).map(|i| (i, i, shift)));
    }
    t
}

/// The Liouvillian 𝓛 at `t_eval` as a d²×d² sparse matrix on row-major vec(ρ) (index r·d + c),
/// duplicates summed and exact zeros dropped. See the module docs for the formula.
///
/// # Errors
/// [`SteadyError::Options`] for a non-finite `t_eval`; [`SteadyError::Factorization`] if the
/// matrix cannot be allocated.
pub fn liouvillian(
    me: &MasterEquation,
    t_eval: f64,
) -> Result<SparseColMat<usize, C64>, SteadyError> {
    check_t_eval(t_eval)?;
    let mf = frozen(me, t_eval);
    let d = mf.space.dim();
    assemble(d * d, liouvillian_triplets(&mf))
}

/// Diagonal of 𝓛 on row-major vec(ρ): K_rr + conj(K_cc) + Σₖ Lₖ,rr conj(Lₖ,cc), i.e.
/// −i(H_rr − H_cc) − ½((L†L)_rr + (L†L)_cc) + Σₖ Lₖ,rr conj(Lₖ,cc).
fn liouvillian_diagonal(mf: &MasterEquation) -> Vec<C64> {
    let d = mf.space.dim();
    let diag_of = |op: &SparseOp| -> Vec<C64> {
        (0..d)
            .map(|r| op.row(r).find(|&(c, _)| c == r).map_or(ZERO, |(_, v)| v))
            .collect()
    };
    let kd = diag_of(&mf.static_generator());
    let jd: Vec<Vec<C64>> = mf.jumps.iter().map(|j| diag_of(&j.op)).collect();
    let mut out = vec![ZERO; d * d];
    for r in 0..d {
        for c in 0..d {
            let mut v = kd[r] + kd[c].conj();
            for l in &jd {
                v += l[r] * l[c].conj();
            }
            out[r * d + c] = v;
        }
    }
    out
}

// ---------------------------------------------------------------------------------------------
// Residual check and normalisation (shared by all methods)
// ---------------------------------------------------------------------------------------------

/// Applies 𝓛 through [`LindbladRhs`] to row-major matrices.
struct Checker {
    rhs: LindbladRhs,
    d: usize,
    scale: f64,
    panels: Vec<C64>,
    out: Vec<C64>,
}

impl Checker {
    fn new(mf: &MasterEquation, par: Par) -> Result<Self, SteadyError> {
        let d = mf.space.dim();
        Ok(Self {
            rhs: LindbladRhs::new(mf, par)?,
            d,
            scale: scale_of(mf),
            panels: vec![ZERO; d * d],
            out: vec![ZERO; d * d],
        })
    }

    /// (‖𝓛ρ‖_max, relative residual) of a Hermitian row-major ρ.
    fn residual(&mut self, rho: &[C64]) -> (f64, f64) {
        lindblad::to_panels(self.d, rho, &mut self.panels);
        self.rhs.apply(0.0, &self.panels, &mut self.out);
        let res = max_abs(&self.out);
        (res, relative(res, self.scale, max_abs(rho)))
    }
}

fn relative(res: f64, scale: f64, rho_max: f64) -> f64 {
    let den = scale * rho_max;
    if den > 0.0 {
        res / den
    } else if res == 0.0 {
        0.0
    } else {
        f64::INFINITY
    }
}

fn max_abs(x: &[C64]) -> f64 {
    x.iter().map(|v| v.norm()).fold(0.0, f64::max)
}

/// ρ ← (ρ + ρ†)/2, then ρ ← ρ / Tr ρ.
fn hermitize_normalize(d: usize, x: &mut [C64], method: SteadyMethod) -> Result<(), SteadyError> {
    for r in 0..d {
        for c in r..d {
            let a = (x[r * d + c] + x[c * d + r].conj()) * 0.5;
            x[r * d + c] = a;
            x[c * d + r] = a.conj();
        }
    }
    let trace: f64 = (0..d).map(|r| x[r * d + r].re).sum();
    if !(trace.is_finite() && trace.abs() > f64::MIN_POSITIVE) || x.iter().any(|v| !v.is_finite()) {
        return Err(SteadyError::BadTrace { method, trace });
    }
    let inv = 1.0 / trace;
    x.iter_mut().for_each(|v| *v *= inv);
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Sparse LU
// ---------------------------------------------------------------------------------------------

/// Groups of the real unknowns (see [`hermitian_from_real`]): the real and imaginary part of
/// element (r, c) form one group, named by the index r·d + c of the upper element.
fn element_groups(d: usize) -> Vec<usize> {
    (0..d * d)
        .map(|u| {
            let (r, c) = (u / d, u % d);
            r.min(c) * d + r.max(c)
        })
        .collect()
}

/// Backward error accepted from the multifrontal LU (restricted pivoting) before falling back to
/// partial pivoting: ‖b − Ax‖∞ / (‖A‖∞‖x‖∞ + ‖b‖∞) for a pseudo-random b. A backward-stable
/// solve gives a small multiple of ε; this allows a pivot growth of about 10⁴.
const MULTIFRONTAL_BACKWARD_ERROR: f64 = 1e-12;

/// ‖b − Ax‖∞ / (‖A‖∞‖x‖∞ + ‖b‖∞) and the residual r = b − Ax.
fn backward_error(a: &SparseColMat<usize, f64>, x: &[f64], b: &[f64], r: &mut Vec<f64>) -> f64 {
    r.clear();
    r.extend_from_slice(b);
    let mut row_abs = vec![0.0f64; b.len()];
    for j in 0..a.ncols() {
        let xj = x[j];
        for (&i, &v) in a.row_idx_of_col_raw(j).iter().zip(a.val_of_col(j)) {
            r[i] -= v * xj;
            row_abs[i] += v.abs();
        }
    }
    let a_inf = row_abs.iter().copied().fold(0.0, f64::max);
    let num = r.iter().map(|v| v.abs()).fold(0.0, f64::max);
    let den = a_inf * x.iter().map(|v| v.abs()).fold(0.0, f64::max)
        + b.iter().map(|v| v.abs()).fold(0.0, f64::max);
    if den > 0.0 {
        num / den
    } else if num == 0.0 {
        0.0
    } else {
        f64::INFINITY
    }
}

/// Solve A x = b with the factors and up to `max_steps` steps of iterative refinement (in working
/// precision, which restores a small backward error after a moderate pivot growth; Higham,
/// Accuracy and Stability of Numerical Algorithms, 2nd ed., §12.2). Returns (backward error,
/// steps taken).
fn solve_refined(
    lu: &mut RealLu,
    a: &SparseColMat<usize, f64>,
    b: &[f64],
    x: &mut Vec<f64>,
    max_steps: usize,
) -> (f64, usize) {
    x.clear();
    x.extend_from_slice(b);
    lu.solve(x);
    let mut r = Vec::new();
    let mut eta = backward_error(a, x, b, &mut r);
    let mut steps = 0;
    while steps < max_steps && eta > 4.0 * f64::EPSILON && eta.is_finite() {
        let mut dx = r.clone();
        lu.solve(&mut dx);
        let trial: Vec<f64> = x.iter().zip(&dx).map(|(u, v)| u + v).collect();
        let mut r2 = Vec::new();
        let eta2 = backward_error(a, &trial, b, &mut r2);
        steps += 1;
        if !(eta2 < 0.5 * eta) {
            break;
        }
        *x = trial;
        r = r2;
        eta = eta2;
    }
    (eta, steps)
}

/// Analyse, check the memory bound, factorise and estimate the condition number. With the
/// multifrontal strategy the factors are probed (backward error of a pseudo-random solve,
/// condition estimate); if they look inaccurate or singular, faer's partial-pivoting LU is used
/// instead (a line is added to `notes`), and only its verdict makes a matrix singular.
fn factor_real(
    a: &SparseColMat<usize, f64>,
    d: usize,
    strategy: LuStrategy,
    max_bytes: Option<u128>,
    min_rcond: f64,
    notes: &mut Vec<String>,
) -> Result<(RealLu, FactorStats), SteadyError> {
    let n = a.nrows();
    let fail = |reason: String| SteadyError::Factorization { n, reason };
    let groups = element_groups(d);
    let start = std::time::Instant::now();
    let sym = sparse_lu::analyse(a.as_ref(), strategy, &groups).map_err(fail)?;
    let analyse_seconds = start.elapsed().as_secs_f64();
    let needed = sym.bytes_bound();
    let nnz_bound = sym.nnz_bound();
    if let Some(allowed) = max_bytes {
        if needed > allowed {
            return Err(SteadyError::TooLarge {
                n,
                nnz_bound,
                needed,
                allowed,
            });
        }
    }
    let start = std::time::Instant::now();
    let mut lu = sparse_lu::factor(sym, a.as_ref()).map_err(|e| match e {
        // no non-zero left in a column: singular whatever the values
        FactorFailure::StructurallySingular => SteadyError::Singular {
            rcond: 0.0,
            threshold: min_rcond,
        },
        FactorFailure::Other(reason) => fail(reason),
    })?;
    let factor_seconds = start.elapsed().as_secs_f64();
    let rcond = lu.rcond();
    if strategy == LuStrategy::Multifrontal {
        let mut rng = SplitMix(0x0B5E_55ED_0000_0001);
        let b: Vec<f64> = (0..n).map(|_| rng.next_f64()).collect();
        let mut x = Vec::new();
        let (eta, _) = solve_refined(&mut lu, a, &b, &mut x, 0);
        if !(eta <= MULTIFRONTAL_BACKWARD_ERROR && rcond >= min_rcond) {
            notes.push(format!(
                "multifrontal LU (pivots restricted to supernode blocks, largest multiplier \
                 {:.1e}) gave backward error {eta:.1e} and reciprocal condition estimate \
                 {rcond:.1e}; refactorised with partial pivoting",
                lu.max_multiplier()
            ));
            drop(lu);
            return factor_real(
                a,
                d,
                LuStrategy::PartialPivoting,
                max_bytes,
                min_rcond,
                notes,
            );
        }
    }
    let stats = FactorStats {
        n,
        nnz_matrix: a.compute_nnz(),
        nnz_l: nnz_bound,
        nnz_u: nnz_bound,
        bytes: usize::try_from(needed).unwrap_or(usize::MAX),
        rcond,
        strategy,
        max_multiplier: lu.max_multiplier(),
        refinement_steps: 0,
        analyse_seconds,
        factor_seconds,
    };
    Ok((lu, stats))
}

// ---------------------------------------------------------------------------------------------
// Direct solve
// ---------------------------------------------------------------------------------------------

/// Steady state by a sparse LU of 𝓛 (at `t_eval`) with the equation of element (0, 0) replaced
/// by the trace condition S/d · Σᵣ ρᵣᵣ = S/d (S = [`generator_scale`], so the new row is of
/// the size of the others).
///
/// Why this row: the population equations sum to zero (𝓛 is trace preserving), so the (0, 0)
/// equation is a combination of the others and dropping it loses nothing; the trace row is not
/// in the row space of 𝓛 (it does not annihilate ρₛₛ), so the bordered matrix is non-singular
/// exactly when the steady state is unique.
///
/// The matrix factorised is real: 𝓛 acting on the real coordinates of Hermitian matrices (see
/// [`liouvillian`] for the complex one; the real one has the same d² unknowns, the same
/// eigenvalues and the same pattern folded onto the upper triangle, at a quarter of the
/// arithmetic). The LU is chosen by [`DirectOptions::strategy`]: by default a multifrontal LU
/// on the symmetrised pattern, whose accuracy is probed and which falls back to faer's
/// partial-pivoting LU when needed (noted in `fallbacks`). Before the numeric factorisation the
/// symbolic analysis predicts the factors' size (see [`FactorStats`]), and the solve is refused
/// ([`SteadyError::TooLarge`]) if that exceeds [`DirectOptions::max_factor_bytes`]. After it, a
/// Hager–Higham estimate of the reciprocal condition number decides whether the bordered matrix
/// is singular, i.e. the steady state not unique ([`SteadyError::Singular`]). The solution gets
/// up to 3 steps of iterative refinement, is made exactly Hermitian and normalised to trace 1
/// before the residual is computed.
///
/// # Errors
/// [`SteadyError::Singular`] (non-unique steady state), [`SteadyError::TooLarge`],
/// [`SteadyError::Inaccurate`], [`SteadyError::Factorization`], [`SteadyError::Evolve`] for
/// unsupported jump operators, [`SteadyError::Options`].
pub fn steady_state_direct(
    me: &MasterEquation,
    t_eval: f64,
    opts: &DirectOptions,
) -> Result<SteadySolution, SteadyError> {
    check_t_eval(t_eval)?;
    if !(opts.min_rcond >= 0.0 && opts.max_relative_residual > 0.0) {
        return Err(SteadyError::Options(format!(
            "direct: min_rcond = {} must be ≥ 0 and max_relative_residual = {} > 0",
            opts.min_rcond, opts.max_relative_residual
        )));
    }
    let mf = frozen(me, t_eval);
    let mut checker = Checker::new(&mf, Par::Seq)?;
    let d = mf.space.dim();
    let n = d * d;
    let w = if checker.scale > 0.0 {
        checker.scale / d as f64
    } else {
        1.0
    };
    let mut t = hermitian_triplets(&mf, 0.0);
    // row 0 is the real part of the (0, 0) equation
    t.retain(|e| e.0 != 0);
    t.extend((0..d).map(|r| (0, r * d + r, w)));
    let a = assemble(n, t)?;
    let mut notes = Vec::new();
    let (mut lu, mut stats) = factor_real(
        &a,
        d,
        opts.strategy,
        opts.max_factor_bytes,
        opts.min_rcond,
        &mut notes,
    )?;
    if !(stats.rcond >= opts.min_rcond) {
        return Err(SteadyError::Singular {
            rcond: stats.rcond,
            threshold: opts.min_rcond,
        });
    }
    let mut b = vec![0.0; n];
    b[0] = w;
    let mut y = Vec::new();
    let (_, steps) = solve_refined(&mut lu, &a, &b, &mut y, 3);
    stats.refinement_steps = steps;
    drop(lu);
    drop(a);
    let mut x = vec![ZERO; n];
    hermitian_from_real(d, &y, &mut x);
    hermitize_normalize(d, &mut x, SteadyMethod::Direct)?;
    let (residual, relative_residual) = checker.residual(&x);
    if !(relative_residual <= opts.max_relative_residual) {
        return Err(SteadyError::Inaccurate {
            method: SteadyMethod::Direct,
            residual,
            relative_residual,
            tol: opts.max_relative_residual,
        });
    }
    Ok(SteadySolution {
        rho: x,
        residual,
        relative_residual,
        method: SteadyMethod::Direct,
        iterations: 1,
        time: None,
        factor: Some(stats),
        preconditioner: None,
        fallbacks: notes,
    })
}

// ---------------------------------------------------------------------------------------------
// GMRES
// ---------------------------------------------------------------------------------------------

/// Real inner product Re Σ conj(aᵢ) bᵢ (= Tr(AB) for Hermitian A, B).
fn dot(par: Par, a: &[C64], b: &[C64], partials: &mut Vec<f64>) -> f64 {
    sum_ranges(par, a.len(), partials, |lo, hi| {
        a[lo..hi]
            .iter()
            .zip(&b[lo..hi])
            .map(|(x, y)| x.re * y.re + x.im * y.im)
            .sum()
    })
}

/// y ← y + α x (α real).
fn axpy(par: Par, alpha: f64, x: &[C64], y: &mut [C64]) {
    for_chunks(par, y, |lo, o| {
        for (v, xv) in o.iter_mut().zip(&x[lo..]) {
            *v += xv * alpha;
        }
    });
}

/// The right preconditioner of GMRES.
enum Preconditioner {
    /// 1 / diag(M), panel layout.
    Diagonal(Vec<C64>),
    /// The inverse of the no-jump part of 𝓛.
    NoJump(Box<sylvester::Sylvester>),
}

/// The trace-augmented operator M x = 𝓛x + (s/d)·Tr(x)·I on Hermitian matrices in the kernel's
/// panel layout, with its preconditioner.
struct Augmented {
    rhs: LindbladRhs,
    par: Par,
    /// Positions of the diagonal elements in the panel layout.
    diag_pos: Vec<usize>,
    /// s/d.
    sd: f64,
    pre: Preconditioner,
}

impl Augmented {
    fn trace(&self, x: &[C64]) -> f64 {
        self.diag_pos.iter().map(|&p| x[p].re).sum()
    }

    fn apply(&mut self, x: &[C64], out: &mut [C64]) {
        self.rhs.apply(0.0, x, out);
        let t = self.trace(x) * self.sd;
        for &p in &self.diag_pos {
            out[p].re += t;
        }
    }

    /// out = P⁻¹ x (Hermitian in, Hermitian out). Diagonal: element-wise, keeps Hermiticity since
    /// diag(M)ᶜʳ = conj(diag(M)ʳᶜ).
    fn precondition(&mut self, x: &[C64], out: &mut [C64]) {
        match &mut self.pre {
            Preconditioner::Diagonal(p) => {
                let p = &*p;
                for_chunks(self.par, out, |lo, o| {
                    for (i, v) in o.iter_mut().enumerate() {
                        *v = x[lo + i] * p[lo + i];
                    }
                });
            }
            Preconditioner::NoJump(s) => s.apply(x, out),
        }
    }
}

/// Steady state by restarted GMRES(m), matrix-free, right-preconditioned.
///
/// The system: on the real vector space of Hermitian d×d matrices (𝓛 maps it to itself, and
/// [`LindbladRhs`] is only valid there), solve M x = b with
///
/// ```text
/// M x = 𝓛x + (s/d)·Tr(x)·I,   b = (s/d)·I,   s = −max(max_r |𝓛_(rr),(rr)|, S/d)
/// ```
///
/// (S = [`generator_scale`]). It is well posed whenever the steady state is unique: taking the
/// trace of M x = 0 gives s·Tr x = 0 (𝓛 is trace preserving), hence 𝓛x = 0 with Tr x = 0, hence
/// x = 0. ρₛₛ solves it, and M has the spectrum of 𝓛 with the zero eigenvalue moved to s < 0,
/// beside the decay rates. All Krylov vectors are Hermitian and all coefficients real (Arnoldi
/// with classical Gram–Schmidt applied twice, Givens rotations on the real Hessenberg matrix).
///
/// Preconditioner ([`GmresOptions::preconditioner`]): by default the inverse of the no-jump part
/// Kρ + ρK† of 𝓛 (see [`GmresPreconditioner::NoJump`]; Re(λᵢ + conj λⱼ) clamped to at most s/d);
/// or P = diag(M), computed from the operators (see the module docs for diag 𝓛), entries with
/// |diag| ≤ ε·S (undamped coherences between degenerate levels) replaced by −S. With right
/// preconditioning the GMRES residual is the true residual of M x = b.
///
/// Stops when ‖b − Mx‖₂ ≤ tol·‖b‖₂, confirmed on the recomputed true residual at each restart.
/// `guess`: a row-major Hermitian starting matrix (e.g. a previous steady state); default I/d.
///
/// # Errors
/// [`SteadyError::NotConverged`] with the residual reached after `max_iterations` products;
/// [`SteadyError::BadTrace`], [`SteadyError::Evolve`], [`SteadyError::Options`].
pub fn steady_state_gmres(
    me: &MasterEquation,
    t_eval: f64,
    opts: &GmresOptions,
    guess: Option<&[C64]>,
) -> Result<SteadySolution, SteadyError> {
    check_t_eval(t_eval)?;
    if opts.restart == 0 || opts.max_iterations == 0 || !(opts.tol > 0.0 && opts.tol < 1.0) {
        return Err(SteadyError::Options(format!(
            "GMRES: restart = {} and max_iterations = {} must be ≥ 1, tol = {} in (0, 1)",
            opts.restart, opts.max_iterations, opts.tol
        )));
    }
    check_workspace(
        SteadyMethod::Gmres,
        gmres_workspace_bytes(me.space.dim(), opts),
        opts.max_workspace_bytes,
    )?;
    let mf = frozen(me, t_eval);
    let d = mf.space.dim();
    let n = d * d;
    if let Some(g) = guess {
        if g.len() != n {
            return Err(SteadyError::Options(format!(
                "GMRES: the guess has {} entries, expected d² = {n}",
                g.len()
            )));
        }
    }
    let par = opts.par;
    let scale = scale_of(&mf);
    // diagonal positions in the panel layout, found through the layout's own conversion
    let mut marker = vec![ZERO; n];
    for r in 0..d {
        marker[r * d + r] = C64::new(1.0, 0.0);
    }
    let mut tmp = vec![ZERO; n];
    lindblad::to_panels(d, &marker, &mut tmp);
    let diag_pos: Vec<usize> = (0..n).filter(|&i| tmp[i] != ZERO).collect();
    let mut ldiag = liouvillian_diagonal(&mf);
    let pop_rate = (0..d).map(|r| ldiag[r * d + r].norm()).fold(0.0, f64::max);
    let s = -pop_rate.max(scale / d as f64).max(f64::MIN_POSITIVE);
    let sd = s / d as f64;
    let mut notes = Vec::new();
    let pre = match opts.preconditioner {
        GmresPreconditioner::NoJump => {
            let k = mf.static_generator().to_dense();
            match sylvester::Sylvester::new(d, &k, sd.abs(), par) {
                Ok(p) => {
                    // the diagonal of 𝓛 is not needed any more: free it before the iteration
                    ldiag = Vec::new();
                    Some(Preconditioner::NoJump(Box::new(p)))
                }
                Err(e) => {
                    notes.push(format!(
                        "GMRES: the no-jump preconditioner could not be built ({}); used the \
                         diagonal one",
                        e.0
                    ));
                    None
                }
            }
        }
        GmresPreconditioner::Diagonal => None,
    };
    let pre = pre.unwrap_or_else(|| {
        // P = diag(M) = diag(𝓛) + s/d on the population entries
        let mut mdiag = std::mem::take(&mut ldiag);
        for r in 0..d {
            mdiag[r * d + r] += sd;
        }
        let floor = f64::EPSILON * scale;
        for v in &mut mdiag {
            *v = if v.norm() > floor {
                v.inv()
            } else {
                C64::new(-1.0 / scale.max(f64::MIN_POSITIVE), 0.0)
            };
        }
        let mut inv_diag = vec![ZERO; n];
        lindblad::to_panels(d, &mdiag, &mut inv_diag);
        Preconditioner::Diagonal(inv_diag)
    });
    let used = match pre {
        Preconditioner::Diagonal(_) => GmresPreconditioner::Diagonal,
        Preconditioner::NoJump(_) => GmresPreconditioner::NoJump,
    };
    let mut op = Augmented {
        rhs: LindbladRhs::new(&mf, par)?,
        par,
        diag_pos,
        sd,
        pre,
    };
    let mut b = vec![ZERO; n];
    for &p in &op.diag_pos {
        b[p] = C64::new(sd, 0.0);
    }
    let mut partials = Vec::new();
    let bnorm = dot(par, &b, &b, &mut partials).sqrt();
    // starting guess, panel layout
    let mut x = vec![ZERO; n];
    match guess {
        Some(g) => {
            let mut gh = g.to_vec();
            hermitize_normalize(d, &mut gh, SteadyMethod::Gmres)?;
            lindblad::to_panels(d, &gh, &mut x);
        }
        None => {
            for &p in &op.diag_pos {
                x[p] = C64::new(1.0 / d as f64, 0.0);
            }
        }
    }
    let m = opts.restart.min(n.max(1));
    let mut v: Vec<Vec<C64>> = (0..=m).map(|_| vec![ZERO; n]).collect();
    let mut z = vec![ZERO; n];
    let mut w = vec![ZERO; n];
    let mut h = vec![vec![0.0f64; m]; m + 1];
    let (mut cs, mut sn, mut g) = (vec![0.0; m], vec![0.0; m], vec![0.0; m + 1]);
    let mut iterations = 0usize;
    let true_residual = |op: &mut Augmented, x: &[C64], r: &mut [C64], partials: &mut Vec<f64>| {
        op.apply(x, r);
        for (ri, bi) in r.iter_mut().zip(&b) {
            *ri = bi - *ri;
        }
        dot(par, r, r, partials).sqrt()
    };
    let mut rel = loop {
        // restart: true residual r = b − M x into v[0]
        let beta = true_residual(&mut op, &x, &mut v[0], &mut partials);
        let rel = beta / bnorm;
        if !rel.is_finite() {
            break rel;
        }
        if rel <= opts.tol || iterations >= opts.max_iterations {
            break rel;
        }
        let inv = 1.0 / beta;
        v[0].iter_mut().for_each(|e| *e *= inv);
        g.fill(0.0);
        g[0] = beta;
        let mut k_used = 0;
        for j in 0..m {
            op.precondition(&v[j], &mut z);
            op.apply(&z, &mut w);
            iterations += 1;
            // classical Gram–Schmidt, twice ("twice is enough": Giraud, Langou & Rozložník 2005)
            for hi in h.iter_mut() {
                hi[j] = 0.0;
            }
            for _pass in 0..2 {
                for i in 0..=j {
                    let c = dot(par, &v[i], &w, &mut partials);
                    h[i][j] += c;
                    axpy(par, -c, &v[i], &mut w);
                }
            }
            let hn = dot(par, &w, &w, &mut partials).sqrt();
            h[j + 1][j] = hn;
            if hn > 0.0 {
                let inv = 1.0 / hn;
                for (t, s) in v[j + 1].iter_mut().zip(&w) {
                    *t = s * inv;
                }
            }
            // apply the previous rotations to column j, then a new one to zero h[j+1][j]
            for i in 0..j {
                let (a, bb) = (h[i][j], h[i + 1][j]);
                h[i][j] = cs[i] * a + sn[i] * bb;
                h[i + 1][j] = -sn[i] * a + cs[i] * bb;
            }
            let (a, bb) = (h[j][j], h[j + 1][j]);
            let r = a.hypot(bb);
            let (c, s_) = if r > 0.0 { (a / r, bb / r) } else { (1.0, 0.0) };
            cs[j] = c;
            sn[j] = s_;
            h[j][j] = r;
            h[j + 1][j] = 0.0;
            g[j + 1] = -s_ * g[j];
            g[j] *= c;
            k_used = j + 1;
            if g[j + 1].abs() <= opts.tol * bnorm || iterations >= opts.max_iterations || hn == 0.0
            {
                break;
            }
        }
        // y = H⁻¹ g (upper triangular), x += P⁻¹ V y
        let mut y = vec![0.0; k_used];
        for i in (0..k_used).rev() {
            let mut acc = g[i];
            for l in i + 1..k_used {
                acc -= h[i][l] * y[l];
            }
            y[i] = if h[i][i] != 0.0 { acc / h[i][i] } else { 0.0 };
        }
        w.fill(ZERO);
        for (i, &yi) in y.iter().enumerate() {
            axpy(par, yi, &v[i], &mut w);
        }
        op.precondition(&w, &mut z);
        axpy(par, 1.0, &z, &mut x);
    };
    let mut rho = vec![ZERO; n];
    lindblad::from_panels(d, &x, &mut rho);
    let normalised = hermitize_normalize(d, &mut rho, SteadyMethod::Gmres);
    let mut checker = Checker {
        rhs: op.rhs,
        d,
        scale,
        panels: z,
        out: w,
    };
    if !(rel <= opts.tol) {
        let (residual, relative_residual) = match normalised {
            Ok(()) => checker.residual(&rho),
            Err(_) => (f64::NAN, f64::NAN),
        };
        if !rel.is_finite() {
            rel = f64::INFINITY;
        }
        return Err(SteadyError::NotConverged {
            iterations,
            gmres_residual: rel,
            tol: opts.tol,
            residual,
            relative_residual,
        });
    }
    normalised?;
    let (residual, relative_residual) = checker.residual(&rho);
    Ok(SteadySolution {
        rho,
        residual,
        relative_residual,
        method: SteadyMethod::Gmres,
        iterations,
        time: None,
        factor: None,
        preconditioner: Some(used),
        fallbacks: notes,
    })
}

// ---------------------------------------------------------------------------------------------
// Time evolution
// ---------------------------------------------------------------------------------------------

/// Steady state by Dormand–Prince time evolution from `rho0` (row-major; default I/d) until the
/// relative residual ‖dρ/dt‖_max / ([`generator_scale`]·‖ρ‖_max) is at most `opts.tol`, checked
/// after every accepted step (one extra right-hand-side evaluation per step).
///
/// The approach is exponential at the spectral gap, so the time needed is about
/// ln(1/tol)/gap; an explicit integrator's step is bounded by stability at about 3/‖𝓛‖, so this
/// costs of order ‖𝓛‖/gap · ln(1/tol) right-hand sides: use it when the other methods fail.
/// The final state is normalised to trace 1 (the integrator preserves it to its tolerance).
///
/// # Errors
/// [`SteadyError::NotStationary`] with the residual at `max_time`; integrator errors as
/// [`SteadyError::Evolve`]; [`SteadyError::Options`].
pub fn steady_state_evolve(
    me: &MasterEquation,
    t_eval: f64,
    opts: &EvolutionOptions,
    rho0: Option<&[C64]>,
) -> Result<SteadySolution, SteadyError> {
    check_t_eval(t_eval)?;
    check_workspace(
        SteadyMethod::Evolution,
        evolution_workspace_bytes(me.space.dim()),
        opts.max_workspace_bytes,
    )?;
    if !(opts.tol > 0.0 && opts.max_time > 0.0 && opts.max_time.is_finite()) {
        return Err(SteadyError::Options(format!(
            "evolution: tol = {} must be > 0 and max_time = {} finite and > 0",
            opts.tol, opts.max_time
        )));
    }
    let mf = frozen(me, t_eval);
    let d = mf.space.dim();
    let n = d * d;
    let mut y0 = vec![ZERO; n];
    match rho0 {
        Some(r) if r.len() != n => {
            return Err(SteadyError::Options(format!(
                "evolution: the initial state has {} entries, expected d² = {n}",
                r.len()
            )))
        }
        Some(r) => {
            let mut h = r.to_vec();
            hermitize_normalize(d, &mut h, SteadyMethod::Evolution)?;
            lindblad::to_panels(d, &h, &mut y0);
        }
        None => {
            let mut h = vec![ZERO; n];
            for r in 0..d {
                h[r * d + r] = C64::new(1.0 / d as f64, 0.0);
            }
            lindblad::to_panels(d, &h, &mut y0);
        }
    }
    let scale = scale_of(&mf);
    let mut rhs = LindbladRhs::new(&mf, opts.dopri.par)?;
    let mut ode = Dopri5::new(&mut rhs, 0.0, &y0, opts.dopri)?;
    let mut dy = vec![ZERO; n];
    let check = |rhs: &mut LindbladRhs, y: &[C64], dy: &mut [C64]| {
        rhs.apply(0.0, y, dy);
        let res = max_abs(dy);
        (res, relative(res, scale, max_abs(y)))
    };
    let (mut res, mut rel) = check(&mut rhs, ode.y(), &mut dy);
    while !(rel <= opts.tol) {
        if ode.t() >= opts.max_time || !rel.is_finite() {
            return Err(SteadyError::NotStationary {
                time: ode.t(),
                residual: res,
                relative_residual: rel,
                tol: opts.tol,
            });
        }
        if let StepOutcome::Accepted { .. } = ode.step(&mut rhs, opts.max_time)? {
            (res, rel) = check(&mut rhs, ode.y(), &mut dy);
        }
    }
    let mut rho = vec![ZERO; n];
    lindblad::from_panels(d, ode.y(), &mut rho);
    hermitize_normalize(d, &mut rho, SteadyMethod::Evolution)?;
    let mut checker = Checker {
        rhs,
        d,
        scale,
        panels: y0,
        out: dy,
    };
    let (residual, relative_residual) = checker.residual(&rho);
    Ok(SteadySolution {
        rho,
        residual,
        relative_residual,
        method: SteadyMethod::Evolution,
        iterations: ode.stats().steps as usize,
        time: Some(ode.t()),
        factor: None,
        preconditioner: None,
        fallbacks: Vec::new(),
    })
}

// ---------------------------------------------------------------------------------------------
// Driver
// ---------------------------------------------------------------------------------------------

/// Steady state with automatic method choice: the direct solve when d² ≤ `direct_max_unknowns`;
/// if it is skipped, refused by its memory guard or fails for a reason other than a non-unique
/// steady state, GMRES; if GMRES
/// does not converge, time evolution from I/d. The result's `fallbacks` lists what was skipped or
/// failed and why.
///
/// # Errors
/// [`SteadyError::Singular`] at once when the direct solve finds the steady state not unique
/// (no other method can fix that); otherwise [`SteadyError::AllFailed`] with every method's
/// error, or option errors.
pub fn steady_state(
    me: &MasterEquation,
    t_eval: f64,
    opts: &SteadyOptions,
) -> Result<SteadySolution, SteadyError> {
    check_t_eval(t_eval)?;
    let d = me.space.dim();
    let n = d.saturating_mul(d);
    let limit = opts.direct_max_unknowns.unwrap_or(4096);
    let mut notes = Vec::new();
    let mut errors = Vec::new();
    if n <= limit {
        match steady_state_direct(me, t_eval, &opts.direct) {
            Ok(s) => return Ok(s),
            Err(e @ (SteadyError::Singular { .. } | SteadyError::Options(_))) => return Err(e),
            Err(e) => {
                notes.push(format!("direct-lu failed: {e}"));
                errors.push(e);
            }
        }
    } else {
        notes.push(format!(
            "direct-lu skipped: d² = {n} unknowns exceeds the limit {limit}"
        ));
    }
    match steady_state_gmres(me, t_eval, &opts.gmres, None) {
        Ok(mut s) => {
            notes.append(&mut s.fallbacks);
            s.fallbacks = notes;
            return Ok(s);
        }
        Err(e @ SteadyError::Options(_)) => return Err(e),
        Err(e) => {
            notes.push(format!("gmres failed: {e}"));
            errors.push(e);
        }
    }
    match steady_state_evolve(me, t_eval, &opts.evolution, None) {
        Ok(mut s) => {
            s.fallbacks = notes;
            Ok(s)
        }
        Err(e) => {
            errors.push(e);
            Err(SteadyError::AllFailed(errors))
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Relaxation spectrum: shift-and-invert block Arnoldi
// ---------------------------------------------------------------------------------------------

/// SplitMix64 (Steele, Lea & Flood, OOPSLA 2014): deterministic start vectors.
struct SplitMix(u64);

impl SplitMix {
    fn next_f64(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        (z >> 11) as f64 / (1u64 << 53) as f64 - 0.5
    }
}

fn cdot(a: &[C64], b: &[C64]) -> C64 {
    a.iter().zip(b).map(|(x, y)| x.conj() * y).sum()
}

fn cnorm(a: &[C64]) -> f64 {
    a.iter().map(|x| x.norm_sqr()).sum::<f64>().sqrt()
}

/// Orthogonalise `w` against `q` (classical Gram–Schmidt twice); returns the coefficients.
fn orthogonalise(q: &[Vec<C64>], w: &mut [C64]) -> Vec<C64> {
    let mut h = vec![ZERO; q.len()];
    for _pass in 0..2 {
        let c: Vec<C64> = q.iter().map(|qi| cdot(qi, w)).collect();
        for (qi, &ci) in q.iter().zip(&c) {
            for (x, y) in w.iter_mut().zip(qi) {
                *x -= ci * y;
            }
        }
        for (hi, ci) in h.iter_mut().zip(c) {
            *hi += ci;
        }
    }
    h
}

/// Converged Ritz pairs of one block Arnoldi run: (λ, error estimate), by |μ| descending.
struct ArnoldiRun {
    pairs: Vec<(C64, f64)>,
    basis: usize,
    block: usize,
}

/// Block Arnoldi on A = (𝓛 − σ)⁻¹ with `block` random start vectors, processing one column at a
/// time (band Arnoldi): A q_j = Σ_i H_ij q_i over all basis vectors so far, so that
/// A Q_k = Q_k H_k + (rest) and the Ritz residual of (θ, y) is ‖H[k.., ..k] y‖ exactly.
fn block_arnoldi(
    n: usize,
    solve: &mut dyn FnMut(&mut [C64]),
    sigma: f64,
    block: usize,
    wanted: usize,
    opts: &RelaxationOptions,
) -> Result<ArnoldiRun, SteadyError> {
    let cap = opts.max_basis.min(n);
    let mut rng = SplitMix(0x5EED_CAFE_F00D_0001);
    let mut q: Vec<Vec<C64>> = Vec::new();
    for _ in 0..block.min(cap) {
        let mut v: Vec<C64> = (0..n)
            .map(|_| C64::new(rng.next_f64(), rng.next_f64()))
            .collect();
        let before = cnorm(&v);
        orthogonalise(&q, &mut v);
        let nr = cnorm(&v);
        if nr > 1e-8 * before {
            v.iter_mut().for_each(|x| *x /= nr);
            q.push(v);
        }
    }
    let mut cols: Vec<Vec<C64>> = Vec::new(); // column j of H, length = basis size when processed
    let mut deflated_sq = 0.0f64;
    let first_check = cap.min((2 * wanted + block).max(20));
    let mut next_check = first_check;
    let mut w = vec![ZERO; n];
    loop {
        let j = cols.len();
        let can_process = j < q.len() && (q.len() < cap || cap == n);
        if can_process {
            w.copy_from_slice(&q[j]);
            solve(&mut w);
            let wn = cnorm(&w);
            let mut h = orthogonalise(&q, &mut w);
            let nr = cnorm(&w);
            if q.len() < cap && nr > 1e2 * f64::EPSILON * wn {
                h.push(C64::new(nr, 0.0));
                q.push(w.iter().map(|x| x / nr).collect());
            } else {
                // the new direction is rounding noise (or the basis is full): drop it and
                // account for it in every residual bound
                deflated_sq += nr * nr;
            }
            cols.push(h);
        }
        let k = cols.len();
        let finished = !can_process || k == q.len();
        if k == 0 {
            return Err(SteadyError::EigenNotConverged {
                basis: 0,
                wanted,
                worst_residual: f64::INFINITY,
                tol: opts.tol,
            });
        }
        if k < next_check && !finished {
            continue;
        }
        next_check = k + block.max(k / 8);
        // Ritz values of the leading k×k block
        let hk = faer::Mat::<C64>::from_fn(k, k, |i, c| cols[c].get(i).copied().unwrap_or(ZERO));
        // sequential on purpose: faer's default parallelism would reserve the parallel GEMM's
        // large packing buffers for this small matrix (see PAR_MIN_ORDER)
        let (s, u) = dense_eigen(hk.as_ref()).map_err(|_| SteadyError::DenseEigen { size: k })?;
        let s = s.as_ref();
        let rows = q.len();
        // rounding floor of the projected matrix: its entries are inner products formed with
        // errors of about ε‖A‖ (‖A‖ estimated by ‖H_k‖_F), k of them per column
        let h_f = (0..k)
            .map(|c| cols[c].iter().take(k).map(|v| v.norm_sqr()).sum::<f64>())
            .sum::<f64>()
            .sqrt();
        let floor = k as f64 * f64::EPSILON * h_f;
        let mut pairs: Vec<(C64, f64, f64)> = (0..k)
            .map(|c| {
                let mu = s[c];
                let ynorm = (0..k).map(|i| u[(i, c)].norm_sqr()).sum::<f64>().sqrt();
                // residual ‖H[k.., ..k] y‖ over the rows beyond the leading block
                let mut r2 = 0.0;
                for i in k..rows {
                    let mut acc = ZERO;
                    for (l, col) in cols.iter().enumerate() {
                        if let Some(hv) = col.get(i) {
                            acc += hv * u[(l, c)];
                        }
                    }
                    r2 += acc.norm_sqr();
                }
                let res = (r2.sqrt() / ynorm.max(f64::MIN_POSITIVE)) + deflated_sq.sqrt();
                (mu, res, mu.norm())
            })
            .collect();
        pairs.sort_by(|a, b| b.2.total_cmp(&a.2));
        let take = wanted.min(k);
        let worst = pairs[..take]
            .iter()
            .map(|p| p.1 / p.2.max(f64::MIN_POSITIVE))
            .fold(0.0, f64::max);
        if worst <= opts.tol {
            let out = pairs[..take]
                .iter()
                .map(|&(mu, res, mabs)| {
                    let lambda = C64::new(sigma, 0.0) + mu.inv();
                    (lambda, (res + floor) / (mabs * mabs))
                })
                .collect();
            return Ok(ArnoldiRun {
                pairs: out,
                basis: q.len(),
                block,
            });
        }
        if finished {
            return Err(SteadyError::EigenNotConverged {
                basis: q.len(),
                wanted,
                worst_residual: worst,
                tol: opts.tol,
            });
        }
    }
}

/// Eigenvalues and right eigenvectors of a dense complex matrix, on the calling thread.
fn dense_eigen(
    a: faer::MatRef<'_, C64>,
) -> Result<(faer::Col<C64>, faer::Mat<C64>), faer::linalg::evd::EvdError> {
    use faer::dyn_stack::{MemBuffer, MemStack};
    use faer::linalg::evd::{self, ComputeEigenvectors};
    let n = a.nrows();
    let mut u = faer::Mat::<C64>::zeros(n, n);
    let mut s = faer::diag::Diag::<C64>::zeros(n);
    evd::evd_cplx(
        a,
        s.as_mut(),
        None,
        Some(u.as_mut()),
        faer::Par::Seq,
        MemStack::new(&mut MemBuffer::new(evd::evd_scratch::<C64>(
            n,
            ComputeEigenvectors::No,
            ComputeEigenvectors::Yes,
            faer::Par::Seq,
            Default::default(),
        ))),
        Default::default(),
    )?;
    Ok((s.column_vector().to_owned(), u))
}

/// Zeros first; then by real part descending, where real parts closer than `resolution` (in a
/// chain of sorted neighbours) count as equal and are ordered by |Im λ|, then Im λ.
fn sort_spectrum(
    mut pairs: Vec<(C64, f64)>,
    resolution: f64,
    is_zero: impl Fn(&C64) -> bool,
) -> Vec<(C64, f64)> {
    let (mut out, mut rest): (Vec<_>, Vec<_>) = pairs.drain(..).partition(|p| is_zero(&p.0));
    out.sort_by(|a, b| a.0.norm().total_cmp(&b.0.norm()));
    rest.sort_by(|a, b| b.0.re.total_cmp(&a.0.re));
    let mut i = 0;
    while i < rest.len() {
        let mut j = i + 1;
        while j < rest.len() && rest[j - 1].0.re - rest[j].0.re <= resolution {
            j += 1;
        }
        rest[i..j].sort_by(|a, b| {
            a.0.im
                .abs()
                .total_cmp(&b.0.im.abs())
                .then(a.0.im.total_cmp(&b.0.im))
        });
        i = j;
    }
    out.extend(rest);
    out
}

/// The eigenvalues of 𝓛 (at `t_eval`) nearest a small negative shift σ, by shift-and-invert
/// block Arnoldi: the eigenvalues μ of (𝓛 − σI)⁻¹ of largest modulus are λ = σ + 1/μ with λ
/// nearest σ, i.e. (for small |σ|) nearest zero. (𝓛 − σI), in its real form on Hermitian
/// matrices (same eigenvalues), is factorised once by the sparse LU of
/// [`RelaxationOptions::strategy`], with the memory guard [`RelaxationOptions::max_factor_bytes`]
/// (costs as for [`steady_state_direct`]); a complex Krylov vector is solved as its real and
/// imaginary parts. The Ritz values come from faer's dense complex eigensolver on the small
/// projected matrix. Memory: the factors plus `max_basis` vectors of d² complex numbers.
///
/// Reported: the eigenvalues, zeros first and then by real part descending; the dimension of the
/// zero eigenspace (|λ| ≤ zero_tol·S, S = [`generator_scale`]) and `degenerate: Some(k)` when it
/// exceeds 1 (the steady state is then not unique); the spectral gap −Re λ₁ of the first
/// non-zero eigenvalue and its time scale 1/gap.
///
/// Limitation: "nearest zero" is in the complex plane. A slowly decaying but fast oscillating
/// mode (|Im λ| large) can be missed in favour of faster-decaying, non-oscillating ones, so the
/// gap is that of the eigenvalues found; raise `count` to look further.
///
/// # Errors
/// [`SteadyError::EigenNotConverged`], [`SteadyError::DenseEigen`],
/// [`SteadyError::Factorization`], [`SteadyError::Options`].
pub fn relaxation(
    me: &MasterEquation,
    t_eval: f64,
    opts: &RelaxationOptions,
) -> Result<Relaxation, SteadyError> {
    check_t_eval(t_eval)?;
    if opts.count == 0
        || opts.block == 0
        || !(opts.tol > 0.0 && opts.tol < 1.0)
        || !(opts.zero_tol > 0.0 && opts.zero_tol < 1.0)
        || opts.max_basis < 2
    {
        return Err(SteadyError::Options(format!(
            "relaxation: count = {}, block = {} and max_basis = {} must be ≥ 1, 1, 2; tol = {} \
             and zero_tol = {} in (0, 1)",
            opts.count, opts.block, opts.max_basis, opts.tol, opts.zero_tol
        )));
    }
    let mf = frozen(me, t_eval);
    let d = mf.space.dim();
    let n = d * d;
    let scale = scale_of(&mf);
    let sigma = match opts.shift {
        Some(s) if s < 0.0 && s.is_finite() => s,
        Some(s) => {
            return Err(SteadyError::Options(format!(
                "relaxation: the shift must be real, finite and negative, got {s}"
            )))
        }
        None if scale > 0.0 => -1e-3 * scale,
        None => -1.0,
    };
    // 𝓛 − σI is non-singular for σ < 0 (Re λ ≤ 0 for every eigenvalue of a Lindbladian); the
    // real form on Hermitian matrices has the same eigenvalues, and a complex vector is solved
    // as its real and imaginary parts (two right-hand sides)
    let a = assemble(n, hermitian_triplets(&mf, -sigma))?;
    let matrix_nnz = a.compute_nnz();
    let (mut lu, _) = factor_real(
        &a,
        d,
        opts.strategy,
        opts.max_factor_bytes,
        0.0,
        &mut Vec::new(),
    )?;
    drop(a);
    let mut parts = vec![0.0f64; 2 * n];
    let mut solve = |x: &mut [C64]| {
        let (re, im) = parts.split_at_mut(n);
        for ((r, i), v) in re.iter_mut().zip(im.iter_mut()).zip(x.iter()) {
            *r = v.re;
            *i = v.im;
        }
        lu.solve(&mut parts);
        let (re, im) = parts.split_at(n);
        for ((v, r), i) in x.iter_mut().zip(re).zip(im) {
            *v = C64::new(*r, *i);
        }
    };
    let zero_abs = opts.zero_tol * scale.max(sigma.abs());
    let mut block = opts.block.min(n);
    let mut wanted = opts.count.min(n);
    // the last run that converged, with its zero count, kept in case a larger block fails
    let mut last: Option<(ArnoldiRun, usize)> = None;
    loop {
        let (run, zeros, lower_bound) =
            match block_arnoldi(n, &mut solve, sigma, block, wanted, opts) {
                Ok(run) => {
                    let zeros = run.pairs.iter().filter(|p| p.0.norm() <= zero_abs).count();
                    (run, zeros, false)
                }
                // a grown block did not converge: report what the previous run established, the
                // zero dimension being then only a lower bound
                Err(SteadyError::EigenNotConverged { .. }) if last.is_some() => {
                    let (run, zeros) = last.take().expect("checked");
                    (run, zeros, true)
                }
                Err(e) => return Err(e),
            };
        // the block iteration only sees a zero eigenspace up to the block size, and only the
        // wanted eigenvalues are converged: grow whichever is saturated, if room remains
        let block_saturated = zeros >= block && block < n;
        let wanted_saturated = zeros >= wanted && wanted < n;
        let next_block = if block_saturated {
            (2 * block).min(n)
        } else {
            block
        };
        let next_wanted = if wanted_saturated || block_saturated {
            (zeros + opts.count).max(next_block + 1).min(n)
        } else {
            wanted
        };
        let grow = (block_saturated || wanted_saturated)
            && 2 * next_wanted + next_block <= opts.max_basis.min(n).max(next_wanted + 1);
        if !lower_bound && grow && (next_block, next_wanted) != (block, wanted) {
            block = next_block;
            wanted = next_wanted;
            last = Some((run, zeros));
            continue;
        }
        let is_zero = |l: &C64| l.norm() <= zero_abs;
        let pairs = sort_spectrum(run.pairs, zero_abs, is_zero);
        let gap = pairs
            .iter()
            .find(|p| !is_zero(&p.0))
            .map(|p| (-p.0.re).max(0.0));
        return Ok(Relaxation {
            eigenvalues: pairs.iter().map(|p| p.0).collect(),
            error_estimates: pairs.iter().map(|p| p.1).collect(),
            zero_dimension: zeros,
            zero_dimension_is_lower_bound: lower_bound || block_saturated || wanted_saturated,
            degenerate: (zeros > 1).then_some(zeros),
            gap,
            time_scale: gap.map(|g| 1.0 / g),
            shift: sigma,
            scale,
            basis_size: run.basis,
            block_size: run.block,
            matrix_nnz,
        });
    }
}
