"""Linear data reconciliation: weighted least squares under linear constraints."""

from __future__ import annotations

import warnings

import numpy as np
import scipy.linalg
import scipy.sparse as sp
from scipy.linalg.lapack import dtrtrs

from perftest.balance import _checks, _dense, _sparse
from perftest.balance._core import Core, Problem
from perftest.balance._kkt import nonzero_positions
from perftest.balance._stats import chi2_p_value
from perftest.balance._threads import one_blas_thread_when_small
from perftest.balance.result import BatchReconciliation, Reconciliation
from perftest.errors import InputError, ReconciliationWarning

__all__ = ["reconcile_linear", "reconcile_linear_batch"]


def check_problem(x, cov, A, b, B, func: str, *, allow_sparse: bool = True) -> Problem:
    """Validate the inputs of a linear reconciliation."""
    x = _checks.vector(x, "x", func)
    n = x.size
    if n == 0:
        raise InputError(
            f"The 'x' parameter of {func} must hold at least one measurement. Got an empty array.",
            parameter="x",
        )
    S, sdiag, is_diag, _ = _checks.covariance(cov, n, func)
    A = _checks.matrix(A, "A", func, rows=None, cols=n, allow_sparse=allow_sparse)
    m = A.shape[0]
    if b is None:
        b = np.zeros(m)
    else:
        b = _checks.vector(b, "b", func)
        if b.size != m:
            raise InputError(
                f"The 'b' parameter of {func} must have one entry per row of 'A' "
                f"(A has shape {A.shape}). Got shape {b.shape}.",
                parameter="b",
            )
    if B is None:
        B = sp.csr_matrix((m, 0)) if sp.issparse(A) else np.zeros((m, 0))
    else:
        if not sp.issparse(B):
            Bt = np.asarray(B, dtype=float)
            if Bt.ndim == 2 and Bt.shape[0] != m:
                raise InputError(
                    f"The 'B' parameter of {func} must have as many rows as 'A' "
                    f"(A has shape {A.shape}). Got shape {Bt.shape}.",
                    parameter="B",
                )
        elif B.shape[0] != m:
            raise InputError(
                f"The 'B' parameter of {func} must have as many rows as 'A' "
                f"(A has shape {A.shape}). Got shape {B.shape}.",
                parameter="B",
            )
        B = _checks.matrix(B, "B", func, rows=m, cols=None, allow_sparse=allow_sparse)
    sparse = allow_sparse and (sp.issparse(A) or sp.issparse(B) or sp.issparse(S))
    if not sparse:
        A = A.toarray() if sp.issparse(A) else A
        B = B.toarray() if sp.issparse(B) else B
        S = S.toarray() if sp.issparse(S) else S
    else:
        A = sp.csr_matrix(A)
        B = sp.csr_matrix(B)
        S = sp.csr_matrix(S)
    return Problem(x, S, sdiag, is_diag, A, b, B, sparse)


def _equilibrate_dense(A, B, u, nonzeros=None):
    """Row weights and B column scales so that one unit is about one standard deviation.

    ``nonzeros``: the flat positions of B's nonzero entries, when known (see
    :func:`~perftest.balance._kkt.nonzero_positions`); the largest entries per column
    and row are then read from them alone (the same maxima, without passes over all
    of a mostly zero B).
    """
    m, k = B.shape
    from_nonzeros = nonzeros is not None and m and k
    if from_nonzeros:
        rows, cols = np.divmod(nonzeros, k)
        av = np.abs(B.ravel()[nonzeros])
        colB = np.zeros(k)
        np.maximum.at(colB, cols, av)
    else:
        absB = np.abs(B)
        colB = absB.max(axis=0) if m and k else np.ones(k)
    colB = np.where(colB > 0, colB, 1.0)
    if A.shape[1]:
        absA = np.abs(A)
        absA *= u
        rowA = absA.max(axis=1)
    else:
        rowA = np.zeros(m)
    if from_nonzeros:
        rowB = np.zeros(m)
        np.maximum.at(rowB, rows, av / colB[cols])
    elif k:
        absB /= colB
        rowB = absB.max(axis=1)
    else:
        rowB = np.zeros(m)
    scale = np.maximum(rowA, rowB)
    w = np.where(scale > 0, 1.0 / np.where(scale > 0, scale, 1.0), 1.0)
    return w, colB


def solve_dense(p: Problem, *, deferred: bool = False, final: bool = False) -> Core:
    """Dense reconciliation core (see module ``_dense`` for the method).

    ``deferred``: leave the statistics (variances of the adjustments, redundancy,
    variances and covariances) to :meth:`Core.complete`, for a solve whose step alone
    may be wanted (the same numbers when completed).

    ``final``: the result is final (or the predicted last linearisation of
    reconcile_nonlinear): the elimination of the unmeasured variables may take the
    cheaper routes of :func:`_dense.reduce_constraints`, equal to rounding
    (``Core.exact`` says whether it did).
    """
    x, S, s, A, b, B = p.x, p.S, p.sdiag, p.A, p.b, p.B
    n = x.size
    u = np.sqrt(s)
    k = B.shape[1]
    # a large, mostly zero B: equilibrated from its nonzeros, its pattern passed on
    nonzeros = nonzero_positions(B) if final and k else None
    w, colB = _equilibrate_dense(A, B, u, nonzeros)
    At = A * w[:, None]
    bt = b * w
    Bt = B * w[:, None]
    Bt /= colB  # (in place: the same numbers, one temporary less)
    if nonzeros is not None and np.count_nonzero(Bt.ravel()[nonzeros]) != nonzeros.size:
        nonzeros = None  # (an entry scaled to zero: the pattern is read from Bt again)
    red = _dense.reduce_constraints(Bt, At, bt, final=final, pattern=nonzeros) if k else None
    if red is None:
        Ar0, br0 = At, bt
    else:
        Ar0, br0 = red.PA, red.Pb
    AS0 = Ar0 * s if p.is_diag else Ar0 @ S
    M0 = AS0 @ Ar0.T
    sel = _dense.select_rows(M0, br0, None if red is None else _dense.raw_rows(red.P, At, bt, s))
    idx = sel.idx
    r = idx.size
    res0 = Ar0 @ x - br0
    if red is None:
        # Reduced rows are the original constraints: report them in their own units.
        constraint_rows = np.arange(A.shape[0])
        constraint_residual = res0 / w
        constraint_u = np.sqrt(np.maximum(sel.d, 0.0)) / w
    else:
        # The nodal test's rows in the canonical basis, each in the units of the
        # balance it is anchored to; their variances from the canonical rows
        # themselves, so that a row without measured variables keeps a variance of
        # rounding size squared (untested).
        canon = _dense.CanonicalRows(red.P)
        constraint_rows = canon.rows
        CA = canon(Ar0)
        CAS = CA * s if p.is_diag else CA @ S
        var_c = np.einsum("ij,ij->i", CAS, CA)
        constraint_residual = canon(res0) / w[constraint_rows]
        constraint_u = np.sqrt(np.maximum(var_c, 0.0)) / w[constraint_rows]
    if r:
        L = sel.L
        AS = AS0[idx]
        wres = _trsolve(L, res0[idx])
        chi2 = float(wres @ wres)
        lam_r = _trsolve(L, wres, trans=1)
        xhat = x - AS.T @ lam_r
        if red is None:
            lam_eq = np.zeros(A.shape[0])
            lam_eq[idx] = lam_r
        else:
            lam_eq = red.P[idx].T @ lam_r
        lam = lam_eq * w
    else:
        chi2 = 0.0
        xhat = x.copy()
        lam = np.zeros(A.shape[0])
    # Unmeasured: the scaled unknowns are colB * y, so y = G (bt - At xhat) / colB.
    T = red.GA / colB[:, None] if k else np.zeros((0, n))
    y = red.Gb / colB - T @ xhat if k else np.zeros(0)

    def statistics():
        if r:
            W = _trsolve(L, AS)
            vdiag = np.einsum("ij,ij->j", W, W)
        else:
            W = np.zeros((0, n))
            vdiag = np.zeros(n)
        redundant = vdiag > _dense.REDUNDANCY_RTOL * s
        # The covariances are dense (n, n) products, formed on first request (an
        # iterate's solve or a replaced result never asks).  The variances of y come
        # without them: diag(T x_cov T^T) with x_cov = S - W^T W is
        # diag(T S T^T) - |W T^T|^2 per column.
        covariances = _Covariances(S, s, p.is_diag, W, T)
        if k:
            TS = T * s if p.is_diag else T @ S
            prior = np.einsum("ij,ij->i", TS, T)
            WT = W @ T.T
            y_var = prior - np.einsum("ij,ij->j", WT, WT)
            if np.any(y_var < _CANCEL * prior):
                # most of the prior variance taken out: the difference would lose digits
                y_var = np.diag(covariances()[1]).copy()
        else:
            y_var = np.zeros(0)
        return vdiag, redundant, y_var, covariances

    core = Core(
        xhat=xhat,
        y=y,
        observable=red.observable if k else np.zeros(0, dtype=bool),
        lam=lam,
        chi2=chi2,
        dof=int(r),
        vdiag=None,
        redundant=None,
        covariances=None,
        y_var=None,
        constraint_residual=constraint_residual,
        constraint_u=constraint_u,
        constraint_rows=constraint_rows,
        inconsistent=sel.inconsistent,
        finish=statistics,
        exact=red is None or red.exact,
    )
    return core if deferred else core.complete()


# y variances from the difference diag(T S T^T) - |W T^T|^2 keep about
# -log10(_CANCEL) fewer digits than the rounding; below that share of the prior
# variance they are read from the formed covariance instead.
_CANCEL = 1e-3


class _Covariances:
    """``(x_cov, y_cov, xy_cov)`` of a dense solve, formed on the first call and kept:
    ``x_cov = S - W^T W``, ``y_cov = T x_cov T^T``, ``xy_cov = -x_cov T^T``."""

    def __init__(self, S, s, is_diag, W, T):
        self._args = (S, s, is_diag, W, T)
        self._out = None

    def __call__(self):
        if self._out is None:
            S, s, is_diag, W, T = self._args
            x_cov = (np.diag(s) if is_diag else S.copy()) - W.T @ W
            self._out = (x_cov, T @ x_cov @ T.T, -x_cov @ T.T)
            self._args = None
        return self._out


# Closure check of a solution: |A xhat + B y - b| of a row against the size of its
# terms, the measured values included: |A| (|x| + |xhat|) + |B| |y| + |b|.  The
# measured values set the scale of the round-off a correct solve leaves; without them,
# a row that the balances force to zero (a stream between two closed valves) has
# round-off terms and round-off residual, a ratio near 1, and a false alarm sent a
# 2,000-stream solve through the dense null-space fallback.  A correct solve closes to
# a few hundred ulp; 1e-9 leaves room for ill-conditioning that still gives a usable
# estimate.
CLOSURE_RTOL = 1e-9

# Largest problem (measured + unmeasured variables) that the null-space fallback
# solves with dense factorisations (an SVD of this size takes about a second).
FALLBACK_MAX = 3000


def _closure_error(p: Problem, xhat, y) -> float:
    """Largest |A xhat + B y - b| of a row relative to the size of its terms and of
    the measured values in it (see ``CLOSURE_RTOL``)."""
    A, B, b = p.A, p.B, p.b
    res = A @ xhat - b
    scale = abs(A) @ (np.abs(xhat) + np.abs(p.x)) + np.abs(b)
    if B.shape[1]:
        res = res + B @ y
        scale = scale + abs(B) @ np.abs(y)
    tiny = np.finfo(float).tiny
    return float(np.max(np.abs(res) / (scale + tiny), initial=0.0))


def _dense_array(M):
    return M.toarray() if sp.issparse(M) else np.asarray(M, dtype=float)


def _solve_nullspace(p: Problem, core: Core) -> Core | None:
    """Reconcile in the null space of the constraints ``[A B]``.

    Used when the projected solve (``core``) does not close the balances or finds
    them contradictory.  Uncertainties spread over many decades make the Gram matrix
    of the constraints in the metric of S numerically singular: two balances that
    share one very uncertain instrument look parallel, one is dropped and the
    balances do not close, or the dropped one is taken for a contradiction.  Here
    :math:`(\\hat x, \\hat y) = z_p + N t` with :math:`A x_p + B y_p = b` and
    :math:`[A\\ B] N = 0`, and ``t`` is the weighted least-squares fit
    :math:`\\min |L^{-1}(x_p + N_x t - x)|` with :math:`S = L L^T`.  Closure holds to
    the round-off of the constraints whatever the spread of the uncertainties; the
    fit uses an SVD, whose error grows only with the condition number of
    :math:`L^{-1} N_x`, not its square.  Directions of ``t`` that do not move ``x``
    move only unmeasured variables: those variables are not observable.

    Returns None (the caller keeps ``core``) when the constraints are contradictory
    in this metric too, or the problem is larger than ``FALLBACK_MAX``.
    """
    x, s = p.x, p.sdiag
    n, k = x.size, p.B.shape[1]
    if n + k > FALLBACK_MAX:
        return None
    A, B = _dense_array(p.A), _dense_array(p.B)
    colB = np.max(np.abs(B), axis=0) if k and B.shape[0] else np.ones(k)
    colB = np.where(colB > 0, colB, 1.0)
    Z = np.hstack([A, B / colB]) if k else A
    rows = np.linalg.norm(Z, axis=1)
    keep = rows > 0
    Zn = Z[keep] / rows[keep, None]
    bn = p.b[keep] / rows[keep]
    if np.any(p.b[~keep] != 0.0):
        return None  # a row 0 = b_j with b_j != 0: truly contradictory
    zp = scipy.linalg.lstsq(Zn, bn, check_finite=False)[0] if Zn.size else np.zeros(n + k)
    scale = np.abs(Zn) @ np.abs(zp) + np.abs(bn)
    if np.any(np.abs(Zn @ zp - bn) > CLOSURE_RTOL * scale + np.finfo(float).tiny):
        return None  # contradictory constraints: the caller reports them
    N = scipy.linalg.null_space(Zn, check_finite=False) if Zn.size else np.eye(n + k)
    Nx, Ny = N[:n], N[n:]
    xp, yp = zp[:n], zp[n:]
    if p.is_diag:
        u = np.sqrt(s)
        Mt, rhs = Nx / u[:, None], (x - xp) / u
    else:
        S = _dense_array(p.S)
        Lm = scipy.linalg.cholesky(S, lower=True, check_finite=False)
        Mt = scipy.linalg.solve_triangular(Lm, Nx, lower=True, check_finite=False)
        rhs = scipy.linalg.solve_triangular(Lm, x - xp, lower=True, check_finite=False)
    q = N.shape[1]
    if q and n:
        U, sv, Vt = scipy.linalg.svd(Mt, full_matrices=True, check_finite=False)
        g = int(np.count_nonzero(sv > sv.max(initial=0.0) * max(n, q) * np.finfo(float).eps))
    else:
        U, sv, Vt, g = np.zeros((n, 0)), np.zeros(0), np.eye(q), 0
    good = Vt[:g]
    t = good.T @ ((U[:, :g].T @ rhs) / sv[:g])
    xhat = xp + Nx @ t
    ys = yp + Ny @ t
    K = N @ (good.T / sv[:g])
    Kx, Ky = K[:n], K[n:] / colB[:, None]
    x_cov = Kx @ Kx.T
    y_cov = Ky @ Ky.T
    xy_cov = Kx @ Ky.T
    # directions of t that leave x unmoved move only y: not observable
    moved = Ny @ Vt[g:].T
    observable = np.sqrt(np.einsum("ij,ij->i", moved, moved)) < _dense.OBS_TOL
    d = xhat - x
    wd = d / s if p.is_diag else scipy.linalg.cho_solve((Lm, True), d, check_finite=False)
    chi2 = float(d @ wd)
    vdiag = np.maximum(s - np.diag(x_cov), 0.0)
    # multipliers of the original constraints: S^-1 (xhat - x) + A^T lam = 0, B^T lam = 0
    lam = scipy.linalg.lstsq(
        np.vstack([A.T, B.T]) if k else A.T, np.concatenate([-wd, np.zeros(k)]),
        check_finite=False,
    )[0]  # fmt: skip
    cov_tuple = (x_cov, y_cov, xy_cov)
    return Core(
        xhat=xhat,
        y=ys / colB,
        observable=observable,
        lam=lam,
        chi2=chi2,
        dof=int(n - g),
        vdiag=vdiag,
        redundant=vdiag > _dense.REDUNDANCY_RTOL * s,
        covariances=lambda: cov_tuple,
        y_var=np.diag(y_cov).copy(),
        constraint_residual=core.constraint_residual,
        constraint_u=core.constraint_u,
        constraint_rows=core.constraint_rows,
        inconsistent=None,
    )


def _trsolve(L, rhs, trans=0):
    """Solve ``L z = rhs`` (or ``L^T z = rhs``) with the LAPACK routine directly; the
    generic scipy wrapper costs more than the solve for the small systems of a plant."""
    z, info = dtrtrs(L, rhs, lower=1, trans=trans)
    if info != 0:  # pragma: no cover - L comes from a successful Cholesky
        raise np.linalg.LinAlgError(f"triangular solve failed (info {info})")
    return z


def solve(p: Problem, *, strict: bool = False, deferred: bool = False, final: bool = False) -> Core:
    """Dispatch to the dense or the sparse core, with the null-space fallback.

    ``strict`` (reconcile_linear): the fallback when the projected solve finds the
    constraints contradictory (it confirms or clears that) or its solution does not
    close them to ``CLOSURE_RTOL``.  Otherwise (the steps of reconcile_nonlinear,
    whose linearised constraints are solved again at every iterate and which
    handles contradictory ones itself) only for the second reason, and only for a
    problem without unmeasured variables and with redundancy.  Of two solutions
    that do not close, the one closer to closing is kept.  ``final``: see
    :func:`solve_dense` (dense problems only).
    """
    if p.sparse:
        core = _sparse.solve_sparse(p)
    else:
        core = solve_dense(p, deferred=deferred, final=final)
    if core.inconsistent is not None:
        if strict:
            # None when the constraints are contradictory in this metric too
            return _solve_nullspace(p, core) or core
        return core
    if not strict and (p.B.shape[1] or not core.dof):
        return core
    error = _closure_error(p, core.xhat, core.y)
    if error > CLOSURE_RTOL:
        # the null-space solve can be the worse of the two when the columns of the
        # constraints differ by many orders of magnitude: keep the one that closes
        fallback = _solve_nullspace(p, core)
        if fallback is not None and _closure_error(p, fallback.xhat, fallback.y) < error:
            return fallback
    return core


def raise_if_inconsistent(core: Core, func: str) -> None:
    if core.inconsistent is not None:
        row, misfit = core.inconsistent
        raise InputError(
            f"The constraints given to {func} (parameters 'A', 'b' and 'B') must be "
            f"consistent. Got linearly dependent constraints whose right-hand sides "
            f"disagree (reduced constraint {row}, misfit {misfit:.3g} standard deviations); "
            f"remove the duplicated balance or correct 'b'.",
            parameter="b",
        )


def mask_unobservable(core: Core):
    """y, y_u and the covariance callable with nan where y is not observable."""
    core.complete()
    obs = core.observable
    y = np.where(obs, core.y, np.nan)
    y_u = np.where(obs, np.sqrt(np.maximum(core.y_var, 0.0)), np.nan)
    source = core.covariances

    def covariances():
        x_cov, y_cov, xy_cov = source()
        y_cov = y_cov.copy()
        y_cov[~obs, :] = np.nan
        y_cov[:, ~obs] = np.nan
        xy_cov = xy_cov.copy()
        xy_cov[:, ~obs] = np.nan
        return x_cov, y_cov, xy_cov

    return y, y_u, covariances


def build_result(
    p: Problem, core: Core, *, method: str, converged=True, iterations=1, residual_norm=None
):
    """Wrap a core solution into a :class:`Reconciliation`."""
    core.complete()
    y, y_u, covariances = mask_unobservable(core)
    sdev = np.sqrt(np.maximum(core.vdiag, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(core.redundant, np.abs(core.xhat - p.x) / sdev, np.nan)
    u_rec = np.sqrt(np.maximum(p.sdiag - core.vdiag, 0.0))
    if residual_norm is None:
        resid = p.A @ core.xhat + p.B @ core.y - p.b
        residual_norm = float(np.linalg.norm(resid))
    return Reconciliation(
        x=core.xhat,
        y=y,
        chi2=core.chi2,
        dof=core.dof,
        p_value=chi2_p_value(core.chi2, core.dof),
        z=z,
        redundant=core.redundant,
        observable=core.observable,
        converged=bool(converged),
        iterations=int(iterations),
        x_measured=p.x,
        cov_measured=p.S,
        u_reconciled=u_rec,
        y_u=y_u,
        adjustment_u=sdev,
        residual_norm=residual_norm,
        method=method,
        constraint_residual=core.constraint_residual,
        constraint_u=core.constraint_u,
        constraint_rows=core.constraint_rows,
        covariance_source=covariances,
    )


def _linear_size(x, cov=None, A=None, b=None, B=None):
    return np.size(x) + (0 if B is None else np.shape(B)[1])


@one_blas_thread_when_small(_linear_size)
def reconcile_linear(x, cov, A, b=None, B=None) -> Reconciliation:
    """Reconcile measurements with linear constraints by weighted least squares.

    Parameters
    ----------
    x : array_like (n,)
        Measured values [any consistent units].
    cov : array_like (n, n) or scipy.sparse matrix
        Covariance of the measurement errors; symmetric positive definite.
    A : array_like (m, n) or scipy.sparse matrix
        Coefficients of the measured variables in the constraints.
    b : array_like (m,), optional
        Right-hand side; zeros by default.
    B : array_like (m, k) or scipy.sparse matrix, optional
        Coefficients of the unmeasured variables; none by default.

    Returns
    -------
    Reconciliation
        Reconciled values, covariances, global and measurement tests,
        redundancy and observability.  If any of ``A``, ``B`` or ``cov`` is a
        scipy.sparse matrix, the sparse path is taken: values, their standard
        uncertainties, ``z``, ``chi2`` and ``y_cov`` are computed without any dense
        (n, n) matrix, and ``x_cov`` (dense n by n, plus a dense m by n temporary)
        only on first access.

    Raises
    ------
    InputError
        Shapes disagree, non-finite entries, a covariance that is not symmetric
        positive definite, or constraints that contradict each other.

    Warns
    -----
    ReconciliationWarning
        The constraints leave no redundancy (``dof`` = 0): nothing is adjusted,
        ``chi2`` is 0 and ``p_value`` is 1.

    Notes
    -----
    The constraints are :math:`A x + B y = b`.  A projection :math:`P` whose rows span
    the left null space of :math:`B` (:math:`PB = 0`, from a QR factorisation of
    :math:`B` with column pivoting [1]_) leaves :math:`P A x = P b`; dependent rows are
    dropped (pivoted Cholesky of :math:`PASA^TP^T`) to give the independent
    :math:`A_r x = b_r` with :math:`M = A_r S A_r^T`.  Then

    .. math::

        \\hat x = x - S A_r^T M^{-1} (A_r x - b_r), \\qquad
        \\operatorname{cov}(\\hat x) = S - S A_r^T M^{-1} A_r S,

        \\chi^2 = (A_r x - b_r)^T M^{-1} (A_r x - b_r), \\qquad
        \\nu = \\operatorname{rank}(A_r),

    and the measurement-test statistic is :math:`z_i = |\\hat x_i - x_i| / \\sqrt{V_{ii}}`
    with :math:`V = S A_r^T M^{-1} A_r S` [2]_.  An unmeasured :math:`y_j` is
    observable when the unit vector :math:`e_j` lies in the row space of :math:`B`;
    observable values are :math:`\\hat y = B^+ (b - A \\hat x)`, the others are ``nan``.

    Before any rank decision each constraint row is scaled so that one unit equals
    about one standard deviation, and each column of :math:`B` to unit size, so the
    result does not depend on the units of the variables.

    References
    ----------
    .. [1] C. M. Crowe, Y. A. Garcia Campos, A. Hrymak, "Reconciliation of process
       flow rates by matrix projection. Part I: linear case", AIChE Journal 29(6),
       881-888, 1983. DOI 10.1002/aic.690290600
    .. [2] S. Narasimhan, C. Jordache, "Data Reconciliation and Gross Error
       Detection", Gulf Publishing, 2000. DOI 10.1016/B978-088415255-2/50000-4

    Examples
    --------
    >>> import numpy as np
    >>> r = reconcile_linear([10.0, 4.0, 5.0], np.diag([1.0, 1.0, 1.0]), [[1.0, -1.0, -1.0]])
    >>> np.round(r.x, 4)
    array([9.6667, 4.3333, 5.3333])
    >>> r.dof
    1
    """
    func = "reconcile_linear"
    p = check_problem(x, cov, A, b, B, func)
    core = solve(p, strict=True, final=True)
    raise_if_inconsistent(core, func)
    if core.dof == 0:
        warnings.warn(
            "The constraints leave no redundancy: nothing can be reconciled "
            "(dof = 0, chi2 = 0, p_value = 1). Add measurements or balances.",
            ReconciliationWarning,
            stacklevel=3,
        )
    method = "linear-sparse" if p.sparse else "linear-dense"
    return build_result(p, core, method=method)


def reconcile_linear_batch(X, cov, A, b=None, B=None, *, chunk_size: int = 65536):
    """Reconcile many snapshots of the same linear model with one factorisation.

    Parameters
    ----------
    X : array_like (N, n)
        Measured values, one snapshot per row.
    cov, A, b, B
        As for :func:`reconcile_linear` (dense or sparse; shared by all snapshots).
    chunk_size : int
        Snapshots per block when a correlated covariance needs the whitened
        residuals for ``chi2`` (bounds that temporary).

    Returns
    -------
    BatchReconciliation
        ``x`` (N, n), ``y`` (N, k), ``chi2`` (N,), ``z`` (N, n) and the shared
        covariances, uncertainties and classification.

    Notes
    -----
    Every output is affine in the measured values, so with
    :math:`K = S A_r^T M^{-1}` one matrix product gives the values and the rest
    follows elementwise:

    .. math::

        \\hat X = X (I - K A_r)^T + (K b_r)^T, \\qquad
        Z = |(\\hat X - X)\\, D_V^{-1/2}|, \\qquad
        \\chi^2_s = a_s^T S^{-1} a_s = \\| L^{-1} (A_r x_s - b_r) \\|^2

    with the adjustments :math:`a_s` of snapshot :math:`s`, :math:`M = L L^T` and
    :math:`D_V` the diagonal of the adjustment covariance.
    """
    func = "reconcile_linear_batch"
    X = np.asarray(X, dtype=float)
    if X.ndim != 2:
        raise InputError(
            f"The 'X' parameter of {func} must be a 2-D array (snapshots, measurements). "
            f"Got shape {X.shape}.",
            parameter="X",
        )
    _checks.finite(X, "X", func)
    N, n = X.shape
    # Reconcile the first snapshot (or zeros) to obtain the shared quantities.
    x0 = X[0] if N else np.zeros(n)
    p = check_problem(x0, cov, A, b, B, func, allow_sparse=False)
    core = solve_dense(p)
    raise_if_inconsistent(core, func)
    if core.dof == 0:
        warnings.warn(
            "The constraints leave no redundancy: nothing can be reconciled "
            "(dof = 0, chi2 = 0, p_value = 1). Add measurements or balances.",
            ReconciliationWarning,
            stacklevel=2,
        )
    # Affine maps obtained from the dense core's factors: recover them by
    # linearity, solving with the same structures on the identity.
    F, c_x, H, c_h = _affine_maps(p)
    k = p.B.shape[1]
    sdev = np.sqrt(np.maximum(core.vdiag, 0.0))
    inv_sd = np.where(core.redundant, 1.0 / np.where(core.redundant, sdev, 1.0), np.nan)
    y_obs = core.observable
    _, y_u, covariances = mask_unobservable(core)
    x_cov, y_cov, _ = covariances()
    Ty, cy = _y_map(p)
    # One large product gives the reconciled values (few large BLAS calls are much
    # faster than many small ones); adjustments, z and chi2 follow in place.
    xs = np.empty((N, n))
    np.matmul(X, F.T, out=xs)
    xs += c_x
    zs = np.empty((N, n))
    np.subtract(xs, X, out=zs)  # adjustments a
    if p.is_diag:
        # chi2 = a^T S^-1 a (equal to r^T M^-1 r since a = -S Ar^T M^-1 r).
        chi2 = np.einsum("ij,ij,j->i", zs, zs, 1.0 / p.sdiag)
    else:
        chi2 = np.empty(N)
        for start in range(0, N, chunk_size):
            stop = min(N, start + chunk_size)
            wres = X[start:stop] @ H.T
            wres -= c_h
            chi2[start:stop] = np.einsum("ij,ij->i", wres, wres)
    np.abs(zs, out=zs)
    zs *= inv_sd
    ys = cy - xs @ Ty.T if k else np.empty((N, 0))
    ys[:, ~y_obs] = np.nan
    return BatchReconciliation(
        x=xs,
        y=ys,
        chi2=chi2,
        z=zs,
        dof=core.dof,
        x_cov=x_cov,
        y_cov=_masked(y_cov, y_obs),
        u_reconciled=np.sqrt(np.maximum(p.sdiag - core.vdiag, 0.0)),
        y_u=y_u,
        adjustment_u=sdev,
        redundant=core.redundant,
        observable=y_obs,
    )


def _masked(y_cov, obs):
    y_cov = y_cov.copy()
    y_cov[~obs, :] = np.nan
    y_cov[:, ~obs] = np.nan
    return y_cov


def _reduced(p: Problem):
    """Reduced, independent constraints and the Cholesky factor of their Gram matrix."""
    u = np.sqrt(p.sdiag)
    w, colB = _equilibrate_dense(p.A, p.B, u)
    At = p.A * w[:, None]
    bt = p.b * w
    Bt = p.B * w[:, None] / colB[None, :]
    proj = _dense.project_out_unmeasured(Bt)
    Ar0, br0 = (At, bt) if proj.P is None else (proj.P @ At, proj.P @ bt)
    AS0 = Ar0 * p.sdiag if p.is_diag else Ar0 @ p.S
    raw = None if proj.P is None else _dense.raw_rows(proj.P, At, bt, p.sdiag)
    sel = _dense.select_rows(AS0 @ Ar0.T, br0, raw)
    return Ar0[sel.idx], br0[sel.idx], AS0[sel.idx], sel.L, proj, At, bt, colB


def _affine_maps(p: Problem):
    """``xhat = F x + c_x`` and whitened residual ``L^{-1}(Ar x - br) = H x - c_h``."""
    n = p.x.size
    Ar, br, AS, L, *_ = _reduced(p)
    if br.size == 0:
        return np.eye(n), np.zeros(n), np.zeros((0, n)), np.zeros(0)
    H = _trsolve(L, Ar)
    c_h = _trsolve(L, br)
    Kt = scipy.linalg.cho_solve((L, True), AS, check_finite=False)  # M^-1 Ar S
    F = np.eye(n) - (Kt.T @ Ar)
    c_x = Kt.T @ br
    return F, c_x, H, c_h


def _y_map(p: Problem):
    """``y = cy - Ty xhat`` (see :func:`solve_dense`)."""
    n = p.x.size
    k = p.B.shape[1]
    if k == 0:
        return np.zeros((0, n)), np.zeros(0)
    *_, proj, At, bt, colB = _reduced(p)
    Ty = (proj.G @ At) / colB[:, None]
    cy = (proj.G @ bt) / colB
    return Ty, cy
