//! GMRES preconditioner: the inverse of the no-jump part of the Liouvillian.
//!
//! 𝓛ρ = Kρ + ρK† + Σₖ LₖρLₖ† with K = −iH − ½ Σₖ Lₖ†Lₖ. The preconditioner drops the jump
//! ("recycling") terms and inverts the rest, 𝓟ρ = Kρ + ρK†, a Sylvester (Lyapunov-type) equation
//! that keeps all of the coherent dynamics, including every coupling and drive. With the
//! eigen-decomposition K = V Λ V⁻¹ (dense, once), 𝓟 is diagonal in the basis V ⊗ V̄:
//!
//! ```text
//! 𝓟⁻¹Y = V [(V⁻¹ Y V⁻†) ⊘ D] V†,   D_ij = λᵢ + conj(λⱼ)
//! ```
//!
//! (the elimination of a Sylvester equation through a decomposition of its coefficient matrix:
//! R. H. Bartels & G. W. Stewart, Commun. ACM 15, 820 (1972), who use the Schur form; the
//! eigenbasis is used here because faer exposes the eigen-decomposition but not the complex Schur
//! form). Re λ ≤ 0 since −½ΣL†L is negative semi-definite; a state that no jump empties and that
//! H does not couple to others (e.g. the ground state of an undriven, decaying network) has
//! Re λ = 0 and makes 𝓟 singular, so Re D is clamped to at most −δ (δ > 0 given by the caller).
//! Clamping keeps D_ji = conj(D_ij), hence 𝓟⁻¹ maps Hermitian matrices to Hermitian matrices (the
//! result is re-symmetrised against rounding). Exactness is not needed: GMRES uses 𝓟⁻¹ as a fixed
//! linear map and checks the true residual.
//!
//! Cost: an O(d³) eigen-decomposition once, then four d×d complex matrix products per
//! application (two of them Hermitian, formed as lower triangles: 3 d³ complex multiply-adds), split into fixed column blocks over the rayon pool (the same blocks for any
//! thread count, so results do not depend on it). Memory: five d×d complex matrices.

use super::{Par, C64};
use faer::linalg::matmul::matmul;
use faer::reborrow::ReborrowMut;
use faer::traits::Conjugate;
use faer::{Accum, Mat, MatMut, MatRef};
use rayon::prelude::*;

/// Columns per block of the parallel matrix products.
const BLOCK: usize = 64;

/// 𝓟⁻¹ for [`super::steady_state_gmres`].
pub(super) struct Sylvester {
    d: usize,
    par: Par,
    /// Right eigenvectors of K (columns).
    v: Mat<C64>,
    /// V⁻¹.
    vinv: Mat<C64>,
    /// 1 / D, row-major.
    inv_den: Vec<C64>,
    work_a: Mat<C64>,
    work_b: Mat<C64>,
    /// Row-major d×d buffer.
    buf: Vec<C64>,
}

/// Why the preconditioner could not be built.
#[derive(Debug)]
pub(super) struct SetupFailure(pub String);

/// dst = a · b, with the columns of dst in fixed blocks of [`BLOCK`] (the same blocks whether
/// they run in turn or spread over the pool, so the result does not depend on the threads).
/// `lower`: only rows j0… of each block starting at column j0 are formed, i.e. the lower
/// triangle (and the upper part of the diagonal blocks) — enough when the product is Hermitian.
fn product<B>(par: Par, lower: bool, dst: MatMut<'_, C64>, a: MatRef<'_, C64>, b: MatRef<'_, B>)
where
    B: Conjugate<Canonical = C64> + Sync,
{
    let one = C64::new(1.0, 0.0);
    let n = dst.ncols();
    let mut blocks = Vec::with_capacity(n.div_ceil(BLOCK));
    let mut rest = dst;
    let mut start = 0;
    while start < n {
        let w = BLOCK.min(n - start);
        let (left, right) = rest.split_at_col_mut(w);
        blocks.push((start, w, left));
        rest = right;
        start += w;
    }
    let run = |(start, w, block): (usize, usize, MatMut<'_, C64>)| {
        let r0 = if lower { start } else { 0 };
        let rows = block.nrows() - r0;
        matmul(
            block.subrows_mut(r0, rows),
            Accum::Replace,
            a.subrows(r0, rows),
            b.subcols(start, w),
            one,
            faer::Par::Seq,
        );
    };
    if par == Par::Seq {
        blocks.into_iter().for_each(run);
    } else {
        blocks.into_par_iter().for_each(run);
    }
}

/// Fill the strict upper triangle of a Hermitian matrix from its lower triangle.
fn mirror_lower(m: &mut MatMut<'_, C64>) {
    let d = m.nrows();
    for c in 1..d {
        for r in 0..c {
            m[(r, c)] = m[(c, r)].conj();
        }
    }
}

impl Sylvester {
    /// Builds 𝓟⁻¹ for K (row-major d×d); `delta` > 0 is the clamp on Re D.
    pub(super) fn new(d: usize, k: &[C64], delta: f64, par: Par) -> Result<Self, SetupFailure> {
        assert_eq!(k.len(), d * d);
        let km = MatRef::from_row_major_slice(k, d, d);
        let (lambda, v) = super::dense_eigen(km)
            .map_err(|e| SetupFailure(format!("eigen-decomposition of K failed: {e:?}")))?;
        if lambda.iter().any(|l| !l.is_finite())
            || v.col_iter().any(|c| c.iter().any(|x| !x.is_finite()))
        {
            return Err(SetupFailure(
                "eigen-decomposition of K is not finite".into(),
            ));
        }
        let vinv = {
            use faer::linalg::solvers::DenseSolveCore;
            v.partial_piv_lu().inverse()
        };
        // check V⁻¹V = I: a defective (or nearly defective) K gives a useless basis
        let mut check = Mat::<C64>::zeros(d, d);
        product(par, false, check.as_mut(), vinv.as_ref(), v.as_ref());
        let mut defect = 0.0f64;
        for c in 0..d {
            for r in 0..d {
                let e = if r == c {
                    check[(r, c)] - 1.0
                } else {
                    check[(r, c)]
                };
                defect = defect.max(e.norm());
            }
        }
        if !(defect <= 1e-6) {
            return Err(SetupFailure(format!(
                "the eigenvectors of K are numerically dependent (|V⁻¹V − I| = {defect:.1e})"
            )));
        }
        let mut inv_den = vec![C64::new(0.0, 0.0); d * d];
        for i in 0..d {
            for j in 0..d {
                let den = lambda[i] + lambda[j].conj();
                inv_den[i * d + j] = C64::new(den.re.min(-delta), den.im).inv();
            }
        }
        Ok(Self {
            d,
            par,
            v,
            vinv,
            inv_den,
            work_a: check,
            work_b: Mat::zeros(d, d),
            buf: vec![C64::new(0.0, 0.0); d * d],
        })
    }

    /// out = 𝓟⁻¹ x, both in the kernel's panel layout (Hermitian in, Hermitian out). The two
    /// products with Hermitian results (V⁻¹YV⁻† and VWV†) form only their lower triangles.
    pub(super) fn apply(&mut self, x: &[C64], out: &mut [C64]) {
        let d = self.d;
        crate::lindblad::from_panels(d, x, &mut self.buf);
        let y = MatRef::from_row_major_slice(&self.buf, d, d);
        product(self.par, false, self.work_a.as_mut(), self.vinv.as_ref(), y);
        product(
            self.par,
            true,
            self.work_b.as_mut(),
            self.work_a.as_ref(),
            self.vinv.adjoint(),
        );
        // W ⊘ D on the lower triangle, then W is completed as Hermitian (D_ji = conj D_ij)
        for j in 0..d {
            let col = self.work_b.col_mut(j);
            for (i, w) in col.iter_mut().enumerate().skip(j) {
                *w *= self.inv_den[i * d + j];
            }
        }
        mirror_lower(&mut self.work_b.as_mut());
        product(
            self.par,
            false,
            self.work_a.as_mut(),
            self.v.as_ref(),
            self.work_b.as_ref(),
        );
        let mut z = MatMut::from_row_major_slice_mut(&mut self.buf, d, d);
        product(
            self.par,
            true,
            z.rb_mut(),
            self.work_a.as_ref(),
            self.v.adjoint(),
        );
        // the lower triangle of Z is formed; its diagonal is real up to rounding
        for r in 0..d {
            z[(r, r)].im = 0.0;
        }
        mirror_lower(&mut z);
        crate::lindblad::to_panels(d, &self.buf, out);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// 𝓟⁻¹ inverts 𝓟ρ = Kρ + ρK† (checked against the definition, dense products) for a
    /// non-normal K = −iH − ½G with G positive definite, so that no clamping happens, and maps
    /// Hermitian matrices to Hermitian matrices; the same for any thread count.
    #[test]
    fn inverts_the_no_jump_part() {
        let d = 12;
        let mut seed = 0x9e37_79b9_7f4a_7c15u64;
        let mut rnd = || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            (seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let mut h = vec![C64::new(0.0, 0.0); d * d];
        let mut b = vec![C64::new(0.0, 0.0); d * d];
        for r in 0..d {
            for c in 0..d {
                b[r * d + c] = C64::new(rnd(), rnd());
            }
            for c in 0..=r {
                let v = C64::new(rnd(), if r == c { 0.0 } else { rnd() });
                h[r * d + c] = v;
                h[c * d + r] = v.conj();
            }
        }
        // G = B†B + I/2 (positive definite), K = −iH − G/2
        let mut k = vec![C64::new(0.0, 0.0); d * d];
        for r in 0..d {
            for c in 0..d {
                let g: C64 = (0..d)
                    .map(|i| b[i * d + r].conj() * b[i * d + c])
                    .sum::<C64>()
                    + if r == c {
                        C64::new(0.5, 0.0)
                    } else {
                        C64::new(0.0, 0.0)
                    };
                k[r * d + c] = C64::new(0.0, -1.0) * h[r * d + c] - g * 0.5;
            }
        }
        let mut y = vec![C64::new(0.0, 0.0); d * d];
        for r in 0..d {
            for c in 0..=r {
                let v = C64::new(rnd(), if r == c { 0.0 } else { rnd() });
                y[r * d + c] = v;
                y[c * d + r] = v.conj();
            }
        }
        let mut results = Vec::new();
        for par in [Par::Seq, Par::Rayon] {
            let mut p = Sylvester::new(d, &k, 1e-12, par).expect("set-up");
            let mut yp = vec![C64::new(0.0, 0.0); d * d];
            crate::lindblad::to_panels(d, &y, &mut yp);
            let mut zp = vec![C64::new(0.0, 0.0); d * d];
            p.apply(&yp, &mut zp);
            let mut z = vec![C64::new(0.0, 0.0); d * d];
            crate::lindblad::from_panels(d, &zp, &mut z);
            // K Z + Z K† − Y
            let mut worst = 0.0f64;
            let mut scale = 0.0f64;
            for r in 0..d {
                for c in 0..d {
                    let mut v = -y[r * d + c];
                    for i in 0..d {
                        v += k[r * d + i] * z[i * d + c] + z[r * d + i] * k[c * d + i].conj();
                    }
                    worst = worst.max(v.norm());
                    scale = scale.max(y[r * d + c].norm());
                    assert_eq!(z[r * d + c], z[c * d + r].conj(), "Hermitian");
                }
            }
            // backward error of a solve through an eigenbasis: a few hundred ε times cond(V)
            assert!(worst <= 1e-11 * scale, "residual {worst:e}");
            results.push(z);
        }
        assert_eq!(results[0], results[1], "thread count changed the result");
    }
}
