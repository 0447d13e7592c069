"""Statistics shared by the result records and the gross-error tests.

Layer: below :mod:`perftest.balance.result`; imports only numpy, scipy and
:mod:`perftest.errors`.

References
----------
.. [1] Z. Sidak, "Rectangular confidence regions for the means of multivariate normal
   distributions", Journal of the American Statistical Association 62(318), 626-633,
   1967. DOI 10.1080/01621459.1967.10482935
"""

from __future__ import annotations

import numpy as np
import scipy.special

from perftest.errors import InputError

__all__ = ["check_alpha", "chi2_p_value", "sidak_critical_value"]


def check_alpha(alpha, func):
    """Return ``alpha`` as a float after checking that it lies in (0, 1)."""
    if not (isinstance(alpha, int | float) and 0.0 < alpha < 1.0):
        raise InputError(
            f"The 'alpha' parameter of {func} must be a number between 0 and 1. Got {alpha!r}.",
            parameter="alpha",
        )
    return float(alpha)


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

    [1]_ (module references).
    """
    if n_tests <= 0:
        return float("inf"), float("nan")
    alpha_per = -np.expm1(np.log1p(-alpha) / n_tests)
    return float(-scipy.special.ndtri(alpha_per / 2.0)), float(alpha_per)


def chi2_p_value(chi2: float, dof: int) -> float:
    """Survival probability of a chi-square statistic; 1 when there are no degrees."""
    if dof <= 0:
        return 1.0
    # chdtrc is the ufunc behind scipy.stats.chi2.sf, without its per-call overhead.
    return float(scipy.special.chdtrc(dof, chi2))
