"""Windows of a run: the time bounds a user states, and cutting a run to them.

The functions take a :class:`~perftest.run.core.Run` and return a new one; ``Run.window``
calls :func:`window`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perftest.errors import InputError
from perftest.run.common import fmt_time

__all__ = ["window", "cut", "timestamp", "to_timedelta", "duration_seconds"]


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
        ts = ts.tz_localize(run._default_tz())
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


def window(run, start=None, end=None):
    """The samples with ``start <= time < end``.

    Parameters
    ----------
    start, end : str or Timestamp, optional
        Window bounds.  Times without a zone are read in the plant's time
        zone (UTC without a plant).  None: from the first / to the last sample.

    Returns
    -------
    Run
        Same tags, mask and raw data; ``exclusions`` and ``log`` are kept whole
        and the cut is logged.

    Raises
    ------
    InputError
        If a bound is not a time, ``end <= start``, or no sample falls in the window.
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
    return cut(run, keep, t0, t1, f"window {fmt_time(t0)} to {fmt_time(t1)}")


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
    return float((idx[-1] - idx[0]) / pd.Timedelta(seconds=1))
