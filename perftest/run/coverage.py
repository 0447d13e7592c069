"""Degrees of freedom and coverage factors of combined uncertainties.

Welch-Satterthwaite degrees of freedom, Student t coverage factors (remembered per
degrees of freedom and level) and the standard uncertainty behind a stated expanded
one.  Pure numeric functions (numpy/scipy only); :mod:`perftest.run.stats` re-exports
them.

References
----------
.. [1] JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement (GUM), 2008, Annex G.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from perftest.errors import InputError

__all__ = ["welch_satterthwaite", "coverage_factor", "standard_from_expanded"]


def welch_satterthwaite(u, dof) -> float:
    """Effective degrees of freedom of a combined standard uncertainty.

    Parameters
    ----------
    u : array_like
        Uncertainty contributions :math:`u_i = |c_i| u(x_i)` [one common unit].
    dof : array_like
        Degrees of freedom of each contribution; ``inf`` allowed.

    Returns
    -------
    float
        :math:`\\nu_{eff}` (``inf`` when every contribution has infinite degrees of
        freedom or all contributions are zero).  Not rounded: the GUM truncates
        it to the next lower integer before looking up :math:`t`, which
        :func:`coverage_factor` need not do because Student's t accepts
        non-integer degrees of freedom.

    Raises
    ------
    InputError
        If lengths differ, an uncertainty is negative or a dof is not positive.

    Notes
    -----
    .. math:: \\nu_{eff} = \\frac{u_c^4}{\\sum_i u_i^4/\\nu_i}, \\quad u_c^2 = \\sum_i u_i^2

    ([1]_ Annex G, Eq. G.2b), valid for uncorrelated contributions.

    References
    ----------
    .. [1] JCGM 100:2008 (GUM), Annex G.4.

    Examples
    --------
    >>> round(welch_satterthwaite([1.0, 1.0], [10, 10]), 6)
    20.0
    """
    uu = np.atleast_1d(np.asarray(u, dtype=float))
    nu = np.broadcast_to(np.asarray(dof, dtype=float), uu.shape) if np.ndim(dof) == 0 else None
    if nu is None:
        nu = np.atleast_1d(np.asarray(dof, dtype=float))
    if uu.shape != nu.shape or uu.ndim != 1:
        raise InputError(
            "The 'u' and 'dof' parameters of welch_satterthwaite must be 1-D and of equal "
            f"length. Got shapes {uu.shape} and {nu.shape}.",
            parameter="dof",
        )
    if np.any(~np.isfinite(uu)) or np.any(uu < 0):
        raise InputError(
            "The 'u' parameter of welch_satterthwaite must hold finite, non-negative "
            f"uncertainties. Got {uu.tolist()}.",
            parameter="u",
        )
    if np.any(np.isnan(nu)) or np.any(nu <= 0):
        raise InputError(
            "The 'dof' parameter of welch_satterthwaite must hold positive degrees of "
            f"freedom (inf allowed). Got {nu.tolist()}.",
            parameter="dof",
        )
    uc2 = float(np.sum(uu**2))
    if uc2 == 0.0:
        return math.inf
    # scale first: u**4 under- or overflows for tiny or huge SI values
    r = uu**2 / uc2
    denom = float(np.sum(np.where(np.isinf(nu), 0.0, r**2 / nu)))
    return math.inf if denom == 0.0 else 1.0 / denom


def coverage_factor(dof=math.inf, level: float = 0.95):
    """Coverage factor k for a coverage probability (Student t, normal for inf dof).

    Parameters
    ----------
    dof : float or array_like, default inf
        Effective degrees of freedom (non-integer allowed).
    level : float, default 0.95
        Coverage probability in (0, 1).

    Returns
    -------
    float or ndarray
        :math:`k = t_{(1+p)/2,\\,\\nu}` (dimensionless).

    Notes
    -----
    [1]_ Annex G.3, Table G.2.

    Examples
    --------
    >>> round(coverage_factor(), 3)
    1.96
    >>> round(coverage_factor(16, 0.99), 2)
    2.92
    """
    if not (0.0 < float(level) < 1.0):
        raise InputError(
            f"The 'level' parameter of coverage_factor must lie in (0, 1). Got {level!r}. "
            "Write 95 % as 0.95.",
            parameter="level",
        )
    nu = np.asarray(dof, dtype=float)
    if np.any(np.isnan(nu)) or np.any(nu <= 0):
        raise InputError(
            f"The 'dof' parameter of coverage_factor must be positive (inf allowed). Got {dof!r}.",
            parameter="dof",
        )
    if nu.ndim == 0 and isinstance(level, float):
        # one factor: the same quantile again and again in a loop over windows
        return _coverage_factor_scalar(float(nu), float(level))
    return _coverage_factor(nu, level)


def _coverage_factor(nu: np.ndarray, level: float):
    from scipy import stats as _sps  # on first use: its import costs 1-2 s

    q = 0.5 + level / 2.0
    k = np.where(np.isinf(nu), _sps.norm.ppf(q), _sps.t.ppf(q, np.where(np.isinf(nu), 1.0, nu)))
    return float(k) if k.ndim == 0 else k


@functools.lru_cache(maxsize=1024)
def _coverage_factor_scalar(nu: float, level: float) -> float:
    """:func:`coverage_factor` of one checked dof and level, remembered."""
    return _coverage_factor(np.asarray(nu, dtype=float), level)


def _t_sf(x, df) -> np.ndarray:
    """Survival function of Student's t, as ``scipy.stats.t.sf(x, df)`` for arrays.

    The same values (``scipy.special.stdtr`` where scipy's generic method calls it,
    NaN for a NaN ``x`` or a ``df`` that is not positive, 0 at ``x = inf``, 1 at
    ``x = -inf``) without the generic method's argument handling, which costs more
    than the quantile itself for a few dozen values.
    """
    from scipy import special as _sc  # on first use, as scipy.stats above

    x = np.asarray(x, dtype=float)
    df = np.asarray(df, dtype=float)
    x, df = np.broadcast_arrays(x, df)
    with np.errstate(invalid="ignore"):
        ok = df > 0
        inside = ok & (-np.inf < x) & (x < np.inf)
    if inside.all():
        return _sc.stdtr(df, -x)
    out = np.zeros(x.shape)
    out[~ok | np.isnan(x)] = np.nan
    out[ok & (x == -np.inf)] = 1.0
    if inside.any():
        out[inside] = _sc.stdtr(df[inside], -x[inside])
    return out


def standard_from_expanded(U, level: float = 0.95, dof=math.inf):
    """Standard uncertainty from an expanded uncertainty stated at a coverage level.

    Parameters
    ----------
    U : float or array_like
        Expanded uncertainty [any unit].
    level : float, default 0.95
        Coverage probability it was stated at.
    dof : float, default inf
        Degrees of freedom behind it (inf: normal distribution).

    Returns
    -------
    float or ndarray
        :math:`u = U / k` [unit of U].

    Notes
    -----
    [1]_ section 4.3.4 (an uncertainty quoted at a confidence level is divided by
    the matching factor of the normal distribution unless stated otherwise).

    Examples
    --------
    >>> round(standard_from_expanded(2.0, level=0.9545), 3)
    1.0
    """
    Ua = np.asarray(U, dtype=float)
    if np.any(Ua < 0):
        raise InputError(
            f"The 'U' parameter of standard_from_expanded must be non-negative. Got {U!r}.",
            parameter="U",
        )
    u = Ua / coverage_factor(dof, level)
    return float(u) if np.ndim(u) == 0 else u
