//! Real multifrontal LU on the symmetrised pattern (I. S. Duff & J. K. Reid, "The multifrontal
//! solution of unsymmetric sets of linear equations", SIAM J. Sci. Stat. Comput. 5, 633 (1984)),
//! for matrices whose pattern is (nearly) symmetric, as a Liouvillian's is.
//!
//! The elimination structure is that of the Cholesky factor of the pattern of A + Aᵀ under a
//! symmetric fill-reducing permutation, computed by faer's supernodal symbolic Cholesky. Each
//! supernode s owns the columns [bₛ, eₛ) (k of them) and the rows Rₛ below them; its dense front
//! F (m = k + |Rₛ| square) collects the entries of A in those rows and columns plus the update
//! matrices of its children, and is partially factorised:
//!
//! ```text
//! P F₁₁ = L₁₁ U₁₁  (partial pivoting inside the k×k block),  U₁₂ = L₁₁⁻¹ P F₁₂,
//! L₂₁ = F₂₁ U₁₁⁻¹,  update matrix F₂₂ − L₂₁ U₁₂ → parent.
//! ```
//!
//! Pivots are searched only inside the block (no delayed pivots), so the factorisation is not
//! backward stable in the worst case: the caller checks the result (residual with iterative
//! refinement, condition estimate) and falls back to faer's LU with full partial pivoting when it
//! is not good enough. To keep the two real unknowns of one complex matrix element (Re and Im)
//! in the same supernode, the permutation is computed on groups of unknowns and expanded.
//!
//! All sizes are known before the numeric phase: [`Plan::factor_entries`] (values of L and U, the
//! dense supernode blocks included) and [`Plan::max_front`].

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::lu::partial_pivoting::factor::{lu_in_place, lu_in_place_scratch};
use faer::linalg::matmul::matmul;
use faer::linalg::triangular_solve::{
    solve_lower_triangular_in_place, solve_unit_lower_triangular_in_place,
    solve_unit_upper_triangular_in_place, solve_upper_triangular_in_place,
};
use faer::reborrow::{Reborrow, ReborrowMut};
use faer::sparse::linalg::amd;
use faer::sparse::linalg::cholesky::{
    factorize_symbolic_cholesky, CholeskySymbolicParams, SymbolicCholeskyRaw, SymmetricOrdering,
};
use faer::sparse::linalg::SupernodalThreshold;
use faer::sparse::{SparseColMat, SparseColMatRef, Triplet};
use faer::{Accum, MatMut, MatRef, Par};

/// Fronts at least this large use the parallel dense kernels.
const PAR_FRONT: usize = 192;

/// The symbolic plan: permutation and supernodes.
pub(crate) struct Plan {
    n: usize,
    /// New index → old index.
    perm: Vec<usize>,
    /// Old index → new index.
    perm_inv: Vec<usize>,
    begin: Vec<usize>,
    end: Vec<usize>,
    rows_ptr: Vec<usize>,
    /// Off-block row indices of each supernode (new numbering, ascending).
    rows: Vec<usize>,
    parent: Vec<Option<usize>>,
    /// Offsets of each supernode's L panel (m×k) and U₁₂ block (k×r) in the value array.
    off: Vec<usize>,
}

impl Plan {
    /// Values of L and U (dense supernode blocks included).
    pub fn factor_entries(&self) -> usize {
        *self.off.last().unwrap_or(&0)
    }

    /// Entries of L (or of U) in the dense supernode storage: Σ k(k+1)/2 + k·r over the
    /// supernodes (diagonal block triangle and off-diagonal block).
    pub fn triangle_entries(&self) -> usize {
        (0..self.begin.len())
            .map(|s| {
                let k = self.end[s] - self.begin[s];
                k * (k + 1) / 2 + k * (self.rows_ptr[s + 1] - self.rows_ptr[s])
            })
            .sum()
    }

    /// Largest front order m.
    pub fn max_front(&self) -> usize {
        (0..self.begin.len())
            .map(|s| self.end[s] - self.begin[s] + self.rows_ptr[s + 1] - self.rows_ptr[s])
            .max()
            .unwrap_or(0)
    }

    /// Bytes of the factors (values 8 B, local pivots, structure) plus, as working memory, four
    /// fronts of the largest order (the front being factorised and the update matrices waiting
    /// for their parents; measured peaks were 1.3–1.6 times the factors plus two fronts, see
    /// docs/performance.md).
    pub fn bytes_estimate(&self) -> u128 {
        let m = self.max_front() as u128;
        8 * self.factor_entries() as u128
            + 8 * (self.rows.len() + 4 * self.n + 6 * self.begin.len()) as u128
            + 4 * 8 * m * m
    }
}

fn err<E: std::fmt::Debug>(e: E) -> String {
    format!("{e:?}")
}

/// Symbolic analysis of `a` (square). `group[i]` names the group of unknown i (unknowns of one
/// group are kept together and in order); the groups are ordered by AMD on the pattern of
/// A + Aᵀ compressed to groups.
pub(crate) fn analyse(a: SparseColMatRef<'_, usize, f64>, group: &[usize]) -> Result<Plan, String> {
    let n = a.ncols();
    assert_eq!(a.nrows(), n);
    assert_eq!(group.len(), n);
    let ng = group.iter().map(|&g| g + 1).max().unwrap_or(0);
    // group pattern, upper triangle of the symmetrised compressed graph
    let mut pairs: Vec<(usize, usize)> = Vec::with_capacity(a.compute_nnz() + ng);
    for g in 0..ng {
        pairs.push((g, g));
    }
    for j in 0..n {
        for &i in a.row_idx_of_col_raw(j) {
            let (gi, gj) = (group[i], group[j]);
            pairs.push((gi.min(gj), gi.max(gj)));
        }
    }
    let gpat = upper_pattern(ng, pairs)?;
    let mut gperm = vec![0usize; ng];
    let mut gperm_inv = vec![0usize; ng];
    {
        let nnz = gpat.compute_nnz();
        let mut mem = MemBuffer::try_new(amd::order_scratch::<usize>(ng, nnz)).map_err(err)?;
        amd::order(
            &mut gperm,
            &mut gperm_inv,
            gpat.symbolic(),
            amd::Control::default(),
            MemStack::new(&mut mem),
        )
        .map_err(err)?;
    }
    drop(gpat);
    // expand: the unknowns of each group, in group order
    let mut members_ptr = vec![0usize; ng + 1];
    for &g in group {
        members_ptr[g + 1] += 1;
    }
    for g in 0..ng {
        members_ptr[g + 1] += members_ptr[g];
    }
    let mut fill = members_ptr.clone();
    let mut members = vec![0usize; n];
    for (i, &g) in group.iter().enumerate() {
        members[fill[g]] = i;
        fill[g] += 1;
    }
    let mut order = Vec::with_capacity(n);
    for &g in &gperm {
        order.extend_from_slice(&members[members_ptr[g]..members_ptr[g + 1]]);
    }
    let mut order_inv = vec![0usize; n];
    for (new, &old) in order.iter().enumerate() {
        order_inv[old] = new;
    }
    // symbolic Cholesky of the symmetrised pattern with that ordering
    let mut pairs: Vec<(usize, usize)> = Vec::with_capacity(a.compute_nnz() + n);
    for j in 0..n {
        pairs.push((j, j));
        for &i in a.row_idx_of_col_raw(j) {
            pairs.push((i.min(j), i.max(j)));
        }
    }
    let pat = upper_pattern(n, pairs)?;
    let custom = faer::perm::PermRef::new_checked(&order, &order_inv, n);
    let sym = factorize_symbolic_cholesky(
        pat.symbolic(),
        faer::Side::Upper,
        SymmetricOrdering::Custom(custom),
        CholeskySymbolicParams {
            supernodal_flop_ratio_threshold: SupernodalThreshold::FORCE_SUPERNODAL,
            ..Default::default()
        },
    )
    .map_err(err)?;
    let (perm, perm_inv) = match sym.perm() {
        Some(p) => {
            let (f, i) = p.arrays();
            (f.to_vec(), i.to_vec())
        }
        None => (order, order_inv),
    };
    let SymbolicCholeskyRaw::Supernodal(sn) = sym.raw() else {
        return Err("symbolic Cholesky is not supernodal".into());
    };
    let ns = sn.n_supernodes();
    let begin: Vec<usize> = sn.supernode_begin().to_vec();
    let end: Vec<usize> = sn.supernode_end().to_vec();
    let rows_ptr: Vec<usize> = sn.col_ptr_for_row_idx().to_vec();
    let rows: Vec<usize> = sn.row_idx().to_vec();
    let mut owner = vec![0usize; n];
    for s in 0..ns {
        owner[begin[s]..end[s]].fill(s);
    }
    let mut parent = vec![None; ns];
    let mut off = vec![0usize; ns + 1];
    for s in 0..ns {
        let r = &rows[rows_ptr[s]..rows_ptr[s + 1]];
        if let Some(&first) = r.first() {
            if first < end[s] || owner[first] <= s {
                return Err("supernodes are not in elimination order".into());
            }
            parent[s] = Some(owner[first]);
        }
        let k = end[s] - begin[s];
        off[s + 1] = off[s] + k * (k + r.len()) + k * r.len();
    }
    Ok(Plan {
        n,
        perm,
        perm_inv,
        begin,
        end,
        rows_ptr,
        rows,
        parent,
        off,
    })
}

/// Sorted, deduplicated upper-triangular pattern (values 1).
fn upper_pattern(
    n: usize,
    mut pairs: Vec<(usize, usize)>,
) -> Result<SparseColMat<usize, f64>, String> {
    pairs.sort_unstable_by_key(|&(r, c)| (c, r));
    pairs.dedup();
    let t: Vec<Triplet<usize, usize, f64>> = pairs
        .into_iter()
        .map(|(row, col)| Triplet { row, col, val: 1.0 })
        .collect();
    SparseColMat::try_new_from_triplets(n, n, &t).map_err(err)
}

/// The numeric factors.
pub(crate) struct Factors {
    plan: Plan,
    vals: Vec<f64>,
    /// Local row permutation of each supernode block (indices relative to the block), stored
    /// at [bₛ, eₛ).
    piv: Vec<usize>,
    /// Largest |multiplier| of the L₂₁ blocks (pivot growth indicator: 1 for full partial
    /// pivoting).
    pub max_multiplier: f64,
    work: Vec<f64>,
}

fn par_for(m: usize, par: Par) -> Par {
    if m >= PAR_FRONT {
        par
    } else {
        Par::Seq
    }
}

/// Numeric factorisation of `a` with the plan (same pattern as analysed).
pub(crate) fn factor(
    plan: Plan,
    a: SparseColMatRef<'_, usize, f64>,
    par: Par,
) -> Result<Factors, String> {
    let n = plan.n;
    let ns = plan.begin.len();
    let at = a.transpose().to_col_major().map_err(err)?; // rows of A as columns
    let mut vals: Vec<f64> = Vec::new();
    vals.try_reserve_exact(plan.factor_entries())
        .map_err(|_| "out of memory for the LU factors".to_string())?;
    vals.resize(plan.factor_entries(), 0.0);
    let mut piv = vec![0usize; n];
    let mut pinv = vec![0usize; n];
    let mut children: Vec<Vec<usize>> = vec![Vec::new(); ns];
    for s in 0..ns {
        if let Some(p) = plan.parent[s] {
            children[p].push(s);
        }
    }
    let mut updates: Vec<Option<Vec<f64>>> = (0..ns).map(|_| None).collect();
    let mut map = vec![usize::MAX; n];
    let mut front: Vec<f64> = Vec::new();
    let mut max_multiplier = 0.0f64;
    let mut lu_mem = MemBuffer::new(lu_in_place_scratch::<usize, f64>(
        plan.max_front(),
        plan.max_front(),
        par,
        Default::default(),
    ));
    for s in 0..ns {
        let (b, e) = (plan.begin[s], plan.end[s]);
        let k = e - b;
        let rs = &plan.rows[plan.rows_ptr[s]..plan.rows_ptr[s + 1]];
        let r = rs.len();
        let m = k + r;
        for j in b..e {
            map[j] = j - b;
        }
        for (t, &i) in rs.iter().enumerate() {
            map[i] = k + t;
        }
        front.clear();
        front
            .try_reserve(m * m)
            .map_err(|_| format!("out of memory for a front of order {m}"))?;
        front.resize(m * m, 0.0);
        // entries of B = P A Pᵀ: columns of the block (rows ≥ b), rows of the block (cols ≥ e)
        for j in b..e {
            let col = plan.perm[j];
            for (&io, &v) in a.row_idx_of_col_raw(col).iter().zip(a.val_of_col(col)) {
                let i = plan.perm_inv[io];
                if i >= b {
                    front[map[i] + m * (j - b)] += v;
                }
            }
            for (&co, &v) in at.row_idx_of_col_raw(col).iter().zip(at.val_of_col(col)) {
                let c = plan.perm_inv[co];
                if c >= e {
                    front[(j - b) + m * map[c]] += v;
                }
            }
        }
        // extend-add the children's update matrices
        for &c in &children[s] {
            let upd = updates[c]
                .take()
                .expect("child processed before its parent");
            let rc = &plan.rows[plan.rows_ptr[c]..plan.rows_ptr[c + 1]];
            let q = rc.len();
            for (cj, &gj) in rc.iter().enumerate() {
                let fj = map[gj] * m;
                let col = &upd[cj * q..(cj + 1) * q];
                for (ci, &gi) in rc.iter().enumerate() {
                    front[fj + map[gi]] += col[ci];
                }
            }
        }
        let p = par_for(m, par);
        {
            let f = MatMut::from_column_major_slice_mut(&mut front, m, m);
            let (f11, _, _, _) = f.split_at_mut(k, k);
            let (_, perm) = lu_in_place(
                f11,
                &mut piv[b..e],
                &mut pinv[b..e],
                p,
                MemStack::new(&mut lu_mem),
                Default::default(),
            );
            let _ = perm;
        }
        // re-split (the borrow of f11 ended) and finish the block
        let mut f = MatMut::from_column_major_slice_mut(&mut front, m, m);
        if r > 0 {
            let (f11, mut f12, mut f21, mut f22) = f.rb_mut().split_at_mut(k, k);
            // P F₁₂
            let mut tmp = vec![0.0; k];
            for c in 0..r {
                for i in 0..k {
                    tmp[i] = f12[(piv[b + i], c)];
                }
                for i in 0..k {
                    f12[(i, c)] = tmp[i];
                }
            }
            let f11 = f11.rb();
            solve_unit_lower_triangular_in_place(f11, f12.rb_mut(), p);
            // L₂₁ = F₂₁ U₁₁⁻¹  ⇔  U₁₁ᵀ L₂₁ᵀ = F₂₁ᵀ
            solve_lower_triangular_in_place(f11.transpose(), f21.rb_mut().transpose_mut(), p);
            for c in 0..k {
                for i in 0..r {
                    max_multiplier = max_multiplier.max(f21[(i, c)].abs());
                }
            }
            matmul(f22.rb_mut(), Accum::Add, f21.rb(), f12.rb(), -1.0, p);
            // the update matrix
            let mut upd = Vec::new();
            upd.try_reserve_exact(r * r)
                .map_err(|_| "out of memory for an update matrix".to_string())?;
            for c in 0..r {
                for i in 0..r {
                    upd.push(f22[(i, c)]);
                }
            }
            updates[s] = Some(upd);
        }
        // store L panel (m×k, column-major: L₁₁\U₁₁ then L₂₁) and U₁₂ (k×r)
        let o = plan.off[s];
        vals[o..o + m * k].copy_from_slice(&front[..m * k]);
        let ou = o + m * k;
        for c in 0..r {
            let src = &front[m * (k + c)..m * (k + c) + k];
            vals[ou + c * k..ou + (c + 1) * k].copy_from_slice(src);
        }
        for j in b..e {
            map[j] = usize::MAX;
        }
        for &i in rs {
            map[i] = usize::MAX;
        }
    }
    Ok(Factors {
        plan,
        vals,
        piv,
        max_multiplier,
        work: vec![0.0; n],
    })
}

impl Factors {
    fn blocks(
        &self,
        s: usize,
    ) -> (
        usize,
        usize,
        usize,
        &[usize],
        MatRef<'_, f64>,
        MatRef<'_, f64>,
    ) {
        let pl = &self.plan;
        let (b, e) = (pl.begin[s], pl.end[s]);
        let k = e - b;
        let rs = &pl.rows[pl.rows_ptr[s]..pl.rows_ptr[s + 1]];
        let m = k + rs.len();
        let o = pl.off[s];
        let lp = MatRef::from_column_major_slice(&self.vals[o..o + m * k], m, k);
        let u12 = MatRef::from_column_major_slice(
            &self.vals[o + m * k..o + m * k + k * rs.len()],
            k,
            rs.len(),
        );
        (b, e, k, rs, lp, u12)
    }

    /// X ← A⁻¹ X for the columns of the column-major `x` (length a multiple of n).
    pub fn solve(&mut self, x: &mut [f64]) {
        self.sweep(x, false);
    }

    /// X ← A⁻ᵀ X.
    pub fn solve_transpose(&mut self, x: &mut [f64]) {
        self.sweep(x, true);
    }

    fn sweep(&mut self, x: &mut [f64], transpose: bool) {
        let n = self.plan.n;
        if n == 0 {
            return;
        }
        let nrhs = x.len() / n;
        let ns = self.plan.begin.len();
        let mut y = std::mem::take(&mut self.work);
        y.resize(n * nrhs, 0.0);
        for c in 0..nrhs {
            for i in 0..n {
                y[c * n + i] = x[c * n + self.plan.perm[i]];
            }
        }
        let mut blk: Vec<f64> = Vec::new();
        let mut ext: Vec<f64> = Vec::new();
        let mut ym = MatMut::from_column_major_slice_mut(&mut y, n, nrhs);
        // first sweep (forward): L, or Uᵀ for the transpose
        for s in 0..ns {
            let (b, _e, k, rs, lp, u12) = self.blocks(s);
            let r = rs.len();
            blk.clear();
            blk.resize(k * nrhs, 0.0);
            for c in 0..nrhs {
                for i in 0..k {
                    let src = if transpose {
                        b + i
                    } else {
                        b + self.piv[b + i]
                    };
                    blk[c * k + i] = ym[(src, c)];
                }
            }
            let mut xb = MatMut::from_column_major_slice_mut(&mut blk, k, nrhs);
            if transpose {
                solve_lower_triangular_in_place(
                    lp.subrows(0, k).transpose(),
                    xb.rb_mut(),
                    Par::Seq,
                );
            } else {
                solve_unit_lower_triangular_in_place(lp.subrows(0, k), xb.rb_mut(), Par::Seq);
            }
            if r > 0 {
                ext.clear();
                ext.resize(r * nrhs, 0.0);
                let mut e = MatMut::from_column_major_slice_mut(&mut ext, r, nrhs);
                if transpose {
                    matmul(
                        e.rb_mut(),
                        Accum::Replace,
                        u12.transpose(),
                        xb.rb(),
                        1.0,
                        Par::Seq,
                    );
                } else {
                    matmul(
                        e.rb_mut(),
                        Accum::Replace,
                        lp.subrows(k, r),
                        xb.rb(),
                        1.0,
                        Par::Seq,
                    );
                }
                for c in 0..nrhs {
                    for (t, &gi) in rs.iter().enumerate() {
                        ym[(gi, c)] -= e[(t, c)];
                    }
                }
            }
            for c in 0..nrhs {
                for i in 0..k {
                    ym[(b + i, c)] = blk[c * k + i];
                }
            }
        }
        // second sweep (backward): U, or Lᵀ for the transpose
        for s in (0..ns).rev() {
            let (b, _e, k, rs, lp, u12) = self.blocks(s);
            let r = rs.len();
            blk.clear();
            blk.resize(k * nrhs, 0.0);
            for c in 0..nrhs {
                for i in 0..k {
                    blk[c * k + i] = ym[(b + i, c)];
                }
            }
            let mut xb = MatMut::from_column_major_slice_mut(&mut blk, k, nrhs);
            if r > 0 {
                ext.clear();
                ext.resize(r * nrhs, 0.0);
                for c in 0..nrhs {
                    for (t, &gi) in rs.iter().enumerate() {
                        ext[c * r + t] = ym[(gi, c)];
                    }
                }
                let e = MatRef::from_column_major_slice(&ext, r, nrhs);
                if transpose {
                    matmul(
                        xb.rb_mut(),
                        Accum::Add,
                        lp.subrows(k, r).transpose(),
                        e,
                        -1.0,
                        Par::Seq,
                    );
                } else {
                    matmul(xb.rb_mut(), Accum::Add, u12, e, -1.0, Par::Seq);
                }
            }
            if transpose {
                solve_unit_upper_triangular_in_place(
                    lp.subrows(0, k).transpose(),
                    xb.rb_mut(),
                    Par::Seq,
                );
            } else {
                solve_upper_triangular_in_place(lp.subrows(0, k), xb.rb_mut(), Par::Seq);
            }
            for c in 0..nrhs {
                for i in 0..k {
                    ym[(b + i, c)] = blk[c * k + i];
                }
            }
        }
        // the transpose ends with the block pivots: z[piv[i]] = v[i] within each block
        if transpose {
            for s in 0..ns {
                let (b, e) = (self.plan.begin[s], self.plan.end[s]);
                for c in 0..nrhs {
                    blk.clear();
                    blk.extend((b..e).map(|i| ym[(i, c)]));
                    for i in 0..e - b {
                        ym[(b + self.piv[b + i], c)] = blk[i];
                    }
                }
            }
        }
        for c in 0..nrhs {
            for i in 0..n {
                x[c * n + self.plan.perm[i]] = y[c * n + i];
            }
        }
        self.work = y;
    }
}
