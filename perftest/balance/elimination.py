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
    x[dropped] = result.y[k0:]
    u[dropped] = result.y_u[k0:]
    return x, u


def _quiet(run, keep, dropped, y_start):
    with warnings.catch_warnings():
        # dof reaching 0 is an expected end of elimination, not news.
        warnings.simplefilter("ignore", ReconciliationWarning)
        return run(keep, list(dropped), list(y_start))


def _eliminate(run, n, k0, alpha, names, max_steps, trusted=()):
    """Shared loop: ``run(keep, dropped, y_start)`` returns a Reconciliation.

    At each step the measurement with the largest statistic is taken out together
    with every measurement the tests cannot tell from it
    (:func:`perftest.balance.ambiguity.indistinguishable`); each single choice among
    them is reconciled too and kept as an alternative.
    """
    keep = np.arange(n)
    dropped: list[int] = []
    y_start: list[float] = []
    is_trusted = np.zeros(n, dtype=bool)
    is_trusted[list(trusted)] = True
    result = _quiet(run, keep, dropped, y_start)
    steps = [_step(result, None, None, alpha)]
    alternatives = []
    limit = n if max_steps is None else int(max_steps)
    while result.p_value < alpha and result.dof > 0 and len(dropped) < limit:
        eligible = np.asarray(result.redundant, dtype=bool) & ~is_trusted[keep]
        z = np.where(eligible, result.z, -np.inf)
        z = np.where(np.isnan(z), -np.inf, z)
        if not np.isfinite(z.max(initial=-np.inf)):
            break
        pos = int(np.argmax(z))
        group = indistinguishable(result, pos, eligible & np.isfinite(z))
        if len(dropped) + group.size > limit:
            break  # the set does not fit: taking out part of it would be a silent pick
        idx = [int(keep[g]) for g in group]
        singles = []
        if group.size > 1:
            for g, i in zip(group, idx, strict=True):
                alt_keep = np.delete(keep, g)
                alt = _quiet(run, alt_keep, [*dropped, i], [*y_start, float(result.x[g])])
                ax, au = _full(alt, alt_keep, [*dropped, i], k0, n)
                singles.append(EliminationAlternative(len(steps), i, alt, ax, au))
        alternatives.extend(singles)
        if group.size == keep.size:
            # Taking the whole set out would leave nothing measured: stop here, with
            # the single choices on record as alternatives.
            break
        y_start.extend(float(result.x[g]) for g in group)
        dropped.extend(idx)
        keep = np.delete(keep, group)
        result = _quiet(run, keep, dropped, y_start)
        lost = max(a.result.dof for a in singles) - result.dof if singles else 0
        steps.append(
            _step(
                result,
                idx[0],
                None if names is None else names[idx[0]],
                alpha,
                idx[1:],
                () if names is None else tuple(names[i] for i in idx[1:]),
                lost,
            )
        )
    x_full, _ = _full(result, keep, dropped, k0, n)
    if alternatives:
        tied = sorted({a.dropped for a in alternatives})
        warnings.warn(
            "Serial elimination met measurements the tests cannot tell apart ("
            + ", ".join(str(i) if names is None else names[i] for i in tied)
            + "): all were taken out together rather than one picked; see the steps' "
            "redundancy_lost and the result's depends_on_choice and choice_spread.",
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
    not left to an arbitrary pick; each single choice among them is reconciled as
    an alternative (:attr:`Elimination.alternatives`), and a
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

    def run(keep, dropped, y_start):
        if p.sparse:
            Bk = sp.hstack([p.B, A_full[:, dropped]]).tocsr()
            Ak = A_full[:, keep].tocsr()
            Sk = S[keep][:, keep]
        else:
            Bk = np.hstack([p.B, A_full[:, dropped]])
            Ak = A_full[:, keep]
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
        started at its last reconciled value.
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

    def run(keep, dropped, y_start):
        keep = np.asarray(keep)
        drop = np.asarray(dropped, dtype=int)

        def full_x(xk, yk):
            xf = xm.copy()
            xf[keep] = xk
            xf[drop] = yk[k0:]
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
                    return Jx[:, keep], sp.hstack([sp.csr_matrix(Jy), Jx[:, drop]]).tocsr()
                Jx = np.asarray(Jx, dtype=float)
                Jy = np.zeros((Jx.shape[0], 0)) if Jy is None else np.asarray(Jy, dtype=float)
                if sp.issparse(Jy):
                    Jy = Jy.toarray()
                return Jx[:, keep], np.hstack([Jy, Jx[:, drop]])

        Sk = S[keep][:, keep] if sp.issparse(S) else S[np.ix_(keep, keep)]
        y_k = np.concatenate([y_base, np.asarray(y_start, dtype=float)])
        # A dropped measurement keeps its own uncertainty as its typical size.
        scale = np.concatenate([base_scale, np.maximum(np.abs(y_k[k0:]), u[drop])])
        return reconcile_nonlinear(res, xm[keep], Sk, y_k, jac, y_scale=scale, **options)

    return _eliminate(run, n, k0, alpha, names, max_steps, _trusted(trusted, n, names, func))
