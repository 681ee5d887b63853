//! Tensor-product Hilbert space of two-level sites and truncated bosonic modes.
//!
//! Ordering convention: the space is `site 0 ⊗ site 1 ⊗ … ⊗ site N−1 ⊗ mode 0 ⊗ … ⊗ mode M−1`; the
//! first factor is the most significant digit of a basis index and the last factor has stride 1
//! (row-major Kronecker order). A site's local basis is (|g⟩, |e⟩) = (0, 1), so σᶻ = diag(−1, +1).
//! A mode's local basis is the Fock states |0⟩ … |levels−1⟩.

/// What one tensor factor is.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FactorKind {
    /// A two-level site (spin); local dimension 2, basis (|g⟩, |e⟩).
    Site,
    /// A bosonic mode truncated to `levels` Fock states (|0⟩ … |levels−1⟩).
    Mode {
        /// Number of Fock levels kept (≥ 2).
        levels: usize,
    },
}

impl FactorKind {
    /// Local dimension of the factor.
    pub fn dim(self) -> usize {
        match self {
            FactorKind::Site => 2,
            FactorKind::Mode { levels } => levels,
        }
    }
}

/// A tensor-product space with its strides precomputed.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Space {
    factors: Vec<FactorKind>,
    strides: Vec<usize>,
    dim: usize,
    n_sites: usize,
}

impl Space {
    /// Space of `n_sites` two-level sites followed by modes with the given Fock truncations.
    ///
    /// Returns `None` if the total dimension overflows `usize`.
    pub fn new(n_sites: usize, mode_levels: &[usize]) -> Option<Self> {
        let mut factors = vec![FactorKind::Site; n_sites];
        factors.extend(
            mode_levels
                .iter()
                .map(|&levels| FactorKind::Mode { levels }),
        );
        let mut strides = vec![0; factors.len()];
        let mut dim: usize = 1;
        for (k, f) in factors.iter().enumerate().rev() {
            strides[k] = dim;
            dim = dim.checked_mul(f.dim())?;
        }
        Some(Self {
            factors,
            strides,
            dim,
            n_sites,
        })
    }

    /// Total Hilbert-space dimension d.
    pub fn dim(&self) -> usize {
        self.dim
    }

    /// Number of two-level sites N.
    pub fn n_sites(&self) -> usize {
        self.n_sites
    }

    /// Number of modes M.
    pub fn n_modes(&self) -> usize {
        self.factors.len() - self.n_sites
    }

    /// All factors in order (sites first, then modes).
    pub fn factors(&self) -> &[FactorKind] {
        &self.factors
    }

    /// Factor index of site `i`.
    pub fn site_factor(&self, i: usize) -> usize {
        i
    }

    /// Factor index of mode `m`.
    pub fn mode_factor(&self, m: usize) -> usize {
        self.n_sites + m
    }

    /// Fock truncation (levels) of mode `m`.
    pub fn mode_levels(&self, m: usize) -> usize {
        self.factors[self.mode_factor(m)].dim()
    }

    /// Stride of factor `k` in the basis index.
    pub fn stride(&self, k: usize) -> usize {
        self.strides[k]
    }

    /// Local state (digit) of factor `k` in basis index `r`.
    #[inline]
    pub fn digit(&self, r: usize, k: usize) -> usize {
        (r / self.strides[k]) % self.factors[k].dim()
    }

    /// Spin value s = ±1 of site `i` in basis index `r` (+1 for |e⟩, −1 for |g⟩).
    #[inline]
    pub fn spin(&self, r: usize, i: usize) -> f64 {
        if self.digit(r, i) == 1 {
            1.0
        } else {
            -1.0
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn strides_are_row_major_kronecker() {
        let s = Space::new(2, &[3]).unwrap();
        assert_eq!(s.dim(), 12);
        assert_eq!(s.stride(0), 6);
        assert_eq!(s.stride(1), 3);
        assert_eq!(s.stride(2), 1);
        // index 11 = site0 e, site1 e, mode n=2
        assert_eq!(s.digit(11, 0), 1);
        assert_eq!(s.digit(11, 1), 1);
        assert_eq!(s.digit(11, 2), 2);
        assert_eq!(s.spin(0, 0), -1.0);
        assert_eq!(s.mode_levels(0), 3);
    }

    #[test]
    fn overflow_is_reported() {
        assert!(Space::new(70, &[]).is_none());
    }
}
