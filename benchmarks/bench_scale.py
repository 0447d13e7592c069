"""Speed of perftest.reconcile_many: local loop against Dask, on the demo run.

The job: the Brackenfold demo run (four hours of one-minute samples) cut into 16
windows of 15 minutes; each window averaged, reconciled with serial elimination and
evaluated (linear propagation).

Reference, measured in the same run: a plain Python loop written here,
``run.window(a, b).average()`` -> ``perftest.reconcile`` -> ``perftest.evaluate``
per window.  Printed ratios (reference time / engine time, above 1 = faster):

* ``local``: the engine's own loop.  It adds the window bookkeeping and the
  warning capture, and saves the initial guess (each window starts from its
  neighbour's solution) and the per-result budgets and exergy analysis that a
  trend table does not show, so its ratio should be at least 1 (target: at
  least 0.85).
* ``dask, threads``: windows are computed one at a time per process (the CoolProp
  property objects are not thread-safe), so expect about 1: this shows the cost of
  Dask's graph, nothing more.
* ``dask, processes``: Dask's local processes scheduler.
* ``dask, default cluster``: no scheduler given, so the engine starts a
  ``perftest.scale.local_cluster`` for the job and closes it after.  Both this
  time and the one above include starting the worker processes, each of which
  imports perftest, CoolProp and scipy; on a small job that start-up eats the gain.
* ``dask, N warm workers``: a ``perftest.scale.local_cluster`` of worker
  processes started and warmed up before timing, as on a long-lived cluster: this
  is the parallel gain itself, bounded by the number of cores.

No target for the Dask ratios: they depend on the cores that are actually free, so
the script prints the load average beside them (a load above the core count means
the parallel contenders compete with other work and their ratios say little).  Run:
``python benchmarks/bench_scale.py``.
"""

from __future__ import annotations

import os

# One BLAS thread per process: several processes each running a multi-threaded BLAS
# oversubscribe the cores and would time the load, not the engines.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

import perftest  # noqa: E402

DEMO = Path(__file__).resolve().parents[1] / "sample_data" / "brackenfold"
EVERY = "15min"
WINDOWS = 16
LOCAL_TARGET = 0.85  # the engine may cost at most ~15 % over the plain loop


def plain_loop(plant, run, n: int = WINDOWS) -> list:
    """The reference: one window after the other, by hand."""
    rows = []
    start = run.data.index[0].floor(EVERY)
    for k in range(n):
        a = start + k * pd.Timedelta(EVERY)
        b = a + pd.Timedelta(EVERY)
        m = run.window(a, b).average()
        rec = perftest.reconcile(plant, m, eliminate=True)
        perf = perftest.evaluate(plant, rec, monte_carlo=False)
        rows.append((rec.global_test["chi2"], perf.value("first_law_efficiency")))
    return rows


def timed(func, *args, **kwargs):
    t = time.perf_counter()
    out = func(*args, **kwargs)
    return time.perf_counter() - t, out


def main() -> None:
    plant = perftest.load_plant(DEMO / "plant.toml")
    warnings.simplefilter("ignore")  # data-quality notes of the demo are expected
    full = perftest.read_run([DEMO / "historian.csv", DEMO / "logger.csv"], plant)
    t0 = full.data.index[0].floor(EVERY)
    run = full.window(t0, t0 + WINDOWS * pd.Timedelta(EVERY))

    # warm the caches (model build, property objects) so that no contender pays them
    plain_loop(plant, run, 1)

    # chunks of an hour (4 windows): the unit of work of the engines, so that the
    # Dask contenders have four tasks to share out (the default, a day, is one)
    kw = dict(every=EVERY, eliminate=True, chunk="1h")
    # interleaved, best of 3 each: a change of the machine's load then hits both alike
    t_ref = t_local = float("inf")
    for _ in range(3):
        t, ref = timed(plain_loop, plant, run)
        t_ref = min(t_ref, t)
        t, local = timed(perftest.reconcile_many, plant, run, **kw)
        t_local = min(t_local, t)
    assert len(local) == WINDOWS and (local["status"] == "ok").all(), local["reason"]
    # the engine must agree with the loop it is timed against (to round-off: the
    # engine warm-starts each window from its neighbour, see tests/test_scale.py)
    n = len(ref)
    assert np.allclose([c for c, _ in ref], local["chi2"].iloc[:n], rtol=1e-9, atol=0.0)

    print(f"reconcile_many on {WINDOWS} windows of {EVERY} (demo run, {len(run.data)} samples)")
    if hasattr(os, "getloadavg"):
        load = os.getloadavg()[0]
        print(f"  load average {load:.1f} on {os.cpu_count()} cores")
    print(f"  reference: plain loop  {t_ref:7.2f} s   (best of 3)")
    ratio = t_ref / t_local
    verdict = "PASS" if ratio >= LOCAL_TARGET else "FAIL"
    print(f"  local engine           {t_local:7.2f} s   ratio {ratio:5.2f}  "
          f"(target >= {LOCAL_TARGET})  {verdict}")  # fmt: skip

    try:
        import dask
        import distributed

        from perftest.scale.many import local_cluster
    except ImportError:
        print('  dask: not installed (pip install "perftest[scale]"); skipped')
        return

    def dask_line(label, seconds, table):
        same = table.equals(local)
        print(f"  {label:<22} {seconds:7.2f} s   ratio {t_ref / seconds:5.2f}  "
              f"(identical to local: {same})")  # fmt: skip

    seconds, table = timed(
        perftest.reconcile_many, plant, run, engine="dask", scheduler="threads", **kw
    )
    dask_line("dask, threads", seconds, table)
    seconds, table = timed(
        perftest.reconcile_many, plant, run, engine="dask", scheduler="processes", **kw
    )
    dask_line("dask, processes", seconds, table)
    seconds, table = timed(perftest.reconcile_many, plant, run, engine="dask", **kw)
    dask_line("dask, default cluster", seconds, table)

    n = max(1, min(dask.system.CPU_COUNT, WINDOWS))
    with local_cluster(n) as cluster, distributed.Client(cluster) as client:
        # warm-up: the whole job once, so that every worker has imported perftest,
        # built the model and set up its property objects before the timed call
        perftest.reconcile_many(plant, run, engine="dask", scheduler=client, **kw)
        seconds, table = timed(
            perftest.reconcile_many, plant, run, engine="dask", scheduler=client, **kw
        )
    dask_line(f"dask, {n} warm workers", seconds, table)


if __name__ == "__main__":
    # the guard matters: Dask's processes scheduler starts workers that import this file
    main()
