//! Observables of a density matrix (and, for trajectories, of a state vector) on the spaces of
//! [`cavern_model`], plus the analysis quantities built from them.
//!
//! Layout: ρ is row-major d×d (`rho[r * d + c]` = ⟨r|ρ|c⟩) in the basis order of
//! [`cavern_model::Space`] (sites first, then modes; last factor fastest).
//!
//! ```
//! use cavern_model::{Space, ProductState, SpinInit, ModeInit};
//! use cavern_observe as obs;
//! let space = Space::new(2, &[4]).unwrap();
//! let st = ProductState { spins: vec![SpinInit::from_sign(1), SpinInit::from_sign(-1)],
//!                         modes: vec![ModeInit::Fock(2)] };
//! let rho = st.density(&space).unwrap();
//! assert_eq!(obs::spin_z(&space, &rho, 0), 1.0);
//! assert_eq!(obs::spin_z(&space, &rho, 1), -1.0);
//! assert_eq!(obs::photon_number(&space, &rho, 0), 2.0);
//! assert_eq!(obs::pattern_overlap(&[1.0, -1.0], &[1, -1]), 1.0);
//! ```

pub mod classical;

use cavern_model::op::local;
use cavern_model::{Space, C64};

/// Tr ρ.
pub fn trace(space: &Space, rho: &[C64]) -> C64 {
    let d = space.dim();
    (0..d).map(|r| rho[r * d + r]).sum()
}

/// |Tr ρ − 1|: how far the trace has drifted (numerical error of the integration).
pub fn trace_error(space: &Space, rho: &[C64]) -> f64 {
    (trace(space, rho) - C64::new(1.0, 0.0)).norm()
}

/// Purity Tr ρ² = Σ |ρ_rc|² (valid for Hermitian ρ); 1 for a pure state, 1/d when maximally mixed.
pub fn purity(rho: &[C64]) -> f64 {
    rho.iter().map(|z| z.norm_sqr()).sum()
}

/// Tr(Aρ) for a local operator A (row-major n×n) acting on factor `k`.
pub fn expect_local(space: &Space, rho: &[C64], k: usize, a: &[C64]) -> C64 {
    let d = space.dim();
    let n = space.factors()[k].dim();
    let s = space.stride(k);
    let mut acc = C64::new(0.0, 0.0);
    for r in 0..d {
        let p = space.digit(r, k);
        for q in 0..n {
            let v = a[p * n + q];
            if v != C64::new(0.0, 0.0) {
                // (Aρ)_rr = Σ_k A_rk ρ_kr with k = r + (q − p)s
                let kk = r + q * s - p * s;
                acc += v * rho[kk * d + r];
            }
        }
    }
    acc
}

/// ⟨σᶻᵢ⟩ (+1 excited, −1 ground).
pub fn spin_z(space: &Space, rho: &[C64], i: usize) -> f64 {
    let d = space.dim();
    (0..d).map(|r| space.spin(r, i) * rho[r * d + r].re).sum()
}

/// ⟨σˣᵢ⟩.
pub fn spin_x(space: &Space, rho: &[C64], i: usize) -> f64 {
    expect_local(space, rho, space.site_factor(i), &local::pauli_x()).re
}

/// ⟨σʸᵢ⟩ (σʸ = i(σ⁻ − σ⁺)).
pub fn spin_y(space: &Space, rho: &[C64], i: usize) -> f64 {
    expect_local(space, rho, space.site_factor(i), &local::pauli_y()).re
}

/// ⟨σ⁻ᵢ⟩ = ρ_eg of site i (complex coherence).
pub fn coherence(space: &Space, rho: &[C64], i: usize) -> C64 {
    expect_local(space, rho, space.site_factor(i), &local::lowering())
}

/// Photon number ⟨a†ₘaₘ⟩.
pub fn photon_number(space: &Space, rho: &[C64], m: usize) -> f64 {
    let d = space.dim();
    let k = space.mode_factor(m);
    (0..d)
        .map(|r| space.digit(r, k) as f64 * rho[r * d + r].re)
        .sum()
}

/// Field amplitude ⟨aₘ⟩.
pub fn field(space: &Space, rho: &[C64], m: usize) -> C64 {
    let levels = space.mode_levels(m);
    expect_local(
        space,
        rho,
        space.mode_factor(m),
        &local::annihilation(levels),
    )
}

/// Population of mode m's highest kept Fock level |levels − 1⟩. When it is not small the
/// truncation distorts the dynamics.
pub fn top_level_population(space: &Space, rho: &[C64], m: usize) -> f64 {
    let d = space.dim();
    let k = space.mode_factor(m);
    let top = space.mode_levels(m) - 1;
    (0..d)
        .filter(|&r| space.digit(r, k) == top)
        .map(|r| rho[r * d + r].re)
        .sum()
}

/// Fock-state distribution P(n) of mode m, n = 0 … levels − 1.
pub fn fock_distribution(space: &Space, rho: &[C64], m: usize) -> Vec<f64> {
    let d = space.dim();
    let k = space.mode_factor(m);
    let mut p = vec![0.0; space.mode_levels(m)];
    for r in 0..d {
        p[space.digit(r, k)] += rho[r * d + r].re;
    }
    p
}

/// Overlap of spin expectations with a ±1 pattern: m = (1/N) Σᵢ ξᵢ ⟨σᶻᵢ⟩.
///
/// # Panics
/// If the lengths differ.
pub fn pattern_overlap(sz: &[f64], pattern: &[i8]) -> f64 {
    assert_eq!(
        sz.len(),
        pattern.len(),
        "pattern length must equal the number of sites"
    );
    let n = sz.len().max(1) as f64;
    sz.iter()
        .zip(pattern)
        .map(|(s, &x)| s * x as f64)
        .sum::<f64>()
        / n
}

/// The same observables for a normalised state vector |ψ⟩ (quantum trajectories).
pub mod state {
    use cavern_model::op::local;
    use cavern_model::{Space, C64};

    /// ⟨ψ|A|ψ⟩ for a local operator A (row-major n×n) on factor `k`.
    pub fn expect_local(space: &Space, psi: &[C64], k: usize, a: &[C64]) -> C64 {
        let n = space.factors()[k].dim();
        let s = space.stride(k);
        let mut acc = C64::new(0.0, 0.0);
        for r in 0..space.dim() {
            let p = space.digit(r, k);
            for q in 0..n {
                let v = a[p * n + q];
                if v != C64::new(0.0, 0.0) {
                    acc += psi[r].conj() * v * psi[r + q * s - p * s];
                }
            }
        }
        acc
    }

    /// ⟨σᶻᵢ⟩.
    pub fn spin_z(space: &Space, psi: &[C64], i: usize) -> f64 {
        psi.iter()
            .enumerate()
            .map(|(r, z)| space.spin(r, i) * z.norm_sqr())
            .sum()
    }

    /// ⟨σˣᵢ⟩.
    pub fn spin_x(space: &Space, psi: &[C64], i: usize) -> f64 {
        expect_local(space, psi, space.site_factor(i), &local::pauli_x()).re
    }

    /// ⟨σʸᵢ⟩.
    pub fn spin_y(space: &Space, psi: &[C64], i: usize) -> f64 {
        expect_local(space, psi, space.site_factor(i), &local::pauli_y()).re
    }

    /// ⟨a†ₘaₘ⟩.
    pub fn photon_number(space: &Space, psi: &[C64], m: usize) -> f64 {
        let k = space.mode_factor(m);
        psi.iter()
            .enumerate()
            .map(|(r, z)| space.digit(r, k) as f64 * z.norm_sqr())
            .sum()
    }

    /// ⟨aₘ⟩.
    pub fn field(space: &Space, psi: &[C64], m: usize) -> C64 {
        let levels = space.mode_levels(m);
        expect_local(
            space,
            psi,
            space.mode_factor(m),
            &local::annihilation(levels),
        )
    }

    /// Population of mode m's highest kept Fock level.
    pub fn top_level_population(space: &Space, psi: &[C64], m: usize) -> f64 {
        let k = space.mode_factor(m);
        let top = space.mode_levels(m) - 1;
        psi.iter()
            .enumerate()
            .filter(|(r, _)| space.digit(*r, k) == top)
            .map(|(_, z)| z.norm_sqr())
            .sum()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use cavern_model::{ModeInit, ProductState, SpinInit};

    #[test]
    fn coherent_state_moments() {
        // ⟨a⟩ = α and ⟨n⟩ = |α|² for a coherent state (Glauber 1963; textbook, e.g. Walls & Milburn)
        // up to truncation at 20 levels, whose neglected weight is ~|α|^40/20! ≈ 1e-19 here
        let space = Space::new(1, &[20]).unwrap();
        let alpha = C64::new(0.6, -0.3);
        let st = ProductState {
            spins: vec![SpinInit {
                theta: 1.1,
                phi: 0.4,
            }],
            modes: vec![ModeInit::Coherent(alpha)],
        };
        let rho = st.density(&space).unwrap();
        assert!((field(&space, &rho, 0) - alpha).norm() < 1e-12);
        assert!((photon_number(&space, &rho, 0) - alpha.norm_sqr()).abs() < 1e-12);
        // Bloch vector of cos(θ/2)|e⟩ + e^{iφ} sin(θ/2)|g⟩: (sinθ cosφ, sinθ sinφ, cosθ)
        let (th, ph): (f64, f64) = (1.1, 0.4);
        assert!((spin_z(&space, &rho, 0) - th.cos()).abs() < 1e-12);
        assert!((spin_x(&space, &rho, 0) - th.sin() * ph.cos()).abs() < 1e-12);
        assert!((spin_y(&space, &rho, 0) - th.sin() * ph.sin()).abs() < 1e-12);
        assert!((purity(&rho) - 1.0).abs() < 1e-12);
        assert!(trace_error(&space, &rho) < 1e-12);
        let p = fock_distribution(&space, &rho, 0);
        assert!((p.iter().sum::<f64>() - 1.0).abs() < 1e-12);
        assert!(top_level_population(&space, &rho, 0) < 1e-18);
        // the state-vector versions agree with the density-matrix ones on |ψ⟩⟨ψ|
        let psi = st.vector(&space).unwrap();
        assert!((state::spin_z(&space, &psi, 0) - spin_z(&space, &rho, 0)).abs() < 1e-14);
        assert!((state::spin_x(&space, &psi, 0) - spin_x(&space, &rho, 0)).abs() < 1e-14);
        assert!((state::spin_y(&space, &psi, 0) - spin_y(&space, &rho, 0)).abs() < 1e-14);
        assert!(
            (state::photon_number(&space, &psi, 0) - photon_number(&space, &rho, 0)).abs() < 1e-12
        );
        assert!((state::field(&space, &psi, 0) - field(&space, &rho, 0)).norm() < 1e-14);
    }
}
