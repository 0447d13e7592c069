"""Linear propagation of uncertainty (the GUM law of propagation in matrix form).

:func:`propagate` / :func:`propagate_linear`: :math:`V_y = S V_x S^T`, with per-input budgets,
Welch-Satterthwaite degrees of freedom and expanded uncertainties.  Linear propagation is
exact for linear functions and a first-order approximation otherwise: it is valid while
the function is close to linear over a few standard uncertainties of each input.  When in
doubt, compare with :func:`perftest.evaluation.montecarlo.monte_carlo`.

References
----------
.. [1] JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement (GUM), 2008. Clauses 5.1-5.2, Annex G.
.. [3] JCGM 102:2011, Supplement 2 to the GUM - Extension to any number of output
   quantities, 2011. Clause 6.2 (matrix form of the law of propagation).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd

from perftest.errors import InputError
from perftest.evaluation.budgets import (
    DEFAULT_REL_STEP,
    _as_cov,
    _as_dof,
    _as_vector,
    _call,
    _check_level,
    _coverage_factors,
    _names,
    effective_dof,
    to_ufloats,
)

__all__ = ["Propagation", "propagate", "propagate_linear"]


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

    def results_table(self, units, descriptions, bases) -> pd.DataFrame:
        """One row per output, as a table of plant results (index ``name``).

        Parameters
        ----------
        units, descriptions, bases : sequence of str
            Per output: its SI unit, its description and its heating-value basis
            (``""`` where none applies).

        Returns
        -------
        DataFrame
            ``value, u, U95, unit, k, dof, description, basis`` (``U95`` is ``U``,
            at this propagation's level).
        """
        return pd.DataFrame(
            {
                "value": self.value,
                "u": self.u,
                "U95": self.U,
                "unit": list(units),
                "k": self.k,
                "dof": self.dof,
                "description": list(descriptions),
                "basis": list(bases),
            },
            index=pd.Index(self.output_names, name="name"),
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
    dof = effective_dof(s, c, nu) if np.isfinite(nu).any() else np.full(u.size, np.inf)
    if k is None:
        lev = _check_level(level, func)
        kk = _coverage_factors(dof, lev)
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


def _steps(x: np.ndarray, u: np.ndarray, rel_step: float) -> np.ndarray:
    # Scale by u: a step of 1e-3 u is "small" in every input's own unit and scale.
    # Floor at 1e-8 |x| so that round-off (~eps |f| / h) stays negligible when an
    # input is very precise; fall back to the value's scale for u = 0.
    h = rel_step * u
    h = np.maximum(h, 1e-8 * np.abs(x))
    zero = h == 0
    h[zero] = 1e-6 * np.maximum(np.abs(x[zero]), 1.0)
    return h


def _difference_points(x: np.ndarray, h: np.ndarray) -> np.ndarray:
    """(n, 2n) points of the central differences: ``x + h_i e_i``, then ``x - h_i e_i``."""
    return np.concatenate([x[:, None] + np.diag(h), x[:, None] - np.diag(h)], axis=1)


def _numerical_jacobian(func, x, u, y0, rel_step, vectorized, where) -> np.ndarray:
    n = x.size
    h = _steps(x, u, rel_step)
    if vectorized:
        pts = _difference_points(x, h)
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
    if not np.isfinite(s).all():
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
