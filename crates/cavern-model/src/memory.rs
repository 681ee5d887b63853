//! Associative memory: stored ±1 patterns, learning rules that turn them into a symmetric
//! coupling matrix, and the conversions of that matrix into terms of a [`crate::Network`].
//!
//! Conventions: a pattern entry ξᵢ = +1 means site i "up" = excited = σᶻ eigenvalue +1. The
//! coupling matrix J is dimensionless ("rule units"), symmetric with zero diagonal, and defines
//! the Hopfield energy E(s) = −½ Σᵢⱼ Jᵢⱼ sᵢ sⱼ and the local field hᵢ = Σⱼ Jᵢⱼ sⱼ.
//!
//! ```
//! use cavern_model::memory::{learn, LearningRule};
//! let patterns = vec![vec![1, -1, 1, -1], vec![1, 1, -1, -1]];
//! let j = learn(LearningRule::Hebbian, &patterns).unwrap();
//! assert_eq!(j.n(), 4);
//! // each stored pattern has a local field aligned with it
//! for p in &patterns {
//!     for i in 0..4 {
//!         assert!(j.local_field(p, i) * f64::from(p[i]) > 0.0);
//!     }
//! }
//! ```

/// A stored pattern: entries +1 / −1 (site i "up" = excited = +1 = σᶻ eigenvalue +1).
pub type Pattern = Vec<i8>;

/// How the coupling matrix is learned from the patterns.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LearningRule {
    /// Jᵢⱼ = (1/N) Σ_μ ξᵢ^μ ξⱼ^μ, i ≠ j (Hopfield, PNAS 79, 2554 (1982)).
    Hebbian,
    /// Pseudo-inverse (projection) rule J = (1/N) Ξ C⁻¹ Ξᵀ, C_μν = (1/N) Σᵢ ξᵢ^μ ξᵢ^ν, diagonal
    /// set to zero (Personnaz, Guyon & Dreyfus, J. Physique Lett. 46, L359 (1985)).
    Projection,
    /// Storkey's incremental rule (Storkey, ICANN 1997), zero diagonal.
    Storkey,
}

impl LearningRule {
    /// Lower-case name: `hebbian`, `projection` or `storkey`.
    pub fn name(&self) -> &'static str {
        match self {
            LearningRule::Hebbian => "hebbian",
            LearningRule::Projection => "projection",
            LearningRule::Storkey => "storkey",
        }
    }

    /// Parse a name as given by [`LearningRule::name`].
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "hebbian" => Some(LearningRule::Hebbian),
            "projection" => Some(LearningRule::Projection),
            "storkey" => Some(LearningRule::Storkey),
            _ => None,
        }
    }

    /// All rules, in a fixed order.
    pub fn all() -> [LearningRule; 3] {
        [
            LearningRule::Hebbian,
            LearningRule::Projection,
            LearningRule::Storkey,
        ]
    }
}

/// Errors from learning couplings or reading a coupling matrix.
#[derive(Debug, thiserror::Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum MemoryError {
    /// No pattern was given.
    #[error("no patterns to learn")]
    NoPatterns,
    /// The patterns have no sites.
    #[error("patterns have no entries")]
    EmptyPattern,
    /// A pattern's length differs from the first pattern's.
    #[error("pattern {index} has {len} entries, but pattern 0 has {expected}")]
    LengthMismatch {
        /// Index of the offending pattern.
        index: usize,
        /// Its length.
        len: usize,
        /// Length of pattern 0.
        expected: usize,
    },
    /// A pattern entry is not ±1.
    #[error("pattern {index} entry {site} is {value}; entries must be +1 or -1")]
    BadEntry {
        /// Index of the pattern.
        index: usize,
        /// Site index of the entry.
        site: usize,
        /// The entry.
        value: i8,
    },
    /// The projection rule needs linearly independent patterns.
    #[error(
        "projection rule: pattern {index} is (numerically) a linear combination of the earlier \
         patterns (residual {residual:.3e}); the patterns must be linearly independent"
    )]
    LinearlyDependent {
        /// First pattern found dependent on the earlier ones.
        index: usize,
        /// Squared norm of its component outside their span, divided by N.
        residual: f64,
    },
    /// A coupling matrix is not square.
    #[error("coupling matrix row {row} has {len} entries, expected {n}")]
    NotSquare {
        /// Row index.
        row: usize,
        /// Its length.
        len: usize,
        /// Number of rows.
        n: usize,
    },
    /// A coupling matrix entry is not finite.
    #[error("coupling matrix entry [{i}][{j}] = {value} is not finite")]
    NonFinite {
        /// Row.
        i: usize,
        /// Column.
        j: usize,
        /// Value.
        value: f64,
    },
    /// A coupling matrix is not symmetric.
    #[error("coupling matrix is not symmetric: [{i}][{j}] = {a} but [{j}][{i}] = {b}")]
    NotSymmetric {
        /// Row.
        i: usize,
        /// Column.
        j: usize,
        /// Entry (i, j).
        a: f64,
        /// Entry (j, i).
        b: f64,
    },
    /// A coupling matrix has a non-zero diagonal entry.
    #[error("coupling matrix diagonal entry [{i}][{i}] = {value}; the diagonal must be 0")]
    NonzeroDiagonal {
        /// Index.
        i: usize,
        /// Value.
        value: f64,
    },
}

/// Symmetric N×N coupling matrix with zero diagonal, dimensionless ("rule units"); energy
/// E(s) = −½ Σᵢⱼ Jᵢⱼ sᵢ sⱼ.
#[derive(Clone, Debug, PartialEq)]
pub struct Couplings {
    n: usize,
    /// Row-major N×N entries.
    data: Vec<f64>,
}

/// Relative tolerance for symmetry when reading a coupling matrix.
const SYMMETRY_TOLERANCE: f64 = 1e-9;

impl Couplings {
    /// From N rows of N entries.
    ///
    /// # Errors
    /// [`MemoryError`] if the matrix is not square, has a non-finite entry, is not symmetric
    /// (relative tolerance 1e-9 of the larger of the two entries) or has a non-zero diagonal.
    /// The stored matrix is the symmetric part ½(J + Jᵀ).
    pub fn from_rows(rows: &[Vec<f64>]) -> Result<Self, MemoryError> {
        let n = rows.len();
        for (row, r) in rows.iter().enumerate() {
            if r.len() != n {
                return Err(MemoryError::NotSquare {
                    row,
                    len: r.len(),
                    n,
                });
            }
            for (j, &value) in r.iter().enumerate() {
                if !value.is_finite() {
                    return Err(MemoryError::NonFinite { i: row, j, value });
                }
            }
        }
        let mut data = vec![0.0; n * n];
        for i in 0..n {
            if rows[i][i] != 0.0 {
                return Err(MemoryError::NonzeroDiagonal {
                    i,
                    value: rows[i][i],
                });
            }
            for j in 0..n {
                let (a, b) = (rows[i][j], rows[j][i]);
                if (a - b).abs() > SYMMETRY_TOLERANCE * a.abs().max(b.abs()) {
                    return Err(MemoryError::NotSymmetric { i, j, a, b });
                }
                data[i * n + j] = 0.5 * (a + b);
            }
        }
        Ok(Self { n, data })
    }

    /// Number of sites N.
    pub fn n(&self) -> usize {
        self.n
    }

    /// Jᵢⱼ.
    ///
    /// # Panics
    /// If `i` or `j` is ≥ N.
    #[inline]
    pub fn get(&self, i: usize, j: usize) -> f64 {
        assert!(
            i < self.n && j < self.n,
            "index ({i},{j}) outside N = {}",
            self.n
        );
        self.data[i * self.n + j]
    }

    /// Row i of J as a slice.
    ///
    /// # Panics
    /// If `i` ≥ N.
    #[inline]
    pub fn row(&self, i: usize) -> &[f64] {
        &self.data[i * self.n..(i + 1) * self.n]
    }

    /// The matrix as N rows of N entries.
    pub fn rows(&self) -> Vec<Vec<f64>> {
        (0..self.n).map(|i| self.row(i).to_vec()).collect()
    }

    /// E(s) = −½ Σᵢⱼ Jᵢⱼ sᵢ sⱼ.
    ///
    /// # Panics
    /// If `s.len()` ≠ N.
    pub fn energy(&self, s: &[i8]) -> f64 {
        assert_eq!(s.len(), self.n, "state length differs from N");
        -0.5 * (0..self.n)
            .map(|i| f64::from(s[i]) * self.local_field(s, i))
            .sum::<f64>()
    }

    /// Local field hᵢ = Σⱼ Jᵢⱼ sⱼ.
    ///
    /// # Panics
    /// If `s.len()` ≠ N or `i` ≥ N.
    pub fn local_field(&self, s: &[i8], i: usize) -> f64 {
        assert_eq!(s.len(), self.n, "state length differs from N");
        self.row(i)
            .iter()
            .zip(s)
            .map(|(&j, &x)| j * f64::from(x))
            .sum()
    }

    /// Tolerance below which a local field of site i counts as zero (a tie): 1e-12 · Σⱼ |Jᵢⱼ|,
    /// i.e. rounding error of the sum.
    pub fn tie_tolerance(&self, i: usize) -> f64 {
        1e-12 * self.row(i).iter().map(|x| x.abs()).sum::<f64>()
    }

    /// Eigenvalues in ascending order, by the cyclic Jacobi method (O(N³) per sweep; meant for
    /// N up to a few hundred).
    pub fn spectrum(&self) -> Vec<f64> {
        symmetric_eigenvalues(self.n, self.data.clone())
    }

    /// c · J.
    pub fn scaled(&self, c: f64) -> Couplings {
        Couplings {
            n: self.n,
            data: self.data.iter().map(|x| c * x).collect(),
        }
    }
}

/// Eigenvalues (ascending) of a real symmetric n×n row-major matrix by cyclic Jacobi rotations
/// (Golub & Van Loan, Matrix Computations, §8.5), until the off-diagonal norm is below
/// ε·‖A‖_F.
fn symmetric_eigenvalues(n: usize, mut a: Vec<f64>) -> Vec<f64> {
    let frob: f64 = a.iter().map(|x| x * x).sum::<f64>().sqrt();
    let tol = f64::EPSILON * frob;
    for _sweep in 0..100 {
        let off: f64 = (0..n)
            .flat_map(|i| (0..n).filter(move |&j| j != i).map(move |j| (i, j)))
            .map(|(i, j)| a[i * n + j] * a[i * n + j])
            .sum::<f64>()
            .sqrt();
        if off <= tol {
            break;
        }
        for p in 0..n {
            for q in (p + 1)..n {
                let apq = a[p * n + q];
                if apq == 0.0 {
                    continue;
                }
                let (app, aqq) = (a[p * n + p], a[q * n + q]);
                // rotation angle: tan 2θ = 2a_pq/(a_qq − a_pp), t = tan θ the smaller root
                let theta = (aqq - app) / (2.0 * apq);
                let t = theta.signum() / (theta.abs() + (theta * theta + 1.0).sqrt());
                let c = 1.0 / (t * t + 1.0).sqrt();
                let s = t * c;
                for k in 0..n {
                    let (akp, akq) = (a[k * n + p], a[k * n + q]);
                    a[k * n + p] = c * akp - s * akq;
                    a[k * n + q] = s * akp + c * akq;
                }
                for k in 0..n {
                    let (apk, aqk) = (a[p * n + k], a[q * n + k]);
                    a[p * n + k] = c * apk - s * aqk;
                    a[q * n + k] = s * apk + c * aqk;
                }
            }
        }
    }
    let mut ev: Vec<f64> = (0..n).map(|i| a[i * n + i]).collect();
    ev.sort_by(f64::total_cmp);
    ev
}

/// Check the patterns and return N.
fn check_patterns(patterns: &[Pattern]) -> Result<usize, MemoryError> {
    let n = patterns.first().ok_or(MemoryError::NoPatterns)?.len();
    if n == 0 {
        return Err(MemoryError::EmptyPattern);
    }
    for (index, p) in patterns.iter().enumerate() {
        if p.len() != n {
            return Err(MemoryError::LengthMismatch {
                index,
                len: p.len(),
                expected: n,
            });
        }
        if let Some((site, &value)) = p.iter().enumerate().find(|(_, &v)| v != 1 && v != -1) {
            return Err(MemoryError::BadEntry { index, site, value });
        }
    }
    Ok(n)
}

/// Learn the coupling matrix of `patterns` with `rule`.
///
/// - Hebbian: Jᵢⱼ = (1/N) Σ_μ ξᵢ^μ ξⱼ^μ, i ≠ j (Hopfield 1982).
/// - Projection: J = (1/N) Ξ C⁻¹ Ξᵀ with C_μν = (1/N) Σᵢ ξᵢ^μ ξᵢ^ν, diagonal then set to 0
///   (Personnaz, Guyon & Dreyfus 1985). Every stored pattern is then a fixed point.
/// - Storkey: for each pattern ν in turn, Jᵢⱼ += (1/N)(ξᵢξⱼ − ξᵢ hⱼᵢ − hᵢⱼ ξⱼ) with
///   hᵢⱼ = Σ_{k≠i,j} Jᵢₖ ξₖ (Storkey 1997), zero diagonal.
///
/// # Errors
/// [`MemoryError`] if there are no patterns, lengths differ, an entry is not ±1, or (projection)
/// the patterns are linearly dependent.
pub fn learn(rule: LearningRule, patterns: &[Pattern]) -> Result<Couplings, MemoryError> {
    let n = check_patterns(patterns)?;
    let inv_n = 1.0 / n as f64;
    let mut data = vec![0.0; n * n];
    match rule {
        LearningRule::Hebbian => {
            for p in patterns {
                outer_add(&mut data, n, p, inv_n);
            }
        }
        LearningRule::Projection => {
            let x = projection_coefficients(patterns, n)?;
            // J_ij = (1/N) Σ_μ ξ_i^μ X_μj with X = C⁻¹ Ξᵀ
            for (p, xrow) in patterns.iter().zip(&x) {
                for i in 0..n {
                    let xi = f64::from(p[i]) * inv_n;
                    let row = &mut data[i * n..(i + 1) * n];
                    for (d, &xj) in row.iter_mut().zip(xrow) {
                        *d += xi * xj;
                    }
                }
            }
            // exact symmetry (the product is symmetric up to rounding)
            for i in 0..n {
                for j in (i + 1)..n {
                    let v = 0.5 * (data[i * n + j] + data[j * n + i]);
                    data[i * n + j] = v;
                    data[j * n + i] = v;
                }
            }
        }
        LearningRule::Storkey => {
            let mut h = vec![0.0; n];
            let mut delta = vec![0.0; n * n];
            for p in patterns {
                // full local field h_i = Σ_k J_ik ξ_k (J_ii = 0); then h_ij = h_i − J_ij ξ_j
                for i in 0..n {
                    h[i] = data[i * n..(i + 1) * n]
                        .iter()
                        .zip(p)
                        .map(|(&w, &x)| w * f64::from(x))
                        .sum();
                }
                for i in 0..n {
                    let xi = f64::from(p[i]);
                    for j in 0..n {
                        if i == j {
                            continue;
                        }
                        let xj = f64::from(p[j]);
                        let hij = h[i] - data[i * n + j] * xj;
                        let hji = h[j] - data[j * n + i] * xi;
                        delta[i * n + j] = inv_n * (xi * xj - xi * hji - hij * xj);
                    }
                }
                data.iter_mut().zip(&delta).for_each(|(d, x)| *d += x);
            }
        }
    }
    for i in 0..n {
        data[i * n + i] = 0.0;
    }
    Ok(Couplings { n, data })
}

/// J += c ξ ξᵀ.
fn outer_add(data: &mut [f64], n: usize, p: &[i8], c: f64) {
    for i in 0..n {
        let ci = c * f64::from(p[i]);
        for (d, &x) in data[i * n..(i + 1) * n].iter_mut().zip(p) {
            *d += ci * f64::from(x);
        }
    }
}

/// X = C⁻¹ Ξᵀ (P rows of N) for the projection rule, with C = (1/N) ΞᵀΞ factorised by Cholesky.
fn projection_coefficients(patterns: &[Pattern], n: usize) -> Result<Vec<Vec<f64>>, MemoryError> {
    let np = patterns.len();
    let inv_n = 1.0 / n as f64;
    let mut c = vec![0.0; np * np];
    for a in 0..np {
        for b in 0..=a {
            let dot: i64 = patterns[a]
                .iter()
                .zip(&patterns[b])
                .map(|(&x, &y)| i64::from(x) * i64::from(y))
                .sum();
            c[a * np + b] = dot as f64 * inv_n;
            c[b * np + a] = c[a * np + b];
        }
    }
    // Cholesky C = L Lᵀ; the pivot L_kk² is |ξ^k − its projection on the earlier patterns|²/N
    let mut l = vec![0.0; np * np];
    for k in 0..np {
        for i in 0..=k {
            let s: f64 = (0..i).map(|m| l[k * np + m] * l[i * np + m]).sum();
            if i == k {
                let pivot = c[k * np + k] - s;
                // C_kk = 1; a pivot at rounding level means ξ^k lies in the span of the others
                if pivot <= 1e-10 {
                    return Err(MemoryError::LinearlyDependent {
                        index: k,
                        residual: pivot,
                    });
                }
                l[k * np + k] = pivot.sqrt();
            } else {
                l[k * np + i] = (c[k * np + i] - s) / l[i * np + i];
            }
        }
    }
    // solve L Lᵀ X = Ξᵀ column by column (each column j is the site-j entries of all patterns)
    let mut x = vec![vec![0.0; n]; np];
    let mut y = vec![0.0; np];
    for j in 0..n {
        for k in 0..np {
            let s: f64 = (0..k).map(|m| l[k * np + m] * y[m]).sum();
            y[k] = (f64::from(patterns[k][j]) - s) / l[k * np + k];
        }
        for k in (0..np).rev() {
            let s: f64 = ((k + 1)..np).map(|m| l[m * np + k] * x[m][j]).sum();
            x[k][j] = (y[k] - s) / l[k * np + k];
        }
    }
    Ok(x)
}

/// Overlap m = (1/N) Σᵢ ξᵢ sᵢ (`s` may be ⟨σᶻᵢ⟩ values in [−1, 1]).
///
/// # Panics
/// If the lengths differ or are zero.
pub fn overlap(pattern: &[i8], s: &[f64]) -> f64 {
    assert_eq!(pattern.len(), s.len(), "pattern and state lengths differ");
    assert!(!s.is_empty(), "overlap of empty vectors");
    pattern
        .iter()
        .zip(s)
        .map(|(&x, &y)| f64::from(x) * y)
        .sum::<f64>()
        / s.len() as f64
}

/// Conversion between the memory matrix and the Hamiltonian zz term Σᵢ<ⱼ Jᶻᵢⱼ σᶻᵢσᶻⱼ of
/// [`crate::Network::zz`]: with a scale c (angular frequency), Jᶻ = −c·J, so that
/// E = −½ΣJss matches H_zz/c.
pub fn zz_from_couplings(j: &Couplings, scale: f64) -> Vec<Vec<f64>> {
    (0..j.n())
        .map(|i| {
            (0..j.n())
                .map(|k| if i == k { 0.0 } else { -scale * j.get(i, k) })
                .collect()
        })
        .collect()
}

/// Mode realisation: one mode per pattern with LONGITUDINAL coupling g ξᵢ^μ (a_μ + a_μ†) σᶻᵢ;
/// returns the site×mode strength matrix `[site][mode]` = g·ξᵢ^μ (empty if there are no
/// patterns).
pub fn mode_strengths(patterns: &[Pattern], g: f64) -> Vec<Vec<f64>> {
    let n = patterns.first().map_or(0, Vec::len);
    (0..n)
        .map(|i| patterns.iter().map(|p| g * f64::from(p[i])).collect())
        .collect()
}

/// Mode-mediated zz coefficient after adiabatic elimination of a lossy mode with H_c = Δ a†a
/// and coupling gᵢ σᶻᵢ (a + a†): H_eff = −Σᵢⱼ gᵢ gⱼ Δ/(Δ²+κ²/4) σᶻᵢ σᶻⱼ, i.e. per pair i<j
/// Jᶻᵢⱼ = −2 gᵢ gⱼ Δ/(Δ²+κ²/4) (Reiter & Sørensen, Phys. Rev. A 85, 032111 (2012)).
/// Returns that Jᶻᵢⱼ (NaN if Δ = κ = 0).
pub fn mediated_zz(g_i: f64, g_j: f64, detuning: f64, loss: f64) -> f64 {
    -2.0 * g_i * g_j * detuning / (detuning * detuning + 0.25 * loss * loss)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rule_names_round_trip() {
        for r in LearningRule::all() {
            assert_eq!(LearningRule::parse(r.name()), Some(r));
        }
        assert_eq!(LearningRule::parse("Hebb"), None);
    }

    #[test]
    fn bad_patterns_are_refused() {
        assert_eq!(
            learn(LearningRule::Hebbian, &[]),
            Err(MemoryError::NoPatterns)
        );
        assert!(matches!(
            learn(LearningRule::Hebbian, &[vec![1, 1], vec![1]]),
            Err(MemoryError::LengthMismatch { index: 1, .. })
        ));
        assert!(matches!(
            learn(LearningRule::Storkey, &[vec![1, 0]]),
            Err(MemoryError::BadEntry { site: 1, .. })
        ));
        // ξ³ = ξ¹ is dependent; so is ξ² = −ξ¹
        let p = vec![vec![1, -1, 1, 1], vec![1, 1, -1, 1], vec![1, -1, 1, 1]];
        assert!(matches!(
            learn(LearningRule::Projection, &p),
            Err(MemoryError::LinearlyDependent { index: 2, .. })
        ));
        let p = vec![vec![1, -1, 1, 1], vec![-1, 1, -1, -1]];
        assert!(matches!(
            learn(LearningRule::Projection, &p),
            Err(MemoryError::LinearlyDependent { index: 1, .. })
        ));
    }

    #[test]
    fn coupling_matrix_checks() {
        assert!(Couplings::from_rows(&[vec![0.0, 1.0], vec![1.0, 0.0]]).is_ok());
        assert!(matches!(
            Couplings::from_rows(&[vec![0.0, 1.0], vec![0.5, 0.0]]),
            Err(MemoryError::NotSymmetric { .. })
        ));
        assert!(matches!(
            Couplings::from_rows(&[vec![1.0, 1.0], vec![1.0, 0.0]]),
            Err(MemoryError::NonzeroDiagonal { i: 0, .. })
        ));
        assert!(matches!(
            Couplings::from_rows(&[vec![0.0, 1.0], vec![1.0]]),
            Err(MemoryError::NotSquare { row: 1, .. })
        ));
    }

    #[test]
    fn hebbian_single_pattern_energy() {
        // one pattern: J = (ξξᵀ − 1)/N, so E(ξ) = −½ (N² − N)/N = −(N − 1)/2 (Hopfield 1982)
        let p = vec![1i8, -1, -1, 1, 1];
        let j = learn(LearningRule::Hebbian, std::slice::from_ref(&p)).unwrap();
        assert!((j.energy(&p) + 2.0).abs() < 1e-15);
        let zz = zz_from_couplings(&j, 2.0);
        assert_eq!(zz[0][1], 2.0 * 0.2);
        assert_eq!(zz[0][0], 0.0);
        assert_eq!(mode_strengths(&[p], 0.5)[1], vec![-0.5]);
    }
}
