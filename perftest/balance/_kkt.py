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
one by the residual of the solution.

Layer: imports numpy and scipy only.

References
----------
.. [1] J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., Springer, 2006.
   DOI 10.1007/978-0-387-40065-5
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.linalg.lapack import dgecon, dgetrf, dgetrs

__all__ = ["kkt_step", "DENSE_MAX", "RCOND_MIN"]

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

#: Largest scaled residual of a sparse solution accepted (same reasoning: the solve
#: is then good to ~1e-8 of the residuals' standard deviations).
SPARSE_CHECK = 1e-8


def kkt_step(Jx, Jy, S, sdiag, is_diag, xk, xm, fk, ysize, try_regular=True):
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
        if not np.all(np.isfinite(sol)):
            return None
        check = K @ sol - rhs
        if np.max(np.abs(check), initial=0.0) > SPARSE_CHECK * max(1.0, np.abs(rhs).max()):
            return None
        JxS_t = sp.csr_matrix(Dr @ JxS)
    else:
        Jx_ = np.asarray(Jx)
        JxS = Jx_ * sdiag if is_diag else Jx_ @ np.asarray(S)
        M = JxS @ Jx_.T
        Jy_ = np.asarray(Jy) * ysize
        r = _row_scale(np.diag(M), np.abs(Jy_).max(axis=1) if k else None)
        if r is None:
            return None
        K0 = np.empty((size, size))
        K0[:m, :m] = M * r[:, None] * r
        K0[:m, m:] = -Jy_ * r[:, None]
        K0[m:, :m] = K0[:m, m:].T
        K0[m:, m:] = 0.0
        rhs = np.zeros(size)
        rhs[:m] = (fk + Jx_ @ (xm - xk)) * r
        JxS_t = JxS * r[:, None]
        # First the system as it stands: regular when every y is determined.
        solver = _DenseSolve()
        out = solver(K0.copy(), rhs, RCOND_REGULAR) if try_regular else None
        if out is not None:
            sol = out
            return xm - JxS_t.T @ sol[:m] - xk, sol[m:] * ysize, sol[:m] * r, True
        K0[np.arange(m, size), np.arange(m, size)] = -DELTA
        sol = solver(K0, rhs, RCOND_MIN)
        if sol is None:
            return None
        corr = solver.last(np.concatenate([np.zeros(m), -DELTA * sol[m:]]))
    # One step of refinement towards the unregularised system (its residual is
    # (0, -DELTA dy)): it removes the regularisation's bias from the determined
    # directions to second order.  A large correction means a direction of y that is
    # barely determined (neither clearly determined nor clearly free): the full
    # solve decides the rank there.
    big = float(np.abs(sol[m:]).max(initial=0.0)) + np.finfo(float).tiny
    if float(np.abs(corr[m:]).max(initial=0.0)) > REG_CHECK * big:
        return None
    sol = sol + corr
    lam_s = sol[:m]
    dy = sol[m:] * ysize
    # x = xm - S Jx^T lam with lam = row_scale * lam_s: S Jx^T D_r lam_s = (D_r Jx S)^T lam_s
    x = xm - JxS_t.T @ lam_s
    return x - xk, dy, lam_s * r, False


class _DenseSolve:
    """LU with a condition check; keeps the last factors for a second right-hand side."""

    def __init__(self):
        self._lu = None

    def __call__(self, K, rhs, rcond_min):
        anorm = np.abs(K).sum(axis=0).max()
        lu, piv, info = dgetrf(K, overwrite_a=1)
        if info != 0:
            return None
        rcond, info = dgecon(lu, anorm, norm="1")
        if info != 0 or not rcond > rcond_min:
            return None
        sol, info = dgetrs(lu, piv, rhs)
        if info != 0 or not np.all(np.isfinite(sol)):
            return None
        self._lu = (lu, piv)
        return sol

    def last(self, rhs):
        return dgetrs(*self._lu, rhs)[0]


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
