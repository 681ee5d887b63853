//! Initial states: product states of sites and modes, pure or mixed (thermal modes, and
//! maximally mixed sites through [`MixedProductState`]).

use crate::{ModelError, Space, C64};

/// Initial state of one site, as a point on the Bloch sphere.
///
/// |ψ⟩ = cos(θ/2)|e⟩ + e^{iφ} sin(θ/2)|g⟩, so θ = 0 is |e⟩ (s = +1, ⟨σᶻ⟩ = +1), θ = π is |g⟩
/// (s = −1), and θ = π/2, φ = 0 gives ⟨σˣ⟩ = +1.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SpinInit {
    /// Polar angle θ from the excited state, radians.
    pub theta: f64,
    /// Azimuthal angle φ, radians.
    pub phi: f64,
}

impl SpinInit {
    /// The basis state with spin value `s` (+1 → |e⟩, −1 → |g⟩).
    pub fn from_sign(s: i8) -> Self {
        Self {
            theta: if s > 0 { 0.0 } else { std::f64::consts::PI },
            phi: 0.0,
        }
    }

    /// Amplitudes (c_g, c_e).
    pub fn amplitudes(&self) -> [C64; 2] {
        let (s, c) = (self.theta / 2.0).sin_cos();
        [C64::from_polar(s, self.phi), C64::new(c, 0.0)]
    }

    /// Local density matrix |ψ⟩⟨ψ| (row-major 2×2 in the (g, e) basis).
    pub fn density(&self) -> [C64; 4] {
        let a = self.amplitudes();
        [
            a[0] * a[0].conj(),
            a[0] * a[1].conj(),
            a[1] * a[0].conj(),
            a[1] * a[1].conj(),
        ]
    }
}

/// Initial state of one site that may be mixed.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum SiteInit {
    /// A pure state on the Bloch sphere.
    Pure(SpinInit),
    /// The maximally mixed state ½𝟙 (Bloch vector 0: ⟨σˣ⟩ = ⟨σʸ⟩ = ⟨σᶻ⟩ = 0), e.g. an erased bit.
    MaximallyMixed,
}

impl SiteInit {
    /// Local density matrix (row-major 2×2 in the (g, e) basis).
    pub fn density(&self) -> [C64; 4] {
        match self {
            SiteInit::Pure(s) => s.density(),
            SiteInit::MaximallyMixed => {
                let (h, z) = (C64::new(0.5, 0.0), C64::new(0.0, 0.0));
                [h, z, z, h]
            }
        }
    }
}

/// Initial state of one mode.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ModeInit {
    /// |0⟩.
    Vacuum,
    /// Fock state |n⟩ (n < levels).
    Fock(usize),
    /// Coherent state |α⟩, truncated to the Fock levels kept and renormalised.
    Coherent(C64),
    /// Thermal state with mean occupation n̄ (before truncation), truncated and renormalised:
    /// P(n) ∝ qⁿ with q = n̄/(1 + n̄).
    Thermal(f64),
}

/// A product initial state ⊗ᵢ ρᵢ ⊗ₘ ρₘ.
#[derive(Clone, Debug, PartialEq)]
pub struct ProductState {
    /// One entry per site.
    pub spins: Vec<SpinInit>,
    /// One entry per mode.
    pub modes: Vec<ModeInit>,
}

impl ModeInit {
    /// Probability that the untruncated state has n ≥ `levels` photons (the weight dropped before
    /// renormalising): Poisson e^{−|α|²}|α|^{2n}/n! for a coherent state, (n̄/(1+n̄))^levels for a
    /// thermal one, 0 for vacuum and Fock states.
    pub fn truncated_weight(&self, levels: usize) -> f64 {
        match *self {
            ModeInit::Vacuum | ModeInit::Fock(_) => 0.0,
            ModeInit::Thermal(nbar) => (nbar / (1.0 + nbar)).powi(levels as i32),
            ModeInit::Coherent(alpha) => {
                let x = alpha.norm_sqr();
                let mut p = (-x).exp();
                let mut kept = 0.0;
                for n in 0..levels {
                    if n > 0 {
                        p *= x / n as f64;
                    }
                    kept += p;
                }
                (1.0 - kept).max(0.0)
            }
        }
    }

    /// Local density matrix (row-major, levels × levels).
    ///
    /// # Errors
    /// [`ModelError::Range`] for a Fock number ≥ levels, a negative or non-finite n̄, or a
    /// non-finite α.
    pub fn density(&self, levels: usize, mode: usize) -> Result<Vec<C64>, ModelError> {
        let mut rho = vec![C64::new(0.0, 0.0); levels * levels];
        match *self {
            ModeInit::Thermal(nbar) => {
                if !nbar.is_finite() || nbar < 0.0 {
                    return Err(ModelError::Range {
                        what: format!("mode {mode} initial thermal occupation"),
                        value: nbar,
                        allowed: "a finite n̄ ≥ 0".into(),
                    });
                }
                let q = nbar / (1.0 + nbar);
                let p: Vec<f64> = (0..levels).map(|n| q.powi(n as i32)).collect();
                let z: f64 = p.iter().sum();
                for n in 0..levels {
                    rho[n * levels + n] = C64::new(p[n] / z, 0.0);
                }
            }
            _ => {
                let psi = self.amplitudes(levels, mode)?;
                for r in 0..levels {
                    for c in 0..levels {
                        rho[r * levels + c] = psi[r] * psi[c].conj();
                    }
                }
            }
        }
        Ok(rho)
    }

    /// Amplitudes of a pure mode state.
    ///
    /// # Errors
    /// As [`ModeInit::density`]; a thermal state is not pure and is refused.
    pub fn amplitudes(&self, levels: usize, mode: usize) -> Result<Vec<C64>, ModelError> {
        let mut psi = vec![C64::new(0.0, 0.0); levels];
        match *self {
            ModeInit::Vacuum => psi[0] = C64::new(1.0, 0.0),
            ModeInit::Fock(n) => {
                if n >= levels {
                    return Err(ModelError::Range {
                        what: format!("mode {mode} initial Fock number"),
                        value: n as f64,
                        allowed: format!("0 … {} (the mode keeps {levels} levels)", levels - 1),
                    });
                }
                psi[n] = C64::new(1.0, 0.0);
            }
            ModeInit::Coherent(alpha) => {
                if !alpha.re.is_finite() || !alpha.im.is_finite() {
                    return Err(ModelError::Range {
                        what: format!("mode {mode} initial coherent amplitude"),
                        value: alpha.norm(),
                        allowed: "a finite complex number".into(),
                    });
                }
                // cₙ ∝ αⁿ/√(n!), built by recursion cₙ = cₙ₋₁ α/√n; renormalised after truncation
                let mut c = C64::new(1.0, 0.0);
                for n in 0..levels {
                    if n > 0 {
                        c *= alpha / (n as f64).sqrt();
                    }
                    psi[n] = c;
                }
                let norm: f64 = psi.iter().map(|x| x.norm_sqr()).sum::<f64>().sqrt();
                psi.iter_mut().for_each(|x| *x /= norm);
            }
            ModeInit::Thermal(_) => {
                return Err(ModelError::Range {
                    what: format!("mode {mode} initial state"),
                    value: f64::NAN,
                    allowed: "a pure state (a thermal state is mixed)".into(),
                })
            }
        }
        Ok(psi)
    }
}

fn kron(a: &[C64], na: usize, b: &[C64], nb: usize) -> Vec<C64> {
    let n = na * nb;
    let mut out = vec![C64::new(0.0, 0.0); n * n];
    for i in 0..na {
        for j in 0..na {
            let x = a[i * na + j];
            if x == C64::new(0.0, 0.0) {
                continue;
            }
            for k in 0..nb {
                for l in 0..nb {
                    out[(i * nb + k) * n + j * nb + l] = x * b[k * nb + l];
                }
            }
        }
    }
    out
}

impl ProductState {
    fn check_len(&self, space: &Space) -> Result<(), ModelError> {
        if self.spins.len() != space.n_sites() || self.modes.len() != space.n_modes() {
            return Err(ModelError::Shape {
                what: "the initial state".into(),
                rows: space.n_sites(),
                cols: space.n_modes(),
                got: format!(
                    "{} site states and {} mode states",
                    self.spins.len(),
                    self.modes.len()
                ),
            });
        }
        Ok(())
    }

    /// True when every mode state is pure (no thermal mode).
    pub fn is_pure(&self) -> bool {
        !self.modes.iter().any(|m| matches!(m, ModeInit::Thermal(_)))
    }

    /// Dense density matrix ρ (row-major d×d) in the ordering of [`Space`].
    ///
    /// # Errors
    /// [`ModelError`] if the number of site or mode states does not match the space, or a mode state
    /// is invalid for its truncation.
    pub fn density(&self, space: &Space) -> Result<Vec<C64>, ModelError> {
        self.check_len(space)?;
        product_density(space, self.spins.iter().map(SpinInit::density), &self.modes)
    }

    /// Check the state against `space` without building the d×d matrix (site and mode counts,
    /// Fock numbers within the truncation, finite parameters).
    ///
    /// # Errors
    /// As [`ProductState::density`].
    pub fn density_check(&self, space: &Space) -> Result<(), ModelError> {
        self.check_len(space)?;
        for (m, md) in self.modes.iter().enumerate() {
            md.density(space.mode_levels(m), m)?;
        }
        Ok(())
    }

    /// State vector |ψ⟩ (length d) of a pure product state.
    ///
    /// # Errors
    /// As [`ProductState::density`], and if a mode is thermal.
    pub fn vector(&self, space: &Space) -> Result<Vec<C64>, ModelError> {
        self.check_len(space)?;
        let mut psi = vec![C64::new(1.0, 0.0)];
        let mut factors: Vec<Vec<C64>> =
            self.spins.iter().map(|s| s.amplitudes().to_vec()).collect();
        for (m, md) in self.modes.iter().enumerate() {
            factors.push(md.amplitudes(space.mode_levels(m), m)?);
        }
        for f in factors {
            psi = psi
                .iter()
                .flat_map(|&x| f.iter().map(move |&y| x * y))
                .collect();
        }
        Ok(psi)
    }
}

/// ⊗ᵢ ρᵢ ⊗ₘ ρₘ from local site density matrices and mode states (counts already checked).
fn product_density(
    space: &Space,
    sites: impl Iterator<Item = [C64; 4]>,
    modes: &[ModeInit],
) -> Result<Vec<C64>, ModelError> {
    let mut rho = vec![C64::new(1.0, 0.0)];
    let mut n = 1;
    for local in sites {
        rho = kron(&rho, n, &local, 2);
        n *= 2;
    }
    for (m, md) in modes.iter().enumerate() {
        let levels = space.mode_levels(m);
        rho = kron(&rho, n, &md.density(levels, m)?, levels);
        n *= levels;
    }
    Ok(rho)
}

/// A product state whose sites may be mixed: ⊗ᵢ ρᵢ ⊗ₘ ρₘ with ρᵢ pure or ½𝟙.
#[derive(Clone, Debug, PartialEq)]
pub struct MixedProductState {
    /// One entry per site.
    pub sites: Vec<SiteInit>,
    /// One entry per mode.
    pub modes: Vec<ModeInit>,
}

impl From<ProductState> for MixedProductState {
    fn from(p: ProductState) -> Self {
        Self {
            sites: p.spins.into_iter().map(SiteInit::Pure).collect(),
            modes: p.modes,
        }
    }
}

impl MixedProductState {
    /// The pure product state, when no site is mixed (modes may still be thermal).
    pub fn as_product(&self) -> Option<ProductState> {
        let spins = self
            .sites
            .iter()
            .map(|s| match s {
                SiteInit::Pure(p) => Some(*p),
                SiteInit::MaximallyMixed => None,
            })
            .collect::<Option<Vec<_>>>()?;
        Some(ProductState {
            spins,
            modes: self.modes.clone(),
        })
    }

    /// Dense density matrix ρ (row-major d×d) in the ordering of [`Space`].
    ///
    /// # Errors
    /// As [`ProductState::density`].
    pub fn density(&self, space: &Space) -> Result<Vec<C64>, ModelError> {
        if self.sites.len() != space.n_sites() || self.modes.len() != space.n_modes() {
            return Err(ModelError::Shape {
                what: "the initial state".into(),
                rows: space.n_sites(),
                cols: space.n_modes(),
                got: format!(
                    "{} site states and {} mode states",
                    self.sites.len(),
                    self.modes.len()
                ),
            });
        }
        product_density(space, self.sites.iter().map(SiteInit::density), &self.modes)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn product_density_is_the_outer_product_of_the_vector() {
        let space = Space::new(2, &[3]).unwrap();
        let st = ProductState {
            spins: vec![
                SpinInit::from_sign(1),
                SpinInit {
                    theta: 1.0,
                    phi: 0.5,
                },
            ],
            modes: vec![ModeInit::Coherent(C64::new(0.4, -0.2))],
        };
        let psi = st.vector(&space).unwrap();
        let rho = st.density(&space).unwrap();
        let d = space.dim();
        for r in 0..d {
            for c in 0..d {
                assert!((rho[r * d + c] - psi[r] * psi[c].conj()).norm() < 1e-15);
            }
        }
        let tr: f64 = (0..d).map(|r| rho[r * d + r].re).sum();
        assert!((tr - 1.0).abs() < 1e-14);
    }

    #[test]
    fn a_maximally_mixed_site_has_purity_one_half_and_no_polarisation() {
        // ½𝟙 ⊗ |e⟩⟨e|: Tr ρ = 1, Tr ρ² = ½ (the textbook purity of a maximally mixed qubit),
        // ⟨σᶻ⟩ = 0 on site 0; the pure site keeps ⟨σᶻ⟩ = +1
        let space = Space::new(2, &[]).unwrap();
        let st = MixedProductState {
            sites: vec![
                SiteInit::MaximallyMixed,
                SiteInit::Pure(SpinInit::from_sign(1)),
            ],
            modes: vec![],
        };
        let rho = st.density(&space).unwrap();
        let d = space.dim();
        let tr: f64 = (0..d).map(|r| rho[r * d + r].re).sum();
        let purity: f64 = rho.iter().map(|z| z.norm_sqr()).sum();
        assert!((tr - 1.0).abs() < 1e-15 && (purity - 0.5).abs() < 1e-15);
        let sz = |i| {
            (0..d)
                .map(|r| space.spin(r, i) * rho[r * d + r].re)
                .sum::<f64>()
        };
        assert_eq!((sz(0), sz(1)), (0.0, 1.0));
        assert!(st.as_product().is_none());
        // without mixed sites it is the ordinary product state
        let pure = ProductState {
            spins: vec![SpinInit::from_sign(-1), SpinInit::from_sign(1)],
            modes: vec![],
        };
        let m = MixedProductState::from(pure.clone());
        assert_eq!(m.density(&space).unwrap(), pure.density(&space).unwrap());
        assert_eq!(m.as_product(), Some(pure));
    }

    #[test]
    fn truncated_weight_of_coherent_and_thermal_states() {
        // Poisson tail: |α|² = 1, levels 2 → 1 − e⁻¹(1 + 1) (textbook Poisson statistics)
        let w = ModeInit::Coherent(C64::new(1.0, 0.0)).truncated_weight(2);
        assert!((w - (1.0 - 2.0 * (-1.0f64).exp())).abs() < 1e-15);
        // geometric tail of the Bose–Einstein distribution: qᴸ
        assert!((ModeInit::Thermal(1.0).truncated_weight(3) - 0.125).abs() < 1e-15);
        assert_eq!(ModeInit::Fock(2).truncated_weight(3), 0.0);
    }

    #[test]
    fn bloch_convention() {
        // θ = 0 is |e⟩; θ = π/2, φ = 0 is (|e⟩ + |g⟩)/√2
        let a = SpinInit {
            theta: 0.0,
            phi: 0.0,
        }
        .amplitudes();
        assert_eq!(a[1], C64::new(1.0, 0.0));
        let b = SpinInit {
            theta: std::f64::consts::FRAC_PI_2,
            phi: 0.0,
        }
        .amplitudes();
        assert!((b[0].re - b[1].re).abs() < 1e-15);
    }

    #[test]
    fn thermal_truncated_distribution_is_geometric() {
        // P(n) = (1−q)qⁿ/(1−q^levels), q = n̄/(1+n̄): the truncated Bose–Einstein distribution
        // (Walls & Milburn, Quantum Optics; from memory)
        let rho = ModeInit::Thermal(0.5).density(5, 0).unwrap();
        let q: f64 = 0.5 / 1.5;
        for n in 0..5 {
            let want = (1.0 - q) * q.powi(n as i32) / (1.0 - q.powi(5));
            assert!((rho[n * 5 + n].re - want).abs() < 1e-15);
        }
        assert!(ModeInit::Fock(5).density(5, 0).is_err());
        assert!(ModeInit::Thermal(-1.0).density(5, 0).is_err());
    }
}
