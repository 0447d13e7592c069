"""The steadiest window of a run: every candidate window scored in one pass.

``Run.steadiest_window`` calls :func:`steadiest_window`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perftest.errors import DataError, InputError
from perftest.run.common import fmt_time
from perftest.run.stability import permissible
from perftest.run.windows import cut, to_timedelta

__all__ = ["steadiest_window"]


def steadiest_window(run, length, *, step=None, tags=None, limits=None):
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

    Returns
    -------
    Run
        The samples in ``(end - length, end]`` of the best window; the log
        records the window, its score and the tag that set it.

    Raises
    ------
    InputError
        If ``length`` is not a positive duration, the run is shorter than it,
        or no tag has a permissible variation.
    DataError
        If no candidate window has at least 2 valid samples of every deciding tag.

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
    x = run.data[tags]
    valid = x.notna()
    # seconds from the run's middle keep the regression sums well conditioned
    t_mid = idx[0] + span / 2
    tsec = np.asarray((idx - t_mid) / pd.Timedelta(seconds=1), dtype=float)
    T = pd.DataFrame(np.where(valid, tsec[:, None], 0.0), index=idx, columns=tags)
    X = x.fillna(0.0)
    roll = dict(window=L, min_periods=1)
    cnt = valid.astype(float).rolling(**roll).sum()
    sx = X.rolling(**roll).sum()
    st = T.rolling(**roll).sum()
    stt = (T * T).rolling(**roll).sum()
    stx = (T * X).rolling(**roll).sum()
    rmax = x.rolling(**roll).max()
    rmin = x.rolling(**roll).min()
    with np.errstate(invalid="ignore", divide="ignore"):
        c = cnt.to_numpy()
        mean = sx.to_numpy() / c
        sxx = stt.to_numpy() - st.to_numpy() ** 2 / c
        sxy = stx.to_numpy() - st.to_numpy() * sx.to_numpy() / c
        slope = np.where(sxx > 0, sxy / sxx, 0.0)
        maxdev = np.maximum(rmax.to_numpy() - mean, mean - rmin.to_numpy())
    # a full window ending at sample t holds (t - L, t]; its regression span is
    # from its first to its last sample, L - dt on a regular grid
    drift = slope * ((L - dt) / pd.Timedelta(seconds=1))
    perm, _ = permissible(run, tags, mean, limits)
    decides = np.isfinite(perm).any(axis=0)
    if not decides.any():
        raise InputError(
            "Run.steadiest_window needs a permissible variation for at least one tag. "
            "None of the tags has a quantity with a default, a plant limit or a "
            "'limits' entry. Pass limits={tag: ...} or set quantities.",
            parameter="limits",
        )
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.maximum(maxdev, np.abs(drift)) / perm
    ratio = ratio[:, decides]
    ratio = np.where(c[:, decides] >= 2, ratio, np.inf)
    ratio = np.where(np.isnan(ratio), np.inf, ratio)
    score = ratio.max(axis=1)
    full = np.asarray(idx >= idx[0] + L - dt)
    if S is not None:
        grid = pd.date_range(idx[full][0], idx[-1], freq=S)
        pos = idx.get_indexer(grid, method="pad")
        on_grid = np.zeros(len(idx), dtype=bool)
        on_grid[pos[pos >= 0]] = True
        full &= on_grid
    score = np.where(full, score, np.inf)
    best = int(np.argmin(score))
    if not np.isfinite(score[best]):
        raise DataError(
            f"No {L} window of the run has at least 2 valid samples of every deciding tag. "
            "Pass tags=[...] to leave out tags that are masked for long stretches.",
            parameter="tags",
        )
    dec_tags = [t for t, d in zip(tags, decides, strict=True) if d]
    worst_tag = dec_tags[int(np.argmax(ratio[best]))]
    t1 = idx[best]
    keep = np.asarray((idx > t1 - L) & (idx <= t1))
    run = cut(
        run,
        keep,
        t1 - L,
        t1,
        f"steadiest_window(length={L}, step={S}) over {int(np.isfinite(score).sum())} "
        f"candidate windows: {fmt_time(t1 - L)} (excl.) to {fmt_time(t1)}, "
        f"score {score[best]:.3g} set by '{worst_tag}'",
    )
    return run
