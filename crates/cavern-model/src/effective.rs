//! Adiabatic elimination of lossy, undriven modes by the effective-operator formalism
//! (Reiter & Sørensen, Phys. Rev. A 85, 032111 (2012)).
//!
//! For a mode with H_c = Δ a†a, loss κ (zero temperature) and longitudinal coupling
//! S(a + a†), S = Σᵢ gᵢσᶻᵢ, the ground manifold is the mode vacuum, V₊ = S a†, V₋ = S a, and the
//! non-Hermitian Hamiltonian of the one-photon manifold is H_NH = Δ − iκ/2. The formalism gives
//!
//! ```text
//! H_eff = −½ V₋ [H_NH⁻¹ + (H_NH⁻¹)†] V₊ = −Δ/(Δ² + κ²/4) S²
//!       = Σᵢ<ⱼ Jᶻᵢⱼ σᶻᵢσᶻⱼ + const,   Jᶻᵢⱼ = −2 gᵢgⱼ Δ/(Δ² + κ²/4)
//! L_eff = √κ a H_NH⁻¹ V₊ = √κ S/(Δ − iκ/2)
//! ```
//!
//! (a collective dephasing; its phase e^{iφ} drops out of the dissipator, so the real operator
//! √κ S/|Δ − iκ/2| is used). The spin-only model is accurate when the mode's response is fast
//! and weak: |gᵢ|·N ≪ |Δ − iκ/2| and the spin dynamics (Rabi frequencies, detunings, zz) slow
//! compared with |Δ − iκ/2|; corrections are of relative order (g/|Δ − iκ/2|)² (the mode's
//! displacement |α|² = |S/(Δ − iκ/2)|² that the spin-only model leaves out).
//!
//! ```
//! use cavern_model::{effective, CouplingForm, ModeParams, Network, SiteParams};
//! let mut net = Network::empty();
//! net.sites = vec![SiteParams::default(); 2];
//! net.modes.push(ModeParams { levels: 4, detuning: 10.0, loss: 1.0, ..Default::default() });
//! net.coupling = vec![vec![0.5], vec![0.5]];
//! net.coupling_form = CouplingForm::Longitudinal;
//! let eff = effective::eliminate_modes(&net).unwrap();
//! assert!(eff.network.modes.is_empty());
//! let jz = cavern_model::memory::mediated_zz(0.5, 0.5, 10.0, 1.0);
//! assert!((eff.network.zz[0][1] - jz).abs() < 1e-15);
//! let me = eff.build().unwrap();
//! assert_eq!(me.space.dim(), 4);
//! ```

use crate::memory::mediated_zz;
use crate::network::{Channel, CouplingForm, JumpOp, MasterEquation, Network};
use crate::{ModelError, SparseOp, C64};

/// The collective dephasing left by one eliminated mode:
/// L = √κ Σᵢ gᵢσᶻᵢ/|Δ − iκ/2| = Σᵢ wᵢσᶻᵢ.
#[derive(Clone, Debug, PartialEq)]
pub struct MediatedDephasing {
    /// Index of the eliminated mode in the full network.
    pub mode: usize,
    /// Its loss rate κ.
    pub loss: f64,
    /// Per-site weights wᵢ = √κ gᵢ/|Δ − iκ/2| of L = Σᵢ wᵢσᶻᵢ.
    pub weights: Vec<f64>,
}

/// A spin-only model equivalent to a network with its modes eliminated.
#[derive(Clone, Debug, PartialEq)]
pub struct EffectiveModel {
    /// The network without modes; `zz` = direct zz + mode-mediated zz.
    pub network: Network,
    /// One collective dephasing per eliminated mode with a non-zero coupling.
    pub dephasing: Vec<MediatedDephasing>,
}

fn unsupported(what: String, value: f64, allowed: &str) -> ModelError {
    ModelError::Range {
        what,
        value,
        allowed: allowed.into(),
    }
}

/// Eliminate every mode of `net` (see the module documentation).
///
/// Requirements: longitudinal coupling (or no coupling), constant coupling envelope, every mode
/// undriven with zero thermal occupation and Δ² + κ²/4 > 0. If a non-zero direct zz has a time
/// envelope, the mediated zz must vanish (they could not share one envelope). Field relaxation
/// ([`crate::FieldRelaxation`]) is kept and then acts on the local field of the effective zz
/// (direct + mediated), whereas in the full network it sees the direct zz only.
///
/// # Errors
/// [`ModelError`] if the network is invalid or a requirement is not met.
pub fn eliminate_modes(net: &Network) -> Result<EffectiveModel, ModelError> {
    net.validate()?;
    let n = net.sites.len();
    let any_coupling = net.coupling.iter().flatten().any(|&g| g != 0.0);
    if any_coupling {
        if net.coupling_form != CouplingForm::Longitudinal {
            return Err(ModelError::Range {
                what: "coupling form for mode elimination".into(),
                value: f64::NAN,
                allowed: format!(
                    "longitudinal coupling only (got {})",
                    net.coupling_form.describe()
                ),
            });
        }
        if !net.coupling_envelope.is_constant() {
            return Err(ModelError::Envelope(
                "mode elimination needs a constant coupling envelope".into(),
            ));
        }
    }
    let mut zz = if net.zz.is_empty() {
        vec![vec![0.0; n]; n]
    } else {
        net.zz.clone()
    };
    let mut dephasing = Vec::new();
    let mut mediated_any = false;
    for (m, md) in net.modes.iter().enumerate() {
        let g: Vec<f64> = (0..n)
            .map(|i| net.coupling.get(i).map_or(0.0, |row| row[m]))
            .collect();
        if g.iter().all(|&x| x == 0.0) {
            continue; // an uncoupled mode does not affect the spins
        }
        if md.drive != 0.0 {
            return Err(unsupported(
                format!("mode {m} drive"),
                md.drive,
                "0 (only undriven modes can be eliminated)",
            ));
        }
        if md.thermal != 0.0 {
            return Err(unsupported(
                format!("mode {m} thermal occupation"),
                md.thermal,
                "0 (elimination assumes a zero-temperature bath)",
            ));
        }
        let denom = md.detuning * md.detuning + 0.25 * md.loss * md.loss;
        if !(denom > 0.0) {
            return Err(unsupported(
                format!("mode {m} detuning"),
                md.detuning,
                "Δ ≠ 0 or κ > 0 (a resonant lossless mode cannot be eliminated)",
            ));
        }
        for i in 0..n {
            for j in (i + 1)..n {
                let jz = mediated_zz(g[i], g[j], md.detuning, md.loss);
                if jz != 0.0 {
                    mediated_any = true;
                }
                zz[i][j] += jz;
                zz[j][i] += jz;
            }
        }
        if md.loss > 0.0 {
            let c = (md.loss / denom).sqrt();
            dephasing.push(MediatedDephasing {
                mode: m,
                loss: md.loss,
                weights: g.iter().map(|&x| c * x).collect(),
            });
        }
    }
    let direct_zz = net.zz.iter().flatten().any(|&x| x != 0.0);
    let mut network = net.clone();
    if mediated_any && !net.zz_envelope.is_constant() {
        if direct_zz {
            return Err(ModelError::Envelope(
                "mode elimination: the direct zz has a time envelope, which the mediated zz \
                 would wrongly share"
                    .into(),
            ));
        }
        // the envelope belonged to an absent direct zz; the mediated zz is constant
        network.zz_envelope = crate::Envelope::Constant;
    }
    network.modes.clear();
    network.coupling.clear();
    network.zz = if zz.iter().flatten().any(|&x| x != 0.0) {
        zz
    } else {
        Vec::new()
    };
    Ok(EffectiveModel { network, dephasing })
}

impl EffectiveModel {
    /// Build the spin-only master equation: the network's plus one diagonal jump
    /// Σᵢ wᵢσᶻᵢ per eliminated lossy mode (channel [`Channel::MediatedDephasing`]).
    ///
    /// # Errors
    /// As [`Network::build`].
    pub fn build(&self) -> Result<MasterEquation, ModelError> {
        let mut me = self.network.build()?;
        let space = &me.space;
        for dp in &self.dephasing {
            let t = (0..space.dim())
                .map(|r| {
                    let v: f64 = dp
                        .weights
                        .iter()
                        .enumerate()
                        .map(|(i, w)| w * space.spin(r, i))
                        .sum();
                    (r, r, C64::new(v, 0.0))
                })
                .collect();
            me.jumps.push(JumpOp {
                channel: Channel::MediatedDephasing(dp.mode),
                rate: dp.loss,
                op: SparseOp::from_triplets(space.dim(), t),
            });
        }
        Ok(me)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::{ModeParams, SiteParams};

    #[test]
    fn requirements_are_checked() {
        let mut net = Network::empty();
        net.sites = vec![SiteParams::default(); 2];
        net.modes.push(ModeParams {
            levels: 3,
            detuning: 5.0,
            loss: 1.0,
            ..Default::default()
        });
        net.coupling = vec![vec![0.3], vec![-0.3]];
        assert!(eliminate_modes(&net).is_err()); // exchange coupling
        net.coupling_form = CouplingForm::Longitudinal;
        assert!(eliminate_modes(&net).is_ok());
        net.modes[0].drive = 0.1;
        assert!(eliminate_modes(&net).is_err());
        net.modes[0].drive = 0.0;
        net.modes[0].detuning = 0.0;
        net.modes[0].loss = 0.0;
        assert!(eliminate_modes(&net).is_err());
    }
}
