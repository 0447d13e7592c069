"""Statistics of logged samples: uncertainty of a mean, outlier tests, degrees of freedom.

Pure numeric functions (numpy/scipy only).  Samples may be a 1-D array or
Series (one tag) or a 2-D array / DataFrame with one column per tag; NaN marks
a masked sample and is left out.  With a 2-D input the functions work column by
column in one vectorised pass and return one value per column.

References
----------
.. [1] JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement (GUM), 2008.
.. [2] ASME PTC 19.1-2018, Test Uncertainty, 2018 (modified Thompson tau method).
.. [3] G. V. Bayley and J. M. Hammersley, "The 'effective' number of independent
   observations in an autocorrelated time series", Supplement to the Journal of
   the Royal Statistical Society 8(2), 184-197, 1946. DOI 10.2307/2983560
   (DOI from memory).
.. [4] A. Zieba, "Effective number of observations and unbiased estimators of
   variance for autocorrelated data - an overview", Metrology and Measurement
   Systems 17(1), 3-16, 2010. DOI 10.2478/v10178-010-0001-0
.. [5] A. D. Sokal, "Monte Carlo Methods in Statistical Mechanics: Foundations and
   New Algorithms", 1997 (the automatic window for the integrated autocorrelation
   time; from memory).
.. [7] M. B. Priestley, "Spectral Analysis and Time Series", Academic Press, 1981
   (equivalent degrees of freedom of lag-window estimates; from memory).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from perftest.errors import InputError

# Degrees of freedom and coverage factors live in perftest.run.coverage; their names
# (and the private helpers trend, averaging and the tests use) stay importable here.
from perftest.run.coverage import (  # noqa: F401
    _coverage_factor,
    _coverage_factor_scalar,
    _t_sf,
    coverage_factor,
    standard_from_expanded,
    welch_satterthwaite,
)

__all__ = [
    "random_uncertainty_of_mean",
    "effective_sample_size",
    "autocorrelation",
    "modified_thompson_tau",
    "thompson_tau_outliers",
    "mean_statistics",
    "mean_dof",
    "mean_covariance",
    "welch_satterthwaite",
    "coverage_factor",
    "standard_from_expanded",
]


def _as_2d(samples, func: str, parameter: str = "samples"):
    """Return ``(array2d, was_1d, columns)`` as float; NaN kept."""
    columns = None
    if isinstance(samples, pd.DataFrame):
        columns = samples.columns
        arr = samples.to_numpy(dtype=float, na_value=np.nan)
    elif isinstance(samples, pd.Series):
        arr = samples.to_numpy(dtype=float, na_value=np.nan)
    else:
        try:
            arr = np.asarray(samples, dtype=float)
        except (TypeError, ValueError) as exc:
            raise InputError(
                f"The '{parameter}' parameter of {func} must be numeric. Got {exc}.",
                parameter=parameter,
            ) from None
    if arr.ndim == 1:
        return arr[:, None], True, columns
    if arr.ndim == 2:
        return arr, False, columns
    raise InputError(
        f"The '{parameter}' parameter of {func} must be 1-D (one tag) or 2-D "
        f"(samples x tags). Got an array with {arr.ndim} dimensions.",
        parameter=parameter,
    )


def _out(values: np.ndarray, was_1d: bool, columns):
    if was_1d:
        return float(values[0])
    if columns is not None:
        return pd.Series(values, index=columns)
    return values


def autocorrelation(samples, max_lag: int | None = None) -> np.ndarray:
    """Sample autocorrelation of each column, NaN gaps allowed.

    Parameters
    ----------
    samples : array_like or Series or DataFrame
        Equally spaced samples [any unit]; NaN marks a masked sample.
    max_lag : int, optional
        Largest lag returned.  Default ``n - 1``.

    Returns
    -------
    ndarray
        ``rho[k]`` for ``k = 0 .. max_lag`` (1-D input) or ``rho[k, j]`` per column.

    Notes
    -----
    Deviations :math:`d_t = x_t - \\bar x` (mean of the valid samples) are paired
    at lag :math:`k` only where both samples are valid, and each lag is
    normalised by its own number of pairs :math:`P_k`:

    .. math:: \\hat\\rho_k = \\frac{P_k^{-1}\\sum d_t d_{t+k}}{m^{-1}\\sum d_t^2}

    with :math:`m` valid samples.  Masked samples therefore neither add nor
    remove correlation; without gaps :math:`P_k = n - k`.  Sums are formed with
    FFTs (O(n log n) per column).

    Examples
    --------
    >>> rho = autocorrelation([1.0, 2.0, 1.0, 2.0, 1.0, 2.0])
    >>> round(float(rho[1]), 2)
    -1.0
    """
    arr, was_1d, _ = _as_2d(samples, "autocorrelation")
    n = arr.shape[0]
    if max_lag is None:
        max_lag = max(n - 1, 0)
    max_lag = int(min(max_lag, max(n - 1, 0)))
    rho = _acf_columns(arr, max_lag)
    return rho[:, 0] if was_1d else rho


def _acf_columns(arr: np.ndarray, max_lag: int, full: bool = False, *, general=False):
    """Autocorrelation (lags x columns); with ``full`` also pairs, variance, counts and
    whether every sample was valid.

    A record whose every sample is valid skips the masking steps; its arithmetic, and
    so every digit, is the same.  ``general`` takes the masking steps all the same
    (the tests compare the two).
    """
    n, k = arr.shape
    valid = np.isfinite(arr)
    complete = False
    if not general:
        # (non-negative strides: a sum over the samples adds in the order it would
        # on the masked copy the general steps make)
        complete = n > 0 and min(arr.strides, default=0) >= 0 and bool(valid.all())
    if complete:
        m = np.full(k, n)
        mean = arr.sum(axis=0) / m
        d = arr - mean
    else:
        m = valid.sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(m > 0, np.nansum(np.where(valid, arr, 0.0), axis=0) / m, 0.0)
        d = np.where(valid, arr - mean, 0.0)
    from scipy import fft as _fft  # imported on first use, as scipy.stats below

    # zero padding to n + max_lag keeps circular wrap-around out of the lags used
    nfft = _fft.next_fast_len(n + max_lag + 1, real=True)
    fd = _fft.rfft(d, nfft, axis=0)
    sums = _fft.irfft(fd * np.conj(fd), nfft, axis=0)[: max_lag + 1]
    if complete:  # the same pairs for every column
        pairs = (n - np.arange(max_lag + 1, dtype=float))[:, None]
    elif np.all(valid):
        pairs = (n - np.arange(max_lag + 1, dtype=float))[:, None] * np.ones((1, k))
    else:
        w = valid.astype(float)
        fw = _fft.rfft(w, nfft, axis=0)
        pairs = np.rint(_fft.irfft(fw * np.conj(fw), nfft, axis=0)[: max_lag + 1])
    with np.errstate(invalid="ignore", divide="ignore"):
        if complete:  # every column has n >= 1 samples and every lag pairs
            var = sums[0] / m
            rho = sums / pairs / var
        else:
            var = np.where(m > 0, sums[0] / np.maximum(m, 1), np.nan)
            rho = np.where(pairs > 0, sums / np.maximum(pairs, 1.0), np.nan) / var
    rho[0] = np.where(var > 0, 1.0, np.nan)
    if full:
        return rho, pairs, var, m, complete
    return rho


def effective_sample_size(samples, *, max_lag: int | None = None):
    """Effective number of independent samples of an autocorrelated record.

    Parameters
    ----------
    samples : array_like or Series or DataFrame
        Equally spaced samples of one tag (1-D) or of several tags (2-D, one
        column per tag) [any unit]; NaN marks a masked sample.
    max_lag : int, optional
        Largest summation window :math:`M` the automatic choice may reach.
        Default ``n // 2``.

    Returns
    -------
    float or ndarray or Series
        :math:`n_{eff} = \\hat\\sigma^2 / \\hat V(\\bar x)` in [1, m] where m is the
        number of valid samples (NaN for a column with no valid sample).

    Notes
    -----
    :math:`\\hat V(\\bar x)` and the process variance
    :math:`\\hat\\sigma^2 = \\hat\\gamma_0 + \\hat V(\\bar x)` are those of
    :func:`random_uncertainty_of_mean` (see its Notes for the method).  A column
    with zero variance gets :math:`n_{eff} = m`.

    Examples
    --------
    >>> x = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0]
    >>> effective_sample_size(x) < 8
    True
    """
    arr, was_1d, columns = _as_2d(samples, "effective_sample_size")
    return _out(_mean_variance_columns(arr, max_lag)[1], was_1d, columns)


# Sokal's window constant: the sum of the autocorrelation runs to the first window M
# with M >= c tau_int(M).  Sokal recommends c of about 4 for an autocorrelation that
# is nearly a single exponential and about 6 where slower modes may hide ([5],
# section 3).  On records of 120 samples the noise of the far lags costs more than
# the tail a short window leaves out: with c = 4, 5 and 6 the spread of the means
# of AR(1) records (time constants 1 to 12 samples) over the mean reported u was
# 0.967-1.082, 0.971-1.104 and 0.964-1.127 (numpy Monte Carlo, 20000 records each,
# benchmarks/bench_mean_uncertainty.py); on 1200 samples (time constants 1 to 120)
# 0.966-1.040 with c = 4 against 0.957-1.060 with c = 5.  c = 4 keeps the ratio
# inside 0.95-1.10 up to a time constant of a tenth of the record.
SOKAL_C = 4.0


def _acov_columns(arr: np.ndarray, max_lag: int):
    """Autocovariance per lag and column (1/P_k normalised), pair counts, valid counts."""
    rho, pairs, var, m, _ = _acf_columns(arr, max_lag, full=True)
    return rho * var, pairs, m


def _mean_variance_columns(
    arr: np.ndarray,
    max_lag: int | None,
    c: float = SOKAL_C,
    *,
    with_gamma: bool = False,
    with_dof: bool = False,
    general: bool = False,
):
    """``(V, n_eff, M)`` per column: variance of the mean, effective size, window.

    With ``with_gamma`` also the autocovariances (lags x columns) it used; with
    ``with_dof`` (instead) the degrees of freedom of V (:func:`mean_dof`).
    ``general`` as in :func:`_acf_columns`.
    """
    n, k = arr.shape
    if n < 3:
        m = np.isfinite(arr).sum(axis=0).astype(float)
        V = np.full(k, np.nan)
        neff = np.where(m > 0, m, np.nan)
        M_sel = np.zeros(k, dtype=int)
        if with_dof:
            return V, neff, M_sel, np.maximum(m - 1.0, 1.0)
        return (V, neff, M_sel, None) if with_gamma else (V, neff, M_sel)
    K = n // 2 if max_lag is None else int(max_lag)
    K = max(1, min(K, n - 1))
    rho, pairs, var, m, complete = _acf_columns(arr, K, full=True, general=general)
    gamma = rho * var
    m = m.astype(float)
    g0 = gamma[0]
    # one errstate for the whole estimate: the steps between its parts (comparisons,
    # selections) raise no invalid or divide warning of their own
    with np.errstate(invalid="ignore", divide="ignore"):
        # (K, cols): P_k / m; a complete record has one column of it for all
        w = pairs[1:] / (float(n) if complete else np.maximum(m, 1.0))
        S = g0 + 2.0 * _nan_to_num(w * gamma[1:]).cumsum(axis=0)
        W = 1.0 + 2.0 * w.cumsum(axis=0)
        denom = m - W
        Vm = np.where(denom > 0, S / denom, np.nan)
        tau = m * Vm / (2.0 * (g0 + Vm))  # bias-corrected integrated autocorrelation time
        # the window length in lags that hold pairs: M itself without gaps; a record
        # logged every j-th row of a finer time base counts every j-th lag only
        if complete:
            lags = np.arange(1, K + 1)[:, None]
        else:
            lags = np.cumsum(pairs[1:] > 0, axis=0)
        usable = denom > 0
        ok = (lags >= c * tau) & usable
        # first window that satisfies Sokal's rule, else the widest usable one
        last = np.where(usable.any(axis=0), K - 1 - np.argmax(usable[::-1], axis=0), 0)
        first = np.where(ok.any(axis=0), np.argmax(ok, axis=0), last)
        cols = np.arange(k)
        V = Vm[first, cols]
        M_sel = first + 1
        # at least s^2/(2m): an alternating record earns at most twice its sample count.
        # A floor at s^2/m would push every white-noise estimate that falls below the
        # truth up to it: u 6 % high on independent samples (simulation, 4000 records)
        m1 = np.maximum(m - 1.0, 1.0)
        floor = 0.5 * g0 / m1
        V = np.where(np.isfinite(V), np.maximum(V, floor), floor)
        # (minimum of maximum: np.clip's values, NaN kept, without its wrapper)
        neff = np.minimum(np.maximum((g0 + V) / V, 1.0), np.maximum(m, 1.0))
        flat = ~(g0 > 0)
        V = np.where(flat, 0.0, V)
        neff = np.where(flat, m, neff)
        V = np.where(m >= 2, V, np.nan)
        neff = np.where(m > 0, neff, np.nan)
        if with_dof:
            # m / (1 + 2 sum_{k<=M} P_k/m): m/(2M+1) less the lags the record is too
            # short for, and gap-aware (a lag without pairs adds no noise)
            dof = np.minimum(np.maximum(m / W[first, 0 if complete else cols], 1.0), m1)
            dof = np.where(np.isfinite(dof), dof, m1)
            return V, neff, M_sel, dof
    if with_gamma:
        return V, neff, M_sel, gamma
    return V, neff, M_sel


def random_uncertainty_of_mean(samples, *, autocorrelation: bool = True, max_lag=None):
    """Standard uncertainty of the mean of samples (random part, GUM Type A).

    Parameters
    ----------
    samples : array_like or Series or DataFrame
        Equally spaced samples of one tag (1-D) or of several tags (2-D) [any unit];
        NaN left out.
    autocorrelation : bool, default True
        Allow for the autocorrelation of the samples (see Notes).  False gives the
        textbook :math:`s/\\sqrt{m}` for independent samples.
    max_lag : int, optional
        Largest summation window the automatic choice may reach (default ``n // 2``).

    Returns
    -------
    float or ndarray or Series
        :math:`u(\\bar x)` [unit of the samples]; NaN when fewer than 2 valid samples.

    Notes
    -----
    Method: the integrated autocorrelation time with Sokal's automatic window
    ([5]_ section 3, [6]_), with the autocovariances corrected for the bias that
    subtracting the sample mean puts into them ([3]_, [4]_).  It stays honest for
    correlation times up to about a tenth of the record.

    With deviations from the sample mean, the autocovariances
    :math:`\\hat\\gamma_k = P_k^{-1}\\sum d_t d_{t+k}` (:math:`P_k` pairs at lag k,
    gap-aware as :func:`autocorrelation`) are low by about :math:`V = \\mathrm{Var}(\\bar
    x)` at every lag, :math:`E\\hat\\gamma_k \\approx \\gamma_k - V` ([4]_ Eq. 8 for
    k = 0).  Putting :math:`\\gamma_k = \\hat\\gamma_k + V` into the variance of the
    mean of :math:`m` samples, :math:`V = m^{-1}\\sum_{|k| \\le M} (P_k/m)\\gamma_k`,
    and solving for V gives

    .. math::

        \\hat V(M) = \\frac{\\hat\\gamma_0 + 2\\sum_{k=1}^{M} (P_k/m)\\,\\hat\\gamma_k}
                         {m - 1 - 2\\sum_{k=1}^{M} P_k/m},
        \\qquad
        \\hat\\tau(M) = \\frac{m \\hat V(M)}{2(\\hat\\gamma_0 + \\hat V(M))}

    (for independent samples and M = 0 this is :math:`s^2/m`).  The window is the
    first :math:`M` with :math:`M \\ge c\\,\\hat\\tau(M)`, :math:`c` = 4 (Sokal's
    rule with his choice for a nearly exponential autocorrelation: long enough to
    hold the correlation, short enough to keep the noise of the far lags out), at
    most ``max_lag`` and only while the denominator stays positive.
    :math:`u = \\sqrt{\\hat V}`, never below :math:`s/\\sqrt{2m}` (an alternating
    record earns at most twice its sample count).

    Checked by simulation (tests/run/test_stats.py,
    benchmarks/bench_mean_uncertainty.py): first-order autoregressive records
    :math:`x_t = \\phi x_{t-1} + e_t`, :math:`\\phi = e^{-1/T}` with time constant T
    (the e-folding lag of the autocorrelation; the integrated time
    :math:`(1+\\phi)/(1-\\phi)` is about 2T) of 1, 5, 10 and 12 samples in records of
    120 samples give a spread of the means of 0.97-1.08 times the mean reported u
    (20000 records each), where the plain truncated sum (stop at the first
    negative lag, no bias correction) gave 0.99, 1.13, 1.32 and 1.38.  Beyond a
    time constant of about a tenth of the record the window reaches its limit and u
    is low again (1.12 at T = 15): choose a longer window.

    References
    ----------
    .. [1] JCGM 100:2008 (GUM), section 4.2.
    .. [3] Bayley and Hammersley, 1946, DOI 10.2307/2983560 (from memory).
    .. [4] Zieba, 2010, DOI 10.2478/v10178-010-0001-0.
    .. [5] A. D. Sokal, "Monte Carlo Methods in Statistical Mechanics: Foundations
       and New Algorithms", in Functional Integration, NATO ASI Series B 361,
       Plenum, 1997, 131-192. DOI 10.1007/978-1-4899-0319-8_6 (DOI from memory).
    .. [6] N. Madras and A. D. Sokal, "The pivot algorithm: a highly efficient Monte
       Carlo method for the self-avoiding walk", J. Stat. Phys. 50, 109-186, 1988.
       DOI 10.1007/BF01022990 (appendix C, the automatic window; from memory).

    Examples
    --------
    >>> round(random_uncertainty_of_mean([1.0, 2.0, 3.0, 4.0], autocorrelation=False), 4)
    0.6455
    """
    arr, was_1d, columns = _as_2d(samples, "random_uncertainty_of_mean")
    return _out(mean_statistics(arr, autocorrelation, max_lag)[4], was_1d, columns)


def mean_statistics(
    arr: np.ndarray, autocorrelation: bool = True, max_lag=None, *, with_dof: bool = False
):
    """Column statistics in one pass: ``(m, mean, s, n_eff, u_mean)``.

    ``arr`` is 2-D (samples x columns), NaN = masked.  ``m`` valid counts, ``s``
    with ``ddof=1`` (NaN when m < 2), ``n_eff`` from :func:`effective_sample_size`
    (or m without autocorrelation) and ``u_mean`` from
    :func:`random_uncertainty_of_mean`.  With ``with_dof`` a sixth item: the
    degrees of freedom of ``u_mean`` (:func:`mean_dof`; m - 1 without
    autocorrelation).  Used by :func:`perftest.run.averaging.average` so that the
    autocorrelation is computed once.
    """
    out = _mean_statistics(arr, autocorrelation, max_lag)
    return out[:6] if with_dof else out[:5]


def _mean_statistics(arr: np.ndarray, autocorrelation: bool = True, max_lag=None):
    """:func:`mean_statistics` with the degrees of freedom, and the variance of the
    mean and summation window of each column (None without ``autocorrelation``)."""
    arr = np.asarray(arr, dtype=float)
    valid = np.isfinite(arr)
    m = valid.sum(axis=0)
    if arr.shape[0] and min(arr.strides, default=0) >= 0 and valid.all():
        # every sample valid: nanmean's and nanstd's arithmetic without the masking
        # steps (the same sums in the same order, so the same digits)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = arr.sum(axis=0) / m
            dev = arr - mean
            s = np.where(m >= 2, np.sqrt((dev * dev).sum(axis=0) / (m - 1)), np.nan)
    else:
        with warnings.catch_warnings(), np.errstate(invalid="ignore", divide="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            mean = np.nanmean(arr, axis=0)
            s = np.where(m >= 2, np.nanstd(arr, axis=0, ddof=1), np.nan)
    V = M = None
    if autocorrelation:
        V, neff, M, dof = _mean_variance_columns(arr, max_lag, with_dof=True)
        u = np.sqrt(V)
    else:
        neff = np.where(m > 0, m, np.nan)
        with np.errstate(invalid="ignore", divide="ignore"):
            u = s / np.sqrt(neff)
        dof = np.maximum(m - 1.0, 1.0)
    return m, mean, s, neff.astype(float), u, dof, V, M


def mean_dof(samples, *, max_lag: int | None = None):
    """Degrees of freedom of the random uncertainty of a mean of autocorrelated samples.

    Parameters
    ----------
    samples : array_like or Series or DataFrame
        Equally spaced samples of one tag (1-D) or several tags (2-D) [any unit];
        NaN marks a masked sample.
    max_lag : int, optional
        As in :func:`random_uncertainty_of_mean`.

    Returns
    -------
    float or ndarray or Series
        :math:`\\nu = m / (1 + 2\\sum_{k=1}^{M} P_k/m)` within :math:`[1, m-1]`,
        about :math:`m/(2M+1)`; M the summation window
        :func:`random_uncertainty_of_mean` chose, :math:`P_k` the pairs at lag k, m
        the valid samples.  m - 1 for fewer than 3 samples.

    Notes
    -----
    :math:`\\hat V` of :func:`random_uncertainty_of_mean` is a truncated (rectangular
    lag window) estimate of the spectral density at frequency zero.  Such an
    estimate is distributed about as :math:`\\chi^2_\\nu/\\nu` with equivalent degrees
    of freedom :math:`\\nu = 2m/\\sum_{|k| \\le M}\\lambda_k^2 = 2m/(2M+1)` away from
    frequency zero, half of that at zero for a real record ([7]_, section 6.2.4 and
    its table of lag windows; from memory).  Here each lag counts with its share of
    pairs :math:`P_k/m`, so that lags a gappy record holds no pairs for add no
    degrees of freedom.  The dof of a mean is thus set by the window its
    correlation needs, not by :math:`n_{eff} - 1`: with :math:`n_{eff} - 1` the 95 %
    intervals :math:`\\bar x \\pm t_{0.975,\\nu}\\,u` of AR(1) records of 120 samples
    (time constants 1, 5, 10, 12 samples) held the true mean in 93.8, 91.4, 88.5
    and 87.5 % of 20000 records; with this :math:`\\nu` in 95.4, 95.4, 94.4 and
    93.7 % (white noise 95.0 %).

    References
    ----------
    .. [7] M. B. Priestley, Spectral Analysis and Time Series, Academic Press, 1981,
       section 6.2.4 (from memory).

    Examples
    --------
    >>> x = [1.0, 2.0, 1.5, 2.5, 2.0, 3.0, 2.5, 3.5]
    >>> 1.0 <= mean_dof(x) <= 7.0
    True
    """
    arr, was_1d, columns = _as_2d(samples, "mean_dof")
    return _out(mean_statistics(arr, True, max_lag, with_dof=True)[5], was_1d, columns)


def mean_covariance(arr: np.ndarray, max_lag=None) -> np.ndarray:
    """Covariance matrix of the means of several tags logged together [unit_i unit_j].

    Parameters
    ----------
    arr : array_like
        2-D, samples x tags, on one time grid; NaN = masked.
    max_lag : int, optional
        As in :func:`random_uncertainty_of_mean`.

    Returns
    -------
    ndarray
        (tags, tags); the diagonal is :math:`u(\\bar x_i)^2` of
        :func:`random_uncertainty_of_mean`.

    Notes
    -----
    The same estimator as :func:`random_uncertainty_of_mean`, applied to the
    cross-covariances: for tags i and j, with :math:`\\hat\\gamma_{ij}(k) =
    P_k^{-1}\\sum d_{i,t}\\,d_{j,t+k}` for :math:`-M \\le k \\le M` (pairs where both
    are valid; :math:`M` the larger of the two tags' windows),

    .. math::

        \\hat V_{ij} = \\frac{\\sum_{|k|\\le M} (P_k/m)\\,\\hat\\gamma_{ij}(k)}
                           {m - 1 - 2\\sum_{k=1}^{M} P_k/m}

    with m the number of times both are valid.  The correlation
    :math:`\\hat V_{ij}/\\sqrt{\\hat V_{ii}\\hat V_{jj}}` is kept within [-1, 1] and
    the correlation matrix made positive semi-definite (negative eigenvalues set
    to 0) before it is scaled by the diagonal.  Wander common to redundant meters
    (the load of one generator seen by two wattmeters) thus stays in the
    uncertainty of their mean instead of averaging away.
    """
    return _mean_covariance(arr, max_lag)


def _mean_covariance(arr, max_lag=None, known=None) -> np.ndarray:
    """:func:`mean_covariance`; ``known``: the ``(V, M)`` of :func:`_mean_variance_columns`
    for these columns when the caller has them."""
    arr = np.asarray(arr, dtype=float)
    n, k = arr.shape
    V, M = _mean_variance_columns(arr, max_lag)[::2] if known is None else known
    u = np.sqrt(V)
    R = np.eye(k)
    valid = np.isfinite(arr)
    for i in range(k):
        for j in range(i + 1, k):
            both = valid[:, i] & valid[:, j]
            mm = float(both.sum())
            Mij = int(max(M[i], M[j]))
            if mm < 3 or not (u[i] > 0 and u[j] > 0) or Mij < 1:
                continue
            if mm == n:  # both complete: no masking, and n - |lag| pairs at each lag
                di = arr[:, i] - arr[:, i].sum() / n
                dj = arr[:, j] - arr[:, j].sum() / n
            else:
                di = np.where(both, arr[:, i] - np.nanmean(arr[both, i]), 0.0)
                dj = np.where(both, arr[:, j] - np.nanmean(arr[both, j]), 0.0)
                w = both.astype(float)
            num = 0.0
            wsum = 0.0
            for lag in range(-Mij, Mij + 1):
                if abs(lag) >= n:
                    continue
                if lag >= 0:
                    a, b = di[: n - lag], dj[lag:]
                else:
                    a, b = di[-lag:], dj[: n + lag]
                if mm == n:
                    p = float(n - abs(lag))
                else:
                    p = float(np.dot(w[abs(lag) :], w[: n - abs(lag)]))
                if p <= 0:
                    continue
                num += (p / mm) * (float(np.dot(a, b)) / p)
                if lag > 0:
                    wsum += 2.0 * p / mm
            denom = mm - 1.0 - wsum
            if denom <= 0:
                continue
            R[i, j] = R[j, i] = float(np.clip(num / denom / (u[i] * u[j]), -1.0, 1.0))
    if k > 2:
        ev, vec = np.linalg.eigh(R)
        if ev.min() < 0:
            R = (vec * np.clip(ev, 0.0, None)) @ vec.T
            d = np.sqrt(np.clip(np.diag(R), 1e-300, None))
            R = R / np.outer(d, d)
    uu = _nan_to_num(u)
    return R * np.outer(uu, uu)


def _nan_to_num(a: np.ndarray) -> np.ndarray:
    """``np.nan_to_num(a)``, which copies; ``a`` itself when every value is finite."""
    return a if np.isfinite(a).all() else np.nan_to_num(a)


def _column_major(x: np.ndarray) -> bool:
    """The samples of each column lie next to each other (as in a DataFrame's block),
    as in a copy of some of its columns (``x[:, cols]``): sums over the samples add in
    the same order in both."""
    n, k = x.shape
    return x.strides[0] == x.itemsize and (k < 2 or x.strides[1] >= x.itemsize * n)


def modified_thompson_tau(n, alpha: float = 0.05):
    """Critical value of the modified Thompson tau outlier test.

    Parameters
    ----------
    n : int or array of int
        Number of samples (at least 3).
    alpha : float, default 0.05
        Significance level (two-sided).

    Returns
    -------
    float or ndarray
        :math:`\\tau` (dimensionless); NaN where ``n < 3`` in an array input.

    Raises
    ------
    InputError
        If ``alpha`` is not in (0, 1) or a scalar ``n`` is below 3.

    Notes
    -----
    .. math::

        \\tau = \\frac{t\\,(n-1)}{\\sqrt{n}\\,\\sqrt{n - 2 + t^2}},
        \\quad t = t_{\\alpha/2,\\,n-2}

    with :math:`t_{\\alpha/2,\\,n-2}` the upper :math:`\\alpha/2` point of Student's t
    with :math:`n-2` degrees of freedom ([2]_, modified Thompson tau method).
    :math:`\\tau \\to z_{\\alpha/2}` as :math:`n \\to \\infty`.

    References
    ----------
    .. [2] ASME PTC 19.1-2018, Test Uncertainty.

    Examples
    --------
    >>> round(modified_thompson_tau(10), 4)
    1.7984
    """
    if not (0.0 < float(alpha) < 1.0):
        raise InputError(
            f"The 'alpha' parameter of modified_thompson_tau must lie in (0, 1). Got {alpha!r}.",
            parameter="alpha",
        )
    scalar = np.ndim(n) == 0
    nn = np.asarray(n, dtype=float)
    if scalar and not (nn >= 3):
        raise InputError(
            f"The 'n' parameter of modified_thompson_tau must be at least 3 (the test "
            f"needs n - 2 >= 1 degrees of freedom). Got {n!r}. Collect more samples.",
            parameter="n",
        )
    from scipy import stats as _sps  # on first use: its import costs 1-2 s

    with np.errstate(invalid="ignore", divide="ignore"):
        df = np.where(nn >= 3, nn - 2.0, np.nan)
        t = _sps.t.isf(alpha / 2.0, df)
        tau = t * (nn - 1.0) / (np.sqrt(nn) * np.sqrt(nn - 2.0 + t * t))
    return float(tau) if scalar else tau


def thompson_tau_outliers(samples, alpha: float = 0.05, *, max_rejections: int | None = None):
    """Flag outliers by the modified Thompson tau test, one at a time.

    Parameters
    ----------
    samples : array_like or Series or DataFrame
        Samples of one tag (1-D) or of several tags (2-D) [any unit]; NaN
        samples are never flagged and take no part.
    alpha : float, default 0.05
        Significance level of each single test.
    max_rejections : int, optional
        Stop after this many rejections per column.  Default: no limit (the test
        stops by itself when no sample exceeds the limit or fewer than 3 remain).

    Returns
    -------
    ndarray of bool or DataFrame
        True where a sample is rejected; same shape as ``samples``.

    Notes
    -----
    At each pass the sample with the largest :math:`\\delta = |x_i - \\bar x|`
    is rejected if :math:`\\delta > \\tau s` (:math:`\\tau` from
    :func:`modified_thompson_tau` for the current count, :math:`s` with
    ``ddof=1``); mean and :math:`s` are then recomputed without it and the test
    repeats ([2]_).  All columns are tested in the same pass.  The test assumes
    independent, normally distributed samples: on a drifting or strongly
    autocorrelated record it flags the ends of the drift, so judge stability first.

    Iterated to the end on a long record of normal scatter, the test keeps
    cutting the tails: it stops near the truncation point :math:`c` where
    :math:`c = \\tau\\,\\sigma_{trunc}(c)`, the standard deviation of a normal
    distribution truncated at :math:`\\pm c`.  For ``alpha = 0.05`` and large n
    this is :math:`c \\approx 1.35\\sigma`, i.e. about 18 % of perfectly good
    samples; for ``alpha = 0.01`` the cascade does not start and about 1.5 % go.
    Use a small ``alpha`` (or ``max_rejections``) on records of hundreds of samples.

    References
    ----------
    .. [2] ASME PTC 19.1-2018, Test Uncertainty.

    Examples
    --------
    >>> x = [10.0, 10.1, 9.9, 10.0, 10.2, 9.8, 10.1, 13.0]
    >>> thompson_tau_outliers(x).nonzero()[0].tolist()
    [7]
    """
    arr, was_1d, columns = _as_2d(samples, "thompson_tau_outliers")
    modified_thompson_tau(3, alpha)  # validates alpha
    rejected = _thompson_columns(arr, alpha, max_rejections)
    if was_1d:
        return rejected[:, 0]
    if columns is not None:
        return pd.DataFrame(rejected, index=samples.index, columns=columns)
    return rejected


def _thompson_columns(arr: np.ndarray, alpha: float, max_rejections) -> np.ndarray:
    # The sample farthest from the mean is always the smallest or the largest one
    # left, so each column is sorted once and the test walks inwards from both
    # ends, keeping running sums: one pass costs O(columns), not O(samples).
    n, ncol = arr.shape
    rejected = np.zeros(arr.shape, dtype=bool)
    if n == 0 or ncol == 0:
        return rejected
    # work on (columns x samples): sorting along contiguous rows is much faster
    a_t = np.ascontiguousarray(arr.T)
    valid = np.isfinite(a_t)
    m = valid.sum(axis=1)
    # shift by the mean so that the running sums do not lose digits
    centre = np.where(m > 0, np.sum(np.where(valid, a_t, 0.0), axis=1) / np.maximum(m, 1), 0.0)
    d = np.where(valid, a_t - centre[:, None], np.inf)  # masked samples sort last
    order = np.argsort(d, axis=1)
    ds = np.take_along_axis(d, order, axis=1)
    lo = np.zeros(ncol, dtype=int)
    hi = m - 1
    s1 = np.sum(np.where(valid, d, 0.0), axis=1)
    s2 = np.sum(np.where(valid, d * d, 0.0), axis=1)
    count = np.zeros(ncol, dtype=int)
    limit = n if max_rejections is None else int(max_rejections)
    cols = np.arange(ncol)
    # tau depends on the count only: one table instead of a t quantile per pass
    tau_table = modified_thompson_tau(np.arange(n + 1), alpha)
    active = cols[(m >= 3) & (limit > 0)]
    while active.size:
        k = m[active]
        mean = s1[active] / k
        var = np.maximum(s2[active] - s1[active] * mean, 0.0) / (k - 1)
        a = ds[active, lo[active]]
        b = ds[active, hi[active]]
        dev_lo = mean - a
        dev_hi = b - mean
        take_hi = dev_hi >= dev_lo
        delta = np.where(take_hi, dev_hi, dev_lo)
        tau = tau_table[k]
        reject = (var > 0) & (delta > tau * np.sqrt(var))
        c = active[reject]
        th = take_hi[reject]
        row = np.where(th, hi[c], lo[c])
        val = ds[c, row]
        rejected[order[c, row], c] = True
        s1[c] -= val
        s2[c] -= val * val
        m[c] -= 1
        hi[c] -= th
        lo[c] += ~th
        count[c] += 1
        active = c[(m[c] >= 3) & (count[c] < limit)]
    return rejected
