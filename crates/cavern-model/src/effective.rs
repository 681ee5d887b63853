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
//! √κ S/|Δ − iκ/2| is used).
//!
//! For the exchange coupling g(aσ⁺ + a†σ⁻), V₊ = a† J₋ with J₋ = Σᵢ gᵢσ⁻ᵢ, and the same steps
//! give the dispersive interaction and a collective decay:
//!
//! ```text
//! H_eff = −Δ/(Δ² + κ²/4) J₊J₋:  Δaᵢ → Δaᵢ − gᵢ²Δ/(Δ² + κ²/4),
//!                               Jˣᵢⱼ → Jˣᵢⱼ − gᵢgⱼΔ/(Δ² + κ²/4)
//! L_eff = √κ J₋/(Δ − iκ/2)  →  √κ Σᵢ gᵢσ⁻ᵢ/|Δ − iκ/2|
//! ```
//!
//! (valid while the spin detunings are small compared with |Δ − iκ/2|). A collective decay has
//! several entries per row, which the density-matrix kernel of `cavern-evolve` (and the
//! steady-state solvers, which check residuals with it) refuse; its quantum trajectories apply
//! it as a general sparse matrix.
//!
//! The spin-only model is accurate when the mode's response is fast
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
use crate::op::local;
use crate::{ModelError, SparseOp, C64};

/// Which collective operator an eliminated mode leaves behind.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Collective {
    /// L = Σᵢ wᵢσᶻᵢ (longitudinal coupling).
    Dephasing,
    /// L = Σᵢ wᵢσ⁻ᵢ (exchange coupling).
    Decay,
}

/// The collective jump left by one eliminated mode: L = Σᵢ wᵢ Oᵢ with wᵢ = √κ gᵢ/|Δ − iκ/2|
/// and Oᵢ = σᶻᵢ or σ⁻ᵢ.
#[derive(Clone, Debug, PartialEq)]
pub struct MediatedJump {
    /// Index of the eliminated mode in the full network.
    pub mode: usize,
    /// Its loss rate κ.
    pub loss: f64,
    /// Per-site weights wᵢ = √κ gᵢ/|Δ − iκ/2|.
    pub weights: Vec<f64>,
    /// The single-site operator Oᵢ.
    pub kind: Collective,
}

/// A spin-only model equivalent to a network with its modes eliminated.
#[derive(Clone, Debug, PartialEq)]
pub struct EffectiveModel {
    /// The network without modes; longitudinal coupling: `zz` = direct + mode-mediated zz;
    /// exchange coupling: `flip_flop` = direct + mediated Jˣ and shifted site detunings.
    pub network: Network,
    /// One collective jump per eliminated lossy mode with a non-zero coupling.
    pub jumps: Vec<MediatedJump>,
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
/// Requirements: longitudinal or exchange coupling (or none), constant coupling envelope, every
/// mode undriven with zero thermal occupation and Δ² + κ²/4 > 0. If a non-zero direct zz (flip-flop)
/// matrix has a time envelope, the mediated one must vanish (they could not share one envelope). Field relaxation
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
        if net.coupling_form == CouplingForm::Dipole {
            return Err(ModelError::Range {
                what: "coupling form for mode elimination".into(),
                value: f64::NAN,
                allowed: format!(
                    "longitudinal or exchange coupling (got {})",
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
    let longitudinal = net.coupling_form == CouplingForm::Longitudinal;
    let square = |m: &Vec<Vec<f64>>| {
        if m.is_empty() {
            vec![vec![0.0; n]; n]
        } else {
            m.clone()
        }
    };
    // the spin–spin matrix that receives the mediated coupling: zz or flip-flop
    let (direct, direct_envelope) = if longitudinal {
        (&net.zz, &net.zz_envelope)
    } else {
        (&net.flip_flop, &net.flip_flop_envelope)
    };
    let mut pair = square(direct);
    let mut network = net.clone();
    let mut jumps = Vec::new();
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
                let v = if longitudinal {
                    mediated_zz(g[i], g[j], md.detuning, md.loss)
                } else {
                    mediated_flip_flop(g[i], g[j], md.detuning, md.loss)
                };
                if v != 0.0 {
                    mediated_any = true;
                }
                pair[i][j] += v;
                pair[j][i] += v;
            }
            if !longitudinal {
                network.sites[i].detuning += mediated_shift(g[i], md.detuning, md.loss);
            }
        }
        if md.loss > 0.0 {
            let c = (md.loss / denom).sqrt();
            jumps.push(MediatedJump {
                mode: m,
                loss: md.loss,
                weights: g.iter().map(|&x| c * x).collect(),
                kind: if longitudinal {
                    Collective::Dephasing
                } else {
                    Collective::Decay
                },
            });
        }
    }
    let direct_nonzero = direct.iter().flatten().any(|&x| x != 0.0);
    let mut envelope = direct_envelope.clone();
    if mediated_any && !envelope.is_constant() {
        if direct_nonzero {
            return Err(ModelError::Envelope(
                "mode elimination: the direct spin–spin coupling has a time envelope, which the \
                 mediated coupling would wrongly share"
                    .into(),
            ));
        }
        // the envelope belonged to an absent direct coupling; the mediated one is constant
        envelope = crate::Envelope::Constant;
    }
    let pair = if pair.iter().flatten().any(|&x| x != 0.0) {
        pair
    } else {
        Vec::new()
    };
    if longitudinal {
        (network.zz, network.zz_envelope) = (pair, envelope);
    } else {
        (network.flip_flop, network.flip_flop_envelope) = (pair, envelope);
    }
    network.modes.clear();
    network.coupling.clear();
    Ok(EffectiveModel { network, jumps })
}

/// Mode-mediated flip-flop coefficient Jˣᵢⱼ = −gᵢgⱼΔ/(Δ² + κ²/4) (term Jˣ(σ⁺ᵢσ⁻ⱼ + σ⁻ᵢσ⁺ⱼ))
/// after eliminating a mode with exchange coupling (Reiter & Sørensen 2012).
pub fn mediated_flip_flop(g_i: f64, g_j: f64, detuning: f64, loss: f64) -> f64 {
    -g_i * g_j * detuning / (detuning * detuning + 0.25 * loss * loss)
}

/// Shift of a site's detuning Δa (term (Δa/2)σᶻ) by an eliminated exchange-coupled mode:
/// −gᵢ²Δ/(Δ² + κ²/4) (the dispersive Lamb shift).
pub fn mediated_shift(g_i: f64, detuning: f64, loss: f64) -> f64 {
    -g_i * g_i * detuning / (detuning * detuning + 0.25 * loss * loss)
}

impl EffectiveModel {
    /// Build the spin-only master equation: the network's plus one collective jump Σᵢ wᵢOᵢ per
    /// eliminated lossy mode (channel [`Channel::MediatedDephasing`] or
    /// [`Channel::MediatedDecay`]).
    ///
    /// # Errors
    /// As [`Network::build`].
    pub fn build(&self) -> Result<MasterEquation, ModelError> {
        let mut me = self.network.build()?;
        let space = &me.space;
        for mj in &self.jumps {
            let local_op = match mj.kind {
                Collective::Dephasing => local::pauli_z(),
                Collective::Decay => local::lowering(),
            };
            let mut t = Vec::new();
            for (i, &w) in mj.weights.iter().enumerate() {
                if w != 0.0 {
                    let op = SparseOp::local(space, space.site_factor(i), &local_op);
                    t.extend(op.scaled(C64::new(w, 0.0)).triplets());
                }
            }
            let channel = match mj.kind {
                Collective::Dephasing => Channel::MediatedDephasing(mj.mode),
                Collective::Decay => Channel::MediatedDecay(mj.mode),
            };
            me.jumps.push(JumpOp {
                channel,
                rate: mj.loss,
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
        net.coupling_form = CouplingForm::Dipole;
        assert!(eliminate_modes(&net).is_err());
        net.coupling_form = CouplingForm::Exchange;
        let eff = eliminate_modes(&net).unwrap();
        // Lamb shift −g²Δ/(Δ² + κ²/4) = −0.09·5/25.25 and flip-flop +0.09·5/25.25
        assert!((eff.network.sites[0].detuning + 0.45 / 25.25).abs() < 1e-15);
        assert!((eff.network.flip_flop[0][1] - 0.45 / 25.25).abs() < 1e-15);
        let me = eff.build().unwrap();
        assert_eq!(me.jumps[0].channel, Channel::MediatedDecay(0));
        assert!(!me.jumps[0].op.is_row_monomial());
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
