"""Propagation of distributions by Monte Carlo (GUM Supplement 1).

:func:`monte_carlo` is seeded and deterministic, with shortest or probabilistically
symmetric coverage intervals.

References
----------
.. [2] JCGM 101:2008, Evaluation of measurement data - Supplement 1 to the GUM -
   Propagation of distributions using a Monte Carlo method, 2008. Clauses 5.3, 7.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perftest.errors import InputError
from perftest.evaluation.budgets import _as_cov, _as_vector, _call, _check_level, _names

__all__ = ["MonteCarlo", "monte_carlo"]


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

    def against_linear(self, u_linear) -> pd.DataFrame:
        """The check of a linear propagation: one row per output (index ``name``).

        Parameters
        ----------
        u_linear : array_like (m,)
            Standard uncertainties of the same outputs by the law of propagation.

        Returns
        -------
        DataFrame
            ``value, u, low, high, u_linear`` and ``ratio`` = u / u_linear (NaN or
            inf where ``u_linear`` is zero).
        """
        frame = pd.DataFrame(
            {"value": self.value, "u": self.u, "low": self.low, "high": self.high,
             "u_linear": u_linear},
            index=pd.Index(self.output_names, name="name"),
        )  # fmt: skip
        with np.errstate(divide="ignore", invalid="ignore"):
            frame["ratio"] = frame["u"] / frame["u_linear"]
        return frame


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


def _coverage_of_samples(
    ys: np.ndarray, level: float, interval: str
) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_coverage` of ``np.sort(ys, axis=1)``, sorting only what it reads.

    The interval's end points are order statistics of the samples: the symmetric
    one two of them, the shortest one among the lowest and the highest
    ``M - q`` samples.  ``np.partition`` places those order statistics (and the
    tails beside them) exactly as a full sort does, and only the tails are sorted:
    the same end points for a fraction of the cost.
    """
    M = ys.shape[1]
    pm = level * M
    q = int(pm) if float(pm).is_integer() else int(pm + 0.5)
    q = min(max(q, 1), M - 1)
    k = M - q
    if interval == "symmetric":
        r = (M - q) // 2 if (M - q) % 2 == 0 else (M - q + 1) // 2
        r0 = max(r - 1, 0)
        part = np.partition(ys, [r0, r0 + q], axis=1)
        return part[:, r0], part[:, r0 + q]
    if not k - 1 < q:  # the two tails overlap (level below about 1/2): sort it all
        return _coverage(np.sort(ys, axis=1), level, interval)
    part = np.partition(ys, [k - 1, q], axis=1)
    low_tail = np.sort(part[:, :k], axis=1)  # = sorted[:, :M - q]
    high_tail = np.sort(part[:, q:], axis=1)  # = sorted[:, q:]
    r = np.argmin(high_tail - low_tail, axis=1)
    rows = np.arange(ys.shape[0])
    return low_tail[rows, r], high_tail[rows, r]


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
    low, high = _coverage_of_samples(ys, lev, interval)
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
