"""Windows and chunks of :func:`perftest.reconcile_many`: which windows, from what.

A run is a :class:`Run` in memory or run files read a day at a time
(:mod:`perftest.scale.files`); both become a :class:`_Source` with its first and
last sample time, its sampling interval and its plant's time zone.  The windows
(consecutive windows of a fixed length from the plant's midnight, or explicit
``(start, end)`` pairs) are grouped by start into chunks, the unit of work of
the engines.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from perftest.errors import InputError
from perftest.run.core import Run
from perftest.run.windows import _median_step
from perftest.run.windows import sampling_interval as _sampling_interval


@dataclasses.dataclass(frozen=True)
class _Window:
    run: object
    number: int
    start: pd.Timestamp
    end: pd.Timestamp
    min_samples: int


@dataclasses.dataclass(frozen=True)
class _Chunk:
    """Consecutive windows of one run computed together (warm start within)."""

    run_number: int
    begin: pd.Timestamp  # start of the chunk's period
    windows: tuple  # of _Window
    piece: object = None  # scale_files.Piece (run files), else None
    read_kw: tuple = ()


@dataclasses.dataclass
class _Source:
    """One run: in memory (``run``) or run files read a day at a time (``indexes``)."""

    label: object
    number: int
    zone: str
    tz: object
    first: pd.Timestamp
    last: pd.Timestamp
    interval: pd.Timedelta | None
    run: Run | None = None
    indexes: list | None = None
    read_kw: dict = dataclasses.field(default_factory=dict)


def _is_path(value) -> bool:
    return isinstance(value, str | os.PathLike)


def _as_paths(value, label) -> tuple | None:
    """Run files of one run (a path or a list of paths), or None if not files."""
    if _is_path(value):
        return (Path(value),)
    if isinstance(value, Sequence) and value and all(_is_path(v) for v in value):
        return tuple(Path(v) for v in value)
    return None


def _as_runs(run) -> list[tuple[object, object]]:
    """``[(label, Run or tuple of paths), ...]``: label 0 for one run, positions or keys."""
    if isinstance(run, Run):
        return [(0, run)]
    files = _as_paths(run, 0)
    if files is not None:
        return [(0, files)]
    if isinstance(run, Mapping):
        items = list(run.items())
    elif isinstance(run, Sequence) and not isinstance(run, str):
        items = list(enumerate(run))
    else:
        raise InputError(
            "The 'run' parameter of reconcile_many must be a Run, run file path(s), a list of "
            f"Runs or a dict of label -> Run or file path(s). Got {type(run).__name__}.",
            parameter="run",
        )
    if not items:
        raise InputError(
            "The 'run' parameter of reconcile_many holds no run. Pass at least one Run.",
            parameter="run",
        )
    out = []
    for label, r in items:
        files = _as_paths(r, label)
        if files is not None:
            out.append((label, files))
            continue
        if not isinstance(r, Run):
            raise InputError(
                f"The 'run' parameter of reconcile_many must hold Runs or run file paths. "
                f"Entry {label!r} is a {type(r).__name__}.",
                parameter="run",
            )
        if len(r.data) == 0:
            raise InputError(
                f"The 'run' parameter of reconcile_many holds an empty run (entry {label!r}).",
                parameter="run",
            )
        out.append((label, r))
    return out


def _staged(paths, read_kw: dict) -> tuple:
    """Workbooks and Parquet files staged once as text tables, read a day at a time."""
    from perftest.importers import sources

    return tuple(
        sources.stage_file(p, sheet=read_kw.get("sheet")).path if sources.is_staged_kind(p) else p
        for p in paths
    )


def _sources(plant, runs, read_kw: dict) -> list[_Source]:
    from perftest.scale import files as scale_files

    out = []
    for number, (label, r) in enumerate(runs):
        if isinstance(r, Run):
            idx = r.data.index
            out.append(
                _Source(label, number, _zone(r), idx.tz, idx[0], idx[-1], _interval(r), run=r)
            )
            continue
        r = _staged(r, read_kw)
        read_kw = {k: v for k, v in read_kw.items() if k != "sheet"}
        indexes = scale_files.index_files(r, plant, read_kw)
        first, last = scale_files.first_and_last(indexes)
        # the sampling interval from the first day as the importer aligns it
        head = scale_files.piece(indexes, first, first + pd.Timedelta(seconds=1))
        head_run, _ = scale_files.read_piece(head, plant, read_kw)
        zone = getattr(getattr(plant, "site", None), "timezone", None) or "UTC"
        step = _interval(head_run)
        if step is not None and (len(indexes) > 1 or read_kw.get("every") is not None):
            # aligned files: a sample belongs to the next stamp of the time base
            # (read_run's alignment rule), so the last stamp is rounded up to it
            origin = head_run.data.index[0]
            last = origin + -((origin - last) // step) * step
        out.append(
            _Source(
                label, number, zone, first.tz, first, last, _interval(head_run),
                indexes=indexes, read_kw=dict(read_kw),
            )
        )  # fmt: skip
    return out


def _duration(value, name: str = "every") -> pd.Timedelta:
    """``every`` (or ``chunk``) as a positive Timedelta, or an InputError."""
    bad = isinstance(value, bool | int | float | np.number)  # bare numbers have no unit
    td = None
    if not bad:
        try:
            td = pd.Timedelta(value)
        except (TypeError, ValueError):
            bad = True
    if bad or td is None or td is pd.NaT:
        raise InputError(
            f"The '{name}' parameter of reconcile_many must be a duration such as '15min', "
            "'1h' or pd.Timedelta(minutes=15) (months and years are not fixed durations)"
            + (", or a list of (start, end) pairs" if name == "every" else "")
            + f". Got {value!r}.",
            parameter=name,
        )
    if td <= pd.Timedelta(0):
        raise InputError(
            f"The '{name}' parameter of reconcile_many must be a positive duration. Got {value!r}.",
            parameter=name,
        )
    return td


def _is_duration_like(every) -> bool:
    return isinstance(every, str | _dt.timedelta | np.timedelta64 | pd.DateOffset)


def _interval(run: Run) -> pd.Timedelta | None:
    """Median spacing of the samples (None for a single sample)."""
    idx = run.data.index
    if len(idx) < 2:
        return None
    return pd.Timedelta(idx.to_series().diff().median())


def _min_samples(min_samples, length: pd.Timedelta, interval: pd.Timedelta | None) -> int:
    if min_samples is None:
        # Half the samples a full window holds, at least 2 (a spread needs two):
        # a window that is mostly empty (the tail of a run, a logging gap) is
        # reported but not reconciled.  Common practice, no source.
        full = 1 if interval is None else int(length // interval)
        return max(2, math.ceil(full / 2))
    return int(min_samples)


def _check_min_samples(min_samples):
    if min_samples is None:
        return
    if isinstance(min_samples, bool) or not isinstance(min_samples, int | np.integer):
        raise InputError(
            "The 'min_samples' parameter of reconcile_many must be a whole number >= 1 or "
            f"None. Got {min_samples!r}.",
            parameter="min_samples",
        )
    if min_samples < 1:
        raise InputError(
            f"The 'min_samples' parameter of reconcile_many must be >= 1. Got {min_samples}.",
            parameter="min_samples",
        )


# --------------------------------------------------------------------------- chunks


def _timestamp(value, src: _Source, what: str) -> pd.Timestamp:
    try:
        ts = pd.Timestamp(value)
    except (TypeError, ValueError):
        ts = None
    if ts is None or ts is pd.NaT:
        raise InputError(
            f"The 'every' parameter of reconcile_many: {what} must be a time (string or "
            f"Timestamp). Got {value!r}.",
            parameter="every",
        )
    if ts.tz is None:  # read in the plant's zone, as Run.window reads naive times
        ts = ts.tz_localize(src.zone)
    return ts.tz_convert(src.tz)


def _zone(run: Run) -> str:
    """The plant's time zone (UTC without a plant), as :meth:`Run.window` uses it."""
    return getattr(getattr(run.plant, "site", None), "timezone", None) or "UTC"


def _midnight(src: _Source, t: pd.Timestamp) -> pd.Timestamp:
    return t.tz_convert(src.zone).normalize().tz_convert(src.tz)


def _grid(src: _Source, length: pd.Timedelta) -> list[tuple[pd.Timestamp, pd.Timestamp]]:
    """Consecutive windows ``[start, start + length)`` covering the run.

    The first window starts at the run's first sample rounded down to a whole
    multiple of ``length`` counted from that day's midnight in the plant's time
    zone, so 15-minute windows start at :00, :15, :30 and :45 as an engineer
    reading a trend expects.
    """
    midnight = _midnight(src, src.first)
    start = midnight + ((src.first - midnight) // length) * length
    n = int((src.last - start) // length) + 1
    return [(start + k * length, start + (k + 1) * length) for k in range(n)]


def _bounds(src: _Source, every, explicit, length, n_runs):
    if explicit is not None:
        bounds = []
        for k, pair in enumerate(explicit):
            if isinstance(pair, str) or not isinstance(pair, Sequence) or len(pair) != 2:
                raise InputError(
                    "The 'every' parameter of reconcile_many must be a duration or a "
                    f"list of (start, end) pairs. Entry {k} is {pair!r}.",
                    parameter="every",
                )
            t0 = _timestamp(pair[0], src, f"the start of window {k}")
            t1 = _timestamp(pair[1], src, f"the end of window {k}")
            if not t1 > t0:
                raise InputError(
                    f"The 'every' parameter of reconcile_many: window {k} must end after "
                    f"it starts. Got {t0.isoformat()} to {t1.isoformat()}.",
                    parameter="every",
                )
            bounds.append((t0, t1))
    elif length is not None:
        bounds = _grid(src, length)
    else:  # every=None: the whole run as one window
        if src.run is None:
            raise InputError(
                "The 'every' parameter of reconcile_many must be a duration or a list of "
                "windows when the run is given as files (they are read a day at a time). "
                "Got None; read the run with perftest.read_run to reconcile it whole.",
                parameter="every",
            )
        bounds = [(src.first, src.last + (src.interval or pd.Timedelta(1)))]
    for t0, t1 in bounds:
        if src.interval is not None and t1 - t0 < src.interval:
            raise InputError(
                f"The 'every' parameter of reconcile_many gives a window of {t1 - t0}, "
                f"shorter than the run's sampling interval of {src.interval}"
                + (f" (run {src.label!r})" if n_runs > 1 else "")
                + ". Use windows of several samples.",
                parameter="every",
            )
    return bounds


def _chunks(sources, every, min_samples, chunk: pd.Timedelta) -> list[_Chunk]:
    """Every window of every run, grouped in chunks of ``chunk`` (by window start)."""
    from perftest.scale import files as scale_files

    explicit = None
    length = None
    if every is not None and not _is_duration_like(every) and isinstance(every, Sequence):
        explicit = list(every)
        if not explicit:
            raise InputError(
                "The 'every' parameter of reconcile_many holds no window. Give a duration "
                "such as '15min' or at least one (start, end) pair.",
                parameter="every",
            )
    elif every is not None:
        length = _duration(every)
    out = []
    for src in sources:
        bounds = _bounds(src, every, explicit, length, len(sources))
        origin = _midnight(src, min(t0 for t0, _ in bounds))
        groups: dict = {}
        for number, (t0, t1) in enumerate(bounds):
            spec = _Window(
                src.label, number, t0, t1, _min_samples(min_samples, t1 - t0, src.interval)
            )
            groups.setdefault((t0 - origin) // chunk, []).append(spec)
        for j in sorted(groups):
            specs = tuple(groups[j])
            pc = None
            if src.indexes is not None:
                begin = min(s.start for s in specs)
                end = max(s.end for s in specs)
                pc = scale_files.piece(src.indexes, begin, end)
            out.append(
                _Chunk(src.number, origin + j * chunk, specs, pc, tuple(src.read_kw.items()))
            )
    return out


def _cut(run: Run, start, end, lean: bool) -> Run | None:
    """``run.window(start, end)``, or None when no sample falls in the window.

    With ``lean`` the window leaves the raw source tables and the exclusions of other
    times behind (they stay with the original run), so that a window sent to another
    process carries only its own samples, mask and exclusions.  Averaging reads
    neither, so a lean window averages exactly as ``run.window(...)`` does.
    """
    idx = run.data.index
    if not ((idx >= start) & (idx < end)).any():
        return None
    w = run.window(start, end, min_coverage=0.0)  # min_samples screens windows here
    if not lean:
        return w
    ex = w.exclusions
    if len(ex):
        t = pd.to_datetime(ex["time"], utc=True)
        ex = ex[((t >= start) & (t < end)).to_numpy()]
    return Run(
        w.data,
        mask=w.mask,
        exclusions=ex,
        log=w.log,
        plant=w.plant,
        units=w.units,
        quantities=w.quantities,
        start=w.start,
        end=w.end,
    )


def _window_coverage(run) -> float:
    """Sample times holding a valid value over those a window of its length expects."""
    dt = _sampling_interval(run.data.index)
    if not (np.isfinite(dt) and dt > 0) or run.start is None or run.end is None:
        return 1.0
    expected = (run.end - run.start) / pd.Timedelta(seconds=1) / dt
    valid = int((~run.mask.to_numpy().all(axis=1)).sum())
    return valid / expected if expected > 0 else 1.0


# The attributes a Run holds; a run with others (a later addition to Run) is cut the
# slow way, so that nothing of it is lost.
_RUN_FIELDS = frozenset(
    ("plant", "data", "mask", "raw", "exclusions", "log", "quantities", "units", "start", "end")
)


_SECOND = pd.Timedelta(seconds=1)


class _Cutter:
    """The windows of one chunk's run, each equal to ``_cut(run, start, end, lean=False)``.

    ``run.window`` checks its bounds, scans the whole chunk for each window and
    builds the window through :class:`Run`'s checks; here the chunk's times are read
    once, each window is a slice of the (sorted) samples, and the window's Run is
    assembled from the chunk's already checked parts.  The window holds the same
    samples, mask, exclusions, plant, units, quantities, bounds and log line.
    """

    def __init__(self, run: Run):
        from perftest.run.common import fmt_time

        self.run = run
        self._fmt = fmt_time
        idx = run.data.index
        # int64 [ns] since the epoch (UTC for zoned times), whatever the index's unit
        self.ns = idx.as_unit("ns").asi8
        # the index's own ticks and unit, for sampling intervals as sampling_interval
        self.ticks, self.unit = idx.asi8, idx.unit
        self.fast = set(vars(run)) <= _RUN_FIELDS
        self.dt = _median_step(self.ticks, self.unit)
        self.masked = run.mask.to_numpy()
        self.any_valid = ~self.masked.all(axis=1)

    def _ns(self, t: pd.Timestamp) -> int:
        return pd.Timestamp(t).as_unit("ns").value

    def __call__(self, start, end) -> tuple[Run | None, float]:
        """``(window or None, coverage)``; coverage as ``_window_coverage`` gives it."""
        run = self.run
        if not self.fast:
            w = _cut(run, start, end, lean=False)
            if w is None:
                return None, 1.0
            return w, _window_coverage(w)
        ns = self.ns
        i0 = int(ns.searchsorted(self._ns(start), side="left"))
        i1 = int(ns.searchsorted(self._ns(end), side="left"))
        if i1 <= i0:
            return None, 1.0
        t0, t1 = pd.Timestamp(start), pd.Timestamp(end)
        dt = self.dt
        n_valid = int(self.any_valid[i0:i1].sum())
        span = (t1 - t0) / _SECOND
        if np.isfinite(dt) and dt > 0:
            expected = span / dt
            share = float(n_valid / expected) if expected > 0 else 1.0
        else:
            share = 1.0
        fmt = self._fmt
        w = object.__new__(Run)
        w.plant = run.plant
        w.data = run.data.iloc[i0:i1]
        w.mask = run.mask.iloc[i0:i1]
        w.raw = run.raw
        w.exclusions = run.exclusions
        w.log = [
            *run.log,
            f"window {fmt(t0)} to {fmt(t1)} (coverage {share:.1%}): {i1 - i0} of "
            f"{len(self.ns)} samples kept, {int(self.masked[i0:i1].sum())} masked in the window",
        ]
        w.quantities = dict(run.quantities)
        w.units = dict(run.units)
        w.start, w.end = t0, t1
        # the window's own coverage: its own sampling interval, as _window_coverage
        own = _median_step(self.ticks[i0:i1], self.unit)
        if not (np.isfinite(own) and own > 0):
            return w, 1.0
        expected = span / own
        return w, (n_valid / expected if expected > 0 else 1.0)
