"""Gross-error detection: global, measurement and nodal tests.

Serial elimination, which runs these tests over repeated reconciliations, lives in
:mod:`perftest.balance.elimination` (above the solvers).

References
----------
.. [1] S. Narasimhan, C. Jordache, "Data Reconciliation and Gross Error Detection",
   Gulf Publishing, 2000, Ch. 7-8. DOI 10.1016/B978-088415255-2/50000-4
.. [2] Z. Sidak, "Rectangular confidence regions for the means of multivariate normal
   distributions", Journal of the American Statistical Association 62(318), 626-633,
   1967. DOI 10.1080/01621459.1967.10482935
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.special

from perftest.balance._stats import check_alpha as _check_alpha
from perftest.balance._stats import chi2_p_value, sidak_critical_value
from perftest.balance.result import Reconciliation
from perftest.errors import InputError

__all__ = [
    "GlobalTest",
    "MeasurementTest",
    "NodalTest",
    "global_test",
    "measurement_test",
    "nodal_test",
    "vdi2048_criterion",
    "sidak_critical_value",
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
    constraint : ndarray of int (p,)
        The constraint (balance) each row belongs to: the constraint itself, or, with
        unmeasured variables, the balance the row is anchored to (see
        :func:`nodal_test`).
    """

    statistic: np.ndarray
    critical: float
    alpha_per: float
    n_tested: int
    flagged: np.ndarray
    constraint: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=int))


def _check_result(result, func):
    if not isinstance(result, Reconciliation):
        raise InputError(
            f"The 'result' parameter of {func} must be a Reconciliation. "
            f"Got {type(result).__name__}.",
            parameter="result",
        )


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
        the reduced constraints :math:`C A x = C b` (:math:`C B = 0`), one row per
        anchor balance (``constraint``).

    Notes
    -----
    :math:`r = A_r x - b_r` has covariance :math:`A_r S A_r^T` without gross error, so
    :math:`|r_j| / \\sqrt{(A_r S A_r^T)_{jj}}` is standard normal in absolute value.
    For a nonlinear problem :math:`r` is the linearised residual
    :math:`C J_x (x - \\hat x)` at the solution.

    With unmeasured variables the reduced constraints span the left null space of
    :math:`B`, and any basis of it would do for the global test; the nodal test reads
    them row by row, so the basis must not be arbitrary.  :math:`C` is the canonical
    basis (:class:`perftest.balance._dense.CanonicalRows`): each row is one balance,
    its anchor, plus a combination of the balances that anchor no row (those that
    determine the unmeasured variables), with coefficient one on its anchor and zero
    on the other anchors, in the anchor's units.  A balance without unmeasured
    variables is a row of its own.  In a flow network this is the classic merging of
    the nodes joined by unmeasured streams: the merged node's balance is the sum of
    theirs, in which those streams cancel.  The anchors are chosen greedily by the
    longest remaining projection of each balance, scaled as the solver scales the
    rows (by their largest term, measured terms in standard deviations), on the
    space; ties go to the balance given first.  So a merged node is anchored to its
    node with the largest such term.  The basis depends on the space alone: the rows
    do not change with the rounding of :math:`B` (another BLAS build, another
    processor), whereas the basis of the pivoted QR that finds the space does
    wherever columns of :math:`B` tie in norm.
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
    return NodalTest(
        stat, crit, alpha_per, int(np.count_nonzero(tested)), flagged,
        np.asarray(result.constraint_rows, dtype=int).copy(),
    )  # fmt: skip


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
