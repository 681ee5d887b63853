//! Matrix-free Lindblad right-hand side on a dense density matrix.
//!
//! dρ/dt = Aρ + ρA† + Σₗ LₗρLₗ†, with the non-Hermitian generator A(t) = −iH(t) − ½ Σₗ Lₗ†Lₗ.
//! Since ρ is Hermitian, ρA† = (Aρ)†: with X = Aρ (plus half the element-wise diagonal-jump
//! terms), dρ/dt = X + X† + Σ LρL† over the off-diagonal jumps. No d²×d² superoperator and no
//! d×d workspace is ever built.
//!
//! Each output tile (I, J) of the diagonal and lower tiles is formed on its own: X(I, J) straight
//! into the output, X(J, I) into a per-thread w×w scratch whose adjoint is added, then the jump
//! gathers of that tile. The upper tiles are the adjoints of the lower ones: the time integrator
//! carries only the lower tiles ([`LindbladRhs::lower_half_only`]); for the whole matrix (the
//! steady-state solvers) they are mirrored at the end, so the result is exactly Hermitian.
//!
//! Layout: ρ is row-major, `rho[r * d + c]` = ⟨r|ρ|c⟩, in the basis order of
//! [`cavern_model::Space`]. Jump operators must have at most one non-zero per row (true for a, a†,
//! σ⁻, σ⁺, σᶻ and their products), which makes LρL† a gather: (LρL†)ᵣc = v_r v̄_c ρ[k(r), k(c)].
//!
//! Organisation: the operators of a tensor-product model have few distinct *shifts*
//! (column − row), so A is stored by diagonals — for each shift s a vector D_s with
//! (Aρ)ᵣ· += D_s(r) ρ_{r+s,·}. The kernel's state is ρ cut into w×w tiles (see
//! [`LindbladRhs::to_panels`]): the w-long segments of a column panel are contiguous inside each
//! tile, and the diagonal and lower tiles lead, so that a Hermitian state can be carried by them
//! alone ([`LindbladRhs::lower_half_only`]). X is built column panel by column panel and, inside
//! a panel, row by row: the segment being formed stays in the innermost cache while each term
//! adds to it. The second pass works tile by tile: tile (I, J) of X plus the adjoint of tile
//! (J, I). Panels and tiles are independent and run in
//! parallel; each element is computed by the same operations in the same order whatever the
//! thread count, so results are bit-identical for any number of threads.

use crate::dopri::Rhs;
use crate::par::{vectorized, Par};
use crate::EvolveError;
use cavern_model::{Envelope, MasterEquation, SparseOp};
use num_complex::Complex64 as C64;
use rayon::prelude::*;

/// Values of one diagonal of A: pure imaginary (−i·h with real h, the usual case for real
/// Hamiltonians) or general complex.
enum DiagValues {
    /// Entry = −i·h[r].
    Imag(Vec<f64>),
    /// Entry = v[r].
    Complex(Vec<C64>),
}

/// One off-diagonal of A(t): entries A[r, r + shift] (zero where the row has none), scaled by
/// the envelope of coefficient group `group` (0 = static).
struct Diagonal {
    shift: isize,
    group: usize,
    values: DiagValues,
}

/// A row-monomial jump operator with real entries whose rows map to columns by constant shifts
/// along runs (a, a†, σ⁻, σ⁺, their products): row r ↦ column r + shift on each span.
struct ShiftJump {
    val: Vec<f64>,
    /// Rows with an entry and the shift of their column (row r ↦ column r + shift[r]).
    has: Vec<bool>,
    shift: Vec<isize>,
    /// For each panel p: (first column offset in the panel, length, source panel, source column
    /// offset) of the contiguous column segments of L inside panel p, split so that each segment's
    /// source columns lie in one panel.
    segments: Vec<Vec<(usize, usize, usize, usize)>>,
}

/// A row-monomial jump operator in general form (complex entries).
struct GeneralJump {
    src: Vec<u32>,
    val: Vec<C64>,
    has: Vec<bool>,
}

/// The Lindblad right-hand side. Implements [`Rhs`] on vec(ρ) (row-major).
pub struct LindbladRhs {
    d: usize,
    /// Panel width w.
    w: usize,
    /// Envelopes of the coefficient groups; group 0 is the static part.
    envelopes: Vec<Envelope>,
    coeff: Vec<f64>,
    /// Diagonal of A per group (complex, length d), `None` where a group has no diagonal part.
    main: Vec<Option<Vec<C64>>>,
    /// Off-diagonals of A.
    diagonals: Vec<Diagonal>,
    /// Diagonal jump operators with real entries (dephasing): (LρL†)ᵣc = v_r v_c ρᵣc.
    diag_jumps: Vec<Vec<f64>>,
    /// Diagonal jump operators with complex entries: v_r v̄_c ρᵣc.
    diag_jumps_complex: Vec<Vec<C64>>,
    shift_jumps: Vec<ShiftJump>,
    general_jumps: Vec<GeneralJump>,
    /// Storage index of tile (i, j) at `i·n + j` (n = d/w; see `tile_index`).
    tiles: Vec<u32>,
    /// Tile (i, j) at each storage index.
    tile_at: Vec<(u32, u32)>,
    /// Offset of row r of column panel p in the tile layout at `p·d + r` (see `row_at`).
    row_off: Vec<usize>,
    /// Whether only the diagonal and lower tiles of dρ/dt are written (see
    /// [`LindbladRhs::lower_half_only`]).
    half: bool,
    par: Par,
}

/// Largest panel width.
const MAX_PANEL: usize = 128;

thread_local! {
    /// Per-thread w×w tile of X for the lower-half kernel (allocated once per thread).
    static TILE_SCRATCH: std::cell::RefCell<Vec<C64>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// Columns summed together in registers by the off-diagonal pass.
const CHUNK: usize = 8;

/// Off-diagonals per row handled by the register-blocked pass (the rest fall back to axpy).
const MAX_ACTIVE: usize = 256;

/// Panel width for dimension d: the largest divisor of d that is at most [`MAX_PANEL`] and at
/// most max(d/8, min(d/2, 48)): wide panels keep the inner loops long, while mid-sized problems
/// (d of a few hundred) still split into enough panels to keep two or more threads busy. A
/// divisor means no padding. (Measured with `benches/rhs.rs`; see docs/performance.md.)
fn panel_width(d: usize) -> usize {
    let cap = MAX_PANEL.min((d / 8).max((d / 2).min(48))).max(1);
    (1..=cap).rev().find(|w| d.is_multiple_of(*w)).unwrap_or(1)
}

/// Storage index of tile (i, j) among the P×P tiles of edge w (P = d/w): the P diagonal tiles
/// first, then the strictly lower tiles (i > j) panel by panel (j, then i), then the strictly
/// upper ones (i < j), panel by panel. The lower triangle of tiles is thus one leading block of
/// the vector, which the integrator can carry alone (see [`LindbladRhs::lower_half_only`]).
fn tile_index(i: usize, j: usize, n: usize) -> usize {
    if i == j {
        i
    } else if i > j {
        n + j * (n - 1) - j * j.saturating_sub(1) / 2 + (i - j - 1)
    } else {
        n + n * (n - 1) / 2 + j * j.saturating_sub(1) / 2 + i
    }
}

/// Offset of element (r, c) of a d×d matrix in the kernel's tile layout.
fn tile_offset(d: usize, w: usize, r: usize, c: usize) -> usize {
    tile_index(r / w, c / w, d / w) * w * w + (r % w) * w + c % w
}

/// Copy a row-major d×d matrix into the tile layout of [`LindbladRhs`]: with w = the kernel's
/// panel width (a divisor of d), the matrix is cut into w×w tiles, each stored row-major and
/// contiguous; the diagonal tiles come first, then the tiles below the diagonal, then those
/// above it (see `tile_index`).
///
/// # Panics
/// If the lengths are not d².
pub fn to_panels(d: usize, row_major: &[C64], panels: &mut [C64]) {
    let w = panel_width(d);
    assert!(row_major.len() == d * d && panels.len() == d * d);
    for r in 0..d {
        for cb in 0..d / w {
            let o = tile_offset(d, w, r, cb * w);
            panels[o..o + w].copy_from_slice(&row_major[r * d + cb * w..r * d + (cb + 1) * w]);
        }
    }
}

/// Inverse of [`to_panels`].
///
/// # Panics
/// If the lengths are not d².
pub fn from_panels(d: usize, panels: &[C64], row_major: &mut [C64]) {
    let w = panel_width(d);
    assert!(row_major.len() == d * d && panels.len() == d * d);
    for r in 0..d {
        for cb in 0..d / w {
            let o = tile_offset(d, w, r, cb * w);
            row_major[r * d + cb * w..r * d + (cb + 1) * w].copy_from_slice(&panels[o..o + w]);
        }
    }
}

/// As [`from_panels`] for a Hermitian matrix of which only the diagonal and lower tiles (the
/// leading d·(d + w)/2 entries of the tile layout) are read; the rest is mirrored from them.
///
/// # Panics
/// If the lengths are not d².
pub fn from_lower_panels(d: usize, panels: &[C64], row_major: &mut [C64]) {
    let w = panel_width(d);
    assert!(row_major.len() == d * d && panels.len() == d * d);
    for r in 0..d {
        for cb in 0..=r / w {
            let o = tile_offset(d, w, r, cb * w);
            row_major[r * d + cb * w..r * d + (cb + 1) * w].copy_from_slice(&panels[o..o + w]);
        }
    }
    for r in 0..d {
        for c in (r / w + 1) * w..d {
            row_major[r * d + c] = row_major[c * d + r].conj();
        }
    }
}

/// Split the operator `op` (entries already including any −i) into its main diagonal and its
/// off-diagonals by shift.
fn by_diagonals(op: &SparseOp, group: usize, main: &mut [C64], out: &mut Vec<Diagonal>) {
    let d = op.dim();
    let mut by_shift: std::collections::BTreeMap<isize, Vec<C64>> = Default::default();
    for (r, c, v) in op.triplets() {
        if r == c {
            main[r] += v;
        } else {
            let s = c as isize - r as isize;
            by_shift
                .entry(s)
                .or_insert_with(|| vec![C64::new(0.0, 0.0); d])[r] += v;
        }
    }
    for (shift, vals) in by_shift {
        let values = if vals.iter().all(|v| v.re == 0.0) {
            // v = −i·h ⇔ h = −v.im
            DiagValues::Imag(vals.iter().map(|v| -v.im).collect())
        } else {
            DiagValues::Complex(vals)
        };
        out.push(Diagonal {
            shift,
            group,
            values,
        });
    }
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
        let a0 = me.static_generator();
        let (mut diag_jumps, mut diag_jumps_complex) = (Vec::new(), Vec::new());
        let (mut shift_jumps, mut general_jumps) = (Vec::new(), Vec::new());
        for j in &me.jumps {
            if !j.op.is_row_monomial() {
                return Err(EvolveError::Unsupported(format!(
                    "jump operator of {} has several entries in one row",
                    j.channel.label()
                )));
            }
            let mut src = vec![0u32; d];
            let mut val = vec![C64::new(0.0, 0.0); d];
            let mut has = vec![false; d];
            for (r, c, x) in j.op.triplets() {
                src[r] = c as u32;
                val[r] = x;
                has[r] = true;
            }
            let real = val.iter().all(|v| v.im == 0.0);
            if j.op.is_diagonal() {
                if real {
                    diag_jumps.push(val.iter().map(|v| v.re).collect());
                } else {
                    diag_jumps_complex.push(val);
                }
            } else if real {
                let w = panel_width(d);
                let shift: Vec<isize> = (0..d).map(|r| src[r] as isize - r as isize).collect();
                let mut segments = vec![Vec::new(); d / w];
                for (p, segs) in segments.iter_mut().enumerate() {
                    let mut c = p * w;
                    while c < (p + 1) * w {
                        if !has[c] {
                            c += 1;
                            continue;
                        }
                        // extend while the shift stays the same and the source stays in one panel
                        let (lo, sc) = (c, src[c] as usize);
                        let mut len = 1;
                        while c + len < (p + 1) * w
                            && has[c + len]
                            && src[c + len] as usize == sc + len
                            && (sc + len) % w != 0
                        {
                            len += 1;
                        }
                        segs.push((lo - p * w, len, sc / w, sc % w));
                        c += len;
                    }
                }
                shift_jumps.push(ShiftJump {
                    val: val.iter().map(|v| v.re).collect(),
                    has,
                    shift,
                    segments,
                });
            } else {
                general_jumps.push(GeneralJump { src, val, has });
            }
        }
        let mut envelopes = vec![Envelope::Constant];
        let mut main = Vec::new();
        let mut diagonals = Vec::new();
        let mut m0 = vec![C64::new(0.0, 0.0); d];
        by_diagonals(&a0, 0, &mut m0, &mut diagonals);
        main.push(Some(m0));
        for (g, t) in me.driven.iter().enumerate() {
            envelopes.push(t.envelope.clone());
            let mut m = vec![C64::new(0.0, 0.0); d];
            by_diagonals(&t.op.scaled(mi), g + 1, &mut m, &mut diagonals);
            main.push(m.iter().any(|v| *v != C64::new(0.0, 0.0)).then_some(m));
        }
        let w = panel_width(d);
        let n = d / w;
        let mut tiles = vec![0u32; n * n];
        let mut tile_at = vec![(0u32, 0u32); n * n];
        for i in 0..n {
            for j in 0..n {
                let t = tile_index(i, j, n);
                tiles[i * n + j] = t as u32;
                tile_at[t] = (i as u32, j as u32);
            }
        }
        let row_off = (0..n)
            .flat_map(|p| (0..d).map(move |r| (p, r)))
            .map(|(p, r)| tiles[(r / w) * n + p] as usize * w * w + (r % w) * w)
            .collect();
        Ok(Self {
            d,
            w,
            tiles,
            tile_at,
            row_off,
            half: false,
            coeff: vec![1.0; envelopes.len()],
            envelopes,
            main,
            diagonals,
            diag_jumps,
            diag_jumps_complex,
            shift_jumps,
            general_jumps,
            par,
        })
    }

    /// Make [`LindbladRhs::apply`] write only the diagonal and lower tiles of dρ/dt, the leading
    /// d·(d + w)/2 entries of the tile layout, and let the integrator carry only those
    /// ([`Rhs::carried`]); [`Rhs::complete`] restores the upper tiles of a stage input by
    /// mirroring. ρ and every Runge–Kutta stage are Hermitian, so nothing is lost, and the
    /// integrator's vector operations touch about half the memory. Matrices given to `apply` must
    /// still be complete.
    pub fn lower_half_only(mut self) -> Self {
        self.half = true;
        self
    }

    /// Entries of the tile layout held by the diagonal tiles (d·w) and by the diagonal and lower
    /// tiles together (d·(d + w)/2).
    pub fn lower_len(&self) -> (usize, usize) {
        let n = self.d / self.w;
        (self.d * self.w, (n * (n + 1) / 2) * self.w * self.w)
    }

    /// Offset of row r of column panel p (w entries) in the tile layout.
    #[inline(always)]
    fn row_at(&self, p: usize, r: usize) -> usize {
        self.row_off[p * self.d + r]
    }

    /// Hilbert-space dimension d.
    pub fn dim(&self) -> usize {
        self.d
    }

    /// Width of the column panels the kernel works in.
    pub fn panel_width(&self) -> usize {
        self.w
    }

    /// Number of distinct off-diagonals of A (each costs one streaming pass per panel).
    pub fn n_diagonals(&self) -> usize {
        self.diagonals.len()
    }

    /// Stored non-zeros of A and of the jump operators (for reports).
    pub fn nnz(&self) -> usize {
        let main: usize = self
            .main
            .iter()
            .flatten()
            .map(|m| m.iter().filter(|v| **v != C64::new(0.0, 0.0)).count())
            .sum();
        let off: usize = self
            .diagonals
            .iter()
            .map(|g| match &g.values {
                DiagValues::Imag(h) => h.iter().filter(|x| **x != 0.0).count(),
                DiagValues::Complex(v) => v.iter().filter(|x| **x != C64::new(0.0, 0.0)).count(),
            })
            .sum();
        let jumps: usize = self
            .shift_jumps
            .iter()
            .map(|j| j.has.iter().filter(|&&h| h).count())
            .sum();
        main + off
            + jumps
            + (self.diag_jumps.len() + self.diag_jumps_complex.len()) * self.d
            + self
                .general_jumps
                .iter()
                .map(|j| j.has.iter().filter(|&&h| h).count())
                .sum::<usize>()
    }

    /// Copy a row-major d×d matrix into the panel-major layout the kernel works in
    /// (see [`to_panels`]).
    ///
    /// # Panics
    /// If the lengths are not d².
    pub fn to_panels(&self, row_major: &[C64], panels: &mut [C64]) {
        to_panels(self.d, row_major, panels);
    }

    /// Copy a panel-major matrix back to row-major order (see [`from_panels`]).
    ///
    /// # Panics
    /// If the lengths are not d².
    pub fn from_panels(&self, panels: &[C64], row_major: &mut [C64]) {
        from_panels(self.d, panels, row_major);
    }

    /// dρ/dt at time t into `out`, both in the tile layout (see [`LindbladRhs::to_panels`]). ρ
    /// must be Hermitian. In lower-half mode ([`LindbladRhs::lower_half_only`]) only the diagonal
    /// and lower tiles of `out` are written; otherwise the upper tiles are then mirrored from
    /// them, so that the result is exactly Hermitian.
    ///
    /// # Panics
    /// If `rho` or `out` is not d² long.
    pub fn apply(&mut self, t: f64, rho: &[C64], out: &mut [C64]) {
        let (d, w) = (self.d, self.w);
        assert!(rho.len() == d * d && out.len() == d * d);
        for (c, env) in self.coeff.iter_mut().zip(&self.envelopes) {
            *c = env.value(t);
        }
        let me = &*self;
        let parallel = self.par == Par::Rayon && d >= 64;
        // tile by tile, no d×d workspace: tile (I, J) of X goes straight into the output and
        // tile (J, I) into a per-thread w×w scratch whose adjoint is then added
        let n_out = self.lower_len().1;
        let tile_at = &self.tile_at;
        let fused = |t: usize, tile_o: &mut [C64]| {
            TILE_SCRATCH.with(|cell| {
                let mut buf = cell.borrow_mut();
                if buf.len() < w * w {
                    // once per thread (and when a larger panel first appears)
                    buf.resize(w * w, C64::new(0.0, 0.0));
                }
                let (i, j) = (tile_at[t].0 as usize, tile_at[t].1 as usize);
                let scratch = &mut buf[..w * w];
                vectorized(
                    #[inline(always)]
                    || me.fused_tile(i, j, rho, tile_o, scratch),
                )
            })
        };
        if parallel {
            out[..n_out]
                .par_chunks_mut(w * w)
                .enumerate()
                .for_each(|(t, o)| fused(t, o));
        } else {
            out[..n_out]
                .chunks_mut(w * w)
                .enumerate()
                .for_each(|(t, o)| fused(t, o));
        }
        if !self.half {
            self.mirror_upper(out);
        }
    }

    /// Tile (I, J), I ≥ J, of dρ/dt: X(I, J) + X(J, I)† + Σ LρL† over the off-diagonal jumps,
    /// with `scratch` (w²) for X(J, I).
    #[inline(always)]
    fn fused_tile(&self, i: usize, j: usize, rho: &[C64], o: &mut [C64], scratch: &mut [C64]) {
        let w = self.w;
        self.x_rows(i, j * w, rho, scratch);
        if i == j {
            // X(I, I) is in the scratch: o = X + X†, exactly Hermitian
            for a in 0..w {
                for (b, v) in o[a * w..(a + 1) * w].iter_mut().enumerate() {
                    *v = scratch[a * w + b] + scratch[b * w + a].conj();
                }
            }
        } else {
            self.x_rows(j, i * w, rho, o);
            for a in 0..w {
                for (b, v) in o[a * w..(a + 1) * w].iter_mut().enumerate() {
                    *v += scratch[b * w + a].conj();
                }
            }
        }
        for (a, row) in o.chunks_exact_mut(w).enumerate() {
            self.add_jumps(i * w + a, j, rho, row);
        }
    }

    /// Rows r₀ … r₀ + rows.len()/w − 1 of column panel p of X = A(t)ρ + ½ Σ LρL† over the
    /// diagonal jumps (columns p·w … p·w + w − 1; the off-diagonal jumps are added to the
    /// output tiles at full weight, see `fused_tile`), row by row so that the row segment being
    /// formed stays in the innermost cache while every term adds to it.
    #[inline(always)]
    fn x_rows(&self, p: usize, r0: usize, rho: &[C64], rows: &mut [C64]) {
        let (d, w) = (self.d, self.w);
        let c0 = p * w;
        let cols = c0..c0 + w;
        let offs = &self.row_off[p * d..(p + 1) * d];
        let at = |r: usize| &rho[offs[r]..offs[r] + w];
        let mut fac = [0.0f64; MAX_PANEL];
        let fac = &mut fac[..w];
        let mut fac_row: Option<usize> = None;
        let mut active = [(0usize, 0.0f64); MAX_ACTIVE];
        for (r, xr) in (r0..).zip(rows.chunks_mut(w)) {
            // main diagonal of A and diagonal jumps, element-wise on row r of ρ
            let mut a_rr = C64::new(0.0, 0.0);
            for (m, &c) in self.main.iter().zip(&self.coeff) {
                if let Some(m) = m {
                    a_rr += m[r] * c;
                }
            }
            let own = at(r);
            if self.diag_jumps.is_empty() {
                for (o, s) in xr.iter_mut().zip(own) {
                    *o = a_rr * s;
                }
            } else {
                // real diagonal jumps fold into one real factor per column: Σⱼ ½ vⱼ(r) vⱼ(c);
                // consecutive rows often share every vⱼ(r) (they differ only in a mode digit),
                // and then the factor is reused
                let same = fac_row.is_some_and(|q| self.diag_jumps.iter().all(|v| v[q] == v[r]));
                if !same {
                    fac.fill(0.0);
                    for v in &self.diag_jumps {
                        let vr = 0.5 * v[r];
                        for (f, &vc) in fac.iter_mut().zip(&v[cols.clone()]) {
                            *f += vr * vc;
                        }
                    }
                    fac_row = Some(r);
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
            // off-diagonals of A. Purely imaginary entries (the common case) are gathered into a
            // short list and summed chunk by chunk in registers, so the row segment is loaded and
            // stored once instead of once per diagonal; complex entries use a plain axpy.
            let mut n_act = 0;
            for dg in &self.diagonals {
                let c = self.coeff[dg.group];
                match &dg.values {
                    DiagValues::Imag(h) => {
                        let h = h[r] * c;
                        if h == 0.0 {
                            continue;
                        }
                        let src_row = (r as isize + dg.shift) as usize;
                        if n_act < MAX_ACTIVE {
                            active[n_act] = (offs[src_row], h);
                            n_act += 1;
                        } else {
                            // (−i h)·s = (h·s.im, −h·s.re)
                            for (o, s) in xr.iter_mut().zip(at(src_row)) {
                                o.re += h * s.im;
                                o.im -= h * s.re;
                            }
                        }
                    }
                    DiagValues::Complex(v) => {
                        let v = v[r] * c;
                        if v == C64::new(0.0, 0.0) {
                            continue;
                        }
                        let src = at((r as isize + dg.shift) as usize);
                        for (o, s) in xr.iter_mut().zip(src) {
                            *o += v * s;
                        }
                    }
                }
            }
            let act = &active[..n_act];
            if !act.is_empty() {
                let mut chunks = xr.chunks_exact_mut(CHUNK);
                for (ci, xc) in chunks.by_ref().enumerate() {
                    let col = ci * CHUNK;
                    // fixed-size copies: registers, no memmove call
                    let xc: &mut [C64; CHUNK] = xc.try_into().expect("exact chunk");
                    // Σ h·s first (no re/im swap per term), then X += −i·Σ h·s once
                    let mut acc = [C64::new(0.0, 0.0); CHUNK];
                    for &(base, h) in act {
                        let src: &[C64; CHUNK] = rho[base + col..base + col + CHUNK]
                            .try_into()
                            .expect("exact chunk");
                        for (a, s) in acc.iter_mut().zip(src) {
                            a.re += h * s.re;
                            a.im += h * s.im;
                        }
                    }
                    for (x, a) in xc.iter_mut().zip(&acc) {
                        x.re += a.im;
                        x.im -= a.re;
                    }
                }
                let rest = chunks.into_remainder();
                let col = w - rest.len();
                for &(base, h) in act {
                    let src = &rho[base + col..base + w];
                    for (a, s) in rest.iter_mut().zip(src) {
                        a.re += h * s.im;
                        a.im -= h * s.re;
                    }
                }
            }
        }
    }

    /// Add Σ LρL† of the off-diagonal jumps to `o`, row r of column panel p (w entries):
    /// (LρL†)ᵣc = v_r v̄_c ρ[k(r), k(c)], gathered along the column segments of each jump.
    #[inline(always)]
    fn add_jumps(&self, r: usize, p: usize, rho: &[C64], o: &mut [C64]) {
        let (d, w) = (self.d, self.w);
        let c0 = p * w;
        for j in &self.shift_jumps {
            if !j.has[r] {
                continue;
            }
            let vr = j.val[r];
            let rr = (r as isize + j.shift[r]) as usize;
            for &(off, len, sp, soff) in &j.segments[p] {
                let base = self.row_at(sp, rr) + soff;
                let src = &rho[base..base + len];
                let vals = &j.val[c0 + off..c0 + off + len];
                for ((o, &vc), s) in o[off..off + len].iter_mut().zip(vals).zip(src) {
                    let f = vr * vc;
                    o.re += s.re * f;
                    o.im += s.im * f;
                }
            }
        }
        for j in &self.general_jumps {
            if !j.has[r] {
                continue;
            }
            let vr = j.val[r];
            let rr = j.src[r] as usize;
            for (o, c) in o.iter_mut().zip(c0..c0 + w) {
                if j.has[c] {
                    let cc = j.src[c] as usize;
                    *o += vr * j.val[c].conj() * rho[tile_offset(d, w, rr, cc)];
                }
            }
        }
    }

    /// Fill the strictly upper tiles of `y` (tile layout) with the adjoints of the lower ones.
    fn mirror_upper(&self, y: &mut [C64]) {
        // upper tile (I, J), I < J, = adjoint of lower tile (J, I)
        let (w, n) = (self.w, self.d / self.w);
        let n_low = self.lower_len().1;
        let (low, up) = y.split_at_mut(n_low);
        let low = &*low;
        let first = n_low / (w * w);
        let fill = |k: usize, tile: &mut [C64]| {
            vectorized(
                #[inline(always)]
                || {
                    let (i, j) = self.tile_at[first + k];
                    let src = self.tiles[j as usize * n + i as usize] as usize * w * w;
                    let src = &low[src..src + w * w];
                    for a in 0..w {
                        for (b, o) in tile[a * w..(a + 1) * w].iter_mut().enumerate() {
                            *o = src[b * w + a].conj();
                        }
                    }
                },
            )
        };
        if self.par == Par::Rayon && self.d >= 64 {
            up.par_chunks_mut(w * w)
                .enumerate()
                .for_each(|(k, t)| fill(k, t));
        } else {
            up.chunks_mut(w * w)
                .enumerate()
                .for_each(|(k, t)| fill(k, t));
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
    fn carried(&self) -> (usize, usize) {
        if self.half {
            self.lower_len()
        } else {
            (self.d * self.d, self.d * self.d)
        }
    }
    fn complete(&self, y: &mut [C64]) {
        if self.half {
            self.mirror_upper(y);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use cavern_model::{ModeParams, Network, SiteParams};

    /// dρ/dt computed densely from the definition, −i[H, ρ] + Σ (LρL† − ½{L†L, ρ}), as an
    /// independent check of the structured kernel (the Lindblad form: Lindblad, Commun. Math.
    /// Phys. 48, 119 (1976); Gorini, Kossakowski & Sudarshan, J. Math. Phys. 17, 821 (1976)).
    fn dense_rhs(me: &MasterEquation, t: f64, rho: &[C64]) -> Vec<C64> {
        let d = me.space.dim();
        let mm = |a: &[C64], b: &[C64]| {
            let mut c = vec![C64::new(0.0, 0.0); d * d];
            for i in 0..d {
                for k in 0..d {
                    let x = a[i * d + k];
                    if x != C64::new(0.0, 0.0) {
                        for j in 0..d {
                            c[i * d + j] += x * b[k * d + j];
                        }
                    }
                }
            }
            c
        };
        let h = me.hamiltonian_at(t).to_dense();
        let (hr, rh) = (mm(&h, rho), mm(rho, &h));
        let mut out: Vec<C64> = hr
            .iter()
            .zip(&rh)
            .map(|(a, b)| C64::new(0.0, -1.0) * (a - b))
            .collect();
        for j in &me.jumps {
            let l = j.op.to_dense();
            let ld = j.op.adjoint().to_dense();
            let ldl = mm(&ld, &l);
            let a = mm(&mm(&l, rho), &ld);
            let b = mm(&ldl, rho);
            let c = mm(rho, &ldl);
            for k in 0..d * d {
                out[k] += a[k] - 0.5 * (b[k] + c[k]);
            }
        }
        out
    }

    /// A Hermitian d×d test matrix (row-major) with no special structure.
    fn hermitian_test_matrix(d: usize) -> Vec<C64> {
        let mut rho = vec![C64::new(0.0, 0.0); d * d];
        for i in 0..d {
            for j in 0..=i {
                let v = C64::new(
                    ((i * 31 + j * 17) % 13) as f64 / 13.0,
                    if i == j {
                        0.0
                    } else {
                        ((i * 7 + j * 3) % 11) as f64 / 11.0 - 0.5
                    },
                );
                rho[i * d + j] = v;
                rho[j * d + i] = v.conj();
            }
        }
        rho
    }

    #[test]
    fn structured_kernel_equals_the_dense_definition() {
        // every kind of term, with a time-dependent coupling and both coupling forms
        for form in [
            cavern_model::CouplingForm::Exchange,
            cavern_model::CouplingForm::Dipole,
        ] {
            let mut net = Network::empty();
            net.sites = vec![
                SiteParams {
                    detuning: 0.3,
                    decay: 0.2,
                    dephasing: 0.1,
                    pump: 0.05,
                    rabi: 0.4,
                },
                SiteParams {
                    detuning: -0.1,
                    decay: 0.1,
                    dephasing: 0.0,
                    pump: 0.0,
                    rabi: 0.2,
                },
                SiteParams {
                    detuning: 0.0,
                    decay: 0.0,
                    dephasing: 0.3,
                    pump: 0.1,
                    rabi: 0.0,
                },
            ];
            net.modes = vec![ModeParams {
                levels: 5,
                detuning: 0.2,
                loss: 0.7,
                thermal: 0.3,
                drive: 0.5,
                ..Default::default()
            }];
            net.coupling = vec![vec![0.6], vec![0.4], vec![0.3]];
            net.coupling_form = form;
            net.coupling_envelope = Envelope::Ramp {
                start: 0.0,
                stop: 2.0,
                from: 0.2,
                to: 1.0,
            };
            net.zz = vec![
                vec![0.0, 0.1, 0.2],
                vec![0.1, 0.0, 0.0],
                vec![0.2, 0.0, 0.0],
            ];
            net.flip_flop = vec![
                vec![0.0, 0.05, 0.0],
                vec![0.05, 0.0, 0.07],
                vec![0.0, 0.07, 0.0],
            ];
            let me = net.build().unwrap();
            let d = me.space.dim();
            let rho = hermitian_test_matrix(d);
            for par in [Par::Seq, Par::Rayon] {
                let mut rhs = LindbladRhs::new(&me, par).unwrap();
                let mut out = vec![C64::new(0.0, 0.0); d * d];
                for t in [0.0, 1.0, 3.0] {
                    let mut rp = vec![C64::new(0.0, 0.0); d * d];
                    rhs.to_panels(&rho, &mut rp);
                    let mut op = vec![C64::new(0.0, 0.0); d * d];
                    rhs.apply(t, &rp, &mut op);
                    rhs.from_panels(&op, &mut out);
                    let want = dense_rhs(&me, t, &rho);
                    let scale = want.iter().map(|z| z.norm()).fold(0.0, f64::max);
                    let err = out
                        .iter()
                        .zip(&want)
                        .map(|(a, b)| (a - b).norm())
                        .fold(0.0, f64::max);
                    // both sides sum O(10) products of O(1) numbers: a few hundred ulps of the scale
                    assert!(
                        err <= 1e-13 * scale.max(1.0),
                        "{form:?} {par:?} t = {t}: error {err:e} (scale {scale})"
                    );
                }
            }
        }
    }

    #[test]
    fn vector_paths_give_bit_identical_results() {
        // the run-time dispatch (AVX2 / AVX-512 / baseline) changes only the vector width, never
        // the floating-point operations: the baseline and the dispatched kernel must agree bit
        // for bit (common practice for reproducible kernels: no contraction, no reordering)
        let mut net = Network::empty();
        net.sites = (0..4)
            .map(|i| SiteParams {
                detuning: 0.1 * i as f64 - 0.15,
                decay: 0.2,
                dephasing: 0.05,
                pump: 0.01,
                rabi: 0.3,
            })
            .collect();
        net.modes = vec![ModeParams {
            levels: 6,
            detuning: 0.4,
            loss: 0.8,
            thermal: 0.1,
            drive: 0.3,
            ..Default::default()
        }];
        net.coupling = vec![vec![0.5], vec![0.4], vec![0.3], vec![0.2]];
        let me = net.build().unwrap();
        let d = me.space.dim();
        let rho = hermitian_test_matrix(d);
        let run = |baseline: bool| {
            crate::par::BASELINE.with(|b| b.set(baseline));
            let mut rhs = LindbladRhs::new(&me, Par::Seq).unwrap();
            let mut rp = vec![C64::new(0.0, 0.0); d * d];
            rhs.to_panels(&rho, &mut rp);
            let mut out = vec![C64::new(0.0, 0.0); d * d];
            rhs.apply(0.7, &rp, &mut out);
            crate::par::BASELINE.with(|b| b.set(false));
            out
        };
        let (fast, base) = (run(false), run(true));
        assert!(fast
            .iter()
            .zip(&base)
            .all(|(a, b)| a.re.to_bits() == b.re.to_bits() && a.im.to_bits() == b.im.to_bits()));
    }

    /// A small driven, lossy network and a Hermitian test matrix for it.
    fn small_case() -> (MasterEquation, Vec<C64>) {
        let mut net = Network::empty();
        net.sites = (0..3)
            .map(|i| SiteParams {
                detuning: 0.2 * i as f64 - 0.2,
                decay: 0.15,
                dephasing: 0.05,
                pump: 0.0,
                rabi: 0.1,
            })
            .collect();
        net.modes = vec![ModeParams {
            levels: 5,
            detuning: 0.3,
            loss: 0.6,
            thermal: 0.05,
            drive: 0.4,
            ..Default::default()
        }];
        net.coupling = vec![vec![0.5], vec![0.3], vec![0.4]];
        let me = net.build().unwrap();
        let d = me.space.dim();
        let mut rho = vec![C64::new(0.0, 0.0); d * d];
        for i in 0..d {
            for j in 0..=i {
                let v = C64::new(
                    ((i * 23 + j * 7) % 19) as f64 / 19.0,
                    if i == j {
                        0.0
                    } else {
                        ((i * 3 + j * 13) % 11) as f64 / 11.0 - 0.5
                    },
                );
                rho[i * d + j] = v;
                rho[j * d + i] = v.conj();
            }
        }
        let tr: f64 = (0..d).map(|i| rho[i * d + i].re).sum();
        rho.iter_mut().for_each(|z| *z /= tr);
        (me, rho)
    }

    #[test]
    fn tile_layout_is_a_permutation() {
        for d in [1, 6, 40, 96, 120, 384] {
            let (w, n) = (panel_width(d), d / panel_width(d));
            let mut seen = vec![false; n * n];
            for i in 0..n {
                for j in 0..n {
                    let t = tile_index(i, j, n);
                    assert!(!seen[t], "d = {d}: tile ({i}, {j}) collides");
                    seen[t] = true;
                    // the diagonal and lower tiles lead
                    assert_eq!(t < n * (n + 1) / 2, i >= j);
                }
            }
            let m: Vec<C64> = (0..d * d)
                .map(|k| C64::new(k as f64, -(k as f64)))
                .collect();
            let (mut p, mut back) = (vec![C64::new(0.0, 0.0); d * d], vec![C64::default(); d * d]);
            to_panels(d, &m, &mut p);
            from_panels(d, &p, &mut back);
            assert_eq!(m, back, "d = {d}, w = {w}");
        }
    }

    #[test]
    fn lower_half_mode_agrees_with_the_full_kernel_and_mirrors_exactly() {
        let (me, rho) = small_case();
        let d = me.space.dim();
        for par in [Par::Seq, Par::Rayon] {
            let mut full = LindbladRhs::new(&me, par).unwrap();
            let mut half = LindbladRhs::new(&me, par).unwrap().lower_half_only();
            let (m1, m2) = half.lower_len();
            assert_eq!(half.carried(), (m1, m2));
            assert_eq!(full.carried(), (d * d, d * d));
            assert_eq!(m1, d * half.panel_width());
            assert_eq!(2 * m2 - m1, d * d, "diagonal once, lower tiles twice = all");
            let mut rp = vec![C64::new(0.0, 0.0); d * d];
            full.to_panels(&rho, &mut rp);
            let (mut a, mut b) = (vec![C64::new(0.0, 0.0); d * d], vec![C64::default(); d * d]);
            full.apply(0.4, &rp, &mut a);
            half.apply(0.4, &rp, &mut b);
            // the two modes add the jump terms in a different order (½ + ½ in X + X†, or once in
            // the second pass): equal up to rounding
            let scale = a.iter().map(|z| z.norm()).fold(0.0, f64::max);
            let close = |x: &[C64], y: &[C64]| {
                let diff = x
                    .iter()
                    .zip(y)
                    .map(|(u, v)| (u - v).norm())
                    .fold(0.0, f64::max);
                assert!(diff <= 1e-14 * scale, "{diff:e} vs scale {scale:e}");
            };
            close(&a[..m2], &b[..m2]);
            // complete() rebuilds the upper tiles of a Hermitian matrix from the lower ones
            let mut c = a.clone();
            c[m2..]
                .iter_mut()
                .for_each(|z| *z = C64::new(f64::NAN, 0.0));
            half.complete(&mut c);
            assert_eq!(a, c);
            let (mut r1, mut r2) = (vec![C64::default(); d * d], vec![C64::default(); d * d]);
            from_panels(d, &a, &mut r1);
            from_lower_panels(d, &b, &mut r2);
            close(&r1, &r2);
            // the mirrored upper half is the exact adjoint of the lower half
            for i in 0..d {
                for j in 0..d {
                    assert_eq!(r2[i * d + j], r2[j * d + i].conj());
                }
            }
        }
    }

    #[test]
    fn lower_half_integration_agrees_with_the_full_one() {
        // the integrator carrying the lower tiles only must follow the same trajectory as the
        // one carrying every entry (common practice: an optimisation checked against the plain
        // method); they differ only in the summation order of the error norm
        let (me, rho) = small_case();
        let d = me.space.dim();
        let opts = crate::dopri::DopriOptions {
            rtol: 1e-8,
            atol: 1e-11,
            par: Par::Seq,
            ..Default::default()
        };
        let times = [0.0, 0.7, 1.9, 3.0];
        let run = |half: bool| {
            let mut rhs = LindbladRhs::new(&me, Par::Seq).unwrap();
            if half {
                rhs = rhs.lower_half_only();
            }
            let mut y0 = vec![C64::new(0.0, 0.0); d * d];
            rhs.to_panels(&rho, &mut y0);
            let mut scratch = vec![C64::new(0.0, 0.0); d * d];
            let mut got = Vec::new();
            crate::dopri::integrate(
                &mut rhs,
                0.0,
                &y0,
                &times,
                opts,
                &mut scratch,
                |_, _, y, _| {
                    let mut r = vec![C64::new(0.0, 0.0); d * d];
                    from_panels(d, y, &mut r);
                    got.push(r);
                },
            )
            .unwrap();
            got
        };
        let (full, half) = (run(false), run(true));
        for (k, (a, b)) in full.iter().zip(&half).enumerate() {
            let err = a
                .iter()
                .zip(b)
                .map(|(x, y)| (x - y).norm())
                .fold(0.0, f64::max);
            // both are within rtol·|ρ| + atol of the exact flow; a few times that apart at most
            assert!(err < 1e-8, "sample {k}: {err:e}");
            // the samples handed out are complete Hermitian matrices
            for i in 0..d {
                for j in 0..d {
                    assert_eq!(b[i * d + j], b[j * d + i].conj());
                }
            }
        }
    }

    #[test]
    fn panel_widths_divide_the_dimension() {
        for d in [1, 2, 3, 7, 40, 96, 384, 1536, 6144, 100_000] {
            let w = panel_width(d);
            assert!(
                (1..=MAX_PANEL).contains(&w) && d.is_multiple_of(w),
                "d = {d}: w = {w}"
            );
        }
        assert_eq!(panel_width(1536), 128);
        assert_eq!(panel_width(96), 48);
    }
}
