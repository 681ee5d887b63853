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

/// A maximal run of consecutive rows r = start … start+len−1 of a jump operator L whose entries
/// sit at columns src + (r − start): the gather (LρL†)ᵣc then reads contiguous memory.
#[derive(Clone, Copy)]
struct Run {
    start: usize,
    len: usize,
    src: usize,
}

/// An off-diagonal, row-monomial jump operator with real entries (a, a†, σ⁻, σ⁺): row r maps to
/// column `src[r]` with value `val[r]` (0 where the row is empty), split into runs.
struct ShiftJump {
    src: Vec<u32>,
    val: Vec<f64>,
    has: Vec<bool>,
    runs: Vec<Run>,
}

/// A row-monomial jump operator in general form (complex entries), for anything else.
struct GeneralJump {
    src: Vec<u32>,
    val: Vec<C64>,
    has: Vec<bool>,
}

/// Off-diagonal entries of one term of A(t), with its envelope; `imag` holds h where the entry is
/// −i·h with real h (Hermitian parts of real Hamiltonians), `val` the general complex entries.
struct Term {
    envelope: Envelope,
    /// Diagonal of the term (complex), length d.
    diag: Vec<C64>,
    has_diag: bool,
    /// Off-diagonal entries, compressed rows: (column, −i·value → stored as real h when `imag_only`).
    ptr: Vec<usize>,
    col: Vec<usize>,
    val: Vec<C64>,
    imag_only: bool,
    h: Vec<f64>,
}

impl Term {
    fn new(envelope: Envelope, op: &SparseOp) -> Self {
        let d = op.dim();
        let mut diag = vec![C64::new(0.0, 0.0); d];
        let mut ptr = vec![0usize; d + 1];
        let mut col = Vec::new();
        let mut val = Vec::new();
        for r in 0..d {
            for (c, v) in op.row(r) {
                if c == r {
                    diag[r] += v;
                } else {
                    col.push(c);
                    val.push(v);
                }
            }
            ptr[r + 1] = col.len();
        }
        let has_diag = diag.iter().any(|v| *v != C64::new(0.0, 0.0));
        let imag_only = val.iter().all(|v| v.re == 0.0);
        // entry = −i·h  ⇔  h = i·entry
        let h = if imag_only {
            val.iter().map(|v| -v.im).collect()
        } else {
            Vec::new()
        };
        Self {
            envelope,
            diag,
            has_diag,
            ptr,
            col,
            val,
            imag_only,
            h,
        }
    }
}

/// The Lindblad right-hand side with its workspace. Implements [`Rhs`] on vec(ρ) (row-major).
///
/// Row r of X reads row r of ρ (diagonal parts, in cache) and the rows of ρ that the
/// off-diagonal entries of A and of the jump operators point to. Diagonal jump operators
/// (dephasing) act element-wise: (LρL†)ᵣc = v_r v̄_c ρᵣc. Rows are independent and run in
/// parallel; every element is computed by the same operations in the same order whatever the
/// thread count, so results are bit-identical for any number of threads.
pub struct LindbladRhs {
    d: usize,
    /// terms[0] is the static part −iH₀ − ½ΣL†L (envelope constant); the rest −iHₖ with fₖ(t).
    terms: Vec<Term>,
    coeff: Vec<f64>,
    /// Diagonal jump operators with real entries (dephasing): (LρL†)ᵣc = v_r v_c ρᵣc.
    diag_jumps: Vec<Vec<f64>>,
    /// Diagonal jump operators with complex entries: v_r v̄_c ρᵣc.
    diag_jumps_complex: Vec<Vec<C64>>,
    shift_jumps: Vec<ShiftJump>,
    general_jumps: Vec<GeneralJump>,
    /// Panel width w.
    w: usize,
    /// X = Aρ + ½ΣLρL†, panel-major: panel p holds rows 0..d of columns p·w … p·w + w − 1
    /// (the last panel padded).
    x: Vec<C64>,
    par: Par,
}

/// Largest panel width.
const MAX_PANEL: usize = 128;

/// Panel width for dimension d: the d × w slab of ρ a panel reads takes at most about
/// 768 KiB (well inside a per-core L2), w a power of two between 4 and 128, and at least two
/// panels when d ≥ 8.
fn panel_width(d: usize) -> usize {
    let mut w = MAX_PANEL;
    while w > 4 && (16 * d * w > 768 * 1024 || 2 * w > d) {
        w /= 2;
    }
    w
}

fn runs_of(src: &[u32], has: &[bool]) -> Vec<Run> {
    let mut runs: Vec<Run> = Vec::new();
    for r in 0..src.len() {
        if !has[r] {
            continue;
        }
        match runs.last_mut() {
            Some(run) if run.start + run.len == r && run.src + run.len == src[r] as usize => {
                run.len += 1
            }
            _ => runs.push(Run {
                start: r,
                len: 1,
                src: src[r] as usize,
            }),
        }
    }
    runs
}

impl LindbladRhs {
    /// Build the right-hand side of `me`.
    ///
    /// # Errors
    /// [`EvolveError::Unsupported`] if a jump operator has more than one non-zero in a row, or the
    /// dimension exceeds 2³² − 1.
    pub fn new(me: &MasterEquation, par: Par) -> Result<Self, EvolveError> {
        let d = me.space.dim();
        if d >= u32::MAX as usize {
            return Err(EvolveError::Unsupported(format!(
                "dimension {d} is too large"
            )));
        }
        let mi = C64::new(0.0, -1.0);
        let mut a0 = me.static_hamiltonian.scaled(mi);
        let (mut diag_jumps, mut diag_jumps_complex) = (Vec::new(), Vec::new());
        let (mut shift_jumps, mut general_jumps) = (Vec::new(), Vec::new());
        for j in &me.jumps {
            if !j.op.is_row_monomial() {
                return Err(EvolveError::Unsupported(format!(
                    "jump operator of {} has several entries in one row",
                    j.channel.label()
                )));
            }
            a0 = a0.plus(&j.op.adjoint().times(&j.op).scaled(C64::new(-0.5, 0.0)));
            if j.op.is_diagonal() {
                let mut v = vec![C64::new(0.0, 0.0); d];
                for (r, c, x) in j.op.triplets() {
                    debug_assert_eq!(r, c);
                    v[r] = x;
                }
                if v.iter().all(|x| x.im == 0.0) {
                    diag_jumps.push(v.iter().map(|x| x.re).collect());
                } else {
                    diag_jumps_complex.push(v);
                }
                continue;
            }
            let mut src = vec![0u32; d];
            let mut val = vec![C64::new(0.0, 0.0); d];
            let mut has = vec![false; d];
            for (r, c, x) in j.op.triplets() {
                src[r] = c as u32;
                val[r] = x;
                has[r] = true;
            }
            if val.iter().all(|v| v.im == 0.0) {
                let runs = runs_of(&src, &has);
                shift_jumps.push(ShiftJump {
                    src,
                    val: val.iter().map(|v| v.re).collect(),
                    has,
                    runs,
                });
            } else {
                general_jumps.push(GeneralJump { src, val, has });
            }
        }
        let mut terms = vec![Term::new(Envelope::Constant, &a0)];
        for t in &me.driven {
            terms.push(Term::new(t.envelope.clone(), &t.op.scaled(mi)));
        }
        let coeff = vec![1.0; terms.len()];
        Ok(Self {
            d,
            terms,
            coeff,
            diag_jumps,
            diag_jumps_complex,
            shift_jumps,
            general_jumps,
            w: panel_width(d),
            x: vec![C64::new(0.0, 0.0); d.div_ceil(panel_width(d)) * panel_width(d) * d],
            par,
        })
    }

    /// Hilbert-space dimension d.
    pub fn dim(&self) -> usize {
        self.d
    }

    /// Bytes of the workspace this right-hand side allocates for dimension `d` (one d×d matrix,
    /// padded to whole panels).
    pub fn workspace_bytes(d: usize) -> usize {
        let w = panel_width(d);
        d.div_ceil(w) * w * d * std::mem::size_of::<C64>()
    }

    /// Width of the column panels the kernel works in.
    pub fn panel_width(&self) -> usize {
        self.w
    }

    /// Stored non-zeros of all operator terms and jump operators (for reports).
    pub fn nnz(&self) -> usize {
        self.terms
            .iter()
            .map(|t| t.val.len() + t.diag.len())
            .sum::<usize>()
            + (self.diag_jumps.len() + self.diag_jumps_complex.len()) * self.d
            + self
                .shift_jumps
                .iter()
                .map(|j| j.has.iter().filter(|&&h| h).count())
                .sum::<usize>()
            + self
                .general_jumps
                .iter()
                .map(|j| j.has.iter().filter(|&&h| h).count())
                .sum::<usize>()
    }

    /// dρ/dt at time t into `out` (row-major d×d).
    ///
    /// # Panics
    /// If `rho` or `out` is not d² long.
    pub fn apply(&mut self, t: f64, rho: &[C64], out: &mut [C64]) {
        let (d, w) = (self.d, self.w);
        assert!(rho.len() == d * d && out.len() == d * d);
        for (c, term) in self.coeff.iter_mut().zip(&self.terms) {
            *c = term.envelope.value(t);
        }
        // split the borrow: x is written, everything else read
        let mut x = std::mem::take(&mut self.x);
        let me = &*self;
        let fill = |p: usize, panel: &mut [C64]| {
            let c0 = p * w;
            let wp = w.min(d - c0);
            for (r, xr) in panel.chunks_mut(w).enumerate() {
                me.x_row(r, c0, rho, &mut xr[..wp]);
            }
        };
        let parallel = self.par == Par::Rayon && d >= 64;
        if parallel {
            x.par_chunks_mut(d * w)
                .enumerate()
                .for_each(|(p, panel)| fill(p, panel));
        } else {
            x.chunks_mut(d * w)
                .enumerate()
                .for_each(|(p, panel)| fill(p, panel));
        }
        // out = X + X†, by blocks of w rows: out[I, J] = X[I, J] + X[J, I]†, where X[I, J] is a
        // contiguous w×w block of panel J and X[J, I] one of panel I
        let xs = &x;
        let sym = |bi: usize, ob: &mut [C64]| {
            let i0 = bi * w;
            let ni = ob.len() / d;
            let panel_i = &xs[bi * d * w..(bi + 1) * d * w];
            for (pj, panel_j) in xs.chunks(d * w).enumerate() {
                let j0 = pj * w;
                let nj = w.min(d - j0);
                let xij = &panel_j[i0 * w..];
                let xji = &panel_i[j0 * w..];
                for ii in 0..ni {
                    let orow = &mut ob[ii * d + j0..ii * d + j0 + nj];
                    let a = &xij[ii * w..ii * w + nj];
                    for (jj, (o, &xv)) in orow.iter_mut().zip(a).enumerate() {
                        *o = xv + xji[jj * w + ii].conj();
                    }
                }
            }
        };
        if parallel {
            out.par_chunks_mut(w * d)
                .enumerate()
                .for_each(|(b, ob)| sym(b, ob));
        } else {
            out.chunks_mut(w * d)
                .enumerate()
                .for_each(|(b, ob)| sym(b, ob));
        }
        self.x = x;
    }

    /// Columns c0 … c0 + xr.len() − 1 of row r of X = A(t)ρ + ½ Σ LρL†.
    #[inline]
    fn x_row(&self, r: usize, c0: usize, rho: &[C64], xr: &mut [C64]) {
        let d = self.d;
        let n = xr.len();
        let cols = c0..c0 + n;
        let own = &rho[r * d + c0..r * d + c0 + n];
        // diagonal of A and diagonal jumps: element-wise on row r of ρ
        let mut a_rr = C64::new(0.0, 0.0);
        for (term, &c) in self.terms.iter().zip(&self.coeff) {
            if term.has_diag {
                a_rr += term.diag[r] * c;
            }
        }
        if self.diag_jumps.is_empty() {
            for (o, s) in xr.iter_mut().zip(own) {
                *o = a_rr * s;
            }
        } else {
            // real diagonal jumps fold into one real factor per column: Σⱼ ½ vⱼ(r) vⱼ(c)
            let mut fac = [0.0f64; MAX_PANEL];
            let fac = &mut fac[..n];
            for v in &self.diag_jumps {
                let vr = 0.5 * v[r];
                for (f, &vc) in fac.iter_mut().zip(&v[cols.clone()]) {
                    *f += vr * vc;
                }
            }
            for ((o, s), &f) in xr.iter_mut().zip(own).zip(fac.iter()) {
                *o = (a_rr + f) * s;
            }
        }
        for v in &self.diag_jumps_complex {
            let vr = v[r] * 0.5;
            for ((o, s), vc) in xr.iter_mut().zip(own).zip(&v[cols.clone()]) {
                *o += vr * vc.conj() * s;
            }
        }
        // off-diagonal entries of A: axpy from other rows of ρ (same columns)
        for (term, &c) in self.terms.iter().zip(&self.coeff) {
            if c == 0.0 {
                continue;
            }
            for k in term.ptr[r]..term.ptr[r + 1] {
                let base = term.col[k] * d + c0;
                let src = &rho[base..base + n];
                if term.imag_only {
                    // (−i h)·s = (h·s.im, −h·s.re)
                    let h = term.h[k] * c;
                    for (o, s) in xr.iter_mut().zip(src) {
                        o.re += h * s.im;
                        o.im -= h * s.re;
                    }
                } else {
                    let v = term.val[k] * c;
                    for (o, s) in xr.iter_mut().zip(src) {
                        *o += v * s;
                    }
                }
            }
        }
        // off-diagonal jumps: (LρL†)ᵣc = v_r v_c ρ[k(r), k(c)], contiguous along each run
        for j in &self.shift_jumps {
            if !j.has[r] {
                continue;
            }
            let wr = 0.5 * j.val[r];
            let row = &rho[j.src[r] as usize * d..(j.src[r] as usize + 1) * d];
            // runs are sorted by start and disjoint: start at the first one reaching column c0
            let first = j.runs.partition_point(|run| run.start + run.len <= c0);
            for run in &j.runs[first..] {
                if run.start >= cols.end {
                    break;
                }
                let lo = run.start.max(c0);
                let hi = (run.start + run.len).min(cols.end);
                let o = &mut xr[lo - c0..hi - c0];
                let v = &j.val[lo..hi];
                let s = &row[run.src + (lo - run.start)..run.src + (hi - run.start)];
                for ((o, &vc), s) in o.iter_mut().zip(v).zip(s) {
                    *o += s * (wr * vc);
                }
            }
        }
        for j in &self.general_jumps {
            if !j.has[r] {
                continue;
            }
            let wr = j.val[r] * 0.5;
            let row = &rho[j.src[r] as usize * d..(j.src[r] as usize + 1) * d];
            for (o, c) in xr.iter_mut().zip(cols.clone()) {
                if j.has[c] {
                    *o += wr * j.val[c].conj() * row[j.src[c] as usize];
                }
            }
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
