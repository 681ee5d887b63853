//! Physical description of a network and its translation into a master equation.
//!
//! All parameters are angular frequencies or rates (rad per time unit, ħ = 1); rates are energy
//! (population) decay rates. The unit layer of the application applies 2π to ordinary
//! frequencies before they reach this crate.

use crate::op::{local, SparseOp};
use crate::{Envelope, ModelError, Space, C64};

/// Parameters of one two-level site.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct SiteParams {
    /// Δa = transition frequency − drive/frame frequency; enters as (Δa/2)σᶻ.
    pub detuning: f64,
    /// Spontaneous decay rate γ; jump operator √γ σ⁻ (Pₑ decays as e^{−γt}).
    pub decay: f64,
    /// Pure dephasing rate γφ; jump operator √(γφ/2) σᶻ, so coherences decay as e^{−γφ t}.
    pub dephasing: f64,
    /// Incoherent pump rate P; jump operator √P σ⁺.
    pub pump: f64,
    /// Transverse drive (Rabi frequency) Ω; enters as (Ω/2)σˣ · f(t).
    pub rabi: f64,
}

/// Parameters of one bosonic mode.
#[derive(Clone, Debug, PartialEq)]
pub struct ModeParams {
    /// Fock truncation: number of levels kept (≥ 2).
    pub levels: usize,
    /// Δc = mode frequency − drive/frame frequency; enters as Δc a†a.
    pub detuning: f64,
    /// Energy decay rate κ (⟨a†a⟩ decays as e^{−κt}; output flux κ⟨a†a⟩).
    pub loss: f64,
    /// Thermal occupation n_th of the bath: jumps √(κ(1+n_th)) a and √(κ n_th) a†.
    pub thermal: f64,
    /// Coherent drive amplitude ε; enters as ε(a + a†) · f(t).
    pub drive: f64,
    /// Envelope f(t) of the drive.
    pub drive_envelope: Envelope,
}

impl Default for ModeParams {
    fn default() -> Self {
        Self {
            levels: 2,
            detuning: 0.0,
            loss: 0.0,
            thermal: 0.0,
            drive: 0.0,
            drive_envelope: Envelope::Constant,
        }
    }
}

/// Form of the spin–mode coupling.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum CouplingForm {
    /// Rotating-wave (Jaynes–Cummings / Tavis–Cummings): g(aσ⁺ + a†σ⁻).
    #[default]
    Exchange,
    /// Full dipole (Rabi / Dicke): g(a + a†)σˣ.
    Dipole,
    /// Longitudinal (dispersive-shift-free, "σᶻ") coupling: g(a + a†)σᶻ. It conserves every σᶻᵢ;
    /// a mode displaced by the spins' configuration mediates a zz interaction
    /// (see [`crate::memory::mediated_zz`]).
    Longitudinal,
}

impl CouplingForm {
    /// Short description with the formula, e.g. `longitudinal g(a + a†)σᶻ`.
    pub fn describe(&self) -> &'static str {
        match self {
            CouplingForm::Exchange => "exchange g(aσ⁺ + a†σ⁻)",
            CouplingForm::Dipole => "dipole g(a + a†)σˣ",
            CouplingForm::Longitudinal => "longitudinal g(a + a†)σᶻ",
        }
    }
}

/// Local-field ("Glauber") spin relaxation: per site i the jump operators
/// L↑ᵢ = √γ_G σ⁺ᵢ w↑(ĥᵢ)^½ and L↓ᵢ = √γ_G σ⁻ᵢ w↓(ĥᵢ)^½, where ĥᵢ = −Σⱼ Jᶻᵢⱼ σᶻⱼ is the
/// diagonal operator of the local field the other spins exert through [`Network::zz`] (flipping
/// site i up changes the zz energy by −2hᵢ), w↑(h) = 1/(1 + e^{−2h/T}) and
/// w↓(h) = 1/(1 + e^{2h/T}). At T = 0, w↑ is a step function (1 for h > 0, 0 for h < 0) with
/// w = ½ at h = 0 (|h| ≤ 1e-12 Σⱼ|Jᶻᵢⱼ| counts as 0).
///
/// The diagonal of ρ then obeys the classical Glauber master equation (Glauber, J. Math. Phys.
/// 4, 294 (1963)); the open-quantum Hopfield generalisation is Rotondo et al., J. Phys. A 51,
/// 115301 (2018). The local field uses the static zz matrix (the zz envelope does not enter).
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct FieldRelaxation {
    /// Rate γ_G (angular, ≥ 0).
    pub rate: f64,
    /// Temperature k_B T/ħ (angular, ≥ 0; 0 allowed).
    pub temperature: f64,
}

impl FieldRelaxation {
    /// Glauber weight w↑(h) = 1/(1 + e^{−2h/T}) of flipping up in local field h (w↓(h) = w↑(−h));
    /// `tie` is the magnitude below which h counts as 0 at T = 0.
    pub fn weight_up(&self, h: f64, tie: f64) -> f64 {
        glauber_up(h, self.temperature, tie)
    }
}

/// w↑(h) = 1/(1 + e^{−2h/T}); at T = 0 a step with ½ for |h| ≤ `tie`.
pub fn glauber_up(h: f64, temperature: f64, tie: f64) -> f64 {
    if temperature > 0.0 {
        1.0 / (1.0 + (-2.0 * h / temperature).exp())
    } else if h.abs() <= tie {
        0.5
    } else if h > 0.0 {
        1.0
    } else {
        0.0
    }
}

/// A driven-dissipative spin–cavity network, in angular units.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct Network {
    /// The two-level sites.
    pub sites: Vec<SiteParams>,
    /// The bosonic modes.
    pub modes: Vec<ModeParams>,
    /// Spin–mode coupling strengths gᵢₘ, indexed `[site][mode]` (N rows of M entries).
    pub coupling: Vec<Vec<f64>>,
    /// Form of the spin–mode coupling.
    pub coupling_form: CouplingForm,
    /// Envelope f(t) multiplying every gᵢₘ.
    pub coupling_envelope: Envelope,
    /// Direct zz couplings Jᶻ (N×N, symmetric, zero diagonal; the term is Σᵢ<ⱼ Jᶻᵢⱼ σᶻᵢσᶻⱼ).
    /// Empty means none.
    pub zz: Vec<Vec<f64>>,
    /// Envelope f(t) multiplying every Jᶻᵢⱼ.
    pub zz_envelope: Envelope,
    /// Direct exchange couplings Jˣ (N×N, symmetric, zero diagonal; the term is
    /// Σᵢ<ⱼ Jˣᵢⱼ(σ⁺ᵢσ⁻ⱼ + σ⁻ᵢσ⁺ⱼ)). Empty means none.
    pub flip_flop: Vec<Vec<f64>>,
    /// Envelope f(t) multiplying every Jˣᵢⱼ.
    pub flip_flop_envelope: Envelope,
    /// Envelope f(t) multiplying every site's Rabi frequency Ωᵢ.
    pub rabi_envelope: Envelope,
    /// Optional local-field (Glauber) relaxation of the sites, driven by [`Network::zz`].
    pub field_relaxation: Option<FieldRelaxation>,
}

/// Which physical process a jump operator describes (used to label output channels).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Channel {
    /// Photon leaving mode m through its loss port: √(κ(1+n_th)) a.
    ModeLoss(usize),
    /// Photon entering mode m from its thermal bath: √(κ n_th) a†.
    ModeGain(usize),
    /// Spontaneous emission of site i: √γ σ⁻.
    SiteDecay(usize),
    /// Pure dephasing of site i: √(γφ/2) σᶻ.
    SiteDephasing(usize),
    /// Incoherent pumping of site i: √P σ⁺.
    SitePump(usize),
    /// Local-field relaxation of site i upwards: √γ_G σ⁺ w↑(ĥᵢ)^½ ([`FieldRelaxation`]).
    SiteRelaxUp(usize),
    /// Local-field relaxation of site i downwards: √γ_G σ⁻ w↓(ĥᵢ)^½ ([`FieldRelaxation`]).
    SiteRelaxDown(usize),
    /// Collective dephasing left by adiabatically eliminating mode m
    /// ([`crate::effective`]): √κ Σᵢ gᵢσᶻᵢ/|Δ − iκ/2|.
    MediatedDephasing(usize),
    /// Collective decay left by adiabatically eliminating exchange-coupled mode m
    /// ([`crate::effective`]): √κ Σᵢ gᵢσ⁻ᵢ/|Δ − iκ/2|.
    MediatedDecay(usize),
}

impl Channel {
    /// Short machine-readable label, e.g. `mode0-loss`, `site2-decay`.
    pub fn label(&self) -> String {
        match *self {
            Channel::ModeLoss(m) => format!("mode{m}-loss"),
            Channel::ModeGain(m) => format!("mode{m}-gain"),
            Channel::SiteDecay(i) => format!("site{i}-decay"),
            Channel::SiteDephasing(i) => format!("site{i}-dephasing"),
            Channel::SitePump(i) => format!("site{i}-pump"),
            Channel::SiteRelaxUp(i) => format!("site{i}-relax-up"),
            Channel::SiteRelaxDown(i) => format!("site{i}-relax-down"),
            Channel::MediatedDephasing(m) => format!("mode{m}-mediated-dephasing"),
            Channel::MediatedDecay(m) => format!("mode{m}-mediated-decay"),
        }
    }
}

/// A jump operator L with its channel; `op` already includes the square root of the rate.
#[derive(Clone, Debug, PartialEq)]
pub struct JumpOp {
    /// The physical channel.
    pub channel: Channel,
    /// The channel's physical rate (κ(1+n_th), κn_th, γ, γφ, P, γ_G, or κ for a mediated
    /// jump). `op` carries its square root, except for dephasing, where `op` = √(γφ/2) σᶻ,
    /// and for the field relaxation and mediated jumps, whose `op` also carries the
    /// state-dependent or collective factor.
    pub rate: f64,
    /// L, including √rate.
    pub op: SparseOp,
}

/// A Hermitian Hamiltonian term scaled by a time envelope: f(t)·H_k.
#[derive(Clone, Debug, PartialEq)]
pub struct DrivenTerm {
    /// What the term is (for reports).
    pub label: String,
    /// f(t).
    pub envelope: Envelope,
    /// H_k (Hermitian).
    pub op: SparseOp,
}

/// The Lindblad master equation dρ/dt = −i[H(t), ρ] + Σ 𝒟\[L\]ρ with
/// H(t) = H₀ + Σₖ fₖ(t) Hₖ and 𝒟\[L\]ρ = LρL† − ½{L†L, ρ}.
#[derive(Clone, Debug, PartialEq)]
pub struct MasterEquation {
    /// The Hilbert space.
    pub space: Space,
    /// H₀ (Hermitian, time independent).
    pub static_hamiltonian: SparseOp,
    /// Envelope-scaled Hermitian terms fₖ(t) Hₖ.
    pub driven: Vec<DrivenTerm>,
    /// Jump operators with non-zero rates.
    pub jumps: Vec<JumpOp>,
}

fn real(x: f64) -> C64 {
    C64::new(x, 0.0)
}

fn check_rate(what: String, value: f64) -> Result<(), ModelError> {
    if !value.is_finite() || value < 0.0 {
        return Err(ModelError::Range {
            what,
            value,
            allowed: "a finite rate ≥ 0".into(),
        });
    }
    Ok(())
}

fn check_finite(what: String, value: f64) -> Result<(), ModelError> {
    if !value.is_finite() {
        return Err(ModelError::Range {
            what,
            value,
            allowed: "a finite number".into(),
        });
    }
    Ok(())
}

impl Network {
    /// A network with no sites, no modes and no couplings.
    pub fn empty() -> Self {
        Self::default()
    }

    /// The Hilbert space of this network.
    ///
    /// # Errors
    /// [`ModelError::DimensionOverflow`] if the dimension does not fit in `usize`.
    pub fn space(&self) -> Result<Space, ModelError> {
        let levels: Vec<usize> = self.modes.iter().map(|m| m.levels).collect();
        Space::new(self.sites.len(), &levels).ok_or(ModelError::DimensionOverflow {
            sites: self.sites.len(),
            levels,
        })
    }

    /// Check parameters, shapes and the dimension without building any operator (cheap even when
    /// the Hilbert space is huge).
    ///
    /// # Errors
    /// As [`Network::build`].
    pub fn validate(&self) -> Result<(), ModelError> {
        self.check()?;
        self.space().map(|_| ())
    }

    /// The dissipation channels [`Network::build`] would create, in the same order, without
    /// building operators.
    pub fn channels(&self) -> Vec<Channel> {
        let mut v = Vec::new();
        for (i, s) in self.sites.iter().enumerate() {
            if s.decay > 0.0 {
                v.push(Channel::SiteDecay(i));
            }
            if s.dephasing > 0.0 {
                v.push(Channel::SiteDephasing(i));
            }
            if s.pump > 0.0 {
                v.push(Channel::SitePump(i));
            }
        }
        if self.field_relaxation.is_some_and(|f| f.rate > 0.0) {
            for i in 0..self.sites.len() {
                v.push(Channel::SiteRelaxUp(i));
                v.push(Channel::SiteRelaxDown(i));
            }
        }
        for (m, p) in self.modes.iter().enumerate() {
            if p.loss * (1.0 + p.thermal) > 0.0 {
                v.push(Channel::ModeLoss(m));
            }
            if p.loss * p.thermal > 0.0 {
                v.push(Channel::ModeGain(m));
            }
        }
        v
    }

    fn check(&self) -> Result<(), ModelError> {
        let n = self.sites.len();
        let m = self.modes.len();
        for (i, s) in self.sites.iter().enumerate() {
            check_finite(format!("site {i} detuning"), s.detuning)?;
            check_rate(format!("site {i} decay"), s.decay)?;
            check_rate(format!("site {i} dephasing"), s.dephasing)?;
            check_rate(format!("site {i} pump"), s.pump)?;
            check_finite(format!("site {i} Rabi frequency"), s.rabi)?;
        }
        for (k, md) in self.modes.iter().enumerate() {
            if md.levels < 2 {
                return Err(ModelError::Range {
                    what: format!("mode {k} levels"),
                    value: md.levels as f64,
                    allowed: "at least 2 Fock levels".into(),
                });
            }
            check_finite(format!("mode {k} detuning"), md.detuning)?;
            check_rate(format!("mode {k} loss"), md.loss)?;
            check_rate(format!("mode {k} thermal occupation"), md.thermal)?;
            check_finite(format!("mode {k} drive"), md.drive)?;
        }
        if let Some(fr) = &self.field_relaxation {
            check_rate("field relaxation rate".into(), fr.rate)?;
            check_rate("field relaxation temperature".into(), fr.temperature)?;
        }
        let shape_ok = self.coupling.is_empty()
            || (self.coupling.len() == n && self.coupling.iter().all(|r| r.len() == m));
        if !shape_ok {
            return Err(ModelError::Shape {
                what: "the site×mode coupling matrix".into(),
                rows: n,
                cols: m,
                got: describe_shape(&self.coupling),
            });
        }
        for (i, row) in self.coupling.iter().enumerate() {
            for (k, &g) in row.iter().enumerate() {
                check_finite(format!("coupling[{i}][{k}]"), g)?;
            }
        }
        for (name, mat) in [("zz", &self.zz), ("flip-flop", &self.flip_flop)] {
            if mat.is_empty() {
                continue;
            }
            if mat.len() != n || mat.iter().any(|r| r.len() != n) {
                return Err(ModelError::Shape {
                    what: format!("the {name} spin–spin matrix"),
                    rows: n,
                    cols: n,
                    got: describe_shape(mat),
                });
            }
            for i in 0..n {
                check_finite(format!("{name}[{i}][{i}]"), mat[i][i])?;
                if mat[i][i] != 0.0 {
                    return Err(ModelError::Range {
                        what: format!("{name}[{i}][{i}]"),
                        value: mat[i][i],
                        allowed: "0 (no self-coupling on the diagonal)".into(),
                    });
                }
                for j in 0..n {
                    check_finite(format!("{name}[{i}][{j}]"), mat[i][j])?;
                    let scale = mat[i][j].abs().max(mat[j][i].abs());
                    if (mat[i][j] - mat[j][i]).abs() > 1e-12 * scale {
                        return Err(ModelError::Range {
                            what: format!("{name}[{i}][{j}]"),
                            value: mat[i][j],
                            allowed: format!(
                                "a symmetric matrix ({name}[{j}][{i}] = {})",
                                mat[j][i]
                            ),
                        });
                    }
                }
            }
        }
        Ok(())
    }

    /// Build the master equation.
    ///
    /// # Errors
    /// [`ModelError`] for negative or non-finite rates, fewer than 2 Fock levels, matrices of the
    /// wrong shape, non-symmetric spin–spin matrices, or an overflowing dimension.
    pub fn build(&self) -> Result<MasterEquation, ModelError> {
        self.check()?;
        let space = self.space()?;
        let d = space.dim();
        let mut h0 = Vec::new(); // triplets of the static Hamiltonian
        let mut driven: Vec<DrivenTerm> = Vec::new();
        let mut jumps = Vec::new();
        let sigma_minus: Vec<SparseOp> = (0..self.sites.len())
            .map(|i| SparseOp::local(&space, space.site_factor(i), &local::lowering()))
            .collect();
        let sigma_z: Vec<SparseOp> = (0..self.sites.len())
            .map(|i| SparseOp::local(&space, space.site_factor(i), &local::pauli_z()))
            .collect();
        let modes_a: Vec<SparseOp> = self
            .modes
            .iter()
            .enumerate()
            .map(|(m, p)| {
                SparseOp::local(&space, space.mode_factor(m), &local::annihilation(p.levels))
            })
            .collect();

        for (i, s) in self.sites.iter().enumerate() {
            if s.detuning != 0.0 {
                h0.extend(sigma_z[i].scaled(real(s.detuning / 2.0)).triplets());
            }
            if s.rabi != 0.0 {
                let sx = SparseOp::local(&space, space.site_factor(i), &local::pauli_x());
                push_term(
                    &mut h0,
                    &mut driven,
                    &self.rabi_envelope,
                    format!("site {i} drive (Ω/2)σˣ"),
                    sx.scaled(real(s.rabi / 2.0)),
                );
            }
            let rates = [
                (Channel::SiteDecay(i), s.decay, sigma_minus[i].clone()),
                (
                    Channel::SiteDephasing(i),
                    s.dephasing / 2.0,
                    sigma_z[i].clone(),
                ),
                (Channel::SitePump(i), s.pump, sigma_minus[i].adjoint()),
            ];
            for (channel, rate, op) in rates {
                if rate > 0.0 {
                    let rate_in = if matches!(channel, Channel::SiteDephasing(_)) {
                        s.dephasing
                    } else {
                        rate
                    };
                    jumps.push(JumpOp {
                        channel,
                        rate: rate_in,
                        op: op.scaled(real(rate.sqrt())),
                    });
                }
            }
        }
        if let Some(fr) = self.field_relaxation.filter(|f| f.rate > 0.0) {
            for i in 0..self.sites.len() {
                let [up, down] = self.field_relaxation_ops(&space, i, fr);
                jumps.push(JumpOp {
                    channel: Channel::SiteRelaxUp(i),
                    rate: fr.rate,
                    op: up,
                });
                jumps.push(JumpOp {
                    channel: Channel::SiteRelaxDown(i),
                    rate: fr.rate,
                    op: down,
                });
            }
        }
        for (m, p) in self.modes.iter().enumerate() {
            let a = &modes_a[m];
            let ad = a.adjoint();
            if p.detuning != 0.0 {
                h0.extend(ad.times(a).scaled(real(p.detuning)).triplets());
            }
            if p.drive != 0.0 {
                push_term(
                    &mut h0,
                    &mut driven,
                    &p.drive_envelope,
                    format!("mode {m} drive ε(a + a†)"),
                    a.plus(&ad).scaled(real(p.drive)),
                );
            }
            let down = p.loss * (1.0 + p.thermal);
            let up = p.loss * p.thermal;
            if down > 0.0 {
                jumps.push(JumpOp {
                    channel: Channel::ModeLoss(m),
                    rate: down,
                    op: a.scaled(real(down.sqrt())),
                });
            }
            if up > 0.0 {
                jumps.push(JumpOp {
                    channel: Channel::ModeGain(m),
                    rate: up,
                    op: ad.scaled(real(up.sqrt())),
                });
            }
        }
        // spin–mode couplings, collected into one operator sharing the coupling envelope
        let mut coupling = Vec::new();
        for (i, row) in self.coupling.iter().enumerate() {
            for (m, &g) in row.iter().enumerate() {
                if g == 0.0 {
                    continue;
                }
                let a = &modes_a[m];
                let term = match self.coupling_form {
                    CouplingForm::Exchange => {
                        let x = a.times(&sigma_minus[i].adjoint());
                        x.plus(&x.adjoint())
                    }
                    CouplingForm::Dipole => {
                        let sx = SparseOp::local(&space, space.site_factor(i), &local::pauli_x());
                        a.plus(&a.adjoint()).times(&sx)
                    }
                    CouplingForm::Longitudinal => a.plus(&a.adjoint()).times(&sigma_z[i]),
                };
                coupling.extend(term.scaled(real(g)).triplets());
            }
        }
        if !coupling.is_empty() {
            let label = format!("spin–mode {}", self.coupling_form.describe());
            let op = SparseOp::from_triplets(d, coupling);
            push_term(&mut h0, &mut driven, &self.coupling_envelope, label, op);
        }
        let n = self.sites.len();
        if !self.zz.is_empty() {
            let mut t = Vec::new();
            for i in 0..n {
                for j in (i + 1)..n {
                    if self.zz[i][j] != 0.0 {
                        t.extend(
                            sigma_z[i]
                                .times(&sigma_z[j])
                                .scaled(real(self.zz[i][j]))
                                .triplets(),
                        );
                    }
                }
            }
            if !t.is_empty() {
                let op = SparseOp::from_triplets(d, t);
                push_term(
                    &mut h0,
                    &mut driven,
                    &self.zz_envelope,
                    "spin–spin Jᶻσᶻσᶻ".into(),
                    op,
                );
            }
        }
        if !self.flip_flop.is_empty() {
            let mut t = Vec::new();
            for i in 0..n {
                for j in (i + 1)..n {
                    if self.flip_flop[i][j] != 0.0 {
                        let x = sigma_minus[i].adjoint().times(&sigma_minus[j]);
                        t.extend(
                            x.plus(&x.adjoint())
                                .scaled(real(self.flip_flop[i][j]))
                                .triplets(),
                        );
                    }
                }
            }
            if !t.is_empty() {
                let op = SparseOp::from_triplets(d, t);
                let label = "spin–spin Jˣ(σ⁺σ⁻ + σ⁻σ⁺)".into();
                push_term(&mut h0, &mut driven, &self.flip_flop_envelope, label, op);
            }
        }
        Ok(MasterEquation {
            space,
            static_hamiltonian: SparseOp::from_triplets(d, h0),
            driven,
            jumps,
        })
    }
}

impl Network {
    /// Local field hᵢ = −Σⱼ Jᶻᵢⱼ sⱼ of basis state `r` (spins read from the basis index).
    fn zz_field(&self, space: &Space, r: usize, i: usize) -> f64 {
        match self.zz.get(i) {
            Some(row) => -row
                .iter()
                .enumerate()
                .filter(|&(j, _)| j != i)
                .map(|(j, &jz)| jz * space.spin(r, j))
                .sum::<f64>(),
            None => 0.0,
        }
    }

    /// The up and down field-relaxation jump operators of site i, including √γ_G.
    fn field_relaxation_ops(&self, space: &Space, i: usize, fr: FieldRelaxation) -> [SparseOp; 2] {
        let d = space.dim();
        let s = space.stride(space.site_factor(i));
        let tie = self
            .zz
            .get(i)
            .map_or(0.0, |row| 1e-12 * row.iter().map(|x| x.abs()).sum::<f64>());
        let (mut up, mut down) = (Vec::new(), Vec::new());
        for r in 0..d {
            let h = self.zz_field(space, r, i);
            if space.digit(r, space.site_factor(i)) == 0 {
                // |r⟩ has site i in |g⟩: σ⁺ maps it to |r + s⟩
                let w = fr.weight_up(h, tie);
                up.push((r + s, r, real((fr.rate * w).sqrt())));
            } else {
                let w = fr.weight_up(-h, tie);
                down.push((r - s, r, real((fr.rate * w).sqrt())));
            }
        }
        [
            SparseOp::from_triplets(d, up),
            SparseOp::from_triplets(d, down),
        ]
    }
}

fn push_term(
    h0: &mut Vec<(usize, usize, C64)>,
    driven: &mut Vec<DrivenTerm>,
    envelope: &Envelope,
    label: String,
    op: SparseOp,
) {
    if envelope.is_constant() {
        h0.extend(op.triplets());
    } else {
        driven.push(DrivenTerm {
            label,
            envelope: envelope.clone(),
            op,
        });
    }
}

fn describe_shape(m: &[Vec<f64>]) -> String {
    let lens: Vec<usize> = m.iter().map(|r| r.len()).collect();
    if lens
        .iter()
        .all(|&l| l == lens.first().copied().unwrap_or(0))
    {
        format!("{}×{}", m.len(), lens.first().copied().unwrap_or(0))
    } else {
        format!("{} rows of lengths {:?}", m.len(), lens)
    }
}

impl MasterEquation {
    /// The static part of the non-Hermitian generator, K₀ = −iH₀ − ½ Σₗ Lₗ†Lₗ (the evolution
    /// between jumps of a trajectory, and the left factor of the Lindblad right-hand side
    /// dρ/dt = Kρ + ρK† + Σ LρL†), built in one pass from all terms.
    pub fn static_generator(&self) -> SparseOp {
        let mut t: Vec<(usize, usize, C64)> = self
            .static_hamiltonian
            .triplets()
            .into_iter()
            .map(|(r, c, v)| (r, c, v * C64::new(0.0, -1.0)))
            .collect();
        for j in &self.jumps {
            t.extend(j.op.adjoint().times(&j.op).scaled(real(-0.5)).triplets());
        }
        SparseOp::from_triplets(self.space.dim(), t)
    }

    /// H(t) = H₀ + Σₖ fₖ(t) Hₖ as one sparse operator (allocates; for reports and tests).
    pub fn hamiltonian_at(&self, t: f64) -> SparseOp {
        let mut h = self.static_hamiltonian.clone();
        for term in &self.driven {
            h = h.plus(&term.op.scaled(real(term.envelope.value(t))));
        }
        h
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn one_site_one_mode() -> Network {
        Network {
            sites: vec![SiteParams {
                detuning: 0.3,
                decay: 0.1,
                dephasing: 0.2,
                pump: 0.05,
                rabi: 0.4,
            }],
            modes: vec![ModeParams {
                levels: 4,
                detuning: -0.2,
                loss: 1.0,
                thermal: 0.5,
                drive: 0.7,
                ..Default::default()
            }],
            coupling: vec![vec![0.9]],
            ..Network::empty()
        }
    }

    #[test]
    fn hamiltonian_is_hermitian_and_jumps_carry_rates() {
        for form in [
            CouplingForm::Exchange,
            CouplingForm::Dipole,
            CouplingForm::Longitudinal,
        ] {
            let mut net = one_site_one_mode();
            net.coupling_form = form;
            let me = net.build().unwrap();
            assert!(me.static_hamiltonian.hermiticity_defect() < 1e-15);
            assert_eq!(me.jumps.len(), 5);
            for j in &me.jumps {
                assert!(j.op.is_row_monomial(), "{:?}", j.channel);
            }
            // √(κ(1+n_th)) a: the |1⟩→|0⟩ element is √1.5
            let loss = me
                .jumps
                .iter()
                .find(|j| j.channel == Channel::ModeLoss(0))
                .unwrap();
            let el = loss.op.row(0).next().unwrap().1;
            assert!((el.re - 1.5f64.sqrt()).abs() < 1e-15);
        }
    }

    #[test]
    fn bad_parameters_are_refused() {
        let mut net = one_site_one_mode();
        net.sites[0].decay = -1.0;
        assert!(matches!(net.build(), Err(ModelError::Range { .. })));
        let mut net = one_site_one_mode();
        net.modes[0].levels = 1;
        assert!(net.build().is_err());
        let mut net = one_site_one_mode();
        net.coupling = vec![vec![0.1, 0.2]];
        assert!(matches!(net.build(), Err(ModelError::Shape { .. })));
        let mut net = one_site_one_mode();
        net.sites.push(SiteParams::default());
        net.coupling = vec![vec![0.1], vec![0.1]];
        net.zz = vec![vec![0.0, 1.0], vec![2.0, 0.0]];
        assert!(net.build().is_err());
    }

    #[test]
    fn channels_match_built_jumps() {
        let me = one_site_one_mode().build().unwrap();
        let built: Vec<Channel> = me.jumps.iter().map(|j| j.channel).collect();
        assert_eq!(one_site_one_mode().channels(), built);
    }

    #[test]
    fn field_relaxation_jumps_carry_glauber_weights() {
        // two sites, Jᶻ₀₁ = −0.5 (ferromagnetic): ĥ₀ = 0.5 s₁; at T = 0 site 0 may only flip
        // towards s₁ (Glauber 1963 at zero temperature), with amplitude √γ_G
        let mut net = Network {
            sites: vec![SiteParams::default(); 2],
            zz: vec![vec![0.0, -0.5], vec![-0.5, 0.0]],
            field_relaxation: Some(FieldRelaxation {
                rate: 4.0,
                temperature: 0.0,
            }),
            ..Network::empty()
        };
        let me = net.build().unwrap();
        let built: Vec<Channel> = me.jumps.iter().map(|j| j.channel).collect();
        assert_eq!(net.channels(), built);
        assert_eq!(built[0].label(), "site0-relax-up");
        assert_eq!(built[3].label(), "site1-relax-down");
        // basis index = 2·digit(site 0) + digit(site 1); up-jump of site 0: |g s₁⟩ → |e s₁⟩
        let up0 = me.jumps[0].op.to_dense();
        assert_eq!(up0[2 * 4], real(0.0)); // row 2, column 0; s₁ = −1: field points down, no up-flip
        assert_eq!(up0[3 * 4 + 1], real(2.0)); // s₁ = +1: rate 4 → amplitude 2
                                               // no zz: h = 0, w = ½ either way at any temperature
        net.zz.clear();
        net.field_relaxation = Some(FieldRelaxation {
            rate: 2.0,
            temperature: 0.0,
        });
        let me = net.build().unwrap();
        for j in &me.jumps {
            for (_, _, v) in j.op.triplets() {
                assert!((v.re - 1.0).abs() < 1e-15);
            }
        }
        net.field_relaxation = Some(FieldRelaxation {
            rate: 1.0,
            temperature: -1.0,
        });
        assert!(net.build().is_err());
    }

    #[test]
    fn envelope_terms_are_kept_apart() {
        let mut net = one_site_one_mode();
        net.modes[0].drive_envelope = Envelope::Ramp {
            start: 0.0,
            stop: 1.0,
            from: 0.0,
            to: 1.0,
        };
        let me = net.build().unwrap();
        assert_eq!(me.driven.len(), 1);
        let h0 = me.hamiltonian_at(0.0);
        let h1 = me.hamiltonian_at(1.0);
        let full = one_site_one_mode().build().unwrap().static_hamiltonian;
        assert_eq!(h1.to_dense(), full.to_dense());
        assert_ne!(h0.to_dense(), full.to_dense());
    }
}
