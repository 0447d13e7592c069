"""Fleet-scale monitoring speed: a year of one-minute logs in 15-minute windows.

The job: the Brackenfold demo unit logged every minute for ``--days`` days (365 by
default: 525,600 rows per file), cut into 15-minute windows, each averaged,
judged for stability, reconciled with serial elimination and evaluated (linear
propagation) by ``perftest.reconcile_many`` reading the run files a day at a time.

Measured in the same run, printed with the load average beside them:

* windows per second of the local engine (a child process, so that its peak
  memory is its own);
* windows per second of the Dask engine on ``perftest.scale.local_cluster(2)``
  (2 worker processes with one thread each, Dask's worker profiler off), started
  and warmed (the short job computed) before timing; target: Dask / local >= 1.6
  on a 2-core machine;
* the short job of the local engine under the BLAS thread setting the user has
  (OPENBLAS_NUM_THREADS / OMP_NUM_THREADS as inherited; unset: the library's
  default) against one BLAS thread, alternately ``--repeats`` times; target: at
  most 1.2x;
* peak resident memory of the local engine for a short job (``--days`` / 12) and
  the full one; target: full / short <= 1.3 (memory does not grow with the length
  of the logs);
* the local engine's windows per second against :data:`REFERENCE_RATE` (issue 20:
  34.8 windows/s measured before the window loop was made faster; target 3x), and,
  with ``--compare-with DIR`` (a perftest source tree of an earlier commit, e.g.
  ``git worktree add /tmp/before <commit>``), against that code measured in the same
  run: the two are run alternately ``--repeats`` times on the same logs, the ratio
  of each pair printed with its spread, and their tables compared.

The logs are generated here, vectorised, from the demo's consistent heat balance
(``sample_data/brackenfold/generate.py``: design point, instruments, noise
levels), with a daily load cycle of +-4 %, autocorrelated noise and a slow drift of
the fuel flowmeter FT-201 (+1.5 % over a year) on top; they are written to a
temporary folder and removed afterwards.  Run:
``python benchmarks/bench_year.py --days 365`` (a full year takes a while: the
script prints the measured rate first, so a shorter ``--days`` gives the same
ratios sooner).
"""

from __future__ import annotations

import os

# One BLAS thread per process: two worker processes each running a multi-threaded
# BLAS would oversubscribe the 2 cores and time the load, not the engines.
# The setting the user has, for the run under the default BLAS threads (below).
_BLAS_KEYS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS")
INHERITED_BLAS = {k: os.environ.get(k) for k in _BLAS_KEYS}
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import sys  # noqa: E402
from pathlib import Path  # noqa: E402

# The perftest of this source tree, in this process, the child processes and the
# Dask workers (ahead of an installed copy); a child takes the one its PYTHONPATH
# names first (--compare-with puts another tree there).
ROOT = Path(__file__).resolve().parents[1]
if "--child" not in sys.argv:
    sys.path.insert(0, str(ROOT))
    os.environ["PYTHONPATH"] = os.pathsep.join(
        p for p in (str(ROOT), os.environ.get("PYTHONPATH", "")) if p
    )

import argparse  # noqa: E402
import importlib.util  # noqa: E402
import json  # noqa: E402
import resource  # noqa: E402
import shutil  # noqa: E402
import subprocess  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

DEMO = ROOT / "sample_data" / "brackenfold"
EVERY = "15min"
RATIO_TARGET = 1.6
# windows/s of the local engine on this job before issue 20 (one core, one BLAS
# thread), and the speed-up asked for
REFERENCE_RATE = 34.8
SPEEDUP_TARGET = 3.0
MEMORY_TARGET = 1.3
# the local engine under the default BLAS threads against one thread (issue 20)
BLAS_TARGET = 1.2
DRIFT_TAG, DRIFT_PER_YEAR = "FT-201", 0.015


def _generator():
    spec = importlib.util.spec_from_file_location("brackenfold_generate", DEMO / "generate.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _ar1(rng, n, tau_steps, sigma):
    """AR(1) noise of standard deviation sigma and correlation time tau (in steps)."""
    from scipy.signal import lfilter

    phi = np.exp(-1.0 / max(tau_steps, 1e-9))
    e = rng.standard_normal(n) * sigma * np.sqrt(1.0 - phi**2)
    return lfilter([1.0], [1.0, -phi], e)


def generate(folder: Path, days: int, seed: int = 7) -> list[Path]:
    """``historian.csv`` and ``logger.csv`` of ``days`` days at one sample a minute."""
    gen = _generator()
    balance = gen.solve_heat_balance()
    rng = np.random.default_rng(seed)
    n = days * 1440
    t = pd.date_range(gen.START.normalize(), periods=n, freq="1min")
    minutes = np.arange(n, dtype=float)
    load = 1.0 + 0.04 * np.sin(2 * np.pi * minutes / 1440.0) + _ar1(rng, n, 10, 0.0015)
    frames: dict = {"historian": {}, "logger": {}}
    units: dict = {"historian": {}, "logger": {}}
    for tag, (where, unit, reads, sigma, tau) in gen.INSTRUMENTS.items():
        value = np.full(n, reads(balance), dtype=float)
        if tag in gen._LOAD_TAGS:
            value *= load
        value += _ar1(rng, n, tau / 60.0, sigma)
        if tag == gen.FAULTY_TAG:
            value *= gen.FAULTY_FACTOR
        if tag == DRIFT_TAG:
            value *= 1.0 + DRIFT_PER_YEAR * minutes / (365 * 1440)
        frames[where][tag] = value
        units[where][tag] = unit
    paths = []
    for where, cols in frames.items():
        frame = pd.DataFrame(cols, index=t)
        path = folder / f"{where}.csv"
        with open(path, "w", newline="") as f:
            f.write("Timestamp," + ",".join(frame.columns) + "\n")
            if where == "historian":  # the historian writes a units row, as in the demo
                f.write("units," + ",".join(units[where][c] for c in frame.columns) + "\n")
            frame.to_csv(f, header=False, float_format="%.5f", date_format="%Y-%m-%d %H:%M:%S")
        paths.append(path)
    return paths


def _job(plant_path, files, **kw):
    import perftest

    plant = perftest.load_plant(plant_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return perftest.reconcile_many(
            plant, [str(f) for f in files], every=EVERY, eliminate=True, stability=True,
            progress=False, **kw,
        )  # fmt: skip


def child(args) -> None:
    """One local job in this process; prints seconds, windows and peak memory [MiB]."""
    t = time.perf_counter()
    table = _job(args.plant, args.files)
    seconds = time.perf_counter() - t
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    ok = int((table["status"].isin(["ok", "unstable"])).sum())
    import perftest

    where = str(Path(perftest.__file__).parents[1])
    print(json.dumps({"seconds": seconds, "windows": len(table), "ok": ok, "peak_mib": peak,
                      "tree": where}))  # fmt: skip
    table.to_parquet(args.table)


def _local(plant, files, table_path, source=None, blas=None):
    """One local job in a child process; ``source``: a perftest tree to import instead;
    ``blas``: BLAS thread variables for the child (None: unset, the library default)."""
    cmd = [sys.executable, __file__, "--child", "--plant", str(plant), "--table",
           str(table_path), "--files", *map(str, files)]  # fmt: skip
    env = None
    if source is not None or blas is not None:
        env = dict(os.environ)
    if source is not None:
        env["PYTHONPATH"] = os.pathsep.join([str(source), env.get("PYTHONPATH", "")])
    if blas is not None:
        for key, value in blas.items():
            if value is None:
                env.pop(key, None)
            else:
                env[key] = value
    out = subprocess.run(cmd, capture_output=True, text=True, check=True, env=env)
    return json.loads(out.stdout.strip().splitlines()[-1])


def _spread(values) -> str:
    v = np.asarray(values, dtype=float)
    return f"median {np.median(v):.2f} (min {v.min():.2f}, max {v.max():.2f}, n={v.size})"


def compare(plant, files, tmp: Path, source: Path, repeats: int) -> None:
    """This tree's local engine against the tree ``source``, alternately, same logs."""
    here = ROOT
    rates: dict = {"before": [], "now": []}
    ratios = []
    for k in range(repeats):
        pair = {}
        order = ("before", "now") if k % 2 == 0 else ("now", "before")
        for which in order:
            tree = source if which == "before" else here
            res = _local(plant, files, tmp / f"{which}.parquet", source=tree)
            if Path(res["tree"]) != tree:
                raise SystemExit(f"the {which} job imported perftest from {res['tree']}")
            pair[which] = res["windows"] / res["seconds"]
            rates[which].append(pair[which])
        ratios.append(pair["now"] / pair["before"])
        print(f"  pair {k + 1}: before {pair['before']:.2f}, now {pair['now']:.2f} "
              f"windows/s, ratio {ratios[-1]:.2f}  [{_load()}]")  # fmt: skip
    same = _compare(pd.read_parquet(tmp / "now.parquet"), pd.read_parquet(tmp / "before.parquet"))
    print(f"before ({source}): {_spread(rates['before'])} windows/s")
    print(f"now: {_spread(rates['now'])} windows/s")
    verdict = "PASS" if np.median(ratios) >= SPEEDUP_TARGET else "FAIL"
    print(f"ratio now/before {_spread(ratios)}; tables identical: {same}  "
          f"(target >= {SPEEDUP_TARGET})  {verdict}")  # fmt: skip


def _compare(table: pd.DataFrame, local: pd.DataFrame) -> str:
    """ "True", or which columns differ and by how much (relative, for numbers)."""
    if list(table.columns) != list(local.columns) or len(table) != len(local):
        return "False (columns or rows differ)"
    out = []
    for col in local.columns:
        a, b = local[col], table[col]
        if a.dtype.kind == "f" and b.dtype.kind == "f":
            x, y = a.to_numpy(), b.to_numpy()
            bad = ~((x == y) | (np.isnan(x) & np.isnan(y)))
            if bad.any():
                rel = np.nanmax(np.abs(x[bad] - y[bad]) / np.abs(x[bad]))
                out.append(f"{col}: {int(bad.sum())} rows, max rel. diff {rel:.1e}")
        elif list(a.astype(str)) != list(b.astype(str)):
            n = int((a.astype(str).to_numpy() != b.astype(str).to_numpy()).sum())
            out.append(f"{col}: {n} rows")
    return "True" if not out else "False (" + "; ".join(out) + ")"


def _load() -> str:
    return "load average " + ", ".join(f"{v:.2f}" for v in os.getloadavg())


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--days", type=int, default=365, help="days of logs (default 365)")
    p.add_argument("--workers", type=int, default=2)
    p.add_argument(
        "--compare-with",
        type=Path,
        metavar="DIR",
        help="a perftest source tree (an earlier commit) to time alternately",
    )
    p.add_argument("--repeats", type=int, default=3, help="pairs of runs for --compare-with")
    p.add_argument("--no-dask", action="store_true", help="time the local engine only")
    p.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    p.add_argument("--plant", help=argparse.SUPPRESS)
    p.add_argument("--table", help=argparse.SUPPRESS)
    p.add_argument("--files", nargs="*", help=argparse.SUPPRESS)
    args = p.parse_args()
    if args.child:
        child(args)
        return
    plant = DEMO / "plant.toml"
    tmp = Path(tempfile.mkdtemp(prefix="perftest-year-"))
    try:
        # the short job also warms the Dask workers: at least a day (chunk) each
        short_days = max(args.workers, args.days // 12)
        t = time.perf_counter()
        (tmp / "full").mkdir()
        (tmp / "short").mkdir()
        full = generate(tmp / "full", args.days)
        short = generate(tmp / "short", short_days)
        size = sum(f.stat().st_size for f in full) / 2**20
        print(f"generated {args.days} days of 1-minute logs ({size:.0f} MiB) and "
              f"{short_days} days in {time.perf_counter() - t:.0f} s")  # fmt: skip
        print(_load())

        if args.compare_with is not None:
            compare(plant, full, tmp, args.compare_with.resolve(), args.repeats)
        res_short = _local(plant, short, tmp / "short.parquet")
        res_full = _local(plant, full, tmp / "local.parquet")
        local_rate = res_full["windows"] / res_full["seconds"]
        print(f"local engine: {res_full['windows']} windows ({res_full['ok']} reconciled) in "
              f"{res_full['seconds']:.1f} s = {local_rate:.2f} windows/s  [{_load()}]")  # fmt: skip
        speedup = local_rate / REFERENCE_RATE
        verdict = "PASS" if speedup >= SPEEDUP_TARGET else "FAIL"
        print(f"against the stated reference of {REFERENCE_RATE} windows/s (before issue 20): "
              f"{speedup:.2f}x (target >= {SPEEDUP_TARGET})  {verdict}")  # fmt: skip
        # The short job under the user's BLAS setting (unset: the library's default)
        # and under one thread, alternately, best of each.
        label = ", ".join(f"{k}={v}" for k, v in INHERITED_BLAS.items() if v) or "unset"
        one = {k: "1" for k in _BLAS_KEYS}
        times: dict = {"inherited": [], "one": []}
        for _ in range(args.repeats):
            for which, blas in (("inherited", INHERITED_BLAS), ("one", one)):
                res = _local(plant, short, tmp / f"blas_{which}.parquet", blas=blas)
                times[which].append(res["seconds"])
        ratio = min(times["inherited"]) / min(times["one"])
        verdict = "PASS" if ratio <= BLAS_TARGET else "FAIL"
        print(f"short job under the inherited BLAS setting ({label}) against one thread: "
              f"{min(times['inherited']):.2f} s / {min(times['one']):.2f} s = {ratio:.2f}x "
              f"(target <= {BLAS_TARGET})  {verdict}  [{_load()}]")  # fmt: skip
        if args.no_dask:
            return

        from distributed import Client

        from perftest.scale.many import local_cluster

        with local_cluster(args.workers) as cluster, Client(cluster) as client:
            # warm-up: every worker imports perftest, builds the model, sets up properties
            _job(plant, short, engine="dask", scheduler=client)
            t = time.perf_counter()
            table = _job(plant, full, engine="dask", scheduler=client)
            seconds = time.perf_counter() - t
        dask_rate = len(table) / seconds
        local = pd.read_parquet(tmp / "local.parquet")
        same = _compare(table, local)
        ratio = dask_rate / local_rate
        print(f"dask, {args.workers} warm workers: {len(table)} windows in {seconds:.1f} s = "
              f"{dask_rate:.2f} windows/s; identical to local: {same}  [{_load()}]")  # fmt: skip
        verdict = "PASS" if ratio >= RATIO_TARGET else "FAIL"
        print(f"ratio dask/local {ratio:.2f} (target >= {RATIO_TARGET})  {verdict}")
        mem = res_full["peak_mib"] / res_short["peak_mib"]
        verdict = "PASS" if mem <= MEMORY_TARGET else "FAIL"
        print(f"peak memory, local engine: {short_days} days {res_short['peak_mib']:.0f} MiB, "
              f"{args.days} days {res_full['peak_mib']:.0f} MiB; ratio {mem:.2f} "
              f"(target <= {MEMORY_TARGET})  {verdict}")  # fmt: skip
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
