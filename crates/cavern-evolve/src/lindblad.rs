//! Matrix-free Lindblad right-hand side on a dense density matrix.
//!
//! dρ/dt = Aρ + ρA† + Σₗ LₗρLₗ†, with the non-Hermitian generator A(t) = −iH(t) − ½ Σₗ Lₗ†Lₗ.
//! Since ρ is Hermitian, ρA† = (Aρ)†, so the kernel forms X = Aρ + ½ Σₗ LₗρLₗ† row by row and
//! returns X + X†. Only the sparse operators and one d×d workspace are stored; no d²×d²
//! superoperator is ever built.
//!
//! Layout: ρ is row-major, `rho[r * d + c]` = ⟨r|ρ|c⟩, in the basis order of
//! [`cavern_model::Space`]. Jump operators must have at most one non-zero per row (true for a, a†,
//! σ⁻, σ⁺, σᶻ and their products), which makes LρL† a gather: (LρL†)ᵣc = v_r v̄_c ρ[k(r), k(c)].

use crate::dopri::Rhs;
use crate::par::Par;
use crate::EvolveError;
use cavern_model::{Envelope, MasterEquation, SparseOp};
use num_complex::Complex64 as C64;
use rayon::prelude::*;

const NONE: u32 = u32::MAX;

/// A row-monomial jump operator: row r maps to column `src[r]` (or none) with value `val[r]`.
struct MonoJump {
    src: Vec<u32>,
    val: Vec<C64>,
    /// (row, source column, value) for every non-zero row, ascending by row.
    active: Vec<(u32, u32, C64)>,
}

/// Compressed rows of one term of A(t), with its envelope.
struct Term {
    envelope: Envelope,
    ptr: Vec<usize>,
    col: Vec<usize>,
    val: Vec<C64>,
}

impl Term {
    fn new(envelope: Envelope, op: &SparseOp) -> Self {
        let (p, c, v) = op.raw();
        Self {
            envelope,
            ptr: p.to_vec(),
            col: c.to_vec(),
            val: v.to_vec(),
        }
    }
}

/// The Lindblad right-hand side with its workspace. Implements [`Rhs`] on vec(ρ) (row-major).
pub struct LindbladRhs {
    d: usize,
    /// terms[0] is the static part −iH₀ − ½ΣL†L (envelope constant); the rest −iHₖ with fₖ(t).
    terms: Vec<Term>,
    coeff: Vec<C64>,
    jumps: Vec<MonoJump>,
    x: Vec<C64>,
    par: Par,
}

/// Rows handled per parallel task (fixed: results do not depend on thread count).
fn rows_per_task(d: usize) -> usize {
    (8192 / d.max(1)).clamp(1, 64)
}

/// Tile edge of the X + X† pass.
const TILE: usize = 32;

impl LindbladRhs {
    /// Build the right-hand side of `me`.
    ///
    /// # Errors
    /// [`EvolveError::Unsupported`] if a jump operator has more than one non-zero in a row, or the
    /// dimension exceeds 2³² − 1.
    pub fn new(me: &MasterEquation, par: Par) -> Result<Self, EvolveError> {
        let d = me.space.dim();
        if d >= NONE as usize {
            return Err(EvolveError::Unsupported(format!(
                "dimension {d} is too large"
            )));
        }
        let mi = C64::new(0.0, -1.0);
        let mut a0 = me.static_hamiltonian.scaled(mi);
        let mut jumps = Vec::with_capacity(me.jumps.len());
        for j in &me.jumps {
            if !j.op.is_row_monomial() {
                return Err(EvolveError::Unsupported(format!(
                    "jump operator of {} has several entries in one row",
                    j.channel.label()
                )));
            }
            a0 = a0.plus(&j.op.adjoint().times(&j.op).scaled(C64::new(-0.5, 0.0)));
            let mut src = vec![NONE; d];
            let mut val = vec![C64::new(0.0, 0.0); d];
            let mut active = Vec::new();
            for r in 0..d {
                if let Some((c, v)) = j.op.row(r).next() {
                    src[r] = c as u32;
                    val[r] = v;
                    active.push((r as u32, c as u32, v));
                }
            }
            jumps.push(MonoJump { src, val, active });
        }
        let mut terms = vec![Term::new(Envelope::Constant, &a0)];
        for t in &me.driven {
            terms.push(Term::new(t.envelope.clone(), &t.op.scaled(mi)));
        }
        let coeff = vec![C64::new(1.0, 0.0); terms.len()];
        Ok(Self {
            d,
            terms,
            coeff,
            jumps,
            x: vec![C64::new(0.0, 0.0); d * d],
            par,
        })
    }

    /// Hilbert-space dimension d.
    pub fn dim(&self) -> usize {
        self.d
    }

    /// Bytes of the workspace this right-hand side allocates for dimension `d` (one d×d matrix).
    pub fn workspace_bytes(d: usize) -> usize {
        d * d * std::mem::size_of::<C64>()
    }

    /// Stored non-zeros of all operator terms and jump operators (for reports).
    pub fn nnz(&self) -> usize {
        self.terms.iter().map(|t| t.val.len()).sum::<usize>()
            + self.jumps.iter().map(|j| j.active.len()).sum::<usize>()
    }

    /// dρ/dt at time t into `out` (row-major d×d).
    ///
    /// # Panics
    /// If `rho` or `out` is not d² long.
    pub fn apply(&mut self, t: f64, rho: &[C64], out: &mut [C64]) {
        let d = self.d;
        assert!(rho.len() == d * d && out.len() == d * d);
        for (c, term) in self.coeff.iter_mut().zip(&self.terms) {
            *c = C64::new(term.envelope.value(t), 0.0);
        }
        let (terms, coeff, jumps) = (&self.terms, &self.coeff, &self.jumps);
        let rows = rows_per_task(d);
        let fill = |block: usize, xb: &mut [C64]| {
            for (j, xr) in xb.chunks_mut(d).enumerate() {
                x_row(block * rows + j, d, rho, terms, coeff, jumps, xr);
            }
        };
        match self.par {
            Par::Rayon if d * d > 4096 => self
                .x
                .par_chunks_mut(rows * d)
                .enumerate()
                .for_each(|(b, xb)| fill(b, xb)),
            _ => self
                .x
                .chunks_mut(rows * d)
                .enumerate()
                .for_each(|(b, xb)| fill(b, xb)),
        }
        let x = &self.x;
        let sym = |bi: usize, ob: &mut [C64]| {
            let i0 = bi * TILE;
            let ni = ob.len() / d;
            for j0 in (0..d).step_by(TILE) {
                let j1 = (j0 + TILE).min(d);
                for ii in 0..ni {
                    let i = i0 + ii;
                    let orow = &mut ob[ii * d..(ii + 1) * d];
                    let xrow = &x[i * d..(i + 1) * d];
                    for j in j0..j1 {
                        orow[j] = xrow[j] + x[j * d + i].conj();
                    }
                }
            }
        };
        match self.par {
            Par::Rayon if d * d > 4096 => out
                .par_chunks_mut(TILE * d)
                .enumerate()
                .for_each(|(b, ob)| sym(b, ob)),
            _ => out
                .chunks_mut(TILE * d)
                .enumerate()
                .for_each(|(b, ob)| sym(b, ob)),
        }
    }
}

/// Row r of X = A(t)ρ + ½ Σ LρL†.
#[inline]
fn x_row(
    r: usize,
    d: usize,
    rho: &[C64],
    terms: &[Term],
    coeff: &[C64],
    jumps: &[MonoJump],
    xr: &mut [C64],
) {
    xr.fill(C64::new(0.0, 0.0));
    for (term, &c) in terms.iter().zip(coeff) {
        if c == C64::new(0.0, 0.0) {
            continue;
        }
        for k in term.ptr[r]..term.ptr[r + 1] {
            let v = term.val[k] * c;
            let src = &rho[term.col[k] * d..(term.col[k] + 1) * d];
            for (o, s) in xr.iter_mut().zip(src) {
                *o += v * s;
            }
        }
    }
    for j in jumps {
        let s = j.src[r];
        if s == NONE {
            continue;
        }
        let w = j.val[r] * 0.5;
        let src = &rho[s as usize * d..(s as usize + 1) * d];
        for &(c, sc, vc) in &j.active {
            xr[c as usize] += w * vc.conj() * src[sc as usize];
        }
    }
}

impl Rhs for LindbladRhs {
    fn len(&self) -> usize {
        self.d * self.d
    }
    fn eval(&mut self, t: f64, y: &[C64], dy: &mut [C64]) {
        self.apply(t, y, dy);
    }
}
