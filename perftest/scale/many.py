"""Many windows, many runs: one reconciliation per window, gathered in a table.

:func:`reconcile_many` cuts one or several runs into windows (consecutive windows
of a fixed length, or windows given as ``(start, end)`` pairs), averages each
window, reconciles it against the plant's balances and, optionally, evaluates the
performance results.  Each window becomes one row of a DataFrame: its global test,
its suspect instruments, the key results with their standard uncertainty, and, for
a window that could not be used, the reason.

Windows are computed in chunks (a day of windows by default): within a chunk each
window's reconciliation starts from its neighbour's solution.  Two engines compute
the same chunks:

``"local"``
    a plain loop in this process (pandas only);
``"dask"``
    one Dask task per chunk, computed by a ``distributed`` cluster of local worker
    processes started for the job (:func:`local_cluster`) by default, by a
    ``distributed.Client`` or a scheduler address, or by one of Dask's local
    schedulers.  Install with ``pip install "perftest[scale]"``.

Both call the same per-chunk function on the same data, so their tables are
identical, value for value.  Runs given as files are read a day at a time
(:mod:`perftest.scale.files`); finished chunks can be written to a folder of
Parquet files as they finish and reused by a rerun (:mod:`perftest.scale.store`).
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import threading
import warnings
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from perftest.defaults import CHECK_STABILITY, ELIMINATE, MIN_COVERAGE, RECONCILIATION_ALPHA
from perftest.display.views import WindowTable
from perftest.errors import InputError, PerftestError
from perftest.run.core import Run
from perftest.scale.cluster import (
    _DASK_SCHEDULERS,
    _OWN_CLUSTER,
    _connect,
    _import_dask,
    _resolve_scheduler,
    _run_dask,
    local_cluster,
)
from perftest.scale.store import Progress, StoreLock, WindowStore, fingerprint
from perftest.scale.windows import (
    _as_runs,
    _check_min_samples,
    _Chunk,
    _chunks,
    _cut,
    _Cutter,
    _duration,
    _Source,
    _sources,
    _Window,
    _window_coverage,
)

__all__ = ["reconcile_many", "local_cluster", "ENGINES", "KEY_RESULTS", "TABLE_COLUMNS"]

#: Engines that :func:`reconcile_many` accepts.
ENGINES = ("local", "dask")

#: Results reported per window when ``results=True`` for a power plant (with every
#: ``corrected_*`` result the plant defines); other kinds report their headline
#: results (:data:`perftest.evaluation.plant_keys.KEY_RESULTS`).
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
    "stable",
    "unstable",
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

# A window whose averaging, reconciliation or evaluation raises one of these gets
# a row with the reason.  Anything else is a programming error and propagates.
_EXPECTED_FAILURES = (PerftestError, np.linalg.LinAlgError, ArithmeticError)

# perftest's property objects share one CoolProp state per fluid and process, which
# must not be used by two threads at once (see perftest.thermo.properties).  Every window
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
    stability: bool = False
    warm_start: bool = True


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
    if (
        isinstance(scheduler, str)
        and scheduler.lower() not in _DASK_SCHEDULERS
        and "://" not in scheduler
    ):
        raise InputError(
            "The 'scheduler' parameter of reconcile_many must be None, a distributed Client, "
            f"a scheduler address such as 'tcp://127.0.0.1:8786' or one of "
            f"{list(_DASK_SCHEDULERS)}. Got {scheduler!r}.",
            parameter="scheduler",
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
    from perftest.evaluation.results import RESULT_UNITS

    unknown = [n for n in names if n.removeprefix("corrected_") not in RESULT_UNITS]
    if unknown:
        raise InputError(
            f"The 'results' parameter of reconcile_many names unknown results {unknown}. "
            f"Known: {sorted(RESULT_UNITS)} and 'corrected_<name>' for corrected ones.",
            parameter="results",
        )
    return tuple(names)


def _headline(plant) -> tuple:
    """Headline results of the plant's kind (power: :data:`KEY_RESULTS`)."""
    from perftest.evaluation.plant_keys import key_results, performance_kind

    kind = performance_kind(plant)
    return KEY_RESULTS if kind == "power" else key_results(kind)


# --------------------------------------------------------------------------- windows


def _chunk_rows(plant, chunk: _Chunk, run: Run | None, options: _Options) -> list[dict]:
    """The rows of one chunk, window after window; the single code path of both engines.

    ``run`` holds the chunk's samples (in memory); for run files it is None and the
    chunk's piece of the files is read here, in whichever process computes it.
    """
    notes = []
    if chunk.piece is not None:
        from perftest.scale.files import read_piece

        run, notes = read_piece(chunk.piece, plant, dict(chunk.read_kw))
    rows = []
    previous = None
    cutter = None if run is None else _Cutter(run)
    for spec in chunk.windows:
        w, share = (None, 1.0) if cutter is None else cutter(spec.start, spec.end)
        row, rec = _window_row(plant, w, spec, options, previous, share)
        if rec is not None and options.warm_start:
            previous = rec
        rows.append(row)
    if notes and rows:
        # the importer's notes on the chunk's files go with its first window
        text = " | ".join(f"read: {n}" for n in dict.fromkeys(notes))
        rows[0]["warnings"] = " | ".join(t for t in (text, rows[0]["warnings"]) if t)
    return rows


def _window_row(plant, run: Run | None, spec: _Window, options: _Options, start=None, share=None):
    """``(row, reconciliation or None)`` of one window (``share``: its coverage, if known)."""
    with _WINDOW_LOCK, warnings.catch_warnings(record=True) as caught:
        # "always": every warning of this window is recorded, whatever the
        # process's warning registry has already seen, so the row does not depend
        # on which window a process happened to compute first.
        warnings.simplefilter("always")
        row, rec = _compute_row(plant, run, spec, options, start, share)
    seen = []
    for w in caught:
        if issubclass(w.category, ResourceWarning):
            # a leaked file or socket of other code, collected while the window ran:
            # not the window's; passed on to the caller's filters as it came
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno, source=w.source)
            continue
        text = f"{w.category.__name__}: {w.message}"
        if text not in seen:
            seen.append(text)
    row["warnings"] = " | ".join(seen)
    return row, rec


def _compute_row(plant, run, spec, options, start=None, share=None):
    from perftest.balance.plant import reconcile
    from perftest.run.stability import judge

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
        return row, None
    if row["n_samples"] < spec.min_samples:
        row["reason"] = (
            f"{row['n_samples']} sample(s) in the window, fewer than min_samples={spec.min_samples}"
        )
        return row, None
    if share is None:
        share = _window_coverage(run)
    if share < MIN_COVERAGE:
        row["reason"] = f"coverage {share:.0%} of the window, below the minimum {MIN_COVERAGE:.0%}"
        return row, None
    stage = "average"
    rec = None
    unstable = ""
    try:
        if options.screen_outliers:
            run = run.screen_outliers()
        if options.stability:
            stage = "stability"
            # run.stability(warn=False)'s verdicts, without its table
            tags = list(run.tags)
            st = judge(run, tags)
            failed = (st["passed"] == False).to_numpy(dtype=bool, na_value=False)  # noqa: E712
            bad = [(t, float(r)) for t, r, f in zip(tags, st["ratio"], failed, strict=True) if f]
            row["stable"] = not bad
            unstable = ", ".join(f"{t} ({r:.2g}x)" for t, r in bad)
            row["unstable"] = ", ".join(str(t) for t, _ in bad)
            stage = "average"
        measurements = run.average()
        stage = "reconcile"
        rec = reconcile(
            plant, measurements, eliminate=options.eliminate, alpha=options.alpha, start=start
        )
        gt = rec.global_test
        suspects = _suspects(rec)
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
            from perftest.evaluation.results import evaluate, results_only

            stage = "evaluate"
            # Linear propagation only: the Monte Carlo check, the budgets and the
            # exergy analysis belong to the detailed evaluation of a chosen window,
            # not to a trend table (the results are the same either way).
            # (results_only: nor the corrections, guarantees and inputs tables)
            with results_only():
                perf = evaluate(plant, rec, monte_carlo=False, detail=False)
            names = options.results or (
                *_headline(plant),
                *(n for n in perf.results.index if str(n).startswith("corrected_")),
            )
            res = perf.results
            at = {str(n): i for i, n in reversed(list(enumerate(res.index)))}
            value, u = res["value"].to_numpy(dtype=float), res["u"].to_numpy(dtype=float)
            for name in names:
                if name in at:
                    row[name] = float(value[at[name]])
                    row[f"u_{name}"] = float(u[at[name]])
        row["status"] = "ok"
        if unstable:
            row["status"] = "unstable"
            row["reason"] = f"stability: {unstable} of the permissible variation"
    except _EXPECTED_FAILURES as exc:
        if options.on_error == "raise":
            raise
        row["status"] = "failed"
        row["reason"] = f"{stage}: {type(exc).__name__}: {exc}"
        if unstable:
            row["reason"] += f"; stability: {unstable} of the permissible variation"
        rec = None
    return row, rec


def _suspects(rec) -> list[str]:
    """The tags ``rec.to_frame()`` marks suspect, in its row order, without the table.

    A tag the solver kept is suspect when the measurement test flags it; a tag it
    does not hold is suspect when elimination dropped it.
    """
    pos = {t: i for i, t in enumerate(rec.solver_tags)}
    flagged = {int(i) for i in rec.result.suspects(rec.alpha)}
    elim = set(rec.eliminated_tags)
    return [str(t) for t in rec.measurements.tags if (pos[t] in flagged if t in pos else t in elim)]


# --------------------------------------------------------------------------- table


def _table(rows: list[dict], results: tuple | None) -> pd.DataFrame:
    return _normalise(pd.DataFrame(rows), results)


def _finish(frames: list[pd.DataFrame], runs: list[int], results: tuple | None) -> pd.DataFrame:
    """One table from the chunks' tables (``runs``: each chunk's run number)."""
    kept = [(f, r) for f, r in zip(frames, runs, strict=True) if len(f)]
    if not kept:
        return _normalise(pd.DataFrame(columns=[*TABLE_COLUMNS, "warnings"]), results)
    frame = pd.concat([f.astype(object) for f, _ in kept], ignore_index=True)
    # Windows given as (start, end) pairs may have been regrouped by their start:
    # run number, then window number restore the caller's order.
    key = pd.DataFrame(
        {
            "r": np.concatenate([np.full(len(f), r) for f, r in kept]),
            "w": frame["window"].to_numpy(dtype="int64"),
        }
    )
    perm = key.sort_values(["r", "w"], kind="stable").index.to_numpy()
    return _normalise(frame.iloc[perm].reset_index(drop=True), results)


def _normalise(frame: pd.DataFrame, results: tuple | None) -> pd.DataFrame:
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

    frame["run"] = frame["run"].infer_objects()  # labels 0, 1, ... as int64
    for col in ("start", "end"):  # one dtype whatever the chunks held (or Parquet gave)
        times = pd.DatetimeIndex(list(frame[col])) if len(frame) else pd.DatetimeIndex([])
        frame[col] = times.as_unit("ns") if times.tz is not None else times.tz_localize("UTC")
    for col in ("window", "n_samples"):
        frame[col] = frame[col].astype("int64")
    for col in ("chi2", "p_value", *extra):
        frame[col] = np.asarray(cells(col, float, np.nan, "float64"))
    for col in ("dof", "iterations", "n_suspects"):
        frame[col] = cells(col, int, pd.NA, "Int64")
    for col in ("stable", "passed", "converged"):
        frame[col] = cells(col, bool, pd.NA, "boolean")
    for col in ("status", "reason", "unstable", "suspects", "eliminated", "warnings"):
        frame[col] = cells(col, str, "", "str")
    return frame


# --------------------------------------------------------------------------- engines


def _digest(run: Run, begin, end) -> str:
    """Hash of a run's samples and mask in ``[begin, end)``."""
    idx = run.data.index
    i0, i1 = idx.searchsorted(begin), idx.searchsorted(end)
    h = hashlib.sha256(str(list(run.data.columns)).encode())
    for frame in (run.data, run.mask):
        if isinstance(frame, pd.DataFrame):
            part = frame.iloc[i0:i1]
            h.update(pd.util.hash_pandas_object(part, index=True).to_numpy().tobytes())
    return h.hexdigest()


def _chunk_key(job: str, chunk: _Chunk, src: _Source) -> str:
    windows = [(w.number, w.start.isoformat(), w.end.isoformat(), w.min_samples)
               for w in chunk.windows]  # fmt: skip
    if chunk.piece is not None:
        data = chunk.piece.digest
    elif src.run is not None:
        data = _digest(src.run, chunk.windows[0].start, max(w.end for w in chunk.windows))
    else:
        data = "no data"
    return fingerprint(job, repr(src.label), windows, data)


def _payload(chunk: _Chunk, src: _Source, lean: bool) -> Run | None:
    if src.run is None:
        return None
    if not lean:
        return src.run
    begin = min(w.start for w in chunk.windows)
    end = max(w.end for w in chunk.windows)
    return _cut(src.run, begin, end, lean=True)


def reconcile_many(
    plant,
    run,
    every="15min",
    *,
    engine: str = "local",
    results=True,
    eliminate: bool = ELIMINATE,
    alpha: float = RECONCILIATION_ALPHA,
    min_samples: int | None = None,
    screen_outliers: bool = False,
    stability: bool = CHECK_STABILITY,
    warm_start: bool = True,
    scheduler=None,
    on_error: str = "row",
    store=None,
    resume: bool = True,
    progress=None,
    on_window=None,
    chunk="1D",
    read_options: Mapping | None = None,
) -> pd.DataFrame:
    """Reconcile many windows of one or several runs; one table row per window.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
        The plant whose balances every window is reconciled against.
    run : Run, path, list of paths, list or dict of those
        The run(s): a :class:`Run` in memory, or run files (one path, or a list of
        paths read together as by :func:`perftest.read_run`), which are then read a
        day at a time so that memory does not grow with the length of the logs (it
        holds one chunk plus its longest window; windows may span several days).  A
        list of Runs (or of lists of paths) or a dict of label -> run gives several
        runs.  The ``run`` column of the table holds 0 for a single run, the
        position in a list, or the dict key.
    every : str, Timedelta, list of (start, end) pairs or None, default "15min"
        Window length (consecutive windows ``[start, start + every)``, the first
        starting at the first sample rounded down to a multiple of ``every`` from
        midnight in the plant's time zone), or explicit windows (times without a
        zone are read in the plant's time zone, as :meth:`Run.window` reads them;
        the same windows are cut from every run), or None for each run whole (in
        memory only).
    engine : {"local", "dask"}, default "local"
        ``"local"``: a loop in this process.  ``"dask"``: one Dask task per chunk of
        windows.
    results : bool or list of str, default True
        Also evaluate the performance results (:func:`perftest.evaluate`, linear
        propagation) and report ``<name>`` and ``u_<name>`` [SI]: with True the
        headline results of the plant's kind (:data:`KEY_RESULTS` for a power plant)
        and every ``corrected_*`` result (when the plant file
        has a ``[performance]`` table; without one, True reconciles only), or the
        names given.
    eliminate : bool, default True (:data:`perftest.defaults.ELIMINATE`)
        Serial elimination of suspect measurements in each window (as in
        :func:`perftest.reconcile`).
    alpha : float, default 0.05
        Significance level of the global and measurement tests.
    min_samples : int, optional
        Fewest samples a window must hold to be reconciled.  Default: half the
        samples a full window holds at the run's median sampling interval, at
        least 2.  Windows with fewer get a row with status ``"skipped"``, and so
        do windows whose sample times hold valid values at less than
        :data:`perftest.defaults.MIN_COVERAGE` (0.8) of the times they should.
    screen_outliers : bool, default False
        Screen each window with :meth:`Run.screen_outliers` before averaging.
    stability : bool, default True (:data:`perftest.defaults.CHECK_STABILITY`)
        Judge each window with :meth:`Run.stability` (the plant's limits).  A window
        with a tag outside its permissible variation is still reconciled but gets
        status ``"unstable"`` and the tags in ``unstable`` and ``reason``.
    warm_start : bool, default True
        Start each window's reconciliation from the solution of the window before
        it in the same chunk (``start`` of :func:`perftest.reconcile`).  The
        solution is the same to round-off; only the path to it is shorter.
    scheduler : str or distributed.Client, optional
        Only with ``engine="dask"``: a Dask local scheduler name (``"processes"``,
        ``"threads"``, ``"sync"``), a ``distributed.Client``, or the address of a
        running Dask scheduler (``"tcp://host:8786"``; the workers must see the run
        files under the same paths).  Default: the scheduler set in Dask's
        configuration, else the active ``distributed`` client, else a
        :func:`local_cluster` started for this job and closed after it (one worker
        process per CPU), else (``distributed`` not installed) ``"processes"``.
    on_error : {"row", "raise"}, default "row"
        What a window whose averaging, reconciliation or evaluation fails does:
        give a row with status ``"failed"`` and the reason, or raise.
    store : str or Path, optional
        Folder where each chunk's rows are written as a Parquet file as soon as the
        chunk is done (see :class:`perftest.scale.store.WindowStore`).  With
        ``resume`` a rerun skips the chunks already there whose inputs, plant file
        and options are unchanged, so an interrupted job goes on where it stopped.
        The folder is locked for the job (:class:`perftest.scale.store.StoreLock`,
        the lock of ``perftest monitor``): a second job on it raises.
    resume : bool, default True
        Reuse matching chunks of ``store``; False computes everything again.
    progress : bool, optional
        A progress line on stderr (windows done, rate, time left).  Default: only
        when stderr is a terminal.
    on_window : callable, optional
        Called with each finished row (a dict) in table order within a chunk, after
        the chunk is stored.  An exception it raises stops the job.
    chunk : str or Timedelta, default "1D"
        Windows are computed in chunks of this period (by window start, from the
        plant's midnight): the unit of work of an engine, of warm starting and of
        the store.
    read_options : dict, optional
        Keywords of :func:`perftest.read_run` for run files (``every``, ``sep``,
        ``units``, ...).

    Returns
    -------
    pandas.DataFrame
        One row per window, in run then time order, with columns
        :data:`TABLE_COLUMNS`: ``run``, ``window`` (number within its run),
        ``start``, ``end``, ``n_samples`` (sample stamps in the window), ``status``
        (``"ok"``, ``"unstable"``, ``"skipped"``, ``"failed"``), ``reason`` (empty
        when ok), ``stable`` (NA unless ``stability``), ``unstable`` (tags),
        ``chi2``, ``dof``, ``p_value``, ``passed`` (global test after any
        elimination), ``converged``, ``iterations`` (of the final solve; fewer
        with a warm start), ``n_suspects``, ``suspects`` (comma-separated tags
        flagged by the measurement test or eliminated), ``eliminated``; then
        ``<result>, u_<result>`` [SI]; then ``warnings`` (the warnings raised while
        computing the window, one per distinct text).

    Raises
    ------
    InputError
        Unknown engine, Dask asked for but not installed, ``every`` not a duration
        nor a list of windows, a window shorter than the sampling interval, bad
        ``min_samples``, ``alpha``, ``results``, ``scheduler``, ``on_error``,
        ``chunk`` or ``store``.
    DataError
        A run file is missing or unreadable (names the file and line).
    PerftestError
        Another job holds the lock of ``store`` (names its process, host and start).

    Notes
    -----
    Every chunk is computed by the same function on the same data whatever the
    engine, so ``engine="dask"`` returns exactly the table of ``engine="local"``.
    A window's row equals :func:`perftest.reconcile` and :func:`perftest.evaluate`
    called on that window alone, to round-off (warm starting changes the
    iterates, not the solution; tests/test_scale.py checks 1e-9 relative).

    perftest's CoolProp property objects are shared within a process and are not
    thread-safe, so windows of one process are computed one at a time; parallel
    speed comes from processes (the worker processes of a ``distributed``
    cluster, the default here, or Dask's ``"processes"`` scheduler).  A script
    starting worker processes must guard its entry point with
    ``if __name__ == "__main__":``.  For repeated calls keep a
    :func:`local_cluster` open and pass a ``distributed.Client`` of it as
    ``scheduler`` (benchmarks/bench_scale.py, benchmarks/bench_year.py).

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
    if on_window is not None and not callable(on_window):
        raise InputError(
            f"The 'on_window' parameter of reconcile_many must be callable. Got {on_window!r}.",
            parameter="on_window",
        )
    _check_min_samples(min_samples)
    chunk_length = _duration(chunk, "chunk")
    options = _Options(
        eliminate=bool(eliminate),
        alpha=float(alpha),
        results=_check_results(results),
        screen_outliers=bool(screen_outliers),
        on_error=on_error,
        stability=bool(stability),
        warm_start=bool(warm_start),
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
    read_kw = dict(read_options or {})
    sources = _sources(plant, runs, read_kw)
    chunks = _chunks(sources, every, min_samples, chunk_length)
    # The store's folder is locked for the job, as `perftest monitor` locks it: a
    # second job on the same store (another process, or another thread of this one)
    # is refused with the holder's name instead of mixing its part files in.
    lock = contextlib.nullcontext() if store is None else StoreLock(store, job="reconcile_many")
    with lock:
        wstore = None if store is None else WindowStore(store, resume=resume)
        from perftest import __version__

        job = fingerprint(
            __version__,
            getattr(plant, "text", None) or repr(plant),
            dataclasses.asdict(dataclasses.replace(options, on_error="row")),
            sorted((k, repr(v)) for k, v in read_kw.items()),
            str(chunk_length),
        )
        meter = Progress(sum(len(c.windows) for c in chunks), enabled=progress)
        frames: dict[int, pd.DataFrame] = {}
        order = {id(c): i for i, c in enumerate(chunks)}
        keys: dict[int, str] = {}

        def done(c: _Chunk, rows: list[dict]) -> None:
            i = order[id(c)]
            frame = _table(rows, options.results)
            if wstore is not None:
                wstore.write(c.run_number, c.begin, keys[i], frame)
            frames[i] = frame
            meter.add(len(rows), failed=sum(r["status"] == "failed" for r in rows))
            if on_window is not None:
                for row in rows:
                    on_window(row)

        lean = engine == "dask"

        def work():
            for i, c in enumerate(chunks):
                src = sources[c.run_number]
                if wstore is not None:
                    keys[i] = _chunk_key(job, c, src)
                    if wstore.has(keys[i]):
                        frames[i] = wstore.read(keys[i])
                        meter.add(len(c.windows), reused=True)
                        continue
                yield c, _payload(c, src, lean)

        if engine == "local":
            for c, payload in work():
                done(c, _chunk_rows(plant, c, payload, options))
        else:
            client = _connect(scheduler)
            cluster = None
            try:
                resolved = client or _resolve_scheduler(dask, scheduler)
                if resolved is _OWN_CLUSTER:
                    from distributed import Client

                    cluster = local_cluster()
                    client = resolved = Client(cluster)
                _run_dask(dask, resolved, plant, work(), options, done, _chunk_rows)
            finally:
                if client is not None:
                    client.close()
                if cluster is not None:
                    cluster.close()
        meter.close()
        if wstore is not None:
            wstore.prune()
        ordered = [frames[i] for i in range(len(chunks))]
        return WindowTable(_finish(ordered, [c.run_number for c in chunks], options.results))
