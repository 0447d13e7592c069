"""``perftest monitor``: every window of long logs reconciled, summarised and plotted.

The command reads a plant file and run files (a day at a time), reconciles each
window with :func:`perftest.reconcile_many` (locally, or on a Dask cluster), and
writes into the output folder:

* ``windows.parquet/`` one Parquet file per finished day of windows, written as
  they finish; a rerun with the same inputs and options resumes from them;
* ``windows.csv``      the whole table (one row per window), SI units;
* ``monitor.json``     a short summary: windows by status, global-test failures,
  how often each tag was suspect;
* ``trend.png``        efficiency with its U95 band, Carnot bound and suspect
  instruments over time (:func:`perftest.report.trend.trend_figure`).

The results support, and do not replace, the applicable test code, local
regulations and licensed engineers' judgement.
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import pandas as pd

from perftest.defaults import CHECK_STABILITY, ELIMINATE
from perftest.errors import PerftestError

__all__ = ["monitor", "summary", "add_parser", "run_command"]


def summary(table: pd.DataFrame) -> dict:
    """The ``monitor.json`` summary of a :func:`perftest.reconcile_many` table."""
    status = table["status"].astype(str)
    counts: dict = {}
    for text in table["suspects"].fillna(""):
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
    if "first_law_efficiency" in table.columns:
        good = table[status == "ok"]["first_law_efficiency"].astype(float)
        good = good[good.notna()]
        out["first_law_efficiency"] = {
            "median": None if good.empty else float(good.median()),
            "min": None if good.empty else float(good.min()),
            "max": None if good.empty else float(good.max()),
            "unit": "1",
        }
    failed = table[status == "failed"]
    out["failure_reasons"] = {
        str(k): int(v)
        for k, v in failed["reason"].astype(str).str.split(":").str[:2].str.join(":")
        .value_counts().items()
    }  # fmt: skip
    return out


def _cluster(workers: int):
    """A local Dask cluster of ``workers`` processes (:func:`perftest.scale.local_cluster`)."""
    try:
        from distributed import Client
    except ImportError:
        raise PerftestError(
            'perftest monitor --engine dask needs Dask: pip install "perftest[scale]".'
        ) from None
    from perftest.scale.many import local_cluster

    cluster = local_cluster(workers)
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

    Returns
    -------
    dict
        The summary written to ``monitor.json``, with ``"written"`` paths.
    """
    import os

    from perftest.plant.file import load_plant
    from perftest.scale.many import reconcile_many

    plant_path = Path(plant)
    if not plant_path.is_file():
        raise PerftestError(f"{plant_path}: plant file not found.", file=plant_path)
    plant_obj = load_plant(plant_path)
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    kw = dict(
        every=every,
        results=results,
        eliminate=eliminate,
        stability=stability,
        store=out / "windows.parquet",
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
            client.close()
            cluster.close()
    written = {"windows": str(out / "windows.parquet")}
    table.to_csv(out / "windows.csv", index=False)
    written["csv"] = str(out / "windows.csv")
    info = summary(table)
    if figure and "first_law_efficiency" in table.columns:
        from perftest.report.figures import figure_png
        from perftest.report.trend import trend_figure

        fig = trend_figure(table, title=f"{plant_obj.name}: results by window",
                           tz=plant_obj.site.timezone or "UTC")  # fmt: skip
        (out / "trend.png").write_bytes(figure_png(fig))
        written["figure"] = str(out / "trend.png")
    info["plant"] = plant_obj.name
    info["every"] = str(every)
    info["engine"] = engine
    info["caution"] = (
        "Screening results of many windows. They support, and do not replace, the "
        "applicable test code, local regulations and licensed engineers' judgement."
    )
    info["written"] = written
    (out / "monitor.json").write_text(json.dumps(_clean(info), indent=2) + "\n")
    return info


def _clean(obj):
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def add_parser(sub, common) -> None:
    """Register ``perftest monitor`` on the subcommands of the ``perftest`` parser."""
    import argparse

    m = sub.add_parser(
        "monitor",
        parents=[common],
        help="reconcile every window of long logs (trend, drifting instruments)",
        description="Cut run files into windows, reconcile and evaluate each, and write "
        "DIR/windows.parquet (resumable), DIR/windows.csv, DIR/monitor.json and "
        "DIR/trend.png. Run files are read a day at a time.",
        epilog="example:\n  perftest monitor plant.toml --data historian.csv --every 15min "
        "--out trend --engine dask --workers 2",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    m.add_argument("plant", metavar="PLANT.toml", help="plant description file")
    m.add_argument("--data", metavar="RUN.csv", action="append", required=True,
                   help="run file (repeat for several files read together)")  # fmt: skip
    m.add_argument("--every", metavar="LENGTH", default="15min",
                   help="window length (default 15min)")  # fmt: skip
    m.add_argument("--out", metavar="DIR", required=True, help="output folder")
    m.add_argument("--engine", choices=("local", "dask"), default="local")
    m.add_argument("--scheduler", metavar="ADDR",
                   help="address of a running Dask scheduler (tcp://host:port)")  # fmt: skip
    m.add_argument("--workers", metavar="N", type=int,
                   help="worker processes of the local Dask cluster (default: cores)")  # fmt: skip
    m.add_argument("--results", metavar="NAME", action="append",
                   help="result per window (repeat; default the key results)")  # fmt: skip
    m.add_argument("--keep-all", action="store_true",
                   help="do not drop suspect instruments (no serial elimination)")  # fmt: skip
    m.add_argument("--no-stability", action="store_true",
                   help="do not judge the stability of each window")  # fmt: skip
    m.add_argument("--resume", action=argparse.BooleanOptionalAction, default=True,
                   help="reuse windows already in DIR (default: yes)")  # fmt: skip


def run_command(args) -> int:
    """Carry out a parsed ``perftest monitor`` command; returns the exit status."""
    for f in args.data:
        if not Path(f).is_file():
            raise PerftestError(f"{f}: run file not found.", file=f)
    if args.workers is not None and args.workers < 1:
        raise PerftestError(f"--workers must be at least 1. Got {args.workers}.")
    if args.scheduler and args.engine != "dask":
        raise PerftestError("--scheduler is used with --engine dask only.")
    info = monitor(
        args.plant,
        args.data,
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
    for path in info["written"].values():
        w(f"  wrote             {path}\n")
    return 0
