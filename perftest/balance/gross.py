"""Gross-error detection: global, measurement and nodal tests, serial elimination.

References
----------
.. [1] S. Narasimhan, C. Jordache, "Data Reconciliation and Gross Error Detection",
   Gulf Publishing, 2000, Ch. 7-8. DOI 10.1016/B978-088415255-2/50000-4
.. [2] Z. Sidak, "Rectangular confidence regions for the means of multivariate normal
   distributions", Journal of the American Statistical Association 62(318), 626-633,
   1967. DOI 10.1080/01621459.1967.10482935
.. [3] R. W. Serth, W. A. Heenan, "Gross error detection and data reconciliation in
   steam-metering systems", AIChE Journal 32(5), 733-742, 1986.
   DOI 10.1002/aic.690320505
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.special

from perftest.balance.result import (
    Elimination,
    EliminationStep,
    Reconciliation,
    chi2_p_value,
)
from perftest.errors import InputError, ReconciliationWarning

__all__ = [
    "GlobalTest",
    "MeasurementTest",
    "NodalTest",
    "global_test",
    "measurement_test",
    "nodal_test",
    "vdi2048_criterion",
    "sidak_critical_value",
    "serial_elimination",
    "serial_elimination_nonlinear",
]

# VDI 2048 Part 1 (2017) quality criterion: each normalised adjustment within the
# 95 % two-sided normal quantile (recalled from the guideline, not re-read).
VDI2048_LIMIT = 1.96


@dataclass(frozen=True)
class GlobalTest:
    """Chi-square test of all constraints together.

    Attributes
    ----------
    chi2, dof, p_value : float, int, float
    critical : float
        Upper ``alpha`` quantile of the chi-square distribution (0 if ``dof`` is 0).
    alpha : float
    passed : bool
        ``p_value >= alpha``.
    """

    chi2: float
    dof: int
    p_value: float
    critical: float
    alpha: float
    passed: bool


@dataclass(frozen=True, eq=False)
class MeasurementTest:
    """Per-measurement test of the normalised adjustments with Sidak correction.

    Attributes
    ----------
    z : ndarray (n,)
        Statistics (``nan`` where not redundant).
    critical : float
        Two-sided normal critical value at ``alpha_per``.
    alpha_per : float
        Per-test level :math:`1 - (1 - \\alpha)^{1/n_r}`.
    n_tested : int
        Number of redundant measurements.
    flagged : ndarray of bool (n,)
        ``z > critical``.
    """

    z: np.ndarray
    critical: float
    alpha_per: float
    n_tested: int
    flagged: np.ndarray


@dataclass(frozen=True, eq=False)
class NodalTest:
    """Per-constraint test of the residuals at the measured values.

    Attributes
    ----------
    statistic : ndarray (p,)
        :math:`|r_j| / \\sqrt{(A_r S A_r^T)_{jj}}` per reduced constraint (``nan`` for
        rows that involve no measurement).
    critical, alpha_per, n_tested, flagged
        As for :class:`MeasurementTest`.
    """

    statistic: np.ndarray
    critical: float
    alpha_per: float
    n_tested: int
    flagged: np.ndarray


def _check_alpha(alpha, func):
    if not (isinstance(alpha, int | float) and 0.0 < alpha < 1.0):
        raise InputError(
            f"The 'alpha' parameter of {func} must be a number between 0 and 1. Got {alpha!r}.",
            parameter="alpha",
        )
    return float(alpha)


def _check_result(result, func):
    if not isinstance(result, Reconciliation):
        raise InputError(
            f"The 'result' parameter of {func} must be a Reconciliation. "
            f"Got {type(result).__name__}.",
            parameter="result",
        )


def sidak_critical_value(alpha: float, n_tests: int) -> tuple[float, float]:
    """Two-sided normal critical value with the Sidak correction.

    Parameters
    ----------
    alpha : float
        Family-wise significance level.
    n_tests : int
        Number of tests.

    Returns
    -------
    tuple of float
        ``(critical, alpha_per)``.

    Notes
    -----
    .. math::

        \\alpha_{per} = 1 - (1 - \\alpha)^{1/N}, \\qquad
        z_c = \\Phi^{-1}(1 - \\alpha_{per} / 2)

    [2]_ (module references).
    """
    if n_tests <= 0:
        return float("inf"), float("nan")
    alpha_per = -np.expm1(np.log1p(-alpha) / n_tests)
    return float(-scipy.special.ndtri(alpha_per / 2.0)), float(alpha_per)


def global_test(result: Reconciliation, alpha: float = 0.05) -> GlobalTest:
    """Global (chi-square) test of a reconciliation.

    Parameters
    ----------
    result : Reconciliation
    alpha : float
        Significance level.

    Returns
    -------
    GlobalTest

    Notes
    -----
    Without gross errors, :math:`\\chi^2 = (\\hat x - x)^T S^{-1} (\\hat x - x)` follows a
    chi-square distribution with ``dof`` degrees of freedom; the test fails when
    :math:`P(\\chi^2_\\nu > \\chi^2) < \\alpha` [1]_ (module references).
    """
    func = "global_test"
    _check_result(result, func)
    alpha = _check_alpha(alpha, func)
    crit = float(scipy.special.chdtri(result.dof, alpha)) if result.dof > 0 else 0.0
    p = chi2_p_value(result.chi2, result.dof)
    return GlobalTest(result.chi2, result.dof, p, crit, alpha, bool(p >= alpha))


def measurement_test(result: Reconciliation, alpha: float = 0.05) -> MeasurementTest:
    """Measurement test on the normalised adjustments, Sidak-corrected.

    Parameters
    ----------
    result : Reconciliation
    alpha : float
        Family-wise significance level over the redundant measurements.

    Returns
    -------
    MeasurementTest

    Notes
    -----
    :math:`z_i = |\\hat x_i - x_i| / \\sqrt{V_{ii}}` is standard normal (in absolute
    value) without gross error; measurement :math:`i` is flagged when
    :math:`z_i > z_c` with the Sidak critical value over the :math:`n_r` redundant
    measurements (see :func:`sidak_critical_value`).
    """
    func = "measurement_test"
    _check_result(result, func)
    alpha = _check_alpha(alpha, func)
    n_r = int(np.count_nonzero(result.redundant))
    crit, alpha_per = sidak_critical_value(alpha, n_r)
    z = result.z
    flagged = np.where(np.isnan(z), False, z > crit)
    return MeasurementTest(z, crit, alpha_per, n_r, flagged)


def nodal_test(result: Reconciliation, alpha: float = 0.05) -> NodalTest:
    """Nodal (constraint) test on the residuals at the measured values, Sidak-corrected.

    Parameters
    ----------
    result : Reconciliation
    alpha : float
        Family-wise significance level over the tested constraints.

    Returns
    -------
    NodalTest
        Without unmeasured variables the rows are the constraints as given; with them,
        they are the rows of the projected constraints :math:`P A x = P b`.

    Notes
    -----
    :math:`r = A_r x - b_r` has covariance :math:`A_r S A_r^T` without gross error, so
    :math:`|r_j| / \\sqrt{(A_r S A_r^T)_{jj}}` is standard normal in absolute value.
    For a nonlinear problem :math:`r` is the linearised residual
    :math:`P J_x (x - \\hat x)` at the solution.
    """
    func = "nodal_test"
    _check_result(result, func)
    alpha = _check_alpha(alpha, func)
    r = result.constraint_residual
    sd = result.constraint_u
    big = sd.max(initial=0.0)
    tested = sd > 1e-9 * big if big > 0 else np.zeros(sd.shape, dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        stat = np.where(tested, np.abs(r) / np.where(tested, sd, 1.0), np.nan)
    crit, alpha_per = sidak_critical_value(alpha, int(np.count_nonzero(tested)))
    flagged = np.where(np.isnan(stat), False, stat > crit)
    return NodalTest(stat, crit, alpha_per, int(np.count_nonzero(tested)), flagged)


def vdi2048_criterion(result: Reconciliation) -> np.ndarray:
    """Per-measurement quality criterion of the VDI 2048 guideline.

    Parameters
    ----------
    result : Reconciliation

    Returns
    -------
    ndarray of bool (n,)
        True where :math:`|v_i| / \\sqrt{\\operatorname{var}(v_i)} \\le 1.96`, with the
        improvement :math:`v = \\hat x - x` and
        :math:`\\operatorname{var}(v_i) = S_{ii} - \\operatorname{cov}(\\hat x)_{ii}`.
        Non-redundant measurements (not adjusted, nothing to judge) count as met.

    Notes
    -----
    Basis: VDI 2048 Part 1 (2017), "Control and quality improvement of process data
    and their uncertainties by means of correction calculation for operation and
    acceptance tests", quality criterion per measured value (the 1.96 limit is
    recalled from the guideline, not re-read).  The statistic equals the
    measurement-test :math:`z_i`; the limit is the uncorrected two-sided 95 % normal
    quantile.
    """
    _check_result(result, "vdi2048_criterion")
    z = result.z
    return np.where(np.isnan(z), True, z <= VDI2048_LIMIT)


def _max_z(result):
    z = result.z
    return float(np.nanmax(z)) if np.any(~np.isnan(z)) else float("nan")


def _step(result, dropped, name, alpha):
    return EliminationStep(
        dropped=dropped,
        name=name,
        chi2=float(result.chi2),
        dof=int(result.dof),
        p_value=float(result.p_value),
        max_z=_max_z(result),
        passed=bool(result.p_value >= alpha),
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


def _eliminate(run, n, k0, alpha, names, max_steps):
    """Shared loop: ``run(keep, dropped, y_start)`` returns a Reconciliation."""
    keep = np.arange(n)
    dropped: list[int] = []
    y_start: list[float] = []
    with warnings.catch_warnings():
        # dof reaching 0 is an expected end of elimination, not news.
        warnings.simplefilter("ignore", ReconciliationWarning)
        result = run(keep, dropped, y_start)
    steps = [_step(result, None, None, alpha)]
    limit = n if max_steps is None else int(max_steps)
    while result.p_value < alpha and result.dof > 0 and len(dropped) < limit:
        z = np.where(result.redundant, result.z, -np.inf)
        z = np.where(np.isnan(z), -np.inf, z)
        if not np.isfinite(z.max()):
            break
        pos = int(np.argmax(z))
        idx = int(keep[pos])
        y_start.append(float(result.x[pos]))
        dropped.append(idx)
        keep = np.delete(keep, pos)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ReconciliationWarning)
            result = run(keep, dropped, y_start)
        steps.append(_step(result, idx, None if names is None else names[idx], alpha))
    x_full = np.empty(n)
    x_full[keep] = result.x
    x_full[dropped] = result.y[k0:]
    return Elimination(
        steps=tuple(steps),
        dropped=tuple(dropped),
        result=result,
        keep=keep,
        x=x_full,
        passed=bool(result.p_value >= alpha),
    )


def serial_elimination(
    x, cov, A, b=None, B=None, alpha: float = 0.05, *, names=None, max_steps=None
) -> Elimination:
    """Find gross errors in a linear problem by serial elimination.

    While the global test fails and redundancy remains, the measurement with the
    largest measurement-test statistic is turned into an unmeasured variable and the
    problem is reconciled again.

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

    Returns
    -------
    Elimination
        Every step (starting point first), the dropped indices and the final result.

    Notes
    -----
    For uncorrelated measurements, dropping measurement :math:`i` lowers the
    chi-square statistic by exactly :math:`z_i^2`, so the largest :math:`z_i` is
    also the deletion that lowers the global statistic most, the choice of serial
    elimination [3]_ (module references).
    """
    from perftest.balance.linear import check_problem, reconcile_linear

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

    return _eliminate(run, n, k0, alpha, names, max_steps)


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
    **options,
) -> Elimination:
    """Serial elimination for a nonlinear problem.

    Parameters
    ----------
    residual, x, cov, y0, jacobian
        As for :func:`perftest.balance.reconcile_nonlinear`.
    alpha, names, max_steps
        As for :func:`serial_elimination`.
    **options
        Passed to :func:`perftest.balance.reconcile_nonlinear` (``tol``, ``max_iter``...).

    Returns
    -------
    Elimination
        A dropped measurement becomes an unmeasured variable appended to ``y``,
        started at its last reconciled value.
    """
    from perftest.balance import _checks
    from perftest.balance.nonlinear import reconcile_nonlinear

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

    return _eliminate(run, n, k0, alpha, names, max_steps)
