"""Serial elimination: drop the measurement the tests blame most, reconcile again.

Layer: above the solvers (:mod:`perftest.balance.linear`,
:mod:`perftest.balance.nonlinear`) and the tests (:mod:`perftest.balance.gross`);
only :mod:`perftest.balance.plant` and the package itself import it.

References
----------
.. [1] R. W. Serth, W. A. Heenan, "Gross error detection and data reconciliation in
   steam-metering systems", AIChE Journal 32(5), 733-742, 1986.
   DOI 10.1002/aic.690320505
"""

from __future__ import annotations

import warnings

import numpy as np
import scipy.sparse as sp

from perftest.balance import _checks
from perftest.balance._stats import check_alpha as _check_alpha
from perftest.balance.ambiguity import indistinguishable
from perftest.balance.linear import check_problem, reconcile_linear
from perftest.balance.nonlinear import reconcile_nonlinear
from perftest.balance.result import Elimination, EliminationAlternative, EliminationStep
from perftest.errors import InputError, ReconciliationWarning

__all__ = ["serial_elimination", "serial_elimination_nonlinear"]


def _max_z(result):
    z = result.z
    return float(np.nanmax(z)) if np.any(~np.isnan(z)) else float("nan")


def _step(result, dropped, name, alpha, tied=(), tied_names=(), lost=0):
    return EliminationStep(
        dropped=dropped,
        name=name,
        chi2=float(result.chi2),
        dof=int(result.dof),
        p_value=float(result.p_value),
        max_z=_max_z(result),
        passed=bool(result.p_value >= alpha),
        tied_with=tuple(tied),
        tied_names=tuple(tied_names),
        redundancy_lost=int(lost),
    )


def _names(names, n, func):
    if names is None:
        return None
    names = list(names)
    if len(names) != n:
        raise InputError(
            f"The 'names' parameter of {func} must have one entry per measurement ({n}). "
            f"Got {len(names)}.",
            parameter="names",
        )
    return names


def _trusted(trusted, n, names, func):
    """Indices of the trusted measurements (given as indices or names)."""
    if trusted is None:
        return ()
    out = []
    for t in trusted:
        if isinstance(t, str):
            if names is None or t not in names:
                raise InputError(
                    f"The 'trusted' parameter of {func} must name measurements in 'names' "
                    f"or give their indices. Got {t!r}.",
                    parameter="trusted",
                )
            out.append(names.index(t))
        elif isinstance(t, int | np.integer) and 0 <= int(t) < n:
            out.append(int(t))
        else:
            raise InputError(
                f"The 'trusted' parameter of {func} must hold indices between 0 and {n - 1} "
                f"or names. Got {t!r}.",
                parameter="trusted",
            )
    return tuple(sorted(set(out)))


def _full(result, keep, dropped, k0, n):
    """Estimate and standard uncertainty of every original measured quantity."""
    x = np.empty(n)
    u = np.empty(n)
    x[keep] = result.x
    u[keep] = result.u_reconciled
    nd = len(dropped)
    x[dropped] = result.y[k0 : k0 + nd]
    u[dropped] = result.y_u[k0 : k0 + nd]
    return x, u


def _quiet(run, keep, dropped, y_start, D):
    with warnings.catch_warnings():
        # dof reaching 0 is an expected end of elimination, not news.
        warnings.simplefilter("ignore", ReconciliationWarning)
        return run(keep, list(dropped), list(y_start), D)


def _eliminate(run, n, k0, alpha, names, max_steps, trusted=()):
    """Shared loop: ``run(keep, dropped, y_start, D)`` returns a Reconciliation.

    ``D`` (n, q) holds the shared directions freed so far: the measured values are
    taken as :math:`x = x_t + D b + e` with ``b`` unmeasured (appended to ``y``
    after the dropped measurements), so the balances no longer judge the candidates
    along what they share.

    At each step the measurement with the largest statistic is found with every
    measurement the tests cannot tell from it
    (:func:`perftest.balance.ambiguity.indistinguishable`).  Alone, it is dropped.
    With others, none is dropped: the direction their gross-error signatures share
    is freed instead (each candidate's one-standard-uncertainty bias in the sense its
    adjustment points, summed), which takes out the redundancy they share and keeps
    every candidate's own reading; each single choice among them is reconciled too
    and kept as an alternative.
    """
    keep = np.arange(n)
    dropped: list[int] = []
    y_start: list[float] = []
    D = np.zeros((n, 0))
    is_trusted = np.zeros(n, dtype=bool)
    is_trusted[list(trusted)] = True
    result = _quiet(run, keep, dropped, y_start, D)
    steps = [_step(result, None, None, alpha)]
    alternatives = []
    shared = []
    limit = n if max_steps is None else int(max_steps)
    while result.p_value < alpha and result.dof > 0 and len(dropped) < limit:
        eligible = np.asarray(result.redundant, dtype=bool) & ~is_trusted[keep]
        z = np.where(eligible, result.z, -np.inf)
        z = np.where(np.isnan(z), -np.inf, z)
        if not np.isfinite(z.max(initial=-np.inf)):
            break
        pos = int(np.argmax(z))
        group = indistinguishable(result, pos, eligible & np.isfinite(z), alpha)
        idx = [int(keep[g]) for g in group]
        before = result
        if group.size == 1:
            y_start.append(float(result.x[pos]))
            dropped.append(idx[0])
            keep = np.delete(keep, pos)
            result = _quiet(run, keep, dropped, y_start, D[keep])
            name = None if names is None else names[idx[0]]
            steps.append(_step(result, idx[0], name, alpha, lost=before.dof - result.dof))
            continue
        Dk = D[keep]
        for g, i in zip(group, idx, strict=True):
            alt_keep = np.delete(keep, g)
            alt = _quiet(
                run, alt_keep, [*dropped, i], [*y_start, float(result.x[g])], np.delete(Dk, g, 0)
            )
            ax, au = _full(alt, alt_keep, [*dropped, i], k0, n)
            alternatives.append(EliminationAlternative(len(steps), i, alt, ax, au))
        d = np.zeros(n)
        adj = np.asarray(result.adjustments, dtype=float)
        u_meas = np.asarray(result.u_measured, dtype=float)
        d[idx] = -np.sign(adj[group]) * u_meas[group]
        D_next = np.column_stack([D, d])
        result = _quiet(run, keep, dropped, [*y_start], D_next[keep])
        if result.dof >= before.dof:  # pragma: no cover - the direction was free already
            result = before
            break
        D = D_next
        shared.append(tuple(idx))
        steps.append(
            _step(
                result,
                None,
                None,
                alpha,
                idx,
                () if names is None else tuple(names[i] for i in idx),
                before.dof - result.dof,
            )
        )
    x_full, _ = _full(result, keep, dropped, k0, n)
    if shared:
        tied = sorted({i for g in shared for i in g})
        warnings.warn(
            "Serial elimination met measurements the tests cannot tell apart ("
            + ", ".join(str(i) if names is None else names[i] for i in tied)
            + "): none was dropped; the redundancy they share was taken out instead. "
            "See the result's depends_on_choice and choice_spread for what a single "
            "choice would change.",
            ReconciliationWarning,
            stacklevel=3,
        )
    return Elimination(
        steps=tuple(steps),
        dropped=tuple(dropped),
        result=result,
        keep=keep,
        x=x_full,
        passed=bool(result.p_value >= alpha),
        alternatives=tuple(alternatives),
        trusted=tuple(trusted),
        shared=tuple(shared),
    )


def serial_elimination(
    x,
    cov,
    A,
    b=None,
    B=None,
    alpha: float = 0.05,
    *,
    names=None,
    max_steps=None,
    trusted=None,
) -> Elimination:
    """Find gross errors in a linear problem by serial elimination.

    While the global test fails and redundancy remains, the measurement with the
    largest measurement-test statistic is turned into an unmeasured variable and the
    problem is reconciled again.  Measurements the tests cannot tell from it (equal
    statistics, or within their sampling spread; see
    :mod:`perftest.balance.ambiguity`) are turned into unmeasured variables with it,
    not left to an arbitrary pick: none of them is dropped; the direction their
    gross-error signatures share is freed instead (an unmeasured bias
    :math:`x = x_t + d\\, b + e` with :math:`d_i` each candidate's standard
    uncertainty in the sense of its adjustment), which takes out the redundancy
    they share and leaves each candidate's own reading unjudged by it.  The step
    records the set in ``tied_with`` (``dropped`` None) and the degrees of freedom
    taken out in ``redundancy_lost``; each single choice among them is reconciled
    as an alternative (:attr:`Elimination.alternatives`; see
    :attr:`Elimination.depends_on_choice`), and a
    :class:`perftest.errors.ReconciliationWarning` says so.

    Parameters
    ----------
    x, cov, A, b, B
        As for :func:`perftest.balance.reconcile_linear`.
    alpha : float
        Significance level of the global test.
    names : sequence of str, optional
        Measurement names, reported in the steps.
    max_steps : int, optional
        Largest number of measurements to drop.
    trusted : sequence of int or str, optional
        Measurements (indices, or names from ``names``) never to drop: instruments
        the engineer has reason to trust, e.g. freshly calibrated.  They settle a
        choice the tests cannot make.

    Returns
    -------
    Elimination
        Every step (starting point first), the dropped indices and the final result.

    Notes
    -----
    For uncorrelated measurements, dropping measurement :math:`i` lowers the
    chi-square statistic by exactly :math:`z_i^2`, so the largest :math:`z_i` is
    also the deletion that lowers the global statistic most, the choice of serial
    elimination [1]_ (module references).
    """
    func = "serial_elimination"
    alpha = _check_alpha(alpha, func)
    p = check_problem(x, cov, A, b, B, func)
    n = p.x.size
    k0 = p.B.shape[1]
    names = _names(names, n, func)
    A_full = sp.csc_matrix(p.A) if p.sparse else p.A
    S = sp.csr_matrix(p.S) if p.sparse else p.S

    def run(keep, dropped, y_start, D):
        # A (x - D b) + B y = b: the shared directions enter as columns -A D of B.
        if p.sparse:
            Ak = A_full[:, keep].tocsr()
            Bk = sp.hstack([p.B, A_full[:, dropped], sp.csr_matrix(-(Ak @ D))]).tocsr()
            Sk = S[keep][:, keep]
        else:
            Ak = A_full[:, keep]
            Bk = np.hstack([p.B, A_full[:, dropped], -(Ak @ D)])
            Sk = S[np.ix_(keep, keep)]
        return reconcile_linear(p.x[keep], Sk, Ak, p.b, Bk)

    return _eliminate(run, n, k0, alpha, names, max_steps, _trusted(trusted, n, names, func))


def serial_elimination_nonlinear(
    residual,
    x,
    cov,
    y0=None,
    jacobian=None,
    alpha: float = 0.05,
    *,
    names=None,
    max_steps=None,
    trusted=None,
    **options,
) -> Elimination:
    """Serial elimination for a nonlinear problem.

    Parameters
    ----------
    residual, x, cov, y0, jacobian
        As for :func:`perftest.balance.reconcile_nonlinear`.
    alpha, names, max_steps, trusted
        As for :func:`serial_elimination`.
    **options
        Passed to :func:`perftest.balance.reconcile_nonlinear` (``tol``, ``max_iter``...).

    Returns
    -------
    Elimination
        A dropped measurement becomes an unmeasured variable appended to ``y``,
        started at its last reconciled value; a shared bias (see
        :func:`serial_elimination`) one more after them, started at 0.
    """
    func = "serial_elimination_nonlinear"
    alpha = _check_alpha(alpha, func)
    xm = _checks.vector(x, "x", func)
    n = xm.size
    y_base = np.zeros(0) if y0 is None else _checks.vector(y0, "y0", func)
    k0 = y_base.size
    names = _names(names, n, func)
    S, *_ = _checks.covariance(cov, n, func)
    y_scale = options.pop("y_scale", None)
    base_scale = (
        np.maximum(np.abs(y_base), 1.0) if y_scale is None else np.asarray(y_scale, dtype=float)
    )
    u = np.sqrt(np.asarray(S.diagonal(), dtype=float))

    def run(keep, dropped, y_start, D):
        keep = np.asarray(keep)
        drop = np.asarray(dropped, dtype=int)
        nd, q = drop.size, D.shape[1]

        def full_x(xk, yk):
            # the measured values less the shared biases: x = x_t + D b
            xf = xm.copy()
            xf[keep] = xk - D @ yk[k0 + nd :] if q else xk
            xf[drop] = yk[k0 : k0 + nd]
            return xf

        def res(xk, yk):
            return residual(full_x(xk, yk), yk[:k0])

        jac = None
        if jacobian is not None:

            def jac(xk, yk):
                Jx, Jy = jacobian(full_x(xk, yk), yk[:k0])
                if sp.issparse(Jx):
                    Jx = sp.csc_matrix(Jx)
                    Jy = sp.csr_matrix((Jx.shape[0], 0)) if Jy is None else Jy
                    Jk = Jx[:, keep]
                    shared = sp.csr_matrix(-(Jk @ D))
                    return Jk, sp.hstack([sp.csr_matrix(Jy), Jx[:, drop], shared]).tocsr()
                Jx = np.asarray(Jx, dtype=float)
                Jy = np.zeros((Jx.shape[0], 0)) if Jy is None else np.asarray(Jy, dtype=float)
                if sp.issparse(Jy):
                    Jy = Jy.toarray()
                Jk = Jx[:, keep]
                return Jk, np.hstack([Jy, Jx[:, drop], -(Jk @ D)])

        Sk = S[keep][:, keep] if sp.issparse(S) else S[np.ix_(keep, keep)]
        y_k = np.concatenate([y_base, np.asarray(y_start, dtype=float), np.zeros(q)])
        # A dropped measurement keeps its own uncertainty as its typical size; a
        # shared bias is counted in standard uncertainties of its candidates.
        scale = np.concatenate(
            [base_scale, np.maximum(np.abs(y_k[k0 : k0 + nd]), u[drop]), np.ones(q)]
        )
        return reconcile_nonlinear(res, xm[keep], Sk, y_k, jac, y_scale=scale, **options)

    return _eliminate(run, n, k0, alpha, names, max_steps, _trusted(trusted, n, names, func))
