//! Sparse complex operators in compressed-row (CSR) form, and their construction from local
//! operators on one tensor factor.

use crate::space::Space;
use num_complex::Complex64 as C64;

/// A square sparse complex matrix in compressed-row storage.
///
/// Rows are sorted by column; duplicate entries are summed on construction and exact zeros dropped.
#[derive(Clone, Debug, PartialEq)]
pub struct SparseOp {
    dim: usize,
    ptr: Vec<usize>,
    col: Vec<usize>,
    val: Vec<C64>,
}

impl SparseOp {
    /// The zero operator on a space of dimension `dim`.
    pub fn zero(dim: usize) -> Self {
        Self {
            dim,
            ptr: vec![0; dim + 1],
            col: Vec::new(),
            val: Vec::new(),
        }
    }

    /// The identity on a space of dimension `dim`.
    pub fn identity(dim: usize) -> Self {
        Self {
            dim,
            ptr: (0..=dim).collect(),
            col: (0..dim).collect(),
            val: vec![C64::new(1.0, 0.0); dim],
        }
    }

    /// Build from (row, column, value) triplets; duplicates are summed, zeros dropped.
    ///
    /// # Panics
    /// If a row or column index is `>= dim`.
    pub fn from_triplets(dim: usize, mut t: Vec<(usize, usize, C64)>) -> Self {
        t.sort_by_key(|&(r, c, _)| (r, c));
        let mut ptr = vec![0usize; dim + 1];
        let mut col = Vec::with_capacity(t.len());
        let mut val: Vec<C64> = Vec::with_capacity(t.len());
        let mut last: Option<(usize, usize)> = None;
        for (r, c, v) in t {
            assert!(
                r < dim && c < dim,
                "triplet ({r},{c}) outside dimension {dim}"
            );
            if last == Some((r, c)) {
                // invariant: `last` is only set after pushing an entry
                *val.last_mut().expect("entry pushed for `last`") += v;
            } else {
                col.push(c);
                val.push(v);
                ptr[r + 1] += 1;
                last = Some((r, c));
            }
        }
        for r in 0..dim {
            ptr[r + 1] += ptr[r];
        }
        Self { dim, ptr, col, val }.pruned()
    }

    fn pruned(self) -> Self {
        let mut t = Vec::with_capacity(self.val.len());
        for r in 0..self.dim {
            for k in self.ptr[r]..self.ptr[r + 1] {
                if self.val[k] != C64::new(0.0, 0.0) {
                    t.push((r, self.col[k], self.val[k]));
                }
            }
        }
        if t.len() == self.val.len() {
            return self;
        }
        Self::from_sorted_unique(self.dim, t)
    }

    fn from_sorted_unique(dim: usize, t: Vec<(usize, usize, C64)>) -> Self {
        let mut ptr = vec![0usize; dim + 1];
        let mut col = Vec::with_capacity(t.len());
        let mut val = Vec::with_capacity(t.len());
        for (r, c, v) in t {
            ptr[r + 1] += 1;
            col.push(c);
            val.push(v);
        }
        for r in 0..dim {
            ptr[r + 1] += ptr[r];
        }
        Self { dim, ptr, col, val }
    }

    /// Embed a local `n × n` matrix (row-major, `local.len() == n*n`) acting on factor `k` of
    /// `space`: returns I ⊗ … ⊗ A ⊗ … ⊗ I.
    ///
    /// # Panics
    /// If `local.len()` is not the square of the factor's dimension.
    pub fn local(space: &Space, k: usize, local: &[C64]) -> Self {
        let n = space.factors()[k].dim();
        assert_eq!(
            local.len(),
            n * n,
            "local operator has the wrong size for factor {k}"
        );
        let s = space.stride(k);
        let mut t = Vec::new();
        for r in 0..space.dim() {
            let p = space.digit(r, k);
            for q in 0..n {
                let a = local[p * n + q];
                if a != C64::new(0.0, 0.0) {
                    t.push((r, r + q * s - p * s, a));
                }
            }
        }
        Self::from_triplets(space.dim(), t)
    }

    /// Dimension d (the operator is d × d).
    pub fn dim(&self) -> usize {
        self.dim
    }

    /// Number of stored non-zeros.
    pub fn nnz(&self) -> usize {
        self.val.len()
    }

    /// Entries of row `r` as (column, value) pairs, columns ascending.
    pub fn row(&self, r: usize) -> impl Iterator<Item = (usize, C64)> + '_ {
        let range = self.ptr[r]..self.ptr[r + 1];
        self.col[range.clone()]
            .iter()
            .copied()
            .zip(self.val[range].iter().copied())
    }

    /// Row pointer, column and value arrays (CSR).
    pub fn raw(&self) -> (&[usize], &[usize], &[C64]) {
        (&self.ptr, &self.col, &self.val)
    }

    /// All entries as (row, column, value) triplets.
    pub fn triplets(&self) -> Vec<(usize, usize, C64)> {
        let mut t = Vec::with_capacity(self.nnz());
        for r in 0..self.dim {
            t.extend(self.row(r).map(|(c, v)| (r, c, v)));
        }
        t
    }

    /// Hermitian adjoint A†.
    pub fn adjoint(&self) -> Self {
        let t = self
            .triplets()
            .into_iter()
            .map(|(r, c, v)| (c, r, v.conj()))
            .collect();
        Self::from_triplets(self.dim, t)
    }

    /// c · A.
    pub fn scaled(&self, c: C64) -> Self {
        let mut out = self.clone();
        out.val.iter_mut().for_each(|v| *v *= c);
        out.pruned()
    }

    /// A + B.
    ///
    /// # Panics
    /// If the dimensions differ.
    pub fn plus(&self, other: &Self) -> Self {
        assert_eq!(self.dim, other.dim);
        let mut t = self.triplets();
        t.extend(other.triplets());
        Self::from_triplets(self.dim, t)
    }

    /// Matrix product A·B.
    ///
    /// # Panics
    /// If the dimensions differ.
    pub fn times(&self, other: &Self) -> Self {
        assert_eq!(self.dim, other.dim);
        let mut t = Vec::new();
        for r in 0..self.dim {
            for (k, a) in self.row(r) {
                for (c, b) in other.row(k) {
                    t.push((r, c, a * b));
                }
            }
        }
        Self::from_triplets(self.dim, t)
    }

    /// True if every row holds at most one non-zero (a "monomial" operator such as a, a†, σ⁻, σᶻ
    /// and their products). The master-equation kernel requires this of jump operators.
    pub fn is_row_monomial(&self) -> bool {
        (0..self.dim).all(|r| self.ptr[r + 1] - self.ptr[r] <= 1)
    }

    /// True if every stored entry lies on the diagonal.
    pub fn is_diagonal(&self) -> bool {
        (0..self.dim).all(|r| self.row(r).all(|(c, _)| c == r))
    }

    /// y = A x.
    ///
    /// # Panics
    /// If `x` or `y` does not have length d.
    pub fn apply(&self, x: &[C64], y: &mut [C64]) {
        assert!(x.len() == self.dim && y.len() == self.dim);
        for r in 0..self.dim {
            y[r] = self.row(r).map(|(c, v)| v * x[c]).sum();
        }
    }

    /// Largest |A_rc − conj(A_cr)| (zero for a Hermitian operator).
    pub fn hermiticity_defect(&self) -> f64 {
        let adj = self.adjoint();
        let diff = self.plus(&adj.scaled(C64::new(-1.0, 0.0)));
        diff.val.iter().map(|v| v.norm()).fold(0.0, f64::max)
    }

    /// Dense row-major copy (for tests and small checks).
    pub fn to_dense(&self) -> Vec<C64> {
        let mut m = vec![C64::new(0.0, 0.0); self.dim * self.dim];
        for r in 0..self.dim {
            for (c, v) in self.row(r) {
                m[r * self.dim + c] = v;
            }
        }
        m
    }
}

/// Local matrices (row-major) in the conventions of [`crate::space`].
pub mod local {
    use num_complex::Complex64 as C64;

    const O: C64 = C64::new(0.0, 0.0);
    const I: C64 = C64::new(1.0, 0.0);

    /// σ⁻ = |g⟩⟨e| in the (g, e) basis.
    pub fn lowering() -> Vec<C64> {
        vec![O, I, O, O]
    }
    /// σ⁺ = |e⟩⟨g|.
    pub fn raising() -> Vec<C64> {
        vec![O, O, I, O]
    }
    /// σᶻ = diag(−1, +1).
    pub fn pauli_z() -> Vec<C64> {
        vec![-I, O, O, I]
    }
    /// σˣ.
    pub fn pauli_x() -> Vec<C64> {
        vec![O, I, I, O]
    }
    /// σʸ = i|g⟩⟨e| − i|e⟩⟨g| in the (g, e) basis, so that σʸ = i(σ⁻ − σ⁺) and [σˣ, σʸ] = 2iσᶻ.
    pub fn pauli_y() -> Vec<C64> {
        vec![O, C64::new(0.0, 1.0), C64::new(0.0, -1.0), O]
    }
    /// Annihilation operator a on `levels` Fock states: a|n⟩ = √n |n−1⟩.
    pub fn annihilation(levels: usize) -> Vec<C64> {
        let mut m = vec![O; levels * levels];
        for n in 1..levels {
            m[(n - 1) * levels + n] = C64::new((n as f64).sqrt(), 0.0);
        }
        m
    }
    /// Number operator a†a on `levels` Fock states.
    pub fn number(levels: usize) -> Vec<C64> {
        let mut m = vec![O; levels * levels];
        for n in 0..levels {
            m[n * levels + n] = C64::new(n as f64, 0.0);
        }
        m
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pauli_algebra_holds_in_the_embedding() {
        // [σˣ, σʸ] = 2iσᶻ (textbook Pauli algebra, e.g. Sakurai, Modern Quantum Mechanics)
        let s = Space::new(2, &[3]).unwrap();
        let x = SparseOp::local(&s, 1, &local::pauli_x());
        let y = SparseOp::local(&s, 1, &local::pauli_y());
        let z = SparseOp::local(&s, 1, &local::pauli_z());
        let comm = x.times(&y).plus(&y.times(&x).scaled(C64::new(-1.0, 0.0)));
        assert_eq!(comm.to_dense(), z.scaled(C64::new(0.0, 2.0)).to_dense());
        // σ⁺σ⁻ = (1 + σᶻ)/2
        let up = SparseOp::local(&s, 1, &local::raising());
        let dn = SparseOp::local(&s, 1, &local::lowering());
        let pe = up.times(&dn);
        let expect = SparseOp::identity(s.dim())
            .plus(&z)
            .scaled(C64::new(0.5, 0.0));
        assert_eq!(pe.to_dense(), expect.to_dense());
    }

    #[test]
    fn truncated_ladder_commutator() {
        // [a, a†] = 1 except on the top level, where it is 1 − levels (plain truncation).
        let s = Space::new(0, &[4]).unwrap();
        let a = SparseOp::local(&s, 0, &local::annihilation(4));
        let ad = a.adjoint();
        let c = a
            .times(&ad)
            .plus(&ad.times(&a).scaled(C64::new(-1.0, 0.0)))
            .to_dense();
        for n in 0..4 {
            let want = if n < 3 { 1.0 } else { -3.0 };
            // entries are differences of products like √3·√3: allow a few ulps of n
            assert!((c[n * 4 + n] - C64::new(want, 0.0)).norm() <= 8.0 * f64::EPSILON * 4.0);
        }
        assert!(a.is_row_monomial());
        assert!(ad.times(&a).is_diagonal());
    }
}
