"""Outlier screens: spikes judged against the neighbours' median, modified Thompson tau.

``Run.screen_outliers`` calls :func:`screen_outliers`.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from perftest.defaults import OUTLIER_ALPHA, OUTLIER_WINDOW
from perftest.errors import DataQualityWarning, InputError
from perftest.run import stats
from perftest.run.common import CHECK_BYTES

__all__ = ["screen_outliers", "neighbour_median", "half_window"]

# share of a tag's samples rejected as outliers above which screen_outliers warns
# (common practice, no source: a healthy log has a few spikes, not a tenth of it)
HEAVY_REJECTION = 0.10


def half_window(window) -> int | None:
    if window is None:
        return None
    ok = isinstance(window, int | np.integer) and not isinstance(window, bool)
    # with 2 neighbours the "median" is their mean, which a spike next door moves
    if not ok or window < 5 or window % 2 == 0:
        raise InputError(
            "The 'window' parameter of Run.screen_outliers must be an odd number of samples, "
            f"at least 5 (or None to compare with the mean). Got {window!r}.",
            parameter="window",
        )
    return int(window) // 2


def neighbour_median(x: np.ndarray, half: int) -> np.ndarray:
    """Median of the ``2 half`` samples around each sample (itself and NaN left out).

    ``x`` is (samples, tags); NaN where no neighbour is valid.  A few tags at a time,
    so that the window copies stay small.
    """
    n, m = x.shape
    out = np.full(x.shape, np.nan)
    if n == 0 or m == 0:
        return out
    step = max(1, CHECK_BYTES // max(16 * half * n, 1))
    for a in range(0, m, step):
        pad = np.full((n + 2 * half, min(step, m - a)), np.nan)
        pad[half : half + n] = x[:, a : a + step]
        win = np.lib.stride_tricks.sliding_window_view(pad, 2 * half + 1, axis=0)
        nb = np.delete(win, half, axis=2)  # (samples, tags, 2 half), a copy
        gaps = np.isnan(nb).any(axis=2)
        med = out[:, a : a + step]
        mid = np.partition(nb, [half - 1, half], axis=2)  # the two middle values
        med[:] = 0.5 * (mid[..., half - 1] + mid[..., half])
        if gaps.any():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)  # no valid neighbour: NaN
                med[gaps] = np.nanmedian(nb[gaps], axis=1)
    return out


def screen_outliers(
    run, alpha: float = OUTLIER_ALPHA, tags=None, *, window: int | None = OUTLIER_WINDOW
):
    """Reject spikes per tag with the modified Thompson tau test, sized for long logs.

    Parameters
    ----------
    run : Run
        The run (or window) to work on.
    alpha : float, default 0.01
        Probability that a tag whose samples are independent normal scatter loses
        any sample at all (the level of the whole screen of one tag, not of each
        single test; see Notes).  The default is
        :data:`perftest.defaults.OUTLIER_ALPHA`, shared with ``perftest report``.
    tags : list of str, optional
        Tags to screen (default all).
    window : int or None, default 11 (:data:`perftest.defaults.OUTLIER_WINDOW`)
        Odd number of samples, at least 5: each sample is compared with the median
        of the ``window - 1`` samples around it.  None compares with the tag's
        mean (the textbook form, for a short steady record).

    Returns
    -------
    Run
        With each rejected sample masked and listed in ``exclusions`` (reason
        ``"outlier (modified Thompson tau, alpha=0.01)"``, ``raw_value`` the SI
        value, ``source`` ``"screen_outliers"``) and a log line with the rule and
        the counts.

    Raises
    ------
    InputError
        If ``alpha`` is not in (0, 1) or ``window`` is not an odd number >= 5.

    Warns
    -----
    DataQualityWarning
        When more than 10 % of a tag's samples are rejected.

    Notes
    -----
    For each tag with :math:`n` tested samples the deviation of every sample from
    the median of its neighbours,

    .. math:: d_i = x_i - \\operatorname{median}\\{x_{i-h}, ..., x_{i-1},
              x_{i+1}, ..., x_{i+h}\\}, \\quad h = (\\text{window} - 1)/2,

    (masked neighbours left out, the sample itself too, so that a spike does not
    pull its own reference) goes through the modified Thompson tau test of ASME
    PTC 19.1 [1]_ one sample at a time: the largest :math:`|d_i - \\bar d|` is
    rejected when it exceeds :math:`\\tau s_d`, :math:`\\bar d` and :math:`s_d`
    are recomputed without it, and the screen stops at the first pass that
    rejects nothing (:func:`perftest.run.stats.thompson_tau_outliers`).  The critical
    value is :math:`\\tau(k, \\alpha/n)` (:func:`perftest.run.stats.modified_thompson_tau`,
    :math:`k` samples left) at the per-sample level :math:`\\alpha/n`.

    Why not the textbook level: tested at :math:`\\alpha` per pass, the largest of
    hundreds of normal deviations exceeds :math:`\\tau \\to z_{\\alpha/2}` = 1.96
    standard deviations almost surely, and the iteration keeps cutting the tails
    until about 18 % of a long, perfectly normal record is gone.  Splitting
    :math:`\\alpha` over the :math:`n` samples (Bonferroni) makes :math:`\\alpha`
    the chance that a clean record loses any sample, about :math:`\\alpha` false
    rejections per tag on average (for :math:`n` = 10 000 and :math:`\\alpha` =
    0.05, :math:`\\tau` = 4.56).  With that substitution the critical value is the
    two-sided Grubbs criterion (from memory).  The neighbours' median takes out
    slow changes (drift, load swings, the wander of an autocorrelated signal) that
    the mean would leave in the deviations, so a spike is judged against the
    sample-to-sample scatter rather than the range of the whole record.  The
    deviations of autocorrelated samples are neither independent nor quite
    normal: expect somewhat more false rejections than :math:`\\alpha` (about 0.5
    per tag of 10 000 samples at a lag-one correlation of 0.9 or 0.99, by
    simulation), still nowhere near the textbook cascade.

    Limits:

    - the deviations are taken as roughly normal: heavy-tailed noise loses more
      samples than :math:`\\alpha` suggests;
    - a signal that sits on one value with rare one-digit steps (coarse
      resolution) has almost no scatter of :math:`d`, and those steps are
      rejected: read the log, and the warning beyond 10 % of a tag;
    - a disturbance lasting more than :math:`h` consecutive samples moves the
      median and is not an outlier here (it is a stability question);
    - several large spikes inflate :math:`s_d` and can hide smaller ones (the
      test removes the largest first);
    - a sample without a valid neighbour in its window, and every sample of a
      tag with fewer than 3 such samples, is not tested (the log lists the tags).

    References
    ----------
    .. [1] ASME PTC 19.1-2018, Test Uncertainty.
    """
    tags = run._check_tags(tags, "screen_outliers")
    stats.modified_thompson_tau(3, alpha)  # validates alpha with a clear message
    half = half_window(window)
    x = run.data[tags].to_numpy(dtype=float)
    if half is None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN tags: not tested
            d = x - np.nanmean(x, axis=0)
    else:
        d = x - neighbour_median(x, half)
    n_tested = np.isfinite(d).sum(axis=0)
    rej = np.zeros(x.shape, dtype=bool)
    for n in np.unique(n_tested):
        if n >= 3:
            cols = np.flatnonzero(n_tested == n)
            rej[:, cols] = stats.thompson_tau_outliers(d[:, cols], alpha / n)
    reason = f"outlier (modified Thompson tau, alpha={alpha:g})"
    t_i, c_i = np.nonzero(rej)
    new = pd.DataFrame(
        {
            "time": run.data.index[t_i],
            "tag": np.asarray(tags, dtype=object)[c_i],
            "reason": reason,
            "raw_value": x[t_i, c_i].astype(object),
            "source": "screen_outliers",
        }
    )
    mask = run.mask.copy()
    if t_i.size:
        cols = np.array([run.data.columns.get_loc(t) for t in tags])
        m = mask.to_numpy(copy=True)
        m[t_i, cols[c_i]] = True
        mask = pd.DataFrame(m, index=mask.index, columns=mask.columns)
    exclusions = pd.concat([run.exclusions, new], ignore_index=True) if len(new) else run.exclusions
    counts = pd.Series(c_i).value_counts().sort_index()
    detail = ", ".join(f"{tags[k]}: {v}" for k, v in counts.items())
    few = [tg for tg, k in zip(tags, n_tested, strict=True) if k < 3]
    rule = (
        "deviations from the tag's mean"
        if half is None
        else f"deviations from the median of the {2 * half} neighbouring samples"
    )
    log = list(run.log)
    log.append(
        f"screen_outliers(alpha={alpha:g}, window={window}) on {len(tags)} tags: modified "
        f"Thompson tau on {rule}, one at a time at the per-sample level alpha/n; "
        f"{t_i.size} samples rejected"
        + (f" ({detail})" if detail else "")
        + (f"; not tested (fewer than 3 valid samples): {few}" if few else "")
    )
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = rej.sum(axis=0) / n_tested
    heavy = [tg for tg, f in zip(tags, frac, strict=True) if f > HEAVY_REJECTION]
    if heavy:
        warnings.warn(
            f"screen_outliers(alpha={alpha:g}) rejected more than "
            f"{HEAVY_REJECTION:.0%} of the samples of {heavy}. That is more than spikes: "
            "look at the record (coarse resolution, many spikes, steps) before averaging.",
            DataQualityWarning,
            stacklevel=3,
        )
    return run._replace(data=run.data, mask=mask, exclusions=exclusions, log=log)
