"""Test for a trend inside a window: a regression slope against the random scatter.

``Run.trend`` and ``Run.average`` call :func:`trend_test`.  A window that starts
before the unit has settled shows as a slope that the scatter of the samples cannot
explain.
"""

from __future__ import annotations

import warnings
from typing import NamedTuple

import numpy as np
import pandas as pd

from perftest.defaults import TREND_ALPHA
from perftest.errors import InputError, StabilityWarning
from perftest.run import stats
from perftest.run.common import column_list, fmt_time
from perftest.run.windows import _seconds

__all__ = ["trend_test", "TREND_COLUMNS"]

TREND_COLUMNS = ("slope", "u_slope", "t", "dof", "p_value", "trend", "trending")


def trend_test(
    run, tags=None, *, alpha=None, warn: bool = True, stacklevel: int = 3
) -> pd.DataFrame:
    """Least-squares slope of each tag over the window and its significance.

    Parameters
    ----------
    run : Run
        The run (or window) to work on.
    tags : list of str, optional
        Tags to test (default all).
    alpha : float, optional
        Level of the test for the window as a whole (two-sided; default
        :data:`perftest.defaults.TREND_ALPHA`, 0.05): each of the m tested tags is
        flagged when its p-value is below ``alpha / m`` (Bonferroni), so a steady
        window raises a false alarm with probability of about ``alpha``.
    warn : bool, default True
        Issue a :class:`~perftest.errors.StabilityWarning` naming the flagged tags.
    stacklevel : int, default 3
        Of that warning (3: the caller of ``Run.trend``).

    Returns
    -------
    DataFrame
        Indexed by tag: ``slope`` [SI/s], ``u_slope`` [SI/s], ``t``, ``dof``,
        ``p_value``, ``trend`` (slope times the window span [SI]) and ``trending``
        (bool; ``<NA>`` with fewer than 4 valid samples or no scatter).

    Raises
    ------
    InputError
        If ``alpha`` is not in (0, 1).

    Notes
    -----
    The slope :math:`b = \\sum_i w_i x_i` of :math:`x_i = a + b t_i + e_i` by ordinary
    least squares, :math:`w_i = (t_i - \\bar t)/S_{tt}`, is a weighted mean of the
    samples; its variance under autocorrelated scatter is
    :math:`\\sum_{|k|\\le M} c_k \\gamma_k` with :math:`c_k = \\sum_i w_i w_{i+k}`.
    The autocovariances :math:`\\gamma_k` come from the residuals with the window
    :math:`M` and the mean-bias correction :math:`V` of
    :func:`perftest.run.stats.random_uncertainty_of_mean` (Sokal's window); the
    residuals also lack the scatter of the fitted slope itself, about
    :math:`u(b)^2 S_{tt}/m` at every lag, which gives

    .. math::

        u(b)^2 = \\frac{\\sum_{|k|\\le M} c_k (\\hat\\gamma_k + V)}{1 - (2M + 1)/m},
        \\qquad t = b/u(b), \\qquad \\nu = \\max(m/(2M + 1) - 2, 1)

    (:math:`\\nu`: the number of independent stretches of the correlation window,
    less the two fitted parameters; from memory) and the two-sided p-value from
    Student's t.  This is the trend t-test against the random scatter of
    Santer et al. [1]_ (their Eqs. 3-6) with their lag-one effective sample size
    replaced by the windowed autocovariance sum.  By simulation (first-order
    autoregressive scatter, 120 samples, correlation times up to 12 samples,
    tests/run/test_trend.py) the false-alarm rate stays at or below the nominal
    level; with the plain residual effective sample size it reached 20 % at 5 %.

    References
    ----------
    .. [1] B. D. Santer et al., "Statistical significance of trends and trend
       differences in layer-average atmospheric temperature time series", Journal of
       Geophysical Research 105(D6), 7337-7356, 2000. DOI 10.1029/1999JD901105
       (from memory).
    """
    tags = run._check_tags(tags, "trend")
    level = TREND_ALPHA if alpha is None else alpha
    if not (isinstance(level, int | float) and 0.0 < float(level) < 1.0):
        raise InputError(
            f"The 'alpha' parameter of Run.trend must lie in (0, 1). Got {alpha!r}.",
            parameter="alpha",
        )
    if column_list(run.data.columns) == tags:
        x = run.data.to_numpy(dtype=float)  # every tag in order: no column selection
    else:
        x = run.data[tags].to_numpy(dtype=float)
    r = _trend(run, x, level)
    flagged = pd.arrays.BooleanArray(r.hit, ~r.usable)
    table = pd.DataFrame(
        {
            "slope": r.slope,
            "u_slope": r.u,
            "t": r.t,
            "dof": r.dof,
            "p_value": r.p,
            "trend": r.trend,
            "trending": flagged,
        },
        index=pd.Index(tags, name="tag"),
    )
    if warn:
        _warn(run, tags, r, level, stacklevel + 1)
    return table


class _Trend(NamedTuple):
    """The columns of :func:`trend_test`'s table as arrays, and what its verdicts used."""

    slope: np.ndarray
    u: np.ndarray
    t: np.ndarray
    dof: np.ndarray
    p: np.ndarray
    trend: np.ndarray
    usable: np.ndarray  # a verdict was reached (else <NA>)
    hit: np.ndarray  # trending
    tested: int  # the m of the Bonferroni level alpha / m
    start: object
    end: object


def _trend(run, x: np.ndarray, level: float) -> _Trend:
    """:func:`trend_test` of the samples ``x`` (samples x tags) of ``run``, as arrays."""
    idx = run.data.index
    t = _seconds(idx)
    slope, u, dof, n, stt = _slope_statistics(x, t)
    with np.errstate(invalid="ignore", divide="ignore"):
        tstat = slope / u
    p = 2.0 * stats._t_sf(np.abs(tstat), dof)
    usable = (n >= 4) & (stt > 0) & np.isfinite(p) & (u > 0)
    p = np.where(usable, p, np.nan)
    m = max(int(usable.sum()), 1)
    with np.errstate(invalid="ignore"):
        hit = usable & (p < level / m)
    span = float(t[-1] - t[0]) if len(idx) else 0.0
    return _Trend(
        slope, u, tstat, dof, p, slope * span, usable, hit, m,
        run.start or (idx[0] if len(idx) else None),
        run.end or (idx[-1] if len(idx) else None),
    )  # fmt: skip


def _warn(run, tags, r: _Trend, level: float, stacklevel: int) -> None:
    """The StabilityWarning of :func:`trend_test` naming the trending tags, if any.

    ``stacklevel`` counts from this function (one more than from its caller).
    """
    hit = np.flatnonzero(r.hit)
    if not hit.size:
        return
    shown = ", ".join(
        f"{tags[j]} ({_change_text(run, tags[j], r.trend[j])} over the window, p {_p_text(r.p[j])})"
        for j in hit
    )
    m = r.tested
    warnings.warn(
        f"{hit.size} tag(s) trend inside the window {fmt_time(r.start)} to "
        f"{fmt_time(r.end)} beyond their scatter (level {level:g} for the "
        f"window, {level / m:.2g} per tag): {shown}. The unit may not have settled: "
        "look at the record, or choose a later window.",
        StabilityWarning,
        stacklevel=stacklevel,
    )


def _slope_statistics(x: np.ndarray, t: np.ndarray):
    """Per column: OLS slope, its u under autocorrelated scatter, dof, m, S_tt."""
    valid = np.isfinite(x)
    n = valid.sum(axis=0).astype(float)
    k = x.shape[1]
    complete = stats._column_major(x) and t.strides[0] == t.itemsize and bool(valid.all())
    if complete and x.shape[0]:
        # every sample valid: the times are the same for every tag, and the nan-aware
        # sums below add the same numbers in the same order (one column at a time)
        with np.errstate(invalid="ignore", divide="ignore"):
            dt = (t - t.sum() / x.shape[0])[:, None]
            stt = np.full(k, (dt * dt).sum())
            xm = x.sum(axis=0) / x.shape[0]
            resid = x - xm
            slope = (dt * resid).sum(axis=0) / stt
            resid -= slope * dt  # (in place: the layout of x - xm, as the sums below expect)
    else:
        tv = np.where(valid, t[:, None], np.nan)
        with warnings.catch_warnings(), np.errstate(invalid="ignore", divide="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            tm = np.nanmean(tv, axis=0)
            xm = np.nanmean(x, axis=0)
            dt = tv - tm
            stt = np.nansum(dt**2, axis=0)
            slope = np.nansum(dt * (x - xm), axis=0) / stt
            resid = x - xm - slope * dt
    u = np.full(k, np.nan)
    dof = np.full(k, np.nan)
    if x.shape[0] < 4:
        return slope, u, dof, n, stt
    V, _, M, gamma = stats._mean_variance_columns(resid, None, with_gamma=True)
    K = int(max(M.max(), 1))
    gamma = gamma[: K + 1]
    from scipy import fft as _fft  # imported on first use, as in perftest.run.stats

    # c_k = sum_i w_i w_{i+k}; the same for every column without a masked sample
    if complete:
        c = _weight_products(t, dt, stt[:1], K)
    else:
        same = bool(valid.all()) and k > 1
        w = np.where(valid, np.nan_to_num(dt) / np.where(stt > 0, stt, np.inf), 0.0)
        w = w[:, :1] if same else w
        nfft = _fft.next_fast_len(x.shape[0] + K + 1, real=True)
        fw = _fft.rfft(w, nfft, axis=0)
        c = _fft.irfft(fw * np.conj(fw), nfft, axis=0)[: K + 1]
    lags = np.arange(K + 1)[:, None]
    inside = lags <= M[None, :]
    g = stats._nan_to_num(gamma) + stats._nan_to_num(V)[None, :]
    terms = np.where(inside, c * g, 0.0)
    num = terms[0] + 2.0 * terms[1:].sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        denom = 1.0 - (2.0 * M + 1.0) / n
        var_b = np.where(denom > 0, num / denom, np.nan)
        u = np.sqrt(np.where(var_b > 0, var_b, np.nan))
        dof = np.maximum(n / (2.0 * M + 1.0) - 2.0, 1.0)
    return slope, u, dof, n, stt


# (times as bytes, K) -> c_k of the slope weights: windows of one sampling pattern
# share their times since the first sample, and with them the weights
_PRODUCTS: dict = {}
_PRODUCTS_MAX = 256


def _weight_products(t: np.ndarray, dt: np.ndarray, stt: np.ndarray, K: int) -> np.ndarray:
    """``c_k = sum_i w_i w_{i+k}`` (k = 0 .. K) of the weights ``w = dt / S_tt`` of a
    complete record, remembered per times ``t`` (from which ``dt`` and ``S_tt`` come)."""
    key = (t.tobytes(), K)
    c = _PRODUCTS.get(key)
    if c is None:
        from scipy import fft as _fft  # imported on first use, as in perftest.run.stats

        w = dt / np.where(stt > 0, stt, np.inf)
        nfft = _fft.next_fast_len(len(t) + K + 1, real=True)
        fw = _fft.rfft(w, nfft, axis=0)
        c = _fft.irfft(fw * np.conj(fw), nfft, axis=0)[: K + 1].copy()
        c.setflags(write=False)
        if len(_PRODUCTS) >= _PRODUCTS_MAX:
            _PRODUCTS.clear()
        _PRODUCTS[key] = c
    return c


def _change_text(run, tag: str, change: float) -> str:
    """A change of ``tag`` [SI] in its logged unit, signed, without e-notation."""
    from perftest.display import convert, fmt_number, unit_label

    units = getattr(run, "units", {}) or {}
    quantities = getattr(run, "quantities", {}) or {}
    shown, unit = convert(
        change, units.get(tag), quantity=quantities.get(tag) or None, difference=True
    )
    value = float(shown)
    sign = "+" if value >= 0 else "-"
    return f"{sign}{fmt_number(abs(value), 4)} {unit_label(unit)}".rstrip()


def _p_text(p: float) -> str:
    """A p-value for a message, without e-notation ("= 0.012", "< 0.001")."""
    return "< 0.001" if p < 0.001 else f"= {p:.2g}"
