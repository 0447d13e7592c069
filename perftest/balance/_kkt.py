"""One Gauss-Newton step of weighted least squares under linearised constraints.

The iterations of :func:`perftest.balance.reconcile_nonlinear` need only the step
and the multipliers of the linearised problem; the statistics (covariance,
redundancy, observability, tests) are needed once, at the solution.  This module
solves the step from one factorisation of the reduced KKT system

.. math::

    \\begin{bmatrix} M & -J_y \\\\ -J_y^T & 0 \\end{bmatrix}
    \\begin{bmatrix} \\lambda \\\\ \\Delta y \\end{bmatrix} =
    \\begin{bmatrix} f + J_x (x_m - x_k) \\\\ 0 \\end{bmatrix},
    \\qquad M = J_x S J_x^T, \\qquad x = x_m - S J_x^T \\lambda,

the stationarity conditions of :math:`\\min \\tfrac12 (x - x_m)^T S^{-1} (x - x_m)`
subject to :math:`f + J_x (x - x_k) + J_y \\Delta y = 0` [1]_ (Sec. 16.1), with ``y``
scaled by its typical size and each row by the larger of its residual's standard
deviation and its largest scaled ``y`` coefficient (rows without a measured variable
have no standard deviation).  It is
used only where that system is regular: when a factorisation is singular or
ill-conditioned (dependent balances, contradictory ones) it returns None and the
caller solves the step with the full linear machinery, which handles those cases.
Unmeasured variables the balances do not determine at the iterate get the
minimum-norm step, as in the full machinery, through a tiny regularisation of the
``y`` block (:math:`-\\delta I`, ``DELTA`` in the scaled variables): their step
vanishes with :math:`\\delta` while the determined ones change by
:math:`O(\\delta)` relative, far below the convergence tolerance.

Dense LU (LAPACK ``getrf``) for systems up to ``DENSE_MAX``, sparse LU (SuperLU)
above; both are checked: a dense factor by its reciprocal condition number, a sparse
one by the residual of the solution.  The unregularised system is not factorised when
``J_y`` is structurally rank-deficient (maximum bipartite matching of its pattern):
it is then singular whatever its values.  The steps after the first of one
reconciliation are solved by iterative refinement with a kept factor where it
converges (:class:`Reuse`): equal to a fresh factor's step to a tenth of the
convergence tolerance, not to the last bit.

Layer: imports numpy and scipy only.

References
----------
.. [1] J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., Springer, 2006.
   DOI 10.1007/978-0-387-40065-5
"""

from __future__ import annotations

import functools

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.linalg.lapack import dgecon, dgetrf, dgetrs
from scipy.sparse.csgraph import maximum_bipartite_matching

__all__ = ["kkt_step", "Reuse", "DENSE_MAX", "RCOND_MIN", "SPARSE_STEP_MIN"]

#: Regularisation of the y block in scaled variables (see the module notes).  It
#: moves a determined step by ~DELTA / s^2 relative before refinement (s the smallest
#: singular value of the scaled J_y over the determined directions), and leaves
#: rounding of ~eps / DELTA relative in a free direction: 1e-6 keeps that at 1e-10,
#: below the convergence test's 1e-8.
DELTA = 1e-6

#: Largest KKT system (rows + unmeasured variables) factorised dense.
DENSE_MAX = 800

#: Smallest reciprocal condition number (1-norm) of the scaled KKT matrix accepted.
#: With the scaling above a regular plant system has rcond ~1e-6..1e-3, one with
#: undetermined y ~DELTA; below 1e-15 the factorisation itself is unreliable.
RCOND_MIN = 1e-15

#: Reciprocal condition number above which the unregularised scaled system counts as
#: regular (every unmeasured variable determined): six orders of magnitude above
#: RCOND_MIN, so that the step keeps ~6 correct digits or more.
RCOND_REGULAR = 1e-10

#: Largest share of the regularisation in the y optimality conditions accepted,
#: relative to the largest scaled right-hand side: with DELTA = 1e-6 it accepts
#: directions with scaled singular value above ~1e-3 (solved to ~1e-4 relative or
#: better, corrected at the next iteration) or below ~1e-7 (free: minimum-norm step).
REG_CHECK = 1e-3

#: Smallest KKT system (rows + unmeasured variables) whose regular step is factorised
#: sparse although the Jacobians come dense: above it SuperLU with a fill-reducing
#: ordering beats dense LU on plant systems (benchmarks/bench_nonlinear.py: 256 rows,
#: about 0.12 ms against 0.43 ms for LAPACK getrf on one core).
SPARSE_STEP_MIN = 120

#: SuperLU's supernode relaxation and panel size (expert options of
#: scipy.sparse.linalg.splu) for the KKT systems factorised from dense Jacobians (at
#: most DENSE_MAX rows): small supernodes and panels suit these small, very sparse
#: systems.  The same ordering (COLAMD) and pivoting rule.  Measured inside the
#: iterations on the 42-stream cycle of benchmarks/bench_nonlinear.py, alternating
#: with the library's defaults in one process: 3.28 against 3.36 ms per
#: reconciliation.
SUPERLU_RELAX = 1
SUPERLU_PANEL = 4

#: A dense-stored matrix of at least NONZERO_MIN entries with at most NONZERO_DENSITY
#: of them nonzero is worked on through its nonzero entries (nonzero_positions): a
#: Jacobian's Gram matrix J S J^T summed from its nonzero pairs (_gram; on the
#: 120 x 220 network of benchmarks/bench_nonlinear.py, 2 % nonzero, about 40 us
#: against 160 us for the dense product), and the closing solve's equilibration of
#: the unmeasured Jacobian B (linear.solve_dense; on the 130 x 126 B of the 42-stream
#: cycle, 2 % nonzero, the passes over all of B cost more than the rest of it).
NONZERO_MIN = 4096
NONZERO_DENSITY = 0.1

#: A sparse factor is accepted after the first step of the condition estimate when
#: that step puts the reciprocal condition number this many times above the bound
#: (the further steps raise the estimate of ||K^-1||: measured on the KKT systems of
#: benchmarks/bench_nonlinear.py, the full estimate, equal to LAPACK dgecon's, lies
#: 11-38x below the first step's; 1e4 leaves a wide margin over that).
EARLY_MARGIN = 1e4

#: A factor kept from an earlier iteration (see :class:`Reuse`) gives the step when
#: iterative refinement on the current system converges: every correction at most
#: REFINE_CONTRACTION times the one before, and within REFINE_SWEEPS sweeps both the
#: error left (max norm, scaled variables: one unit is about one standard
#: uncertainty of x or the typical size of y; after a correction c of a sweep that
#: contracted by q, at most q / (1 - q) c) and the residual the step leaves in
#: the linearised constraints (in standard deviations of the residuals) below the
#: caller's ``atol``, a tenth of the convergence tolerance: the iterates are then
#: those of fresh factorisations to well within the tolerance, and a problem that is
#: linear in the step's direction converges in as many iterations.  Measured on the
#: 42-stream cycle of benchmarks/bench_nonlinear.py: the first iterate's factor
#: contracts the later iterates' systems by about 1e-2 to 3e-2 per sweep; a sweep
#: costs a tenth of a factorisation.
REFINE_CONTRACTION = 0.25
REFINE_SWEEPS = 8
_TINY = np.finfo(float).tiny
_EPS = np.finfo(float).eps

#: A correction, or a residual, within this many ulps of the size of the solution,
#: or of the residual's terms, is rounding: the refinement has converged there.
ROUNDING = 32

#: Largest scaled residual of a sparse solution accepted (same reasoning: the solve
#: is then good to ~1e-8 of the residuals' standard deviations).
SPARSE_CHECK = 1e-8


def kkt_step(Jx, Jy, S, sdiag, is_diag, xk, xm, fk, ysize, try_regular=True, reuse=None):
    """Step ``(dx, dy, lam)`` of the linearised problem, or None.

    Parameters
    ----------
    Jx, Jy : ndarray or sparse matrix
        Jacobians at the iterate, (m, n) and (m, k).
    S : ndarray or sparse matrix
        Covariance of the measurements (n, n).
    sdiag : ndarray (n,)
        Its diagonal.
    is_diag : bool
        Whether ``S`` is diagonal.
    xk, xm : ndarray (n,)
        Iterate and measured values.
    fk : ndarray (m,)
        Residuals at the iterate.
    ysize : ndarray (k,)
        Typical size of each unmeasured variable (positive).
    try_regular : bool
        Try the unregularised system first (dense only).  A caller whose previous
        iterate had undetermined variables passes False and saves a factorisation;
        ``regular`` is then False.
    reuse : Reuse, optional
        The factor of an earlier step of the same reconciliation (dense Jacobians
        only): the step is first sought by iterative refinement with it, and a new
        factor (kept in ``reuse``) is made only when the refinement does not
        converge (see ``REFINE_*``).

    Returns
    -------
    tuple or None
        ``(dx, dy, lam, regular)``: ``dx = x - xk``, ``dy``, the multipliers ``lam``
        (m,) of the linearised constraints, and whether the unregularised system was
        regular (every unmeasured variable determined at the iterate; known for the
        dense factorisation only, False otherwise).  None where the system is
        singular or ill-conditioned.
    """
    m = fk.size
    k = ysize.size
    sparse = sp.issparse(Jx) or sp.issparse(Jy) or sp.issparse(S)
    size = m + k
    if sparse or size > DENSE_MAX:
        Jx_ = sp.csr_matrix(Jx)
        JxS = Jx_ @ sp.diags(sdiag) if is_diag else Jx_ @ sp.csr_matrix(S)
        M = (JxS @ Jx_.T).tocsr()
        Jy_ = sp.csr_matrix(Jy) @ sp.diags(ysize)
        r = _row_scale(M.diagonal(), abs(Jy_).max(axis=1).toarray().ravel() if k else None)
        if r is None:
            return None
        Dr = sp.diags(r)
        Ms = (Dr @ M @ Dr).tocsc()
        Jys = (Dr @ Jy_).tocsc()
        K = sp.bmat([[Ms, -Jys], [-Jys.T, -DELTA * sp.identity(k)]], format="csc")
        rhs = np.zeros(size)
        rhs[:m] = (fk + Jx_ @ (xm - xk)) * r
        try:
            lu = spla.splu(K, permc_spec="COLAMD")
        except RuntimeError:  # exactly singular
            return None
        sol = lu.solve(rhs)
        corr = lu.solve(np.concatenate([np.zeros(m), -DELTA * sol[m:]]))
        if not np.isfinite(sol).all():
            return None
        check = K @ sol - rhs
        if np.max(np.abs(check), initial=0.0) > SPARSE_CHECK * max(1.0, np.abs(rhs).max()):
            return None
        JxS_t = sp.csr_matrix(Dr @ JxS)

        def back(lam_s):
            return JxS_t.T @ lam_s

    else:
        Jx_ = np.asarray(Jx)
        JxS = None if is_diag else Jx_ @ np.asarray(S)
        Jy = np.asarray(Jy)
        c = fk + Jx_ @ (xm - xk)  # the linearised constraints' right-hand side
        if reuse is not None and reuse.factor is not None:
            # (products with M = Jx S Jx^T through its factors: no Gram matrix)
            out = reuse.refine(Jy, fk, c, xm, xk, sdiag, is_diag, Jx_, JxS)
            if out is not None:
                return out
        # Larger systems are factorised sparse (the KKT matrix of a plant has a few
        # entries per row), assembled from the nonzero entries alone: the same
        # products, entry by entry, as the dense arrays of the smaller ones.
        sparse_factor = size >= SPARSE_STEP_MIN
        # M's nonzero entries and diagonal, without M itself where it can
        m_entries = _gram(Jx_, sdiag, entries=True) if is_diag and sparse_factor else None
        if m_entries is not None:
            M = None
            m_diag = m_entries[3]
        else:
            if is_diag:
                # no (m, n) temporaries beyond the Jacobian itself: for a large one they
                # cost more (fresh pages) than the arithmetic
                M = _gram(Jx_, sdiag)
                if M is None:
                    M = (Jx_ * sdiag) @ Jx_.T
            else:
                M = JxS @ Jx_.T
            m_diag = np.diag(M)
        if sparse_factor:
            flat = np.flatnonzero(Jy.ravel() != 0.0)
            jr, jc = np.divmod(flat, k) if k else (flat, flat)
            jv = Jy[jr, jc] * ysize[jc]  # entries of Jy * ysize
            jmax = np.zeros(m)
            np.maximum.at(jmax, jr, np.abs(jv))
        else:
            Jy_ = Jy * ysize
            jmax = np.abs(Jy_).max(axis=1) if k else None
        r = _row_scale(m_diag, jmax if k else None)
        if r is None:
            return None
        rhs = np.zeros(size)
        rhs[:m] = c * r
        if is_diag:

            def back(lam_s):  # S Jx^T D_r lam_s
                return sdiag * (Jx_.T @ (r * lam_s))

        else:
            JxS_t = JxS * r[:, None]

            def back(lam_s):  # (D_r Jx S)^T lam_s
                return JxS_t.T @ lam_s

        # First the system as it stands: regular when every y is determined.  The
        # sparse factor has the same acceptance tests as the dense one.
        if sparse_factor:
            # entries of M * r[:, None] * r and Jy_ * r[:, None]
            if M is None:
                mr, mc, mv, _ = m_entries
            else:
                mr, mc = np.divmod(np.flatnonzero(M.ravel() != 0.0), m)
                mv = M[mr, mc]
            ms = (mr, mc, mv * r[mr] * r[mc])
            js = (jr, jc, jv * r[jr])
            solver = _SparseSolve.from_entries(m, k, ms, js)
            # a structurally singular system cannot be regular: no factorisation needed
            try_regular = try_regular and not solver.structurally_singular()
        else:
            solver = _DenseSolve(M * r[:, None] * r, Jy_ * r[:, None])
        out = solver(0.0, rhs, RCOND_REGULAR) if try_regular else None
        if out is not None:
            sol = out
            if reuse is not None:
                reuse.keep(solver, r, ysize, 0.0, sol[:m])
            return xm - back(sol[:m]) - xk, sol[m:] * ysize, sol[:m] * r, True
        sol = solver(DELTA, rhs, RCOND_MIN)
        if sol is None:
            return None
        corr = solver.last(np.concatenate([np.zeros(m), -DELTA * sol[m:]]))
        if reuse is not None:
            keep = (solver, r, ysize, DELTA)
    # One step of refinement towards the unregularised system (its residual is
    # (0, -DELTA dy)): it removes the regularisation's bias from the determined
    # directions to second order.  A large correction means a direction of y that is
    # barely determined (neither clearly determined nor clearly free): the full
    # solve decides the rank there.
    big = float(np.abs(sol[m:]).max(initial=0.0)) + _TINY
    if float(np.abs(corr[m:]).max(initial=0.0)) > REG_CHECK * big:
        return None
    sol = sol + corr
    lam_s = sol[:m]
    if reuse is not None and not sparse:
        reuse.keep(*keep, lam_s)
    dy = sol[m:] * ysize
    # x = xm - S Jx^T lam with lam = row_scale * lam_s: S Jx^T D_r lam_s = (D_r Jx S)^T lam_s
    x = xm - back(lam_s)
    return x - xk, dy, lam_s * r, False


class Reuse:
    """The factor of the last step of one reconciliation, for the steps after it.

    Near the solution the Jacobians change little from one iterate to the next, and
    the KKT matrix of the last factorised iterate is a good preconditioner of the
    current one: iterative refinement with it, in its own scaling, converges in a
    few sweeps (each one product with the current matrix and one solve with the
    kept factor) at a fraction of the cost of a new factorisation.  Where it does
    not (``REFINE_*``), :func:`kkt_step` factorises anew and keeps the new factor.

    A refined step is accepted when the error it has left (estimated from its last
    correction and the contraction of the sweeps) and the residual of the linearised
    constraints it leaves (in ``row_scale`` units, standard deviations of the
    residuals, as the caller's convergence test reads them) are both below ``atol``.
    A regularised kept factor refines the regularised current system, then takes the
    same step towards the unregularised one as a fresh factor (the correction solved
    with the kept factor, refined as needed); an unregularised one, the
    unregularised system.  Holds no state of other reconciliations: one instance per
    call of :func:`perftest.balance.reconcile_nonlinear`.

    Parameters
    ----------
    atol : float
        Accuracy wanted of the steps, in scaled units and in standard deviations of
        the residuals.
    row_scale : ndarray (m,), optional
        1 / standard deviation of each residual, for the residual test; the kept
        factor's row scaling when omitted.
    """

    __slots__ = ("factor", "atol", "lam", "row_scale")

    def __init__(self, atol, row_scale=None):
        self.factor = None
        self.atol = float(atol)
        self.lam = None  # scaled multipliers of the last step, the refinement's start
        self.row_scale = row_scale

    def keep(self, solver, r, ysize, delta, lam_s):
        self.factor = (solver, r, ysize, delta)
        self.lam = lam_s

    def refine(self, Jy, fk, c, xm, xk, sdiag, is_diag, Jx, JxS):
        """The step ``(dx, dy, lam, regular)`` of the system with ``M = Jx S Jx^T``
        (``JxS = Jx S`` unless ``S`` is diagonal), ``Jy`` (m, k), residuals ``fk`` and
        constraint right-hand side ``c``, as :func:`kkt_step` returns it, or None when
        the refinement does not converge or the kept factor does not fit."""
        solver, r, ysize, delta = self.factor
        m, k = Jy.shape
        if r.size != m or ysize.size != k or Jx.shape[1] != xm.size:
            return None
        rows = r if self.row_scale is None else self.row_scale

        def step_of(sol):  # (dx, dy) of a scaled solution
            lam = r * sol[:m]  # x = xm - S Jx^T D_r lam_s
            x = xm - (sdiag * (Jx.T @ lam) if is_diag else JxS.T @ lam)
            return x - xk, sol[m:] * ysize

        # the current system in the kept scaling, K = [[Dr M Dr, -Dr Jy Dy],
        # [-Dy Jy^T Dr, -d I]], applied through its factors (no matrix formed)
        JxT, JyT = Jx.T, Jy.T

        def residual(sol, rhs, d):  # rhs - K sol
            dy = sol[m:]
            rl = r * sol[:m]
            Mrl = Jx @ (sdiag * (JxT @ rl)) if is_diag else JxS @ (JxT @ rl)
            out = np.empty(m + k)
            np.subtract(rhs[:m], r * (Mrl - Jy @ (ysize * dy)), out=out[:m])
            np.add(rhs[m:], ysize * (JyT @ rl) + d * dy, out=out[m:])
            return out

        def violation(sol):
            # the linearised constraints' residual after the step, beyond the
            # rounding of its terms
            dx, dy = step_of(sol)
            lin = np.abs(fk + Jx @ dx + Jy @ dy)
            out = float((lin * rows).max(initial=0.0))
            if out <= target:
                return out
            terms = np.abs(fk) + np.abs(Jx) @ np.abs(dx) + np.abs(Jy) @ np.abs(dy)
            return float((np.maximum(lin - ROUNDING * _EPS * terms, 0.0) * rows).max(initial=0.0))

        target = self.atol

        def solve(rhs, d, sol, last=np.inf, check=True):
            # sweeps until the error left (or the rounding of the solution), and with
            # ``check`` the residual left, are below the target; the error left after
            # a correction c of a sweep contracting by q < 1 is at most q / (1 - q) c
            left = last
            before = np.inf
            for sweep in range(REFINE_SWEEPS + 1):
                floor = ROUNDING * _EPS * float(np.abs(sol).max(initial=0.0))
                if left <= max(target, floor):
                    if not check or violation(sol) <= target:
                        return sol if np.isfinite(sol).all() else None
                if sweep == REFINE_SWEEPS:
                    return None
                step = solver.last(residual(sol, rhs, d))
                size = float(np.abs(step).max(initial=0.0))
                if not (size <= REFINE_CONTRACTION * last or size <= floor):  # (catches nan)
                    return None
                sol = sol + step
                before, last = last, size
                q = last / before if before < np.inf else 1.0
                left = last * q / (1.0 - q) if q < 1.0 else last
            return None  # pragma: no cover - the loop returns

        rhs = np.zeros(m + k)
        rhs[:m] = c * r
        # from the last step's multipliers: they change by about the size of the
        # step, so the refinement's error is relative to the step, not to them
        start = np.zeros(m + k)
        start[:m] = self.lam
        sol = solve(rhs, delta, start)
        if sol is None:
            return None
        if delta:
            # towards the unregularised system, as for a fresh factor (see kkt_step)
            cr = np.zeros(m + k)
            cr[m:] = -delta * sol[m:]
            corr = solver.last(cr)
            corr = solve(cr, delta, corr, float(np.abs(corr).max(initial=0.0)), check=False)
            if corr is None:
                return None
            big = float(np.abs(sol[m:]).max(initial=0.0)) + _TINY
            if float(np.abs(corr[m:]).max(initial=0.0)) > REG_CHECK * big:
                return None
            sol = sol + corr
            if not violation(sol) <= target:
                return None
        self.lam = sol[:m]
        dx, dy = step_of(sol)
        return dx, dy, sol[:m] * r, not delta


def nonzero_positions(J):
    """Flat positions (row-major) of the nonzero entries of a dense-stored ``J`` that
    is large and mostly zero (``NONZERO_MIN``, ``NONZERO_DENSITY``), or None."""
    m, n = J.shape
    if m * n < NONZERO_MIN:
        return None
    flat = np.flatnonzero(J.ravel() != 0.0)
    return None if flat.size > NONZERO_DENSITY * m * n else flat


def _gram(J, s, entries=False):
    """``(J * s) @ J.T`` from the nonzeros of a dense-stored ``J``, or None.

    A plant's Jacobian has a few entries per column; for a large one mostly zero
    (at least ``NONZERO_MIN`` entries, at most ``NONZERO_DENSITY`` of them nonzero) the
    products of each column's nonzero pairs, summed with ``np.bincount``, cost a
    fraction of the dense product (the same sums, possibly in another order).  The
    pairs of the last pattern are kept: the iterations of one reconciliation see the
    same pattern again and again.

    With ``entries`` it returns ``(rows, cols, values, diagonal)`` instead: the
    nonzero entries in row-major order and the diagonal, the numbers of the dense
    result (the same sums in the same order) without forming it.
    """
    global _last_gram
    m, n = J.shape
    flat = nonzero_positions(J.T)  # column by column
    if flat is None:
        return None
    last = _last_gram  # one immutable tuple: safe to share between threads
    if last is not None and last[0] == (m, n) and np.array_equal(last[1], flat):
        rows, cols, a, b, key, cells = last[2]
    else:
        cols, rows = np.divmod(flat, m)
        count = np.bincount(cols, minlength=n)
        start = np.cumsum(count) - count  # first entry of each column
        k = count[cols]  # entries in the column of each entry
        a = np.repeat(np.arange(flat.size), k)
        within = np.arange(a.size) - np.repeat(np.cumsum(k) - k, k)
        b = start[cols[a]] + within
        key = rows[a] * m + rows[b]
        cells = None  # the distinct cells, laid out on the first call with entries
        _last_gram = ((m, n), flat, (rows, cols, a, b, key, cells))
    vals = J[rows, cols]
    w = vals[a] * vals[b] * s[cols[a]]
    if not entries:
        return np.bincount(key, weights=w, minlength=m * m).reshape(m, m)
    if cells is None:
        # the distinct cells in increasing (row-major) order and the cell of each
        # pair; the diagonal cells and their rows
        cell, slot = np.unique(key, return_inverse=True)
        crow, ccol = np.divmod(cell, m)
        on_diag = np.flatnonzero(crow == ccol)
        cells = (slot, crow, ccol, on_diag, crow[on_diag])
        _last_gram = ((m, n), flat, (rows, cols, a, b, key, cells))
    slot, crow, ccol, on_diag, diag_rows = cells
    # bincount adds the pairs of each cell in the order given, as it does over the
    # m * m cells above: the same sums
    sums = np.bincount(slot, weights=w, minlength=crow.size)
    diag = np.zeros(m)
    diag[diag_rows] = sums[on_diag]
    keep = sums != 0.0  # (the zeros a dense array's entries would leave out)
    return crow[keep], ccol[keep], sums[keep], diag


#: The pairs of the last Jacobian pattern _gram summed: ((m, n), flat positions,
#: (rows, cols, a, b, key, cells)).
_last_gram = None


class _DenseSolve:
    """LU of the scaled KKT matrix ``[[Ms, -Jys], [-Jys^T, -delta I]]`` with a condition
    check; keeps the last factors for a second right-hand side."""

    def __init__(self, Ms, Jys):
        self._Ms, self._Jys = Ms, Jys
        self._lu = None

    def __call__(self, delta, rhs, rcond_min):
        m, k = self._Jys.shape
        K = np.empty((m + k, m + k))
        K[:m, :m] = self._Ms
        K[:m, m:] = -self._Jys
        K[m:, :m] = K[:m, m:].T
        K[m:, m:] = 0.0
        if delta:
            K[np.arange(m, m + k), np.arange(m, m + k)] = -delta
        anorm = np.abs(K).sum(axis=0).max()
        lu, piv, info = dgetrf(K, overwrite_a=1)
        if info != 0:
            return None
        rcond, info = dgecon(lu, anorm, norm="1")
        if info != 0 or not rcond > rcond_min:
            return None
        sol, info = dgetrs(lu, piv, rhs)
        if info != 0 or not np.isfinite(sol).all():
            return None
        self._lu = (lu, piv)
        return sol

    def last(self, rhs):
        return dgetrs(*self._lu, rhs)[0]


#: The last pattern of J_y whose structural rank was found, and the verdict:
#: (m, k, rows, cols, singular).
_last_structure = None

#: The CSC layout of the last KKT pattern factorised (see _SparseSolve._layout):
#: ((m, m + k, regularised), (mr, mc, jr, jc), (order, indices, indptr, colidx,
#: perm, (rows, cols))).
_last_layout = None


class _SparseSolve:
    """:class:`_DenseSolve` with the matrix assembled and factorised sparse.

    SuperLU with the COLAMD ordering and partial pivoting; a factor is accepted as a
    dense one is: reciprocal condition number (1-norm, :func:`_rcond_estimate`, the
    estimator LAPACK's ``dgecon`` uses) above the bound and a finite solution.
    """

    def __init__(self, Ms, Jys):
        m, k = Jys.shape
        # flat positions of a boolean mask: the row-major order np.nonzero gives, at a
        # fraction of its cost on a 2-D float array
        mr, mc = np.divmod(np.flatnonzero(Ms.ravel() != 0.0), m)
        jr, jc = np.divmod(np.flatnonzero(Jys.ravel() != 0.0), k) if k else (mr[:0], mc[:0])
        self._setup(m, k, (mr, mc, Ms[mr, mc]), (jr, jc, Jys[jr, jc]))

    @classmethod
    def from_entries(cls, m, k, ms, js):
        """From the entries ``(rows, cols, values)`` of ``Ms`` and of ``Jys``, in row-major
        order; entries that are zero are left out, as a dense matrix's would be."""
        self = cls.__new__(cls)
        keep_m, keep_j = ms[2] != 0.0, js[2] != 0.0
        self._setup(m, k, tuple(a[keep_m] for a in ms), tuple(a[keep_j] for a in js))
        return self

    def _setup(self, m, k, ms, js):
        mr, mc, mv = ms
        jr, jc, jv = js
        jv = -jv
        self._pattern = (mr, mc, jr, jc)
        self._vals = np.concatenate([mv, jv, jv])
        self._m, self._size = m, m + k
        self._lu = None

    def _layout(self, regularised: bool):
        """``(order, indices, indptr, colidx, perm, entries)``: where the entries of
        ``_vals`` (then the ``-delta`` diagonal when ``regularised``) go in the CSC
        arrays of the KKT matrix, its row indices and column pointers, the column of
        each stored entry, the column ordering (``perm``, SuperLU's ``perm_c``: column
        ``i`` at ``perm[i]``) the layout is in, None for the natural order of a pattern
        not yet ordered (:meth:`_order`), and the ``(rows, cols)`` of the entries.

        The iterations of one reconciliation, and the windows of a run, see the same
        pattern again and again: the layout of the last pattern is kept (the same
        arrays the sort would give), in its ordering once found.
        """
        global _last_layout
        m, size = self._m, self._size
        pattern = self._pattern
        last = _last_layout  # one immutable tuple: safe to share between threads
        if (
            last is not None
            and last[0] == (m, size, regularised)
            and all(np.array_equal(a, b) for a, b in zip(last[1], pattern, strict=True))
        ):
            return last[2]
        mr, mc, jr, jc = pattern
        rows = np.concatenate([mr, jr, jc + m])
        cols = np.concatenate([mc, jc + m, jr])
        if regularised:
            diag = np.arange(m, size)
            rows = np.concatenate([rows, diag])
            cols = np.concatenate([cols, diag])
        layout = (*_csc_layout(rows, cols, size), None, (rows, cols))
        _last_layout = ((m, size, regularised), pattern, layout)
        return layout

    def _order(self, vals, layout):
        """The layout of the current pattern in its column ordering, from its ``layout``
        in natural order, or None when the matrix of ``vals`` is exactly singular.

        The ordering is SuperLU's COLAMD with its elimination-tree postorder, read
        off a factorisation; it depends on the pattern alone.  Every factor is then
        made with the natural ordering of the matrix laid out in it, whether the
        ordering was just found or kept: the same factor, to the last bit, for the
        same matrix (the choice among pivots of equal size, which SuperLU makes by
        position, would otherwise depend on which of the two was taken).
        """
        global _last_layout
        order, indices, indptr, _, _, entries = layout
        size = self._size
        A = sp.csc_matrix((vals[order], indices, indptr), shape=(size, size))
        try:
            lu = spla.splu(A, permc_spec="COLAMD", relax=SUPERLU_RELAX, panel_size=SUPERLU_PANEL)
        except RuntimeError:  # exactly singular
            return None
        perm = np.asarray(lu.perm_c, dtype=np.intp)
        rows, cols = entries
        ordered = (*_csc_layout(rows, perm[cols], size), perm, entries)
        last = _last_layout
        if last is not None and last[2] is layout:  # (not replaced by another thread)
            _last_layout = (last[0], last[1], ordered)
        return ordered

    def structurally_singular(self) -> bool:
        """Whether ``J_y`` has structural column rank below ``k`` (a maximum matching of
        its columns to rows, the bipartite graph of its nonzeros, leaves a column out).

        Then the unregularised KKT matrix is singular whatever its values (its
        determinant vanishes identically), so its factorisation cannot be accepted as
        regular: the caller skips it.  A y that no balance determines on its own (an
        unobservable pair such as the flow and enthalpy of a stream whose product
        alone enters the balances) makes this so at every iterate.
        """
        global _last_structure
        m, k = self._m, self._size - self._m
        if k == 0:
            return False
        jr, jc = self._pattern[2:]
        # the iterations of one reconciliation see the same pattern again and again
        last = _last_structure  # one immutable tuple: safe to share between threads
        if last is not None and last[:2] == (m, k):
            if np.array_equal(last[2], jr) and np.array_equal(last[3], jc):
                return last[4]
        indptr = np.zeros(m + 1, dtype=np.int32)
        np.cumsum(np.bincount(jr, minlength=m), out=indptr[1:])
        pattern = sp.csr_matrix(
            (np.ones(jr.size), jc.astype(np.int32), indptr), shape=(m, k)
        )  # fmt: skip
        match = maximum_bipartite_matching(pattern, perm_type="column")
        singular = bool(np.count_nonzero(match >= 0) < k)
        _last_structure = (m, k, jr, jc, singular)
        return singular

    def __call__(self, delta, rhs, rcond_min):
        m, size = self._m, self._size
        vals = self._vals
        if delta:
            vals = np.concatenate([vals, np.full(size - m, -delta)])
        layout = self._layout(bool(delta))
        if layout[4] is None:  # a pattern not seen before: its ordering first
            layout = self._order(vals, layout)
            if layout is None:
                return None
        order, indices, indptr, cols, perm, _ = layout
        A = sp.csc_matrix((vals[order], indices, indptr), shape=(size, size))
        try:
            lu = spla.splu(A, permc_spec="NATURAL", relax=SUPERLU_RELAX, panel_size=SUPERLU_PANEL)
        except RuntimeError:  # exactly singular
            return None
        lu = _Ordered(lu, perm)
        anorm = float(np.bincount(cols, np.abs(A.data), minlength=size).max(initial=0.0))
        if not _rcond_estimate(lu, anorm, size, rcond_min) > rcond_min:
            return None
        sol = lu.solve(rhs)
        if not np.isfinite(sol).all():
            return None
        self._lu = lu
        return sol

    def last(self, rhs):
        return self._lu.solve(rhs)


def _csc_layout(rows, cols, size):
    """``(order, indices, indptr, colidx)`` of the entries ``(rows, cols)``: their
    positions in CSC order (by column, then row), the row indices and column
    pointers of that layout, and the column of each stored entry."""
    order = np.lexsort((rows, cols))
    cols = cols[order]
    return (
        order,
        rows[order].astype(np.int32),
        np.searchsorted(cols, np.arange(size + 1)).astype(np.int32),
        cols,
    )


class _Ordered:
    """A SuperLU factor of ``A[:, q]`` (``q`` the inverse of ``perm``: column ``i`` of
    ``A`` at ``perm[i]``), made with the natural ordering, solving with ``A``:
    ``A x = b`` is ``A[:, q] x[q] = b``; ``A^T w = c`` is ``A[:, q]^T w = c[q]``.

    With the columns in the order SuperLU's COLAMD gives (with its postorder), the
    factor is COLAMD's: the same column order and the same partial pivoting, so the
    same L and U wherever the largest entry of a pivot column is unique (where
    entries tie, either factor is exact; :meth:`_SparseSolve._order` makes every
    factor this way, so one matrix always gets one factor).
    """

    __slots__ = ("_lu", "_perm", "_inv")

    def __init__(self, lu, perm):
        self._lu = lu
        self._perm = perm
        self._inv = None

    def solve(self, rhs, trans="N"):
        lu, perm = self._lu, self._perm
        if trans == "N":
            z = lu.solve(rhs)
            return z[perm]
        if self._inv is None:
            inv = np.empty_like(perm)
            inv[perm] = np.arange(perm.size)
            self._inv = inv
        return lu.solve(rhs[self._inv], trans=trans)


def _rcond_estimate(lu, anorm, n, accept_above=None):
    """Reciprocal 1-norm condition number from a factor, as LAPACK ``dgecon`` estimates it.

    Hager's method with Higham's refinements (the estimator behind ``dlacn2``) [2]_:
    a lower bound of :math:`\\|K^{-1}\\|_1` from a few solves with the factor and its
    transpose, usually exact or within a factor of 3.  With ``accept_above`` it
    stops after the first step when the estimates of both starting vectors already
    put the reciprocal condition number ``EARLY_MARGIN`` times above that bound.

    .. [2] N. J. Higham, "FORTRAN codes for estimating the one-norm of a real or
       complex matrix, with applications to condition estimation", ACM Trans. Math.
       Softw. 14(4), 381-396, 1988. DOI 10.1145/50063.214386
    """
    if not anorm > 0:
        return 0.0
    # Higham's alternating-sign test vector guards against an unlucky start; it and
    # the first vector of the iteration are solved together.
    x = np.full(n, 1.0 / n)
    start = lu.solve(_start_vectors(n))
    if not np.isfinite(start).all():
        return 0.0
    est_alt = 2.0 * float(np.abs(start[:, 0]).sum()) / (3.0 * n)
    est = 0.0
    j_last = -1
    for it in range(5):
        v = start[:, 1] if it == 0 else lu.solve(x)
        if not np.isfinite(v).all():
            return 0.0
        new = float(np.abs(v).sum())
        if it > 0 and new <= est:
            break
        est = new
        if it == 0 and accept_above is not None:
            # Both starting estimates put the condition number far inside the bound:
            # the further iterations raise the estimate by far less than EARLY_MARGIN
            # in practice; stop here.
            first = max(est, est_alt)
            if first > 0 and 1.0 / (anorm * first) > EARLY_MARGIN * accept_above:
                return 1.0 / (anorm * first)
        xi = np.where(v >= 0, 1.0, -1.0)
        z = lu.solve(xi, trans="T")
        j = int(np.argmax(np.abs(z)))
        if it > 0 and (j == j_last or abs(z[j]) <= float(z @ x)):
            break
        j_last = j
        x = np.zeros(n)
        x[j] = 1.0
    est = max(est, est_alt)
    return 1.0 / (anorm * est) if est > 0 else 0.0


@functools.lru_cache(maxsize=8)
def _start_vectors(n):
    """The two starting vectors of :func:`_rcond_estimate`, as the columns of one
    (n, 2) array (read-only: shared between calls): Higham's alternating-sign vector
    and the uniform vector ``1 / n``."""
    out = np.empty((n, 2))
    out[:, 0] = (1.0 + np.arange(n) / max(n - 1, 1)) * np.where(np.arange(n) % 2, -1.0, 1.0)
    out[:, 1] = 1.0 / n
    out.flags.writeable = False
    return out


def _row_scale(m_diag, jy_max):
    """1 / size of each row of the KKT system: the larger of the residual's standard
    deviation under measurement noise and its largest scaled y coefficient; None
    if a row is empty."""
    size = np.sqrt(np.maximum(np.asarray(m_diag, dtype=float), 0.0))
    if jy_max is not None:
        size = np.maximum(size, jy_max)
    if not np.all(size > 0):
        return None
    return 1.0 / size
