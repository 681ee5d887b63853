//! Real sparse LU for the steady-state module, two strategies behind one interface:
//!
//! - [`LuStrategy::Multifrontal`]: the multifrontal LU of [`super::multifrontal`] on the
//!   symmetrised pattern, AMD-ordered, with pivoting restricted to the supernode blocks. Its fill
//!   is that of a Cholesky factorisation of the pattern of A + Aᵀ, far below the partial-pivoting
//!   bound for Liouvillians (measured: d = 128, 5.0e7 against 8.1e7 entries per factor with
//!   COLAMD, and the supernodes of the partial-pivoting LU are much larger).
//! - [`LuStrategy::PartialPivoting`]: faer's supernodal LU with partial pivoting over whole
//!   columns (backward stable in practice), after COLAMD. The analysis follows faer's own
//!   `factorize_symbolic_lu` (column elimination tree, postorder, column counts of the Cholesky
//!   factor of AᵀA, supernodes) but keeps the column counts, which faer's wrapper discards.
//!
//! **Memory bounds, known before the numeric factorisation.** Multifrontal: the factors' size is
//! exact (the supernodal structure is static), plus the working fronts. Partial pivoting: for any
//! row interchanges the structure of U is contained in that of the Cholesky factor R of AᵀA
//! and that of L in Rᵀ (A. George & E. Ng, "Symbolic factorization for sparse Gaussian
//! elimination with partial pivoting", SIAM J. Sci. Stat. Comput. 8, 877 (1987)), so nnz(L),
//! nnz(U) ≤ nnz(R), which the analysis computes; faer keeps update matrices while it factorises,
//! so this bounds the factors, not the process's peak (benches/steady_vs_scipy.py measures both).

use super::multifrontal;
use faer::dyn_stack::{MemBuffer, MemStack, StackReq};
use faer::perm::PermRef;
use faer::sparse::linalg::lu::supernodal::{self, SupernodalLu, SymbolicSupernodalLu};
use faer::sparse::linalg::{colamd, qr, LuError, SymbolicSupernodalParams};
use faer::sparse::SparseColMatRef;
use faer::{MatMut, Par};

/// Which sparse LU factorises the Liouvillian.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LuStrategy {
    /// Multifrontal LU on the symmetrised pattern (I. S. Duff & J. K. Reid, SIAM J. Sci. Stat.
    /// Comput. 5, 633 (1984)) after approximate minimum degree ordering (faer's AMD; P. R.
    /// Amestoy, T. A. Davis & I. S. Duff, SIAM J. Matrix Anal. Appl. 17, 886 (1996)) of the
    /// pattern of A + Aᵀ, with the real and imaginary part of each matrix element kept together.
    /// Pivots are chosen inside each supernode block only, so its accuracy is checked afterwards
    /// (with iterative refinement) and the partial-pivoting LU takes over when it fails.
    Multifrontal,
    /// faer's supernodal LU with partial pivoting, COLAMD column ordering (T. A. Davis, J. R.
    /// Gilbert, S. I. Larimore & E. G. Ng, ACM TOMS 30, 353 (2004)). Robust, but its fill follows
    /// the Cholesky factor of AᵀA, which for Liouvillians is much denser.
    PartialPivoting,
}

impl LuStrategy {
    /// Short name: `multifrontal`, `partial-pivoting`.
    pub fn name(&self) -> &'static str {
        match self {
            LuStrategy::Multifrontal => "multifrontal",
            LuStrategy::PartialPivoting => "partial-pivoting",
        }
    }
}

/// Result of a symbolic analysis.
pub(crate) enum Symbolic {
    /// Multifrontal plan.
    Multifrontal(multifrontal::Plan),
    /// Partial pivoting: COLAMD, supernodes and the George–Ng bound.
    PartialPivoting(PpSymbolic),
}

impl Symbolic {
    /// Predicted bytes (see the module docs).
    pub fn bytes_bound(&self) -> u128 {
        match self {
            Symbolic::Multifrontal(p) => p.bytes_estimate(),
            Symbolic::PartialPivoting(p) => p.bytes_bound(),
        }
    }

    /// Entries of L and of U, each (a bound for partial pivoting; exact for multifrontal, where
    /// the dense supernode blocks count in full).
    pub fn nnz_bound(&self) -> usize {
        match self {
            Symbolic::Multifrontal(p) => p.triangle_entries(),
            Symbolic::PartialPivoting(p) => p.nnz_bound,
        }
    }
}

/// Analyse `a` for `strategy`; `group` (multifrontal only) names the group of each unknown.
pub(crate) fn analyse(
    a: SparseColMatRef<'_, usize, f64>,
    strategy: LuStrategy,
    group: &[usize],
) -> Result<Symbolic, String> {
    match strategy {
        LuStrategy::Multifrontal => multifrontal::analyse(a, group).map(Symbolic::Multifrontal),
        LuStrategy::PartialPivoting => analyse_pp(a).map(Symbolic::PartialPivoting),
    }
}

/// Result of the partial-pivoting analysis: ordering, supernodes and the George–Ng bound.
pub(crate) struct PpSymbolic {
    n: usize,
    col_fwd: Vec<usize>,
    col_inv: Vec<usize>,
    supernodal: SymbolicSupernodalLu<usize>,
    /// nnz(R) of the Cholesky factor of AᵀA (diagonal included): bounds nnz(L) and nnz(U).
    pub nnz_bound: usize,
}

impl PpSymbolic {
    /// Bytes of values (8 B each for real entries) and row indices (8 B) of L and U at the
    /// George–Ng bound, plus the permutations.
    pub fn bytes_bound(&self) -> u128 {
        let per = (std::mem::size_of::<f64>() + std::mem::size_of::<usize>()) as u128;
        2 * self.nnz_bound as u128 * per + 6 * self.n as u128 * 8
    }
}

fn oom<E: std::fmt::Debug>(e: E) -> String {
    format!("{e:?}")
}

/// Symbolic analysis of the square pattern of `a` (COLAMD).
fn analyse_pp(a: SparseColMatRef<'_, usize, f64>) -> Result<PpSymbolic, String> {
    let n = a.ncols();
    assert_eq!(a.nrows(), n, "square matrix");
    let nnz = a.compute_nnz();
    let mut col_fwd = vec![0usize; n];
    let mut col_inv = vec![0usize; n];
    {
        let req = colamd::order_scratch::<usize>(n, n, nnz);
        let mut mem = MemBuffer::try_new(req).map_err(oom)?;
        colamd::order(
            &mut col_fwd,
            &mut col_inv,
            a.symbolic(),
            colamd::Control::default(),
            MemStack::new(&mut mem),
        )
        .map_err(oom)?;
    }
    let perm = PermRef::new_checked(&col_fwd, &col_inv, n);
    let at = a.transpose().to_col_major().map_err(oom)?;
    let req = StackReq::all_of(&[
        qr::col_etree_scratch::<usize>(n, n),
        qr::postorder_scratch::<usize>(n),
        qr::column_counts_aat_scratch::<usize>(n, n),
        supernodal::factorize_supernodal_symbolic_lu_scratch::<usize>(n, n),
    ]);
    let mut mem = MemBuffer::try_new(req).map_err(oom)?;
    let stack = MemStack::new(&mut mem);
    let mut etree = vec![0usize; n];
    let mut post = vec![0usize; n];
    let mut col_counts = vec![0usize; n];
    let mut min_col = vec![0usize; n];
    let etree = qr::col_etree(a.symbolic(), Some(perm), &mut etree, stack);
    qr::postorder(&mut post, etree, stack);
    qr::column_counts_ata(
        &mut col_counts,
        &mut min_col,
        at.symbolic(),
        Some(perm),
        etree,
        &post,
        stack,
    );
    let nnz_bound = col_counts.iter().sum();
    let supernodal = supernodal::factorize_supernodal_symbolic_lu(
        a.symbolic(),
        Some(perm),
        &min_col,
        etree,
        &col_counts,
        stack,
        SymbolicSupernodalParams::default(),
    )
    .map_err(oom)?;
    Ok(PpSymbolic {
        n,
        col_fwd,
        col_inv,
        supernodal,
        nnz_bound,
    })
}

/// faer's partial-pivoting factors: P A Q = L U.
struct PpLu {
    col_fwd: Vec<usize>,
    col_inv: Vec<usize>,
    row_fwd: Vec<usize>,
    row_inv: Vec<usize>,
    lu: SupernodalLu<usize, f64>,
    scratch: MemBuffer,
}

enum Engine {
    Multifrontal(multifrontal::Factors),
    PartialPivoting(PpLu),
}

/// A numeric LU of either strategy.
pub(crate) struct RealLu {
    n: usize,
    engine: Engine,
    par: Par,
    /// ‖A‖₁ (max absolute column sum).
    norm1: f64,
}

/// Why a numeric factorisation failed.
pub(crate) enum FactorFailure {
    /// A column had no non-zero left: singular whatever the values.
    StructurallySingular,
    /// Anything else (out of memory, index overflow), with faer's message.
    Other(String),
}

/// Numeric factorisation of `a` with the analysis `sym` (of the same pattern), using `par`.
pub(crate) fn factor(
    sym: Symbolic,
    a: SparseColMatRef<'_, usize, f64>,
) -> Result<RealLu, FactorFailure> {
    // faer is built without its "rayon" feature (see crates/cavern-evolve/Cargo.toml)
    let par = Par::Seq;
    let n = a.ncols();
    let norm1 = (0..n)
        .map(|j| a.val_of_col(j).iter().map(|v| v.abs()).sum::<f64>())
        .fold(0.0, f64::max);
    let engine = match sym {
        Symbolic::Multifrontal(plan) => {
            Engine::Multifrontal(multifrontal::factor(plan, a, par).map_err(FactorFailure::Other)?)
        }
        Symbolic::PartialPivoting(sym) => Engine::PartialPivoting(factor_pp(sym, a, par)?),
    };
    Ok(RealLu {
        n,
        engine,
        par,
        norm1,
    })
}

fn factor_pp(
    sym: PpSymbolic,
    a: SparseColMatRef<'_, usize, f64>,
    par: Par,
) -> Result<PpLu, FactorFailure> {
    let n = sym.n;
    let other = |e: String| FactorFailure::Other(e);
    let at = a.transpose().to_col_major().map_err(|e| other(oom(e)))?;
    let mut row_fwd = vec![0usize; n];
    let mut row_inv = vec![0usize; n];
    let mut lu = SupernodalLu::<usize, f64>::new();
    {
        let req = supernodal::factorize_supernodal_numeric_lu_scratch::<usize, f64>(
            &sym.supernodal,
            Default::default(),
        );
        let mut mem = MemBuffer::try_new(req).map_err(|e| other(oom(e)))?;
        supernodal::factorize_supernodal_numeric_lu(
            &mut row_fwd,
            &mut row_inv,
            &mut lu,
            a,
            at.as_ref(),
            PermRef::new_checked(&sym.col_fwd, &sym.col_inv, n),
            &sym.supernodal,
            par,
            MemStack::new(&mut mem),
            Default::default(),
        )
        .map_err(|e| match e {
            LuError::SymbolicSingular { .. } => FactorFailure::StructurallySingular,
            e => other(oom(e)),
        })?;
    }
    let scratch = MemBuffer::try_new(StackReq::any_of(&[
        supernodal::solve_in_place_scratch::<usize, f64>(n, 2, par),
        supernodal::solve_transpose_in_place_scratch::<usize, f64>(n, 2, par),
    ]))
    .map_err(|e| other(oom(e)))?;
    Ok(PpLu {
        col_fwd: sym.col_fwd,
        col_inv: sym.col_inv,
        row_fwd,
        row_inv,
        lu,
        scratch,
    })
}

impl RealLu {
    /// The largest |multiplier| of the multifrontal L₂₁ blocks (pivot growth indicator), or 1
    /// for partial pivoting.
    pub fn max_multiplier(&self) -> f64 {
        match &self.engine {
            Engine::Multifrontal(f) => f.max_multiplier,
            Engine::PartialPivoting(_) => 1.0,
        }
    }

    /// X ← A⁻¹ X for the columns of the column-major `x` (length a multiple of n).
    pub fn solve(&mut self, x: &mut [f64]) {
        let (n, k) = (self.n, x.len() / self.n.max(1));
        match &mut self.engine {
            Engine::Multifrontal(f) => f.solve(x),
            Engine::PartialPivoting(p) => p.lu.solve_in_place_with_conj(
                PermRef::new_checked(&p.row_fwd, &p.row_inv, n),
                PermRef::new_checked(&p.col_fwd, &p.col_inv, n),
                faer::Conj::No,
                MatMut::from_column_major_slice_mut(x, n, k),
                self.par,
                MemStack::new(&mut p.scratch),
            ),
        }
    }

    /// x ← A⁻ᵀ x.
    fn solve_transpose(&mut self, x: &mut [f64]) {
        let n = self.n;
        match &mut self.engine {
            Engine::Multifrontal(f) => f.solve_transpose(x),
            Engine::PartialPivoting(p) => p.lu.solve_transpose_in_place_with_conj(
                PermRef::new_checked(&p.row_fwd, &p.row_inv, n),
                PermRef::new_checked(&p.col_fwd, &p.col_inv, n),
                faer::Conj::No,
                MatMut::from_column_major_slice_mut(x, n, 1),
                self.par,
                MemStack::new(&mut p.scratch),
            ),
        }
    }

    /// Estimate of the reciprocal condition number 1/(‖A‖₁ ‖A⁻¹‖₁), by Hager's method with
    /// Higham's refinements (W. W. Hager, "Condition estimates", SIAM J. Sci. Stat. Comput. 5,
    /// 311 (1984); N. J. Higham, "FORTRAN codes for estimating the one-norm of a real or complex
    /// matrix", ACM TOMS 14, 381 (1988), algorithm of LAPACK's xLACON): at most 5 pairs of solves
    /// with A and Aᵀ plus one extra solve. The estimate of ‖A⁻¹‖₁ is a lower bound (almost always
    /// within a factor 3), so the returned rcond is an upper bound. 0 when a solve overflows or
    /// yields NaN (an exactly zero pivot).
    pub fn rcond(&mut self) -> f64 {
        let n = self.n;
        if n == 0 {
            return 1.0;
        }
        let mut x = vec![1.0 / n as f64; n];
        let mut est = 0.0f64;
        let mut last_j = usize::MAX;
        for iter in 0..5 {
            self.solve(&mut x);
            let y_norm: f64 = x.iter().map(|v| v.abs()).sum();
            if !y_norm.is_finite() {
                return 0.0;
            }
            if iter > 0 && y_norm <= est {
                break;
            }
            est = y_norm;
            let mut xi: Vec<f64> = x
                .iter()
                .map(|&v| if v >= 0.0 { 1.0 } else { -1.0 })
                .collect();
            self.solve_transpose(&mut xi);
            let (j, zmax) = xi.iter().enumerate().fold((0, -1.0), |acc, (i, v)| {
                if v.abs() > acc.1 {
                    (i, v.abs())
                } else {
                    acc
                }
            });
            if !zmax.is_finite() {
                return 0.0;
            }
            if j == last_j {
                break;
            }
            last_j = j;
            x.iter_mut().for_each(|v| *v = 0.0);
            x[j] = 1.0;
        }
        // Higham's extra vector, which guards against the rare cases the iteration misses
        let mut x: Vec<f64> = (0..n)
            .map(|i| {
                let s = if i % 2 == 0 { 1.0 } else { -1.0 };
                s * (1.0 + i as f64 / (n.max(2) - 1) as f64)
            })
            .collect();
        self.solve(&mut x);
        let alt: f64 = 2.0 * x.iter().map(|v| v.abs()).sum::<f64>() / (3.0 * n as f64);
        if !alt.is_finite() {
            return 0.0;
        }
        let inv_norm = est.max(alt);
        if inv_norm > 0.0 && self.norm1 > 0.0 {
            1.0 / (self.norm1 * inv_norm)
        } else {
            0.0
        }
    }
}
