"""Dense linear-algebra core of linear reconciliation.

The problem, for measured values :math:`x` with covariance :math:`S`, is

.. math::

    \\min_{\\hat x, \\hat y} (\\hat x - x)^T S^{-1} (\\hat x - x)
    \\quad \\text{s.t.} \\quad A \\hat x + B \\hat y = b .

The unmeasured variables are removed by a projection :math:`P` with
:math:`P B = 0` (Crowe, Garcia Campos and Hrymak, 1983), taken from a QR
factorisation of :math:`B` with column pivoting.  Dependent rows of the reduced
matrix :math:`P A` are then removed with a pivoted Cholesky factorisation of
:math:`P A S A^T P^T`, which also supplies the factor used for the solution.

:func:`project_out_unmeasured` forms :math:`P` and the pseudo-inverse :math:`G`;
:func:`reduce_constraints` gives them applied to the constraints, with the same
:math:`P` to the last bit for a step and, for a final solve, through the triangular
structure of :math:`B` (:func:`reduce_structured`) or with :math:`G` from a cheaper
decomposition: the same spaces and results, equal to rounding.  The basis :math:`P`
follows the rounding of :math:`B` wherever its columns tie in norm or it is
rank-deficient (the QR's pivots and reflector signs); the solution does not depend on
it, and the nodal test reads the reduced constraints in the canonical basis of
:class:`CanonicalRows`, which depends on the space alone.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.sparse as sp
from scipy.linalg.lapack import (
    dgeqp3,
    dgeqrf,
    dgesv,
    dorgqr,
    dormrz,
    dpstrf,
    dtrcon,
    dtrtrs,
    dtzrzf,
)

# Rank decisions.  All of them act on equilibrated quantities (rows scaled so
# that one unit means roughly one standard deviation of the constraint), so the
# tolerances below are relative and unit-free.
#
# A column of the equilibrated B is independent when its QR diagonal exceeds
# this fraction of the largest one.
B_RANK_RTOL = 1e-10
# An unmeasured variable is unobservable when its row of the orthonormal null
# space of B has at least this norm (a row exactly zero means observable;
# rounding leaves ~1e-15).
OBS_TOL = 1e-8
# A reduced constraint row is dropped as dependent when its pivot in the
# Cholesky factorisation of the unit-diagonal matrix P A S A^T P^T falls below
# this value, i.e. when it makes an angle below ~3e-6 rad with the span of the
# rows kept (in the metric of S).
ROW_PIVOT_TOL = 1e-11
# A reduced row is treated as identically zero when its standard deviation is
# below this fraction of the largest row's, reduced or as given (a flow network
# whose reduced rows all combine balances without measured variables gave rows of
# 1e-16 alone, taken for two constraints: dof 2, chi2 4780, where dof is 0).
ZERO_ROW_RTOL = 1e-9
# ... or below this fraction of the standard deviation its balances would give
# without cancelling (|P| times each balance's; see raw_rows): a combination of balances
# that vanishes identically, such as the sum of all balances of a network closed on
# itself, leaves rounding of about 1e-16 to 1e-13 of its terms, which is no
# constraint at all (taken for one, it moved a measurement by 19 standard
# uncertainties).  Its right-hand side must then vanish likewise, or the balances
# contradict each other.
CANCEL_RTOL = 1e-11
# Two constraints that are dependent in their left-hand sides contradict each
# other when their right-hand sides disagree by more than this many standard
# deviations (relative to the size of the terms).
CONSISTENCY_RTOL = 1e-6
# A measurement is redundant when the variance of its adjustment exceeds this
# fraction of its own variance.
REDUNDANCY_RTOL = 1e-10


# The nodal test's rows are the canonical basis of the left null space of B (see
# CanonicalRows), each row anchored to one balance, the anchors chosen greedily by
# the longest remaining projection.  The length of balance j (of m) is weighted by
# 1 + TIE_FAVOUR (m - j) / m first: of lengths equal to rounding (which moves the
# lengths of tied balances by ~1e-15) the balance given first wins, by a margin of
# at least TIE_FAVOUR / m; lengths further apart than TIE_FAVOUR keep their order.
TIE_FAVOUR = 1e-7
# The triangular blocks of a structured reduction (see reduce_structured) are used
# when their reciprocal condition numbers (1-norm) exceed this; otherwise the whole
# B goes through the pivoted QR.  With B equilibrated (entries of at most about one),
# a triangular block this well conditioned cannot hide a singular value that the
# rank decision above (B_RANK_RTOL) would count as zero.
TRIANGULAR_RCOND = 1e-8


@dataclass
class Projection:
    """Elimination of the unmeasured variables from equilibrated constraints."""

    P: np.ndarray | None  # (m0, m) left null space of B, or None for the identity
    G: np.ndarray  # (k, m) pseudo-inverse of B (equilibrated rows, scaled columns)
    observable: np.ndarray  # (k,) bool


def project_out_unmeasured(Bt: np.ndarray) -> Projection:
    """Left null space, pseudo-inverse and observability of a dense ``Bt``."""
    m, k = Bt.shape
    if k == 0:
        return Projection(None, np.zeros((0, m)), np.zeros(0, dtype=bool))
    Q, R, piv = _pivoted_qr(Bt)
    r = _rank(R)
    G, observable = _pinv_formed(Q, R, piv, r)
    return Projection(Q[:, r:].T, G, observable)


def _rank(R: np.ndarray) -> int:
    """Rank of the pivoted QR's ``R`` (diagonal against ``B_RANK_RTOL`` of the first)."""
    d = np.abs(np.diag(R))
    return int(np.count_nonzero(d > B_RANK_RTOL * d[0])) if d.size and d[0] > 0 else 0


def _pinv_formed(Q, R, piv, r):
    """``(G, observable)``: the minimum-norm pseudo-inverse ``G`` (k, m) of ``Bt`` formed,
    and which unmeasured variables it determines, from ``Bt[:, piv] = Q R`` of rank r."""
    m = Q.shape[0]
    k = R.shape[1]
    # R1 with the column permutation undone: Bt = Q1 @ R1p.
    R1p = np.empty((r, k))
    R1p[:, piv] = R[:r, :]
    if r == k:
        # Every unmeasured variable observable: R1p is square and regular, its
        # pseudo-inverse its inverse, from the triangular factor (R with its columns
        # permuted) in a fraction of the time of an SVD.
        Ri = scipy.linalg.solve_triangular(R[:r, :r], Q[:, :r].T, check_finite=False)
        G = np.empty((k, m))
        G[piv] = Ri
        null = np.zeros((k, 0))
    elif r:
        # Complete orthogonal decomposition R1p^T = Z [T; 0] (T upper triangular,
        # regular: R1p has full row rank r): the minimum-norm pseudo-inverse is
        # Z1 T^-T and Z2 spans the null space of R1p; the same quantities an SVD
        # gives, in a fraction of its time.
        Z, T = scipy.linalg.qr(R1p.T, mode="full", check_finite=False)
        W = scipy.linalg.solve_triangular(T[:r], Q[:, :r].T, trans="T", check_finite=False)
        G = Z[:, :r] @ W
        null = Z[:, r:]
    else:
        G = np.zeros((k, m))
        null = np.eye(k)
    observable = np.sqrt(np.einsum("ij,ij->i", null, null)) < OBS_TOL
    return G, observable


@dataclass
class Reduction:
    """The constraints ``At x + Bt y = bt`` with the unmeasured variables eliminated:
    ``PA = P @ At``, ``Pb = P @ bt`` (the reduced constraints), ``GA = G @ At``,
    ``Gb = G @ bt`` (the unmeasured in terms of the measured), with ``P`` and ``G``
    of :class:`Projection`."""

    P: np.ndarray  # (m - r, m)
    PA: np.ndarray  # (m - r, n)
    Pb: np.ndarray  # (m - r,)
    GA: np.ndarray  # (k, n)
    Gb: np.ndarray  # (k,)
    observable: np.ndarray  # (k,) bool
    # whether every number is that of project_out_unmeasured's formed P and G to the
    # last bit (False where the structured reduction or the RZ decomposition gave them)
    exact: bool = True


def _lapack(routine, *args, **kwargs):
    """Call a LAPACK routine with its optimal workspace (queried first, as
    scipy.linalg does: the blocked code and so the same rounding as scipy.linalg.qr).

    The answer of the query depends on the routine and the shapes only; the last few
    are kept, since a reconciliation asks the same ones again and again."""
    key = (routine.__name__, tuple(np.shape(a) for a in args))
    lwork = _workspace.get(key)
    if lwork is None:
        lwork = int(routine(*args, lwork=-1, **kwargs)[-2][0])
        if len(_workspace) >= 64:
            _workspace.clear()
        _workspace[key] = lwork
    out = routine(*args, lwork=max(lwork, 1), **kwargs)
    if out[-1] != 0:  # pragma: no cover - argument errors only
        raise np.linalg.LinAlgError(f"LAPACK {routine.__name__} failed (info {out[-1]})")
    return out[:-2]


_TINY = np.finfo(float).tiny

#: Optimal LAPACK workspace by (routine, argument shapes), see _lapack.
_workspace: dict = {}


@functools.lru_cache(maxsize=16)
def _upper_mask(m: int, k: int) -> np.ndarray:
    """Read-only boolean (m, k) mask of the upper trapezoid (what np.triu keeps)."""
    mask = ~np.tri(m, k, -1, dtype=bool)
    mask.flags.writeable = False
    return mask


def _pivoted_qr(Bt: np.ndarray):
    """``(Q, R, piv)`` with ``Bt[:, piv] = Q R``: the LAPACK calls of
    ``scipy.linalg.qr(Bt, pivoting=True, mode="full")`` with the same workspace, so
    the same numbers to the last bit, without the wrapper's cost."""
    m, k = Bt.shape
    if m == 0:
        return scipy.linalg.qr(Bt, pivoting=True, mode="full", check_finite=False)
    qr, jpvt, tau = _lapack(dgeqp3, Bt)
    R = np.where(_upper_mask(m, k), qr, 0.0)  # np.triu(qr), its mask kept
    if m < k:
        Q = _lapack(dorgqr, qr[:, :m], tau, overwrite_a=1)[0]
    else:
        qqr = np.empty((m, m))
        qqr[:, :k] = qr
        Q = _lapack(dorgqr, qqr, tau, overwrite_a=1)[0]
    return Q, R, jpvt - 1


def reduce_constraints(
    Bt: np.ndarray, At: np.ndarray, bt: np.ndarray, *, final: bool = False, pattern=None
) -> Reduction:
    """Eliminate the unmeasured variables from ``At x + Bt y = bt`` (dense, ``k > 0``).

    The rank decision and the basis ``P`` of the left null space are those of
    :func:`project_out_unmeasured` to the last bit (the same LAPACK calls, and
    ``P @ At`` the same product).  With ``final`` (a result, or the predicted last
    linearisation of the nonlinear engine) the elimination goes through the triangular
    structure of ``Bt`` where it has one (:func:`reduce_structured`); otherwise the
    minimum-norm pseudo-inverse ``G`` of a rank-deficient ``Bt`` comes from the RZ
    decomposition of the pivoted ``R1`` (LAPACK ``tzrzf``, ``O(r^2 (k - r))`` for the
    nearly square ``R1`` of a plant) applied to ``[At | bt]``, instead of a second full
    QR factorisation and a formed ``G``: the same ``G`` (it does not depend on the
    orthogonal decomposition).  Both equal the formed route to rounding, not to the
    last bit (``exact`` False).  ``pattern``: the flat positions of ``Bt``'s nonzero
    entries when the caller has them (see :func:`triangular_structure`).
    """
    m, k = Bt.shape
    n = At.shape[1]
    if final:
        red = reduce_structured(Bt, At, bt, pattern)
        if red is not None:
            return red
    Q, R, piv = _pivoted_qr(Bt)
    r = _rank(R)
    P = Q[:, r:].T
    if not (final and 0 < r < k):
        G, observable = _pinv_formed(Q, R, piv, r)
        return Reduction(P=P, PA=P @ At, Pb=P @ bt, GA=G @ At, Gb=G @ bt, observable=observable)
    GAb, null = _solve_rz(Q, R, piv, r, np.column_stack([At, bt]))
    observable = np.sqrt(np.einsum("ij,ij->i", null, null)) < OBS_TOL
    return Reduction(
        P=P, PA=P @ At, Pb=P @ bt, GA=GAb[:, :n], Gb=GAb[:, n], observable=observable,
        exact=False,
    )  # fmt: skip


def _solve_rz(Q, R, piv, r, H):
    """``(G H, N)`` from ``B[:, piv] = Q R`` of rank ``r`` (``0 < r``): the minimum-norm
    solutions of ``B y = h`` for the columns ``h`` of ``H``, and an orthonormal basis
    ``N`` (k, k - r) of the null space of ``B``, rows in the order of ``B``'s columns.

    Complete orthogonal decomposition of the pivoted R1 = [R11 R12] = [T 0] Z: the
    minimum-norm solution of R1 z = h is Z^T [T^-1 h; 0], and Z^T [0; I] spans the
    null space of R1 (LAPACK ``tzrzf``, ``O(r^2 (k - r))`` for a nearly square R1).
    """
    k = R.shape[1]
    h = H.shape[1]
    if r == k:
        W, _ = dtrtrs(R[:r, :r], Q[:, :r].T @ H, lower=0)
        out = np.empty((k, h))
        out[piv] = W
        return out, np.zeros((k, 0))
    # (These two wrappers take no workspace query; a block of 64 columns is ample.)
    rz, ztau, _ = dtzrzf(R[:r, :], lwork=64 * r)
    W, _ = dtrtrs(rz[:, :r], Q[:, :r].T @ H, lower=0)  # T^-1 Q1^T H
    pad = np.zeros((k, h), order="F")
    pad[:r] = W
    e = np.zeros((k, k - r), order="F")
    e[np.arange(r, k), np.arange(k - r)] = 1.0
    out = np.empty((k, h))
    out[piv] = dormrz(rz, ztau, pad, trans="T", lwork=64 * max(h, 1), overwrite_c=1)[0]
    null = np.empty((k, k - r))
    null[piv] = dormrz(rz, ztau, e, trans="T", lwork=64 * (k - r), overwrite_c=1)[0]
    return out, null


def reduce_structured(
    Bt: np.ndarray, At: np.ndarray, bt: np.ndarray, pattern=None
) -> Reduction | None:
    """:func:`reduce_constraints` for a final solve, through the triangular structure of ``Bt``.

    A plant's ``B`` is mostly triangular: a balance with one unmeasured variable
    left determines it (a row singleton), an unmeasured variable in one balance left
    is determined by it (a column singleton).  Peeling both off, as long as there are
    any (:func:`triangular_structure`), permutes ``Bt`` to the block form

    .. math::

        \\begin{bmatrix} L & 0 & 0 \\\\ X_{mf} & B_m & 0 \\\\ X_{bf} & X_{bm} & U
        \\end{bmatrix}

    (rows: front, middle, back; columns likewise) with ``L`` lower and ``U`` upper
    triangular.  Only the middle block ``B_m`` needs the pivoted QR, with the rank
    decision of the whole (``B_RANK_RTOL`` of the largest column of ``Bt``).  Then
    the left null space is ``{p: p_b = 0, p_m in null(B_m^T), p_f = -L^-T X_mf^T
    p_m}`` (made orthonormal), the null space ``{v: v_f = 0, v_m in null(B_m), v_b =
    -U^-1 X_bm v_m}``, and the solutions ``y_f = L^-1 h_f``, ``y_m`` the minimum-norm
    solution of ``B_m y_m = h_m - X_mf y_f``, ``y_b = U^-1 (h_b - X_bf y_f - X_bm
    y_m)``, with the null space projected out (minimum norm overall).  The same
    spaces, rank and observability as the QR of the whole ``Bt``, and a ``G`` equal
    to its minimum-norm pseudo-inverse, to rounding, on the range of ``Bt`` (where
    the reconciled values put the right-hand side); the reduced rows ``P At``,
    ``P bt`` come from the middle block's ``Pm Hm`` without a product with all of
    ``P``.

    Returns None (the caller factorises the whole ``Bt``) when nothing peels off or a
    triangular block is not well conditioned (``TRIANGULAR_RCOND``).
    """
    m, k = Bt.shape
    n = At.shape[1]
    blocks = triangular_structure(Bt, pattern)
    if blocks is None:
        return None
    fr, fc, mr, mc, kr, kc = blocks
    ref = float(np.sqrt(np.einsum("ij,ij->j", Bt, Bt)).max(initial=0.0))
    if not ref > 0:
        return None
    # Bt with rows and columns in block order; the blocks are views of it
    f, g, h = fr.size, fr.size + mr.size, fc.size + mc.size
    Bp = Bt.take(np.concatenate([fr, mr, kr]), axis=0).take(np.concatenate([fc, mc, kc]), axis=1)
    Hp = np.column_stack([At, bt]).take(np.concatenate([fr, mr, kr]), axis=0)
    L, U = Bp[:f, :f], Bp[g:, h:]
    for T, uplo in ((L, "L"), (U, "U")):
        if T.size and not dtrcon(T, norm="1", uplo=uplo)[0] > TRIANGULAR_RCOND:
            return None
    Yf = dtrtrs(L, Hp[:f], lower=1)[0] if f else np.zeros((0, n + 1))
    Xmf = Bp[f:g, :f]
    Hm = Hp[f:g] - Xmf @ Yf
    Bm = Bp[f:g, f:h]
    # the middle block: pivoted QR, rank against the whole Bt's largest column
    mm, kk = Bm.shape
    if mm and kk:
        Q, R, piv = _pivoted_qr(Bm)
        r = int(np.count_nonzero(np.abs(np.diag(R)) > B_RANK_RTOL * ref))
        Pm = Q[:, r:].T
        if r:
            Ym, Nm = _solve_rz(Q, R, piv, r, Hm)
        else:
            Ym, Nm = np.zeros((kk, n + 1)), np.eye(kk)
    else:
        Pm, Ym, Nm = np.eye(mm), np.zeros((kk, n + 1)), np.eye(kk)
    if kr.size:
        Xbm = Bp[g:, f:h]
        Yb = dtrtrs(U, Hp[g:] - Bp[g:, :f] @ Yf - Xbm @ Ym, lower=0)[0]
        Vb = -dtrtrs(U, Xbm @ Nm, lower=0)[0] if Nm.shape[1] else np.zeros((kr.size, 0))
    else:
        Yb, Vb = np.zeros((0, n + 1)), np.zeros((0, Nm.shape[1]))
    GAb = np.empty((k, n + 1))
    GAb[fc], GAb[mc], GAb[kc] = Yf, Ym, Yb
    # null space, made orthonormal: its rows' norms decide observability, and
    # projecting it out of the solutions makes them of minimum norm overall
    V = np.zeros((k, Nm.shape[1]))
    V[mc], V[kc] = Nm, Vb
    V = _orthonormal_columns(V)
    if V.shape[1]:
        GAb -= V @ (V.T @ GAb)
    # left null space: p_f = -L^-T X_mf^T p_m, made orthonormal (any orthonormal
    # basis serves: see CanonicalRows); P [At | bt] = R^-T Pm Hm with P^T = Pt R^-1
    PAb = Pm @ Hm if kk else Hm
    Pt = np.zeros((m, Pm.shape[0]))
    Pt[mr] = Pm.T
    if f and Pm.shape[0]:
        Pt[fr] = -dtrtrs(L, Xmf.T @ Pm.T, lower=1, trans=1)[0]
        qr, tau = _lapack(dgeqrf, Pt)
        PAb = dtrtrs(qr[: Pm.shape[0]], PAb, lower=0, trans=1)[0]  # (reads R's triangle)
        Pt = _lapack(dorgqr, qr, tau, overwrite_a=1)[0]
    P = Pt.T
    observable = np.sqrt(np.einsum("ij,ij->i", V, V)) < OBS_TOL
    return Reduction(
        P=P, PA=PAb[:, :n], Pb=PAb[:, n], GA=GAb[:, :n], Gb=GAb[:, n], observable=observable,
        exact=False,
    )  # fmt: skip


def _orthonormal_columns(X: np.ndarray) -> np.ndarray:
    """An orthonormal basis of the columns of ``X`` (m, q), ``q <= m``, full column rank:
    the Q of its QR factorisation (LAPACK geqrf, orgqr)."""
    m, q = X.shape
    if q == 0:
        return np.zeros((m, 0))
    qr, tau = _lapack(dgeqrf, X)
    return _lapack(dorgqr, qr, tau, overwrite_a=1)[0]


def triangular_structure(Bt: np.ndarray, pattern=None):
    """The triangular blocks of ``Bt``'s pattern, or None when it has none.

    Repeatedly peels off a row with a single nonzero left (its column goes to the
    front, ahead of those peeled before) or a column with a single nonzero left (its
    row goes to the back); see :func:`reduce_structured`.  Returns int arrays
    ``(front rows, front columns, middle rows, middle columns, back rows, back
    columns)``, the front in peeling order (``L`` lower triangular), the back in
    peeling order (``U`` upper triangular).  The pattern of the last call is kept:
    the iterations of one reconciliation, and the windows of a run, see the same
    pattern again and again.
    """
    global _last_triangular
    m, k = Bt.shape
    # (``pattern``: Bt's nonzero flat positions, increasing, when the caller has them)
    flat = np.flatnonzero(Bt.ravel() != 0.0) if pattern is None else pattern
    last = _last_triangular  # one immutable tuple: safe to share between threads
    if last is not None and last[0] == (m, k) and np.array_equal(last[1], flat):
        return last[2]
    rows, cols = np.divmod(flat, k) if k else (flat, flat)
    row_ptr = np.searchsorted(rows, np.arange(m + 1))
    order = np.argsort(cols, kind="stable")
    col_ptr = np.searchsorted(cols[order], np.arange(k + 1))
    cols_of = [cols[a:b].tolist() for a, b in zip(row_ptr[:-1], row_ptr[1:], strict=True)]
    rows_sorted = rows[order]
    rows_of = [rows_sorted[a:b].tolist() for a, b in zip(col_ptr[:-1], col_ptr[1:], strict=True)]
    row_left = [len(c) for c in cols_of]
    col_left = [len(r) for r in rows_of]
    row_on = [True] * m
    col_on = [True] * k
    row_queue = [i for i in range(m) if row_left[i] == 1]
    col_queue = [j for j in range(k) if col_left[j] == 1]
    front, back = [], []
    while row_queue or col_queue:
        if row_queue:  # a row with one column left: that column to the front
            pair = _peel(row_queue, row_left, row_on, cols_of, col_on, rows_of)
            if pair is not None:
                front.append(pair)
        else:  # a column with one row left: that row to the back
            pair = _peel(col_queue, col_left, col_on, rows_of, row_on, cols_of)
            if pair is not None:
                back.append(pair[::-1])
    if not front and not back:
        out = None
    else:
        f = np.array(front, dtype=int).reshape(-1, 2)
        b = np.array(back, dtype=int).reshape(-1, 2)
        out = (
            f[:, 0], f[:, 1],
            np.flatnonzero(row_on), np.flatnonzero(col_on),
            b[:, 0], b[:, 1],
        )  # fmt: skip
    _last_triangular = ((m, k), flat, out)
    return out


def _peel(queue, left, on, lines, other_on, other_lines):
    """One step of :func:`triangular_structure` from ``queue`` (rows, or columns):
    the line popped, if it has one entry left, and that entry's crossing line, as a
    pair, both switched off, and the counts of the lines that met the crossing line
    lowered; None for a line already peeled or left empty."""
    i = queue.pop()
    if not on[i] or left[i] != 1:
        return None
    j = next(c for c in lines[i] if other_on[c])
    on[i] = other_on[j] = False
    for r in other_lines[j]:
        if on[r]:
            left[r] -= 1
            if left[r] == 1:
                queue.append(r)
    return i, j


#: The pattern of the last triangular_structure call and its blocks.
_last_triangular = None


class CanonicalRows:
    """The reduced constraints in the canonical basis of their space, for the nodal test.

    Built from an orthonormal basis ``P`` (p, m) of the left null space of ``B`` (one
    column per balance); called on an array whose rows are in ``P``'s basis (``P A``,
    ``P b``, dense or sparse), it returns that array in the canonical basis ``C = T P``,
    rows ordered by ``rows``.

    Attributes
    ----------
    rows : ndarray of int (p,)
        The balance each canonical row is anchored to, increasing.

    Notes
    -----
    The space is unique, its bases are not: the pivoted QR that finds ``P`` turns it
    with its column pivots and reflector signs, which follow rounding wherever
    columns of ``B`` tie in norm.  The canonical basis depends on the space alone:
    ``C[:, rows]`` is the identity, so that row ``i`` is balance ``rows[i]`` plus a
    combination of the balances that anchor no row (those that determine the
    unmeasured variables); a balance without unmeasured variables is a row of its
    own.  The anchors are chosen greedily, at each step the balance whose projection
    on what is left of the space is longest (a QR with column pivoting of ``P``,
    LAPACK ``geqp3``), ties to the balance given first (see ``TIE_FAVOUR``); the
    greedy choice keeps ``P[:, rows]`` well conditioned.  Given the anchors, ``C`` is
    the reduced row echelon form of the space with those pivot columns.  A row of
    ``P`` that is one balance alone (a balance the QR left untouched) is that
    balance's row up to its sign.
    """

    def __init__(self, P: np.ndarray):
        m = P.shape[1]
        alone = np.count_nonzero(P, axis=1) == 1
        self._one, self._mixed = np.flatnonzero(alone), np.flatnonzero(~alone)
        one_at = np.argmax(np.abs(P[self._one]), axis=1) if self._one.size else self._one
        self._sign = P[self._one, one_at]
        anchor = np.zeros(0, dtype=int)
        self._T = None
        q = self._mixed.size
        if q:
            Pm = P[self._mixed] if self._one.size else P
            anchor = np.sort(_lapack(dgeqp3, Pm * _favour(m))[1][:q] - 1)
            _, _, T, info = dgesv(Pm[:, anchor], np.eye(q))  # (P[:, anchor])^-1
            if info != 0:  # pragma: no cover - the greedy anchors keep it regular
                raise np.linalg.LinAlgError(f"LAPACK dgesv failed (info {info})")
            self._T = T
        rows = np.concatenate([one_at, anchor])
        self._order = np.argsort(rows, kind="stable")
        self.rows = rows[self._order]

    def __call__(self, X):
        """``X`` (p, ...) in ``P``'s basis -> the same rows in the canonical basis."""
        one, mixed = self._one, self._mixed
        sparse = sp.issparse(X)
        if sparse:
            X = sp.csr_matrix(X)
            parts = [sp.diags(1.0 / self._sign) @ X[one]]
            if mixed.size:
                parts.append(sp.csr_matrix(self._T) @ (X[mixed] if one.size else X))
            return sp.vstack(parts, format="csr")[self._order]
        X = np.asarray(X)
        scale = 1.0 / self._sign
        parts = [X[one] * (scale if X.ndim == 1 else scale[:, None])]
        if mixed.size:
            parts.append(self._T @ (X[mixed] if one.size else X))
        return np.concatenate(parts)[self._order]


@functools.lru_cache(maxsize=16)
def _favour(m: int) -> np.ndarray:
    """Read-only weights ``1 + TIE_FAVOUR (m - j) / m`` of the balances j (see
    :class:`CanonicalRows`): ties go to the balance given first."""
    out = 1.0 + TIE_FAVOUR * (m - np.arange(m)) / m
    out.flags.writeable = False
    return out


@dataclass
class RowSelection:
    """Independent rows of the reduced constraints and the factor of their Gram matrix."""

    idx: np.ndarray  # kept rows of the reduced matrix
    L: np.ndarray  # lower Cholesky factor of Ar S Ar^T for the kept rows
    d: np.ndarray  # diagonal of the full reduced Gram matrix (all rows)
    inconsistent: tuple | None  # (row, misfit in standard deviations) of a contradiction


def raw_rows(P, At, bt, s):
    """``(sd, b, largest)``: per reduced row ``P At x = P bt``, the standard deviation
    and the right-hand side of its balances added without cancelling, ``|P| sd(At)``
    and ``|P| |bt|`` with ``sd(At)`` the standard deviation of each balance in the
    metric of the diagonal ``s`` (see ``CANCEL_RTOL``), and the largest ``sd(At)``
    (see ``ZERO_ROW_RTOL``).  Dense or sparse."""
    if sp.issparse(At):
        A2 = sp.csr_matrix(At)
        sd_rows = np.sqrt(np.asarray(A2.multiply(A2) @ s).ravel())
    else:
        sd_rows = np.sqrt((At * At) @ s)
    Pa = abs(sp.csr_matrix(P)) if sp.issparse(P) else np.abs(P)
    return (
        np.asarray(Pa @ sd_rows).ravel(),
        np.asarray(Pa @ np.abs(bt)).ravel(),
        float(sd_rows.max(initial=0.0)),
    )


def zero_rows_of(sd, br0, raw):
    """``(live, contradiction)`` of :func:`select_rows`'s first test: which reduced rows
    are not identically zero (``ZERO_ROW_RTOL``, ``CANCEL_RTOL``), and the first zero
    row whose right-hand side does not vanish, as ``(row, inf)``, or None."""
    m0 = sd.size
    tiny = _TINY
    cancelled = None
    largest = 0.0
    if raw is not None:
        raw_sd, raw_b, largest = raw
        cancelled = (raw_sd > 0) & ~(sd > CANCEL_RTOL * raw_sd)
        if cancelled.any():
            # 0 = b_j with b_j of rounding size, or the balances contradict each other
            for j in np.flatnonzero(cancelled):
                if abs(br0[j]) > CANCEL_RTOL * raw_b[j]:
                    return None, (int(j), np.inf)
        else:
            cancelled = None
    # (against the balances as given too: where every reduced row is a combination
    # of balances without measured variables, all of them are rounding)
    big = max((sd if cancelled is None else sd[~cancelled]).max(initial=0.0), largest)
    live = sd > ZERO_ROW_RTOL * big if big > 0 else np.zeros(m0, bool)
    if cancelled is not None:
        live &= ~cancelled
    if live.all():
        return live, None
    bscale = 1.0 + np.max(np.abs(br0)) / max(big, tiny) if m0 else 1.0
    # A zero row reads 0 = b_j: a contradiction unless b_j vanishes.
    zero = ~live if cancelled is None else ~live & ~cancelled
    for j in np.flatnonzero(zero):
        if abs(br0[j]) / max(big, tiny) > CONSISTENCY_RTOL * bscale:
            return None, (int(j), np.inf)
    return live, None


def select_rows(M0: np.ndarray, br0: np.ndarray, raw=None) -> RowSelection:
    """Rank-revealing pivoted Cholesky of the reduced Gram matrix ``M0``; ``raw``, the
    rows' terms without cancelling (:func:`raw_rows`), for the zero-row test."""
    d = np.diag(M0).copy()
    sd = np.sqrt(np.maximum(d, 0.0))
    live, contradiction = zero_rows_of(sd, br0, raw)
    if contradiction is not None:
        return RowSelection(np.zeros(0, int), np.zeros((0, 0)), d, contradiction)
    nonzero = np.flatnonzero(live)
    if nonzero.size == 0:
        return RowSelection(np.zeros(0, int), np.zeros((0, 0)), d, None)
    s = sd[nonzero]
    Mc = M0 if nonzero.size == M0.shape[0] else M0[np.ix_(nonzero, nonzero)]
    Mc = Mc / s[:, None] / s[None, :]
    c, piv, rank, info = dpstrf(Mc, tol=ROW_PIVOT_TOL, lower=1)
    piv = piv[: Mc.shape[0]] - 1
    keep = piv[:rank]
    Lc = np.where(_upper_mask(rank, rank).T, c[:rank, :rank], 0.0)  # np.tril, mask kept
    dropped = piv[rank:]
    inconsistent = None
    if dropped.size:
        # Express each dropped (unit-scaled) row through the kept ones and compare
        # right-hand sides in standard-deviation units.
        coef = scipy.linalg.cho_solve((Lc, True), Mc[np.ix_(keep, dropped)])
        bk = br0[nonzero[keep]] / s[keep]
        bd = br0[nonzero[dropped]] / s[dropped]
        misfit = bd - coef.T @ bk
        size = 1.0 + np.abs(bd) + np.abs(coef.T) @ np.abs(bk)
        bad = np.flatnonzero(np.abs(misfit) > CONSISTENCY_RTOL * size)
        if bad.size:
            j = int(bad[np.argmax(np.abs(misfit[bad]))])
            inconsistent = (int(nonzero[dropped[j]]), float(misfit[j]))
    idx = nonzero[keep]
    L = Lc * s[keep][:, None]
    return RowSelection(idx, L, d, inconsistent)
