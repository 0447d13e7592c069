"""Propagation of uncertainty: linear (law of propagation) and Monte Carlo.

Inputs are summarised by their estimates ``x`` (n,) and covariance matrix ``cov``
(n, n) in SI units.  A measurement function maps the (n,) input vector to an (m,)
output vector (or a scalar).

* :func:`propagate` / :func:`propagate_linear`: the GUM law of propagation of
  uncertainty in matrix form, :math:`V_y = S V_x S^T`, with per-input budgets,
  Welch-Satterthwaite degrees of freedom and expanded uncertainties.
* :func:`monte_carlo`: propagation of distributions (GUM Supplement 1), seeded and
  deterministic, with shortest or probabilistically symmetric coverage intervals.
* :func:`expanded`, :func:`coverage_factor`: expanded uncertainty from Student's t.
* :func:`to_ufloats`: correlated ``uncertainties`` numbers for interactive work.

Linear propagation is exact for linear functions and a first-order approximation
otherwise: it is valid while the function is close to linear over a few standard
uncertainties of each input.  When in doubt, compare with :func:`monte_carlo`.

References
----------
.. [1] JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement (GUM), 2008. Clauses 5.1-5.2, Annex G.
.. [2] JCGM 101:2008, Evaluation of measurement data - Supplement 1 to the GUM -
   Propagation of distributions using a Monte Carlo method, 2008. Clauses 5.3, 7.
.. [3] JCGM 102:2011, Supplement 2 to the GUM - Extension to any number of output
   quantities, 2011. Clause 6.2 (matrix form of the law of propagation).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd

from perftest.errors import InputError
from perftest.run.stats import coverage_factor

__all__ = [
    "Propagation",
    "MonteCarlo",
    "propagate",
    "propagate_linear",
    "monte_carlo",
    "expanded",
    "coverage_factor",
    "effective_dof",
    "to_ufloats",
]

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
    if not np.all(np.isfinite(arr)):
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
    if not np.all(np.isfinite(c)):
        raise InputError(
            f"The 'cov' parameter of {func} must be finite. Got NaN or inf.", parameter="cov"
        )
    d = np.diag(c)
    if np.any(d < 0):
        i = int(np.flatnonzero(d < 0)[0])
        raise InputError(
            f"The 'cov' parameter of {func} must have non-negative variances on its "
            f"diagonal. Got {d[i]:g} at position {i}.",
            parameter="cov",
        )
    # Work on the correlation matrix: the checks are then insensitive to the scale
    # of each input (Pa next to kg/s).
    zero = d == 0
    if np.any(zero) and np.any(c[zero] != 0):
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
    if np.any(asym):
        i, j = np.argwhere(asym)[0]
        raise InputError(
            f"The 'cov' parameter of {func} must be symmetric. Got cov[{i},{j}] = "
            f"{c[i, j]:g} but cov[{j},{i}] = {c[j, i]:g}.",
            parameter="cov",
        )
    # A correlation coefficient beyond +-1 cannot belong to any covariance matrix.
    over = np.abs(r) > 1.0 + 1e-9
    if np.any(over):
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
    if np.any(np.isnan(nu)) or np.any(nu <= 0):
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
    nu_b = np.broadcast_to(nu, cu4.shape)
    low = np.where(contributing, nu_b, np.inf).min(axis=1)
    high = np.where(contributing, nu_b, 0.0).sum(axis=1)
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


# --------------------------------------------------------------------------- linear


@dataclass(frozen=True, eq=False)
class Propagation:
    """Result of :func:`propagate` / :func:`propagate_linear`.

    Attributes
    ----------
    value : ndarray (m,)
        Output estimates (NaN when :func:`propagate_linear` was given no value).
    cov : ndarray (m, m)
        Output covariance :math:`S V_x S^T`.
    u : ndarray (m,)
        Standard uncertainties.
    sensitivities : ndarray (m, n)
        :math:`c_{ki} = \\partial y_k / \\partial x_i`.
    contributions : ndarray (m, n)
        Variance contribution of each input to each output (see ``budget``); rows
        sum to ``u**2``.
    dof : ndarray (m,)
        Welch-Satterthwaite effective degrees of freedom (inf without input dof).
    k : ndarray (m,)
        Coverage factors.
    U : ndarray (m,)
        Expanded uncertainties ``k * u``.
    level : float
        Coverage probability of ``U`` (NaN when a fixed ``k`` was asked for).
    input_names, output_names : tuple of str
    x, u_x, dof_x : ndarray (n,)
        Input estimates, standard uncertainties and degrees of freedom.
    method : str
        ``"analytic"``, ``"numerical"`` or ``"linear"``.
    """

    value: np.ndarray
    cov: np.ndarray
    u: np.ndarray
    sensitivities: np.ndarray
    contributions: np.ndarray
    dof: np.ndarray
    k: np.ndarray
    U: np.ndarray
    level: float
    input_names: tuple[str, ...]
    output_names: tuple[str, ...]
    x: np.ndarray = field(repr=False)
    u_x: np.ndarray = field(repr=False)
    dof_x: np.ndarray = field(repr=False)
    method: str = "linear"

    @property
    def correlation(self) -> np.ndarray:
        """Output correlation matrix (m, m); NaN where an uncertainty is zero."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return self.cov / np.outer(self.u, self.u)

    @cached_property
    def budget(self) -> pd.DataFrame:
        """Uncertainty budget, one row per (output, input).

        Columns: ``output``, ``input``, ``estimate`` (x_i), ``u`` (u_i), ``dof``,
        ``sensitivity`` (c_i), ``u_contribution`` (|c_i| u_i, output unit),
        ``variance_contribution`` and ``share``.

        Notes
        -----
        With correlated inputs the cross terms :math:`2 c_i c_j u_{ij}` must be
        shared out.  Each input takes its own term and half of every cross term it
        is part of:

        .. math:: v_i = c_i \\sum_j u_{ij} c_j, \\qquad \\sum_i v_i = u^2(y)

        so ``share = v_i / u^2(y)`` sums to one.  A negative share means the input's
        correlation with the others reduces the combined uncertainty.  Without
        correlation :math:`v_i = (c_i u_i)^2`, the usual budget.
        """
        m, n = self.sensitivities.shape
        var_y = self.u**2
        with np.errstate(divide="ignore", invalid="ignore"):
            share = np.where(var_y[:, None] > 0, self.contributions / var_y[:, None], np.nan)
        return pd.DataFrame(
            {
                "output": np.repeat(np.asarray(self.output_names, dtype=object), n),
                "input": np.tile(np.asarray(self.input_names, dtype=object), m),
                "estimate": np.tile(self.x, m),
                "u": np.tile(self.u_x, m),
                "dof": np.tile(self.dof_x, m),
                "sensitivity": self.sensitivities.ravel(),
                "u_contribution": np.abs(self.sensitivities * self.u_x).ravel(),
                "variance_contribution": self.contributions.ravel(),
                "share": share.ravel(),
            }
        )

    def budget_for(self, output=0) -> pd.DataFrame:
        """Budget of one output (name or position), indexed by input name."""
        if isinstance(output, str):
            if output not in self.output_names:
                raise InputError(
                    f"The 'output' parameter of budget_for must be one of "
                    f"{list(self.output_names)}. Got {output!r}.",
                    parameter="output",
                )
            output = self.output_names.index(output)
        name = self.output_names[output]
        b = self.budget
        return b[b["output"] == name].drop(columns="output").set_index("input")

    def to_frame(self) -> pd.DataFrame:
        """One row per output: ``value, u, dof, k, U``."""
        return pd.DataFrame(
            {"value": self.value, "u": self.u, "dof": self.dof, "k": self.k, "U": self.U},
            index=pd.Index(self.output_names, name="output"),
        )

    def ufloats(self) -> list:
        """Outputs as correlated ``uncertainties`` numbers."""
        return to_ufloats(self.value, self.cov, self.output_names)


def _finish(
    value, s, c, *, input_names, output_names, x, nu, level, k, method, func
) -> Propagation:
    sc = s @ c
    cov_y = sc @ s.T
    cov_y = 0.5 * (cov_y + cov_y.T)
    contributions = s * sc
    u = np.sqrt(np.clip(np.diag(cov_y), 0.0, None))
    dof = effective_dof(s, c, nu) if np.any(np.isfinite(nu)) else np.full(u.size, np.inf)
    if k is None:
        lev = _check_level(level, func)
        kk = np.atleast_1d(np.asarray(coverage_factor(dof, lev), dtype=float))
    else:
        if not float(k) > 0:
            raise InputError(
                f"The 'k' parameter of {func} must be positive. Got {k!r}.", parameter="k"
            )
        lev = float("nan")
        kk = np.full(u.size, float(k))
    return Propagation(
        value=value,
        cov=cov_y,
        u=u,
        sensitivities=s,
        contributions=contributions,
        dof=dof,
        k=kk,
        U=kk * u,
        level=lev,
        input_names=input_names,
        output_names=output_names,
        x=x,
        u_x=np.sqrt(np.diag(c)),
        dof_x=nu,
        method=method,
    )


def propagate_linear(
    sensitivities,
    cov,
    *,
    x=None,
    value=None,
    names=None,
    output_names=None,
    dof=None,
    level: float = 0.95,
    k=None,
) -> Propagation:
    """Law of propagation of uncertainty for a known Jacobian: :math:`V_y = S V_x S^T`.

    Parameters
    ----------
    sensitivities : array (m, n) or (n,) [output unit / input unit]
        :math:`S_{ki} = \\partial y_k/\\partial x_i`; a 1-D array is one output.
    cov : array (n, n) [input units squared]
        Input covariance.
    x : array (n,), optional
        Input estimates (shown in the budget; NaN when omitted).
    value : array (m,), optional
        Output estimates (NaN when omitted).
    names, output_names : sequence of str, optional
    dof : array (n,), optional
        Degrees of freedom of each input (inf allowed).
    level : float, default 0.95
    k : float, optional
        Fixed coverage factor (e.g. 2) instead of Student's t.

    Returns
    -------
    Propagation

    Raises
    ------
    InputError
        If shapes disagree or ``cov`` is not a covariance matrix.

    Notes
    -----
    .. math:: V_y = S\\,V_x\\,S^T

    [3]_ Eq. 3 of clause 6.2.1.3 (from memory); [1]_ Eq. 13 for one output.  Cost is
    :math:`O(m n^2)`, one dense matrix product.

    Examples
    --------
    >>> p = propagate_linear([[1.0, 1.0]], [[1.0, 0.5], [0.5, 1.0]])
    >>> round(float(p.u[0]), 6)
    1.732051
    """
    func = "propagate_linear"
    s = np.asarray(sensitivities, dtype=float)
    if s.ndim == 1:
        s = s[None, :]
    if s.ndim != 2 or not np.all(np.isfinite(s)):
        raise InputError(
            f"The 'sensitivities' parameter of {func} must be a finite (m, n) matrix. "
            f"Got shape {s.shape}.",
            parameter="sensitivities",
        )
    m, n = s.shape
    c = _as_cov(cov, n, func)
    xv = np.full(n, np.nan) if x is None else _as_vector(x, func, "x")[0]
    if xv.shape != (n,):
        raise InputError(
            f"The 'x' parameter of {func} must have {n} entries. Got {xv.size}.", parameter="x"
        )
    val = np.full(m, np.nan) if value is None else np.atleast_1d(np.asarray(value, float))
    if val.shape != (m,):
        raise InputError(
            f"The 'value' parameter of {func} must have {m} entries. Got {val.size}.",
            parameter="value",
        )
    return _finish(
        val,
        s,
        c,
        input_names=_names(names, None, n, func, "names"),
        output_names=_names(
            output_names, tuple(f"y{i}" for i in range(m)), m, func, "output_names"
        ),
        x=xv,
        nu=_as_dof(dof, n, func),
        level=level,
        k=k,
        method="linear",
        func=func,
    )


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


def _steps(x: np.ndarray, u: np.ndarray, rel_step: float) -> np.ndarray:
    # Scale by u: a step of 1e-3 u is "small" in every input's own unit and scale.
    # Floor at 1e-8 |x| so that round-off (~eps |f| / h) stays negligible when an
    # input is very precise; fall back to the value's scale for u = 0.
    h = rel_step * u
    h = np.maximum(h, 1e-8 * np.abs(x))
    zero = h == 0
    h[zero] = 1e-6 * np.maximum(np.abs(x[zero]), 1.0)
    return h


def _numerical_jacobian(func, x, u, y0, rel_step, vectorized, where) -> np.ndarray:
    n = x.size
    h = _steps(x, u, rel_step)
    if vectorized:
        pts = np.concatenate([x[:, None] + np.diag(h), x[:, None] - np.diag(h)], axis=1)
        yy = np.asarray(func(pts), dtype=float)
        if yy.ndim == 1:
            yy = yy[None, :]
        if yy.shape != (y0.size, 2 * n):
            raise InputError(
                f"The 'func' parameter of {where} was called with vectorized=True on an "
                f"({n}, {2 * n}) array and must return ({y0.size}, {2 * n}). Got {yy.shape}; "
                "pass vectorized=False if it works on one point at a time.",
                parameter="func",
            )
        return (yy[:, :n] - yy[:, n:]) / (2.0 * h)
    s = np.empty((y0.size, n))
    for i in range(n):
        xp = x.copy()
        xm = x.copy()
        xp[i] += h[i]
        xm[i] -= h[i]
        s[:, i] = (_call(func, xp, where) - _call(func, xm, where)) / (2.0 * h[i])
    return s


def propagate(
    func: Callable,
    x,
    cov,
    *,
    names: Sequence[str] | None = None,
    output_names: Sequence[str] | None = None,
    method: str | None = None,
    jacobian: Callable | None = None,
    dof=None,
    level: float = 0.95,
    k=None,
    rel_step: float = DEFAULT_REL_STEP,
    vectorized: bool = False,
) -> Propagation:
    """Propagate input estimates and covariance through a measurement function.

    Parameters
    ----------
    func : callable
        ``func(x) -> y`` mapping the (n,) input array to an (m,) array or a scalar.
    x : array (n,) or Series [SI]
        Input estimates (a Series supplies the input names).
    cov : array (n, n) or DataFrame [SI squared]
        Input covariance.
    names, output_names : sequence of str, optional
    method : {"analytic", "numerical"}, optional
        ``"analytic"`` uses ``jacobian``; ``"numerical"`` central differences.
        Default: analytic when ``jacobian`` is given, else numerical.
    jacobian : callable, optional
        ``jacobian(x) -> (m, n)`` array of sensitivities.
    dof : array (n,), optional
        Degrees of freedom of each input; gives Welch-Satterthwaite dof per output.
    level : float, default 0.95
        Coverage probability of ``U`` (Student's t with the effective dof).
    k : float, optional
        Fixed coverage factor (e.g. 2) instead.
    rel_step : float, default 1e-3
        Central-difference step as a fraction of each input's standard uncertainty.
    vectorized : bool, default False
        For ``"numerical"``: ``func`` accepts an (n, p) array whose columns are
        points and returns (m, p); all 2n points are then evaluated in one call.

    Returns
    -------
    Propagation

    Raises
    ------
    InputError
        On bad shapes, a non-covariance ``cov``, an unknown ``method`` or
        ``method="analytic"`` without ``jacobian``.

    Notes
    -----
    .. math:: V_y = S\\,V_x\\,S^T, \\qquad S_{ki} = \\partial f_k/\\partial x_i

    ([1]_ Eq. 13; [3]_ 6.2.1.3).  Numerical sensitivities use central differences

    .. math:: S_{ki} \\approx \\frac{f_k(x + h_i e_i) - f_k(x - h_i e_i)}{2 h_i},
              \\quad h_i = 10^{-3}\\,u(x_i)

    The step is scaled by each input's standard uncertainty: one absolute step
    cannot suit a pressure of 1e7 Pa and a flow of 0.5 kg/s at once, and a step
    relative to the value fails for values near zero.  A
    thousandth of u probes the function well inside the region over which the
    linearisation is used, and the truncation error of central differences
    (:math:`O(h^2)`) is then negligible against the second-order terms linear
    propagation ignores anyway.  The step is floored at :math:`10^{-8}|x_i|`
    against round-off.

    Linear propagation is valid while ``func`` is close to linear within a few
    standard uncertainties of ``x``; compare with :func:`monte_carlo` otherwise.

    Examples
    --------
    >>> p = propagate(lambda v: v[0] * v[1], [2.0, 3.0], [[0.01, 0.0], [0.0, 0.04]])
    >>> round(float(p.value[0]), 12), round(float(p.u[0]), 6)
    (6.0, 0.5)
    """
    where = "propagate"
    if not callable(func):
        raise InputError(
            f"The 'func' parameter of {where} must be callable. Got {type(func).__name__}.",
            parameter="func",
        )
    xv, default_names = _as_vector(x, where)
    n = xv.size
    if isinstance(cov, pd.DataFrame) and default_names is None:
        default_names = tuple(str(i) for i in cov.index)
    c = _as_cov(cov, n, where)
    in_names = _names(names, default_names, n, where, "names")
    if method is None:
        method = "analytic" if jacobian is not None else "numerical"
    if method not in ("analytic", "numerical"):
        raise InputError(
            f"The 'method' parameter of {where} must be 'analytic' or 'numerical'. Got {method!r}.",
            parameter="method",
        )
    if not rel_step > 0:
        raise InputError(
            f"The 'rel_step' parameter of {where} must be positive. Got {rel_step!r}.",
            parameter="rel_step",
        )
    y_raw = func(xv.copy())
    out_default = tuple(str(i) for i in y_raw.index) if isinstance(y_raw, pd.Series) else None
    y0 = _call(lambda _: y_raw, xv, where)
    m = y0.size
    if method == "analytic":
        if jacobian is None:
            raise InputError(
                f"The 'jacobian' parameter of {where} is needed with method='analytic'. "
                "Pass jacobian=callable returning the (m, n) sensitivities, or "
                "method='numerical'.",
                parameter="jacobian",
            )
        s = np.asarray(jacobian(xv.copy()), dtype=float)
        s = s.reshape(1, -1) if s.ndim <= 1 and m == 1 else s
        if s.shape != (m, n):
            raise InputError(
                f"The 'jacobian' parameter of {where} must return an ({m}, {n}) array. "
                f"Got shape {s.shape}.",
                parameter="jacobian",
            )
    else:
        s = _numerical_jacobian(func, xv, np.sqrt(np.diag(c)), y0, rel_step, vectorized, where)
    if not np.all(np.isfinite(s)):
        raise InputError(
            f"The sensitivities computed by {where} are not finite; check that 'func' is "
            "defined around x (within a few standard uncertainties).",
            parameter="func",
        )
    if out_default is None:
        out_default = ("y",) if m == 1 else tuple(f"y{i}" for i in range(m))
    return _finish(
        y0,
        s,
        c,
        input_names=in_names,
        output_names=_names(output_names, out_default, m, where, "output_names"),
        x=xv,
        nu=_as_dof(dof, n, where),
        level=level,
        k=k,
        method=method,
        func=where,
    )


# --------------------------------------------------------------------------- Monte Carlo


@dataclass(frozen=True, eq=False)
class MonteCarlo:
    """Result of :func:`monte_carlo`.

    Attributes
    ----------
    value : ndarray (m,)
        Mean of the output samples (the estimate, [2]_ 7.6).
    u : ndarray (m,)
        Standard deviation of the samples.
    cov : ndarray (m, m)
        Sample covariance of the outputs.
    low, high : ndarray (m,)
        End points of the coverage interval.
    interval : str
        ``"shortest"`` or ``"symmetric"`` (probabilistically symmetric).
    level : float
        Coverage probability of the interval.
    n : int
        Number of trials.
    seed : int or None
    dist : str
    output_names : tuple of str
    samples : ndarray (m, n) or None
        Output samples when ``keep_samples=True``.
    """

    value: np.ndarray
    u: np.ndarray
    cov: np.ndarray
    low: np.ndarray
    high: np.ndarray
    interval: str
    level: float
    n: int
    seed: int | None
    dist: str
    output_names: tuple[str, ...]
    samples: np.ndarray | None = field(default=None, repr=False)

    def to_frame(self) -> pd.DataFrame:
        """One row per output: ``value, u, low, high``."""
        return pd.DataFrame(
            {"value": self.value, "u": self.u, "low": self.low, "high": self.high},
            index=pd.Index(self.output_names, name="output"),
        )


def _factor(c: np.ndarray, func: str) -> np.ndarray:
    """L with L L^T = cov; Cholesky, or eigen-decomposition for singular matrices."""
    try:
        return np.linalg.cholesky(c)
    except np.linalg.LinAlgError:
        pass
    w, v = np.linalg.eigh(c)
    # Negative eigenvalues below round-off of the largest are clipped to zero.
    tol = 1e-10 * max(float(w.max()), 0.0)
    if w.min() < -tol:
        raise InputError(
            f"The 'cov' parameter of {func} must be positive semi-definite. "
            f"Got a matrix with eigenvalue {w.min():.3g}.",
            parameter="cov",
        )
    return v * np.sqrt(np.clip(w, 0.0, None))


def _coverage(ys: np.ndarray, level: float, interval: str) -> tuple[np.ndarray, np.ndarray]:
    """Coverage interval end points per row of sorted samples ([2]_ 7.7)."""
    M = ys.shape[1]
    pm = level * M
    q = int(pm) if float(pm).is_integer() else int(pm + 0.5)
    q = min(max(q, 1), M - 1)
    if interval == "symmetric":
        # 1-based r = (M - q)/2, or the integer part of (M - q + 1)/2.
        r = (M - q) // 2 if (M - q) % 2 == 0 else (M - q + 1) // 2
        r0 = max(r - 1, 0)
        return ys[:, r0], ys[:, r0 + q]
    widths = ys[:, q:] - ys[:, : M - q]
    r = np.argmin(widths, axis=1)
    rows = np.arange(ys.shape[0])
    return ys[rows, r], ys[rows, r + q]


def monte_carlo(
    func: Callable,
    x,
    cov,
    *,
    n: int = 200_000,
    seed: int | None = 0,
    level: float = 0.95,
    dist: str = "normal",
    vectorized: bool = True,
    interval: str = "shortest",
    keep_samples: bool = False,
    output_names: Sequence[str] | None = None,
) -> MonteCarlo:
    """Propagate distributions by Monte Carlo (GUM Supplement 1).

    Parameters
    ----------
    func : callable
        With ``vectorized=True`` (default), ``func(X)`` receives an (n_inputs, N)
        array whose row ``i`` holds the samples of input ``i`` and returns (m, N)
        or (N,).  A function written with ``x[0], x[1], ...`` and numpy operations
        works both ways.  With ``vectorized=False`` it is called once per trial
        with an (n_inputs,) array (slow).
    x : array (n_inputs,) or Series [SI]
        Input expectations.
    cov : array (n_inputs, n_inputs) [SI squared]
        Input covariance; must be positive semi-definite.
    n : int, default 200000
        Number of trials M.
    seed : int or None, default 0
        Seed of the ``numpy.random.Generator`` (PCG64).  The default makes every
        call deterministic; pass different seeds for independent runs.
    level : float, default 0.95
        Coverage probability of the interval.
    dist : {"normal", "uniform"}
        ``"normal"``: multivariate Gaussian with covariance ``cov``.  ``"uniform"``:
        independent rectangular distributions of half-width :math:`\\sqrt3\\,u_i`
        ([2]_ 6.4.2); needs a diagonal ``cov``.
    interval : {"shortest", "symmetric"}
        Shortest coverage interval ([2]_ 5.3.4, 7.7.2) or probabilistically
        symmetric ([2]_ 5.3.3, 7.7.2).
    keep_samples : bool, default False
        Keep the (m, N) output samples in the result.
    output_names : sequence of str, optional

    Returns
    -------
    MonteCarlo

    Raises
    ------
    InputError
        On bad shapes or options, a non-PSD ``cov``, correlated ``"uniform"`` inputs,
        or a ``func`` returning the wrong shape.

    Notes
    -----
    Draws :math:`x^{(r)} = x + L z^{(r)}` with :math:`L L^T = V_x` and
    :math:`z^{(r)}` standard normal ([2]_ 6.4.8), evaluates the model, and
    summarises the output samples by their mean, standard deviation and a
    coverage interval.  For the interval, the M samples are sorted and, with
    :math:`q = pM` (rounded to the nearest integer), the interval is
    :math:`[y_{(r)}, y_{(r+q)}]`: for ``"shortest"`` the ``r`` that minimises the
    length, for ``"symmetric"`` :math:`r = (M-q)/2` ([2]_ 7.7.2).  For symmetric
    unimodal output distributions the two agree.  The number of trials is fixed,
    not adaptive ([2]_ 7.9 describes the adaptive procedure).

    Examples
    --------
    >>> mc = monte_carlo(lambda v: v[0] + v[1], [0.0, 0.0], [[1.0, 0.0], [0.0, 1.0]],
    ...                  n=100_000, seed=1)
    >>> bool(abs(mc.u[0] - 2 ** 0.5) < 0.01)
    True
    """
    where = "monte_carlo"
    if not callable(func):
        raise InputError(
            f"The 'func' parameter of {where} must be callable. Got {type(func).__name__}.",
            parameter="func",
        )
    xv, _ = _as_vector(x, where)
    p = xv.size
    c = _as_cov(cov, p, where)
    lev = _check_level(level, where)
    if not isinstance(n, int | np.integer) or n < 100:
        raise InputError(
            f"The 'n' parameter of {where} must be an integer >= 100. Got {n!r}.", parameter="n"
        )
    if dist not in ("normal", "uniform"):
        raise InputError(
            f"The 'dist' parameter of {where} must be 'normal' or 'uniform'. Got {dist!r}.",
            parameter="dist",
        )
    if interval not in ("shortest", "symmetric"):
        raise InputError(
            f"The 'interval' parameter of {where} must be 'shortest' or 'symmetric'. "
            f"Got {interval!r}.",
            parameter="interval",
        )
    rng = np.random.default_rng(seed)
    if dist == "normal":
        L = _factor(c, where)
    else:
        off = c - np.diag(np.diag(c))
        if np.any(off != 0):
            raise InputError(
                f"The 'cov' parameter of {where} must be diagonal with dist='uniform' "
                "(independent rectangular inputs). Got off-diagonal covariances.",
                parameter="cov",
            )
        half = np.sqrt(3.0 * np.diag(c))
    # Trials are drawn in batches of at most ~8e6 input values (64 MB) so that
    # many inputs do not exhaust memory; the batch size depends only on the
    # number of inputs, so a given seed always gives the same samples.
    batch = max(1, min(n, 8_000_000 // p))
    parts = []
    for start in range(0, n, batch):
        nb = min(batch, n - start)
        if dist == "normal":
            xs = xv[:, None] + L @ rng.standard_normal((p, nb))
        else:
            xs = xv[:, None] + half[:, None] * rng.uniform(-1.0, 1.0, size=(p, nb))
        if vectorized:
            yb = np.asarray(func(xs), dtype=float)
            if yb.ndim == 1 and yb.shape[0] == nb:
                yb = yb[None, :]
            if yb.ndim != 2 or yb.shape[1] != nb:
                raise InputError(
                    f"The 'func' parameter of {where} (vectorized=True) must return (m, {nb}) "
                    f"or ({nb},) for a ({p}, {nb}) input. Got shape {yb.shape}; pass "
                    "vectorized=False if it handles one trial at a time.",
                    parameter="func",
                )
        else:
            yb = np.stack([_call(func, xs[:, r], where) for r in range(nb)], axis=1)
        parts.append(yb)
    ys = parts[0] if len(parts) == 1 else np.concatenate(parts, axis=1)
    if ys.ndim != 2 or ys.shape[1] != n:
        raise InputError(
            f"The 'func' parameter of {where} must return (m, {n}). Got shape {ys.shape}.",
            parameter="func",
        )
    if not np.all(np.isfinite(ys)):
        raise InputError(
            f"The 'func' parameter of {where} returned non-finite values for "
            f"{int((~np.isfinite(ys)).any(axis=0).sum())} of {n} trials; the function is "
            "not defined over the whole input distribution.",
            parameter="func",
        )
    m = ys.shape[0]
    names = _names(
        output_names,
        ("y",) if m == 1 else tuple(f"y{i}" for i in range(m)),
        m,
        where,
        "output_names",
    )
    ys_sorted = np.sort(ys, axis=1)
    low, high = _coverage(ys_sorted, lev, interval)
    cov_y = np.atleast_2d(np.cov(ys, ddof=1))
    return MonteCarlo(
        value=ys.mean(axis=1),
        u=ys.std(axis=1, ddof=1),
        cov=cov_y,
        low=np.asarray(low, dtype=float),
        high=np.asarray(high, dtype=float),
        interval=interval,
        level=lev,
        n=int(n),
        seed=seed,
        dist=dist,
        output_names=names,
        samples=ys if keep_samples else None,
    )
