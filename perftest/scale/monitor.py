"""``perftest monitor``: every window of long logs reconciled, summarised and plotted.

The command reads a plant file and run files (a day at a time), reconciles each
window with :func:`perftest.reconcile_many` (locally, or on a Dask cluster), and
writes into the output folder:

* ``windows.parquet/`` one Parquet file per finished day of windows, written as
  they finish; a rerun with the same inputs and options resumes from them;
* ``windows.csv``      the whole table (one row per window), SI units;
* ``monitor.json``     a short summary: windows by status, global-test failures,
  how often each tag was suspect, and the median, range and median U95 of the
  plant kind's headline results (power: efficiency, heat rate, Carnot bound ...;
  refrigeration: capacity, COP, Carnot COP ...);
* ``trend.png``        those headline results with their U95 bands, and the suspect
  instruments, over time (:func:`perftest.report.trend.trend_figure`).

The results support, and do not replace, the applicable test code, local
regulations and licensed engineers' judgement.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from perftest.defaults import CHECK_STABILITY, ELIMINATE
from perftest.errors import PerftestError
from perftest.report.output import check_outputs
from perftest.scale.store import StoreLock

__all__ = ["monitor", "summary", "add_parser", "run_command"]


def summary(table: pd.DataFrame, kind: str | None = None) -> dict:
    """The ``monitor.json`` summary of a :func:`perftest.reconcile_many` table.

    Parameters
    ----------
    table : pandas.DataFrame
    kind : str, optional
        Plant kind (``[performance] kind``) whose headline results are summarised
        (:func:`perftest.report.trend.trend_results`); default: those the table holds.

    Returns
    -------
    dict
        Window counts, global-test failures, suspect windows per tag, failure
        reasons, and ``results``: per headline result over the windows of status
        "ok", ``median``, ``min``, ``max`` of the value, ``median_U95`` (1.96 u,
        the trend figure's band), ``windows`` (how many had a value) and ``unit``
        (SI).
    """
    from perftest.evaluation.results import RESULT_UNITS
    from perftest.report.trend import COVERAGE_FACTOR, suspect_texts, trend_results

    status = table["status"].astype(str)
    counts: dict = {}
    for text in suspect_texts(table):
        for tag in [s.strip() for s in str(text).split(",") if s.strip()]:
            counts[tag] = counts.get(tag, 0) + 1
    passed = table["passed"].astype("boolean")

    def iso(v):
        return None if pd.isna(v) else pd.Timestamp(v).isoformat()

    out = {
        "windows": {
            "total": int(len(table)),
            "ok": int((status == "ok").sum()),
            "unstable": int((status == "unstable").sum()),
            "skipped": int((status == "skipped").sum()),
            "failed": int((status == "failed").sum()),
        },
        "first_window_start": iso(table["start"].min()) if len(table) else None,
        "last_window_end": iso(table["end"].max()) if len(table) else None,
        "global_test_failed": int((passed == False).sum()),  # noqa: E712
        "suspect_windows_by_tag": dict(sorted(counts.items(), key=lambda kv: (-kv[1], kv[0]))),
    }
    results = {}
    good_rows = table[status == "ok"]
    for name in trend_results(table, kind):
        v = good_rows[name].astype(float)
        u = good_rows[f"u_{name}"].astype(float)
        keep = v.notna()
        v, u = v[keep], u[keep]
        results[name] = {
            "median": None if v.empty else float(v.median()),
            "min": None if v.empty else float(v.min()),
            "max": None if v.empty else float(v.max()),
            "median_U95": None if u.empty else float(COVERAGE_FACTOR * u.median()),
            "windows": int(len(v)),
            "unit": RESULT_UNITS.get(name.removeprefix("corrected_"), "1"),
        }
    out["results"] = results
    failed = table[status == "failed"]
    out["failure_reasons"] = {
        str(k): int(v)
        for k, v in failed["reason"].astype(str).str.split(":").str[:2].str.join(":")
        .value_counts().items()
    }  # fmt: skip
    return out


def test_windows(plant) -> tuple:
    """The plant file's ``[[runs]]`` or ``[[points]]`` as ``(mode, [(label, start, end)])``.

    Times are UTC Timestamps (a stamp without offset is read in the site's time zone);
    ``(None, [])`` when the file lists neither.
    """
    from perftest.evaluation.multirun import plant_windows

    mode, entries = plant_windows(plant)
    if mode is None:
        return None, []
    zone = getattr(getattr(plant, "site", None), "timezone", None) or "UTC"

    def utc(value):
        ts = pd.Timestamp(value)
        ts = ts.tz_localize(zone) if ts.tz is None else ts
        return ts.tz_convert("UTC")

    spans = []
    for i, e in enumerate(entries):
        label = str(e.get("label") or (f"run {i + 1}" if mode == "runs" else f"point {i + 1}"))
        spans.append((label, utc(e["start"]), utc(e["end"])))
    return mode, spans


def span_summary(table: pd.DataFrame, spans, kind: str | None = None) -> list:
    """Per run or load point: the windows that lie inside it and their headline results.

    A window counts when it starts and ends inside the span; the results are the
    medians over its windows of status "ok" (a screening view of the test: the test
    result itself is ``perftest report --run/--point``).
    """
    from perftest.report.trend import trend_results

    start = pd.DatetimeIndex(table["start"]).tz_convert("UTC")
    end = pd.DatetimeIndex(table["end"]).tz_convert("UTC")
    ok = table["status"].astype(str).to_numpy() == "ok"
    out = []
    for label, t0, t1 in spans:
        inside = np.asarray((start >= t0) & (end <= t1))
        rows = table[inside & ok]
        results = {}
        for name in trend_results(table, kind):
            v = rows[name].astype(float).dropna()
            results[name] = None if v.empty else float(v.median())
        out.append(
            {
                "label": label,
                "start": t0.isoformat(),
                "end": t1.isoformat(),
                "windows": int(inside.sum()),
                "windows_ok": int((inside & ok).sum()),
                "median_results": results,
            }
        )
    return out


def _cluster(workers: int):
    """A local Dask cluster of ``workers`` processes (:func:`perftest.scale.local_cluster`)."""
    try:
        from distributed import Client
    except ImportError:
        raise PerftestError(
            'perftest monitor --engine dask needs Dask: pip install "perftest[scale]".'
        ) from None
    import os
    import signal
    import threading

    from perftest.scale.many import local_cluster

    # The worker processes start with Ctrl-C ignored (an ignored signal stays ignored
    # in a child process): the terminal sends SIGINT to the whole process group, and
    # each worker would otherwise print its own traceback.  This process alone
    # handles it and shuts the cluster down.
    # Their log is quiet too (the setting reaches the worker processes through the
    # environment they start with): a user's Ctrl-C tears the scheduler down under
    # running workers, and each would log the lost connection with a traceback.  A
    # worker's failure still reaches this process and the window table.
    main = threading.current_thread() is threading.main_thread()
    old = signal.signal(signal.SIGINT, signal.SIG_IGN) if main else None
    key = "DASK_LOGGING__DISTRIBUTED"
    env = os.environ.get(key)
    if env is None:
        os.environ[key] = "critical"
    try:
        cluster = local_cluster(workers)
    finally:
        if main:
            signal.signal(signal.SIGINT, old)
        if env is None:
            os.environ.pop(key, None)
    return cluster, Client(cluster)


def monitor(
    plant,
    data,
    out,
    *,
    every="15min",
    engine: str = "local",
    scheduler=None,
    workers: int | None = None,
    results=True,
    eliminate: bool = ELIMINATE,
    stability: bool = CHECK_STABILITY,
    resume: bool = True,
    progress=None,
    figure: bool = True,
    inputs=None,
) -> dict:
    """Reconcile every window of run files and write the monitoring outputs.

    Parameters
    ----------
    plant : str or Path
        Plant file.
    data : list of str or Path
        Run files, read together a day at a time.
    out : str or Path
        Output folder (created).
    every : str, default "15min"
    engine : {"local", "dask"}
    scheduler : str, optional
        Address of a running Dask scheduler; default a local cluster of ``workers``
        processes.
    workers : int, optional
        Worker processes of the local cluster (default: the machine's cores).
    results, eliminate, stability, resume, progress
        As for :func:`perftest.reconcile_many`.
    figure : bool, default True
        Write ``trend.png``.
    inputs : dict, optional
        Further input files by the option that named them (an SQLite database behind
        ``--sql``), protected from the outputs like the run files.

    Returns
    -------
    dict
        The summary written to ``monitor.json``, with ``"written"`` paths.
    """
    from perftest.plant.file import load_plant

    plant_path = Path(plant)
    if not plant_path.is_file():
        raise PerftestError(f"{plant_path}: plant file not found.", file=plant_path)
    out = Path(out)
    targets = _check_paths(
        out, {"--data": [Path(d) for d in data], "plant file": [plant_path], **(inputs or {})}
    )
    plant_obj = load_plant(plant_path)
    with StoreLock(out, job="perftest monitor"):
        return _monitor_locked(plant_obj, data, out, targets, every=every, engine=engine,
                               scheduler=scheduler, workers=workers, results=results,
                               eliminate=eliminate, stability=stability, resume=resume,
                               progress=progress, figure=figure)  # fmt: skip


def _check_paths(out, inputs: dict) -> dict:
    """Refuse outputs in ``out`` that are one of ``inputs``; the output paths by kind."""
    targets = output_paths(out)
    check_outputs(
        {f"--out ({p.name})": p for k, p in targets.items() if k != "windows"},
        inputs,
        folders={"--out (windows.parquet)": targets["windows"]},
    )
    return targets


def output_paths(out) -> dict:
    """The files ``perftest monitor`` writes into ``out``, by kind."""
    out = Path(out)
    return {
        "windows": out / "windows.parquet",
        "csv": out / "windows.csv",
        "summary": out / "monitor.json",
        "figure": out / "trend.png",
    }


def _monitor_locked(plant_obj, data, out, targets, *, every, engine, scheduler, workers,
                    results, eliminate, stability, resume, progress, figure) -> dict:  # fmt: skip
    import os

    from perftest.report.output import write_atomic
    from perftest.scale.many import reconcile_many

    kw = dict(
        every=every,
        results=results,
        eliminate=eliminate,
        stability=stability,
        store=targets["windows"],
        resume=resume,
        progress=progress,
    )
    cluster = client = None
    if engine == "dask" and scheduler is None:
        cluster, client = _cluster(workers or os.cpu_count() or 1)
        scheduler = client
    try:
        table = reconcile_many(plant_obj, list(data), engine=engine, scheduler=scheduler, **kw)
    finally:
        if client is not None:
            _quiet_close(client, cluster)
    parts = sorted(targets["windows"].glob("*.parquet"))
    written = {"windows": f"{targets['windows']} ({len(parts)} part file(s))"}
    written["csv"] = str(write_atomic(targets["csv"], table.to_csv(index=False)))
    from perftest.evaluation.plant_keys import performance_kind
    from perftest.report.trend import trend_results

    kind = performance_kind(plant_obj)
    info = summary(table, kind)
    info["kind"] = kind
    mode, spans = test_windows(plant_obj)
    if mode is not None:
        info[mode] = span_summary(table, spans, kind)
    if figure and trend_results(table, kind):
        from perftest.report.figures import figure_png
        from perftest.report.trend import trend_figure

        fig = trend_figure(table, title=f"{plant_obj.name}: results by window",
                           tz=plant_obj.site.timezone or "UTC", kind=kind,
                           spans=spans)  # fmt: skip
        written["figure"] = str(write_atomic(targets["figure"], figure_png(fig)))
    info["plant"] = plant_obj.name
    info["every"] = str(every)
    info["engine"] = engine
    info["caution"] = (
        "Screening results of many windows. They support, and do not replace, the "
        "applicable test code, local regulations and licensed engineers' judgement."
    )
    written["summary"] = str(targets["summary"])
    info["written"] = written
    write_atomic(targets["summary"], json.dumps(_clean(info), indent=2) + "\n")
    return info


def _quiet_close(client, cluster) -> None:
    """Close the job's own Dask client and cluster.  After a Ctrl-C the workers are
    torn down mid-task; their shutdown chatter (tracebacks of cancelled tasks and
    closed comms) is silenced so that the command ends on its one line."""
    import logging

    names = ("distributed", "tornado", "asyncio")
    levels = {n: logging.getLogger(n).level for n in names}
    try:
        for n in names:
            logging.getLogger(n).setLevel(logging.CRITICAL + 1)
        client.close()
        cluster.close()
    finally:
        for n, level in levels.items():
            logging.getLogger(n).setLevel(level)


def _clean(obj):
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def add_parser(sub, common, *, duration=str) -> None:
    """Register ``perftest monitor`` on the subcommands of the ``perftest`` parser.

    ``duration`` is the argparse type of ``--every`` (the command line's duration
    reader: a bare number is seconds).
    """
    import argparse

    m = sub.add_parser(
        "monitor",
        parents=[common],
        help="reconcile every window of long logs (trend, drifting instruments)",
        description="Cut run files into windows, reconcile and evaluate each, and write "
        "DIR/windows.parquet (resumable), DIR/windows.csv, DIR/monitor.json and "
        "DIR/trend.png. Run files are read a day at a time. The command exits with "
        "status 2 when no window gave a result.",
        epilog="example:\n  perftest monitor plant.toml --data historian.csv --every 15min "
        "--out trend --engine dask --workers 2",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    m.add_argument("plant", metavar="PLANT.toml", help="plant description file")
    m.add_argument("--data", metavar="RUN.csv", action="append",
                   help="run file: .csv, .xlsx or .parquet (repeat for several files read "
                   "together; required unless --sql is given)")  # fmt: skip
    from perftest.importers.sources import add_sql_arguments

    add_sql_arguments(m)
    m.add_argument("--every", metavar="LENGTH", default="15min", type=duration,
                   help="window length, e.g. 15min or 900 (seconds) (default 15min)")  # fmt: skip
    m.add_argument("--out", metavar="DIR", required=True,
                   help="output folder (required; locked while the job runs)")  # fmt: skip
    m.add_argument("--engine", choices=("local", "dask"), default="local",
                   help="'local': one process; 'dask': worker processes, a local cluster "
                   "or --scheduler (default local)")  # fmt: skip
    m.add_argument("--scheduler", metavar="ADDR",
                   help="address of a running Dask scheduler, tcp://host:port (default: "
                   "start a local cluster)")  # fmt: skip
    m.add_argument("--workers", metavar="N", type=int,
                   help="worker processes of the local Dask cluster (default: cores)")  # fmt: skip
    m.add_argument("--results", metavar="NAME", action="append",
                   help="result per window (repeat; default the key results)")  # fmt: skip
    m.add_argument("--keep-all", action="store_true",
                   help="do not drop suspect instruments (default: serial elimination "
                   "drops them)")  # fmt: skip
    m.add_argument("--no-stability", action="store_true",
                   help="do not judge the stability of each window (default: judged)")  # fmt: skip
    m.add_argument("--resume", action=argparse.BooleanOptionalAction, default=True,
                   help="reuse windows already in DIR (default: yes)")  # fmt: skip


def _source_files(args) -> dict:
    """The files behind the sources that are not plain run files (a workbook's sheet
    name is handled by check_outputs; an SQLite database is named here)."""
    from perftest.importers.sources import database_file

    db = database_file(getattr(args, "sql", None))
    return {"--sql": [db]} if db is not None else {}


def run_command(args) -> int:
    """Carry out a parsed ``perftest monitor`` command; returns the exit status."""
    from perftest.importers.sources import sources_from_options

    # the database is checked before its rows are staged (which reads it)
    _check_paths(args.out, _source_files(args))

    data = [
        s if isinstance(s, str) else s.path
        for s in sources_from_options(args.data, args.sql, args.query)
    ]
    if args.workers is not None and args.workers < 1:
        raise PerftestError(f"--workers must be at least 1. Got {args.workers}.")
    if args.scheduler and args.engine != "dask":
        raise PerftestError("--scheduler is used with --engine dask only.")
    info = monitor(
        args.plant,
        data,
        args.out,
        every=args.every,
        engine=args.engine,
        scheduler=args.scheduler,
        workers=args.workers,
        results=args.results or True,
        eliminate=not args.keep_all,
        stability=not args.no_stability,
        resume=args.resume,
        progress=False if args.quiet else None,
        figure=not args.no_figures,
        inputs=_source_files(args),
    )
    w = sys.stdout.write
    n = info["windows"]
    w(f"{info['plant']}\n")
    w(f"  windows           {n['total']} of {info['every']}: {n['ok']} ok, {n['unstable']} "
      f"unstable, {n['skipped']} skipped, {n['failed']} failed\n")  # fmt: skip
    w(f"  global test       failed in {info['global_test_failed']} window(s)\n")
    sus = info["suspect_windows_by_tag"]
    if sus:
        top = ", ".join(f"{t} ({c})" for t, c in list(sus.items())[:5])
        w(f"  suspect tags      {top}\n")
    from perftest.report.tables import result_display

    for name, r in info.get("results", {}).items():
        if r["median"] is None:
            continue
        unit, scale, offset = result_display(name, r["unit"], r["median"])
        shown = "" if unit == "1" else f" {unit}"
        w(f"  {name:<22} median {r['median'] * scale + offset:.5g}{shown} over "
          f"{r['windows']} ok window(s), range {r['min'] * scale + offset:.5g} to "
          f"{r['max'] * scale + offset:.5g}\n")  # fmt: skip
    for path in info["written"].values():
        w(f"  wrote             {path}\n")
    if n["ok"] + n["unstable"] == 0 and n["total"] > 0:
        reasons = info.get("failure_reasons") or {}
        why = f" (most often: {next(iter(reasons))})" if reasons else ""
        raise PerftestError(
            f"{args.out}: no window of the run gave a result: {n['failed']} failed and "
            f"{n['skipped']} skipped of {n['total']}{why}. See the 'reason' column of "
            f"{info['written'].get('csv', 'windows.csv')}."
        )
    return 0
