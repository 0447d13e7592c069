"""Many windows, many runs: one reconciliation per window, gathered in a table.

:func:`reconcile_many` cuts one or several runs into windows (consecutive windows
of a fixed length, or windows given as ``(start, end)`` pairs), averages each
window, reconciles it against the plant's balances and, optionally, evaluates the
performance results.  Each window becomes one row of a DataFrame: its global test,
its suspect instruments, the key results with their standard uncertainty, and, for
a window that could not be used, the reason.

Two engines compute the same rows:

``"local"``
    a plain loop in this process (pandas only);
``"dask"``
    one :func:`dask.delayed` task per window, computed by a local Dask scheduler
    (processes by default) or by a ``distributed.Client``.  Install with
    ``pip install "perftest[scale]"``.

Both call the same per-window function on the same window data, so their tables
are identical, value for value.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import math
import threading
import warnings
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from perftest.errors import InputError, PerftestError
from perftest.run import Run

__all__ = ["reconcile_many", "ENGINES", "KEY_RESULTS", "TABLE_COLUMNS"]

#: Engines that :func:`reconcile_many` accepts.
ENGINES = ("local", "dask")

#: Results reported per window when ``results=True`` (with every ``corrected_*``
#: result the plant defines).
KEY_RESULTS = (
    "net_power",
    "heat_input",
    "first_law_efficiency",
    "heat_rate",
    "carnot_efficiency",
    "second_law_efficiency",
)

#: Columns every table starts with, in this order; result columns (``<name>``,
#: ``u_<name>``) and ``warnings`` follow.
TABLE_COLUMNS = (
    "run",
    "window",
    "start",
    "end",
    "n_samples",
    "status",
    "reason",
    "chi2",
    "dof",
    "p_value",
    "passed",
    "converged",
    "iterations",
    "n_suspects",
    "suspects",
    "eliminated",
)

# Dask's own names for its local schedulers (dask.base.named_schedulers).
_DASK_SCHEDULERS = (
    "processes",
    "multiprocessing",
    "threads",
    "threading",
    "sync",
    "synchronous",
    "single-threaded",
)

# A window whose averaging, reconciliation or evaluation raises one of these gets
# a row with the reason.  Anything else is a programming error and propagates.
_EXPECTED_FAILURES = (PerftestError, np.linalg.LinAlgError, ArithmeticError)

# perftest's property objects share one CoolProp state per fluid and process, which
# must not be used by two threads at once (see perftest.properties).  Every window
# is therefore computed under this per-process lock: threads of one process take
# turns, separate processes (Dask's default here) run in parallel.
_WINDOW_LOCK = threading.Lock()


@dataclasses.dataclass(frozen=True)
class _Options:
    eliminate: bool
    alpha: float
    results: tuple | None  # None: no evaluation; () : the key results
    screen_outliers: bool
    on_error: str


@dataclasses.dataclass(frozen=True)
class _Window:
    run: object
    number: int
    start: pd.Timestamp
    end: pd.Timestamp
    min_samples: int


# --------------------------------------------------------------------------- checks


def _check_engine(engine, scheduler):
    if engine not in ENGINES:
        raise InputError(
            f"The 'engine' parameter of reconcile_many must be one of {list(ENGINES)}. "
            f"Got {engine!r}.",
            parameter="engine",
        )
    if engine == "local" and scheduler is not None:
        raise InputError(
            "The 'scheduler' parameter of reconcile_many is only used with engine='dask'. "
            f"Got scheduler={scheduler!r} with engine='local'.",
            parameter="scheduler",
        )
    if isinstance(scheduler, str) and scheduler.lower() not in _DASK_SCHEDULERS:
        raise InputError(
            "The 'scheduler' parameter of reconcile_many must be None, a distributed Client "
            f"or one of {list(_DASK_SCHEDULERS)}. Got {scheduler!r}.",
            parameter="scheduler",
        )


def _import_dask():
    try:
        import dask
    except ImportError:
        raise InputError(
            "reconcile_many(engine='dask') needs Dask, which is not installed. Install it "
            'with pip install "perftest[scale]", or use engine="local".',
            parameter="engine",
        ) from None
    return dask


def _resolve_scheduler(dask, scheduler):
    """The scheduler passed to ``dask.compute``.

    An explicit choice wins.  Otherwise a scheduler set in Dask's configuration or an
    active ``distributed`` client is used, as Dask itself would; failing both, the
    local processes scheduler, the only local one that computes windows in parallel
    here (windows of one process take turns, see ``_WINDOW_LOCK``).
    """
    if scheduler is not None:
        return scheduler
    if dask.config.get("scheduler", None) is not None:
        return None
    try:
        from distributed import default_client

        return default_client()
    except (ImportError, ValueError):
        return "processes"


def _as_runs(run) -> list[tuple[object, Run]]:
    """``[(label, Run), ...]``: label 0 for one run, positions or mapping keys."""
    if isinstance(run, Run):
        return [(0, run)]
    if isinstance(run, Mapping):
        items = list(run.items())
    elif isinstance(run, Sequence) and not isinstance(run, str):
        items = list(enumerate(run))
    else:
        raise InputError(
            "The 'run' parameter of reconcile_many must be a Run, a list of Runs or a dict "
            f"of label -> Run. Got {type(run).__name__}.",
            parameter="run",
        )
    if not items:
        raise InputError(
            "The 'run' parameter of reconcile_many holds no run. Pass at least one Run.",
            parameter="run",
        )
    for label, r in items:
        if not isinstance(r, Run):
            raise InputError(
                f"The 'run' parameter of reconcile_many must hold Runs. Entry {label!r} is a "
                f"{type(r).__name__}.",
                parameter="run",
            )
        if len(r.data) == 0:
            raise InputError(
                f"The 'run' parameter of reconcile_many holds an empty run (entry {label!r}).",
                parameter="run",
            )
    return items


def _duration(value) -> pd.Timedelta:
    """``every`` as a positive Timedelta, or an InputError."""
    bad = isinstance(value, bool | int | float | np.number)  # bare numbers have no unit
    td = None
    if not bad:
        try:
            td = pd.Timedelta(value)
        except (TypeError, ValueError):
            bad = True
    if bad or td is None or td is pd.NaT:
        raise InputError(
            "The 'every' parameter of reconcile_many must be a duration such as '15min', "
            "'1h' or pd.Timedelta(minutes=15) (months and years are not fixed durations), "
            f"or a list of (start, end) pairs. Got {value!r}.",
            parameter="every",
        )
    if td <= pd.Timedelta(0):
        raise InputError(
            f"The 'every' parameter of reconcile_many must be a positive duration. Got {value!r}.",
            parameter="every",
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


def _timestamp(value, run: Run, what: str) -> pd.Timestamp:
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
        ts = ts.tz_localize(_zone(run))
    return ts.tz_convert(run.data.index.tz)


def _zone(run: Run) -> str:
    """The plant's time zone (UTC without a plant), as :meth:`Run.window` uses it."""
    return getattr(getattr(run.plant, "site", None), "timezone", None) or "UTC"


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


def _has_performance(plant) -> bool:
    sections = getattr(plant, "sections", None) or {}
    return bool(sections.get("performance"))


def _check_results(results) -> tuple | None:
    if results is False or results is None:
        return None
    if results is True:
        return ()
    names = [results] if isinstance(results, str) else results
    if not isinstance(names, Sequence) or not all(isinstance(n, str) for n in names):
        raise InputError(
            "The 'results' parameter of reconcile_many must be True, False or a list of "
            f"result names. Got {results!r}.",
            parameter="results",
        )
    from perftest.results import RESULT_UNITS

    unknown = [n for n in names if n.removeprefix("corrected_") not in RESULT_UNITS]
    if unknown:
        raise InputError(
            f"The 'results' parameter of reconcile_many names unknown results {unknown}. "
            f"Known: {sorted(RESULT_UNITS)} and 'corrected_<name>' for corrected ones.",
            parameter="results",
        )
    return tuple(names)


# --------------------------------------------------------------------------- windows


def _grid(run: Run, length: pd.Timedelta) -> list[tuple[pd.Timestamp, pd.Timestamp]]:
    """Consecutive windows ``[start, start + length)`` covering the run.

    The first window starts at the run's first sample rounded down to a whole
    multiple of ``length`` counted from that day's midnight in the plant's time
    zone, so 15-minute windows start at :00, :15, :30 and :45 as an engineer
    reading a trend expects.
    """
    idx = run.data.index
    first, last = idx[0], idx[-1]
    midnight = first.tz_convert(_zone(run)).normalize().tz_convert(idx.tz)
    start = midnight + ((first - midnight) // length) * length
    out = []
    while start <= last:
        out.append((start, start + length))
        start = start + length
    return out


def _windows(runs, every, min_samples, lean: bool) -> list[tuple[_Window, Run | None]]:
    """Every window of every run with its slice of the run (lean: without raw tables)."""
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
    for label, run in runs:
        interval = _interval(run)
        if explicit is not None:
            bounds = []
            for k, pair in enumerate(explicit):
                if isinstance(pair, str) or not isinstance(pair, Sequence) or len(pair) != 2:
                    raise InputError(
                        "The 'every' parameter of reconcile_many must be a duration or a "
                        f"list of (start, end) pairs. Entry {k} is {pair!r}.",
                        parameter="every",
                    )
                t0 = _timestamp(pair[0], run, f"the start of window {k}")
                t1 = _timestamp(pair[1], run, f"the end of window {k}")
                if not t1 > t0:
                    raise InputError(
                        f"The 'every' parameter of reconcile_many: window {k} must end after "
                        f"it starts. Got {t0.isoformat()} to {t1.isoformat()}.",
                        parameter="every",
                    )
                bounds.append((t0, t1))
        elif length is not None:
            bounds = _grid(run, length)
        else:  # every=None: the whole run as one window
            bounds = [(run.data.index[0], run.data.index[-1] + (interval or pd.Timedelta(1)))]
        for t0, t1 in bounds:
            if interval is not None and t1 - t0 < interval:
                raise InputError(
                    f"The 'every' parameter of reconcile_many gives a window of {t1 - t0}, "
                    f"shorter than the run's sampling interval of {interval}"
                    + (f" (run {label!r})" if len(runs) > 1 else "")
                    + ". Use windows of several samples.",
                    parameter="every",
                )
        for number, (t0, t1) in enumerate(bounds):
            spec = _Window(label, number, t0, t1, _min_samples(min_samples, t1 - t0, interval))
            out.append((spec, _cut(run, t0, t1, lean)))
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
    w = run.window(start, end)
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


# --------------------------------------------------------------------------- one window


def _window_row(plant, run: Run | None, spec: _Window, options: _Options) -> dict:
    """The table row of one window; the single code path of both engines."""
    with _WINDOW_LOCK, warnings.catch_warnings(record=True) as caught:
        # "always": every warning of this window is recorded, whatever the
        # process's warning registry has already seen, so the row does not depend
        # on which window a process happened to compute first.
        warnings.simplefilter("always")
        row = _compute_row(plant, run, spec, options)
    seen = []
    for w in caught:
        text = f"{w.category.__name__}: {w.message}"
        if text not in seen:
            seen.append(text)
    row["warnings"] = " | ".join(seen)
    return row


def _compute_row(plant, run, spec, options) -> dict:
    from perftest.model import reconcile

    row = {
        "run": spec.run,
        "window": spec.number,
        "start": spec.start,
        "end": spec.end,
        "n_samples": 0 if run is None else len(run.data),
        "status": "skipped",
        "reason": "",
    }
    if run is None:
        row["reason"] = "no sample in the window"
        return row
    if row["n_samples"] < spec.min_samples:
        row["reason"] = (
            f"{row['n_samples']} sample(s) in the window, fewer than min_samples={spec.min_samples}"
        )
        return row
    stage = "average"
    try:
        if options.screen_outliers:
            run = run.screen_outliers()
        measurements = run.average()
        stage = "reconcile"
        rec = reconcile(plant, measurements, eliminate=options.eliminate, alpha=options.alpha)
        gt = rec.global_test
        table = rec.to_frame()
        suspects = [str(t) for t in table.loc[table["suspect"].astype(bool), "tag"]]
        row.update(
            chi2=gt["chi2"],
            dof=gt["dof"],
            p_value=gt["p_value"],
            passed=gt["passed"],
            converged=bool(rec.result.converged),
            iterations=int(rec.result.iterations),
            n_suspects=len(suspects),
            suspects=", ".join(suspects),
            eliminated=", ".join(e.tag for e in rec.eliminated),
        )
        if options.results is not None:
            from perftest.results import evaluate

            stage = "evaluate"
            # Linear propagation only: the Monte Carlo check belongs to the
            # detailed evaluation of a chosen window, not to a screening table.
            perf = evaluate(plant, rec, monte_carlo=False)
            names = options.results or (
                *KEY_RESULTS,
                *(n for n in perf.results.index if str(n).startswith("corrected_")),
            )
            for name in names:
                if name in perf.results.index:
                    row[name] = float(perf.results.loc[name, "value"])
                    row[f"u_{name}"] = float(perf.results.loc[name, "u"])
        row["status"] = "ok"
    except _EXPECTED_FAILURES as exc:
        if options.on_error == "raise":
            raise
        row["status"] = "failed"
        row["reason"] = f"{stage}: {type(exc).__name__}: {exc}"
    return row


# --------------------------------------------------------------------------- table


def _table(rows: list[dict], results: tuple | None) -> pd.DataFrame:
    frame = pd.DataFrame(rows)
    for col in TABLE_COLUMNS:
        if col not in frame.columns:
            frame[col] = None
    extra = [c for c in frame.columns if c not in TABLE_COLUMNS and c != "warnings"]
    if results:  # the order the caller asked for
        order = [c for n in results for c in (n, f"u_{n}") if c in extra]
        extra = order + [c for c in extra if c not in order]
    frame = frame[[*TABLE_COLUMNS, *extra, "warnings"]].copy()

    # Columns are filled cell by cell (missing values may be None, NaN or NA) so that
    # the dtypes do not depend on which windows failed.
    def cells(col, cast, missing, dtype):
        values = [missing if pd.isna(v) else cast(v) for v in frame[col]]
        return pd.array(values, dtype=dtype) if len(values) else pd.array([], dtype=dtype)

    for col in ("window", "n_samples"):
        frame[col] = frame[col].astype("int64")
    for col in ("chi2", "p_value", *extra):
        frame[col] = np.asarray(cells(col, float, np.nan, "float64"))
    for col in ("dof", "iterations", "n_suspects"):
        frame[col] = cells(col, int, pd.NA, "Int64")
    for col in ("passed", "converged"):
        frame[col] = cells(col, bool, pd.NA, "boolean")
    for col in ("status", "reason", "suspects", "eliminated", "warnings"):
        frame[col] = cells(col, str, "", "str")
    return frame


def reconcile_many(
    plant,
    run,
    every="15min",
    *,
    engine: str = "local",
    results=True,
    eliminate: bool = False,
    alpha: float = 0.05,
    min_samples: int | None = None,
    screen_outliers: bool = False,
    scheduler=None,
    on_error: str = "row",
) -> pd.DataFrame:
    """Reconcile many windows of one or several runs; one table row per window.

    Parameters
    ----------
    plant : perftest.plantfile.Plant
        The plant whose balances every window is reconciled against.
    run : Run, list of Run or dict of label -> Run
        The run(s).  The ``run`` column of the table holds 0 for a single run, the
        position in a list, or the dict key.
    every : str, Timedelta, list of (start, end) pairs or None, default "15min"
        Window length (consecutive windows ``[start, start + every)``, the first
        starting at the first sample rounded down to a multiple of ``every`` from
        midnight in the plant's time zone), or explicit windows (times without a
        zone are read in the plant's time zone, as :meth:`Run.window` reads them;
        the same windows are cut from every run), or None for each run whole.
    engine : {"local", "dask"}, default "local"
        ``"local"``: a loop in this process.  ``"dask"``: one Dask task per window.
    results : bool or list of str, default True
        Also evaluate the performance results (:func:`perftest.evaluate`, linear
        propagation) and report ``<name>`` and ``u_<name>`` [SI]: with True the
        :data:`KEY_RESULTS` and every ``corrected_*`` result (when the plant file
        has a ``[performance]`` table; without one, True reconciles only), or the
        names given.
    eliminate : bool, default False
        Serial elimination of suspect measurements in each window (as in
        :func:`perftest.reconcile`).
    alpha : float, default 0.05
        Significance level of the global and measurement tests.
    min_samples : int, optional
        Fewest samples a window must hold to be reconciled.  Default: half the
        samples a full window holds at the run's median sampling interval, at
        least 2.  Windows with fewer get a row with status ``"skipped"``.
    screen_outliers : bool, default False
        Screen each window with :meth:`Run.screen_outliers` before averaging.
    scheduler : str or distributed.Client, optional
        Only with ``engine="dask"``: a Dask local scheduler name (``"processes"``,
        ``"threads"``, ``"sync"``) or a ``distributed.Client``.  Default: the
        scheduler set in Dask's configuration, else the active ``distributed``
        client, else ``"processes"``.
    on_error : {"row", "raise"}, default "row"
        What a window whose averaging, reconciliation or evaluation fails does:
        give a row with status ``"failed"`` and the reason, or raise.

    Returns
    -------
    pandas.DataFrame
        One row per window, in run then time order, with columns
        :data:`TABLE_COLUMNS`: ``run``, ``window`` (number within its run),
        ``start``, ``end``, ``n_samples`` (sample stamps in the window), ``status``
        (``"ok"``, ``"skipped"``, ``"failed"``), ``reason`` (empty when ok),
        ``chi2``, ``dof``, ``p_value``, ``passed`` (global test after any
        elimination), ``converged``, ``iterations``, ``n_suspects``, ``suspects``
        (comma-separated tags flagged by the measurement test or eliminated),
        ``eliminated``; then ``<result>, u_<result>`` [SI]; then ``warnings``
        (the warnings raised while computing the window, one per distinct text).

    Raises
    ------
    InputError
        Unknown engine, Dask asked for but not installed, ``every`` not a duration
        nor a list of windows, a window shorter than the sampling interval, bad
        ``min_samples``, ``alpha``, ``results``, ``scheduler`` or ``on_error``.

    Notes
    -----
    Every window is computed by the same function on the same window data whatever
    the engine, so ``engine="dask"`` returns exactly the table of ``engine="local"``.

    perftest's CoolProp property objects are shared within a process and are not
    thread-safe, so windows of one process are computed one at a time; parallel
    speed comes from processes (Dask's ``"processes"`` scheduler, the default
    here, or the worker processes of a ``distributed`` cluster).  The processes
    scheduler starts fresh Python processes for every call, each importing
    perftest, CoolProp and scipy and building the plant model: a script using it
    must guard its entry point with ``if __name__ == "__main__":``, and it pays off
    only on jobs much longer than that start-up (benchmarks/bench_scale.py).  For
    repeated calls keep a ``distributed.Client`` of worker processes open and pass
    it as ``scheduler``.

    Warnings raised inside a window are caught and listed in its ``warnings``
    column instead of being shown once per window.

    Examples
    --------
    >>> import perftest  # doctest: +SKIP
    >>> plant = perftest.load_plant("sample_data/brackenfold/plant.toml")  # doctest: +SKIP
    >>> run = perftest.read_run(["historian.csv", "logger.csv"], plant)  # doctest: +SKIP
    >>> table = perftest.reconcile_many(plant, run, every="15min")  # doctest: +SKIP
    >>> table[["start", "chi2", "p_value", "passed", "suspects"]]  # doctest: +SKIP
    """
    _check_engine(engine, scheduler)
    if not (isinstance(alpha, float | int) and 0.0 < float(alpha) < 1.0):
        raise InputError(
            f"The 'alpha' parameter of reconcile_many must be between 0 and 1. Got {alpha!r}.",
            parameter="alpha",
        )
    if on_error not in ("row", "raise"):
        raise InputError(
            f"The 'on_error' parameter of reconcile_many must be 'row' or 'raise'. Got "
            f"{on_error!r}.",
            parameter="on_error",
        )
    _check_min_samples(min_samples)
    options = _Options(
        eliminate=bool(eliminate),
        alpha=float(alpha),
        results=_check_results(results),
        screen_outliers=bool(screen_outliers),
        on_error=on_error,
    )
    if options.results is not None and not _has_performance(plant):
        if options.results:
            raise InputError(
                f"The 'results' parameter of reconcile_many asks for {list(options.results)}, "
                "but the plant file has no [performance] table to evaluate them from. Add "
                "one, or pass results=False.",
                parameter="results",
            )
        # results=True on a plant without [performance]: reconcile only
        options = dataclasses.replace(options, results=None)
    runs = _as_runs(run)
    dask = _import_dask() if engine == "dask" else None
    windows = _windows(runs, every, min_samples, lean=engine == "dask")

    if engine == "local":
        rows = [_window_row(plant, w, spec, options) for spec, w in windows]
    else:
        # traverse=False: the plant and the window specs are dataclasses, which
        # Dask would otherwise take apart and rebuild field by field.
        def lit(value):
            return dask.delayed(value, traverse=False)

        task = dask.delayed(_window_row, pure=False)
        plant_d, options_d = lit(plant), lit(options)
        tasks = [task(plant_d, lit(w), lit(spec), options_d) for spec, w in windows]
        rows = list(dask.compute(*tasks, scheduler=_resolve_scheduler(dask, scheduler)))
    return _table(rows, options.results)
