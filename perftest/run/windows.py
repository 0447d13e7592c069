"""Windows of a run: the time bounds a user states, and cutting a run to them.

The functions take a :class:`~perftest.run.core.Run` and return a new one; ``Run.window``
calls :func:`window`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perftest.defaults import MIN_COVERAGE
from perftest.errors import DataError, InputError
from perftest.run.common import column_list, fmt_time

__all__ = [
    "window",
    "cut",
    "timestamp",
    "to_timedelta",
    "duration_seconds",
    "sampling_interval",
    "coverage",
    "check_min_coverage",
]


def sampling_interval(times) -> float:
    """Nominal sampling interval [s]: the median step between consecutive times.

    NaN for fewer than two times.  The median ignores gaps and the odd late stamp.
    """
    times = pd.DatetimeIndex(times)
    if len(times) < 2:
        return float("nan")
    return _median_step(times.asi8, times.unit)


# ticks of one second in each unit a DatetimeIndex may have
_PER_SECOND = {"s": 1, "ms": 1_000, "us": 1_000_000, "ns": 1_000_000_000}


def _median_step(ticks: np.ndarray, unit: str) -> float:
    """Median step [s] of int64 times ``ticks`` in ``unit`` ("s", "ms", "us", "ns").

    The same float as ``np.median(np.diff((times - times[0]) / pd.Timedelta(seconds=1)))``
    (which divides the integer ticks, as doubles, by the ticks of a second) without
    building the intermediate index.
    """
    if len(ticks) < 2:
        return float("nan")
    t = (ticks - ticks[0]) / _PER_SECOND[unit]
    steps = np.diff(t)
    if steps[0] == steps[-1] and (steps == steps[0]).all():
        return float(steps[0])  # a regular clock: the median is the step (even as a mean of two)
    return float(np.median(steps))


def _seconds(idx: pd.DatetimeIndex) -> np.ndarray:
    """Seconds since the first time [s], as ``(idx - idx[0]) / pd.Timedelta(seconds=1)``.

    The same doubles (the integer ticks since the first, divided as doubles by the
    ticks of a second) without building a TimedeltaIndex.
    """
    ticks = idx.asi8
    return (ticks - ticks[0]) / _PER_SECOND[idx.unit]  # (IndexError without times, as idx[0])


def coverage(run, tags=None, *, interval=None) -> pd.Series:
    """Share of the expected samples that each tag holds in the run's window.

    Parameters
    ----------
    run : Run
        The run (or window) to work on.
    tags : list of str, optional
        Tags (default all).
    interval : float, optional
        Sampling interval [s] to expect.  Default: per tag, the median step between
        its valid samples in the window (the run's median step when it has fewer
        than two), so a tag logged every 10 min among 1 min tags is not penalised.

    Returns
    -------
    Series
        Valid samples / expected samples per tag (dimensionless, may exceed 1 a
        little on an irregular clock).

    Notes
    -----
    Expected samples = window length / interval, the window length being
    ``end - start`` of a cut window ([start, end), see :func:`window`) and, for a
    run that was not cut, last minus first stamp plus one interval.
    """
    tags = column_list(run.data.columns) if tags is None else list(tags)
    if column_list(run.mask.columns) == tags:
        valid = ~run.mask.to_numpy()  # every tag in order: no column selection
    else:
        valid = ~run.mask[tags].to_numpy()
    shares = _coverage(run, valid, interval).tolist()
    return pd.Series(dict(zip(tags, shares, strict=True)), dtype=float, name="coverage")


def _coverage(run, valid: np.ndarray, interval=None) -> np.ndarray:
    """:func:`coverage` of the tags whose valid samples are the columns of ``valid``."""
    idx = run.data.index
    ticks, unit = idx.asi8, idx.unit
    counts = valid.sum(axis=0)
    n, k = valid.shape
    by_dt: dict = {}  # interval -> the tags (positions) sampled at it
    if interval is not None:
        by_dt[interval] = list(range(k))
    else:
        run_dt = _median_step(ticks, unit)
        gappy = np.flatnonzero((counts < n) & (counts >= 2))  # gaps: the tag's own step
        dts = [run_dt] * k
        for j in gappy:
            own = _median_step(ticks[valid[:, j]], unit)
            dts[j] = own if np.isfinite(own) else run_dt
        if not gappy.size:
            by_dt[run_dt] = list(range(k))
        else:
            for j, dt in enumerate(dts):
                by_dt.setdefault(dt, []).append(j)
    out = np.empty(k)
    for dt, cols in by_dt.items():
        if not (dt and np.isfinite(dt) and dt > 0):
            out[cols] = np.where(counts[cols] > 0, 1.0, 0.0)  # one sample: nothing to compare with
            continue
        e = _expected(run, idx, dt)
        out[cols] = counts[cols] / e if e > 0 else np.nan
    return out


def _expected(run, idx, dt: float) -> float:
    """Samples a tag sampled every ``dt`` seconds holds in the run's window."""
    if run.start is not None and run.end is not None:
        span = (run.end - run.start) / pd.Timedelta(seconds=1)
    else:
        lo = run.start if run.start is not None else (idx[0] if len(idx) else None)
        hi = run.end if run.end is not None else (idx[-1] + pd.Timedelta(seconds=dt))
        span = (hi - lo) / pd.Timedelta(seconds=1) if lo is not None else 0.0
    return span / dt


def check_min_coverage(min_coverage, func: str) -> float:
    """``min_coverage`` (None: the default) checked to lie in [0, 1]."""
    value = MIN_COVERAGE if min_coverage is None else min_coverage
    ok = isinstance(value, int | float | np.floating) and not isinstance(value, bool)
    if not ok or not (0.0 <= float(value) <= 1.0):
        raise InputError(
            f"The 'min_coverage' parameter of Run.{func} must be a fraction in [0, 1]. "
            f"Got {min_coverage!r}.",
            parameter="min_coverage",
        )
    return float(value)


def timestamp(run, t, name: str, func: str) -> pd.Timestamp | None:
    """``t`` as a Timestamp in the run's zone (naive: plant zone); None stays None."""
    if t is None:
        return None
    try:
        ts = pd.Timestamp(t)
    except (TypeError, ValueError):
        raise InputError(
            f"The '{name}' parameter of Run.{func} must be a time (string or Timestamp). "
            f"Got {t!r}.",
            parameter=name,
        ) from None
    if ts is pd.NaT:
        raise InputError(
            f"The '{name}' parameter of Run.{func} must be a time. Got NaT.", parameter=name
        )
    if ts.tz is None:
        try:
            ts = ts.tz_localize(run._default_tz(), ambiguous="raise", nonexistent="raise")
        except Exception as exc:  # pytz/pandas NonExistentTimeError, AmbiguousTimeError
            tz = run._default_tz()
            offsets = [(ts + pd.Timedelta(hours=h)).tz_localize(tz).strftime("%z") for h in (-6, 6)]
            offsets = [f"{o[:3]}:{o[3:]}" for o in offsets]
            twice = "nonexistent" not in str(exc)
            raise InputError(
                f"The '{name}' parameter of Run.{func} is {t!r}, a local time that "
                f"{'occurs twice' if twice else 'does not exist'} in time zone {tz} "
                f"(a clock change). Give it with its UTC offset, e.g. "
                f"'{ts.isoformat()}{offsets[0]}' or '{ts.isoformat()}{offsets[1]}'.",
                parameter=name,
            ) from None
    return ts.tz_convert(run.data.index.tz)


def to_timedelta(run, value, name: str) -> pd.Timedelta:
    """``value`` as a positive Timedelta, or an InputError naming ``name``."""
    try:
        td = pd.Timedelta(value)
    except (TypeError, ValueError):
        raise InputError(
            f"The '{name}' parameter of Run.steadiest_window must be a duration such as "
            f"'2h' or '30min'. Got {value!r}.",
            parameter=name,
        ) from None
    if td is pd.NaT or td <= pd.Timedelta(0):
        raise InputError(
            f"The '{name}' parameter of Run.steadiest_window must be a positive duration. "
            f"Got {value!r}.",
            parameter=name,
        )
    return td


def window(run, start=None, end=None, *, min_coverage=None):
    """The samples with ``start <= time < end``.

    Parameters
    ----------
    start, end : str or Timestamp, optional
        Window bounds.  Times without a zone are read in the plant's time
        zone (UTC without a plant).  None: from the first / to the last sample.
    min_coverage : float, optional
        Smallest share of the expected sample times that must hold at least one
        valid sample (default :data:`perftest.defaults.MIN_COVERAGE`, 0.8).  The
        expected count is the window length over the run's sampling interval
        (median step of the whole run).  0 accepts any window.

    Returns
    -------
    Run
        Same tags, mask and raw data; ``exclusions`` and ``log`` are kept whole
        and the cut (with its coverage) is logged.

    Raises
    ------
    InputError
        If a bound is not a time, ``end <= start``, or no sample falls in the window.
    DataError
        If the window's coverage is below ``min_coverage`` (a gap, or a window
        running past the data); the message names the window and the coverage.

    Notes
    -----
    Windows are half-open, ``[start, end)``, everywhere in perftest: a stated
    window and a steadiest window with the same bounds hold the same samples, and
    windows laid end to end share none.  Each tag's own coverage is checked again
    by :func:`perftest.run.averaging.average`.
    """
    t0 = timestamp(run, start, "start", "window")
    t1 = timestamp(run, end, "end", "window")
    if t0 is not None and t1 is not None and not t1 > t0:
        raise InputError(
            f"The 'end' parameter of Run.window must be later than 'start'. Got start "
            f"{fmt_time(t0)}, end {fmt_time(t1)}.",
            parameter="end",
        )
    idx = run.data.index
    keep = np.ones(len(idx), dtype=bool)
    if t0 is not None:
        keep &= idx >= t0
    if t1 is not None:
        keep &= idx < t1
    if not keep.any():
        raise InputError(
            f"No sample of the run falls in the window {fmt_time(t0)} to {fmt_time(t1)}. "
            f"The run covers {fmt_time(idx[0]) if len(idx) else '-'} to "
            f"{fmt_time(idx[-1]) if len(idx) else '-'}.",
            parameter="start",
        )
    limit = check_min_coverage(min_coverage, "window")
    dt = sampling_interval(idx)
    lo = t0 if t0 is not None else idx[0]
    hi = t1 if t1 is not None else idx[-1] + pd.Timedelta(seconds=dt if np.isfinite(dt) else 0)
    any_valid = ~run.mask.to_numpy()[keep].all(axis=1)
    if np.isfinite(dt) and dt > 0:
        expected = (hi - lo) / pd.Timedelta(seconds=1) / dt
        share = float(any_valid.sum() / expected) if expected > 0 else 1.0
    else:
        expected, share = float(any_valid.sum()), 1.0
    if share < limit:
        raise DataError(
            f"The window {fmt_time(t0)} to {fmt_time(t1)} holds valid samples at "
            f"{int(any_valid.sum())} of the {expected:.0f} expected times (coverage "
            f"{share:.0%}, below the minimum {limit:.0%}; sampling interval {dt:g} s). "
            "The data have a gap there or end before the window does: choose another "
            "window, or pass min_coverage= to accept it.",
        )
    return cut(
        run,
        keep,
        t0,
        t1,
        f"window {fmt_time(t0)} to {fmt_time(t1)} (coverage {share:.1%})",
    )


def cut(run, keep: np.ndarray, t0, t1, what: str):
    """A new run holding the samples where ``keep`` is True (bounds t0, t1), cut logged."""
    data = run.data.iloc[keep]
    mask = run.mask.iloc[keep]
    log = list(run.log)
    log.append(
        f"{what}: {int(keep.sum())} of {len(keep)} samples kept, "
        f"{int(mask.to_numpy().sum())} masked in the window"
    )
    return run._replace(data=data, mask=mask, log=log, start=t0, end=t1)


def duration_seconds(run) -> float:
    """Window length used to turn a slope into a drift [s]."""
    idx = run.data.index
    if len(idx) < 2:
        return 0.0
    # (idx[-1] - idx[0]) / pd.Timedelta(seconds=1): the ticks between, as a double,
    # over the ticks of a second
    ticks = idx.asi8
    return float((ticks[-1] - ticks[0]) / _PER_SECOND[idx.unit])
