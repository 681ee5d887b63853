//! Hilbert spaces, operators, initial states and the Lindblad model of a driven-dissipative
//! spin–cavity network.
//!
//! This crate does no I/O. It turns a physical description ([`Network`], in angular units, ħ = 1)
//! into a [`MasterEquation`]: a Hermitian Hamiltonian split into a static part and envelope-scaled
//! parts, and a list of jump operators with their channels.
//!
//! ```
//! use cavern_model::{Network, SiteParams, ModeParams};
//! let mut net = Network::empty();
//! net.sites.push(SiteParams { decay: 1.0, ..Default::default() });
//! net.modes.push(ModeParams { levels: 3, loss: 2.0, ..Default::default() });
//! net.coupling = vec![vec![0.5]];
//! let me = net.build().unwrap();
//! assert_eq!(me.space.dim(), 6);
//! assert_eq!(me.jumps.len(), 2); // cavity loss and spin decay
//! ```
//!
//! Conventions (see each item): σᶻ = diag(−1, +1) in the (g, e) basis, σ⁻ = |g⟩⟨e|, and
//!
//! ```text
//! H = Σₘ Δcₘ a†ₘaₘ + Σᵢ (Δaᵢ/2)σᶻᵢ + Σᵢₘ gᵢₘ(aₘσ⁺ᵢ + a†ₘσ⁻ᵢ)   [or gᵢₘ(aₘ + a†ₘ)σˣᵢ,
//!     or gᵢₘ(aₘ + a†ₘ)σᶻᵢ]
//!   + Σₘ εₘ(aₘ + a†ₘ) + Σᵢ (Ωᵢ/2)σˣᵢ + Σᵢ<ⱼ [Jᶻᵢⱼ σᶻᵢσᶻⱼ + Jˣᵢⱼ(σ⁺ᵢσ⁻ⱼ + σ⁻ᵢσ⁺ⱼ)]
//! jump operators √(κ(1+n_th)) a, √(κ n_th) a†, √γ σ⁻, √(γφ/2) σᶻ, √P σ⁺,
//!     and optionally √γ_G σ⁺ w↑(ĥ)^½, √γ_G σ⁻ w↓(ĥ)^½ (local-field relaxation, FieldRelaxation)
//! ```
//!
//! [`memory`] turns stored patterns into couplings (Hopfield-type associative memory) and
//! [`effective`] eliminates lossy longitudinally coupled modes into a spin-only model.

pub mod effective;
pub mod envelope;
pub mod memory;
pub mod network;
pub mod op;
pub mod space;
pub mod state;

pub use envelope::Envelope;
pub use network::{
    Channel, CouplingForm, DrivenTerm, FieldRelaxation, JumpOp, MasterEquation, ModeParams,
    Network, SiteParams,
};
pub use op::SparseOp;
pub use space::{FactorKind, Space};
pub use state::{ModeInit, ProductState, SpinInit};

pub use num_complex::Complex64 as C64;

/// Errors from building a model or a state.
#[derive(Debug, thiserror::Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum ModelError {
    /// The tensor-product dimension does not fit in memory addressing.
    #[error("the Hilbert-space dimension overflows (sites {sites}, mode levels {levels:?})")]
    DimensionOverflow {
        /// Number of sites.
        sites: usize,
        /// Fock levels of each mode.
        levels: Vec<usize>,
    },
    /// A matrix argument has the wrong shape.
    #[error("{what} must be {rows}×{cols}, got {got}")]
    Shape {
        /// Which matrix.
        what: String,
        /// Expected rows.
        rows: usize,
        /// Expected columns.
        cols: usize,
        /// Description of what was given.
        got: String,
    },
    /// A parameter is out of range.
    #[error("{what} = {value} is not allowed: {allowed}")]
    Range {
        /// Which parameter.
        what: String,
        /// Its value.
        value: f64,
        /// What is allowed.
        allowed: String,
    },
    /// An envelope is malformed.
    #[error("envelope: {0}")]
    Envelope(String),
}
