"""The steadiest window of a run: every candidate window scored in one pass.

``Run.steadiest_window`` calls :func:`steadiest_window`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perftest.errors import DataError, InputError
from perftest.run.common import CHECK_BYTES, fmt_time
from perftest.run.stability import permissible
from perftest.run.windows import check_min_coverage, cut, sampling_interval, to_timedelta

__all__ = ["steadiest_window"]


def steadiest_window(run, length, *, step=None, tags=None, limits=None, min_coverage=None):
    """The window of the given length in which the tags vary least.

    Parameters
    ----------
    run : Run
        The run (or window) to work on.
    length : str or Timedelta
        Window length (``"2h"``, ``"30min"``).
    step : str or Timedelta, optional
        Spacing of the candidate windows' end times (default: every sample).
    tags : list of str, optional
        Tags that decide (default: every tag with a permissible variation).
    limits : dict, optional
        As in :meth:`stability`.
    min_coverage : float, optional
        Smallest share of the expected samples a candidate must hold, for the
        window as a whole (sample times with any valid value) and for each deciding
        tag (at its own sampling interval).  Default
        :data:`perftest.defaults.MIN_COVERAGE` (0.8).

    Returns
    -------
    Run
        The samples in ``[start, end)`` of the best window, the same samples as
        ``window(start, end)`` (:func:`perftest.run.windows.window`); the log
        records the window, its score and the tag that set it.

    Raises
    ------
    InputError
        If ``length`` is not a positive duration, the run is shorter than it,
        or no tag has a permissible variation.
    DataError
        If no candidate window has the coverage asked for (and at least 2 valid
        samples of every deciding tag).

    Notes
    -----
    Each candidate is scored by the ratio of :meth:`stability`, taken over the
    deciding tags: :math:`\\max_j \\max(\\text{max\\_dev}_j, |\\text{drift}_j|)
    / \\text{permissible}_j`.  The smallest score wins (the earliest on a tie).
    Rolling sums give every candidate's mean, extremes and regression slope
    in one pass, so a day of one-minute data is scored in milliseconds.
    """
    L = to_timedelta(run, length, "length")
    S = None if step is None else to_timedelta(run, step, "step")
    tags = run._check_tags(tags, "steadiest_window")
    idx = run.data.index
    if len(idx) < 2:
        raise InputError(
            f"Run.steadiest_window needs at least two samples. Got {len(idx)}.",
            parameter="length",
        )
    dt = idx.to_series().diff().median()
    span = idx[-1] - idx[0]
    if L > span + dt:
        raise InputError(
            f"The 'length' parameter of Run.steadiest_window ({L}) is longer than the run "
            f"({span + dt}). Choose a shorter window.",
            parameter="length",
        )
    limit = check_min_coverage(min_coverage, "steadiest_window")
    L_s = L / pd.Timedelta(seconds=1)
    # candidate windows are [e - L, e) for every end e among the sample times and one
    # interval past the last sample, so that the last sample can be in a window
    ends = idx.append(pd.DatetimeIndex([idx[-1] + dt]))
    n = len(ends)
    # seconds from the run's middle keep the regression sums well conditioned
    t_mid = idx[0] + span / 2
    tsec = np.asarray((ends - t_mid) / pd.Timedelta(seconds=1), dtype=float)
    roll = dict(window=L, min_periods=1, closed="left")
    full = np.asarray(ends >= idx[0] + L)
    if S is not None:
        grid = pd.date_range(ends[full][0], ends[-1], freq=S)
        pos = ends.get_indexer(grid, method="pad")
        on_grid = np.zeros(n, dtype=bool)
        on_grid[pos[pos >= 0]] = True
        full &= on_grid
    # the window's own coverage: sample times holding any valid value
    any_valid = np.append(~run.mask.to_numpy().all(axis=1), False).astype(float)
    rows = pd.Series(any_valid, index=ends).rolling(**roll).sum().to_numpy()
    dt_s = dt / pd.Timedelta(seconds=1)
    full &= np.nan_to_num(rows) >= limit * L_s / dt_s
    del any_valid, rows
    score = np.full(n, -np.inf)
    worst = np.zeros(n, dtype=np.int32)  # position in dec_tags of the tag that sets the score
    dec_tags: list[str] = []
    # a few tags at a time: the rolling statistics of one chunk are the only
    # temporaries as large as the data
    k = max(1, CHECK_BYTES // max(8 * n, 1))
    for a in range(0, len(tags), k):
        cols = tags[a : a + k]
        ratio, decides = _chunk_ratio(run, cols, ends, tsec, roll, L, dt, L_s, limit, limits)
        if ratio is None:
            continue
        base = len(dec_tags)
        dec_tags.extend(t for t, d in zip(cols, decides, strict=True) if d)
        cm = ratio.max(axis=1)
        up = cm > score
        score[up] = cm[up]
        worst[up] = base + np.argmax(ratio[up], axis=1)
        del ratio
    if not dec_tags:
        raise InputError(
            "Run.steadiest_window needs a permissible variation for at least one tag. "
            "None of the tags has a quantity with a default, a plant limit or a "
            "'limits' entry. Pass limits={tag: ...} or set quantities.",
            parameter="limits",
        )
    score = np.where(full, score, np.inf)
    best = int(np.argmin(score))
    if not np.isfinite(score[best]):
        raise DataError(
            f"No {L} window of the run has a coverage of at least {limit:.0%} (valid samples "
            "over the samples expected) for the run and every deciding tag, with at least "
            "2 valid samples each. Pass tags=[...] to leave out tags that are masked for "
            "long stretches, a shorter length, or min_coverage=.",
            parameter="tags",
        )
    worst_tag = dec_tags[int(worst[best])]
    t1 = ends[best]
    t0 = t1 - L
    keep = np.asarray((idx >= t0) & (idx < t1))
    return cut(
        run,
        keep,
        t0,
        t1,
        f"steadiest_window(length={L}, step={S}) over {int(np.isfinite(score).sum())} "
        f"candidate windows: {fmt_time(t0)} to {fmt_time(t1)} (excl.), "
        f"score {score[best]:.3g} set by '{worst_tag}'",
    )


def _chunk_ratio(run, cols, ends, tsec, roll, L, dt, L_s, limit, limits):
    """Score ratio (candidates x deciding tags of ``cols``) and which of ``cols`` decide.

    The rolling sums are formed and combined in place, one at a time, so that a
    chunk holds about six arrays of its size at once.
    """
    # tags without a permissible variation do not decide: skip their statistics
    probe, _ = permissible(run, list(cols), np.ones(len(cols)), limits)
    decides = np.isfinite(probe)
    if not decides.any():
        return None, decides
    use = [c for c, d in zip(cols, decides, strict=True) if d]
    n = len(ends)
    xe = np.full((n, len(use)), np.nan)
    for j, tg in enumerate(use):
        xe[:-1, j] = run.data[tg].to_numpy(dtype=float)
    valid = np.isfinite(xe)

    def rolled(values, how="sum"):
        r = pd.DataFrame(values, index=ends, copy=False).rolling(**roll)
        return getattr(r, how)().to_numpy(copy=True)  # writable: combined in place

    with np.errstate(invalid="ignore", divide="ignore"):
        c = rolled(valid.astype(float))
        work = np.where(valid, xe, 0.0)  # x, masked samples 0
        sx = rolled(work)
        T = np.where(valid, tsec[:, None], 0.0)
        work *= T  # t x
        sxy = rolled(work)
        del work
        st = rolled(T)
        T *= T  # t t
        sxx = rolled(T)
        del T
        mean = sx / c
        sx *= st  # sxy = stx - st sx / c
        sx /= c
        sxy -= sx
        del sx
        st *= st  # sxx = stt - st^2 / c
        st /= c
        sxx -= st
        del st
        slope = sxy
        np.divide(sxy, sxx, out=slope, where=sxx > 0)
        slope[~(sxx > 0)] = 0.0
        del sxx
        maxdev = rolled(xe, "max")
        maxdev -= mean
        low = rolled(xe, "min")
        np.subtract(mean, low, out=low)
        np.maximum(maxdev, low, out=maxdev)
        del low
        # a full window [e - L, e) spans from its first to its last sample: L - dt on a
        # regular grid; |drift| = |slope| (L - dt)
        slope *= (L - dt) / pd.Timedelta(seconds=1)
        np.abs(slope, out=slope)
        perm, _ = permissible(run, use, mean, limits)
        del mean
        np.maximum(maxdev, slope, out=maxdev)
        del slope
        ratio = maxdev
        ratio /= perm
    # each deciding tag must cover the window as the run does: at least min_coverage
    # of the samples its own sampling interval leads to expect, and 2 at the least
    idx = run.data.index
    need = []
    for j in range(len(use)):
        full = valid[:-1, j].all()
        dt_j = dt / pd.Timedelta(seconds=1) if full else sampling_interval(idx[valid[:-1, j]])
        dt_j = dt_j if np.isfinite(dt_j) and dt_j > 0 else dt / pd.Timedelta(seconds=1)
        need.append(max(2.0, limit * L_s / dt_j))
    ratio[~(c >= np.array(need)[None, :])] = np.inf
    ratio[np.isnan(ratio)] = np.inf
    return ratio, decides
