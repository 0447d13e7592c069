"""Budgets, degrees of freedom and the input checks shared by the propagation methods.

* :func:`effective_dof`: Welch-Satterthwaite effective degrees of freedom (GUM G.4).
* :func:`expanded`, :func:`coverage_factor`: expanded uncertainty from Student's t.
* :func:`to_ufloats`: correlated ``uncertainties`` numbers for interactive work.

References
----------
.. [1] JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement (GUM), 2008. Clauses 5.1-5.2, Annex G.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable

import numpy as np
import pandas as pd

from perftest.errors import InputError
from perftest.run.stats import coverage_factor

__all__ = ["expanded", "coverage_factor", "effective_dof", "to_ufloats"]

#: Default central-difference step as a fraction of each input's standard uncertainty.
DEFAULT_REL_STEP = 1e-3


# --------------------------------------------------------------------------- helpers


def _as_vector(x, func: str, parameter: str = "x") -> tuple[np.ndarray, tuple[str, ...] | None]:
    names = None
    if isinstance(x, pd.Series):
        names = tuple(str(i) for i in x.index)
        arr = x.to_numpy(dtype=float, na_value=np.nan)
    else:
        try:
            arr = np.asarray(x, dtype=float)
        except (TypeError, ValueError):
            raise InputError(
                f"The '{parameter}' parameter of {func} must be a numeric vector. "
                f"Got {type(x).__name__}.",
                parameter=parameter,
            ) from None
    arr = np.atleast_1d(arr)
    if arr.ndim != 1:
        raise InputError(
            f"The '{parameter}' parameter of {func} must be one-dimensional. "
            f"Got shape {arr.shape}.",
            parameter=parameter,
        )
    if not np.isfinite(arr).all():
        raise InputError(
            f"The '{parameter}' parameter of {func} must be finite. "
            f"Got a non-finite value at position {int(np.flatnonzero(~np.isfinite(arr))[0])}.",
            parameter=parameter,
        )
    return arr, names


def _as_cov(cov, n: int, func: str) -> np.ndarray:
    """Check a covariance matrix cheaply (O(n^2)): shape, finite, symmetric, |r| <= 1.

    Positive semi-definiteness (O(n^3)) is left to :func:`monte_carlo`, which needs
    a factor of the matrix anyway; linear propagation does not.
    """
    if isinstance(cov, pd.DataFrame):
        c = cov.to_numpy(dtype=float)
    else:
        try:
            c = np.asarray(cov, dtype=float)
        except (TypeError, ValueError):
            raise InputError(
                f"The 'cov' parameter of {func} must be a numeric (n, n) matrix. "
                f"Got {type(cov).__name__}.",
                parameter="cov",
            ) from None
    if c.ndim == 0 and n == 1:
        c = c.reshape(1, 1)
    if c.shape != (n, n):
        raise InputError(
            f"The 'cov' parameter of {func} must be a ({n}, {n}) covariance matrix "
            f"matching the {n} inputs. Got shape {c.shape}.",
            parameter="cov",
        )
    if not np.isfinite(c).all():
        raise InputError(
            f"The 'cov' parameter of {func} must be finite. Got NaN or inf.", parameter="cov"
        )
    d = np.diag(c)
    if (d < 0).any():
        i = int(np.flatnonzero(d < 0)[0])
        raise InputError(
            f"The 'cov' parameter of {func} must have non-negative variances on its "
            f"diagonal. Got {d[i]:g} at position {i}.",
            parameter="cov",
        )
    # Work on the correlation matrix: the checks are then insensitive to the scale
    # of each input (Pa next to kg/s).
    zero = d == 0
    if zero.any() and (c[zero] != 0).any():
        i = int(np.flatnonzero(zero & np.any(c != 0, axis=1))[0])
        raise InputError(
            f"The 'cov' parameter of {func} must be a covariance matrix: input {i} has zero "
            "variance but non-zero covariances.",
            parameter="cov",
        )
    inv = np.where(zero, 0.0, 1.0 / np.sqrt(np.where(zero, 1.0, d)))
    r = c * inv[:, None]
    r *= inv[None, :]
    # Symmetric to the round-off of a matrix built by products.
    asym = np.abs(r - r.T) > 1e-10
    if asym.any():
        i, j = np.argwhere(asym)[0]
        raise InputError(
            f"The 'cov' parameter of {func} must be symmetric. Got cov[{i},{j}] = "
            f"{c[i, j]:g} but cov[{j},{i}] = {c[j, i]:g}.",
            parameter="cov",
        )
    # A correlation coefficient beyond +-1 cannot belong to any covariance matrix.
    over = np.abs(r) > 1.0 + 1e-9
    if over.any():
        i, j = np.argwhere(over)[0]
        raise InputError(
            f"The 'cov' parameter of {func} must be a covariance matrix (|correlation| <= 1). "
            f"Got a correlation of {r[i, j]:g} between inputs {i} and {j}.",
            parameter="cov",
        )
    return 0.5 * (c + c.T)


def _names(names, default: tuple[str, ...] | None, n: int, func: str, parameter: str):
    if names is None:
        names = default if default is not None else tuple(f"x{i}" for i in range(n))
    names = tuple(str(s) for s in names)
    if len(names) != n:
        raise InputError(
            f"The '{parameter}' parameter of {func} must have {n} entries. Got {len(names)}.",
            parameter=parameter,
        )
    return names


def _as_dof(dof, n: int, func: str) -> np.ndarray:
    if dof is None:
        return np.full(n, np.inf)
    nu = np.asarray(dof.to_numpy() if isinstance(dof, pd.Series) else dof, dtype=float)
    nu = np.broadcast_to(nu, (n,)).copy() if nu.ndim == 0 else nu
    if nu.shape != (n,):
        raise InputError(
            f"The 'dof' parameter of {func} must hold one value per input ({n}). "
            f"Got shape {nu.shape}.",
            parameter="dof",
        )
    if np.isnan(nu).any() or (nu <= 0).any():
        raise InputError(
            f"The 'dof' parameter of {func} must be positive (inf allowed). Got {nu.tolist()}.",
            parameter="dof",
        )
    return nu


def _check_level(level, func: str) -> float:
    if not 0.0 < float(level) < 1.0:
        raise InputError(
            f"The 'level' parameter of {func} must lie in (0, 1). Got {level!r}. "
            "Write 95 % as 0.95.",
            parameter="level",
        )
    return float(level)


@functools.lru_cache(maxsize=64)
def _normal_quantile(q: float) -> float:
    from scipy import stats

    return stats.norm.ppf(q)


def _coverage_factors(dof: np.ndarray, level: float) -> np.ndarray:
    """``coverage_factor(dof, level)`` of an (m,) array of dof, as an (m,) array.

    The same numbers: Student's t quantile ``scipy.special.stdtrit`` (what
    ``scipy.stats.t.ppf`` computes for 0 < q < 1 and dof > 0), the normal quantile
    for infinite dof, without ``scipy.stats``' argument handling (most of the cost
    for a few dozen results).  Arguments ``coverage_factor`` would refuse go to it,
    so the errors are its own.
    """
    nu = np.asarray(dof, dtype=float)
    if nu.ndim != 1 or not 0.0 < level < 1.0 or np.isnan(nu).any() or (nu <= 0).any():
        return np.atleast_1d(np.asarray(coverage_factor(nu, level), dtype=float))
    from scipy import special

    q = 0.5 + level / 2.0
    inf = np.isinf(nu)
    return np.where(inf, _normal_quantile(q), special.stdtrit(np.where(inf, 1.0, nu), q))


def effective_dof(sensitivities, cov, dof) -> np.ndarray:
    """Welch-Satterthwaite effective degrees of freedom of each output.

    Parameters
    ----------
    sensitivities : array (m, n) [output unit / input unit]
    cov : array (n, n) [input units squared]
    dof : array (n,)
        Degrees of freedom of each input's standard uncertainty (inf allowed).

    Returns
    -------
    ndarray (m,)
        :math:`\\nu_{eff}`, not rounded (Student's t takes real dof).

    Notes
    -----
    [1]_ Eq. G.2b with the combined variance taken from the full covariance:

    .. math:: \\nu_{eff} = \\frac{u^4(y)}{\\sum_i (c_i u_i)^4 / \\nu_i}

    The formula assumes independent inputs; then it always satisfies
    :math:`\\min_i \\nu_i \\le \\nu_{eff} \\le \\sum_i \\nu_i` (sum over the
    contributing inputs, [1]_ G.4.1 Note 1 for the upper bound).  With correlated
    inputs the cancelling cross terms can make :math:`u(y)` small against the
    single contributions and the raw formula absurdly small (for GUM Annex H.2,
    0.13 for R).  The result is therefore clipped to that same range, so that a
    correlation never makes the degrees of freedom better than all inputs together
    nor worse than the weakest contributing input.

    Examples
    --------
    >>> float(effective_dof([[1.0, 1.0]], [[1.0, 0.0], [0.0, 1.0]], [10, 10])[0])
    20.0
    """
    s = np.atleast_2d(np.asarray(sensitivities, dtype=float))
    c = np.asarray(cov, dtype=float)
    nu = np.asarray(dof, dtype=float)
    var_y = np.einsum("ij,jk,ik->i", s, c, s)
    cu4 = (s * np.sqrt(np.diag(c))) ** 4
    finite = np.isfinite(nu)
    denom = (cu4[:, finite] / nu[finite]).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(denom > 0, var_y**2 / denom, np.inf)
    contributing = cu4 > 0
    low = np.where(contributing, nu, np.inf).min(axis=1)
    high = np.where(contributing, nu, 0.0).sum(axis=1)
    out = np.where(denom > 0, np.clip(out, low, high), np.inf)
    return out


def expanded(u, dof=math.inf, level: float = 0.95, k=None):
    """Expanded uncertainty :math:`U = k\\,u`.

    Parameters
    ----------
    u : float, array or Series [any unit]
        Standard uncertainty; must be non-negative.
    dof : float or array, default inf
        Effective degrees of freedom (Student's t; inf gives the normal factor).
    level : float, default 0.95
        Coverage probability.
    k : float, optional
        Coverage factor to use instead (e.g. ``k=2``); then ``dof`` and ``level``
        are not used.

    Returns
    -------
    float, array or Series [same unit as ``u``]

    Raises
    ------
    InputError
        If ``u`` is negative, ``k`` not positive or ``level`` outside (0, 1).

    Notes
    -----
    .. math:: U = k\\,u_c, \\quad k = t_{(1+p)/2,\\,\\nu_{eff}}

    [1]_ Clause 6.2-6.3 and Annex G.

    Examples
    --------
    >>> round(expanded(1.0), 3)
    1.96
    >>> expanded(0.5, k=2)
    1.0
    """
    uu = u.to_numpy(dtype=float) if isinstance(u, pd.Series) else np.asarray(u, dtype=float)
    if np.any(uu < 0):
        raise InputError(
            f"The 'u' parameter of expanded must be non-negative. Got {uu.min():g}.",
            parameter="u",
        )
    if k is None:
        _check_level(level, "expanded")
        kk = coverage_factor(dof, level)
    else:
        kk = np.asarray(k, dtype=float)
        if np.any(~(kk > 0)):
            raise InputError(
                f"The 'k' parameter of expanded must be positive. Got {k!r}.", parameter="k"
            )
    out = kk * uu
    if isinstance(u, pd.Series):
        return pd.Series(out, index=u.index, name=u.name)
    return float(out) if np.ndim(out) == 0 else out


def to_ufloats(values, cov, names=None):
    """Correlated ``uncertainties`` numbers from estimates and a covariance matrix.

    Parameters
    ----------
    values : array (n,) or Series [SI]
    cov : array (n, n) [SI squared]
    names : sequence of str, optional
        Tags for the numbers (default: the Series index, else ``x0, x1, ...``).

    Returns
    -------
    list of ``uncertainties.UFloat`` (or a Series of them when ``values`` is a Series)

    Examples
    --------
    >>> a, b = to_ufloats([1.0, 2.0], [[0.01, 0.005], [0.005, 0.04]])
    >>> round((a + b).std_dev, 6)
    0.244949
    """
    from uncertainties import correlated_values

    x, default = _as_vector(values, "to_ufloats", "values")
    c = _as_cov(cov, x.size, "to_ufloats")
    tags = _names(names, default, x.size, "to_ufloats", "names")
    nums = correlated_values(x, c, tags=list(tags))
    if isinstance(values, pd.Series):
        return pd.Series(nums, index=values.index, name=values.name, dtype=object)
    return list(nums)


def _call(func: Callable, x: np.ndarray, where: str) -> np.ndarray:
    y = func(x)
    if isinstance(y, pd.Series):
        y = y.to_numpy(dtype=float)
    y = np.atleast_1d(np.asarray(y, dtype=float))
    if y.ndim != 1:
        raise InputError(
            f"The 'func' parameter of {where} must return a scalar or a 1-D array. "
            f"Got shape {y.shape}.",
            parameter="func",
        )
    return y
