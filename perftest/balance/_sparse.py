"""Sparse core of linear reconciliation (no dense n-by-n matrix is formed).

The method is that of :mod:`perftest.balance._dense`, with three changes:

* the unmeasured variables are eliminated per connected component of the
  bipartite graph of :math:`B` (rows and columns that share a nonzero), each
  component by a small dense QR with column pivoting; rows that touch no
  unmeasured variable are kept as they are;
* the reduced Gram matrix :math:`M = A_r S A_r^T` (m by m, sparse) is factorised
  by SuperLU with diagonal pivots in a fill-reducing symmetric order, i.e. as
  :math:`M = L D L^T`; dependent rows show up as tiny pivots (detected on a
  slightly shifted matrix, so that an exactly singular factorisation cannot stop
  it) and are removed before the final factorisation;
* the variances of the adjustments, :math:`V_{ii} = (A_r S e_i)^T M^{-1} (A_r S e_i)`,
  need :math:`M^{-1}` only on the sparsity pattern of :math:`M` when :math:`S` is
  diagonal.  That part of the inverse comes from the recurrence of Takahashi, Fagan
  and Chin (1973) on the factor's pattern, whose cost grows with the number of
  nonzeros of :math:`L` rather than with :math:`n^2`.

References
----------
.. [1] K. Takahashi, J. Fagan, M.-S. Chin, "Formation of a sparse bus impedance
   matrix and its application to short circuit study", Proc. 8th PICA Conference,
   1973, 63-69.
.. [2] A. M. Erisman, W. F. Tinney, "On computing certain elements of the inverse of
   a sparse matrix", Communications of the ACM 18(3), 177-179, 1975.
   DOI 10.1145/360680.360704
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.sparse.csgraph import connected_components

from perftest.balance import _dense
from perftest.balance._core import Core

# Diagonal shift used only to detect dependent rows: far below ROW_PIVOT_TOL so
# independent rows are not affected, far above rounding so that an exactly
# dependent row gives a pivot of about this size instead of an exact zero.
_DETECT_SHIFT = 1e-13
# Columns solved at once when the adjustment variances fall back to plain solves.
_CHUNK = 256


def _splu(Mc):
    return spla.splu(
        sp.csc_matrix(Mc),
        permc_spec="MMD_AT_PLUS_A",
        diag_pivot_thresh=0.0,
        options={"SymmetricMode": True},
    )


def _pivots(lu):
    """Pivot of each original row (the factorisation is symmetric)."""
    return np.abs(lu.U.diagonal())[lu.perm_c]


def _equilibrate(A, B, u):
    m, k = B.shape
    absB = abs(B).tocsc()
    colB = absB.max(axis=0).toarray().ravel() if m and k else np.ones(k)
    colB = np.where(colB > 0, colB, 1.0)
    rowA = (abs(A) @ sp.diags(u)).max(axis=1).toarray().ravel() if A.shape[1] else np.zeros(m)
    rowB = (abs(B) @ sp.diags(1.0 / colB)).max(axis=1).toarray().ravel() if k else np.zeros(m)
    scale = np.maximum(rowA, rowB)
    w = np.where(scale > 0, 1.0 / np.where(scale > 0, scale, 1.0), 1.0)
    return w, colB


def _project(Bt: sp.csr_matrix):
    """Block-wise left null space P (sparse), pseudo-inverse G (sparse), observability,
    and the blocks of P: ``(free, [(start, stop, P_block, rows), ...])``, the balances
    without unmeasured variables (the first rows of P) and, per block, its rows of P,
    its dense basis and the balances it spans."""
    m, k = Bt.shape
    if k == 0:
        return None, sp.csr_matrix((0, m)), np.zeros(0, dtype=bool), None
    coo = Bt.tocoo()
    graph = sp.coo_matrix((np.ones(coo.nnz), (coo.row, m + coo.col)), shape=(m + k, m + k))
    ncomp, labels = connected_components(graph, directed=False)
    touched = np.zeros(m, dtype=bool)
    touched[coo.row] = True
    row_labels = labels[:m]
    col_labels = labels[m:]
    order_r = np.argsort(row_labels, kind="stable")
    order_c = np.argsort(col_labels, kind="stable")
    bounds_r = np.searchsorted(row_labels[order_r], np.arange(ncomp + 1))
    bounds_c = np.searchsorted(col_labels[order_c], np.arange(ncomp + 1))
    p_rows, p_cols, p_vals = [], [], []
    g_rows, g_cols, g_vals = [], [], []
    observable = np.ones(k, dtype=bool)
    # Rows that touch no unmeasured variable pass through unchanged.
    free = np.flatnonzero(~touched)
    p_rows.append(np.arange(free.size))
    p_cols.append(free)
    p_vals.append(np.ones(free.size))
    next_row = free.size
    blocks = []
    Bc = Bt.tocsc()
    for c in range(ncomp):
        cols = order_c[bounds_c[c] : bounds_c[c + 1]]
        if cols.size == 0:
            continue
        rows = order_r[bounds_r[c] : bounds_r[c + 1]]
        if rows.size == 0:
            # A column of zeros: its variable appears in no constraint.
            observable[cols] = False
            continue
        block = Bc[:, cols][rows].toarray()
        proj = _dense.project_out_unmeasured(block)
        observable[cols] = proj.observable
        if proj.P is not None and proj.P.shape[0]:
            q, r = proj.P.shape
            rr, cc = np.meshgrid(np.arange(q), rows, indexing="ij")
            p_rows.append(next_row + rr.ravel())
            p_cols.append(cc.ravel())
            p_vals.append(proj.P.ravel())
            blocks.append((next_row, next_row + q, proj.P, rows))
            next_row += q
        gr, gc = np.meshgrid(cols, rows, indexing="ij")
        g_rows.append(gr.ravel())
        g_cols.append(gc.ravel())
        g_vals.append(proj.G.ravel())
    P = sp.csr_matrix(
        (np.concatenate(p_vals), (np.concatenate(p_rows), np.concatenate(p_cols))),
        shape=(next_row, m),
    )
    G = sp.csr_matrix(
        (
            np.concatenate(g_vals) if g_vals else np.zeros(0),
            (
                np.concatenate(g_rows) if g_rows else np.zeros(0, int),
                np.concatenate(g_cols) if g_cols else np.zeros(0, int),
            ),
        ),
        shape=(k, m),
    )
    return P, G, observable, (free, blocks)


def _canonical(layout, res0, Ar0, S, s, is_diag, d):
    """The nodal test's rows in the canonical basis (:class:`_dense.CanonicalRows`,
    block by block): ``(rows, residuals, variances)`` ordered by anchor balance."""
    free, blocks = layout
    rows, res_c, var_c = [free], [res0[: free.size]], [d[: free.size]]
    S_ = sp.diags(s) if is_diag else S
    for start, stop, Pb, block_rows in blocks:
        canon = _dense.CanonicalRows(Pb)
        CA = canon(Ar0[start:stop])
        CAS = CA @ S_
        rows.append(block_rows[canon.rows])
        res_c.append(canon(res0[start:stop]))
        var_c.append(np.asarray(CAS.multiply(CA).sum(axis=1)).ravel())
    rows, res_c, var_c = np.concatenate(rows), np.concatenate(res_c), np.concatenate(var_c)
    order = np.argsort(rows, kind="stable")
    return rows[order], res_c[order], var_c[order]


def _select_rows(M0: sp.csr_matrix, br0: np.ndarray, raw=None):
    """Independent rows, their LU factor, scaling, and any contradiction; ``raw`` as
    for :func:`_dense.select_rows`."""
    d = M0.diagonal().copy()
    sd = np.sqrt(np.maximum(d, 0.0))
    live, contradiction = _dense.zero_rows_of(sd, br0, raw)
    if contradiction is not None:
        return None, None, d, contradiction
    nonzero = np.flatnonzero(live)
    if nonzero.size == 0:
        return np.zeros(0, int), None, d, None
    s = sd[nonzero]
    Dinv = sp.diags(1.0 / s)
    Mc = (Dinv @ M0[nonzero][:, nonzero] @ Dinv).tocsc()
    keep = np.arange(nonzero.size)
    # Detect dependent rows on the shifted matrix, drop them, and repeat until the
    # unshifted factorisation has no tiny pivot (usually one pass).
    for _ in range(20):
        Mk = Mc[keep][:, keep]
        lu = _splu(Mk + _DETECT_SHIFT * sp.identity(keep.size, format="csc"))
        small = _pivots(lu) < _dense.ROW_PIVOT_TOL
        if not small.any():
            break
        keep = keep[~small]
    Mk = Mc[keep][:, keep].tocsc()
    lu = _splu(Mk)
    dropped = np.setdiff1d(np.arange(nonzero.size), keep)
    inconsistent = None
    if dropped.size:
        rhs = Mc[keep][:, dropped].toarray()
        coef = lu.solve(rhs)
        bk = br0[nonzero[keep]] / s[keep]
        bd = br0[nonzero[dropped]] / s[dropped]
        misfit = bd - coef.T @ bk
        size = 1.0 + np.abs(bd) + np.abs(coef.T) @ np.abs(bk)
        bad = np.flatnonzero(np.abs(misfit) > _dense.CONSISTENCY_RTOL * size)
        if bad.size:
            j = int(bad[np.argmax(np.abs(misfit[bad]))])
            inconsistent = (int(nonzero[dropped[j]]), float(misfit[j]))
    return nonzero[keep], (lu, s[keep], Mk), d, inconsistent


def selected_inverse(lu, n: int):
    """Entries of the inverse of a symmetric LDL^T-factorised matrix on the pattern of L.

    Returns a sparse symmetric matrix in the permuted order of the factorisation, or
    None when the stored pattern is not closed under elimination (then the caller
    falls back to plain solves).
    """
    if not np.array_equal(lu.perm_r, lu.perm_c):
        return None
    L = lu.L.tocsc()
    L.sort_indices()
    D = lu.U.diagonal()
    indptr, indices, data = L.indptr, L.indices, L.data
    col_rows = [None] * n
    col_vals = [None] * n
    zd = np.empty(n)
    for j in range(n - 1, -1, -1):
        lo, hi = indptr[j], indptr[j + 1]
        rows = indices[lo:hi]
        vals = data[lo:hi]
        below = rows > j
        rows = rows[below]
        lv = vals[below]
        c = rows.size
        if c == 0:
            col_rows[j] = rows
            col_vals[j] = np.zeros(0)
            zd[j] = 1.0 / D[j]
            continue
        sub = np.empty((c, c))
        for t in range(c):
            i = rows[t]
            sub[t, t] = zd[i]
            if t + 1 < c:
                ri = col_rows[i]
                pos = np.searchsorted(ri, rows[t + 1 :])
                if np.any(pos >= ri.size) or np.any(
                    ri[np.minimum(pos, ri.size - 1)] != rows[t + 1 :]
                ):
                    return None
                v = col_vals[i][pos]
                sub[t + 1 :, t] = v
                sub[t, t + 1 :] = v
        zc = -(sub @ lv)
        col_rows[j] = rows
        col_vals[j] = zc
        zd[j] = 1.0 / D[j] - lv @ zc
    r_idx = np.concatenate([*col_rows, np.arange(n)])
    c_idx = np.concatenate([np.repeat(np.arange(n), [r.size for r in col_rows]), np.arange(n)])
    vals = np.concatenate([*col_vals, zd])
    lower = sp.csr_matrix((vals, (r_idx, c_idx)), shape=(n, n))
    strict = sp.csr_matrix(
        (np.concatenate(col_vals), (np.concatenate(col_rows), c_idx[:-n])), shape=(n, n)
    )
    return (lower + strict.T).tocsr()


def solve_sparse(p):
    """Sparse reconciliation core; returns a :class:`perftest.balance._core.Core`."""
    x, S, s = p.x, p.S, p.sdiag
    n = x.size
    A, B, b = p.A, p.B, p.b
    m, k = B.shape
    u = np.sqrt(s)
    w, colB = _equilibrate(A, B, u)
    W = sp.diags(w)
    At = (W @ A).tocsr()
    bt = b * w
    Bt = (W @ B @ sp.diags(1.0 / colB)).tocsr()
    P, G, observable, layout = _project(Bt)
    if P is None:
        Ar0, br0 = At, bt
    else:
        Ar0, br0 = (P @ At).tocsr(), P @ bt
    AS0 = (Ar0 @ sp.diags(s)).tocsr() if p.is_diag else (Ar0 @ S).tocsr()
    M0 = (AS0 @ Ar0.T).tocsr()
    raw = None if P is None else _dense.raw_rows(P, At, bt, s)
    idx, fac, d, inconsistent = _select_rows(M0, br0, raw)
    res0 = Ar0 @ x - br0
    if P is None:
        constraint_rows = np.arange(m)
        constraint_residual, constraint_u = res0 / w, np.sqrt(np.maximum(d, 0.0)) / w
    else:
        # in the canonical basis, each row in the units of its anchor balance
        constraint_rows, res_c, var_c = _canonical(layout, res0, Ar0, S, s, p.is_diag, d)
        wr = w[constraint_rows]
        constraint_residual, constraint_u = res_c / wr, np.sqrt(np.maximum(var_c, 0.0)) / wr
    if inconsistent is not None:
        idx = np.zeros(0, int)
    r = idx.size
    # The scaled unknowns are colB * y.
    T = (sp.diags(1.0 / colB) @ G @ At).tocsr() if k else sp.csr_matrix((0, n))
    cy = (G @ bt) / colB if k else np.zeros(0)
    S_dense = None

    def s_dense():
        return np.diag(s) if p.is_diag else S.toarray()

    if r:
        lu, sk, _ = fac
        Dinv = sp.diags(1.0 / sk)
        ASc = (Dinv @ AS0[idx]).tocsr()  # scaled rows: M_c = ASc S^-1 ASc^T
        Ac = (Dinv @ Ar0[idx]).tocsr()
        resc = res0[idx] / sk
        lam_c = lu.solve(resc)
        chi2 = float(resc @ lam_c)
        xhat = x - ASc.T @ lam_c
        vdiag = None
        if p.is_diag:
            Z = selected_inverse(lu, r)
            if Z is not None:
                # Permute rows of Ac into the factorisation's order.
                perm = np.empty(r, dtype=int)
                perm[lu.perm_c] = np.arange(r)
                Ap = Ac[perm]
                ZA = Z @ Ap
                vdiag = np.asarray(Ap.multiply(ZA).sum(axis=0)).ravel() * s * s
        if vdiag is None:
            vdiag = np.empty(n)
            ASc_csc = ASc.tocsc()
            for start in range(0, n, _CHUNK):
                stop = min(n, start + _CHUNK)
                block = ASc_csc[:, start:stop].toarray()
                vdiag[start:stop] = np.einsum("ij,ij->j", block, lu.solve(block))
        lam_rows = np.zeros(Ar0.shape[0])
        lam_rows[idx] = lam_c / sk
        lam = w * (lam_rows if P is None else P.T @ lam_rows)
        # Unmeasured: y = cy - T xhat; cov(y) = T S T^T - E^T M_c^-1 E, E = ASc T^T.
        if k:
            E = (ASc @ T.T).toarray()
            TS = (T @ sp.diags(s)) if p.is_diag else (T @ S)
            y_cov = (TS @ T.T).toarray() - E.T @ lu.solve(E)
        else:
            E = np.zeros((r, 0))
            y_cov = np.zeros((0, 0))

        def covariances():
            Sd = s_dense()
            Y = lu.solve(ASc.toarray())
            x_cov = Sd - ASc.T @ Y
            x_cov = 0.5 * (x_cov + x_cov.T)
            xy_cov = -(x_cov @ T.T.toarray()) if k else np.zeros((n, 0))
            return x_cov, y_cov, xy_cov

    else:
        chi2 = 0.0
        xhat = x.copy()
        vdiag = np.zeros(n)
        lam = np.zeros(m)
        TS = (T @ sp.diags(s)) if p.is_diag else (T @ S)
        y_cov = (TS @ T.T).toarray() if k else np.zeros((0, 0))

        def covariances():
            Sd = s_dense()
            xy_cov = -(Sd @ T.T.toarray()) if k else np.zeros((n, 0))
            return Sd, y_cov, xy_cov

    del S_dense
    redundant = vdiag > _dense.REDUNDANCY_RTOL * s
    y = cy - T @ xhat if k else np.zeros(0)
    return Core(
        xhat=xhat,
        y=y,
        observable=observable,
        lam=lam,
        chi2=chi2,
        dof=int(r),
        vdiag=vdiag,
        redundant=redundant,
        covariances=covariances,
        y_var=np.diag(y_cov).copy(),
        constraint_residual=constraint_residual,
        constraint_u=constraint_u,
        constraint_rows=constraint_rows,
        inconsistent=inconsistent,
    )
